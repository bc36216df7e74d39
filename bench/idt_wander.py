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

import argparse
import sys
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(REPO / "tests"))

import _lund  # noqa: E402
from _lund import load_all  # noqa: E402

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
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--trials-dir", type=Path, default=REPO.parent / "shared" / "reference" / "lund2013" / "img")
    ap.add_argument("--noise", type=float, nargs="+", default=[0.5, 1.0, 1.5], help="noise RMS per sample, deg")
    ap.add_argument("--rho", type=float, nargs="+", default=[0.0, 0.7, 0.8, 0.9])
    a = ap.parse_args(argv)
    trials = load_all(a.trials_dir)
    print("| noise RMS deg | rho | kappa before -> after | fixations / coders' before -> after | threshold deg |")
    print("|---|---|---|---|---|")
    for lev in a.noise:
        for rho in a.rho:
            b = measure(trials, lev, rho, False)
            f = measure(trials, lev, rho, True)
            print(f"| {lev:g} | {rho:g} | {b['kappa']:.3f} -> {f['kappa']:.3f} | {b['count_ratio']:.2f} -> "
                  f"{f['count_ratio']:.2f} | {b['threshold_deg']:.2f} -> {f['threshold_deg']:.2f} |", flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
