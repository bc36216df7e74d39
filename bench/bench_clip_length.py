"""How much the clip's length matters to the gaze at classroom scale: the appearance estimate learns from each clip.

The default iris height (:mod:`aspectus.webcam.iris_appearance`) is a regression learnt on the clip's own eye
patches, so a longer clip gives it more gaze directions and frames to learn from. The gaze grid
(bench/bench_gaze_grid.py) renders 8-s clips; classroom recordings run for minutes. Per draw, one 40-s clip is
rendered as the grid's cells are (H.264 CRF 28; 640x480 for 12 and 8.5 px irises, 1280x720 for 16.6 and 25 px;
lids following, light drift and gradient, head drift and
turns), its eyes following four hand-coded trials end to end (../shared/reference/lund2013: UH21, TL20, TH34,
UL23). The same clip is then cut to its first ``T`` s by copying its packets (no second encode, so the frames are
the same) and processed again, for each ``T`` in ``--lengths``. Printed per draw and length: the grid's figures
(tests/_gaze_grid.measure) over the first 8 s, which all lengths share, and over the whole cut.

    python bench/bench_clip_length.py                          # 12 px hopper, seeds 0-2, lengths 8 20 40
    python bench/bench_clip_length.py --face astronaut --seeds 0 1 --iris 12 8 --lengths 8 40
    python bench/bench_clip_length.py --iris 25 16 --lengths 8 40   # the large-face set-ups

About 1.5 min of CPU per 40-s clip and length.
"""
from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))

import _gaze_grid as G  # noqa: E402

LUND = ROOT.parent / "shared" / "reference" / "lund2013" / "img"
TRIALS = "UH21_img_Rome+TL20_img_konijntjes+TH34_img_Europe+UL23_img_Europe"
#: the grid's picture sizes and distances per iris size (bench_gaze_grid.SIZES; 16: 16.6 px)
SETUPS = {25: ((1280, 720), 530.0), 16: ((1280, 720), 800.0), 12: ((640, 480), 550.0), 8: ((640, 480), 780.0)}
SHOWN = ("rms_s2s_deg", "yaw_r", "pitch_r", "pitch_gain", "kappa")


def run(face: str, iris: int, seed: int, lengths: list[float], work: Path, trials: str = TRIALS) -> list[dict]:
    from aspectus.webcam.pipeline import ProcessParams, extract_samples

    longest = max(lengths)
    size, distance = SETUPS[iris]
    cond = G.Condition(f"{iris}px_{face}_s{seed}", size_px=size, distance_mm=distance, trial=trials,
                       face=face, seed=seed, duration_s=longest)
    res, trial = G.render_condition(cond, work, LUND)
    truth = res.truth
    rows = []
    for T in sorted(lengths):
        clip = res.path if T >= longest else G.first_seconds(res.path, work / f"{cond.name}_first{T:g}.mp4", T)
        samples, meta = extract_samples(clip, params=ProcessParams())
        tr = truth[truth["t_s"] < T].reset_index(drop=True)
        samples = samples.iloc[:len(tr)].reset_index(drop=True)
        first = (tr["t_s"] < 8.0).to_numpy()
        m8 = G.measure(samples[first].reset_index(drop=True), tr[first].reset_index(drop=True), trial)
        mall = G.measure(samples, tr, trial)
        est = meta["gaze_model"].get("iris_estimate") or {}
        rows.append({"draw": cond.name, "iris_px": round(float(truth["iris_diameter_px"].median()), 1),
                     "learnt_s": T, "learnt_from_s": est.get("learnt_from_s"),
                     **{f"first8_{k}": m8[k] for k in SHOWN}, **{f"whole_{k}": mall[k] for k in SHOWN}})
        print(", ".join(f"{k} {v:.3f}" if isinstance(v, float) else f"{k} {v}" for k, v in rows[-1].items()),
              flush=True)
    return rows


def main(argv=None) -> int:
    import pandas as pd

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--face", default="hopper", choices=("hopper", "astronaut"))
    ap.add_argument("--iris", type=int, nargs="+", default=[12], choices=sorted(SETUPS))
    ap.add_argument("--seeds", type=int, nargs="+", default=[0, 1, 2])
    ap.add_argument("--lengths", type=float, nargs="+", default=[8.0, 20.0, 40.0],
                    help="clip lengths in s (8 to 40: the trials give 40 s)")
    ap.add_argument("--trials", default=TRIALS, help="hand-coded trials joined by '+' (four give 40 s)")
    ap.add_argument("--csv", type=Path, help="also write the rows here")
    args = ap.parse_args(argv)
    if not LUND.is_dir():
        print(f"the hand-coded trials are not at {LUND}", file=sys.stderr)
        return 2
    if not all(8.0 <= T <= 40.0 for T in args.lengths):
        print("--lengths: each between 8 and 40 s", file=sys.stderr)
        return 2
    rows = []
    for iris in args.iris:
        for seed in args.seeds:
            with tempfile.TemporaryDirectory(prefix="clip_length_") as d:
                rows += run(args.face, iris, seed, args.lengths, Path(d), args.trials)
    tab = pd.DataFrame(rows)
    print()
    print(tab.round(3).to_string(index=False))
    if args.csv:
        tab.to_csv(args.csv, index=False)
    return 0


if __name__ == "__main__":
    sys.exit(main())
