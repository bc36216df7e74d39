"""Per-frame geometry: the eye crop, and the thread and child-process runners giving the same rows.

Reference for every comparison: the same computation on the full picture in
this process (aspectus's own thread path), so any difference is an error of
the crop or of the transport.
"""
from __future__ import annotations

import os
import signal
import time

import numpy as np
import pytest

from aspectus.webcam.frame_geometry import (LIMBUS_CONTRAST, LIMBUS_DIAM, PATCHES_AT, RECORD_WIDTH, FrameGeometry,
                                            GeometryProcess, eye_crop_box, frame_item, start_geometry)
from aspectus.webcam.landmarks import FaceTracker

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def frames_and_faces(tmp_path_factory):
    from aspectus.synth.render import render_clip, synth_trajectory
    from aspectus.webcam.video import iter_frames

    clip = tmp_path_factory.mktemp("geo") / "p01_s01.mp4"
    render_clip(clip, synth_trajectory(duration_s=1.5, seed=4, head_motion=True), size_px=(640, 360), fps=30.0,
                seed=4)
    frs = list(iter_frames(clip))
    with FaceTracker(max_faces=1) as tr:
        obs = [tr.process(f.image) for f in frs]
    assert sum(o is not None for o in obs) >= 0.9 * len(obs)
    return frs, obs


def test_eye_crop_gives_the_rows_of_the_full_picture(frames_and_faces):
    frs, obs = frames_and_faces
    full, cropped = FrameGeometry(fov_deg=60.0, refine_iris=True), FrameGeometry(fov_deg=60.0, refine_iris=True)
    n_refined = 0
    for fr, o in zip(frs, obs):
        h, w = fr.image.shape[:2]
        a = full.row(fr.pts_s, (w, h), None if o is None else o.points_px, 0 if o is None else o.face_count,
                     fr.image, (0, 0))
        b = cropped.row(*frame_item(fr.pts_s, fr.image, o, refine_iris=True))
        np.testing.assert_allclose(b, a, rtol=0, atol=1e-9, equal_nan=True)
        if o is not None:
            n_refined += int(np.any(np.abs(a[15:19] - a[31:35]) > 1e-6))  # the limbus fit moved the point
            x0, y0, x1, y1 = eye_crop_box(o.points_px, (w, h))
            assert 0 <= x0 < x1 <= w and 0 <= y0 < y1 <= h
            assert (x1 - x0) * (y1 - y0) < 0.1 * w * h  # a small part of the picture travels
    assert n_refined > 0.5 * len(frs)


def test_crop_at_the_picture_edge_is_clipped(frames_and_faces):
    _, obs = frames_and_faces
    o = next(o for o in obs if o is not None)
    pts = o.points_px.copy()
    pts[:, 0] -= pts[[468, 473], 0].min() - 5.0  # an iris 5 px from the left edge
    x0, _, x1, _ = eye_crop_box(pts, (640, 360))
    assert x0 == 0 and x1 <= 640
    bad = pts.copy()
    bad[468, 0] = np.nan
    assert eye_crop_box(bad, (640, 360)) is None


def _run(runner_cls_or_mode, items, **kw):
    rows = []
    g = start_geometry(fov_deg=60.0, refine_iris=True, sink=rows.append, frames_hint=len(items),
                       mode=runner_cls_or_mode, **kw)
    for it in items:
        g.submit(it)
    state = g.finish()
    return g.kind, np.array(rows), state


def test_thread_and_process_give_identical_rows(frames_and_faces):
    frs, obs = frames_and_faces
    items = [frame_item(f.pts_s, f.image, o, refine_iris=True) for f, o in zip(frs, obs)]
    k1, a, s1 = _run("thread", items)
    k2, b, s2 = _run("process", items)
    assert (k1, k2) == ("thread", "process")
    assert a.shape == b.shape == (len(frs), RECORD_WIDTH)
    np.testing.assert_array_equal(a, b)  # same code, same inputs, bit for bit
    np.testing.assert_array_equal(np.asarray(s1["K"]), np.asarray(s2["K"]))
    assert s1["size"] == s2["size"] == (640, 360)
    import sys

    if sys.platform.startswith("linux"):  # the child reports its own peak memory (an interpreter with NumPy
        assert 20 < s2["peak_rss_mb"] < 2000, s2  # and OpenCV loaded is tens of MB)
    assert np.all(np.diff(b[:, 0]) > 0)  # frame order kept
    k3, c, s3 = _run("inline", items)  # the serial pipeline's runner: the same batches of 16 in this thread
    assert k3 == "inline"
    np.testing.assert_array_equal(a, c)
    assert s3["size"] == (640, 360) and s3["anchored_frames"] == s1["anchored_frames"]


