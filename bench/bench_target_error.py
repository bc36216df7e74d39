"""Where the known-target check's accuracy error comes from, per still dot, on rendered dev target clips.

The check's own code (:func:`aspectus.targets.analysis.check_samples`, same windows, same offset+gain fit) is run
on gaze computed from mixes of measured and true inputs, so every figure is the check's:

* ``chain``: the pipeline's gaze (the estimator's iris centres and eyeball centres) - the check as it runs;
* ``true iris``: the renderer's iris centres in the picture (``*_truth.csv``; the same pixel convention as the
  face mesh's, pixel i spans [i, i+1)) with the estimator's eyeball centres - what the iris's picture error adds
  is ``chain`` minus this (a);
* ``true centres``: the estimator's iris centres with the renderer's eyeball centres moved by the clip's median
  difference (the estimator's constant placement kept, its frame-to-frame and dot-to-dot motion removed) - what
  the eyeball centres' placement by the head pose adds (b);
* ``true iris + centres``: both; what is left is the eyeball model's constant placement against the renderer's
  eye (c: the model's own non-linearity with the true inputs);
* ``renderer``: true iris and the renderer's own eyeball centres (a check of this script: about 0);
* ``right`` / ``left``: each eye alone (the pipeline's per-eye columns) against both averaged (d).

Printed per clip: the check's accuracy after offset and after offset+gain for each, the eyes alone on the
renderer's gaze and the noise floor (the check's "implied" reference), the iris centre's picture error per eye
(median bias, x/y, and SD of the per-dot medians), the eyeball centres' error (mm, per-dot medians' SD) and the
per-dot errors of every variant. The face mesh runs once per clip (``TARGET_BENCH_CACHE=DIR`` keeps it);
``TARGET_BENCH_ROTATION=skin`` takes the head rotation from skin points (``--gaze head_rotation=skin``).

    python bench/bench_target_error.py                 # the dev clips: a (astronaut, schedule 7, render 4),
                                                       # b (hopper, schedule 11, render 5), c (astronaut, 12 / 6)
    python bench/bench_target_error.py a

Not the test clip (tests/targets/test_rendered_targets.py: schedule seed 1, render seed 2).
"""
from __future__ import annotations

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

#: dev target clips: (face, schedule seed, render seed); 8 still dots of 1.2 s, no sweep, 1280x720, head still
CLIPS = {"a": ("astronaut", 7, 4), "b": ("hopper", 11, 5), "c": ("astronaut", 12, 6)}


def render(name: str, d: Path) -> dict:
    from aspectus.synth.render import read_truth
    from aspectus.synth.target_gaze import render_target_clip
    from aspectus.targets.schedule import Screen, make_schedule

    face, s_seed, r_seed = CLIPS[name]
    sched = make_schedule(Screen(1280, 720, 344.0, 193.5, 600.0), seed=s_seed, fixation_s=1.2, n_fixations=8,
                          pursuit_sweeps=0)
    res, tj = render_target_clip(d / "clip.mp4", sched, lead_in_s=1.5, tail_s=0.5, gain=(1.0, 1.0),
                                 offset_deg=(2.0, -2.0), size_px=(1280, 720), fov_deg=60.0, seed=r_seed, face=face)
    return {"path": res.path, "truth": read_truth(res.truth_path).reset_index(drop=True), "schedule": sched,
            "start_s": tj["flash_first_frame_t_s"], "face": face}


def load(name: str):
    from bench_skin_pose import landmarks

    from aspectus.webcam.video import iter_frames

    cache = os.environ.get("TARGET_BENCH_CACHE")
    hit = Path(cache) / f"target_{name}.pkl" if cache else None
    if hit is not None and hit.exists():
        clip, obs = pickle.loads(hit.read_bytes())
        return clip, list(iter_frames(clip["path"])), obs
    d = Path(tempfile.mkdtemp(prefix="target_error_", dir=cache))
    clip = render(name, d)
    frs, obs = landmarks(clip["path"])
    if hit is not None:
        hit.write_bytes(pickle.dumps((clip, obs)))
    return clip, frs, obs


