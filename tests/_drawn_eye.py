"""Drawn grey eyes for the limbus tests: the eye opening and the picture grid they are drawn on.

The eye opening is the face mesh's 16-point outline (upper and lower lid as parabolas through the eye corners,
2.6 iris radii either side of the centre); the picture is drawn ``SUPERSAMPLE`` times finer and averaged down by
the tests, so edges land at sub-pixel positions.
"""
from __future__ import annotations

import numpy as np

SUPERSAMPLE = 8


def eye_opening(cv2, centre, iris_r_px: float, top: float, bottom: float, size: int):
    """The outline (16 x 2, picture px) of an eye opening centred at ``centre`` whose lids reach the heights ``top``
    and ``bottom`` at the middle; its mask on the fine grid (``size * SUPERSAMPLE`` square, uint8); and the fine
    grid's picture coordinates relative to ``centre`` (X, Y; pixel i spans [i, i + 1))."""
    cx, cy = centre
    ew = 2.6 * iris_r_px
    xs = np.linspace(cx - ew, cx + ew, 9)
    u = (xs - cx) / ew
    upper = np.c_[xs, cy + (top - cy) * (1 - u ** 2)]
    lower = np.c_[xs, cy + (bottom - cy) * (1 - u ** 2)]
    outline = np.vstack([upper, lower[1:-1][::-1]])
    n = size * SUPERSAMPLE
    mask = np.zeros((n, n), np.uint8)
    cv2.fillPoly(mask, [np.round(outline * SUPERSAMPLE * 16).astype(np.int32)], 1, cv2.LINE_8, 4)
    yy, xx = np.mgrid[0:n, 0:n].astype(np.float32)
    return outline, mask, (xx + 0.5) / SUPERSAMPLE - cx, (yy + 0.5) / SUPERSAMPLE - cy


def right_eye_only(outline: np.ndarray) -> np.ndarray:
    """Face mesh points (478 x 3) with the right eye's outline at ``outline`` and the left eye's 1000 px off the
    picture, so only the right eye is fitted."""
    from aspectus.webcam.landmarks import LEFT_EYE_OUTLINE, RIGHT_EYE_OUTLINE

    pts = np.zeros((478, 3))
    pts[list(RIGHT_EYE_OUTLINE), :2] = outline
    pts[list(LEFT_EYE_OUTLINE), :2] = outline + 1000.0
    return pts


def lid_line_points(centre, half: float, upper: float, lower: float) -> np.ndarray:
    """Face mesh points (478 x 3, zero elsewhere) with the right eye's outline (outer corner, 7 upper-lid points,
    inner corner, 7 lower-lid points) as two straight lids: the corners ``half`` px either side of ``centre`` at
    its height, the upper lid ``upper`` px above it and the lower lid ``lower`` px below."""
    from aspectus.webcam.landmarks import RIGHT_EYE_OUTLINE

    outline = np.array(RIGHT_EYE_OUTLINE)
    pts = np.zeros((478, 3))
    xs = np.linspace(centre[0] - half, centre[0] + half, 9)[1:-1]
    pts[outline[0], :2] = (centre[0] - half, centre[1])
    pts[outline[1:8], 0], pts[outline[1:8], 1] = xs, centre[1] - upper
    pts[outline[8], :2] = (centre[0] + half, centre[1])
    pts[outline[9:], 0], pts[outline[9:], 1] = xs[::-1], centre[1] + lower
    return pts