def test_the_ellipse_setting_reaches_every_runner(frames_and_faces):
    """``iris_shape`` (GazeParams ``iris_shape="ellipse"``): the same rows in a thread, the child process and
    inline, and not the circle fit's rows (the limbus centres and diameters move; nothing before them does)."""
    frs, obs = frames_and_faces
    items = [frame_item(f.pts_s, f.image, o, refine_iris=True) for f, o in zip(frs, obs)]
    _, a, _ = _run("thread", items, iris_shape=True)
    _, b, _ = _run("process", items, iris_shape=True)
    _, c, _ = _run("inline", items, iris_shape=True)
    np.testing.assert_array_equal(a, b)
    np.testing.assert_array_equal(a, c)
    _, circle, _ = _run("thread", items)
    np.testing.assert_array_equal(a[:, :15], circle[:, :15])  # head pose untouched
    moved = np.abs(a[:, 15:19] - circle[:, 15:19])
    assert np.nanmax(moved) > 0.01


def test_skin_pose_rows_from_the_crop_and_the_child_are_those_of_the_full_picture(frames_and_faces):
    """The head rotation from skin points (aspectus.webcam.skin_pose) reads the larger crop that
    frame_item(skin_pose=True) cuts: the same rows as on the full picture, in a thread and in the child."""
    frs, obs = frames_and_faces
    full = FrameGeometry(fov_deg=60.0, refine_iris=True, skin_pose=True)
    ref = np.array([full.row(f.pts_s, f.image.shape[1::-1], None if o is None else o.points_px,
                             0 if o is None else o.face_count, f.image, (0, 0)) for f, o in zip(frs, obs)])
    items = [frame_item(f.pts_s, f.image, o, refine_iris=True, skin_pose=True) for f, o in zip(frs, obs)]
    k1, a, s1 = _run("thread", items, skin_pose=True)
    k2, b, s2 = _run("process", items, skin_pose=True)
    assert (k1, k2) == ("thread", "process")
    np.testing.assert_allclose(a, ref, rtol=0, atol=1e-9, equal_nan=True)
    np.testing.assert_array_equal(a, b)
    found = sum(o is not None for o in obs)
    assert s1["skin_pose_frames"] == s2["skin_pose_frames"] >= 0.8 * found
    assert s1["skin_pose_frames"] + s1["skin_pose_fallback_frames"] == found
    # the rotation is not the mesh's: the rows differ from those without the skin points
    _, plain, s0 = _run("thread", [frame_item(f.pts_s, f.image, o, refine_iris=True) for f, o in zip(frs, obs)])
    assert s0["skin_pose_frames"] is None
    assert np.nanmax(np.abs(plain[:, 3:12] - a[:, 3:12])) > 1e-4


def test_auto_mode_uses_a_thread_for_short_clips():
    g = start_geometry(fov_deg=60.0, refine_iris=False, sink=lambda r: None, frames_hint=10)
    assert g.kind == "thread"
    g.finish()
    with pytest.raises(ValueError, match="geometry mode"):
        start_geometry(fov_deg=60.0, refine_iris=False, sink=lambda r: None, frames_hint=10, mode="gpu")


def test_error_in_the_child_reaches_the_caller(frames_and_faces):
    frs, obs = frames_and_faces
    o = next(o for o in obs if o is not None)
    g = GeometryProcess(fov_deg=60.0, refine_iris=True, sink=lambda r: None)
    g.submit((0.0, (640, 360), o.points_px[:10], 1, None, (0, 0)))  # 10 landmarks instead of 478
    with pytest.raises(Exception) as ei:
        g.finish()
    assert "index" in str(ei.value) or "shape" in str(ei.value) or "size" in str(ei.value), ei.value
    g.abort()


