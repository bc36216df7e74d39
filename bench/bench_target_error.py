"""Where the known-target check's accuracy error comes from, per still dot, on rendered dev target clips.

The check's own code (:func:`aspectus.targets.analysis.check_samples`, same windows, same offset+gain fit) is run
on gaze computed from mixes of measured and true inputs, so every figure is the check's:

* ``chain``: the pipeline's gaze (the estimator's iris centres and eyeball centres) - the check as it runs;
* ``true iris``: the renderer's iris centres in the picture (``*_truth.csv``; the same pixel convention as the
  face mesh's, pixel i spans [i, i+1)) with the estimator's eyeball centres - what the iris's picture error adds
  is ``chain`` minus this (a); ``true iris x`` / ``true iris y``: only the iris centres' horizontal / vertical
  picture position taken from the truth (which axis of the iris error reaches the check);
* ``true centres``: the estimator's iris centres with the renderer's eyeball centres moved by the clip's median
  difference (the estimator's constant placement kept, its frame-to-frame and dot-to-dot motion removed) - what
  the eyeball centres' placement by the head pose adds (b);
* ``true iris + centres``: both; what is left is the eyeball model's constant placement against the renderer's
  eye (c: the model's own non-linearity with the true inputs);
* ``renderer``: true iris and the renderer's own eyeball centres (a check of this script: about 0);
* ``right`` / ``left``: each eye alone (the pipeline's per-eye columns) against both averaged (d);
* ``centres: common x/y/z still``, ``centres: difference x/y/z still``: the estimator's eyeball centres with one
  part of their motion (against the renderer's, after the clip's median) removed - the part both eyes share
  (the head origin's sideways, vertical, depth motion), or the part that differs between them (a roll turns
  the line between the centres: one rises as the other falls) - which part of (b) reaches the binocular gaze.

Printed per clip: the check's accuracy after offset and after offset+gain for each, the eyes alone on the
renderer's gaze and the noise floor (the check's "implied" reference), the iris centre's picture error per eye
(median bias, x/y, and SD of the per-dot medians), the eyeball centres' error (mm, per-dot medians' SD) and the
per-dot errors of every variant (``per_dot_offset_gain_deg``; ``residual_rms_yaw_pitch_deg``: per variant the RMS
over the dots of the residual's yaw and pitch after the check's offset+gain mapping, which axis the error is in),
and the head rotation's per-dot figures (``head_rotation_per_10deg``: deg of
head yaw, pitch, roll per 10 deg of true gaze yaw (first row) and pitch (second), least squares over the dots'
medians; ``head_rotation_sd_between_dots``). The face mesh runs once per clip (``TARGET_BENCH_CACHE=DIR`` keeps
it); ``TARGET_BENCH_ROTATION=skin`` takes the head rotation from skin points (``--gaze head_rotation=skin``);
``TARGET_BENCH_ANCHORS=SET`` places the head by another eye-anchor set (a key of
:data:`aspectus.webcam.eye_anchors.ANCHOR_SETS`; the pipeline's default for these faces is ``below``);
``TARGET_BENCH_PNP_POINTS=NAME`` solves the face mesh's PnP on a subset of its rigid points (:data:`PNP_SUBSETS`:
the points' picture motion with the gaze measured on a-c, ``python bench/bench_target_error.py --points``);
``TARGET_BENCH_EDGE=model`` takes the limbus candidates from the edge-profile model instead of the steepest step
(:func:`aspectus.webcam.limbus.limbus_centres_many`, ``edge``; also in ``--limbus`` and in bench/bench_iris_shape.py);
``TARGET_BENCH_ROTATION=still`` replaces the face mesh's PnP rotation in every frame by its mean over the clip
(the rendered head is still, so this is the true rotation up to a constant; the translation is still fitted to
the eye anchors under it): what is left of (b) then comes from the anchors.

    python bench/bench_target_error.py                 # the dev clips: a (astronaut, schedule 7, render 4),
                                                       # b (hopper, schedule 11, render 5), c (astronaut, 12 / 6)
    python bench/bench_target_error.py a
    python bench/bench_target_error.py d e             # the held-out clips: d (hopper, 17 / 13), e (astronaut, 19 / 14)
    python bench/bench_target_error.py --points a b c  # the rigid points' picture motion with the gaze
    python bench/bench_target_error.py --limbus a b c d e  # the limbus candidates against the true iris rim

``--limbus``: per eye and still dot, over the check's windows, the limbus fit's (:mod:`aspectus.webcam.limbus`)
candidates that the fit keeps in the pass that gave its centre, as distance from the renderer's true iris circle (px, negative =
inside the rim), split into the arcs above the centre (more than 20 deg above the horizontal), beside it and
below it, with the fit's centre error and radius against the truth; then over all eye-dots of the clips named
the correlations of the fit's vertical error with those, and its median and SD by gaze direction (down, level,
up: the lids).

Not the test clip (tests/targets/test_rendered_targets.py: schedule seed 1, render seed 2).
"""
from __future__ import annotations

