"""The corneal reflection (first Purkinje image) the renderer can draw: geometry, size, lids, off by default.

Constants (aspectus.synth.frame): anterior corneal radius 7.8 mm (Le Grand's schematic eye - from memory), corneal
apex 13 mm before the eye's centre of rotation (field notes - from memory), iris plane 10.5 mm before it (the
11.7 mm iris of Rüfer et al. 2005 on the 12 mm eyeball of Bekerman et al. 2014 - field notes, from memory).
"""
from __future__ import annotations

import json

import numpy as np
import pytest

from aspectus.errors import ParameterError
from aspectus.synth.frame import (CORNEA_CENTRE_MM, CORNEA_RADIUS_MM, IRIS_PLANE_RADIUS_MM, Camera,
                                  CornealReflection, corneal_reflection_points_mm, gaze_vector)

av = pytest.importorskip("av")


def _rigs():
    from aspectus.synth.face import load_face
    from aspectus.synth.frame import FaceRig

    cam, bg = Camera(1280, 720), np.full((720, 1280, 3), 90, np.uint8)
    face = load_face("hopper")
    return (FaceRig(face, cam, background=bg, rest_head_mm=(0.0, 0.0, 450.0)),
            FaceRig(face, cam, background=bg, rest_head_mm=(0.0, 0.0, 450.0), corneal_reflection=CornealReflection()))


def _spot_centroids(plain, lit, iris_uv):
    """Centroid (px) of the reflection near each iris, weighted by its share of each pixel (the brightening it
    adds over what it could add: the dark pupil brightens more than the iris under the same cover)."""
    a, b = plain.astype(float).mean(axis=2), lit.astype(float).mean(axis=2)
    d = np.clip((b - a) / np.maximum(CornealReflection().brightness - a, 1.0), 0, 1) * 255
    out = {}
    for e, (x, y) in iris_uv.items():
        x0, y0 = int(x) - 20, int(y) - 20
        w = d[y0:y0 + 41, x0:x0 + 41]
        assert w.sum() > 200, f"no reflection drawn on the {e} eye"
        yy, xx = np.mgrid[0:41, 0:41]
        out[e] = np.array([x0 + 0.5 + (w * xx).sum() / w.sum(), y0 + 0.5 + (w * yy).sum() / w.sum()])
    return out


def test_reflection_moves_a_fraction_of_the_iris_per_degree_of_eye_rotation():
    """Eye rotation by theta moves the iris centre by 10.5 mm * sin(theta) and the cornea's centre of curvature by
    (13 - 7.8) mm * sin(theta); with the camera and source far away (> 40 cornea radii) the reflection's surface
    normal hardly turns, so the reflection follows the centre of curvature: its picture motion is
    5.2 / 10.5 = 0.50 of the iris centre's (the basis of pupil-minus-reflection tracking)."""
    plain, lit = _rigs()
    R, T = np.eye(3), plain.rest_origin_mm
    expected = CORNEA_CENTRE_MM / IRIS_PLANE_RADIUS_MM
    assert expected == pytest.approx(0.495, abs=0.01)
    pos, iris = {}, {}
    for yaw in (-15.0, 0.0, 15.0):
        g = gaze_vector(yaw, 0.0)
        a, info = plain.render(R=R, T_mm=T, gaze=g, closure=0.0)
        b, info_b = lit.render(R=R, T_mm=T, gaze=g, closure=0.0)
        pos[yaw] = _spot_centroids(a, b, info["iris_uv"])
        iris[yaw] = info["iris_uv"]
        for e in ("right", "left"):  # the drawn spot sits where the source's own reflection point projects
            # (within a pixel: the screen spans 1-33 deg below the camera's axis, so its reflection is not
            # symmetric about its centre's, and the blur spreads it)
            assert np.linalg.norm(pos[yaw][e] - info_b["reflection_uv"][e]) < 1.0
    for e in ("right", "left"):
        d_spot = pos[15.0][e][0] - pos[-15.0][e][0]
        d_iris = iris[15.0][e][0] - iris[-15.0][e][0]
        assert abs(d_iris) > 12  # about 13.5 px of iris motion over 30 deg at this distance
        assert d_spot / d_iris == pytest.approx(expected, abs=0.05)
        assert abs(pos[0.0][e][1] - pos[15.0][e][1]) < 0.5  # a horizontal turn moves it horizontally only