def run_chain(kw):
    """The pipeline's gaze estimate, and the iris centres and eyeball centres it used (N, 2, 2) / (N, 2, 3)."""
    import aspectus.webcam.gaze as G

    seen = {}
    orig = G.decouple_reference

    def spy(centres, iris_px, *a, **k):
        out, rec = orig(centres, iris_px, *a, **k)
        seen["centres"], seen["iris"] = out.copy(), np.array(iris_px, float)
        return out, rec

    G.decouple_reference = spy
    try:
        cols, info = G.estimate_gaze(**kw)
    finally:
        G.decouple_reference = orig
    return cols, info, seen["iris"], seen["centres"]


def gaze_from(iris_px, centres, K):
    """Per-eye unit gaze (N, 2, 3) as the estimator computes it (ray through the iris onto the iris-plane sphere)."""
    from aspectus.geometry import ray_sphere_near
    from aspectus.webcam.gaze import IRIS_PLANE_RADIUS_MM

    n = len(iris_px)
    g = np.full((n, 2, 3), np.nan)
    Kinv = np.linalg.inv(K)
    for e in range(2):
        ray = np.c_[iris_px[:, e], np.ones(n)] @ Kinv.T
        ok = np.all(np.isfinite(ray), axis=1) & np.all(np.isfinite(centres[:, e]), axis=1)
        P, _ = ray_sphere_near(ray[ok], centres[ok, e], IRIS_PLANE_RADIUS_MM)
        v = P - centres[ok, e]
        g[ok, e] = v / np.linalg.norm(v, axis=1, keepdims=True)
    return g


def angles(g_eyes, which="both"):
    from aspectus.geometry import gaze_vector_to_angles

    if which == "both":
        g = np.nanmean(g_eyes, axis=1)
        g = g / np.linalg.norm(g, axis=1, keepdims=True)
    else:
        g = g_eyes[:, 0 if which == "right" else 1]
    return gaze_vector_to_angles(g)


def true_centres(clip, truth, K):
    """The renderer's eyeball centres (N, 2, 3) [right, left], camera frame mm, from its own face rig."""
    from aspectus.synth.face import load_face
    from aspectus.synth.frame import Camera, FaceRig, head_rotation
    from aspectus.synth.render import _background

    cam = Camera(1280, 720, 60.0)
    rest = tuple(float(truth[c].median()) for c in ("head_x_mm", "head_y_mm", "head_z_mm"))
    rig = FaceRig(load_face(clip["face"]), cam, rest_head_mm=rest, background=_background(1280, 720))
    out = np.empty((len(truth), 2, 3))
    for i, r in enumerate(truth.itertuples(index=False)):
        _, eyes = rig.pose(head_rotation(r.head_yaw_deg, r.head_pitch_deg, r.head_roll_deg),
                           (r.head_x_mm, r.head_y_mm, r.head_z_mm))
        out[i] = [eyes["right"], eyes["left"]]
    return out


def per_dot(values, t, sched, start_s, ok, settle_s=0.5):
    """Median of ``values`` (N, ...) over each still dot's window of the check (valid frames)."""
    ts = t - start_s
    out = []
    for r in sched.fixations.itertuples(index=False):
        w = (ts >= r.onset_s + settle_s) & (ts < r.offset_s) & ok
        out.append(np.nanmedian(values[w], axis=0) if w.sum() else np.full(values.shape[1:], np.nan))
    return np.asarray(out)