import functools
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

#: where the limbus fit takes each ray's candidate (``TARGET_BENCH_EDGE``; :data:`aspectus.webcam.limbus.EDGE_LOCATORS`)
EDGE = os.environ.get("TARGET_BENCH_EDGE", "steepest")
if EDGE != "steepest":
    import aspectus.webcam.frame_geometry as _FG

    _FG.limbus_centres_many = functools.partial(_FG.limbus_centres_many, edge=EDGE)

#: target clips: (face, schedule seed, render seed); 8 still dots of 1.2 s, no sweep, 1280x720, head still;
#: a-c the dev clips, d and e held out (measured only to check what was chosen on a-c)
CLIPS = {"a": ("astronaut", 7, 4), "b": ("hopper", 11, 5), "c": ("astronaut", 12, 6),
         "d": ("hopper", 17, 13), "e": ("astronaut", 19, 14)}


#: subsets of :data:`aspectus.webcam.headpose.RIGID_POINTS` for ``TARGET_BENCH_PNP_POINTS``: the cheeks below the
#: cheekbones (the rigid points whose picture position moved least with the gaze on a-c), with the nose's
#: sides and bridge, with the whole nose; the rigid points without the forehead, without the sides of the face
PNP_SUBSETS = {"cheeks": (205, 425, 50, 280, 36, 266, 101, 330),
               "cheeks+alar": (205, 425, 50, 280, 36, 266, 101, 330, 129, 358, 98, 327, 64, 294, 48, 278, 197, 195),
               "cheeks+nose": (205, 425, 50, 280, 36, 266, 101, 330, 1, 2, 4, 5, 19, 94, 195, 197, 98, 327, 129, 358,
                               64, 294, 48, 278),
               "no-forehead": "forehead", "no-sides": "sides"}


def pnp_points():
    """The rigid points the PnP is solved on (``TARGET_BENCH_PNP_POINTS``; the pipeline's by default)."""
    from aspectus.webcam.headpose import RIGID_POINTS

    name = os.environ.get("TARGET_BENCH_PNP_POINTS")
    if not name:
        return RIGID_POINTS
    sub = PNP_SUBSETS[name]
    if sub == "forehead":
        return tuple(p for p in RIGID_POINTS if p not in RIGID_POINTS[:11])
    if sub == "sides":
        return tuple(p for p in RIGID_POINTS if p not in (127, 356, 234, 454, 93, 323, 132, 361))
    return sub


def point_motion(names) -> list[str]:
    """Per rigid point, its picture motion with the true gaze on the still-head clips: px per 10 deg of gaze
    yaw and pitch (x, y), least squares over the dots' medians of the face mesh's points; one line per point."""
    from aspectus.webcam.headpose import RIGID_POINTS

    lines = ["point  " + "  ".join(f"{n}: dx/yaw dy/yaw dx/pitch dy/pitch" for n in names)]
    coef = {}
    for n in names:
        clip, _frs, obs = load(n)
        tr = clip["truth"]
        t = tr["t_s"].to_numpy() - tr["t_s"].to_numpy()[0]
        P = np.full((len(obs), 478, 2), np.nan)
        for i, (o, _) in enumerate(obs):
            if o is not None:
                P[i] = o.points_px[:, :2]
        ok = np.isfinite(P[:, 0, 0]) & ~tr["blink"].to_numpy(bool)
        g = per_dot(tr[["yaw_deg", "pitch_deg"]].to_numpy(float), t, clip["schedule"], clip["start_s"], ok)
        D = per_dot(P.reshape(len(P), -1), t, clip["schedule"], clip["start_s"], ok)
        c = np.linalg.lstsq(g - g.mean(axis=0), D - D.mean(axis=0), rcond=None)[0]
        coef[n] = 10 * c.reshape(2, 478, 2)
    for j in RIGID_POINTS:
        lines.append(f"{j:5d}  " + "  ".join(" ".join(f"{coef[n][a, j, b]:+6.2f}" for a in range(2) for b in range(2))
                                            for n in names))
    return lines


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


