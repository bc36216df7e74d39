"""Samples -> events -> features: clean-up, fixation detectors, post-processing, features, segments.

:func:`run_analysis` runs the whole chain on a samples table (webcam or
reference alike); :func:`analyse_table` does it for a gaze table on disk.
"""
from aspectus._lazy import attach as _attach

__getattr__, __dir__, __all__ = _attach(__name__, {
    "run_analysis": "aspectus.events.analysis",
    "AnalysisParams": "aspectus.events.analysis",
    "AnalysisResult": "aspectus.events.analysis",
    "analyse_table": "aspectus.events.analysis",
    "write_analysis": "aspectus.events.analysis",
    "clean_samples": "aspectus.events.cleanup",
    "compute_features": "aspectus.events.features",
    "DETECTORS": "aspectus.events.detect",
    "build_events": "aspectus.events.detect",
    "read_segments": "aspectus.events.segments",
    "fixed_windows": "aspectus.events.segments",
})
