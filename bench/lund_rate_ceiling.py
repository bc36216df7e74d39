"""What the frame rate buys the fixation labels: the default detector against the Lund coders at 30/60/120 Hz.

The hand-coded recordings of Andersson et al. (2017) (../shared/reference/lund2013, all 8 trials) downsampled to
each rate with white Gaussian noise (tests/_lund.degrade; seed = trial index). The noise is given as the RMS-S2S
it leaves on a fixation (per axis SD ``s2s / 2``), so a row holds the per-sample precision fixed and asks what
twice or four times the samples give. Sample kappa (Cohen 1960), fixation vs not, mean over the trials, against
each coder (MN / RA); ``0`` is the noise-free truth at that rate (the ceiling the rate itself sets).

Run: ``python bench/lund_rate_ceiling.py [--rates 30 60 120] [--s2s 0 0.5 0.7 1 1.5 2 3]``
"""
from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(REPO / "tests"))

from _lund import CODERS, FIXATION, cohen_kappa, degrade, load_all  # noqa: E402

from aspectus.events.analysis import run_analysis  # noqa: E402


def kappas(trials, rate_hz: float, s2s_deg: float) -> dict:
    """Mean kappa over ``trials`` against each coder at this rate and noise (RMS-S2S, deg)."""
    out = {c: [] for c in CODERS}
    for k, tr in enumerate(trials):
        # degrade's noise_rms_deg is the RMS length of the 2-D noise vector; its S2S RMS is sqrt(2) times that
        lo = degrade(tr, rate_hz=rate_hz, noise_rms_deg=s2s_deg / np.sqrt(2.0), seed=k)
        fix = np.asarray(run_analysis(lo.samples()).labels == "fixation")
        for c in CODERS:
            out[c].append(cohen_kappa(fix, lo.labels[c] == FIXATION))
    return {c: float(np.mean(v)) for c, v in out.items()}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--trials-dir", default=str(REPO.parent / "shared" / "reference" / "lund2013" / "img"))
    ap.add_argument("--rates", nargs="*", type=float, default=[30.0, 60.0, 120.0])
    ap.add_argument("--s2s", nargs="*", type=float, default=[0.0, 0.5, 0.7, 1.0, 1.5, 2.0, 3.0],
                    help="noise levels as RMS-S2S in deg (0: the truth)")
    args = ap.parse_args(argv)
    trials = load_all(Path(args.trials_dir))
    print(f"{len(trials)} trials; kappa MN / RA (mean) by RMS-S2S noise")
    print(f"{'rate':>6s} " + " ".join(f"{s:>17g}" for s in args.s2s))
    for rate in args.rates:
        cells = []
        for s in args.s2s:
            k = kappas(trials, rate, s)
            cells.append(f"{k['MN']:.2f}/{k['RA']:.2f} ({np.mean(list(k.values())):.2f})")
        print(f"{rate:5g}Hz " + " ".join(f"{c:>17s}" for c in cells), flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
