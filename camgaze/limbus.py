"""Iris centre from the limbus: a circle fitted to the iris-sclera edges.

The face mesh's iris point follows horizontal eye movements well but
vertical ones poorly (at webcam scale the iris fills most of the eye opening
and the lids hide its top and bottom). The left and right limbus arcs stay
visible, though, and their curvature fixes the circle's centre in both
directions: for an iris of radius r the visible width of the iris in a row
at height y is ``2 sqrt(r^2 - (y - cy)^2)``.

For each eye: in every pixel row inside the eye opening (the lid outline of
the mesh, shrunk by a pixel so the lids' own edges are not used) the
strongest darkening edge left of the iris and the strongest brightening edge
right of it are found on the horizontal intensity gradient, refined to
sub-pixel by a parabola. A circle of the iris radius measured by the mesh
(allowed to vary by +-20 %) is fitted to those points by Gauss-Newton least
squares on the geometric distance, with points further than 1 px from the
circle down-weighted (Huber weights). Too few edge rows (a nearly closed
eye, a tiny iris) keep the mesh's point.
"""
from __future__ import annotations

import numpy as np

from ._env import import_cv2
from .landmarks import LEFT_EYE_OUTLINE, RIGHT_EYE_OUTLINE


def _parabola_peak(v: np.ndarray, i: int) -> float:
    if 0 < i < len(v) - 1:
        a, b, c = v[i - 1], v[i], v[i + 1]
        den = a - 2 * b + c
        if np.isfinite(den) and den != 0:
            return i + float(np.clip(0.5 * (a - c) / den, -0.5, 0.5))
    return float(i)


def fit_circle(points: np.ndarray, centre0: np.ndarray, r0: float, *, r_tol: float = 0.2,
               iterations: int = 8, huber_px: float = 1.0) -> tuple[np.ndarray, float, float]:
    """Robust geometric circle fit (centre, radius, RMS residual in px).

    Gauss-Newton on the distances of the points from the circle, with Huber
    weights (points further than ``huber_px`` count less); the radius is
    fitted too but kept within ``r0 * (1 +- r_tol)``.
    """
    px = np.ascontiguousarray(points[:, 0], dtype=float)
    py = np.ascontiguousarray(points[:, 1], dtype=float)
    cx, cy = float(centre0[0]), float(centre0[1])
    r = float(r0)
    lo, hi = r0 * (1 - r_tol), r0 * (1 + r_tol)
    ridge = 1e-6 * np.eye(3)
    for _ in range(iterations):
        dx, dy = px - cx, py - cy
        dist = np.maximum(np.sqrt(dx * dx + dy * dy), 1e-9)
        res = dist - r
        ares = np.abs(res)
        w = np.where(ares <= huber_px, 1.0, huber_px / np.maximum(ares, 1e-12))
        ux, uy = dx / dist, dy / dist
        wux, wuy = w * ux, w * uy
        # the Jacobian of res wrt (cx, cy, r) is (-ux, -uy, -1)
        A = np.array([[wux @ ux, wux @ uy, wux.sum()],
                      [wux @ uy, wuy @ uy, wuy.sum()],
                      [wux.sum(), wuy.sum(), w.sum()]]) + ridge
        gvec = np.array([wux @ res, wuy @ res, w @ res])
        step = np.linalg.solve(A, gvec)  # = -(J'WJ)^-1 J'W res
        cx += step[0]
        cy += step[1]
        r = min(max(r + step[2], lo), hi)
        if abs(step[0]) < 1e-2 and abs(step[1]) < 1e-2 and abs(step[2]) < 1e-2:
            break
    dx, dy = px - cx, py - cy
    res = np.sqrt(dx * dx + dy * dy) - r
    return np.array([cx, cy]), r, float(np.sqrt(np.mean(res * res)))


