"""Rendered test clips: trajectories, geometry, the written clip and its truth, and what the face mesh sees."""
from __future__ import annotations

import json
import threading

import numpy as np
import pandas as pd
import pytest

from aspectus.atomic import sha256_file
from aspectus.errors import Cancelled, ParameterError
from aspectus.synth.render import Trajectory, read_truth, render_clip, saccade_duration_ms, synth_trajectory
from aspectus.synth.frame import EYEBALL_RADIUS_MM, IRIS_PLANE_RADIUS_MM, Camera, gaze_vector, head_rotation

av = pytest.importorskip("av")

SMALL = (640, 360)


def _decode(path):
    """Frames (RGB), times (s) and rotation tags of a clip, through PyAV."""
    frames, times, rots = [], [], set()
    with av.open(str(path)) as c:
        for f in c.decode(video=0):
            frames.append(f.to_ndarray(format="rgb24"))
            times.append(float(f.pts * f.time_base))
            rots.add(f.rotation)
    return frames, np.array(times), rots


def _steps(segments, *, rate_hz=240.0, **cols):
    """A hand-made trajectory: ``segments`` = [(duration_s, yaw_deg, pitch_deg, lid_closure), ...]."""
    rows = []
    t0 = 0.0
    for dur, yaw, pitch, closure in segments:
        t = np.arange(int(round(dur * rate_hz))) / rate_hz + t0
        rows.append(pd.DataFrame({"t_s": t, "yaw_deg": yaw, "pitch_deg": pitch, "lid_closure": closure}))
        t0 += dur
    df = pd.concat(rows, ignore_index=True)
    for k, v in cols.items():
        df[k] = v
    return Trajectory.from_samples(df)


# ----------------------------------------------------------------------------- trajectories
def test_trajectory_is_reproducible_and_seed_dependent():
    a = synth_trajectory(duration_s=3, seed=5)
    b = synth_trajectory(duration_s=3, seed=5)
    c = synth_trajectory(duration_s=3, seed=6)
    pd.testing.assert_frame_equal(a.samples, b.samples)
    assert not np.allclose(a.samples["yaw_deg"], c.samples["yaw_deg"])
    assert a.samples["t_s"].iloc[-1] == pytest.approx(3.0)
    assert np.allclose(np.diff(a.samples["t_s"]), 1 / 240)


def test_fixation_durations_and_saccades_follow_the_literature():
    tr = synth_trajectory(duration_s=60, seed=1, task="scene", blink_rate_per_min=0)
    fx = tr.fixations.iloc[:-1]  # the last one is cut by the end of the clip
    # mean fixation about 250-330 ms in scene viewing (Rayner 1998 - field notes, from memory)
    assert 220 <= fx["duration_ms"].mean() <= 340
    assert fx["duration_ms"].min() >= 80 - 1e-9
    sc = tr.saccades.iloc[:-1]
    # main sequence: 2.2 ms/deg * amplitude + 21 ms (field notes, from memory)
    assert np.allclose(sc["duration_ms"], saccade_duration_ms(sc["amplitude_deg"]), atol=1e-6)
    # the gaze really travels that far during each saccade, with its peak speed mid-way
    s = tr.samples
    t, yaw, pitch = s["t_s"].to_numpy(), s["yaw_deg"].to_numpy(), s["pitch_deg"].to_numpy()
    speed = np.hypot(np.gradient(yaw, t), np.gradient(pitch, t))
    for on, off, amp in sc[["onset_s", "offset_s", "amplitude_deg"]].to_numpy()[:20]:
        i0, i1 = np.searchsorted(t, on), np.searchsorted(t, off)
        travelled = np.hypot(yaw[i1] - yaw[i0 - 1], pitch[i1] - pitch[i0 - 1])
        assert travelled == pytest.approx(amp, abs=0.6)  # drift of both fixations included
        peak = t[i0 + np.argmax(speed[i0:i1])]
        assert abs(peak - 0.5 * (on + off)) < 0.25 * (off - on) + 1 / 240


def test_reading_moves_rightward_in_small_steps_with_return_sweeps():
    tr = synth_trajectory(duration_s=30, seed=2, task="reading", amplitude_deg=8)
    fx = tr.fixations
    d = np.diff(fx["yaw_deg"].to_numpy())
    forward = d[d > 0]
    assert (d > 0).mean() > 0.7  # mostly towards larger yaw = the reader's right (schema frame)
    assert 1.8 <= np.median(forward) <= 3.2
    sweeps = d[d < -8]
    assert len(sweeps) >= 3
    # after a return sweep the next line is lower (pitch down) or the page starts again at the top
    assert fx["yaw_deg"].between(-8.5, 8.5).all()


def test_blinks_close_the_lids_at_about_the_asked_rate():
    tr = synth_trajectory(duration_s=120, seed=3, blink_rate_per_min=15)
    n = len(tr.blinks)
    # a Poisson rate of 15/min with a 1 s refractory time and 0.3 s lid movement: about 23 blinks in 120 s
    assert 12 <= n <= 36
    # half-closed spans of 115-230 ms (blink duration 100-400 ms is common practice, from memory)
    assert tr.blinks["duration_ms"].between(110, 235).all()
    s = tr.samples
    for on, off in tr.blinks[["onset_s", "offset_s"]].to_numpy():
        inside = s["t_s"].between(on + 0.005, off - 0.005)
        assert s.loc[inside, "blink"].all()
        assert s.loc[inside, "lid_closure"].max() == pytest.approx(1.0, abs=0.05)
    assert s["lid_closure"].between(0, 1).all()
    assert s["blink"].sum() / 240 == pytest.approx(tr.blinks["duration_ms"].sum() / 1000, rel=0.05)


def test_head_motion_leaves_the_gaze_truth_unchanged():
    still = synth_trajectory(duration_s=8, seed=4)
    moving = synth_trajectory(duration_s=8, seed=4, head_motion=True)
    np.testing.assert_allclose(moving.samples["yaw_deg"], still.samples["yaw_deg"])
    assert (still.samples["head_yaw_deg"] == 0).all() and (still.samples["head_z_mm"] == 600).all()
    hy = moving.samples["head_yaw_deg"]
    assert hy.abs().max() <= 15 + 1e-9 and hy.std() > 1.0
    assert moving.samples["head_z_mm"].between(500, 700).all()


