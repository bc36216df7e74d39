"""Filling a light source mirrored by the cornea on the iris (aspectus.webcam.limbus.fill_bright_spots and
fill_iris_reflections).

A screen or window reflected by the cornea (the first Purkinje image) is a small near-saturated patch near the
iris centre. Common practice in pupil and iris localisation: find such reflections and fill them in before
measuring the eye. The pipeline does so before the face mesh (tests/webcam/test_gaze_grid_reflection.py).
"""
from __future__ import annotations

import numpy as np
from aspectus.webcam.limbus import fill_bright_spots, fill_iris_reflections


def _eye(centre, r, spot=None, size=(48, 36), n=8):
    """A dark iris disc on a bright sclera (area-weighted, n x n samples per pixel), with an optional bright
    rectangle ``spot = (dx, dy, w, h)`` (px from the centre) at grey level 245, blurred as a webcam lens does."""
    import cv2

    w, h = size
    s = (np.arange(n) + 0.5) / n
    ys = (np.arange(h)[:, None] + s[None, :]).ravel()[:, None]
    xs = (np.arange(w)[:, None] + s[None, :]).ravel()[None, :]
    iris = (np.hypot(xs - centre[0], ys - centre[1]) <= r).reshape(h, n, w, n).mean(axis=(1, 3))
    img = 200.0 - 130.0 * iris
    if spot is not None:
        dx, dy, sw, sh = spot
        box = ((np.abs(xs - centre[0] - dx) <= sw / 2) & (np.abs(ys - centre[1] - dy) <= sh / 2))
        a = box.reshape(h, n, w, n).mean(axis=(1, 3))
        img = img * (1 - a) + 245.0 * a
    img = cv2.GaussianBlur(img, (0, 0), 0.7)
    return np.clip(np.rint(img), 0, 255).astype(np.uint8)


def test_the_fill_leaves_a_plain_iris_and_the_rim_alone():
    """Only compact bright spots inside the disc are filled: none on a plain iris, none where the sclera enters
    the disc because the start point is off, and the whole spot where there is one."""
    centre, r = np.array([24.3, 17.6]), 6.0
    g = _eye(centre, r).astype(np.float32)
    for off in ((0.0, 0.0), (2.5, 0.0), (0.0, -2.0)):
        h = g.copy()
        assert fill_bright_spots(h, centre - 0.5 + off, r) == 0  # region coordinates: pixel centres at integers
        np.testing.assert_array_equal(h, g)
    lit = _eye(centre, r, (0.0, 1.6, 3.0, 2.0)).astype(np.float32)
    yy, xx = np.mgrid[0:lit.shape[0], 0:lit.shape[1]] + 0.5
    inner = np.hypot(xx - centre[0], yy - centre[1]) < 0.6 * r
    before = lit[inner].max()
    assert fill_bright_spots(lit, centre - 0.5, r) > 4
    assert before > 180 and lit[inner].max() < 110  # the iris is drawn at 70, the reflection at 245


def test_reflections_are_filled_on_an_rgb_picture_and_nothing_else_changes():
    centre, r = np.array([24.3, 17.6]), 6.0
    lit = np.repeat(_eye(centre, r, (0.5, 1.6, 3.0, 2.0))[..., None], 3, axis=2)
    plain = np.repeat(_eye(centre, r)[..., None], 3, axis=2)
    keep = lit.copy()
    out, n = fill_iris_reflections(lit, [centre + [0.6, -0.4], [np.nan, np.nan]], [2 * r, np.nan])
    np.testing.assert_array_equal(lit, keep)  # the input stays as it was
    assert n > 4 and out.dtype == np.uint8
    yy, xx = np.mgrid[0:lit.shape[0], 0:lit.shape[1]] + 0.5
    d = np.hypot(xx - centre[0], yy - centre[1])
    assert out[d < 0.6 * r].max() < 110  # about the iris level (70) where the reflection was
    np.testing.assert_array_equal(out[d > 1.2 * r], lit[d > 1.2 * r])  # the rest of the picture as it was
    same, n0 = fill_iris_reflections(plain, [centre, centre + 1000], [2 * r, 2 * r])
    assert n0 == 0 and same is plain
