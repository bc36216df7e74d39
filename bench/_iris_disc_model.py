"""Iris centre from a model of the whole eye picture: a blurred dark disc in front of a brighter background.

An experiment measured by bench/bench_iris_localiser.py and NOT used by the pipeline: at classroom scale it
did not beat the limbus fit (figures in docs/notes/gaze-measurement.md, "Classroom scale (issue 15)").

The limbus fit (:mod:`aspectus.webcam.limbus`) uses a few dozen edge points, one per ray; at classroom scale
(an iris of 8-12 px) each is a sub-pixel peak of a one-pixel step, and the fitted centre's vertical error
is 0.5-1.2 px SD against the renderer's truth - 4-9 deg of gaze. This module fits, instead, every pixel of
the eye opening around the iris to a model of the picture there:

    I(u, v) = b0 + bx (u - u0) + by (v - v0) + k D(rho),   D = Phi((R - rho) / s)

with ``rho`` the distance of the pixel centre from the iris centre ``(cx, cy)``, ``R`` the iris radius (held
fixed: the caller gives it, from the clip's own measure of the iris size), ``s`` the edge's blur (the
picture's blur and the pixel's own width, ``sqrt(blur^2 + 1/12)``), ``Phi`` the normal distribution
function (a disc convolved with a Gaussian, to first order in ``s / R``), a background that may change
linearly across the eye (shading, a lighting gradient) and ``k < 0`` the iris's contrast against it.
``(cx, cy, b0, bx, by, k)`` are found by Gauss-Newton least squares with Huber weights (Huber 1964) on the
residuals, scale from their median absolute value, so what the model does not hold - a lid edge, a lash line,
a reflection - counts less. Only pixels inside the eye opening (the face mesh's lid outline) count: the lids
hide the iris, and the pixels they cover are left out rather than read as a bright iris.

Many eyes are fitted at once (:func:`fit_iris_discs`); each eye's arithmetic is independent of the others.
"""
from __future__ import annotations

import numpy as np

#: half-width of the square read around the starting centre, in iris radii
REACH_RADII = 1.8
#: least share of the disc's area that must lie in the eye opening for a fit
MIN_VISIBLE = 0.25
#: least iris contrast against its background, grey levels (0-255); a flat patch (a closed eye) has none
MIN_CONTRAST = 8.0
#: Huber's tuning constant, in robust SDs of the residuals (1.345 gives 95 % efficiency under normal noise)
HUBER_K = 1.345
_SQRT2 = np.sqrt(2.0)
_INV_SQRT2PI = 1.0 / np.sqrt(2.0 * np.pi)


def _erf(x: np.ndarray) -> np.ndarray:
    """The error function (Abramowitz & Stegun 1964, 7.1.26; absolute error below 1.5e-7) without SciPy's
    per-call overhead."""
    s = np.sign(x)
    a = np.abs(x)
    t = 1.0 / (1.0 + 0.3275911 * a)
    y = 1.0 - (((((1.061405429 * t - 1.453152027) * t) + 1.421413741) * t - 0.284496736) * t + 0.254829592) * t \
        * np.exp(-a * a)
    return s * y


def eye_opening_mask(shape: tuple[int, int], outline_px: np.ndarray, origin_px=(0.0, 0.0)) -> np.ndarray:
    """(H, W) bool: pixels of a picture (or crop at ``origin_px``) whose centres lie inside the outline.

    ``outline_px``: (M, 2) polygon in picture px, pixel-centre convention (pixel i's centre at i).
    """
    from aspectus._env import import_cv2

    cv2 = import_cv2()
    m = np.zeros(shape, np.uint8)
    p = np.asarray(outline_px, float)[:, :2] - np.asarray(origin_px, float)
    if not np.isfinite(p).all() or len(p) < 3:
        return m.astype(bool)
    cv2.fillPoly(m, [np.round(p * 16).astype(np.int32)], 1, lineType=cv2.LINE_8, shift=4)
    return m.astype(bool)