@pytest.mark.parametrize("kwargs, word", [
    ({"duration_s": 0}, "duration_s"),
    ({"duration_s": 2, "task": "browsing"}, "task"),
    ({"duration_s": 2, "head_motion": {"spin_deg": 3}}, "spin_deg"),
    ({"duration_s": 2, "rate_hz": -5}, "rate_hz"),
    ({"duration_s": float("nan")}, "duration_s"),
])
def test_trajectory_rejects_bad_parameters(kwargs, word):
    with pytest.raises(ParameterError, match=word):
        synth_trajectory(**kwargs)


def test_trajectory_from_table_checks_its_input():
    with pytest.raises(ParameterError, match="pitch_deg"):
        Trajectory.from_samples(pd.DataFrame({"t_s": [0, 1], "yaw_deg": [0, 0]}))
    with pytest.raises(ParameterError, match="increasing"):
        Trajectory.from_samples(pd.DataFrame({"t_s": [0, 1, 1], "yaw_deg": 0, "pitch_deg": 0}))
    with pytest.raises(ParameterError, match="row 2"):
        Trajectory.from_samples(pd.DataFrame({"t_s": [0, 1], "yaw_deg": [0, np.nan], "pitch_deg": 0}))


def test_trajectory_without_lid_or_head_columns_renders(tmp_path):
    t = np.arange(0, 0.5, 1 / 240)
    bare = Trajectory(samples=pd.DataFrame({"t_s": t, "yaw_deg": 0.0, "pitch_deg": 0.0, "blink": t > 0.3}),
                      fixations=pd.DataFrame())
    res = render_clip(tmp_path / "bare.mp4", bare, size_px=SMALL)
    assert res.truth["blink"].tolist() == (res.truth["t_s"] > 0.3).tolist()
    assert (res.truth["head_z_mm"] == 600).all()


# ----------------------------------------------------------------------------- geometry
def test_gaze_vector_and_head_rotation_use_the_schema_frame():
    # schema.py: yaw = atan2(-gx, -gz), pitch = atan2(-gy, hypot(gx, gz)); (0, 0, -1) looks at the camera
    np.testing.assert_allclose(gaze_vector(0, 0), [0, 0, -1], atol=1e-12)
    g = gaze_vector(20, 0)
    assert g[0] < 0  # subject's right = camera -x = picture left
    g = gaze_vector(0, 15)
    assert g[1] < 0  # up = camera -y
    for yaw, pitch in [(12.0, -7.0), (-30.0, 25.0)]:
        g = gaze_vector(yaw, pitch)
        assert np.degrees(np.arctan2(-g[0], -g[2])) == pytest.approx(yaw)
        assert np.degrees(np.arctan2(-g[1], np.hypot(g[0], g[2]))) == pytest.approx(pitch)
        R = head_rotation(yaw, pitch, 0.0)
        np.testing.assert_allclose(R @ [0, 0, -1], g, atol=1e-12)  # the face normal turns like a gaze
        np.testing.assert_allclose(R @ R.T, np.eye(3), atol=1e-12)
    up = head_rotation(0, 0, 10) @ [0, -1, 0]
    assert up[0] < 0  # roll > 0: head top towards the subject's right shoulder (picture left)


def test_eyelids_follow_vertical_gaze():
    from aspectus.synth.face import LEFT_EYE_CONTOUR, RIGHT_EYE_CONTOUR, load_face
    from aspectus.synth.frame import FaceRig

    rig = FaceRig(load_face("hopper"), Camera(640, 360), background=np.zeros((360, 640, 3), np.uint8))
    R = np.eye(3)
    T = rig.rest_origin_mm
    rest, _ = rig.pose(R, T)
    up, _ = rig.pose(R, T, eye_pitch_deg=15.0)
    down, _ = rig.pose(R, T, eye_pitch_deg=-15.0)
    np.testing.assert_allclose(rig.camera.project(rest), rig.rest_uv, atol=1e-6)  # rest pose = the photo
    for ids in (RIGHT_EYE_CONTOUR, LEFT_EYE_CONTOUR):
        top = ids[12]  # middle of the upper lid
        travel = EYEBALL_RADIUS_MM * np.sin(np.radians(15))
        assert rest[top, 1] - up[top, 1] == pytest.approx(0.8 * travel, rel=0.05)  # rises (camera -y)
        assert down[top, 1] - rest[top, 1] == pytest.approx(0.8 * travel, rel=0.05)
        assert np.allclose(up[ids[0]], rest[ids[0]]) and np.allclose(up[ids[8]], rest[ids[8]])  # corners stay
    others = np.setdiff1d(np.arange(478), RIGHT_EYE_CONTOUR + LEFT_EYE_CONTOUR)
    np.testing.assert_allclose(up[others], rest[others])


