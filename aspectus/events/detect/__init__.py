"""Fixation detectors and the post-processing they share.

Each detector takes times (s), yaw and pitch (deg) and a usable-sample mask
and returns :class:`~aspectus.events.detect.types.Candidates`; the shared
post-processing (:func:`~aspectus.events.detect.postprocess.build_events`) merges,
drops short fixations, and derives saccades, blinks and data loss.

Registry: :data:`DETECTORS` maps the published names to the functions.
"""
from __future__ import annotations

from aspectus.events.detect.i2mc import detect_i2mc
from aspectus.events.detect.idt import detect_idt
from aspectus.events.detect.ivt import detect_ivt
from aspectus.events.detect.postprocess import LABEL_NAMES, build_events, empty_events
from aspectus.events.detect.types import Candidates, DetectionWarning

#: detector name -> function(t_s, yaw_deg, pitch_deg, usable, **params) -> Candidates
DETECTORS = {
    "i2mc": detect_i2mc,
    "idt": detect_idt,
    "ivt": detect_ivt,
}

#: one-line description per detector, for ``--help`` and the sidecar
DETECTOR_DOCS = {
    "i2mc": "two-means clustering (Hessels et al. 2017)",
    "idt": "dispersion threshold (Salvucci & Goldberg 2000), noise-adaptive",
    "ivt": "velocity threshold, data-driven (Nystrom & Holmqvist 2010 / Engbert & Kliegl 2003)",
}

__all__ = ["DETECTORS", "DETECTOR_DOCS", "Candidates", "DetectionWarning", "LABEL_NAMES", "build_events", "empty_events",
           "detect_i2mc", "detect_idt", "detect_ivt"]
