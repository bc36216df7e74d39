"""Gaze precision over classroom conditions: prints the grid as a table (figures measured in this run).

Each cell renders a clip (aspectus.synth.render) whose eyes follow the first seconds of a hand-coded
recording of Andersson et al. (2017) (../shared/reference/lund2013), runs the webcam pipeline on it and
compares with the truth and with the two coders' labels; see tests/_gaze_grid.py for the figures' definitions.
Every cell has lids that follow vertical gaze, a slow lighting drift (+-15 %) with a lateral gradient (0.3)
and slow head drift with rotation (yaw +-10, pitch +-4, roll +-2 deg; 15 / 10 / 25 mm) unless its label says
otherwise. One face-mesh run per cell: the 13 cells took about 3 minutes on two cores (2026-12-04; more when the
machine is busy); the grid has 15 since (the 16.6 and 12 px cells also at 60 fps, each twice a 30 fps cell's
face-mesh time), and 19 with the 16.6 and 12 px cells with light irises and with a 33 ms exposure (each exposed
clip takes longer to render: sub-frames on moving frames), 21 with the same two cells with hazel irises, and 24
with the 25, 16.6 and 12 px CRF 28 cells again with the screen's reflection on the corneas.

Rows per cell: ``default`` (the pipeline's own run with the default settings; its ``iris_estimate`` column says
which iris estimate ``iris_combine=auto`` took, run.json's ``gaze_model.iris_estimate.used``, and its
``eye_anchor_set`` column which skin points ``eye_anchor_set=auto`` placed the head by), then ``limbus``
(the default before ``auto``) and ``fuse`` re-estimated on the same per-frame measurements. ``iris_px`` is the
rendered truth's median iris diameter, ``iris_px_measured`` the pipeline's (what ``auto`` decides on: the
limbus fit's median over open-eye frames, the face mesh's with fewer than 30 fits) and ``iris_px_mesh`` the face
mesh's median (what ``auto`` decided on until 2026-12-05).

    python bench/bench_gaze_grid.py                 # the whole grid
    python bench/bench_gaze_grid.py --quick         # four cells
    python bench/bench_gaze_grid.py --fps 60        # the same four cells rendered at 60 fps
    python bench/bench_gaze_grid.py --reflection    # the 25, 16.6 and 12 px CRF 28 cells without and with a
                                                    # corneal reflection of the screen (same trajectories and seeds)
    python bench/bench_gaze_grid.py --lost-frames 0.1 --lost-as repeated   # the four face sizes (CRF 28) with
                                                    # 10 % of frames missed: stored again, or left out (dropped)
    python bench/bench_gaze_grid.py --quick --codec mjpeg   # the four cells in Motion JPEG instead of H.264
    python bench/bench_gaze_grid.py --csv grid.csv  # also write the rows
    python bench/bench_gaze_grid.py --only 16px_crf28 16px_crf28_light_iris   # these cells only
    python bench/bench_gaze_grid.py --appearance    # also --gaze iris_combine=appearance (a second run per cell)
    python bench/bench_gaze_grid.py --quick --gaze head_rotation=skin   # every row with these gaze settings
    python bench/bench_gaze_grid.py --iris-sampling area    # the iris drawn by pixel area (point: at pixel centres)
"""
from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))

import _gaze_grid as G  # noqa: E402
from _bench_args import gaze_overrides_or_exit_code, only_named  # noqa: E402

LUND = ROOT.parent / "shared" / "reference" / "lund2013" / "img"

SIZES = {"25px": ((1280, 720), 530.0), "16px": ((1280, 720), 800.0), "12px": ((640, 480), 550.0),
         "8px": ((640, 480), 780.0)}