def test_skin_below_the_lower_lids_can_follow_them():
    """``lower_skin_follow`` moves the rings of skin below each lower lid with vertical gaze, less further down."""
    from aspectus.webcam.eye_anchors import ANCHOR_SETS
    from aspectus.synth.face import LEFT_EYE_CONTOUR, RIGHT_EYE_CONTOUR, load_face
    from aspectus.synth.frame import LOWER_SKIN_RINGS, FaceRig

    face, bg = load_face("hopper"), np.zeros((360, 640, 3), np.uint8)
    still = FaceRig(face, Camera(640, 360), background=bg)
    moving = FaceRig(face, Camera(640, 360), background=bg, lower_skin_follow=1.0)
    R, T = np.eye(3), still.rest_origin_mm
    down_still, _ = still.pose(R, T, eye_pitch_deg=-15.0)
    down, _ = moving.pose(R, T, eye_pitch_deg=-15.0)
    rest, _ = moving.pose(R, T)
    lid_travel = 0.3 * EYEBALL_RADIUS_MM * np.sin(np.radians(15))  # the lower lid's middle, looking down
    for e, lid in (("right", RIGHT_EYE_CONTOUR), ("left", LEFT_EYE_CONTOUR)):
        assert down[lid[4], 1] - rest[lid[4], 1] == pytest.approx(lid_travel, rel=0.02)
        for ring, share in zip(LOWER_SKIN_RINGS[e], (1.0, 0.5, 0.25)):
            assert down[ring[4], 1] - rest[ring[4], 1] == pytest.approx(share * lid_travel, rel=0.02)
            assert np.allclose(down[[ring[0], ring[-1]]], rest[[ring[0], ring[-1]]])  # ends stay
            np.testing.assert_allclose(down_still[list(ring)], rest[list(ring)])  # the default: skin still
    assert set(ANCHOR_SETS["below"]) <= set(LOWER_SKIN_RINGS["right"][1] + LOWER_SKIN_RINGS["left"][1])
    # the anchors beside the eyes are the outer ends of the second and third rings, which stay
    ends = {ring[0] for e in ("right", "left") for ring in LOWER_SKIN_RINGS[e][1:]}
    assert set(ANCHOR_SETS["below_and_beside"]) - set(ANCHOR_SETS["below"]) == ends
    with pytest.raises(ValueError, match="lower_skin_follow"):
        FaceRig(face, Camera(640, 360), background=bg, lower_skin_follow=2.0)


def test_the_whole_head_turns_with_the_face():
    """Hair, ears and headwear beyond the face outline ride on the head shell, behind the outline."""
    from aspectus.synth.face import load_face
    from aspectus.synth.frame import FACE_OVAL, FaceRig

    cam = Camera(640, 360)
    rig = FaceRig(load_face("hopper"), cam, background=np.full((360, 640, 3), 128, np.uint8))
    shell = rig.rest_shell_mm
    assert len(shell) >= 40
    oval = rig.rest_mesh_mm[list(FACE_OVAL)]
    # the shell is no nearer the camera than the face outline it continues, and the neck below the chin stays
    assert shell[:, 2].min() >= oval[:, 2].min() - 1e-6
    assert shell[:, 1].max() < rig.rest_mesh_mm[152, 1]
    R, T = head_rotation(12.0, 0.0, 0.0), rig.rest_origin_mm
    np.testing.assert_allclose(cam.project(rig.shell_mm(np.eye(3), T)), rig.rest_shell_uv, atol=1e-6)
    img, _ = rig.render(R=R, T_mm=T, gaze=gaze_vector(0, 0), closure=0.0)
    uv, uv0 = cam.project(rig.shell_mm(R, T)), rig.rest_shell_uv

    def colour(im, p):
        i = np.clip(np.floor(p).astype(int), 0, [639, 359])
        return im[i[:, 1], i[:, 0]].astype(float)

    assert np.median(np.linalg.norm(uv - uv0, axis=1)) > 5.0  # a 12 deg turn moves the hair several pixels
    carried = np.median(np.abs(colour(img, uv) - colour(rig.base, uv0)).mean(axis=1))
    left_behind = np.median(np.abs(colour(img, uv) - colour(rig.base, uv)).mean(axis=1))
    # what the photograph showed at a shell point is found where that point went (measured 5 grey levels,
    # against 25 had the picture stayed where it was)
    assert carried < 10.0 and left_behind > 2 * carried


def test_mesh_warp_draws_the_nearer_surface_and_culls_back_faces():
    from aspectus.synth.frame import _mesh_warp_grid

    src = np.array([[0, 0], [40, 0], [0, 40], [100, 0], [140, 0], [100, 40]], float)
    simp = np.array([[0, 1, 2], [3, 4, 5]])
    dst = src.copy()
    dst[3:] -= [100, 0]  # the second triangle is moved onto the first
    for near, expect_x in ((0, 5.0), (1, 105.0)):
        depth = np.full(6, 500.0)
        depth[3 * near:3 * near + 3] = 400.0
        m = _mesh_warp_grid(src, dst, simp, depth, x0=0, y0=0, nx=20, ny=20, step_px=2)
        assert m[2, 2, 0] == pytest.approx(expect_x)  # node at (5, 5) shows the nearer triangle's texture
    flipped = dst.copy()
    flipped[3:] = [[0, 0], [0, 40], [40, 0]]  # mirrored: seen from behind
    depth = np.r_[np.full(3, 500.0), np.full(3, 400.0)]
    m = _mesh_warp_grid(src, flipped, simp, depth, x0=0, y0=0, nx=20, ny=20, step_px=2)
    assert m[2, 2, 0] == pytest.approx(5.0)  # the back-facing triangle is not drawn


def test_camera_projection():
    cam = Camera(1280, 720, 60.0)
    assert cam.focal_px == pytest.approx(640 / np.tan(np.radians(30)))
    np.testing.assert_allclose(cam.project(np.array([[0.0, 0.0, 600.0]])), [[640, 360]])
    # 11.7 mm at 588 mm is about 22 px wide at 720p with a 60 deg field of view
    assert cam.focal_px * 11.7 / 588 == pytest.approx(22.0, abs=0.3)


# ----------------------------------------------------------------------------- the clip and its truth
@pytest.fixture(scope="module")
def plain_clip(tmp_path_factory):
    d = tmp_path_factory.mktemp("render")
    tr = synth_trajectory(duration_s=1.0, seed=9, task="scene", head_motion=True)
    return render_clip(d / "plain.mp4", tr, size_px=SMALL, noise_sd=1.0, seed=9), tr


