"""What the clip's own noise figure leaves out: the error inside the coders' fixations that the detector cut out.

The clip's precision figure (``noise_rms_s2s_33ms_deg``) is the RMS-S2S of the gaze over steps inside the
fixations the detector found. Per rendered cell of the gaze grid (tests/_gaze_grid.py; same cells, seeds and
settings as bench/bench_gaze_grid.py), this prints that figure beside the true error's RMS-S2S over the steps
inside the fixations both hand-coders agree on, split into the steps that stay inside one of the detector's
fixations and those the detector left out (the two frames in different fixations, or one of them not in a
fixation): how many, and the error's RMS-S2S on each part.

    python bench/noise_figure_gap.py --seed 2 --only 25px_crf28 8px_crf28
"""
from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))
sys.path.insert(0, str(ROOT / "bench"))

import _gaze_grid as G  # noqa: E402
from bench_gaze_grid import LUND, cells_or_exit_code  # noqa: E402


def fixation_ids(events: pd.DataFrame, t_s: np.ndarray) -> np.ndarray:
    """Per sample the index of the detector's fixation whose span holds its time, -1 outside fixations (two
    fixations may abut, with a saccade of no sample between them, so the per-sample labels do not separate them)."""
    t_s = np.asarray(t_s, float)
    out = np.full(len(t_s), -1)
    fix = events[events["type"] == "fixation"]
    for k, (on, off) in enumerate(zip(fix["onset_s"].to_numpy(float), fix["offset_s"].to_numpy(float))):
        out[(t_s > on) & (t_s < off)] = k
    return out


def gap(samples: pd.DataFrame, truth: pd.DataFrame, trial) -> dict:
    from aspectus.events.analysis import run_analysis

    res = run_analysis(samples)
    ok = samples["valid"].to_numpy(bool)
    ey = samples["yaw_deg"].to_numpy() - truth["yaw_deg"].to_numpy()
    ep = samples["pitch_deg"].to_numpy() - truth["pitch_deg"].to_numpy()
    fid = fixation_ids(res.events, samples["t_s"].to_numpy(float))
    inside = (fid[1:] >= 0) & (fid[1:] == fid[:-1]) & ok[1:] & ok[:-1]
    t_s = truth["t_s"].to_numpy()
    coders = G._labels_at(trial, t_s)
    both = ok & np.logical_and.reduce([np.asarray(m, bool) for m in coders.values()])
    coder_step = both[1:] & both[:-1] & ~G._fixation_breaks(trial, t_s)
    d2 = np.diff(ey) ** 2 + np.diff(ep) ** 2

    def rms(m):
        return float(np.sqrt(d2[m].mean())) if m.any() else float("nan")

    kept, cut = coder_step & inside, coder_step & ~inside
    return {"noise_33ms_deg": float(res.quality["noise_rms_s2s_33ms_deg"]), "coder_steps": int(coder_step.sum()),
            "error_coder_fix_deg": rms(coder_step), "cut_steps": int(cut.sum()), "error_kept_deg": rms(kept),
            "error_cut_deg": rms(cut)}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--seed", type=int, default=0, help="seed of the head motion, noise and lighting (default 0)")
    ap.add_argument("--only", nargs="+", metavar="CELL", help="these cells of the grid (bench/bench_gaze_grid.py)")
    ap.add_argument("--csv", help="write the rows to this CSV file as well")
    args = ap.parse_args(argv)
    cells = cells_or_exit_code(args.seed, args.only)
    if isinstance(cells, int):
        return cells
    import _lund

    rows = []
    print(f"{'cell':24s} seed  own noise  error in coders' fixations  kept steps  cut steps (n of N)  cut error",
          flush=True)
    for cond in cells:
        with tempfile.TemporaryDirectory(prefix="noise_gap_") as tmp:
            row = G.run_condition(cond, Path(tmp), LUND, variants={"default": {}}, keep_samples=True)[0]
            truth = pd.read_csv(Path(tmp) / f"{cond.name}_truth.csv")
        g = gap(row["samples"], truth, _lund.load_trials(LUND, cond.trial))
        rows.append({"cell": cond.name, "seed": cond.seed} | g)
        print(f"{cond.name:24s} {cond.seed:4d}  {g['noise_33ms_deg']:9.2f}  {g['error_coder_fix_deg']:26.2f}  "
              f"{g['error_kept_deg']:10.2f}  {g['cut_steps']:9d} of {g['coder_steps']:<6d}  {g['error_cut_deg']:9.2f}",
              flush=True)
    if args.csv:
        pd.DataFrame(rows).to_csv(args.csv, index=False)
    return 0


if __name__ == "__main__":
    sys.exit(main())
