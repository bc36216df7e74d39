"""Time event detection and features on long sample tables (prints figures; not a test).

Synthetic gaze: fixations of 150-400 ms at random places (+-10 deg), jumps
between them, white noise of 0.5 deg RMS, 2 % of samples missing in short
bursts and a blink every ~4 s. Times are wall-clock seconds of
``run_analysis`` (clean-up, detection, post-processing, labels, features with
10 s windows), best of ``--repeat`` runs.

Run: ``python bench/bench_events.py [--hours 1] [--rate-hz 30] [--detectors idt i2mc ivt]``
"""
from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from aspectus.events.analysis import AnalysisParams, run_analysis  # noqa: E402


def synthetic_samples(*, duration_s: float, rate_hz: float, noise_rms_deg: float = 0.5, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    n = int(duration_s * rate_hz)
    t = np.arange(n) / rate_hz
    n_fix = int(duration_s / 0.25) + 2
    dur = rng.uniform(0.15, 0.40, n_fix)
    onset = np.concatenate([[0.0], np.cumsum(dur)[:-1]])
    k = np.clip(np.searchsorted(onset, t, side="right") - 1, 0, n_fix - 1)
    pos = rng.uniform(-10, 10, (n_fix, 2))
    sd = noise_rms_deg / np.sqrt(2)
    yaw = pos[k, 0] + rng.normal(0, sd, n)
    pitch = pos[k, 1] + rng.normal(0, sd, n)
    valid = np.ones(n, bool)
    starts = rng.choice(n - 3, size=max(1, int(0.02 * n / 2)), replace=False)
    for off in (0, 1):
        valid[np.minimum(starts + off, n - 1)] = False
    blink = np.zeros(n, bool)
    for s in rng.choice(n - 10, size=max(1, int(duration_s / 4)), replace=False):
        blink[s:s + max(1, int(0.15 * rate_hz))] = True
    valid &= ~blink
    return pd.DataFrame({"t_s": t, "valid": valid, "yaw_deg": np.where(valid, yaw, np.nan),
                         "pitch_deg": np.where(valid, pitch, np.nan), "blink": blink})


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--hours", type=float, default=1.0)
    ap.add_argument("--rate-hz", type=float, nargs="*", default=[30.0])
    ap.add_argument("--detectors", nargs="*", default=["idt", "i2mc", "ivt"])
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args(argv)
    print(f"{'detector':<9}{'rate_Hz':>8}{'samples':>10}{'seconds':>9}{'fixations':>11}")
    for rate in args.rate_hz:
        df = synthetic_samples(duration_s=args.hours * 3600.0, rate_hz=rate)
        for det in args.detectors:
            params = AnalysisParams(detector=det)
            best = np.inf
            for _ in range(args.repeat):
                t0 = time.perf_counter()
                res = run_analysis(df, params)
                best = min(best, time.perf_counter() - t0)
            print(f"{det:<9}{rate:>8.0f}{len(df):>10d}{best:>9.3f}{res.quality['fixation_count']:>11d}", flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
