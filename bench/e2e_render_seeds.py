"""Issue 4's end-to-end clip drawn anew: per-window fixation-count r for several render seeds, one option off/on.

The clip of ``tests/validation/test_validate_e2e.py`` (960 x 540, 30 fps, the rendered eyes following four trials of
Andersson et al. (2017), ../shared/reference/lund2013, and those recordings as the BIDS reference starting 1.5 s
before the clip) is rendered with each ``--seeds`` value instead of the test's 1 (in a fresh interpreter, as the
test renders it), then processed and validated exactly as the test does (its own helpers), once with the default
``GazeParams`` and once with ``--option`` set to true, both from the same rendered file. Prints one line per seed
and mode (per-window fixation-count r, ICC, bias, sample kappa and F1 against the lab events, offset, fixations,
the pipeline's noise figure, process time) and the means, the paired difference and the draws below 0.8.

    PYTHONPATH=$PWD python bench/e2e_render_seeds.py --seeds 14-21 --work /tmp/e2e_seeds
"""
from __future__ import annotations

import argparse
import json
import sys
import time
from dataclasses import replace
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path[:0] = [str(ROOT / "tests" / "validation"), str(ROOT / "tests")]

import test_validate_e2e as E2E  # noqa: E402
from _bench_args import gaze_overrides_or_exit_code  # noqa: E402

from aspectus.webcam.gaze import GazeParams  # noqa: E402
from aspectus.webcam.pipeline import ProcessParams  # noqa: E402

LUND = ROOT.parent / "shared" / "reference" / "lund2013" / "img"


def _seeds(text: str) -> list[int]:
    out: list[int] = []
    for part in text.split(","):
        a, _, b = part.partition("-")
        out += list(range(int(a), int(b) + 1)) if b else [int(a)]
    return out


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--seeds", required=True, help="render seeds, e.g. 14-21 or 2,3,5")
    ap.add_argument("--option", default="side_arcs", help="GazeParams field set true in the 'on' run, or "
                    "FIELD=VALUE (e.g. iris_combine=limbus)")
    ap.add_argument("--work", type=Path, required=True, help="folder for the clips and outputs (kept)")
    ap.add_argument("--json", type=Path, help="append one JSON line per seed and mode here")
    a = ap.parse_args()
    a.work.mkdir(parents=True, exist_ok=True)
    physio = E2E.write_reference(LUND, a.work)
    over = gaze_overrides_or_exit_code([a.option if "=" in a.option else f"{a.option}=true"])
    if isinstance(over, int):
        return over
    modes = {"off": None, "on": ProcessParams(gaze=replace(GazeParams(), **over))}
    r_of: dict[str, list[float]] = {m: [] for m in modes}
    for seed in _seeds(a.seeds):
        d = a.work / f"seed{seed}"
        d.mkdir(exist_ok=True)
        clip = d / "p01_s01_lund.mp4"
        if not clip.exists():
            E2E._render_in_fresh_interpreter(LUND, clip, seed)
        for mode, params in modes.items():
            t0 = time.process_time()
            proc, al, fc, r, _ = E2E.process_and_validate(clip, d / mode, physio, params)
            cpu = time.process_time() - t0
            row = {"seed": seed, "mode": mode, "option": a.option, "n": int(fc["n"]), "r": float(fc["pearson_r"]),
                   "icc": float(fc["icc"]), "bias": float(fc["ba_bias"]), "kappa": float(r.events["kappa"]),
                   "f1": float(r.events["f1"]), "offset_s": float(al["offset_s"]),
                   "fixations": proc.summary.get("fixation_count"),
                   "noise_deg": proc.summary.get("noise_rms_s2s_deg"),
                   "valid_frac": proc.summary.get("valid_frac"), "cpu_s": cpu}
            r_of[mode].append(row["r"])
            print(f"seed {seed:3d} {mode:3s} n={row['n']} r={row['r']:.3f} icc={row['icc']:.3f} "
                  f"bias={row['bias']:.2f} kappa={row['kappa']:.3f} F1={row['f1']:.3f} "
                  f"offset={row['offset_s']:.4f} fix={row['fixations']} noise={row['noise_deg']:.3f} "
                  f"cpu={cpu:.0f}s", flush=True)
            if a.json:
                with a.json.open("a") as f:
                    f.write(json.dumps(row) + "\n")
    off, on = np.array(r_of["off"]), np.array(r_of["on"])
    diff = on - off
    se = diff.std(ddof=1) / np.sqrt(len(diff)) if len(diff) > 1 else float("nan")
    print(f"{len(off)} draws: mean r off {off.mean():.3f} on {on.mean():.3f}; paired difference {diff.mean():+.3f} "
          f"(SE {se:.3f}); higher with the option on {int((diff > 0).sum())}; below 0.8: off {int((off < 0.8).sum())}, "
          f"on {int((on < 0.8).sum())}; SD across draws off {off.std(ddof=1) if len(off) > 1 else float('nan'):.3f}, "
          f"on {on.std(ddof=1) if len(on) > 1 else float('nan'):.3f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
