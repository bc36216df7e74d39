"""Iris centre from the limbus: a circle fitted to the iris-sclera edges.

The face mesh's iris point follows horizontal eye movements well but
vertical ones poorly (at webcam scale the iris fills most of the eye opening
and the lids hide its top and bottom). The left and right limbus arcs stay
visible, though, and their curvature fixes the circle's centre in both
directions: for an iris of radius r the visible width of the iris in a row
at height y is ``2 sqrt(r^2 - (y - cy)^2)``.

For each eye, rays are cast from the face mesh's iris point; on each the
strongest dark-to-bright step (sub-pixel) is a limbus candidate if it lies
inside the mesh's eye outline and at least 2 px from it. A circle of about
the mesh's iris radius (within +-15 %) is fitted to the candidates by
Gauss-Newton least squares on the geometric distance, and the rays are cast
again from the fitted centre for a second fit (:func:`limbus_centres`).

The weights of that fit are one-sided (:func:`fit_circle`, ``inside_px``).
Measured against the renderer's per-frame iris truth, the candidates that
were wrong are the lid/iris junctions: where a lid crosses the iris the
lid's edge (dark iris above bright skin, for the lower lid) is a
dark-to-bright step too, 1-5 px *inside* the iris circle, and the mesh's lid
outline, which does not follow the rendered lids exactly (about 3 px too low
when the eye looks down), does not keep it out. With symmetric (Huber)
weights those junctions pulled the circle inwards - looking down, the lower
lid's junctions pulled it up by 1.5-2 px, and the right eye's vertical gain
was 0.77-0.85. An occluder can only make the visible iris smaller, so no
true edge lies outside the rim: points outside keep the Huber weight, points
further inside than the edge noise count little. Too few candidates (a
nearly closed eye, a tiny iris) or a poor fit keep the mesh's point.
"""
from __future__ import annotations

import numpy as np

from ._env import import_cv2
from .landmarks import LEFT_EYE_OUTLINE, RIGHT_EYE_OUTLINE

_OUTLINES = (np.array(RIGHT_EYE_OUTLINE), np.array(LEFT_EYE_OUTLINE))
_THIRDS = np.full((1, 3), 1.0 / 3.0, np.float32)  # grey = mean of R, G, B
_RAYS: dict[int, tuple[np.ndarray, np.ndarray]] = {}
#: the eye region read around each mesh iris point, in iris radii
ROI_RADII = 2.6
#: SD of a limbus candidate's distance from the true iris rim, px: the sub-pixel edge's own noise, measured
#: on rendered clips against their truth (0.41-0.47 px at 540p and 720p, candidates within 15 deg of the
#: horizontal, where no lid is in the way). Points further inside the fitted circle than this are taken to be
#: lid edges in front of the iris rather than the rim (:func:`fit_circle`, ``inside_px``).
EDGE_NOISE_PX = 0.45
#: the fitted radius stays within this fraction of the face mesh's iris radius
_R_TOL = 0.15


def _parabola_peak(v: np.ndarray, i: int) -> float:
    if 0 < i < len(v) - 1:
        a, b, c = v[i - 1], v[i], v[i + 1]
        den = a - 2 * b + c
        if np.isfinite(den) and den != 0:
            return i + float(np.clip(0.5 * (a - c) / den, -0.5, 0.5))
    return float(i)


def _solve3(A: np.ndarray, b: np.ndarray) -> tuple[float, float, float]:
    """Solution of a 3x3 linear system by Cramer's rule (in Python floats: the system is tiny)."""
    (a, b_, c), (d, e, f), (g, h, i) = A.tolist()
    u, v, w = b.tolist()
    det = a * (e * i - f * h) - b_ * (d * i - f * g) + c * (d * h - e * g)
    if det == 0.0 or not np.isfinite(det):
        return float("nan"), float("nan"), float("nan")
    x = (u * (e * i - f * h) - b_ * (v * i - f * w) + c * (v * h - e * w)) / det
    y = (a * (v * i - f * w) - u * (d * i - f * g) + c * (d * w - v * g)) / det
    z = (a * (e * w - v * h) - b_ * (d * w - v * g) + u * (d * h - e * g)) / det
    return x, y, z


