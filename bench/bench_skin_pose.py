"""The head rotation from skin points followed on the picture (``--gaze head_rotation=skin``) against the face
mesh's PnP rotation (the default), on rendered dev clips no test uses, against the renderer's truth.

Clips (trials and seeds that tests/webcam/test_gaze_grid.py, test_gaze_rendered.py, bench/bench_gaze_grid.py and
tests/targets/test_rendered_targets.py do not use):

* ``target``: a known-target clip (aspectus.synth.target_gaze.render_target_clip), 1280 x 720, astronaut face,
  head still, schedule seed 7 (8 dots of 1.2 s, no sweep), render seed 4 - the test's clip is schedule seed 1,
  render seed 2;
* ``12px``: 640 x 480 H.264 CRF 28 at 550 mm (iris about 12 px), lids following, lighting drift, head drift and
  turns (the grid's defaults: yaw +-10, pitch +-4 deg), hopper face, eyes on Lund 2013 trial UH47, seed 11, 8 s;
* ``12px-b``: the same, astronaut face, trial UL31, seed 12;
* ``25px turns``: 1280 x 720 at 600 mm (iris about 25 px), gaze and head yaw over +-15 deg (head pitch +-5),
  the trajectory of tests/webcam/test_gaze_rendered.py with render seed 7 (the test: 3), hopper face; and
  ``25px turns-a``: the astronaut face;
* ``25px turns-2`` / ``25px turns-2a``: the same size, another trajectory (other periods and phases, gaze pitch
  +-12 deg; :func:`_other_turns`), render seed 9, hopper / astronaut face.

The face mesh runs once per clip; the per-frame geometry (:class:`aspectus.webcam.frame_geometry.FrameGeometry`)
is then run on the same landmarks and pictures with each head rotation, and the clip-level gaze estimate on
its record, exactly as the pipeline does. Printed per clip and variant:

* the head rotation's error against the rendered rotation (SD per axis of the rotation-vector error after the
  clip's median; the 300-ms smoothing applied as in the gaze estimate), and r of the head-pitch error with
  the true gaze pitch (a rotation that follows the eyes correlates);
* the eyeball centres' placement error: the picture position (sideways, vertical; mm at the true depth, after
  the clip's median) of the model's eyeball centres placed by the estimated pose against the same points
  placed by the rendered pose, SD, worse eye;
* the gaze figures of tests/_gaze_grid.py (RMS-S2S, yaw/pitch r and gain, fixation kappa against the coders)
  on the Lund clips; median and 90th-percentile error (after the clip's median, as in test_gaze_rendered.py)
  on the turning clips; on the target clip the known-target check's accuracy after offset+gain, what the eyes
  and noise alone imply, and the SD of the head pitch between the dots (median per rendered fixation);
* the geometry's CPU time per frame (``time.process_time`` around FrameGeometry.rows).

Head rotations measured (:data:`VARIANTS`, or ``skin`` with any of ``+modelplanes``, ``+warp``, ``+shape``,
``+anchors`` - the eye anchors' points on the face mesh's surface too, :meth:`FrameGeometry.place_anchors_on_mesh`):
``mesh``; ``skin`` (as ``head_rotation="skin"`` runs it); ``+modelplanes`` (the cut points on the face model's local
planes, as the option did before); ``+warp`` (each template matched in the picture resampled by the affine map the
local plane gives between the pose it was cut at and the predicted one); ``+shape`` (the skin points' depths
learnt from the clip by :func:`aspectus.webcam.skin_pose.refine_shape`, with its CPU per frame).

    python bench/bench_skin_pose.py            # all clips, some 10 minutes of CPU; or name clips: target 12px

``SKIN_BENCH_CACHE=DIR`` keeps the rendered clips and the face mesh's runs in DIR for the next run;
``SKIN_BENCH_VARIANTS=mesh,skin`` measures only those.
"""
from __future__ import annotations

import json
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))
sys.path.insert(0, str(ROOT / "tests" / "webcam"))

LUND = ROOT.parent / "shared" / "reference" / "lund2013" / "img"
CLIPS = ("target", "12px", "12px-b", "25px turns", "25px turns-a", "25px turns-2", "25px turns-2a")
#: the head rotations measured: the face mesh's PnP; the skin points as ``head_rotation="skin"`` runs them (each
#: cut point put on the face mesh's own surface of that frame); the same with the cut points on the face model's
#: local planes instead (``SkinPose(mesh_depth=False)``, the option before); with template matches warped by the
#: predicted pose (``SkinPose(warp=True)``); with the skin points' depths learnt from the clip
#: (``SkinPose(learn_shape=True)``), on the model's planes
VARIANTS = ("mesh", "skin", "skin+modelplanes", "skin+warp", "skin+modelplanes+shape")


