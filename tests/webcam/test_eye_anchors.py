"""Eye anchors: template matching follows a known picture shift; the translation refit with a fixed rotation."""
from __future__ import annotations

import numpy as np
import pytest

from aspectus.webcam.eye_anchors import (ANCHOR_SETS, PATIENCE_FRAMES, EyeAnchorTracker, anchor_reach_px,
                                 translation_given_rotation)
from aspectus.geometry import camera_matrix, head_rotation


def _texture(shape=(240, 320), seed=0):
    """A smooth random texture (skin-like: blobs a few pixels wide), RGB uint8."""
    from scipy.ndimage import gaussian_filter

    rng = np.random.default_rng(seed)
    g = gaussian_filter(rng.normal(size=shape), 2.0)
    g = (g - g.min()) / (g.max() - g.min())
    return np.repeat((40 + 180 * g)[..., None], 3, axis=2)


def _shifted(img, dx, dy):
    """``img`` moved by (dx, dy) px (sub-pixel, bilinear), as uint8."""
    from scipy.ndimage import shift

    return np.stack([shift(img[..., c], (dy, dx), order=3, mode="nearest") for c in range(3)], axis=2).round().astype(np.uint8)


#: the six points below the eyes (the tracker is given them; the default set adds four beside the eyes)
ANCHOR_POINTS = ANCHOR_SETS["below"]


def _points(anchor_xy):
    pts = np.zeros((478, 3))
    pts[list(ANCHOR_POINTS), :2] = anchor_xy
    return pts


ANCHORS_XY = np.array([[120.0, 110], [135, 112], [150, 110], [190, 110], [205, 112], [220, 110]])


def test_anchors_follow_the_picture_not_the_mesh():
    base = _texture()
    tr = EyeAnchorTracker(ANCHOR_POINTS)
    first = tr.update(base.round().astype(np.uint8), _points(ANCHORS_XY), 10.0)
    np.testing.assert_allclose(first, ANCHORS_XY)
    # the skin moves by (1.3, -0.6) px while the mesh's points move by (3, 2) px: the anchors follow the skin
    moved = _shifted(base, 1.3, -0.6)
    got = tr.update(moved, _points(ANCHORS_XY + [3.0, 2.0]), 10.0)
    np.testing.assert_allclose(got, ANCHORS_XY + [1.3, -0.6], atol=0.25)  # the parabola vertex's own bias
    assert tr.matched == len(ANCHOR_POINTS) and tr.missed == 0


def test_a_failed_match_keeps_the_last_offset_and_a_new_template_is_cut_without_a_jump():
    base = _texture(seed=1)
    tr = EyeAnchorTracker(ANCHOR_POINTS)
    tr.update(base.round().astype(np.uint8), _points(ANCHORS_XY), 10.0)
    moved = _shifted(base, 0.8, 0.4)
    held = tr.update(moved, _points(ANCHORS_XY), 10.0)
    flat = np.full_like(moved, 128)  # nothing to match (a hand in front of the eyes)
    for _ in range(PATIENCE_FRAMES):
        np.testing.assert_allclose(tr.update(flat, _points(ANCHORS_XY), 10.0), held)
    assert tr.missed == PATIENCE_FRAMES * len(ANCHOR_POINTS)
    # after PATIENCE_FRAMES misses the templates are cut again where the anchors were: no jump
    np.testing.assert_allclose(tr.update(moved, _points(ANCHORS_XY), 10.0), held)
    np.testing.assert_allclose(tr.update(_shifted(base, 1.8, 0.4), _points(ANCHORS_XY), 10.0), held + [1.0, 0.0],
                               atol=0.25)


def test_reach_covers_what_the_matching_reads():
    from aspectus.webcam.eye_anchors import OFFSET_RADII, PATCH_RADII, RESCALE_FRACTION, SEARCH_RADII

    r = 11.0
    worst = OFFSET_RADII * r + SEARCH_RADII * r + PATCH_RADII * r * (1 + RESCALE_FRACTION) + 1.5  # rounding
    assert anchor_reach_px(r) >= worst


