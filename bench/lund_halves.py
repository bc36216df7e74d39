"""Parameter variants on one half of the Lund trials, plus synthetic scan paths (prints figures).

Parameters are chosen on the selection half of the hand-coded recordings of Andersson et al. (2017) (trials 0,
2, 4, 6 in name order: TH34, UH21, UH47, UL31) and checked on the other half (TL20, UH29, UL23, UL43). Per
variant: at 30 Hz with 0.1 / 0.3 / 0.5 deg noise (tests/_lund.degrade, seed = trial index) and at the native
rate, mean kappa against coder MN / RA, mean fixation duration minus the coders' mean and count error; with
``--synthetic``, the mean duration error and count ratio on the synthetic scan paths of bench/scan_path_rates.py
at 30 Hz (0.1 and 0.5 deg) and 60 Hz (0.3 deg). Figures: docs/notes/lund-30hz-limits.md.

Run: ``python bench/lund_halves.py '[{}, {"MIN": 2}, {"edge_alpha": 0.2}]' selection --synthetic``
(a JSON list of AnalysisParams overrides; ``MIN`` sets postprocess.MIN_FIXATION_SAMPLES).
"""
from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(REPO / "tests"))
sys.path.insert(0, str(REPO / "bench"))

from _lund import CODERS, cohen_kappa, degrade, load_all, runs  # noqa: E402
from _signals import scan_path  # noqa: E402
from scan_path_rates import matched_errors_ms  # noqa: E402

import aspectus.events.detect.postprocess as pp  # noqa: E402
from aspectus.events.analysis import AnalysisParams, run_analysis  # noqa: E402


def lund(trials, params, rate, noise):
    kap = {c: [] for c in CODERS}
    de, ce = [], []
    for k, tr in trials:
        ref = [runs(tr.fixation_mask(c), tr.t_s) for c in CODERS]
        rn, rd = np.mean([r[0] for r in ref]), np.mean([r[1] for r in ref])
        lo = degrade(tr, rate_hz=rate, noise_rms_deg=noise, seed=k) if rate else tr
        res = run_analysis(lo.samples(), params)
        fix = res.labels == "fixation"
        fx = res.events[res.events.type == "fixation"]
        for c in CODERS:
            kap[c].append(cohen_kappa(fix, lo.fixation_mask(c)))
        de.append(fx.duration_ms.mean() - rd)
        ce.append(len(fx) / rn - 1)
    return np.mean(kap["MN"]), np.mean(kap["RA"]), np.mean(de), np.mean(ce)


def synthetic(params, rate, noise):
    e, c = [], []
    for seed in (3, 4, 5):
        df, truth, _ = scan_path(rate_hz=rate, noise_rms_deg=noise, duration_s=60.0, seed=seed)
        fx = run_analysis(df, params).events
        fx = fx[fx.type == "fixation"]
        e.append(matched_errors_ms(fx, truth))
        c.append(len(fx) / len(truth))
    return float(np.concatenate(e).mean()), float(np.mean(c))


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("variants", help="JSON list of parameter overrides")
    ap.add_argument("half", choices=["selection", "check"])
    ap.add_argument("--synthetic", action="store_true")
    ap.add_argument("--trials-dir", default=str(REPO.parent / "shared" / "reference" / "lund2013" / "img"))
    args = ap.parse_args(argv)
    trials = [(k, tr) for k, tr in enumerate(load_all(Path(args.trials_dir)))
              if (k % 2 == 0) == (args.half == "selection")]
    keep = pp.MIN_FIXATION_SAMPLES
    try:
        for cfg in json.loads(args.variants):
            cfg = dict(cfg)
            pp.MIN_FIXATION_SAMPLES = int(cfg.pop("MIN", keep))
            params = AnalysisParams.from_dict({**AnalysisParams().to_dict(), **cfg})
            out = [f"{cfg} MIN_FIXATION_SAMPLES={pp.MIN_FIXATION_SAMPLES} [{args.half}]"]
            for noise in (0.1, 0.3, 0.5):
                km, kr, d, c = lund(trials, params, 30.0, noise)
                out.append(f"30 Hz {noise:.1f} deg: kappa {km:.3f} / {kr:.3f}, duration {d:+.1f} ms, count {c:+.3f}")
            km, kr, d, c = lund(trials, params, None, 0.0)
            out.append(f"native: kappa {km:.3f} / {kr:.3f}, duration {d:+.1f} ms, count {c:+.3f}")
            if args.synthetic:
                for rate, noise in ((30, 0.1), (30, 0.5), (60, 0.3)):
                    d, c = synthetic(params, rate, noise)
                    out.append(f"synthetic {rate} Hz {noise:.1f} deg: duration {d:+.1f} ms, count {c:.3f}")
            print("\n   ".join(out), flush=True)
    finally:
        pp.MIN_FIXATION_SAMPLES = keep
    return 0


if __name__ == "__main__":
    sys.exit(main())
