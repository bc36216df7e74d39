"""The per-frame geometry's code as it was before its speed refactors, kept as the reference they must match.

tests/webcam/test_speed_refactors.py runs the pipeline with these in place of the current functions and
compares the samples tables: a speed change must not change a single number. Verbatim copies; when the
method itself changes on purpose, copy the new version here.
"""
# ruff: noqa
from __future__ import annotations

import numpy as np

from aspectus._env import import_cv2
from aspectus.webcam.eye_anchors import (MIN_SCORE, OFFSET_RADII, PATCH_RADII, PATIENCE_FRAMES, RESCALE_FRACTION,
                                         SEARCH_RADII, _grey, _grey_box_ok, _peak)
from aspectus.webcam.limbus import EDGE_NOISE_PX, SIDE_DEG, _R_TOL, fit_circles


def fit_many(cv2, eyes: list, cos_a, sin_a, min_points, dist_all=None, edge="steepest"):
    """One pass of ray casting from each eye's current centre and circle fitting: [(centre, radius) or None].

    (``edge``: only the steepest step, the pipeline's locator, is kept here.)

    The fit starts from the eye's current centre and radius (the previous pass's circle), with the radius
    kept within 15 % of the mesh's.
    """
    assert edge == "steepest", edge
    n_eyes, n_rays = len(eyes), len(cos_a)
    m = max(len(eye.radii) for eye in eyes)
    step = np.full((n_eyes, n_rays, m - 1), -np.inf)
    hmax = max(eye.dist.shape[0] for eye in eyes)
    wmax = max(eye.dist.shape[1] for eye in eyes)
    dist = np.zeros((n_eyes, hmax, wmax), np.float32)
    centre = np.array([eye.cur for eye in eyes], float)
    r = np.array([eye.r for eye in eyes])
    r_start = np.array([eye.r_fit for eye in eyes])
    n_rad = np.array([len(eye.radii) for eye in eyes])
    rad0 = np.array([eye.radii[0] for eye in eyes])
    rad_step = np.array([(eye.radii[-1] - eye.radii[0]) / (len(eye.radii) - 1) for eye in eyes])
    shape = np.array([eye.g.shape for eye in eyes])
    for k, eye in enumerate(eyes):
        cx, cy = eye.cur
        px = (cx + cos_a[:, None] * eye.radii[None, :]).astype(np.float32)
        py = (cy + sin_a[:, None] * eye.radii[None, :]).astype(np.float32)
        prof = cv2.remap(eye.g, px, py, cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)
        step[k, :, : len(eye.radii) - 1] = np.diff(prof, axis=1)  # outward dark -> bright is positive
        dist[k, : eye.dist.shape[0], : eye.dist.shape[1]] = eye.dist
    i = np.argmax(step, axis=2)  # (E, rays); the padding (-inf) is never the maximum
    peak = np.take_along_axis(step, i[..., None], axis=2)[..., 0]
    last = (n_rad - 2)[:, None]
    il, ir = np.maximum(i - 1, 0), np.minimum(i + 1, last)
    a_ = np.take_along_axis(step, il[..., None], axis=2)[..., 0]
    c_ = np.take_along_axis(step, ir[..., None], axis=2)[..., 0]
    with np.errstate(invalid="ignore"):
        den = a_ - 2 * peak + c_
        inner = (i > 0) & (i < last) & (den < 0)
        frac = np.where(inner, np.minimum(np.maximum(0.5 * (a_ - c_) / np.where(den == 0, -1, den), -0.5), 0.5), 0.0)
    # the radius at fractional sample index i + frac + 0.5 (samples evenly spaced; clamped at the ends as
    # linear interpolation between them is)
    x = np.minimum(np.maximum(i + frac + 0.5, 0.0), (n_rad - 1)[:, None])
    rr = rad0[:, None] + x * rad_step[:, None]
    qx = centre[:, :1] + cos_a[None, :] * rr
    qy = centre[:, 1:] + sin_a[None, :] * rr
    # inside the eye opening, at least 2 px (distance transform) from the lid outline
    xi = np.minimum(np.maximum(np.round(qx).astype(np.intp), 0), shape[:, 1:2] - 1)
    yi = np.minimum(np.maximum(np.round(qy).astype(np.intp), 0), shape[:, 0:1] - 1)
    keep = (peak > 2.0) & (dist[np.arange(n_eyes)[:, None], yi, xi] >= 2.0)  # > 2 grey levels per sample: a real edge
    ok = keep.sum(axis=1) >= min_points
    out: list = [None] * n_eyes
    if not ok.any():
        return out
    sel = np.flatnonzero(ok)
    pts = np.stack([qx[sel], qy[sel]], axis=2)
    # the side-arc rule (GazeParams.side_arcs, the default since 2026-12-05; a change of method, copied from
    # limbus._fit_many): the candidates near the horizontal are rim, the one-sided weights apply to the others
    sides = np.array([getattr(eyes[k], "side_arcs", False) for k in sel])
    sided = None
    if sides.any():
        sided = ~sides[:, None] | (np.abs(sin_a)[None, :] >= np.sin(np.radians(SIDE_DEG)))
    c, rfit, rms = fit_circles(pts, keep[sel], centre[sel], r[sel], r_tol=_R_TOL, inside_px=EDGE_NOISE_PX,
                               r_start=r_start[sel], sided=sided)
    grown = rfit >= (1 + _R_TOL) * r[sel] * (1 - 1e-9)
    if grown.any():
        # With the one-sided weights a circle that holds every candidate inside it costs little, so a fit
        # can grow round the candidates instead of running through the rim; its radius then ends at the
        # upper bound (on the rendered moving-head clips the fits that missed the iris centre by more than
        # 1.5 px had mostly reached it; the others end at a median 0.91-0.96 of the mesh's radius). The
        # symmetric fit is used instead.
        g_ = np.flatnonzero(grown)
        c2, r2, rms2 = fit_circles(pts[g_], keep[sel][g_], centre[sel][g_], r[sel][g_], r_tol=_R_TOL,
                                   r_start=r_start[sel][g_])
        c[g_], rfit[g_], rms[g_] = c2, r2, rms2
    for j, k in enumerate(sel):
        cj = c[j]
        if not np.all(np.isfinite(cj)) or np.hypot(cj[0] - centre[k, 0], cj[1] - centre[k, 1]) > r[k] or not rms[j] <= 1.5:
            continue
        out[k] = (cj.copy(), float(rfit[j]))
    return out