@pytest.mark.parametrize("yaw, pitch", [(0.0, 0.0), (15.0, -5.0), (-20.0, 8.0)])
def test_translation_given_rotation_recovers_the_translation(yaw, pitch):
    K = camera_matrix(1280, 720, 60.0)
    R = head_rotation(yaw, pitch, 2.0)
    t = np.array([12.0, -8.0, 600.0])
    model = np.array([[-40.0, 25, -5], [-30, 27, -3], [-20, 25, -4], [20, 25, -4], [30, 27, -3], [40, 25, -5]])
    X = model @ R.T + t
    px = np.c_[K[0, 0] * X[:, 0] / X[:, 2] + K[0, 2], K[1, 1] * X[:, 1] / X[:, 2] + K[1, 2]]
    np.testing.assert_allclose(translation_given_rotation(R, model, px, K), t, atol=1e-6)
    assert translation_given_rotation(R, model, px + np.nan, K) is None


def test_points_beside_the_eyes_are_left_out_where_their_template_foreshortens_past_the_rescale_limit():
    """The yaw limit of each point beside an eye is where its surface, turned with the head (aspectus.geometry's
    convention: yaw > 0 turns the face towards the subject's right, camera -x), shows the camera
    1 - RESCALE_FRACTION of its facing width; turned the other way the point faces the camera more."""
    from aspectus.geometry import head_rotation
    from aspectus.webcam.eye_anchors import BESIDE_POINTS, RESCALE_FRACTION, surface_normal, turn_away_limits_deg
    from aspectus.webcam.headpose import face_model

    pts = face_model().points_mm
    points = ANCHOR_SETS["below_and_facing_beside"]
    limits = turn_away_limits_deg(points, pts)
    assert np.isinf(limits[[points.index(p) for p in ANCHOR_POINTS]]).all()
    for p in BESIDE_POINTS:
        lim = limits[points.index(p)]
        assert 8.0 < lim < 20.0
        n = surface_normal(pts, p)
        n_flat = np.array([n[0], 0.0, n[2]]) / np.hypot(n[0], n[2])  # its sideways facing only
        away = 1.0 if pts[p, 0] < 0 else -1.0  # the subject's right side turns away with yaw > 0
        facing = -n_flat[2]
        assert -(head_rotation(away * lim, 0, 0) @ n_flat)[2] / facing == pytest.approx(1 - RESCALE_FRACTION, abs=1e-6)
        assert -(head_rotation(-away * lim, 0, 0) @ n_flat)[2] / facing > 1.0


@pytest.mark.parametrize("yaw_deg, right_used", [(0.0, True), (20.0, False), (-20.0, True)])
def test_a_point_beside_the_eye_the_head_is_turned_away_from_leaves_the_refit(yaw_deg, right_used):
    """With ``below_and_facing_beside``, the points beside the right eye (subject's right, model x < 0) are left out
    of the translation's refit when the head is turned 20 deg to the right (beyond their 12-14 deg limits), and used
    otherwise; ``below_and_beside`` always uses them. The mesh is a perfect projection of the face model except for
    a 3 px error on the right eye's beside points, so the refit is exact exactly when they are left out."""
    from aspectus.geometry import head_rotation
    from aspectus.webcam.frame_geometry import FrameGeometry
    from aspectus.webcam.headpose import HeadPoseSolver, face_model

    R, t = head_rotation(yaw_deg, 0.0, 0.0), np.array([5.0, -3.0, 600.0])
    fits = {}
    for name in ("below_and_beside", "below_and_facing_beside"):
        geo = FrameGeometry(fov_deg=60.0, refine_iris=True, anchor_set=name)
        geo.solver = HeadPoseSolver(640, 480, fov_deg=60.0)
        K = geo.solver.K
        cam = face_model().points_mm @ R.T + t
        pts = np.c_[K[0, 0] * cam[:, 0] / cam[:, 2] + K[0, 2], K[1, 1] * cam[:, 1] / cam[:, 2] + K[1, 2], cam[:, 2]]
        pts[[226, 35], 0] += 3.0
        img = _texture(shape=(480, 640))
        fits[name] = geo._anchored_translation(R, t + 50.0, {"iris_diam_px": np.array([12.0, 12.0])},
                                               img.round().astype(np.uint8), pts, (0, 0))
    assert np.linalg.norm(fits["below_and_beside"] - t) > 0.1
    exact = np.linalg.norm(fits["below_and_facing_beside"] - t) < 1e-6
    assert exact != right_used