def still_geometry(frs, obs):
    """The per-frame geometry with the face mesh's PnP rotation replaced by its mean over the clip (the
    translation fitted to the eye anchors under that rotation, as the pipeline does under the PnP's)."""
    from bench_skin_pose import geometry
    from scipy.spatial.transform import Rotation

    import aspectus.webcam.headpose as H

    kw, _, _ = geometry(frs, obs, "mesh")
    R0 = Rotation.from_matrix(kw["R"][kw["found"]]).mean().as_matrix()
    orig = H.HeadPoseSolver.solve

    def solve(self, points_px):
        pose = orig(self, points_px)
        return None if pose is None else (R0.copy(), pose[1])

    H.HeadPoseSolver.solve = solve
    try:
        return geometry(frs, obs, "mesh")
    finally:
        H.HeadPoseSolver.solve = orig


def axis_residual_rms(c) -> np.ndarray:
    """RMS over the check's still dots of the residual after its offset+gain mapping, (yaw, pitch) deg."""
    fx = c.targets[(c.targets["kind"] == "fixation") & c.targets["error_offset_gain_deg"].notna()]
    x, y = c.mapping.to_screen_deg(fx["gaze_yaw_deg"].to_numpy(float), fx["gaze_pitch_deg"].to_numpy(float))
    r = np.c_[x - fx["x_deg"].to_numpy(float), y - fx["y_deg"].to_numpy(float)]
    return np.sqrt(np.mean(r * r, axis=0))


def limbus_candidates(name: str) -> list[dict]:
    """Per eye and still dot of clip ``name``: the limbus fit's kept candidates of the pass that gave its centre,
    against the renderer's true iris circle (``--limbus``). The per-frame geometry runs as the pipeline runs it;
    each frame's limbus fit is run again on the same eye regions with its passes watched (an eye-frame whose
    candidates cannot be told from the other eye's - one eye without enough of them in that pass - is left out,
    as are eye-frames where the fit kept the face mesh's point)."""
    import aspectus.webcam.frame_geometry as FG
    import aspectus.webcam.limbus as L

    clip, frs, obs = load(name)
    tr, sched = clip["truth"], clip["schedule"]
    ts = tr["t_s"].to_numpy() - tr["t_s"].to_numpy()[0] - clip["start_s"]
    blink = tr["blink"].to_numpy(bool)
    many, fit, fit_many = functools.partial(L.limbus_centres_many, edge=EDGE), L.fit_circles, L._fit_many
    in_geometry = FG.limbus_centres_many
    seen: dict = {}

    def spy_many(items, **k):
        seen["items"], seen["k"] = items, k
        return many(items, **k)

    def spy_fit(pts, valid, *a, **k):
        seen["fits"].append((np.array(pts), np.array(valid)))
        return fit(pts, valid, *a, **k)

    def spy_fit_many(cv2, eyes, *a, **k):
        seen["fits"] = []
        res = fit_many(cv2, eyes, *a, **k)
        pts, valid = seen["fits"][0] if seen["fits"] else (None, None)
        for j, (eye, nxt) in enumerate(zip(eyes, res)):
            # accepted as limbus_centres_many accepts a pass (the centre within a mesh radius of the mesh's point)
            if nxt is not None and np.hypot(*(nxt[0] - eye.c0)) <= eye.r:
                seen["passes"][eye.eye] = (pts[j], valid[j]) if pts is not None and len(pts) == len(eyes) else None
        return res

    geo = FG.FrameGeometry(fov_deg=60.0, refine_iris=True)
    out = []
    FG.limbus_centres_many = spy_many
    try:
        for d, fx in enumerate(sched.fixations.itertuples(index=False)):
            acc = {e: {"ang": [], "res": [], "fit": [], "ratio": []} for e in (0, 1)}
            for i in np.flatnonzero((ts >= fx.onset_s + 0.5) & (ts < fx.offset_s) & ~blink):
                f, (o, n) = frs[i], obs[i]
                item = FG.frame_item(f.pts_s, f.image, o, refine_iris=True, faces_in_view=n)
                seen.clear()
                geo.rows([item])
                if "items" not in seen:
                    continue
                off = np.asarray(item[5], float)
                seen["passes"] = {}
                L.fit_circles, L._fit_many = spy_fit, spy_fit_many
                try:
                    res = many(seen["items"], **(seen["k"] | {"diameters": True}))[0]
                finally:
                    L.fit_circles, L._fit_many = fit, fit_many
                _img, _pts, mesh_c, mesh_d = seen["items"][0]
                for e, side in enumerate(("right", "left")):
                    cand = seen["passes"].get(e)
                    if not res[1][e] or cand is None:
                        continue
                    tc = np.array([tr[f"{side}_iris_x_px"][i], tr[f"{side}_iris_y_px"][i]])
                    t_r = 0.5 * tr["iris_diameter_px"][i]
                    # the eye region's origin (limbus._prepare_eye): its first pixel's centre
                    reach = L.ROI_RADII * 0.5 * mesh_d[e]
                    org = np.floor(np.maximum(0.0, np.asarray(mesh_c[e], float) - reach)) + 0.5 + off
                    dv = cand[0][cand[1]] + org - tc
                    acc[e]["ang"].append(np.degrees(np.arctan2(dv[:, 1], dv[:, 0])))
                    acc[e]["res"].append(np.hypot(dv[:, 0], dv[:, 1]) - t_r)
                    acc[e]["fit"].append(res[0][e] + off - tc)
                    acc[e]["ratio"].append(0.5 * res[2][e] / t_r)
            for e in (0, 1):
                a = acc[e]
                if not a["fit"]:
                    continue
                ang, r = np.concatenate(a["ang"]), np.concatenate(a["res"])
                up, low = ang < -20, ang > 20
                fit_err = np.median(np.array(a["fit"]), axis=0)
                out.append({"clip": name, "eye": ("right", "left")[e], "dot": d,
                            "fit_err_x_px": float(fit_err[0]), "fit_err_y_px": float(fit_err[1]),
                            "radius_ratio": float(np.median(a["ratio"])),
                            "above_px": float(np.median(r[up])) if up.sum() > 3 else float("nan"),
                            "beside_px": float(np.median(r[~up & ~low])),
                            "below_px": float(np.median(r[low])) if low.sum() > 3 else float("nan"),
                            "n_above": round(float(up.sum()) / len(a["fit"]), 1),
                            "n_below": round(float(low.sum()) / len(a["fit"]), 1)})
    finally:
        FG.limbus_centres_many = in_geometry
    g = per_dot(tr[["yaw_deg", "pitch_deg"]].to_numpy(float), ts + clip["start_s"], sched, clip["start_s"],
                ~blink)
    for row in out:
        row["true_yaw_deg"], row["true_pitch_deg"] = (round(float(v), 1) for v in g[row["dot"]])
    return out