def grid(quick: bool, seed: int, fps: float | None = None, reflection: bool = False) -> list[G.Condition]:
    trials = ["TL20_img_konijntjes", "TH34_img_Europe", "UH21_img_Rome", "UL23_img_Europe"]
    out = []
    for i, (name, (size, dist)) in enumerate(SIZES.items()):
        out.append(G.Condition(f"{name}_crf28", size_px=size, distance_mm=dist, trial=trials[i % 4],
                               face=("hopper", "astronaut")[i % 2], seed=seed))
    if fps is not None:  # the four face sizes at this frame rate only (same trajectories and seeds)
        return [G.Condition(**{**c.__dict__, "name": f"{c.name}_{fps:g}fps", "fps": fps}) for c in out]
    if reflection:  # each cell without and with the screen's reflection on the corneas
        return [G.Condition(**{**c.__dict__, "name": f"{c.name}_reflection" if r else c.name, "corneal_reflection": r})
                for c in out[:3] for r in (False, True)]
    if quick:
        return out
    for crf in (23, 33):
        out.append(G.Condition(f"12px_crf{crf}", size_px=(640, 480), distance_mm=550.0, crf=crf, trial=trials[2],
                               seed=seed))
    out.append(G.Condition("12px_mp4v", size_px=(640, 480), distance_mm=550.0, codec="mpeg4", trial=trials[2],
                           seed=seed))
    out.append(G.Condition("16px_still_lids", size_px=(1280, 720), distance_mm=800.0, lid_follow=0.0,
                           trial=trials[1], seed=seed))
    out.append(G.Condition("16px_glasses_mirror", size_px=(1280, 720), distance_mm=800.0, glasses=True,
                           mirror=True, face="astronaut", trial=trials[3], seed=seed))
    for c in out[1:3]:  # what a 60 fps webcam buys at 16.6 and 12 px (same trajectories and seeds)
        out.append(G.Condition(**{**c.__dict__, "name": f"{c.name}_60fps", "fps": 60.0}))
    for tr in trials[:3]:  # issue 15's second finding: large faces, head drift without turning
        out.append(G.Condition(f"25px_drift_{tr.split('_')[0]}", size_px=(1280, 720), distance_mm=530.0,
                               codec="mpeg4", head_motion=dict(G.HEAD_DRIFT_ONLY), lighting_drift=0.0,
                               lighting_gradient=0.0, trial=tr, seed=seed))
    for c in out[:3]:  # the screen mirrored by the corneas (aspectus.synth.frame.CornealReflection)
        out.append(G.Condition(**{**c.__dict__, "name": f"{c.name}_reflection", "corneal_reflection": True}))
    out.append(G.Condition("12px_crf28_other_seed", size_px=(640, 480), distance_mm=550.0, trial=trials[0],
                           face="astronaut", seed=seed + 1))
    for c in out[1:3]:  # light and hazel irises (low / middling limbus contrast) and a 33 ms exposure (smeared saccades and blinks)
        out.append(G.Condition(**{**c.__dict__, "name": f"{c.name}_light_iris", "iris_colour": "light_blue_grey"}))
        out.append(G.Condition(**{**c.__dict__, "name": f"{c.name}_hazel_iris", "iris_colour": "hazel"}))
        out.append(G.Condition(**{**c.__dict__, "name": f"{c.name}_exp33ms", "exposure_ms": 33.0}))
    return out


def cells_or_exit_code(seed: int, only: list[str] | None) -> list[G.Condition] | int:
    """The grid's cells for ``seed`` (those named in ``only``; all without), or 2 after one line on stderr when the
    hand-coded recordings are missing or a name is unknown (for the benches that measure on the grid's cells)."""
    if not LUND.is_dir():
        print(f"the hand-coded recordings are not at {LUND}", file=sys.stderr)
        return 2
    return only_named(grid(False, seed), only, "cell")