def test_truth_matches_the_decoded_clip(plain_clip):
    res, tr = plain_clip
    frames, times, rots = _decode(res.path)
    truth = read_truth(res.truth_path)
    assert len(frames) == res.frames == len(truth) == 30
    assert frames[0].shape == (360, 640, 3)
    np.testing.assert_allclose(times, truth["pts_s"], atol=1e-6)
    np.testing.assert_allclose(truth["t_s"], np.arange(30) / 30.0, atol=1e-6)  # written with 6 decimals
    assert rots == {0}
    # the truth is the trajectory at the frame times
    np.testing.assert_allclose(truth["yaw_deg"], np.interp(res.truth["t_s"], tr.samples["t_s"], tr.samples["yaw_deg"]),
                               atol=1e-6)
    meta = json.loads(res.truth_json_path.read_text())
    assert meta["clip_sha256"] == sha256_file(res.path)
    assert meta["frames"] == 30 and meta["size_px"] == [640, 360] and meta["fov_deg"] == 60.0
    assert meta["focal_px"] == pytest.approx(320 / np.tan(np.radians(30)))
    hi = pd.read_csv(res.truth_hi_path)
    assert len(hi) == len(tr.samples) and {"t_s", "yaw_deg", "pitch_deg", "blink"} <= set(hi.columns)
    ev = pd.read_csv(res.truth_events_path)
    assert set(ev["type"]) <= {"fixation", "saccade", "blink"} and (ev["type"] == "fixation").any()


def test_truth_iris_positions_follow_the_eyeball_geometry(tmp_path):
    tr = _steps([(0.2, 0, 0, 0), (0.2, 15, 0, 0), (0.2, 0, 12, 0)])
    res = render_clip(tmp_path / "geo.mp4", tr, size_px=SMALL, noise_sd=0)
    t = res.truth
    a, b, c = t.iloc[2], t.iloc[8], t.iloc[14]
    f = res.focal_px
    for eye in ("right", "left"):
        dx = b[f"{eye}_iris_x_px"] - a[f"{eye}_iris_x_px"]
        dy = c[f"{eye}_iris_y_px"] - a[f"{eye}_iris_y_px"]
        z = a["distance_mm"]
        # the iris disc's centre turns on a 10.5 mm radius (its rim on the 12 mm eyeball)
        assert IRIS_PLANE_RADIUS_MM == pytest.approx(np.sqrt(12.0 ** 2 - 5.85 ** 2))
        assert dx == pytest.approx(-f * IRIS_PLANE_RADIUS_MM * np.sin(np.radians(15)) / z, rel=0.05)
        assert dy == pytest.approx(-f * IRIS_PLANE_RADIUS_MM * np.sin(np.radians(12)) / z, rel=0.05)
    # the right eye is on the picture's left, about 60 mm apart (mediapipe's iris scale, brief)
    ipd_px = a["left_iris_x_px"] - a["right_iris_x_px"]
    assert ipd_px * a["distance_mm"] / f == pytest.approx(60, abs=6)
    assert a["iris_diameter_px"] == pytest.approx(f * 11.7 / a["distance_mm"])


def test_variable_frame_times_survive_the_container(tmp_path):
    rng = np.random.default_rng(0)
    times = np.concatenate([[0.0], np.cumsum(rng.uniform(0.02, 0.06, 30))])
    times = times[times < 1.0]
    tr = synth_trajectory(duration_s=1.0, seed=1)
    res = render_clip(tmp_path / "vfr.mkv", tr, size_px=SMALL, frame_times_s=times)
    _, decoded, _ = _decode(res.path)
    assert len(decoded) == len(times)
    np.testing.assert_allclose(decoded, times, atol=5e-4)  # matroska keeps milliseconds
    np.testing.assert_allclose(decoded, res.truth["pts_s"], atol=1e-9)  # and the truth says what it stored
    res2 = render_clip(tmp_path / "vfr.mp4", tr, size_px=SMALL, frame_times_s=times)
    _, decoded2, _ = _decode(res2.path)
    np.testing.assert_allclose(decoded2, times, atol=1e-5)
    np.testing.assert_allclose(res2.truth["t_s"], times)


def test_rotation_tag_is_reported_and_undoes_the_stored_rotation(tmp_path):
    tr = synth_trajectory(duration_s=0.3, seed=1)
    up = render_clip(tmp_path / "up.mp4", tr, size_px=SMALL, noise_sd=0, crf=18)
    rot = render_clip(tmp_path / "rot.mp4", tr, size_px=SMALL, noise_sd=0, crf=18, rotation_deg=90)
    fu, _, ru = _decode(up.path)
    fr, _, rr = _decode(rot.path)
    assert ru == {0} and rr == {90}
    assert fr[0].shape == (640, 360, 3)  # stored portrait
    turned = np.rot90(fr[0], k=1)  # apply the tag: 90 deg counter-clockwise
    assert turned.shape == fu[0].shape
    err = np.abs(turned.astype(float) - fu[0]).mean()
    wrong = np.abs(np.rot90(fr[0], k=-1).astype(float) - fu[0]).mean()
    assert err < 3.0 < wrong
    assert json.loads(rot.truth_json_path.read_text())["stored_size_px"] == [360, 640]


def test_hidden_face_darkness_and_noise(tmp_path):
    tr = synth_trajectory(duration_s=0.4, seed=2, blink_rate_per_min=0)
    vis = np.ones(12, bool)
    vis[6:] = False
    res = render_clip(tmp_path / "hide.mp4", tr, size_px=SMALL, noise_sd=0, face_visible=vis, crf=18)
    frames, _, _ = _decode(res.path)
    centre = (slice(120, 240), slice(240, 400))
    face_c, empty_c = frames[2][centre].astype(float), frames[8][centre].astype(float)
    assert np.abs(face_c - empty_c).mean() > 20  # the face is gone
    assert empty_c.std(axis=(0, 1)).max() < 6  # plain wall
    assert not res.truth["face_visible"].iloc[6:].any()
    assert res.truth["right_iris_x_px"].iloc[6:].isna().all() and res.truth["right_iris_x_px"].iloc[:6].notna().all()

    dark = render_clip(tmp_path / "dark.mp4", tr, size_px=SMALL, noise_sd=0, darkness=0.4, crf=18)
    fd, _, _ = _decode(dark.path)
    ratio = fd[2].astype(float).mean() / frames[2].astype(float).mean()
    assert ratio == pytest.approx(0.4, abs=0.05)

    noisy = render_clip(tmp_path / "noisy.mp4", tr, size_px=SMALL, noise_sd=12, crf=18)
    fn, _, _ = _decode(noisy.path)
    wall = (slice(5, 60), slice(5, 60))  # background corner
    sd_clean = (frames[3][wall].astype(float) - frames[4][wall]).std()
    sd_noisy = (fn[3][wall].astype(float) - fn[4][wall]).std()
    assert sd_noisy > 4 * max(sd_clean, 0.5)