def test_child_killed_is_reported_not_hung(frames_and_faces):
    frs, obs = frames_and_faces
    g = GeometryProcess(fov_deg=60.0, refine_iris=True, sink=lambda r: None)
    os.kill(g.pid, signal.SIGKILL)
    g._proc.wait(timeout=10)
    t0 = time.monotonic()
    for f, o in zip(frs, obs):
        g.submit(frame_item(f.pts_s, f.image, o, refine_iris=True))
    with pytest.raises(RuntimeError, match="geometry process stopped unexpectedly"):
        g.finish()
    assert time.monotonic() - t0 < 30  # a generous bound against a hang, not a timing test
    g.abort()


def test_user_script_without_main_guard_runs_once(frames_and_faces, tmp_path):
    # the child must not re-import the caller's script (as multiprocessing's spawn would): a plain
    # script calling the pipeline, with no __main__ guard, prints its line once and works
    import subprocess
    import sys

    frs, obs = frames_and_faces
    np.save(tmp_path / "pts.npy", np.stack([o.points_px for o in obs if o is not None][:5]))
    script = tmp_path / "my_analysis.py"
    script.write_text(
        "import numpy as np\n"
        "from aspectus.webcam.frame_geometry import GeometryProcess\n"
        "print('top-level line', flush=True)\n"
        f"pts = np.load({str(tmp_path / 'pts.npy')!r})\n"
        "rows = []\n"
        "g = GeometryProcess(fov_deg=60.0, refine_iris=False, sink=rows.append)\n"
        "for i, p in enumerate(pts):\n"
        "    g.submit((i / 30, (640, 360), p, 1, None, (0, 0)))\n"
        "g.finish()\n"
        "print('rows', len(rows), int(sum(r[1] for r in rows)), flush=True)\n")
    # a decoy package of the same name in the working folder must not be what the child loads
    work = tmp_path / "work"
    (work / "aspectus").mkdir(parents=True)
    (work / "aspectus" / "__init__.py").write_text("raise ImportError('decoy aspectus picked up')\n")
    res = subprocess.run([sys.executable, str(script)], capture_output=True, text=True, timeout=120, cwd=work)
    assert res.returncode == 0, res.stderr
    assert res.stdout.count("top-level line") == 1, res.stdout
    assert "rows 5 5" in res.stdout, res.stdout


def test_rows_of_a_batch_equal_the_rows_one_frame_at_a_time(frames_and_faces):
    """The geometry process fits the limbus of a whole batch of frames together; rows must not change."""
    frs, obs = frames_and_faces
    items = [frame_item(f.pts_s, f.image, o, refine_iris=True) for f, o in zip(frs, obs)]
    items[5] = frame_item(frs[5].pts_s, frs[5].image, None, refine_iris=True)  # a frame without a face
    one, many = FrameGeometry(fov_deg=60.0, refine_iris=True), FrameGeometry(fov_deg=60.0, refine_iris=True)
    alone = np.stack([one.row(*it) for it in items])
    together = np.concatenate([many.rows(items[k:k + 16]) for k in range(0, len(items), 16)])
    assert together.shape == (len(items), RECORD_WIDTH)
    np.testing.assert_allclose(together, alone, rtol=0, atol=1e-9, equal_nan=True)
    assert np.isnan(together[5, 3:]).all() and together[5, 1] == 0.0
    fitted = np.isfinite(together[:, 15]) & (np.abs(together[:, 15] - together[:, 31]) > 0)
    assert fitted.mean() > 0.8  # the limbus fit ran (it moves the mesh's iris point) in most frames
    assert many.rows([]).shape == (0, RECORD_WIDTH)


@pytest.mark.timeout(60)
def test_error_in_the_geometry_thread_reaches_the_caller_without_a_hang(frames_and_faces, monkeypatch):
    """The thread takes what is queued in one batch - the closing marker too - and must still report a failure.

    The frames and the closing marker are queued before the worker starts, so its first batch holds them all.
    """
    import threading

    from aspectus.webcam.frame_geometry import GeometryThread

    frs, obs = frames_and_faces

    def sink(row):
        raise RuntimeError("sink refused the row")

    start = threading.Thread.start
    monkeypatch.setattr(threading.Thread, "start", lambda self: None)
    geo = GeometryThread(fov_deg=60.0, refine_iris=True, sink=sink)
    monkeypatch.setattr(threading.Thread, "start", start)
    for f, o in list(zip(frs, obs))[:5]:
        geo.submit(frame_item(f.pts_s, f.image, o, refine_iris=True))
    geo._q.put(None)  # what finish() sends
    geo._thread.start()
    geo._thread.join(timeout=30)
    assert not geo._thread.is_alive(), "the worker hangs after a failure"
    with pytest.raises(RuntimeError, match="sink refused"):
        geo.check()