def fit_iris_discs(greys, centres0, radii_px, masks, *, blur_px: float = 0.8, iterations: int = 8,
                   huber_k: float = HUBER_K) -> tuple[np.ndarray, dict]:
    """Fit the dark-disc model (module docstring) to many eyes at once.

    Parameters
    ----------
    greys : list of (H, W) float arrays, one picture (or crop) per eye, grey levels 0-255.
    centres0 : (E, 2) starting iris centres in each grey's px (pixel-centre convention).
    radii_px : (E,) iris radii, px (held fixed).
    masks : list of (H, W) bool, the eye opening in each grey (None: every pixel counts).
    blur_px : SD of the picture's blur at the iris edge, px.

    Returns
    -------
    centres : (E, 2) fitted centres, NaN where there is no fit (too little of the disc in the opening, no
        contrast, a start outside the picture, a fit that left the disc it started in);
    info : dict of (E,) arrays: ``contrast`` (-k, grey levels), ``rms`` (robust residual SD), ``n_px``
        (pixels used), ``sd_px`` (2, E): the centre's SD from the fit's covariance.
    """
    E = len(greys)
    c0 = np.asarray(centres0, float).reshape(E, 2)
    R = np.asarray(radii_px, float).reshape(E)
    out = np.full((E, 2), np.nan)
    info = {"contrast": np.full(E, np.nan), "rms": np.full(E, np.nan), "n_px": np.zeros(E, int),
            "sd_px": np.full((2, E), np.nan)}
    s = float(np.sqrt(blur_px ** 2 + 1.0 / 12.0))
    # --- the pixels of each eye, padded into (E, N) arrays --------------------------------------------------
    us, vs, vals, keep = [], [], [], []
    for e in range(E):
        g = greys[e]
        if g is None or not (np.isfinite(R[e]) and R[e] > 1.0 and np.isfinite(c0[e]).all()):
            continue
        h, w = g.shape[:2]
        half = int(np.ceil(REACH_RADII * R[e])) + 1
        ix, iy = int(round(c0[e, 0])), int(round(c0[e, 1]))
        x0, x1, y0, y1 = max(0, ix - half), min(w, ix + half + 1), max(0, iy - half), min(h, iy + half + 1)
        if x1 - x0 < 3 or y1 - y0 < 3:
            continue
        patch = np.asarray(g[y0:y1, x0:x1], float)
        m = np.isfinite(patch)
        if masks is not None and masks[e] is not None:
            m &= np.asarray(masks[e][y0:y1, x0:x1], bool)
        yy, xx = np.nonzero(m)
        if len(xx) == 0:
            continue
        # enough of the disc must be in view: the opening's pixels within R of the start
        near = np.hypot(xx + x0 - c0[e, 0], yy + y0 - c0[e, 1]) <= R[e]
        if near.sum() < MIN_VISIBLE * np.pi * R[e] ** 2:
            continue
        us.append(xx + float(x0))
        vs.append(yy + float(y0))
        vals.append(patch[yy, xx])
        keep.append(e)
    if not keep:
        return out, info
    keep = np.array(keep)
    n = max(len(u) for u in us)
    K = len(keep)
    U = np.zeros((K, n))
    V = np.zeros((K, n))
    Y = np.zeros((K, n))
    W0 = np.zeros((K, n))
    for j in range(K):
        m = len(us[j])
        U[j, :m], V[j, :m], Y[j, :m], W0[j, :m] = us[j], vs[j], vals[j], 1.0
    cx, cy = c0[keep, 0].copy(), c0[keep, 1].copy()
    Rk = R[keep][:, None]
    du0, dv0 = U - cx[:, None], V - cy[:, None]  # the background's slopes are about the starting centre
    lin = np.zeros((K, 4))  # b0, bx, by, k
    w = W0.copy()
    active = np.ones(K, bool)
    ridge = 1e-6 * np.eye(6)
    scale = np.full(K, np.nan)
    cov = np.full((K, 6, 6), np.nan)
    for it in range(iterations + 1):
        dx, dy = U - cx[:, None], V - cy[:, None]
        rho = np.sqrt(dx * dx + dy * dy)
        np.maximum(rho, 1e-6, out=rho)
        z = (Rk - rho) / s
        D = 0.5 * (1.0 + _erf(z / _SQRT2))
        # columns: d model / d (cx, cy, b0, bx, by, k)
        J = np.empty((K, 6, n))
        J[:, 2] = 1.0
        J[:, 3] = du0
        J[:, 4] = dv0
        J[:, 5] = D
        if it == 0:
            # the linear parameters alone, the centre held: the start of the Gauss-Newton iterations
            A = (J[:, 2:] * w[:, None, :]) @ J[:, 2:].transpose(0, 2, 1)
            b = (J[:, 2:] * w[:, None, :]) @ Y[..., None]
            try:
                lin = np.linalg.solve(A + 1e-6 * np.eye(4), b)[..., 0]
            except np.linalg.LinAlgError:
                return out, info
            res = Y - np.einsum("kp,kpn->kn", lin, J[:, 2:])
        else:
            g = lin[:, 3:4] * np.exp(-0.5 * z * z) * (_INV_SQRT2PI / s) / rho
            J[:, 0] = g * dx
            J[:, 1] = g * dy
            JW = J * w[:, None, :]
            A = JW @ J.transpose(0, 2, 1)
            b = (JW @ res[..., None])[..., 0]
            with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
                try:
                    step = np.linalg.solve(A + ridge, b[..., None])[..., 0]
                except np.linalg.LinAlgError:
                    step = np.full((K, 6), np.nan)
                    for j in range(K):
                        try:
                            step[j] = np.linalg.solve(A[j] + ridge, b[j])
                        except np.linalg.LinAlgError:
                            pass
            okj = active & np.isfinite(step).all(axis=1)
            step = np.where(okj[:, None], step, 0.0)
            # at most half a radius per step: a bad start does not throw the centre out of the eye
            lim = 0.5 * R[keep]
            mag = np.hypot(step[:, 0], step[:, 1])
            f = np.where(mag > lim, lim / np.maximum(mag, 1e-12), 1.0)
            cx = cx + f * step[:, 0]
            cy = cy + f * step[:, 1]
            lin = lin + step[:, 2:]
            active = okj & (mag > 1e-3)
            if it == iterations or not active.any():
                with np.errstate(invalid="ignore"):
                    cov = np.linalg.pinv(A)
                dx, dy = U - cx[:, None], V - cy[:, None]
                rho = np.sqrt(dx * dx + dy * dy)
                D = 0.5 * (1.0 + _erf((Rk - rho) / s / _SQRT2))
                res = Y - (lin[:, :1] + lin[:, 1:2] * du0 + lin[:, 2:3] * dv0 + lin[:, 3:4] * D)
                break
            dx, dy = U - cx[:, None], V - cy[:, None]
            rho = np.sqrt(dx * dx + dy * dy)
            D = 0.5 * (1.0 + _erf((Rk - rho) / s / _SQRT2))
            res = Y - (lin[:, :1] + lin[:, 1:2] * du0 + lin[:, 2:3] * dv0 + lin[:, 3:4] * D)
        # Huber weights on the residuals, scaled by their robust SD
        a = np.where(W0 > 0, np.abs(res), np.nan)
        scale = np.maximum(1.4826 * np.nanmedian(a, axis=1), 1.0)
        t = huber_k * scale[:, None]
        w = W0 * np.minimum(1.0, t / np.maximum(np.abs(res), 1e-12))
    contrast = -lin[:, 3]
    with np.errstate(invalid="ignore"):
        sd = np.sqrt(np.clip(np.stack([cov[:, 0, 0], cov[:, 1, 1]]), 0, None)) * scale
    good = (np.isfinite(cx) & np.isfinite(cy) & (contrast >= MIN_CONTRAST)
            & (np.hypot(cx - c0[keep, 0], cy - c0[keep, 1]) <= R[keep]))
    out[keep[good], 0] = cx[good]
    out[keep[good], 1] = cy[good]
    info["contrast"][keep] = contrast
    info["rms"][keep] = scale
    info["n_px"][keep] = W0.sum(axis=1).astype(int)
    info["sd_px"][:, keep] = sd
    return out, info