def test_mpeg4_in_avi(tmp_path):
    tr = synth_trajectory(duration_s=0.5, seed=1)
    res = render_clip(tmp_path / "old.avi", tr, size_px=SMALL, codec="mpeg4", bitrate_kbps=800, fps=20)
    frames, times, _ = _decode(res.path)
    assert len(frames) == res.frames == 10
    np.testing.assert_allclose(times, np.arange(10) / 20, atol=1e-6)
    with pytest.raises(ParameterError, match="variable frame"):
        render_clip(tmp_path / "vfr.avi", tr, size_px=SMALL, frame_times_s=[0.0, 0.03, 0.07])


def test_lids_can_stay_still():
    """``lid_follow=0``: the lids keep their place whatever the eyes do; 0.5 moves them half as far as 1."""
    from aspectus.synth.face import RIGHT_EYE_CONTOUR, load_face
    from aspectus.synth.frame import FaceRig

    face, bg = load_face("hopper"), np.zeros((360, 640, 3), np.uint8)
    R = np.eye(3)
    tops = {}
    for follow in (0.0, 0.5, 1.0):
        rig = FaceRig(face, Camera(640, 360), background=bg, lid_follow=follow)
        rest, _ = rig.pose(R, rig.rest_origin_mm)
        up, _ = rig.pose(R, rig.rest_origin_mm, eye_pitch_deg=15.0)
        tops[follow] = rest[RIGHT_EYE_CONTOUR[12], 1] - up[RIGHT_EYE_CONTOUR[12], 1]
    assert tops[0.0] == 0.0
    assert tops[0.5] == pytest.approx(0.5 * tops[1.0]) and tops[1.0] > 1.0  # mm
    with pytest.raises(ParameterError, match="lid_follow"):
        FaceRig(face, Camera(640, 360), background=bg, lid_follow=1.5)


def test_glasses_rims_sit_before_the_eyes_and_are_drawn(tmp_path):
    from aspectus.synth.face import load_face
    from aspectus.synth.frame import FaceRig

    cam = Camera(640, 360)
    rig = FaceRig(load_face("astronaut"), cam, background=np.zeros((360, 640, 3), np.uint8), glasses=True)
    R, T = head_rotation(10, 0, 0), rig.rest_origin_mm
    rims = rig.glasses_rims_mm(R, T)
    _, eyes = rig.pose(R, T)
    for e in ("right", "left"):
        centre = rims[e].mean(axis=0)
        assert np.linalg.norm(centre - eyes[e]) == pytest.approx(np.hypot(2.0, 24.0), abs=1e-6)
        assert (R.T @ (centre - eyes[e]))[2] == pytest.approx(-24.0)  # in front of the eye (towards the camera)
        rim_uv = cam.project(rims[e])
        iris_uv = cam.project(eyes[e][None] + np.array([[0, 0, -IRIS_PLANE_RADIUS_MM]]))[0]
        inside = (rim_uv.min(axis=0) < iris_uv) & (iris_uv < rim_uv.max(axis=0))
        assert inside.all()  # the iris is seen through the lens
    tr = synth_trajectory(duration_s=0.2, seed=1, blink_rate_per_min=0)
    plain = render_clip(tmp_path / "plain.mp4", tr, face="astronaut", size_px=SMALL, noise_sd=0, crf=18)
    specs = render_clip(tmp_path / "specs.mp4", tr, face="astronaut", size_px=SMALL, noise_sd=0, crf=18, glasses=True)
    fp, fs = _decode(plain.path)[0][2].astype(float), _decode(specs.path)[0][2].astype(float)
    rim = np.round(rig.camera.project(rig.glasses_rims_mm(np.eye(3), rig.rest_origin_mm)["right"])).astype(int)
    on_rim = [(y, x) for x, y in rim if 0 <= y < 360 and 0 <= x < 640]
    dark = np.mean([fp[y, x].mean() - fs[y, x].mean() for y, x in on_rim])
    assert dark > 40  # the rim darkens the picture where it runs
    assert json.loads(specs.truth_json_path.read_text())["glasses"] is True


def test_lighting_drift_and_gradient(tmp_path):
    tr = synth_trajectory(duration_s=6.0, seed=1, blink_rate_per_min=0)
    times = np.arange(0, 6.0, 0.5)
    flat = render_clip(tmp_path / "flat.mp4", tr, size_px=(320, 180), noise_sd=0, crf=12, frame_times_s=times)
    lit = render_clip(tmp_path / "lit.mp4", tr, size_px=(320, 180), noise_sd=0, crf=12, frame_times_s=times,
                      lighting_drift=0.2, lighting_gradient=0.4, seed=4)
    ff, fl = _decode(flat.path)[0], _decode(lit.path)[0]
    left, right = (slice(0, 40), slice(2, 12)), (slice(0, 40), slice(308, 318))  # wall at both edges, top
    ratio_lr = [fl[i][left].mean() / fl[i][right].mean() / (ff[i][left].mean() / ff[i][right].mean())
                for i in range(len(times))]
    level = [(fl[i][left].mean() + fl[i][right].mean()) / (ff[i][left].mean() + ff[i][right].mean())
             for i in range(len(times))]
    # left edge (1 + 0.2 L) / right edge (1 - 0.2 L) with L the light level (0.8-1.2)
    assert 1.3 < min(ratio_lr) and max(ratio_lr) < 1.7
    assert np.ptp(level) > 0.1 and 0.75 < min(level) and max(level) < 1.25  # it drifts, within +-20 %
    with pytest.raises(ParameterError, match="lighting_drift"):
        render_clip(tmp_path / "bad.mp4", tr, size_px=(320, 180), lighting_drift=0.9)


