"""The limbus fit's iris shape, circle against ellipse (``GazeParams.iris_shape``), on rendered clips with truth.

The face mesh runs once per clip (cached with ``TARGET_BENCH_CACHE=DIR``, as bench/bench_target_error.py does);
the per-frame geometry is re-run per variant:

* ``circle``: the limbus fit as the default runs it;
* ``ellipse``: the option (the iris fitted as the ellipse its circle fit predicts, measured from the eyeball centres
  the head model places under each frame's pose);
* ``ellipse-true-centres``: the same with the renderer's own eyeball centres (what the prediction loses to the
  eyeball centre's placement).

Materials (one JSON line per clip and variant):

* ``a``-``e``: bench/bench_target_error.py's target clips (gaze within about 18 deg of the camera); the
  known-target check's accuracy after offset / offset+gain, its fitted gains, the iris centre's error per dot;
* ``ta``-``te``: target clips with the whole gaze offset from the screen by 15-30 deg (a camera below, beside or
  above the screen), the same figures; ``tf``-``ti``: four more, held out;
* ``g25``: the gaze grid's 25 px cell (seed 0), ``d1``-``d6``: six held-out 20-26 px clips like it (other trials,
  seeds 1-6): the limbus estimate re-estimated as the pipeline does (failed fits bridged), with the grid's figures
  (tests/_gaze_grid.py ``measure``) and the fit's error SD against the renderer's iris centres.

    python bench/bench_iris_shape.py ta tb tc td te
    python bench/bench_iris_shape.py a b c d e --variants circle,ellipse
    python bench/bench_iris_shape.py g25 d1 d2 d3 d4 d5 d6

Figures: docs/notes/gaze-measurement.md ("The iris seen obliquely is an ellipse").
"""
from __future__ import annotations

import argparse
import json
import os
import pickle
import sys
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "bench"))
sys.path.insert(0, str(ROOT / "tests"))

import bench_target_error as B  # noqa: E402

LUND = ROOT.parent / "shared" / "reference" / "lund2013" / "img"
#: target clips with the camera off the screen's axis: (face, schedule seed, render seed), gaze offset (yaw, pitch)
OFF_AXIS = {"ta": (("astronaut", 7, 4), (2.0, 22.0)), "tb": (("hopper", 11, 5), (-18.0, 15.0)),
            "tc": (("hopper", 17, 13), (0.0, -18.0)), "td": (("astronaut", 19, 14), (20.0, 20.0)),
            "te": (("hopper", 23, 21), (-5.0, 25.0)),
            # held out: measured once, after the option was settled on the five above
            "tf": (("hopper", 37, 41), (0.0, 20.0)), "tg": (("astronaut", 43, 47), (25.0, 5.0)),
            "th": (("hopper", 53, 59), (-10.0, 18.0)), "ti": (("astronaut", 61, 67), (12.0, -15.0))}
#: the grid's 25 px cell and six held-out clips like it
GRID = {"g25": dict(name="25px_crf28", trial="TL20_img_konijntjes", face="hopper", seed=0, distance_mm=530.0),
        "d1": dict(name="dev_TH34_s1", trial="TH34_img_Europe", face="astronaut", seed=1, distance_mm=530.0),
        "d2": dict(name="dev_UH21_s2", trial="UH21_img_Rome", face="hopper", seed=2, distance_mm=560.0),
        "d3": dict(name="dev_UL23_s3", trial="UL23_img_Europe", face="astronaut", seed=3, distance_mm=500.0),
        "d4": dict(name="dev_TL20_s4", trial="TL20_img_konijntjes", face="hopper", seed=4, distance_mm=600.0,
                   codec="mpeg4", head_motion="drift"),
        "d5": dict(name="dev_UH21_s5", trial="UH21_img_Rome", face="astronaut", seed=5, distance_mm=530.0,
                   head_motion="drift"),
        "d6": dict(name="dev_TH34_s6", trial="TH34_img_Europe", face="hopper", seed=6, distance_mm=650.0)}
