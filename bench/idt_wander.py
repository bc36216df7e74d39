"""The I-DT threshold's noise figure against slow noise: the Lund trials at 30 Hz with white and AR(1) noise.

The hand-coded recordings of Andersson et al. (2017) (../shared/reference/lund2013) downsampled to 30 Hz
(tests/_lund.degrade, noise-free) plus noise on each axis: white, or AR(1) with lag-1 correlation ``rho`` and the
same stationary SD (the same RMS per sample; its sample-to-sample steps are ``sqrt(1 - rho)`` times as long). A
webcam gaze's error is mostly slow (lag-1 autocorrelation 0.6-0.9, docs/notes/gaze-measurement.md). Per noise
level and kind, means over the 8 trials (seed = 1000 + trial index) against both coders: sample kappa, fixations
per coder fixation, the I-DT threshold; with the threshold's noise figure as it is (``after``) and per sample only
(``before``: the wander reading switched off).

Run: ``python bench/idt_wander.py [--noise 0.5 1.0 1.5] [--rho 0 0.7 0.8 0.9]``
"""
from __future__ import annotations

import sys
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(REPO / "tests"))

import _lund  # noqa: E402

import aspectus.events.detect.idt as idt  # noqa: E402


def measure(trials, noise_rms_deg: float, rho: float, wander: bool) -> dict:
    keep = idt.wander_rms_deg
    if not wander:
        idt.wander_rms_deg = lambda *a, **k: float("nan")
    try:
        return _lund.agreement_at_30hz(trials, noise_rms_deg, rho)
    finally:
        idt.wander_rms_deg = keep


def main(argv=None) -> int:
    return _lund.noise_conditions_main(argv, __doc__.splitlines()[0], measure, labels=("before", "after"))


if __name__ == "__main__":
    sys.exit(main())