def render(name: str, d: Path) -> dict:
    """Render one dev clip into ``d``; what the measurement needs about it."""
    from aspectus.synth.render import read_truth

    if name == "target":
        from aspectus.synth.target_gaze import render_target_clip
        from aspectus.targets.schedule import Screen, make_schedule

        sched = make_schedule(Screen(1280, 720, 344.0, 193.5, 600.0), seed=7, fixation_s=1.2, n_fixations=8,
                              pursuit_sweeps=0)
        res, tj = render_target_clip(d / "clip.mp4", sched, lead_in_s=1.5, tail_s=0.5, gain=(1.0, 1.0),
                                     offset_deg=(2.0, -2.0), size_px=(1280, 720), fov_deg=60.0, seed=4,
                                     face="astronaut")
        return {"path": res.path, "truth": read_truth(res.truth_path).reset_index(drop=True), "schedule": sched,
                "start_s": tj["flash_first_frame_t_s"], "events": pd.read_csv(d / "clip_truth_events.csv")}
    if name.startswith("12px"):
        import _gaze_grid as G

        trial, face, seed = ("UL31_img_konijntjes", "astronaut", 12) if name.endswith("-b") else \
            ("UH47_img_Europe", "hopper", 11)
        cond = G.Condition("clip", size_px=(640, 480), distance_mm=550.0, trial=trial, face=face, seed=seed,
                           duration_s=8.0)
        res, tr = G.render_condition(cond, d, LUND)
        return {"path": res.path, "truth": res.truth.reset_index(drop=True), "trial": tr}
    from test_gaze_rendered import _trajectory

    from aspectus.synth.render import render_clip

    if name.startswith("25px turns-2"):
        res = render_clip(d / "clip.mp4", _other_turns(), face="astronaut" if name.endswith("a") else "hopper",
                          size_px=(1280, 720), fps=30.0, seed=9)
        return {"path": res.path, "truth": res.truth.reset_index(drop=True)}
    res = render_clip(d / "clip.mp4", _trajectory(head=True), face="astronaut" if name.endswith("-a") else "hopper",
                      size_px=(1280, 720), fps=30.0, seed=7)
    return {"path": res.path, "truth": res.truth.reset_index(drop=True)}


def _other_turns(duration_s=6.0, rate=240.0):
    """A second turning trajectory no test uses: gaze over +-15 / +-12 deg, head yaw +-15 and pitch +-5 deg, with
    other periods and phases than test_gaze_rendered.py's."""
    from aspectus.synth.trajectory import Trajectory

    t = np.arange(int(duration_s * rate)) / rate
    df = pd.DataFrame({
        "t_s": t, "yaw_deg": 15 * np.sin(2 * np.pi * t / 3.7 + 0.3), "pitch_deg": 12 * np.sin(2 * np.pi * t / 2.6 + 1.2),
        "blink": False, "lid_closure": 0.0,
        "head_yaw_deg": 15 * np.sin(2 * np.pi * t / 4.3 + 2.0), "head_pitch_deg": 5 * np.sin(2 * np.pi * t / 3.3 + 0.7),
        "head_roll_deg": 0.0, "head_x_mm": 0.0, "head_y_mm": 0.0, "head_z_mm": 600.0,
    })
    empty = pd.DataFrame({c: [] for c in ("onset_s", "offset_s", "duration_ms", "yaw_deg", "pitch_deg",
                                          "amplitude_deg", "closure_onset_s", "closure_offset_s")})
    return Trajectory(samples=df, fixations=empty, saccades=empty, blinks=empty,
                      params={"rate_hz": rate, "duration_s": duration_s})


def landmarks(path):
    """The decoded frames and the face mesh's observations of them (the pipeline's own tracker)."""
    from aspectus.webcam.landmarks import FaceTracker
    from aspectus.webcam.video import iter_frames

    frs = list(iter_frames(path))
    with FaceTracker(max_faces=1) as tr:
        obs = [(tr.process(f.image), tr.faces_in_view) for f in frs]
    return frs, obs