def limbus_summary(rows: list[dict]) -> dict:
    """Over eye-dots: correlations of the fit's vertical error, and its median / SD by gaze direction."""
    df = pd.DataFrame(rows)
    df["above_minus_beside_px"] = df["above_px"] - df["beside_px"]
    df["below_minus_beside_px"] = df["below_px"] - df["beside_px"]
    cols = ["true_pitch_deg", "above_px", "above_minus_beside_px", "below_minus_beside_px", "radius_ratio", "n_above",
            "n_below"]
    ok = df[cols + ["fit_err_y_px"]].notna().all(axis=1)
    out = {"eye_dots": int(len(df)), "r_with_fit_err_y": {c: round(float(np.corrcoef(df.loc[ok, c],
                                                                                       df.loc[ok, "fit_err_y_px"])[0, 1]), 2)
                                                          for c in cols}}
    for label, sel in (("down", df["true_pitch_deg"] < -5), ("level", df["true_pitch_deg"].abs() <= 5),
                       ("up", df["true_pitch_deg"] > 5)):
        v = df.loc[sel, "fit_err_y_px"]
        out[f"fit_err_y_px_{label}_median_sd"] = [round(float(v.median()), 2), round(float(v.std(ddof=0)), 2)]
    out["medians_px"] = {c: round(float(df[c].median()), 3) for c in ("beside_px", "above_px", "below_px",
                                                                     "radius_ratio")}
    return out