COLUMNS = [("variant", "{:7s}"), ("iris_px", "{:5.1f}"), ("iris_px_measured", "{:5.1f}"), ("iris_px_mesh", "{:5.1f}"),
           ("rms_s2s_deg", "{:5.2f}"), ("rms_fix_deg", "{:5.2f}"), ("rms_s2s_fix_deg", "{:5.2f}"),
           ("noise_rms_s2s_deg", "{:5.2f}"), ("noise_rms_s2s_33ms_deg", "{:5.2f}"), ("noise_sd_deg", "{:5.2f}"),
           ("valid_frac", "{:5.3f}"), ("valid_far_frac", "{:5.3f}"),
           ("yaw_r", "{:5.3f}"), ("yaw_gain", "{:5.2f}"), ("pitch_r", "{:6.3f}"), ("pitch_gain", "{:5.2f}"),
           ("kappa", "{:6.3f}"), ("kappa_truth", "{:5.3f}"), ("iris_estimate", "{!s:10s}"),
           ("eye_anchor_set", "{!s:16s}")]


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--quick", action="store_true", help="four cells, one per face size")
    ap.add_argument("--fps", type=float, help="render the four face sizes (CRF 28) at this frame rate instead of "
                    "the grid (the same trajectories and seeds as the 30 fps cells)")
    ap.add_argument("--only", nargs="+", metavar="CELL",
                    help="run only these cells of the grid (names as printed in the timing lines, e.g. 16px_crf28 "
                         "16px_crf28_light_iris)")
    ap.add_argument("--reflection", action="store_true",
                    help="the 25, 16.6 and 12 px CRF 28 cells each without and with a corneal reflection of the "
                         "screen (the same trajectories and seeds)")
    ap.add_argument("--variants", choices=("all", "default"), default="all",
                    help="'default': only the pipeline's own run per cell (no re-estimated rows)")
    ap.add_argument("--lost-frames", type=float, default=0.0, metavar="SHARE",
                    help="the four face sizes only, with this share of frames missed by the camera (e.g. 0.1; "
                         "the same trajectories and seeds as the grid's cells)")
    ap.add_argument("--lost-as", choices=("dropped", "repeated"), default="dropped",
                    help="a missed frame is left out of the clip (its timestamps keep the gap; default) or its "
                         "picture is the frame before's again (a constant-frame-rate recorder)")
    ap.add_argument("--codec", choices=("libx264", "mpeg4", "mjpeg"),
                    help="render every cell with this codec instead of its own (mjpeg: Motion JPEG at a fixed "
                         "quantiser, each frame a JPEG of its own)")
    ap.add_argument("--seed", type=int, default=0, help="seed of the head motion, noise and lighting (default 0)")
    ap.add_argument("--csv", help="write the rows to this CSV file as well")
    ap.add_argument("--keep", help="keep the rendered clips in this folder")
    ap.add_argument("--appearance", action="store_true",
                    help="also the setting iris_combine=appearance (a second pipeline run per cell: its patches are "
                         "read in the per-frame geometry)")
    ap.add_argument("--gaze", action="append", default=[], metavar="NAME=VALUE",
                    help="a gaze setting (aspectus.webcam.gaze.GazeParams) for every row, e.g. head_rotation=skin; "
                         "may be given more than once")
    ap.add_argument("--iris-sampling", choices=("area", "point"),
                    help="how the renderer draws the iris: 'area' (by pixel area, as a camera integrates light) or "
                         "'point' (at pixel centres, whose small irises alias); default: the renderer's")
    args = ap.parse_args(argv)
    gaze = gaze_overrides_or_exit_code(args.gaze)
    if isinstance(gaze, int):
        return gaze
    if args.fps is not None and not 1.0 <= args.fps <= 240.0:
        print(f"--fps {args.fps:g}: expected a frame rate of 1-240 frames per second", file=sys.stderr)
        return 2
    if not 0.0 <= args.lost_frames < 1.0:
        print(f"--lost-frames {args.lost_frames:g}: expected a share of frames within 0-1 (e.g. 0.1)", file=sys.stderr)
        return 2
    if not LUND.is_dir():
        print(f"the hand-coded recordings are not at {LUND}", file=sys.stderr)
        return 2
    cells = [G.Condition(**{**c.__dict__, "iris_sampling": args.iris_sampling})
             for c in grid(args.quick or bool(args.lost_frames), args.seed, args.fps, args.reflection)]  # None: the renderer's default
    if args.lost_frames:  # the same cells, named for what was lost
        cells = [G.Condition(**{**c.__dict__, "name": f"{c.name}_lost{100 * args.lost_frames:g}_{args.lost_as}",
                                "frame_loss": args.lost_frames, "frame_loss_kind": args.lost_as}) for c in cells]
    if args.codec:
        cells = [G.Condition(**{**c.__dict__, "name": f"{c.name}_{args.codec}", "codec": args.codec}) for c in cells]
    cells = only_named(cells, args.only, "cell")
    if isinstance(cells, int):
        return cells
    rows = []
    out_dir = Path(args.keep) if args.keep else Path(tempfile.mkdtemp(prefix="gaze_grid_"))
    out_dir.mkdir(parents=True, exist_ok=True)
    head = f"{'cell':56s} " + " ".join(f"{c[:11]:>11s}" for c, _ in COLUMNS)
    print(head, flush=True)
    variants = {"default": {}} if args.variants == "default" else None
    for cond in cells:
        t0 = time.perf_counter()
        cell = G.run_condition(cond, out_dir, LUND, variants=variants, pipeline_gaze=gaze or None)
        if args.appearance:
            cell += G.run_condition(cond, out_dir, LUND, variants={"appear": {}},
                                    pipeline_gaze=gaze | {"iris_combine": "appearance"})
        for row in cell:
            rows.append(row)
            print(f"{row['label'][:56]:56s} " + " ".join(f"{fmt.format(row[c]):>11s}" for c, fmt in COLUMNS),
                  flush=True)
        print(f"  ({cond.name}: {time.perf_counter() - t0:.0f} s)", file=sys.stderr, flush=True)
    if args.csv:
        import pandas as pd

        pd.DataFrame(rows).drop(columns=["head_motion"]).to_csv(args.csv, index=False)
    return 0


if __name__ == "__main__":
    sys.exit(main())