def geometry(frs, obs, head_rotation: str):
    """The gaze estimator's inputs from the per-frame geometry (as extract_samples builds them), and its CPU
    time per frame (ms)."""
    from aspectus.webcam.frame_geometry import LIMBUS_DIAM, FrameGeometry, frame_item
    from aspectus.webcam.gaze import GazeParams

    skin = head_rotation.startswith("skin")
    items = [frame_item(f.pts_s, f.image, o, refine_iris=True, faces_in_view=n, skin_pose=skin)
             for f, (o, n) in zip(frs, obs)]
    geo = FrameGeometry(fov_deg=60.0, refine_iris=True, skin_pose=skin)
    if skin:  # "skin" as the option runs it; "+warp": warped template matches; "+shape": the shape learnt
        from aspectus.webcam.skin_pose import SkinPose

        geo.skin = SkinPose(learn_shape="+shape" in head_rotation, warp="+warp" in head_rotation,
                            mesh_depth="+modelplanes" not in head_rotation)
        if "+anchors" in head_rotation:
            geo.place_anchors_on_mesh()
    c0 = time.process_time()
    a = np.concatenate([geo.rows(items[i:i + 16]) for i in range(0, len(items), 16)])
    cpu_ms = (time.process_time() - c0) / len(items) * 1e3
    n = len(a)
    found = a[:, 1] > 0.5
    R = np.nan_to_num(a[:, 3:12]).reshape(n, 3, 3)
    R[~found] = np.eye(3)
    kw = dict(K=np.asarray(geo.solver.K), found=found, R=R, t=np.nan_to_num(a[:, 12:15], nan=1.0),
              iris_px=a[:, 15:19].reshape(n, 2, 2), iris_diam_px=a[:, 19:21],
              corners_px=a[:, 21:29].reshape(n, 2, 2, 2), ear=a[:, 29:31], t_s=a[:, 0],
              iris_mesh_px=a[:, 31:35].reshape(n, 2, 2), limbus_diam_px=a[:, LIMBUS_DIAM],
              params=GazeParams(head_rotation="skin" if skin else "mesh"))
    st = geo.state()
    if skin:
        st["refinements"] = geo.skin.refinements
        st["refine_cpu_ms_per_frame"] = geo.skin.refine_cpu_s / len(items) * 1e3
    return kw, cpu_ms, st


def samples_from(kw, frs) -> pd.DataFrame:
    from aspectus.webcam.gaze import estimate_gaze

    cols, info = estimate_gaze(**kw)
    t = kw["t_s"]
    df = pd.DataFrame({k: v for k, v in cols.items() if np.ndim(v) == 1 and len(v) == len(t)})
    df["t_s"] = t - t[0]
    return df, info


def head_errors(kw, info, truth, ok) -> dict:
    from scipy.spatial.transform import Rotation

    from aspectus.synth.frame import head_rotation
    from aspectus.webcam.gaze import smooth_pose
    from aspectus.webcam.headpose import face_model, pose_angles

    R, t = smooth_pose(kw["R"], kw["t"], kw["found"], kw["t_s"], 300.0)
    Rt = np.stack([head_rotation(*r) for r in truth[["head_yaw_deg", "head_pitch_deg", "head_roll_deg"]].to_numpy()])
    R0 = Rotation.from_matrix(np.einsum("nji,njk->nik", Rt[ok], R[ok])).mean().as_matrix()
    w = np.degrees(Rotation.from_matrix(np.einsum("nij,nkj->nik", R, Rt @ R0)).as_rotvec())
    w -= np.median(w[ok], axis=0)
    e_pitch = pose_angles(R)[1] - truth["head_pitch_deg"].to_numpy()
    r_gaze = float(np.corrcoef(e_pitch[ok], truth["pitch_deg"].to_numpy()[ok])[0, 1])
    s = info["model_scale"]
    T = truth[["head_x_mm", "head_y_mm", "head_z_mm"]].to_numpy()
    m = face_model()
    sd = []
    for e in (m.eye_right_mm, m.eye_left_mm):
        est = (R @ e + t) * s
        tru = (Rt @ R0 @ e) * s + T
        err = (est[:, :2] / est[:, 2:3] - tru[:, :2] / tru[:, 2:3]) * tru[:, 2:3]
        err = err[ok] - np.median(err[ok], axis=0)
        sd.append(err.std(axis=0))
    return {"rot_err_sd_deg": np.round(w[ok].std(axis=0), 2).tolist(), "r_head_pitch_err_gaze_pitch": round(r_gaze, 2),
            "eye_centre_err_sd_mm": np.round(np.max(sd, axis=0), 2).tolist()}