def test_mirrored_picture(tmp_path):
    tr = synth_trajectory(duration_s=0.3, seed=1, blink_rate_per_min=0)
    kw = dict(size_px=SMALL, noise_sd=0, crf=12)
    plain = render_clip(tmp_path / "plain.mp4", tr, **kw)
    mirrored = render_clip(tmp_path / "mirror.mp4", tr, mirror=True, **kw)
    fp, fm = _decode(plain.path)[0][3].astype(float), _decode(mirrored.path)[0][3].astype(float)
    assert np.abs(fp[:, ::-1] - fm).mean() < 2.0 < np.abs(fp - fm).mean()
    for e in ("right", "left"):
        np.testing.assert_allclose(mirrored.truth[f"{e}_iris_x_px"], SMALL[0] - plain.truth[f"{e}_iris_x_px"])
    assert (mirrored.truth["right_iris_x_px"] > mirrored.truth["left_iris_x_px"]).all()
    np.testing.assert_allclose(mirrored.truth["yaw_deg"], plain.truth["yaw_deg"])  # the subject's own angles


def test_mpeg4_in_mp4(tmp_path):
    """MPEG-4 part 2 keeps its time base in 16 bits: the writer used the 1/90000 s clock and FFmpeg refused it."""
    tr = synth_trajectory(duration_s=0.5, seed=1)
    res = render_clip(tmp_path / "old.mp4", tr, size_px=SMALL, codec="mpeg4", fps=30)
    frames, times, _ = _decode(res.path)
    assert len(frames) == res.frames == 15
    np.testing.assert_allclose(times, np.arange(15) / 30, atol=1e-6)
    np.testing.assert_allclose(res.truth["pts_s"], np.arange(15) / 30, atol=1e-6)


def test_sample_clips_match_their_truth(repo_root):
    d = repo_root / "sample_clips"
    clips = sorted(d.glob("linden_brook_*.mp4"))
    if not clips:
        pytest.skip("sample_clips/ not generated (python scripts/make_sample_clips.py)")
    for clip in clips:
        meta = json.loads(clip.with_name(clip.stem + "_truth.json").read_text())
        assert meta["clip_sha256"] == sha256_file(clip), f"{clip.name} changed without its truth"
        truth = read_truth(clip.with_name(clip.stem + "_truth.csv"))
        with av.open(str(clip)) as c:
            st = c.streams.video[0]
            pts = sorted(float(p.pts * st.time_base) for p in c.demux(st) if p.pts is not None)
        assert len(pts) == len(truth) == meta["frames"]
        np.testing.assert_allclose(pts, truth["pts_s"], atol=1e-6)
    seg = pd.read_csv(d / "segments_p01_s01.csv")
    assert list(seg.columns) == ["label", "onset_s", "offset_s"] and (seg["offset_s"] > seg["onset_s"]).all()


def test_cancel_leaves_no_clip(tmp_path):
    ev = threading.Event()
    seen = []

    def progress(frac, msg):
        seen.append(frac)
        if frac > 0.3:
            ev.set()

    tr = synth_trajectory(duration_s=1.0, seed=1)
    with pytest.raises(Cancelled):
        render_clip(tmp_path / "c.mp4", tr, size_px=SMALL, progress=progress, cancel=ev)
    assert not (tmp_path / "c.mp4").exists()
    assert not list(tmp_path.glob("*.part")) and not list(tmp_path.glob("c_truth*"))
    assert seen and all(0 < s <= 1 for s in seen)


@pytest.mark.parametrize("kwargs, word", [
    ({"size_px": (641, 360)}, "even"),
    ({"face": "someone"}, "face"),
    ({"rotation_deg": 45}, "multiple of 90"),
    ({"frame_times_s": [0.0, 0.2, 0.1]}, "frame 2"),
    ({"frame_times_s": [0.0, 5.0]}, "past the trajectory"),
    ({"face_visible": [True, False]}, "one entry per frame"),
    ({"darkness": 0.0}, "darkness"),
    ({"extra_faces": 3}, "extra_faces"),
    ({"fps": -1}, "fps"),
])
def test_render_rejects_bad_parameters(tmp_path, kwargs, word):
    tr = synth_trajectory(duration_s=0.5, seed=1)
    with pytest.raises(ParameterError, match=word):
        render_clip(tmp_path / "bad.mp4", tr, size_px=kwargs.pop("size_px", SMALL), **kwargs)
    assert not list(tmp_path.iterdir())


def test_render_rejects_unknown_container(tmp_path):
    with pytest.raises(ParameterError, match=r"bad\.xyz.*extension"):
        render_clip(tmp_path / "bad.xyz", synth_trajectory(duration_s=0.5), size_px=SMALL)


def test_cli_renders_a_clip(tmp_path, capsys):
    from aspectus.cli import main

    out = tmp_path / "cli.mp4"
    rc = main(["render", str(out), "--duration-s", "0.5", "--size", "320x240", "--quiet", "--vfr-jitter-ms", "5"])
    assert rc == 0 and out.exists()
    assert "wrote" in capsys.readouterr().out
    _, times, _ = _decode(out)
    np.testing.assert_allclose(read_truth(tmp_path / "cli_truth.csv")["pts_s"], times, atol=1e-6)
    assert np.ptp(np.diff(times)) > 0.002  # the frame intervals really vary
    out2 = tmp_path / "classroom.mp4"
    rc = main(["render", str(out2), "--duration-s", "0.3", "--size", "320x240", "--quiet", "--head-drift",
               "--lids", "still", "--glasses", "--lighting-drift", "0.1", "--lighting-gradient", "0.3", "--mirror",
               "--codec", "libx264", "--crf", "28", "--distance-mm", "800"])
    assert rc == 0
    info = json.loads((tmp_path / "classroom_truth.json").read_text())
    assert (info["lid_follow"], info["glasses"], info["mirror"], info["crf"]) == (0.0, True, True, 28)
    assert info["lighting_drift"] == 0.1 and info["lighting_gradient"] == 0.3
    head = info["trajectory"]["head_motion"]
    assert head["yaw_deg"] == 0 and head["pitch_deg"] == 0 and head["z_mm"] > 0 and head["roll_deg"] > 0
    rc = main(["render", str(tmp_path / "x.mp4"), "--size", "wide"])
    assert rc == 2 and "WIDTHxHEIGHT" in capsys.readouterr().err