def measure(name: str) -> dict:
    from bench_skin_pose import geometry, samples_from  # noqa: F401 - geometry as the pipeline builds it

    from aspectus.targets.analysis import check_samples
    from aspectus.webcam.gaze import smooth_pose
    from aspectus.webcam.headpose import pose_angles

    clip, frs, obs = load(name)
    truth, sched, start = clip["truth"], clip["schedule"], clip["start_s"]
    import aspectus.webcam.headpose as H

    rotation = os.environ.get("TARGET_BENCH_ROTATION", "mesh")
    import aspectus.webcam.frame_geometry as FG

    rigid, H.RIGID_POINTS = H.RIGID_POINTS, pnp_points()
    anchors = os.environ.get("TARGET_BENCH_ANCHORS")
    init = FG.FrameGeometry.__init__
    if anchors:
        def with_anchors(self, *a, **k):
            init(self, *a, **(k | {"anchor_set": anchors}))
        FG.FrameGeometry.__init__ = with_anchors
    try:
        kw, _cpu, _st = still_geometry(frs, obs) if rotation == "still" else geometry(frs, obs, rotation)
    finally:
        H.RIGID_POINTS = rigid
        FG.FrameGeometry.__init__ = init
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
        "true iris x": gaze_from(np.stack([iris_true[..., 0], iris_est[..., 1]], axis=-1), C_est, K),
        "true iris y": gaze_from(np.stack([iris_est[..., 0], iris_true[..., 1]], axis=-1), C_est, K),
        "true centres": gaze_from(iris_est, C_const, K),
        "true iris + centres": gaze_from(iris_true, C_const, K),
        "renderer": gaze_from(iris_true, C_true, K),
    }
    err = C_est - C_const
    for ax, a in (("x", 0), ("y", 1), ("z", 2)):
        common = np.zeros_like(err)
        common[:, :, a] = err[:, :, a].mean(axis=1, keepdims=True)
        diff = np.zeros_like(err)
        diff[:, :, a] = err[:, :, a] - common[:, :, a]
        variants[f"centres: common {ax} still"] = gaze_from(iris_est, C_est - common, K)
        variants[f"centres: difference {ax} still"] = gaze_from(iris_est, C_est - diff, K)
    out = {"clip": name, "face": clip["face"], "seeds": CLIPS[name][1:], "head_rotation": rotation,
           "pnp_points": os.environ.get("TARGET_BENCH_PNP_POINTS", "all rigid"), "anchors": anchors or "below"}
    y0, p0 = angles(g_chain)
    out["recomputed_vs_pipeline_max_deg"] = float(np.nanmax(np.abs(np.r_[y0 - cols["yaw_deg"], p0 - cols["pitch_deg"]][
        np.r_[valid, valid]])))
    ideal = check_samples(truth.assign(valid=True), sched, start_s=start, run_events=False)
    rows, rms = {}, {}
    for k, g in variants.items():
        c = check(*angles(g))
        out[k] = [round(c.summary["accuracy_offset_deg"], 3), round(c.summary["accuracy_offset_gain_deg"], 3)]
        rows[k] = c.targets.loc[c.targets["kind"] == "fixation", "error_offset_gain_deg"].to_numpy()
        rms[k] = np.round(axis_residual_rms(c), 3).tolist()
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
    out["residual_rms_yaw_pitch_deg"] = rms
    tt = per_dot(truth[["yaw_deg", "pitch_deg"]].to_numpy(float), t, sched, start, valid)
    out["per_dot_true_yaw_pitch"] = np.round(tt, 1).tolist()
    # the head rotation (smoothed as the estimate smooths it) per dot against the true gaze: the head is still
    R_s, _ = smooth_pose(kw["R"], kw["t"], kw["found"], kw["t_s"], kw["params"].head_smooth_ms)
    ang = per_dot(np.stack(pose_angles(R_s), axis=1), t, sched, start, valid)
    ang -= ang.mean(axis=0)
    slope = np.linalg.lstsq(tt - tt.mean(axis=0), ang, rcond=None)[0]
    out["head_rotation_per_10deg"] = np.round(10 * slope, 3).tolist()
    out["head_rotation_sd_between_dots"] = np.round(ang.std(axis=0), 3).tolist()
    return out


def main(argv) -> int:
    if argv[:1] == ["--points"]:
        print("\n".join(point_motion(argv[1:] or ["a", "b", "c"])))
        return 0
    if argv[:1] == ["--limbus"]:
        rows = []
        for n in argv[1:] or ["a", "b", "c"]:
            rows += limbus_candidates(n)
        for r in rows:
            print(json.dumps({k: round(v, 2) if isinstance(v, float) else v for k, v in r.items()}))
        print(json.dumps(limbus_summary(rows)))
        return 0
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
