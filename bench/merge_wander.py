"""The fixation merge distance's noise figure: the 33 ms RMS-S2S (as built) or the I-DT threshold's (the larger of
that and the wander over the 60 ms window, below 100 Hz), on the Lund trials at 30 Hz with white and AR(1) noise.

The hand-coded recordings of Andersson et al. (2017) (../shared/reference/lund2013) at 30 Hz plus noise, as in
``bench/idt_wander.py`` (same conditions and seeds). Fixations within 75 ms are merged when their means lie within
``max(merge_distance_deg, merge_noise_factor x noise)``; ``wander`` puts the I-DT's figure
(``detector_thresholds.noise_wander_deg`` where larger) in that ``noise``. Per condition, means over the 8 trials
against both coders: sample kappa and fixations per coder fixation, as built and with the wander.

Run: ``python bench/merge_wander.py [--noise 0.5 1.0 1.5] [--rho 0 0.7 0.8 0.9]``
"""
from __future__ import annotations

import sys
from contextlib import contextmanager
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(REPO / "tests"))

import _lund  # noqa: E402

import aspectus.events.analysis as analysis  # noqa: E402


@contextmanager
def merge_reads_wander(on: bool = True):
    """While the block runs, the merge distance reads ``max(33 ms figure, the I-DT's wander)`` (with ``on``)."""
    orig = analysis.build_events

    def patched(t_s, yaw, pitch, usable, blink, loss, cand, **kw):
        wander = cand.info.get("noise_wander_deg")
        f = kw.get("merge_noise_factor") or 0.0
        if on and f and wander is not None and np.isfinite(wander):
            kw["merge_distance_deg"] = max(float(kw.get("merge_distance_deg", 0.5)), float(f) * float(wander))
        return orig(t_s, yaw, pitch, usable, blink, loss, cand, **kw)

    analysis.build_events = patched
    try:
        yield
    finally:
        analysis.build_events = orig


def measure(trials, noise_rms_deg: float, rho: float, wander: bool) -> dict:
    with merge_reads_wander(wander):
        return _lund.agreement_at_30hz(trials, noise_rms_deg, rho)


def main(argv=None) -> int:
    return _lund.noise_conditions_main(argv, __doc__.splitlines()[0], measure, labels=("as built", "wander"))


if __name__ == "__main__":
    sys.exit(main())