# ----------------------------------------------------------------------------- what the face mesh sees
def _mesh(frames, max_faces=1):
    from aspectus.synth.face import landmark_image

    out = []
    for img in frames:
        faces = landmark_image(img, max_faces=max_faces)
        out.append(faces)
    return out


def _ear(p):
    # eye aspect ratio, Soukupova & Cech (2016) - field notes; the subject's right eye
    p1, p2, p3, p4, p5, p6 = (p[i, :2] for i in (33, 160, 158, 133, 153, 144))
    return (np.linalg.norm(p2 - p6) + np.linalg.norm(p3 - p5)) / (2 * np.linalg.norm(p1 - p4))


@pytest.fixture(scope="module")
def gaze_steps(tmp_path_factory):
    """A still head (astronaut face) looking straight, right, left, up, down, then blinking."""
    d = tmp_path_factory.mktemp("mesh")
    seg = [(0.2, 0, 0, 0), (0.2, 15, 0, 0), (0.2, -15, 0, 0), (0.2, 0, 12, 0), (0.2, 0, -12, 0),
           (0.2, 0, 0, 1.0)]
    tr = _steps(seg)
    res = render_clip(d / "steps.mp4", tr, face="astronaut", size_px=(960, 540), noise_sd=2.0, seed=3)
    frames, _, _ = _decode(res.path)
    lms = _mesh(frames)
    return res, lms


@pytest.mark.slow
def test_face_mesh_finds_the_rendered_face(gaze_steps):
    res, lms = gaze_steps
    assert all(len(f) == 1 for f in lms)
    # its iris centres sit within 15 % of an iris diameter of the drawn ones while the eyes are open (the face
    # mesh reads the partly lid-covered iris about 1-1.5 px low)
    t = res.truth
    tol = 0.15 * t["iris_diameter_px"].iloc[0]
    for i in range(0, 30):
        p = lms[i][0]
        assert np.hypot(*(p[468, :2] - t.loc[i, ["right_iris_x_px", "right_iris_y_px"]].to_numpy(float))) < tol
        assert np.hypot(*(p[473, :2] - t.loc[i, ["left_iris_x_px", "left_iris_y_px"]].to_numpy(float))) < tol


@pytest.mark.slow
def test_face_mesh_iris_moves_the_way_the_schema_says(gaze_steps):
    res, lms = gaze_steps
    f = res.focal_px
    z = res.truth["distance_mm"].iloc[0]
    expect_x = f * IRIS_PLANE_RADIUS_MM * np.sin(np.radians(15)) / z  # px for 15 deg yaw
    expect_y = f * IRIS_PLANE_RADIUS_MM * np.sin(np.radians(12)) / z

    def iris(block):  # mean of both iris centres over the settled frames of a 6-frame block
        pts = [0.5 * (lms[i][0][468, :2] + lms[i][0][473, :2]) for i in range(block * 6 + 2, block * 6 + 6)]
        return np.mean(pts, axis=0)

    straight, right, left, up, down = (iris(b) for b in range(5))
    # yaw > 0 (subject's right) -> towards the picture's left edge, by about the geometric amount
    assert right[0] - straight[0] == pytest.approx(-expect_x, rel=0.35)
    assert left[0] - straight[0] == pytest.approx(expect_x, rel=0.35)
    # pitch > 0 (up) -> towards the picture's top edge; the face mesh under-reads vertical iris motion
    assert up[1] - straight[1] < -0.3 * expect_y
    assert down[1] - straight[1] > 0.3 * expect_y
    assert abs(up[1] - straight[1]) < 1.5 * expect_y


@pytest.mark.slow
def test_closed_lids_reduce_the_eye_opening(gaze_steps):
    res, lms = gaze_steps
    open_ear = np.median([_ear(lms[i][0]) for i in range(2, 6)])
    closed_ear = np.median([_ear(lms[i][0]) for i in range(31, 35)])  # 35 frames: the clip ends at 1.196 s
    assert res.truth["blink"].iloc[30:].all()
    assert open_ear > 0.2
    assert closed_ear < 0.6 * open_ear


@pytest.mark.slow
def test_head_turn_and_extra_faces_are_seen(tmp_path):
    seg = [(0.2, 0, 0, 0)]
    base = _steps(seg)
    turned = _steps(seg, head_yaw_deg=12.0)
    r0 = render_clip(tmp_path / "h0.mp4", base, size_px=SMALL, noise_sd=0)
    r1 = render_clip(tmp_path / "h1.mp4", turned, size_px=SMALL, noise_sd=0, extra_faces=1)
    f0, _, _ = _decode(r0.path)
    f1, _, _ = _decode(r1.path)
    m0 = _mesh(f0[2:3], max_faces=3)[0]
    m1 = _mesh(f1[2:3], max_faces=3)[0]
    assert len(m0) == 1 and len(m1) == 2
    main = max(m1, key=lambda p: np.ptp(p[:, 0]))

    def nose_offset(p):  # nose tip relative to the midpoint of the eye corners, px
        return p[1, 0] - 0.5 * (p[33, 0] + p[263, 0])

    # head yaw > 0 (face turned to the subject's right) -> the nose swings towards the picture's left
    assert nose_offset(main) < nose_offset(m0[0]) - 6