def test_reflection_size_is_the_sources_angle_times_half_the_cornea_radius():
    """Paraxial convex mirror (focal length r/2): a source subtending the angle a images a * r / 2 across."""
    eye, g = np.array([30.0, -10.0, 600.0]), gaze_vector(0.0, 0.0)
    src = CornealReflection(source_mm=(0.0, 160.0, -20.0), size_mm=(500.0, 300.0))
    pts, on_cap = corneal_reflection_points_mm(eye, g, src.outline_mm())
    assert on_cap.all()
    c = eye + CORNEA_CENTRE_MM * g
    corners = src.outline_mm()

    def angle(p, q):
        u, v = p - c, q - c
        return np.arccos(u @ v / np.linalg.norm(u) / np.linalg.norm(v))
    for i, j in ((0, 1), (0, 3), (1, 2), (2, 3)):  # the four sides
        assert np.linalg.norm(pts[j] - pts[i]) == pytest.approx(angle(corners[i], corners[j]) * CORNEA_RADIUS_MM / 2,
                                                                rel=0.05)
    # a 50 x 30 cm screen at 60 cm: a few mm on the cornea (the "a few px" on a 12-25 px iris)
    assert 2.0 < np.linalg.norm(pts[1] - pts[0]) < 4.0
    # the point lies on the corneal sphere, where the normal bisects the directions to camera and source
    p, _ = corneal_reflection_points_mm(eye, g, np.array(src.source_mm))
    n = (p[0] - c) / CORNEA_RADIUS_MM
    to_cam, to_src = -p[0] / np.linalg.norm(p[0]), (src.source_mm - p[0]) / np.linalg.norm(src.source_mm - p[0])
    assert np.linalg.norm(p[0] - c) == pytest.approx(CORNEA_RADIUS_MM)
    assert n @ to_cam == pytest.approx(n @ to_src, abs=2e-3)  # equal angles of incidence and reflection
    # a source far to the side and behind the subject reflects off the sclera, not the cornea: not drawn
    _, side = corneal_reflection_points_mm(eye, g, np.array([[2000.0, 0.0, 1000.0]]))
    assert not side.any()


def test_lids_hide_the_reflection():
    plain, lit = _rigs()
    R, T, g = np.eye(3), plain.rest_origin_mm, gaze_vector(0.0, 0.0)
    a, _ = plain.render(R=R, T_mm=T, gaze=g, closure=1.0)
    b, _ = lit.render(R=R, T_mm=T, gaze=g, closure=1.0)
    np.testing.assert_array_equal(a, b)


def test_reflection_is_off_by_default_and_recorded(tmp_path):
    from aspectus.synth.render import render_clip
    from aspectus.synth.trajectory import synth_trajectory

    tr = synth_trajectory(duration_s=0.2, seed=1, blink_rate_per_min=0)
    kw = dict(size_px=(640, 360), noise_sd=0, crf=18)
    default = render_clip(tmp_path / "default.mp4", tr, **kw)
    off = render_clip(tmp_path / "off.mp4", tr, corneal_reflection=False, **kw)
    on = render_clip(tmp_path / "on.mp4", tr, corneal_reflection=True, **kw)
    assert default.params["corneal_reflection"] is None
    assert json.loads(on.truth_json_path.read_text())["corneal_reflection"]["size_mm"] == [500.0, 300.0]

    def first(p):
        with av.open(str(p)) as c:
            return next(iter(c.decode(video=0))).to_ndarray(format="rgb24").astype(float)
    f0, f1, f2 = first(default.path), first(off.path), first(on.path)
    np.testing.assert_array_equal(f0, f1)
    d = f2.mean(axis=2) - f0.mean(axis=2)
    assert d.max() > 40  # a bright spot appears ...
    ys, xs = np.nonzero(d > 20)
    t = default.truth.iloc[0]
    near = np.minimum(np.hypot(xs + 0.5 - t.right_iris_x_px, ys + 0.5 - t.right_iris_y_px),
                      np.hypot(xs + 0.5 - t.left_iris_x_px, ys + 0.5 - t.left_iris_y_px))
    assert near.max() < t.iris_diameter_px / 2 + 1  # ... only on the irises
    with pytest.raises(ParameterError, match="corneal_reflection"):
        render_clip(tmp_path / "bad.mp4", tr, corneal_reflection="screen", **kw)
    with pytest.raises(ParameterError, match="brightness"):
        CornealReflection(brightness=300.0)