# --- the same disc with the lids as part of the model (one eye at a time; an experiment, about 10 ms per eye) --


def _normal_cdf(z):
    return 0.5 * (1.0 + _erf(z / _SQRT2))


def lid_model_pixels(grey, outline_px, centre0, radius_px, *, reach_radii=1.8, vreach_radii=1.4):
    """The pixels the lid-aware fit reads and the mesh's lid lines at their columns, or None.

    ``outline_px``: (16, 2) the face mesh's eye outline in ``grey``'s px, in the order of
    :data:`aspectus.face_mesh.RIGHT_EYE_OUTLINE`: a corner, seven upper-lid points, the other corner, seven
    lower-lid points.
    """
    h, w = grey.shape
    R = float(radius_px)
    ol = np.asarray(outline_px, float)
    ix, iy = int(round(centre0[0])), int(round(centre0[1]))
    half, vh = int(np.ceil(reach_radii * R)) + 1, int(np.ceil(vreach_radii * R)) + 1
    xa, xb = min(ol[0, 0], ol[8, 0]), max(ol[0, 0], ol[8, 0])
    x0, x1 = max(0, ix - half, int(np.ceil(xa))), min(w, ix + half + 1, int(np.floor(xb)) + 1)
    y0, y1 = max(0, iy - vh), min(h, iy + vh + 1)
    if x1 - x0 < 3 or y1 - y0 < 3:
        return None
    yy, xx = np.mgrid[y0:y1, x0:x1]
    u, v = xx.ravel().astype(float), yy.ravel().astype(float)
    up, lo = ol[[0, 1, 2, 3, 4, 5, 6, 7, 8]], ol[[0, 15, 14, 13, 12, 11, 10, 9, 8]]
    ou, olo = np.argsort(up[:, 0]), np.argsort(lo[:, 0])
    q = (u - 0.5 * (xa + xb)) / max(0.5 * (xb - xa), 1e-6)
    return {"u": u, "v": v, "Y": np.asarray(grey, float)[y0:y1, x0:x1].ravel(),
            "yu": np.interp(u, up[ou, 0], up[ou, 1]), "yl": np.interp(u, lo[olo, 0], lo[olo, 1]), "q": q,
            "bump": np.clip(1.0 - q * q, 0.0, 1.0), "eye_w": float(xb - xa)}