def test_encoded_clip_depends_only_on_its_frames(tmp_path):
    """The same frames give the same file in processes whose freed memory holds different bytes.

    glibc's MALLOC_PERTURB_ fills freed memory with the given byte, so an
    encoder reading memory it never wrote gives different files. On this
    project's AVX-512 machine libx264's AVX-512 code did (960 x 540); the
    writer limits x264 to AVX2 there (aspectus.synth.clip_writer.x264_options).
    """
    import hashlib
    import os
    import subprocess
    import sys
    from pathlib import Path

    code = r"""
import sys
import numpy as np
from aspectus.synth.clip_writer import ClipWriter
rng = np.random.default_rng(4)
y, x = np.mgrid[0:540, 0:960]
base = np.stack([(x * 0.25) % 256, (y * 0.4) % 256, ((x + y) * 0.1) % 256], axis=-1)
w = ClipWriter(sys.argv[1], sys.argv[1] + '.part.mp4', width_px=960, height_px=540, fps=30.0)
for i in range(24):
    frame = np.clip(np.roll(base, 7 * i, axis=1) + rng.normal(0, 2.0, base.shape), 0, 255).astype(np.uint8)
    w.write(frame, i / 30.0)
w.close()
"""
    digests = []
    for k, fill in enumerate(("165", "77")):
        out = tmp_path / f"clip_{k}.mp4"
        env = dict(os.environ, MALLOC_PERTURB_=fill)
        r = subprocess.run([sys.executable, "-c", code, str(out)], env=env, capture_output=True, text=True,
                           timeout=300)
        assert r.returncode == 0, r.stderr[-2000:]
        written = Path(str(out) + ".part.mp4")  # ClipWriter writes here; render_clip renames it when complete
        digests.append(hashlib.sha256(written.read_bytes()).hexdigest())
    assert digests[0] == digests[1]


def test_a_small_iris_is_drawn_by_pixel_area_and_moves_smoothly():
    """A camera pixel integrates the light over its area. The iris texture (a 64-texel disc) drawn at 8.5-12 px by
    sampling it at each pixel's centre aliased: its rim moved in jumps of up to half a pixel while the eye turned
    smoothly (the rim's centre 0.05 px SD off its true place). Drawn by area, the disc's centre of coverage sits
    on the true centre to 0.01 px SD at any sub-pixel position, and the coverage's area is the disc's (pi r^2)."""
    from aspectus.synth.frame import _TEX_PX, _area_sampled_warp, _iris_texture

    cv2 = pytest.importorskip("cv2")
    tex = _iris_texture((90, 60, 40), seed=1)
    rng = np.random.default_rng(0)
    tc, tr = (_TEX_PX - 1) / 2.0, _TEX_PX / 2.0
    src = np.float32([[tc, tc], [tc + tr, tc], [tc, tc + tr]])
    yy, xx = np.mgrid[0:30, 0:40]
    for d_px in (8.5, 12.0):
        err, area = [], []
        for _ in range(100):
            cx, cy = 15 + rng.uniform(0, 1), 12 + rng.uniform(0, 1)  # picture coordinates of the patch
            A = cv2.getAffineTransform(src, np.float32([[cx, cy], [cx + d_px / 2, cy], [cx, cy + d_px / 2]]))
            a = _area_sampled_warp(tex, A, (40, 30))[..., 3]
            err.append([(a * xx).sum() / a.sum() - cx, (a * yy).sum() / a.sum() - cy])
            area.append(a.sum() / (np.pi * d_px ** 2 / 4))
        err = np.array(err)
        assert np.all(err.std(axis=0) < 0.01) and np.all(np.abs(err.mean(axis=0)) < 0.01), (d_px, err.std(axis=0))
        assert np.mean(area) == pytest.approx(1.0, abs=0.01)
    # a large iris (texels bigger than pixels) is warped directly, unchanged
    A = cv2.getAffineTransform(src, np.float32([[20, 15], [20 + 40, 15], [20, 15 + 40]]))
    np.testing.assert_array_equal(_area_sampled_warp(tex, A, (40, 30)),
                                  cv2.warpAffine(tex, A, (40, 30), flags=cv2.INTER_LINEAR,
                                                 borderMode=cv2.BORDER_CONSTANT, borderValue=0))


def test_the_rendered_iris_rim_follows_a_slow_turn_without_jumps():
    """A 12 px iris (640 x 480 at 55 cm, lids still) turned 10 deg in 1 deg steps: the rim's outer edge (where the
    picture crosses half-way between iris and sclera on the centre row) moves by 0.1-0.4 px each step, in one
    direction; sampled at pixel centres (``iris_sampling="point"``, the renderer before) it stood still for three
    degrees and then jumped."""
    from aspectus.synth.face import load_face
    from aspectus.synth.frame import FaceRig

    def rim_steps(sampling):
        rig = FaceRig(load_face("hopper"), Camera(640, 480), rest_head_mm=(0.0, 0.0, 550.0),
                      background=np.zeros((480, 640, 3), np.uint8), seed=1, lid_follow=0.0, iris_sampling=sampling)
        edges = []
        for yaw in np.arange(-2.0, 8.5, 1.0):
            im, info = rig.render(R=np.eye(3), T_mm=(0.0, 0.0, 550.0), gaze=gaze_vector(yaw, 2.0), closure=0.0)
            cx, cy = info["iris_uv"]["right"]
            row = im[int(cy), :, 0].astype(float)
            xs = np.arange(int(cx) + 2, int(cx) + 12)
            v = row[xs]
            level = 0.5 * (v.min() + v.max())
            i = int(np.argmax((v[:-1] < level) & (v[1:] >= level)))
            edges.append(xs[i] + (level - v[i]) / (v[i + 1] - v[i]))
        return -np.diff(edges)  # gaze to the subject's right moves the iris to the picture's left

    steps = rim_steps("area")
    assert np.all(steps > 0.1) and np.all(steps < 0.4), np.round(steps, 3)
    old = rim_steps("point")
    assert np.sum(np.abs(old) < 0.05) >= 3 and old.max() > 0.5, np.round(old, 3)
    with pytest.raises(ParameterError, match="iris_sampling"):
        FaceRig(load_face("hopper"), Camera(640, 480), background=np.zeros((480, 640, 3), np.uint8),
                iris_sampling="nearest")