def _rows(items, **kw):
    return FrameGeometry(fov_deg=60.0, refine_iris=True, **kw).rows(items)


def test_a_frame_without_a_face_does_not_move_the_anchored_head_afterwards(frames_and_faces):
    """The eye anchors keep their followed offsets through a lost frame (starting afresh moved the head by
    about 0.4 mm - 1-2 deg of gaze - for the rest of the clip)."""
    frs, obs = frames_and_faces
    items = [frame_item(f.pts_s, f.image, o, refine_iris=True) for f, o in zip(frs, obs)]
    lost = list(items)
    lost[20] = frame_item(frs[20].pts_s, frs[20].image, None, refine_iris=True)
    full, gap = _rows(items), _rows(lost)
    pnp = _rows(items, eye_anchors=False)
    np.testing.assert_array_equal(gap[:20], full[:20])
    after = np.arange(21, len(items))
    ok = np.isfinite(full[after, 12]) & np.isfinite(gap[after, 12])
    d_xy = np.abs(gap[after][ok, 12:14] - full[after][ok, 12:14]).max(axis=1)
    anchor_effect = np.median(np.abs(full[after][ok, 12:14] - pnp[after][ok, 12:14]))
    assert anchor_effect > 0.2  # the anchors do move the head (model mm), so the check below can fail
    # the template matches just after the gap start from the older offset and may differ for a few frames
    # (measured: 5 frames, up to 0.6 mm); starting afresh shifted every later frame by about 0.4 mm
    assert np.median(d_xy) < 0.05, d_xy
    assert (d_xy > 0.05).sum() <= 8, d_xy
    assert gap[20, 1] == 0.0


def test_frames_the_anchors_cannot_refit_continue_their_offset(frames_and_faces):
    """Without an eye picture for one frame the translation is PnP's plus the last anchored offset, not PnP's."""
    frs, obs = frames_and_faces
    items = [frame_item(f.pts_s, f.image, o, refine_iris=True) for f, o in zip(frs, obs)]
    k = next(j for j in range(25, len(items)) if items[j][2] is not None)
    blind = list(items)
    blind[k] = items[k][:4] + (None, (0, 0))  # landmarks but no eye crop
    geo = FrameGeometry(fov_deg=60.0, refine_iris=True)
    rows = geo.rows(blind)
    pnp = _rows(items, eye_anchors=False)
    anchored = _rows(items)
    jump_pnp = np.linalg.norm(pnp[k, 12:15] - anchored[k - 1, 12:15])
    jump_here = np.linalg.norm(rows[k, 12:15] - rows[k - 1, 12:15])
    assert jump_here < 0.25 * jump_pnp, (jump_here, jump_pnp)
    st = geo.state()
    assert st["unanchored_frames"] == 1 and st["anchored_frames"] >= len(items) - 6
    assert st["anchor_matches"] > 0 and st["anchor_misses"] >= 0