# EyeAnchorTracker.update before its refactor (a method: assigned onto the class by the test)
def anchors_update(self, image: np.ndarray, points_px: np.ndarray, iris_radius_px: float) -> np.ndarray:
    """The anchors' picture positions (k, 2) in this frame: the mesh's points plus the followed offsets.

    ``image`` is the picture or a crop of it, and ``points_px`` are in the same coordinates.
    """
    r = float(iris_radius_px)
    mesh = np.asarray(points_px, float)[list(self.points), :2]
    if not (np.isfinite(r) and r > 0 and np.all(np.isfinite(mesh))):
        return mesh + self.offsets_px
    half = max(3, int(round(PATCH_RADII * r)))
    if self._templates is None:
        self._templates = [None] * len(self.points)
        for j in range(len(self.points)):
            self._cut(j, image, mesh[j].tolist(), half, r)
        return mesh + self.offsets_px
    cv2 = import_cv2()
    s = max(2, int(round(SEARCH_RADII * r)))
    bound = OFFSET_RADII * r
    pred = mesh + np.clip(self.offsets_px, -bound, bound)
    jobs = []  # (anchor, window box) of the anchors matched in this frame
    for j in range(len(self.points)):
        t = self._templates[j]
        if t is None or abs(t[3] / r - 1.0) > RESCALE_FRACTION or self._misses[j] >= PATIENCE_FRAMES:
            self._cut(j, image, (mesh[j] + self.offsets_px[j]).tolist(), half, r)
            continue
        e = t[2] + s
        xi, yi = int(round(pred[j, 0])), int(round(pred[j, 1]))
        jobs.append((j, xi, yi, (xi - e, yi - e, xi + e + 1, yi + e + 1)))
    if not jobs:
        return mesh + self.offsets_px
    # one grey conversion for all the windows that lie in the picture
    inside = [jb for jb in jobs if _grey_box_ok(image, jb[3])]
    grey = None
    if inside:
        bx0 = min(jb[3][0] for jb in inside)
        by0 = min(jb[3][1] for jb in inside)
        grey = _grey(image, bx0, by0, max(jb[3][2] for jb in inside), max(jb[3][3] for jb in inside))
    for j, xi, yi, (x0, y0, x1, y1) in jobs:
        pk = None
        if grey is not None and _grey_box_ok(image, (x0, y0, x1, y1)):
            tpl, sub = self._templates[j][:2]
            win = grey[y0 - by0:y1 - by0, x0 - bx0:x1 - bx0]
            pk = _peak(cv2.matchTemplate(win, tpl, cv2.TM_CCOEFF_NORMED))
        if pk is None or not pk[2] >= MIN_SCORE:
            self._misses[j] += 1
            self.missed += 1
            continue
        tpl, sub = self._templates[j][:2]
        fx, fy = xi - s + pk[0] + sub[0], yi - s + pk[1] + sub[1]
        self.offsets_px[j] = (min(bound, max(-bound, fx - mesh[j, 0])), min(bound, max(-bound, fy - mesh[j, 1])))
        self._misses[j] = 0
        self.matched += 1
    return mesh + self.offsets_px

