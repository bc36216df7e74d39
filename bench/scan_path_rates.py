"""Fixation durations and counts against known truth at 30-1000 Hz (prints figures; the test is tests/test_detect_rates.py).

Synthetic scan paths (tests/_signals.scan_path): fixations of 150-600 ms, saccades of 5-15 deg with the
main-sequence duration 2.2 ms/deg x A + 21 ms (Carpenter 1988 - from memory) and a minimum-jerk profile, white
noise of the given RMS; the same eye movements sampled at every rate. Per rate and noise: mean over the true
fixations (the first and last left out) of detected minus true duration, for the detected fixation overlapping
each most, and the detected count over the true count; three 60-s paths (seeds 3, 4, 5).

Run: ``python bench/scan_path_rates.py [--detectors idt i2mc ivt] [--param name=value ...]``
"""
from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(REPO / "tests"))

from _signals import scan_path  # noqa: E402

from aspectus.events.analysis import AnalysisParams, run_analysis  # noqa: E402

RATES = (30, 60, 120, 250, 500, 1000)


def matched_errors_ms(fx, truth) -> np.ndarray:
    on, off = fx["onset_s"].to_numpy(), fx["offset_s"].to_numpy()
    d = []
    for r in truth.iloc[1:-1].itertuples():
        ov = np.minimum(off, r.offset_s) - np.maximum(on, r.onset_s)
        k = int(np.argmax(ov)) if len(ov) else 0
        if len(ov) and ov[k] > 0:
            d.append((off[k] - on[k]) - (r.offset_s - r.onset_s))
    return np.asarray(d) * 1000.0


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--detectors", nargs="*", default=["idt"])
    ap.add_argument("--noise", nargs="*", type=float, default=[0.1, 0.3, 0.5])
    ap.add_argument("--param", action="append", default=[], help="name=value, applied to every detector")
    args = ap.parse_args(argv)
    extra = {}
    for p in args.param:
        k, v = p.split("=", 1)
        extra[k] = eval(v, {}, {})  # bench-only convenience: numbers, booleans, None
    print(f"{'detector':<9}{'noise_deg':>10}" + "".join(f"{r:>10d}Hz" for r in RATES))
    for det in args.detectors:
        params = AnalysisParams.from_dict({**AnalysisParams().to_dict(), **extra, "detector": det})
        for noise in args.noise:
            errs, counts = [], []
            for rate in RATES:
                e, c = [], []
                for seed in (3, 4, 5):
                    df, truth, _ = scan_path(rate_hz=rate, noise_rms_deg=noise, duration_s=60.0, seed=seed)
                    res = run_analysis(df, params)
                    fx = res.events[res.events.type == "fixation"]
                    e.append(matched_errors_ms(fx, truth))
                    c.append(len(fx) / len(truth))
                errs.append(float(np.concatenate(e).mean()))
                counts.append(float(np.mean(c)))
            print(f"{det:<9}{noise:>10.1f}" + "".join(f"{x:>+10.1f}ms" for x in errs), flush=True)
            print(f"{'':<9}{'count':>10}" + "".join(f"{x:>12.3f}" for x in counts), flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