def fit_circle(points: np.ndarray, centre0: np.ndarray, r0: float, *, r_tol: float = 0.2,
               iterations: int = 8, huber_px: float = 1.0, inside_px: float | None = None,
               r_start: float | None = None) -> tuple[np.ndarray, float, float]:
    """Robust geometric circle fit (centre, radius, RMS residual in px).

    Gauss-Newton on the distances of the points from the circle, with Huber
    weights (points further than ``huber_px`` count less); the radius is
    fitted too but kept within ``r0 * (1 +- r_tol)``, starting from
    ``r_start`` (default ``r0``).

    ``inside_px`` makes the weights one-sided, for a disc that something in
    front of it may hide (the iris behind the lids): an occluder can only
    make the visible disc smaller, so an edge point that is not on the rim
    lies *inside* the circle, never outside it. Points outside keep the
    Huber weight; points inside by more than ``inside_px`` (the edge noise)
    get the weight ``(inside_px / |res|)^2``, whose influence on the fit
    falls off as ``1 / |res|`` (a redescending, Cauchy-like tail), so the
    lid/iris junctions no longer pull the circle inwards. The RMS returned
    is then weighted the same way (that of the points taken as the rim).
    """
    px = np.ascontiguousarray(points[:, 0], dtype=float)
    py = np.ascontiguousarray(points[:, 1], dtype=float)
    cx, cy = float(centre0[0]), float(centre0[1])
    lo, hi = r0 * (1 - r_tol), r0 * (1 + r_tol)
    r = min(max(float(r0 if r_start is None else r_start), lo), hi)
    ridge = 1e-6 * np.eye(3)
    J = np.ones((3, len(px)))
    for _ in range(iterations):
        dx, dy = px - cx, py - cy
        dist = np.sqrt(dx * dx + dy * dy)
        np.maximum(dist, 1e-9, out=dist)
        res = dist - r
        if inside_px is None:
            w = huber_px / np.maximum(np.abs(res), huber_px)  # 1 within huber_px, huber_px / |res| beyond
        else:  # the first factor is 1 inside the circle, the second 1 outside it
            w = huber_px / np.maximum(res, huber_px) * np.square(inside_px / np.maximum(-res, inside_px))
        # the Jacobian of res wrt (cx, cy, r) is -(ux, uy, 1)
        np.divide(dx, dist, out=J[0])
        np.divide(dy, dist, out=J[1])
        Jw = J * w
        sx, sy, sr = _solve3(Jw @ J.T + ridge, Jw @ res)  # = -(J'WJ)^-1 J'W res
        if not (np.isfinite(sx) and np.isfinite(sy) and np.isfinite(sr)):
            break
        cx += sx
        cy += sy
        r = min(max(r + sr, lo), hi)
        if abs(sx) < 1e-2 and abs(sy) < 1e-2 and abs(sr) < 1e-2:
            break
    dx, dy = px - cx, py - cy
    res = np.sqrt(dx * dx + dy * dy) - r
    if inside_px is None:
        return np.array([cx, cy]), r, float(np.sqrt(np.mean(res * res)))
    # the RMS of the rim points: weighted, so that occluder edges well inside the circle hardly count
    w = huber_px / np.maximum(res, huber_px) * np.square(inside_px / np.maximum(-res, inside_px))
    return np.array([cx, cy]), r, float(np.sqrt(np.sum(w * res * res) / np.sum(w)))


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
    if n_rays not in _RAYS:
        ang = np.linspace(0, 2 * np.pi, n_rays, endpoint=False)
        _RAYS[n_rays] = (np.cos(ang), np.sin(ang))
    cos_a, sin_a = _RAYS[n_rays]
    for e, outline in enumerate(_OUTLINES):
        r = 0.5 * float(iris_diam_px[e])
        c0 = np.array(iris_px[e], float)
        if not (np.isfinite(r) and r >= 2.5 and np.all(np.isfinite(c0))):
            continue
        # the eye region, its smoothed grey picture and the distance to the lids, once per eye
        reach = ROI_RADII * r
        x0, x1 = int(max(0, np.floor(c0[0] - reach))), int(min(w, np.ceil(c0[0] + reach) + 1))
        y0, y1 = int(max(0, np.floor(c0[1] - reach))), int(min(h, np.ceil(c0[1] + reach) + 1))
        if x1 - x0 < 8 or y1 - y0 < 8:
            continue
        roi = image[y0:y1, x0:x1]
        g = cv2.transform(roi.astype(np.float32), _THIRDS) if roi.ndim == 3 else roi.astype(np.float32)
        g = cv2.GaussianBlur(g, (3, 3), 0.8)
        mask = np.zeros(g.shape, np.uint8)
        cv2.fillPoly(mask, [np.round(points_px[outline, :2] - np.array([x0, y0])).astype(np.int32)], 1)
        dist = cv2.distanceTransform(mask, cv2.DIST_L2, 3)
        radii = np.linspace(0.6 * r, 1.5 * r, max(12, int(np.ceil(1.8 * r))))
        cur = c0 - [x0, y0]
        r_fit = r
        for _ in range(passes):
            nxt = _fit_one(cv2, g, dist, cur, r, r_fit, radii, cos_a, sin_a, min_points)
            if nxt is None or np.hypot(*(nxt[0] - (c0 - [x0, y0]))) > r:
                break
            cur, r_fit = nxt
            fitted[e] = True
        out[e] = cur + [x0, y0]
    return out, fitted