def test_appearance_columns_follow_the_record_and_leave_it_unchanged(frames_and_faces):
    """With ``appearance`` the rows carry the limbus-fit flags, each eye's patch frame and both patches after
    the record's columns; the record itself is the same as without (aspectus.webcam.iris_appearance)."""
    from aspectus.webcam.frame_geometry import APPEARANCE_WIDTH
    from aspectus.webcam.iris_appearance import PATCH_BYTES, PATCH_SIZE

    frs, obs = frames_and_faces
    items = [frame_item(f.pts_s, f.image, o, refine_iris=True) for f, o in zip(frs, obs)]
    plain, app = _rows(items), _rows(items, appearance=True)
    assert app.shape == (len(items), RECORD_WIDTH + APPEARANCE_WIDTH)
    np.testing.assert_array_equal(app[:, :RECORD_WIDTH], plain)
    found = plain[:, 1] > 0.5
    flags = app[found, RECORD_WIDTH:RECORD_WIDTH + 2]
    assert set(np.unique(flags)) <= {0.0, 1.0} and flags.mean() > 0.8
    # the flag says whether the limbus fit moved the mesh's point
    moved = np.abs(plain[found, 15:19:2] - plain[found, 31:35:2]) > 0
    assert (flags[moved] == 1.0).all()
    affine = app[:, RECORD_WIDTH + 2:RECORD_WIDTH + 14]
    with_patch = np.isfinite(affine).all(axis=1)
    assert with_patch[found].mean() > 0.9 and not with_patch[~found].any()
    patches = np.ascontiguousarray(app[with_patch, RECORD_WIDTH + PATCHES_AT:]).view(np.uint8)
    assert patches.shape == (with_patch.sum(), PATCH_BYTES)
    W, H = PATCH_SIZE
    p = patches.reshape(-1, 2, H, W).astype(float)
    assert (p.std(axis=(2, 3)) > 3).all()  # real picture content, not a constant
    # the same bytes from the child process and from a thread
    k1, t_rows, _ = _run("thread", items, appearance=True)
    k2, p_rows, _ = _run("process", items, appearance=True)
    assert (k1, k2) == ("thread", "process")
    np.testing.assert_array_equal(np.ascontiguousarray(t_rows).view(np.uint8), np.ascontiguousarray(app).view(np.uint8))
    np.testing.assert_array_equal(np.ascontiguousarray(p_rows).view(np.uint8), np.ascontiguousarray(app).view(np.uint8))


def test_side_arc_fits_and_the_appearance_labels_in_one_run(frames_and_faces):
    """``side_arcs`` (aspectus.webcam.limbus.SIDE_DEG) with ``appearance``: each frame is fitted both ways - the
    record's centres and diameters are those of the rule alone, the label columns those without it, bit for
    bit, so the appearance estimate learns from the fits it was measured on; every runner gives the same rows.
    (The pipeline asks for no side-arc fits where the appearance estimate is to run: it would not read them.)"""
    from aspectus.webcam.frame_geometry import LABEL_DIAM, LABEL_IRIS

    frs, obs = frames_and_faces
    items = [frame_item(f.pts_s, f.image, o, refine_iris=True) for f, o in zip(frs, obs)]
    auto = dict(appearance=True)
    _, both, _ = _run("thread", items, side_arcs=True, **auto)
    _, both_p, _ = _run("process", items, side_arcs=True, **auto)
    _, both_i, _ = _run("inline", items, side_arcs=True, **auto)
    np.testing.assert_array_equal(both, both_p)
    np.testing.assert_array_equal(both, both_i)
    _, plain, _ = _run("thread", items, **auto)
    _, side, _ = _run("thread", items, side_arcs=True)  # no appearance: the rule's fits alone
    w = RECORD_WIDTH
    found = plain[:, 1] > 0.5
    np.testing.assert_array_equal(both[:, :15], plain[:, :15])  # head pose untouched
    np.testing.assert_array_equal(both[:, 15:19], side[:, 15:19])
    np.testing.assert_array_equal(both[:, LIMBUS_DIAM], side[:, LIMBUS_DIAM])
    np.testing.assert_array_equal(both[found, w + LABEL_IRIS.start:w + LABEL_IRIS.stop], plain[found, 15:19])
    np.testing.assert_array_equal(both[:, w + LABEL_DIAM.start:w + LABEL_DIAM.stop], plain[:, LIMBUS_DIAM])
    np.testing.assert_array_equal(both[:, w:w + 2], plain[:, w:w + 2])  # the fit flags of the labels
    np.testing.assert_array_equal(both[:, LIMBUS_CONTRAST], plain[:, LIMBUS_CONTRAST])
    np.testing.assert_array_equal(both[:, w + PATCHES_AT:], plain[:, w + PATCHES_AT:])
    assert np.isnan(plain[:, w + LABEL_IRIS.start:w + LABEL_DIAM.stop]).all()  # without the rule: no labels apart
    moved = np.abs(both[found, 15:19] - plain[found, 15:19])
    assert np.nanmax(moved) > 0.01  # the rule changes fits (by how much: docs/notes/gaze-measurement.md)