def test_a_head_turned_away_and_back_takes_up_its_first_templates_again():
    """Given the head rotation, a template is changed once the head has turned by RECUT_ROTATION_DEG since its
    cut; turned back, the tracker takes up the template cut there before (a key frame), not a chain of cuts."""
    from aspectus.webcam.eye_anchors import RECUT_ROTATION_DEG

    img = _texture(seed=4).round().astype(np.uint8)
    pts = _points(ANCHORS_XY)
    tr = EyeAnchorTracker(ANCHOR_POINTS)
    R0 = head_rotation(0.0, 0.0, 0.0)
    tr.update(img, pts, 10.0, rotation=R0)
    first = tr.template_ids.copy()
    assert tr.last_cut.all()
    tr.update(img, pts, 10.0, rotation=head_rotation(RECUT_ROTATION_DEG - 1.0, 0.0, 0.0))
    np.testing.assert_array_equal(tr.template_ids, first)  # within the limit: the same templates
    assert not tr.last_cut.any() and tr.last_matched.all()
    tr.update(img, pts, 10.0, rotation=head_rotation(RECUT_ROTATION_DEG + 3.0, 0.0, 0.0))
    assert tr.last_cut.all() and not np.isin(tr.template_ids, first).any()  # turned further: new cuts
    turned = tr.template_ids.copy()
    got = tr.update(img, pts, 10.0, rotation=head_rotation(1.0, 0.0, 0.0))  # back near the start
    np.testing.assert_array_equal(tr.template_ids, first)
    assert not tr.last_cut.any() and tr.last_matched.all()
    np.testing.assert_allclose(got, ANCHORS_XY, atol=0.25)
    tr.update(img, pts, 10.0, rotation=head_rotation(RECUT_ROTATION_DEG + 2.0, 0.0, 0.0))
    np.testing.assert_array_equal(tr.template_ids, turned)
    # without a rotation (the eye anchors) nothing of this applies
    plain = EyeAnchorTracker(ANCHOR_POINTS)
    plain.update(img, pts, 10.0)
    ids = plain.template_ids.copy()
    plain.update(img, pts, 10.0)
    np.testing.assert_array_equal(plain.template_ids, ids)


def _blobs(shift_xy=(0.0, 0.0), shape=(240, 320), seed=3):
    """Smooth Gaussian blobs (skin-like texture) evaluated at each pixel's centre in aspectus's picture
    convention (aspectus.schema: pixel i spans [i, i + 1), its centre at i + 0.5), all moved by ``shift_xy``:
    the picture a camera forms of the same skin moved by a known sub-pixel amount, without resampling."""
    rng = np.random.default_rng(seed)
    h, w = shape
    c = rng.uniform([0, 0], [w, h], (900, 2)) + np.asarray(shift_xy, float)
    a = rng.uniform(-1, 1, 900)
    yy, xx = np.mgrid[0:h, 0:w].astype(float) + 0.5
    g = np.zeros(shape)
    for (cx, cy), ak in zip(c, a):
        x0, x1 = int(max(0, cx - 9)), int(min(w, cx + 10))
        y0, y1 = int(max(0, cy - 9)), int(min(h, cy + 10))
        if x1 > x0 and y1 > y0:
            g[y0:y1, x0:x1] += ak * np.exp(-((xx[y0:y1, x0:x1] - cx) ** 2 + (yy[y0:y1, x0:x1] - cy) ** 2) / (2 * 2.5 ** 2))
    return np.repeat(np.clip(128 + 60 * g, 0, 255)[..., None], 3, axis=2).round().astype(np.uint8)


@pytest.mark.parametrize("shift", [(0.5, 0.5), (2.3, -1.7)])
def test_anchor_positions_are_in_the_picture_convention_of_the_mesh_points(shift):
    """Anchors cut at mesh points given in aspectus's picture convention and matched on the same skin drawn
    moved by a known sub-pixel shift report the moved points in that convention (not half a pixel off, as
    an OpenCV pixel-centre index would be): the matcher measures a displacement from the mesh point."""
    tr = EyeAnchorTracker(ANCHOR_POINTS)
    tr.update(_blobs(), _points(ANCHORS_XY + 0.37), 10.0)
    got = tr.update(_blobs(shift), _points(ANCHORS_XY + 0.37 + [2.0, -1.0]), 10.0)
    err = got - (ANCHORS_XY + 0.37 + np.asarray(shift))
    assert tr.matched == len(ANCHOR_POINTS)
    assert np.all(np.abs(err) < 0.25), err  # the parabola vertex's own bias per point
    assert np.all(np.abs(err.mean(axis=0)) < 0.1), err.mean(axis=0)