def _fit_one(cv2, g, dist, centre, r, r_start, radii, cos_a, sin_a, min_points):
    """One pass of ray casting from ``centre`` (ROI px) and circle fitting: (centre, radius) or None.

    The fit starts from ``centre`` and ``r_start`` (the previous pass's circle), with the radius kept
    within 15 % of the mesh's ``r``.
    """
    cx, cy = centre
    px = (cx + cos_a[:, None] * radii[None, :]).astype(np.float32)
    py = (cy + sin_a[:, None] * radii[None, :]).astype(np.float32)
    prof = cv2.remap(g, px, py, cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)
    step = np.diff(prof, axis=1)  # outward dark -> bright is positive
    n_rays = len(cos_a)
    k = np.arange(n_rays)
    i = np.argmax(step, axis=1)
    peak = step[k, i]
    last = step.shape[1] - 1
    il, ir = np.maximum(i - 1, 0), np.minimum(i + 1, last)
    a_, c_ = step[k, il], step[k, ir]
    den = a_ - 2 * peak + c_
    inner = (i > 0) & (i < last) & (den < 0)
    frac = np.where(inner, np.minimum(np.maximum(0.5 * (a_ - c_) / np.where(den == 0, -1, den), -0.5), 0.5), 0.0)
    rr = np.interp(i + frac + 0.5, np.arange(len(radii)), radii)
    qx = cx + cos_a * rr
    qy = cy + sin_a * rr
    # inside the eye opening, at least 2 px (distance transform) from the lid outline
    xi = np.minimum(np.maximum(np.round(qx).astype(np.intp), 0), g.shape[1] - 1)
    yi = np.minimum(np.maximum(np.round(qy).astype(np.intp), 0), g.shape[0] - 1)
    keep = (peak > 2.0) & (dist[yi, xi] >= 2.0)  # > 2 grey levels per sample: a real edge
    if keep.sum() < min_points:
        return None
    pts = np.stack([qx[keep], qy[keep]], axis=1)
    c, rr, rms = fit_circle(pts, np.array([cx, cy]), r, r_tol=_R_TOL, inside_px=EDGE_NOISE_PX, r_start=r_start)
    if rr >= (1 + _R_TOL) * r * (1 - 1e-9):
        # With the one-sided weights a circle that holds every candidate inside it costs little, so a fit
        # can grow round the candidates instead of running through the rim; its radius then ends at the
        # upper bound (on the rendered moving-head clips the fits that missed the iris centre by more than
        # 1.5 px had mostly reached it; the others end at a median 0.91-0.96 of the mesh's radius). The
        # symmetric fit is used instead.
        c, rr, rms = fit_circle(pts, np.array([cx, cy]), r, r_tol=_R_TOL, r_start=r_start)
    if not np.all(np.isfinite(c)) or np.hypot(c[0] - cx, c[1] - cy) > r or rms > 1.5:
        return None
    return c, rr
