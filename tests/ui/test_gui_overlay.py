"""aspectus.webcam.overlay: landmark loops, gaze-ray direction, face blurring (Qt-free)."""
from __future__ import annotations

import numpy as np
import pytest

from aspectus.webcam import overlay as ov


def _loop_edges(loop):
    return {frozenset((a, b)) for a, b in zip(loop, loop[1:] + loop[:1])}


@pytest.mark.parametrize("ours,theirs", [
    ("FACE_OVAL", "FACEMESH_FACE_OVAL"), ("LEFT_EYE", "FACEMESH_LEFT_EYE"), ("RIGHT_EYE", "FACEMESH_RIGHT_EYE"),
    ("LEFT_IRIS", "FACEMESH_LEFT_IRIS"), ("RIGHT_IRIS", "FACEMESH_RIGHT_IRIS")])
def test_loops_match_mediapipe_connections(ours, theirs):
    conn = pytest.importorskip("mediapipe.python.solutions.face_mesh_connections")
    assert _loop_edges(getattr(ov, ours)) == {frozenset(e) for e in getattr(conn, theirs)}


def test_gaze_ray_signs_follow_schema():
    # schema: yaw > 0 = subject's right = picture's left; pitch > 0 = up = smaller picture y
    x, y = ov.gaze_ray_end((100.0, 100.0), yaw_deg=20.0, pitch_deg=0.0, length_px=50)
    assert x < 100 and y == pytest.approx(100)
    x, y = ov.gaze_ray_end((100.0, 100.0), yaw_deg=0.0, pitch_deg=15.0, length_px=50)
    assert y < 100 and x == pytest.approx(100)
    x, y = ov.gaze_ray_end((0.0, 0.0), yaw_deg=30.0, pitch_deg=0.0, length_px=10)
    assert x == pytest.approx(-5.0)  # sin 30 deg = 0.5


def _fake_face(W=320, H=240):
    """478 landmarks on an ellipse-ish face at the picture centre."""
    rng = np.random.default_rng(0)
    pts = np.column_stack([rng.uniform(120, 200, ov.N_LANDMARKS), rng.uniform(60, 180, ov.N_LANDMARKS)])
    pts[ov.RIGHT_IRIS_CENTRE] = (140, 110)
    pts[ov.LEFT_IRIS_CENTRE] = (180, 110)
    pts[list(ov.FACE_OVAL)[0]] = (120, 60)
    pts[list(ov.FACE_OVAL)[1]] = (200, 180)
    return pts


def _textured(W=320, H=240):
    rng = np.random.default_rng(1)
    return rng.integers(0, 256, (H, W, 3), dtype=np.uint8)


def test_blur_covers_face_box_only():
    img = _textured()
    pts = _fake_face()
    out = ov.draw_overlay(img, landmarks_px=pts, show_mesh=False)
    box = ov.face_box_from_landmarks(pts, shape=img.shape)
    x0, y0, x1, y1 = box
    assert x0 < 120 and x1 > 200 and y0 < 60 and y1 > 180
    # fine detail (pixel-to-pixel differences) is gone inside the box, untouched outside
    inside = out[y0 + 2:y1 - 2, x0 + 2:x1 - 2].astype(float)
    assert np.abs(np.diff(inside, axis=1)).mean() < 0.1 * np.abs(np.diff(img[y0:y1, x0:x1].astype(float), axis=1)).mean()
    assert np.array_equal(out[:, : x0 - 1], img[:, : x0 - 1])
    assert img is not out and np.array_equal(img, _textured())  # input untouched


def test_unknown_face_position_blurs_whole_picture():
    img = _textured()
    out = ov.draw_overlay(img, yaw_deg=5.0, pitch_deg=0.0)
    assert np.abs(np.diff(out.astype(float), axis=1)).mean() < 0.1 * np.abs(np.diff(img.astype(float), axis=1)).mean()
    shown = ov.draw_overlay(img, blur=False)
    assert np.array_equal(shown, img)


def test_head_position_places_blur_box_and_ray():
    img = np.full((360, 640, 3), 200, np.uint8)
    # head 100 mm to the camera's +x (picture right) at 600 mm
    box = ov.face_box_from_head(head_x_mm=100.0, head_y_mm=0.0, head_z_mm=600.0, shape=img.shape, fov_deg=60.0)
    f = 320 / np.tan(np.radians(30))
    u = 320 + f * 100 / 600
    assert box[0] < u < box[2] and box[2] - box[0] == pytest.approx(1.4 * f * 160 / 600, abs=3)
    out = ov.draw_overlay(img, head_mm=(100.0, 0.0, 600.0), yaw_deg=30.0, pitch_deg=0.0, blur=False)
    changed = np.argwhere((out != 200).any(axis=2))
    assert changed.size and changed[:, 1].min() < u - 20  # the ray goes to the picture's left


def test_mesh_drawn_in_colour():
    img = np.zeros((240, 320, 3), np.uint8)
    pts = _fake_face()
    out = ov.draw_overlay(img, landmarks_px=pts, yaw_deg=0.0, pitch_deg=0.0, blur=False)
    iris = np.array(ov.OverlayStyle().iris_rgb)
    assert (np.abs(out.astype(int) - iris).sum(axis=2) < 30).sum() > 5
    # broken landmarks: no crash, treated as unknown
    bad = pts.copy()
    bad[10] = np.nan
    assert ov.draw_overlay(img, landmarks_px=bad).shape == img.shape
    assert ov.draw_overlay(img, landmarks_px=np.zeros((5, 2))).shape == img.shape