def _lid_basis(P, th, R, s):
    """Columns of the linear part: skin, sclera, sclera shading to the corners, iris, lash line, skin slopes."""
    cx, cy, du, dl = th
    rho = np.hypot(P["u"] - cx, P["v"] - cy)
    D = _normal_cdf((R - rho) / s)
    yu, yl = P["yu"] + du * P["bump"], P["yl"] + dl * P["bump"]
    op = _normal_cdf((P["v"] - yu) / s) * _normal_cdf((yl - P["v"]) / s)  # the eye opening
    wl = max(0.6, P["eye_w"] / 14.0 / 2.355)
    L = np.exp(-0.5 * ((P["v"] - yu) / wl) ** 2)
    return np.stack([1 - op, op, op * P["q"] ** 2, op * D, L, (1 - op) * (P["v"] - cy) / R, (1 - op) * (P["u"] - cx) / R])


def fit_iris_with_lids(P, centre0, radius_px, *, blur_px=0.8, iterations=10, huber_k=HUBER_K,
                       lower_lid_free=True, lid_prior_radii=(None, None)):
    """The iris disc and both lids' heights fitted together: (cx, cy, upper-lid shift, lower-lid shift) or None.

    The picture is modelled as skin (with a linear slope) outside the eye opening and sclera (darker towards
    the corners) with the blurred iris disc inside it; the opening is bounded by the face mesh's lid lines,
    each shifted vertically by a fitted amount (largest mid-eye, none at the corners, at most 0.6 iris
    radii), with a dark lash line along the upper lid. Linear parameters by weighted least squares at each
    step, the four others by Gauss-Newton on a forward-difference Jacobian, Huber weights. With
    ``lower_lid_free`` False the lower lid stays on the mesh's line.
    """
    R = float(radius_px)
    s = float(np.sqrt(blur_px ** 2 + 1.0 / 12.0))
    th = np.array([centre0[0], centre0[1], 0.0, 0.0])
    Y = P["Y"]
    w = np.ones_like(Y)
    lin = None
    n_free = 4 if lower_lid_free else 3
    for _ in range(iterations):
        B = _lid_basis(P, th, R, s)
        BW = B * w
        lin = np.linalg.solve(BW @ B.T + 1e-6 * np.eye(len(B)), BW @ Y)
        m = lin @ B
        res = Y - m
        scale = max(1.4826 * float(np.median(np.abs(res))), 1.0)
        w = np.minimum(1.0, huber_k * scale / np.maximum(np.abs(res), 1e-9))
        J = np.empty((n_free, len(Y)))
        for k in range(n_free):
            t2 = th.copy()
            t2[k] += 0.05
            J[k] = (lin @ _lid_basis(P, t2, R, s) - m) / 0.05
        A = (J * w) @ J.T + 1e-6 * np.eye(n_free)
        b = (J * w) @ res
        for k, sp in ((2, lid_prior_radii[0]), (3, lid_prior_radii[1])):
            if sp and k < n_free:  # a normal prior on the lid's shift, SD sp iris radii, in the residuals' units
                lam = (scale / (sp * R)) ** 2
                A[k, k] += lam
                b[k] -= lam * th[k]
        try:
            step = np.linalg.solve(A, b)
        except np.linalg.LinAlgError:
            return None
        mag = float(np.hypot(step[0], step[1]))
        if mag > 0.5 * R:
            step[:2] *= 0.5 * R / mag
        th[:n_free] += step
        th[2:] = np.clip(th[2:], -0.6 * R, 0.6 * R)
        if np.abs(step).max() < 1e-3:
            break
    if lin is None or not np.isfinite(th).all() or -lin[3] < MIN_CONTRAST or np.hypot(*(th[:2] - centre0)) > R:
        return None
    return th