VARIANTS = ("circle", "ellipse", "ellipse-true-centres")


def _render_off_axis(name: str, d: Path) -> dict:
    from aspectus.synth.render import read_truth
    from aspectus.synth.target_gaze import render_target_clip
    from aspectus.targets.schedule import Screen, make_schedule

    (face, s_seed, r_seed), off = OFF_AXIS[name]
    sched = make_schedule(Screen(1280, 720, 344.0, 193.5, 600.0), seed=s_seed, fixation_s=1.2, n_fixations=8,
                          pursuit_sweeps=0)
    res, tj = render_target_clip(d / "clip.mp4", sched, lead_in_s=1.5, tail_s=0.5, gain=(1.0, 1.0),
                                 offset_deg=off, size_px=(1280, 720), fov_deg=60.0, seed=r_seed, face=face)
    return {"path": res.path, "truth": read_truth(res.truth_path).reset_index(drop=True), "schedule": sched,
            "start_s": tj["flash_first_frame_t_s"], "face": face}


_render_dots = B.render


def _render(name, d):
    return _render_off_axis(name, d) if name in OFF_AXIS else _render_dots(name, d)


B.render = _render
for _k, (_c, _) in OFF_AXIS.items():
    B.CLIPS[_k] = _c


def _camera(w: int, h: int) -> np.ndarray:
    from aspectus.geometry import focal_length_px

    f = focal_length_px(width_px=w, fov_deg=60.0)
    return np.array([[f, 0.0, w / 2], [0.0, f, h / 2], [0.0, 0.0, 1.0]])


class _Geometry:
    """The per-frame geometry with the variant's iris shape (and, for ``ellipse-true-centres``, the renderer's
    eyeball centres in place of the head model's) while the block runs."""

    def __init__(self, variant: str, true_eyeball_px=None, t_s=None):
        self.variant, self.E, self.t_s = variant, true_eyeball_px, t_s

    def __enter__(self):
        import aspectus.webcam.frame_geometry as FG

        self.FG, cls = FG, FG.FrameGeometry
        self.saved = (cls.__init__, cls._row_before_iris, cls._eyeball_px)
        init, rbi, _ = self.saved
        shaped = self.variant != "circle"
        cls.__init__ = lambda obj, *a, **k: init(obj, *a, **(k | {"iris_shape": shaped}))
        if self.variant == "ellipse-true-centres":
            E, ts = self.E, self.t_s

            def rb(obj, pts_s, *a, **k):
                obj._frame = int(np.argmin(np.abs(ts - pts_s)))
                return rbi(obj, pts_s, *a, **k)

            cls._row_before_iris = rb
            cls._eyeball_px = lambda obj, R, t: E[obj._frame]
        return self

    def __exit__(self, *exc):
        cls = self.FG.FrameGeometry
        cls.__init__, cls._row_before_iris, cls._eyeball_px = self.saved


def _true_eyeball_px(clip: dict, truth: pd.DataFrame, K: np.ndarray) -> np.ndarray:
    C = B.true_centres(clip, truth, K)
    P = C @ K.T
    return P[..., :2] / P[..., 2:3]


def target_clip(name: str, variant: str) -> dict:
    clip, _frs, _obs = B.load(name)
    E = _true_eyeball_px(clip, clip["truth"], _camera(1280, 720)) if variant == "ellipse-true-centres" else None
    with _Geometry(variant, E, clip["truth"]["pts_s"].to_numpy()):
        o = B.measure(name)
    keys = ("chain", "true iris", "gain_yaw_pitch", "iris_err_px_median_rx_ry_lx_ly", "iris_err_px_sd_between_dots",
            "right", "left", "noise_floor_deg")
    return {"accuracy_offset_and_offset_gain_deg": o["chain"]} | {k: o[k] for k in keys[1:]}