def measure(name: str) -> dict:
    from bench_skin_pose import geometry, samples_from  # noqa: F401 - geometry as the pipeline builds it

    from aspectus.targets.analysis import check_samples

    clip, frs, obs = load(name)
    truth, sched, start = clip["truth"], clip["schedule"], clip["start_s"]
    kw, _cpu, _st = geometry(frs, obs, os.environ.get("TARGET_BENCH_ROTATION", "mesh"))
    K = kw["K"]
    cols, info, iris_est, C_est = run_chain(kw)
    t = kw["t_s"] - kw["t_s"][0]
    valid = np.asarray(cols["valid"], bool)
    base = pd.DataFrame({"t_s": t, "valid": valid, "yaw_deg": cols["yaw_deg"], "pitch_deg": cols["pitch_deg"]})

    iris_true = truth[["right_iris_x_px", "right_iris_y_px", "left_iris_x_px", "left_iris_y_px"]].to_numpy(float)
    iris_true = iris_true.reshape(-1, 2, 2)
    C_true = true_centres(clip, truth, K)
    C_const = C_true + np.nanmedian((C_est - C_true)[valid], axis=0)

    def check(yaw, pitch):
        s = base.assign(yaw_deg=np.where(valid, yaw, np.nan), pitch_deg=np.where(valid, pitch, np.nan))
        return check_samples(s, sched, start_s=start, run_events=False)

    g_chain = gaze_from(iris_est, C_est, K)
    variants = {
        "chain": g_chain,
        "true iris": gaze_from(iris_true, C_est, K),
        "true centres": gaze_from(iris_est, C_const, K),
        "true iris + centres": gaze_from(iris_true, C_const, K),
        "renderer": gaze_from(iris_true, C_true, K),
    }
    out = {"clip": name, "face": clip["face"], "seeds": CLIPS[name][1:],
           "head_rotation": os.environ.get("TARGET_BENCH_ROTATION", "mesh")}
    y0, p0 = angles(g_chain)
    out["recomputed_vs_pipeline_max_deg"] = float(np.nanmax(np.abs(np.r_[y0 - cols["yaw_deg"], p0 - cols["pitch_deg"]][
        np.r_[valid, valid]])))
    ideal = check_samples(truth.assign(valid=True), sched, start_s=start, run_events=False)
    rows = {}
    for k, g in variants.items():
        c = check(*angles(g))
        out[k] = [round(c.summary["accuracy_offset_deg"], 3), round(c.summary["accuracy_offset_gain_deg"], 3)]
        rows[k] = c.targets.loc[c.targets["kind"] == "fixation", "error_offset_gain_deg"].to_numpy()
        if k == "chain":
            out["noise_floor_deg"] = round(c.summary["accuracy_noise_floor_deg"], 3)
            out["gain_yaw_pitch"] = [round(c.mapping.gain_yaw, 3), round(c.mapping.gain_pitch, 3)]
    for eye in ("right", "left"):
        c = check(*angles(g_chain, eye))
        out[eye] = [round(c.summary["accuracy_offset_deg"], 3), round(c.summary["accuracy_offset_gain_deg"], 3)]
        rows[eye] = c.targets.loc[c.targets["kind"] == "fixation", "error_offset_gain_deg"].to_numpy()
    out["eyes_alone_deg"] = round(ideal.summary["accuracy_offset_gain_deg"], 3)
    # (a) the iris centre's picture error, px: bias over the dots' windows and the per-dot medians' SD
    d_iris = per_dot((iris_est - iris_true).reshape(-1, 4), t, sched, start, valid)
    out["iris_err_px_median_rx_ry_lx_ly"] = np.round(np.nanmedian(d_iris, axis=0), 2).tolist()
    out["iris_err_px_sd_between_dots"] = np.round(np.nanstd(d_iris, axis=0), 2).tolist()
    # (b) the eyeball centres' error, mm: per-dot medians' SD (x, y, z per eye)
    d_c = per_dot((C_est - C_true).reshape(-1, 6), t, sched, start, valid)
    out["centre_err_mm_median_r_l"] = np.round(np.nanmedian(d_c, axis=0), 2).tolist()
    out["centre_err_mm_sd_between_dots_r_l"] = np.round(np.nanstd(d_c, axis=0), 2).tolist()
    out["per_dot_offset_gain_deg"] = {k: np.round(v, 2).tolist() for k, v in rows.items()}
    tt = per_dot(truth[["yaw_deg", "pitch_deg"]].to_numpy(float), t, sched, start, valid)
    out["per_dot_true_yaw_pitch"] = np.round(tt, 1).tolist()
    return out


def main(argv) -> int:
    names = argv or list(CLIPS)
    for n in names:
        if n not in CLIPS:
            print(f"unknown clip {n!r}; choose from {list(CLIPS)}", file=sys.stderr)
            return 2
    for n in names:
        print(json.dumps(measure(n)), flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
