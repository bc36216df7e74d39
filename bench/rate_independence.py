"""Do the same eyes give the same fixations at 30, 60 and 120 Hz? The default detector on two materials.

1. The hand-coded recordings of Andersson et al. (2017) (../shared/reference/lund2013, all 8 trials), downsampled to
   each rate (tests/_lund.degrade: the sample nearest each tick) with, on top of the recorded gaze:
   ``none``; ``white``: independent Gaussian noise of per-axis SD 0.5 deg drawn afresh at each sample (an RMS-S2S
   of 1 deg at any rate); ``drift``: an error that changes over tens of milliseconds - an Ornstein-Uhlenbeck
   process (autocovariance s^2 exp(-|d| / tau); Uhlenbeck & Ornstein 1930) of per-axis SD ``--drift-sd`` and time
   constant ``--tau-ms``, drawn once at the recording's own rate so that every rate samples the same error - plus
   white noise of per-axis SD ``--white-sd``. Figures per rate: fixations found over the coders' count (the mean
   of the two coders' fixation runs at 500 Hz), mean fixation duration (ms; the coders': 260 ms), and sample kappa
   (Cohen 1960, fixation vs not) against each coder's labels at the kept samples, mean of the two; all summed or
   averaged over the trials and ``--seeds`` noise draws.
2. The simulated path of tests/webcam/test_precision_tier.py (tests/_signals.same_eyes: 300 fixations of 400 ms joined by
   10-20 deg jumps, an Ornstein-Uhlenbeck error of per-axis SD 1.2 deg and tau 50 ms drawn on a 120 Hz grid, and
   white noise of 0.4 deg drawn per sample; ``--sim-seeds``): fixation count and mean duration per rate.

Run: ``python bench/rate_independence.py [--rates 30 60 120] [--seeds 0 1] [--drift-sd 0.5 1.0] [--tau-ms 50]``
"""
from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(REPO / "tests"))

from _lund import CODERS, FIXATION, cohen_kappa, degrade, load_all, runs, with_drift  # noqa: E402

from aspectus.events.analysis import run_analysis  # noqa: E402


def lund_row(trials, rate_hz: float, kind: str, seeds, *, drift_sd: float, tau_s: float, white_sd: float,
             params=None) -> dict:
    """Count ratio, mean duration and kappa of the default detector over the trials and seeds at one rate."""
    n_found = n_coded = 0
    durs, kap = [], []
    for s in seeds:
        for k, tr in enumerate(trials):
            if kind == "drift":
                src, wsd = with_drift(tr, drift_sd, tau_s, seed=1000 * s + k), white_sd
            else:
                src, wsd = tr, (0.5 if kind == "white" else 0.0)
            # degrade's noise_rms_deg is the RMS length of the 2-D vector: per-axis SD times sqrt(2)
            lo = degrade(src, rate_hz=rate_hz, noise_rms_deg=wsd * np.sqrt(2.0), seed=7919 * s + k + 1)
            res = run_analysis(lo.samples(), params)
            fx = res.events[res.events["type"] == "fixation"]
            n_found += len(fx)
            durs.append(fx["duration_ms"].to_numpy())
            n_coded += np.mean([runs(tr.fixation_mask(c), tr.t_s)[0] for c in CODERS])
            fix = np.asarray(res.labels == "fixation")
            kap.append(np.mean([cohen_kappa(fix, lo.labels[c] == FIXATION) for c in CODERS]))
    return {"count_ratio": n_found / n_coded, "n": n_found, "dur_ms": float(np.concatenate(durs).mean()),
            "kappa": float(np.mean(kap))}


def sim_row(rate_hz: int, seeds, params=None) -> dict:
    from _signals import same_eyes

    n, durs = 0, []
    for s in seeds:
        res = run_analysis(same_eyes(rate_hz, seed=s), params)
        fx = res.events[res.events["type"] == "fixation"]
        n += len(fx)
        durs.append(fx["duration_ms"].to_numpy())
    return {"count_ratio": n / (300.0 * len(seeds)), "n": n, "dur_ms": float(np.concatenate(durs).mean())}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--trials-dir", default=str(REPO.parent / "shared" / "reference" / "lund2013" / "img"))
    ap.add_argument("--rates", nargs="*", type=float, default=[30.0, 60.0, 120.0])
    ap.add_argument("--seeds", nargs="*", type=int, default=[0, 1])
    ap.add_argument("--sim-seeds", nargs="*", type=int, default=[0, 1, 2, 3])
    ap.add_argument("--drift-sd", nargs="*", type=float, default=[0.5, 1.0], help="per-axis SD of the drift, deg")
    ap.add_argument("--tau-ms", type=float, default=50.0)
    ap.add_argument("--white-sd", type=float, default=0.2, help="per-axis SD of the white noise with the drift")
    ap.add_argument("--no-lund", action="store_true")
    args = ap.parse_args(argv)
    t0 = time.process_time()
    print("simulated path (tests/_signals.same_eyes), 300 fixations of 400 ms per seed")
    for rate in args.rates:
        r = sim_row(int(rate), args.sim_seeds)
        print(f"  {rate:5g} Hz  fixations / truth {r['count_ratio']:.2f} ({r['n']})  mean {r['dur_ms']:.0f} ms",
              flush=True)
    if not args.no_lund:
        trials = load_all(Path(args.trials_dir))
        kinds = [("none", 0.0), ("white", 0.0)] + [("drift", sd) for sd in args.drift_sd]
        print(f"Lund 2013, {len(trials)} trials x seeds {args.seeds}: fixations / coders' count, mean duration, "
              "kappa (mean of MN and RA)")
        for kind, sd in kinds:
            label = (f"drift {sd:g} deg tau {args.tau_ms:g} ms + white {args.white_sd:g}" if kind == "drift"
                     else {"none": "recorded gaze", "white": "white 0.5 deg per axis"}[kind])
            for rate in args.rates:
                r = lund_row(trials, rate, kind, args.seeds if kind != "none" else [0], drift_sd=sd,
                             tau_s=args.tau_ms / 1000.0, white_sd=args.white_sd)
                print(f"  {label:38s} {rate:5g} Hz  {r['count_ratio']:.2f} ({r['n']})  {r['dur_ms']:4.0f} ms  "
                      f"kappa {r['kappa']:.3f}", flush=True)
    print(f"cpu {time.process_time() - t0:.0f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