def _grid_condition(key: str):
    import _gaze_grid as G

    spec = dict(GRID[key])
    if spec.pop("head_motion", None) == "drift":
        spec["head_motion"] = dict(G.HEAD_DRIFT_ONLY)
    return G.Condition(size_px=(1280, 720), **spec)


def _grid_load(key: str):
    import _gaze_grid as G
    import _lund
    from bench_skin_pose import landmarks

    from aspectus.webcam.video import iter_frames

    cond = _grid_condition(key)
    cache = os.environ.get("TARGET_BENCH_CACHE")
    hit = Path(cache) / f"grid_{key}.pkl" if cache else None
    if hit is not None and hit.exists():
        path, truth, obs = pickle.loads(hit.read_bytes())
        return cond, truth, _lund.load_trials(LUND, cond.trial), list(iter_frames(path)), obs
    d = Path(tempfile.mkdtemp(prefix="iris_shape_", dir=cache))
    res, trial = G.render_condition(cond, d, LUND)
    frs, obs = landmarks(res.path)
    if hit is not None:
        hit.write_bytes(pickle.dumps((res.path, res.truth, obs)))
    return cond, res.truth, trial, frs, obs


def grid_clip(key: str, variant: str) -> dict:
    import _gaze_grid as G
    from bench_skin_pose import geometry

    from aspectus.webcam.gaze import GazeParams, estimate_gaze

    cond, truth, trial, frs, obs = _grid_load(key)
    E = (_true_eyeball_px({"face": cond.face}, truth, _camera(*cond.size_px))
         if variant == "ellipse-true-centres" else None)
    with _Geometry(variant, E, truth["pts_s"].to_numpy()):
        kw, cpu_ms, _ = geometry(frs, obs, "mesh")
    kw["params"] = GazeParams(iris_combine="limbus")
    iris = np.array(kw["iris_px"], float)
    iris[~np.isfinite(kw["limbus_diam_px"])] = np.nan  # as the pipeline marks failed fits (bridged by the estimate)
    kw["iris_px"] = iris
    cols, _info = estimate_gaze(**kw)
    s = pd.DataFrame({k: v for k, v in cols.items() if np.ndim(v) == 1 and len(v) == len(kw["t_s"])})
    s["t_s"] = kw["t_s"]
    m = G.measure(s, truth, trial)
    ok = kw["found"] & np.isfinite(kw["limbus_diam_px"]).all(axis=1) & np.asarray(cols["valid"], bool)
    err = (iris - G.true_iris_px(truth))[ok]
    theta = np.hypot(truth["yaw_deg"], truth["pitch_deg"])
    out = {k: round(m[k], 3) for k in ("iris_px", "rms_s2s_deg", "noise_rms_s2s_deg", "yaw_r", "yaw_gain",
                                        "pitch_r", "pitch_gain", "kappa")}
    return out | {"fit_err_sd_px_rx_ry_lx_ly": np.round(err.std(axis=0).ravel(), 3).tolist(),
                  "geometry_cpu_ms": round(cpu_ms, 2),
                  "theta_deg_p10_p50_p90": np.round(np.percentile(theta, [10, 50, 90]), 1).tolist()}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("clips", nargs="+", help="a-e, ta-te, g25, d1-d6")
    ap.add_argument("--variants", default=",".join(VARIANTS), help=f"comma-separated, of {', '.join(VARIANTS)}")
    args = ap.parse_args(argv)
    variants = args.variants.split(",")
    bad = [v for v in variants if v not in VARIANTS] + [c for c in args.clips if c not in B.CLIPS and c not in GRID]
    if bad:
        print(f"unknown: {', '.join(bad)}", file=sys.stderr)
        return 2
    for c in args.clips:
        for v in variants:
            res = grid_clip(c, v) if c in GRID else target_clip(c, v)
            print(json.dumps({"clip": c, "variant": v} | res), flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