def limbus_centres(image: np.ndarray, points_px: np.ndarray, iris_px: np.ndarray, iris_diam_px: np.ndarray,
                   *, min_points: int = 8, n_rays: int = 48, passes: int = 2) -> tuple[np.ndarray, np.ndarray]:
    """Both eyes' iris centres (right, left) fitted to the limbus.

    Rays are cast from the face mesh's iris point every ``360 / n_rays``
    degrees; along each, the strongest dark-to-bright step between 0.6 and
    1.5 iris radii (sub-pixel, on the grey picture smoothed by a 3x3
    Gaussian) is a limbus candidate if it lies inside the eye opening, at
    least 2 px from the lids' outline (the lid edge is itself a
    dark-to-bright step). A circle of about the mesh's iris radius is fitted
    to the candidates (:func:`fit_circle`).

    Parameters
    ----------
    image : (H, W, 3) RGB or (H, W) grey picture.
    points_px : (478, 3) face-mesh landmarks in px.
    iris_px : (2, 2) mesh iris centres; iris_diam_px : (2,) mesh iris diameters.
    min_points : int
        Fewest limbus candidates needed for a fit; otherwise the mesh point is kept.
    passes : int
        Rays are cast again from the fitted centre this many times in all
        (the first pass starts from the mesh point, which may be off).

    Returns
    -------
    centres : (2, 2) px; fitted : (2,) bool (False = the mesh point was kept).
    """
    cv2 = import_cv2()
    out = np.array(iris_px, float).copy()
    fitted = np.zeros(2, bool)
    h, w = image.shape[:2]
    ang = np.linspace(0, 2 * np.pi, n_rays, endpoint=False)
    cos_a, sin_a = np.cos(ang), np.sin(ang)
    for e, outline in enumerate((RIGHT_EYE_OUTLINE, LEFT_EYE_OUTLINE)):
        r = 0.5 * float(iris_diam_px[e])
        c0 = np.array(iris_px[e], float)
        if not (np.isfinite(r) and r >= 2.5 and np.all(np.isfinite(c0))):
            continue
        # the eye region, its smoothed grey picture and the distance to the lids, once per eye
        x0, x1 = int(max(0, np.floor(c0[0] - 2.6 * r))), int(min(w, np.ceil(c0[0] + 2.6 * r) + 1))
        y0, y1 = int(max(0, np.floor(c0[1] - 2.6 * r))), int(min(h, np.ceil(c0[1] + 2.6 * r) + 1))
        if x1 - x0 < 8 or y1 - y0 < 8:
            continue
        roi = image[y0:y1, x0:x1]
        g = roi.astype(np.float32).mean(axis=2) if roi.ndim == 3 else roi.astype(np.float32)
        g = cv2.GaussianBlur(g, (3, 3), 0.8)
        mask = np.zeros(g.shape, np.uint8)
        cv2.fillPoly(mask, [np.round(points_px[list(outline), :2] - [x0, y0]).astype(np.int32)], 1)
        dist = cv2.distanceTransform(mask, cv2.DIST_L2, 3)
        radii = np.linspace(0.6 * r, 1.5 * r, max(12, int(np.ceil(1.8 * r))))
        cur = c0 - [x0, y0]
        for _ in range(passes):
            nxt = _fit_one(cv2, g, dist, cur, r, radii, cos_a, sin_a, min_points)
            if nxt is None or np.hypot(*(nxt - (c0 - [x0, y0]))) > r:
                break
            cur = nxt
            fitted[e] = True
        out[e] = cur + [x0, y0]
    return out, fitted


def _fit_one(cv2, g, dist, centre, r, radii, cos_a, sin_a, min_points):
    """One pass of ray casting from ``centre`` (ROI px) and circle fitting; None when it fails."""
    cx, cy = centre
    px = (cx + cos_a[:, None] * radii[None, :]).astype(np.float32)
    py = (cy + sin_a[:, None] * radii[None, :]).astype(np.float32)
    prof = cv2.remap(g, px, py, cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)
    step = np.diff(prof, axis=1)  # outward dark -> bright is positive
    n_rays = len(cos_a)
    k = np.arange(n_rays)
    i = np.argmax(step, axis=1)
    peak = step[k, i]
    il, ir = np.clip(i - 1, 0, step.shape[1] - 1), np.clip(i + 1, 0, step.shape[1] - 1)
    a_, c_ = step[k, il], step[k, ir]
    den = a_ - 2 * peak + c_
    inner = (i > 0) & (i < step.shape[1] - 1) & (den < 0)
    frac = np.where(inner, np.clip(0.5 * (a_ - c_) / np.where(den == 0, -1, den), -0.5, 0.5), 0.0)
    rr = np.interp(i + frac + 0.5, np.arange(len(radii)), radii)
    qx = cx + cos_a * rr
    qy = cy + sin_a * rr
    # inside the eye opening, at least 2 px (distance transform) from the lid outline
    xi = np.clip(np.round(qx).astype(int), 0, g.shape[1] - 1)
    yi = np.clip(np.round(qy).astype(int), 0, g.shape[0] - 1)
    keep = (peak > 2.0) & (dist[yi, xi] >= 2.0)  # > 2 grey levels per sample: a real edge
    if keep.sum() < min_points:
        return None
    pts = np.stack([qx[keep], qy[keep]], axis=1)
    c, rr, rms = fit_circle(pts, np.array([cx, cy]), r, r_tol=0.15)
    if not np.all(np.isfinite(c)) or np.hypot(c[0] - cx, c[1] - cy) > r or rms > 1.5:
        return None
    return c