def measure(name, clip, frs, obs, how) -> dict:
    kw, cpu, st = geometry(frs, obs, how)
    s, info = samples_from(kw, frs)
    truth = clip["truth"]
    ok = s["valid"].to_numpy(bool) & kw["found"]
    out = {"cpu_ms_per_frame": round(cpu, 2)}
    if how.startswith("skin"):
        out["skin_frames_solved_fallback"] = [st["skin_pose_frames"], st["skin_pose_fallback_frames"]]
        if "+shape" in how:
            out["shape_refinements"] = st["refinements"]
            out["refine_cpu_ms_per_frame"] = round(st["refine_cpu_ms_per_frame"], 2)
    out |= head_errors(kw, info, truth, ok)
    if "trial" in clip:
        import _gaze_grid as G

        m = G.measure(s, truth, clip["trial"])
        out |= {k: round(m[k], 3) for k in ("rms_s2s_deg", "yaw_r", "yaw_gain", "pitch_r", "pitch_gain", "kappa")}
    else:
        ey = (s["yaw_deg"].to_numpy() - truth["yaw_deg"].to_numpy())[ok]
        ep = (s["pitch_deg"].to_numpy() - truth["pitch_deg"].to_numpy())[ok]
        err = np.hypot(ey - np.median(ey), ep - np.median(ep))
        out |= {"median_err_deg": round(float(np.median(err)), 2), "p90_err_deg": round(float(np.percentile(err, 90)), 2)}
    if "schedule" in clip:
        from aspectus.synth.render import read_truth  # noqa: F401 - the truth is read in render()
        from aspectus.targets.analysis import check_samples
        from aspectus.webcam.gaze import smooth_pose
        from aspectus.webcam.headpose import pose_angles

        chk = check_samples(s, clip["schedule"], start_s=clip["start_s"], run_events=False)
        ideal = check_samples(truth.assign(valid=True), clip["schedule"], start_s=clip["start_s"], run_events=False)
        R, _ = smooth_pose(kw["R"], kw["t"], kw["found"], kw["t_s"], 300.0)
        hp, t = pose_angles(R)[1], s["t_s"].to_numpy()
        med = []
        for r in clip["events"].query("type == 'fixation'").itertuples():
            w = (t >= r.onset_s + 0.1) & (t < r.offset_s) & ok
            if w.sum() >= 5:
                med.append(np.median(hp[w]))
        out |= {"check_accuracy_offset_gain_deg": round(chk.summary["accuracy_offset_gain_deg"], 3),
                "eyes_and_noise_deg": round(ideal.summary["accuracy_offset_gain_deg"]
                                            + chk.summary["accuracy_noise_floor_deg"], 3),
                "head_pitch_sd_between_dots_deg": round(float(np.std(med)), 3)}
    return out


def main(argv) -> int:
    names = argv or list(CLIPS)
    unknown = [n for n in names if n not in CLIPS]
    if unknown:
        print(f"unknown clip(s) {unknown}; choose from {list(CLIPS)}", file=sys.stderr)
        return 2
    if not LUND.is_dir():
        print(f"the hand-coded recordings are not at {LUND}", file=sys.stderr)
        return 2
    import os
    import pickle

    cache = os.environ.get("SKIN_BENCH_CACHE")  # a folder to keep the rendered clips and face-mesh runs in
    for name in names:
        hit = Path(cache) / (name.replace(" ", "_") + ".pkl") if cache else None
        if hit is not None and hit.exists():
            from aspectus.webcam.video import iter_frames

            clip, obs = pickle.loads(hit.read_bytes())
            frs = list(iter_frames(clip["path"]))
        else:
            d = Path(tempfile.mkdtemp(prefix="skin_pose_", dir=cache))
            clip = render(name, d)
            frs, obs = landmarks(clip["path"])
            if hit is not None:
                hit.write_bytes(pickle.dumps((clip, obs)))
        print(f"{name}: iris {clip['truth']['iris_diameter_px'].median():.1f} px, {len(frs)} frames", flush=True)
        for how in os.environ.get("SKIN_BENCH_VARIANTS", ",".join(VARIANTS)).split(","):
            print(f"  {how:4s} {json.dumps(measure(name, clip, frs, obs, how))}", flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
