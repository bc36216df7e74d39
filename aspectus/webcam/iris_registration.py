"""The iris's motion between frames from registering its disc in the eye patches, fused with the absolute estimate
(``GazeParams(iris_registration=True)``).

The iris centre of every frame comes from an absolute fit (the limbus circle fit, :mod:`aspectus.webcam.limbus`,
or below a 16.8 px iris the appearance regression, :mod:`aspectus.webcam.iris_appearance`), whose error is
drawn afresh each frame: that is the sample-to-sample noise. A fixation detector needs the gaze's *changes*, and
the change between two frames can be read from many more pixels than a rim: the whole iris disc, moved against
itself. So:

1. Each eye's patch (the head-stabilised :class:`aspectus.webcam.iris_appearance.EyePatchSampler` patch, which
   moves with the head and not with the eyes) of frame ``t - 1`` is masked to a disc of :data:`DISC_RADII` iris
   radii round that frame's absolute iris centre (the iris, its rim and a ring of sclera: the lids' and eye
   corners' own motion stays mostly outside), and its shift to frame ``t`` is found by Lucas-Kanade
   registration (Lucas & Kanade 1981; inverse-compositional form, Baker & Matthews 2004 - from memory) with a
   brightness gain and offset, robust Tukey weights (biweight, 4.685 robust SD: common practice) and two starts
   (no motion, and the absolute estimate's own step, so that a saccade's step is found where it is large)
   (:func:`register_shift`). A shift beyond :data:`MAX_SHIFT_RADII` of the disc's radius, a residual beyond
   :data:`RESIDUAL_SD` robust SD of the clip's, and frames with closed eyes give no increment.
2. Each increment is taken into the picture: frame ``t - 1``'s centre moved by the increment (times a gain, below),
   through frame ``t``'s patch transform, minus that centre through frame ``t - 1``'s. The patch frame jitters
   with the eye anchors that place it, each eye's on its own, but the jitter is in both the registered shift and
   the transforms and cancels, so the two eyes' true picture increments agree - which the noise level below
   relies on (in patch coordinates the eyes' true increments differ by the anchors' jitter, SD 0.33 samples a
   frame at 12 px against the registration's 0.08-0.15).
3. Per eye and picture axis, a Kalman filter and Rauch-Tung-Striebel smoother (Rauch, Tung & Striebel 1965 - from
   memory) takes the increments as the process (``x_t = x_{t-1} + d_t + w_t``) and the absolute centres as
   observations (``z_t = x_t + v_t``), so the absolute error stays bounded while the frame-to-frame noise is the
   registration's (:func:`smooth`). Nothing is tuned: the gain (the registration reads the disc's motion short
   where lids cover its rim, and compression lets a small iris lag) is the least-squares slope of the absolute
   estimate's change on the summed increments over :data:`GAIN_SPAN_FRAMES` frames, in patch coordinates
   (:func:`clip_gain`: the increments are far less noisy than the absolute change, so the slope is nearly free of
   the errors-in-variables bias); the increments' noise Q is half the variance of the two eyes' increments'
   difference, and the absolute's frame-to-frame noise R follows from the innovations ``e_t = z_t - z_{t-1} -
   d_t = v_t - v_{t-1} + w_t`` as ``(var(e) - Q) / 2`` (:func:`noise_levels`; white-noise assumptions, which
   the absolute estimate's slow error bends - measured in docs/notes/gaze-measurement.md).
4. Frames without an absolute centre or a patch keep theirs (none is invented).

Measured on the gaze grid and held-out rendered clips: docs/notes/gaze-measurement.md ("The iris's motion from
registration between frames"). Not the default: see there.
"""
from __future__ import annotations

import numpy as np

from aspectus._env import import_cv2
from aspectus.webcam.iris_appearance import to_patch, to_picture

#: the registered disc's radius, in iris radii (the iris, its rim and a ring of sclera round it)
DISC_RADII = 1.25
#: Lucas-Kanade iterations at most, and the step (patch samples) below which it has converged
MAX_ITERATIONS = 20
CONVERGED_SAMPLES = 1e-3
#: the current patch's interpolation at the shifted positions (OpenCV's name)
INTERPOLATION_NAME = "INTER_LINEAR"
#: Tukey's biweight constant, in robust SD of the residuals (95 % efficiency for Gaussian residuals: common practice)
TUKEY_C = 4.685
#: the absolute estimate's step is tried as a second start where it is longer than this (patch samples)
SECOND_START_SAMPLES = 0.5
#: a registered shift longer than this share of the disc's radius is taken as failed
MAX_SHIFT_RADII = 0.6
#: a residual (RMS over the disc, relative to the template's SD) above the clip's median by this many robust SD
#: is taken as failed
RESIDUAL_SD = 6.0
#: frames over which the gain of the increments on the absolute estimate's change is measured
GAIN_SPAN_FRAMES = 3
#: the gain is kept within these limits
GAIN_LIMITS = (0.5, 2.0)
#: innovations further than this many robust SD from their median are left out of the noise levels
INNOVATION_TRIM_SD = 4.0
#: the smallest noise variance either level may take, squared units of the series (picture px squared as
#: registered_iris uses it)
MIN_VARIANCE = 1e-4
#: frames registered between two calls of the ``on_frames`` callback (progress, cancellation): about a second
#: at some 3 ms a frame
CALLBACK_FRAMES = 250


def register_shift(ref: np.ndarray, cur: np.ndarray, centre, radius: float, start=None) -> tuple[np.ndarray, float]:
    """The shift ``s`` (dx, dy; patch samples) for which ``cur(p + s) ~ a * ref(p) + b`` over the disc of ``radius``
    round ``centre`` (patch coordinates, sample centres at 0..W-1), and the fit's residual (weighted RMS over the
    disc relative to the template's SD); (NaN, NaN) and NaN where the fit is singular.

    Lucas-Kanade in the inverse-compositional form (the template's gradients, computed once), brightness gain ``a``
    and offset ``b`` solved with the shift, Tukey weights on the residuals after the third iteration. ``start``:
    the first guess of the shift (default none).
    """
    cv2 = import_cv2()
    INTERPOLATION = getattr(cv2, INTERPOLATION_NAME)
    ref = np.asarray(ref, np.float32)
    cur = np.asarray(cur, np.float32)
    H, W = ref.shape
    ys, xs = np.mgrid[0:H, 0:W].astype(np.float32)
    m = ((xs - float(centre[0])) ** 2 + (ys - float(centre[1])) ** 2) < float(radius) ** 2
    nan = (np.full(2, np.nan), float("nan"))
    if m.sum() < 12:
        return nan
    gx = cv2.Sobel(ref, cv2.CV_32F, 1, 0, ksize=3) / 8.0
    gy = cv2.Sobel(ref, cv2.CV_32F, 0, 1, ksize=3) / 8.0
    T = ref[m].astype(float)
    sd = float(T.std())
    if not sd > 0:
        return nan
    J = np.stack([gx[m], gy[m], T, np.ones_like(T)], axis=1).astype(float)
    s = np.zeros(2) if start is None else np.array(start, float)
    if not np.isfinite(s).all():
        s = np.zeros(2)
    a, b = 1.0, 0.0
    w = np.ones(len(T))

    def warped(shift):
        return cv2.remap(cur, xs + np.float32(shift[0]), ys + np.float32(shift[1]), INTERPOLATION,
                         borderMode=cv2.BORDER_REPLICATE)[m].astype(float)

    for it in range(MAX_ITERATIONS):
        r = warped(s) - (a * T + b)
        if it > 2:
            med = np.median(r)
            sig = 1.4826 * float(np.median(np.abs(r - med))) + 1e-6
            u = r / (TUKEY_C * sig)
            w = np.where(np.abs(u) < 1.0, (1.0 - u ** 2) ** 2, 0.0)
        Jw = J * w[:, None]
        try:
            p = np.linalg.solve(Jw.T @ J, Jw.T @ r)
        except np.linalg.LinAlgError:
            return nan
        # cur(p + s) ~ ref(p + dp) to first order: the warp composed with the inverse of the template's step
        s = s - p[:2] / a
        a, b = a + p[2], b + p[3]
        if not (np.isfinite(s).all() and a > 0.05):
            return nan
        if float(np.hypot(p[0], p[1])) < CONVERGED_SAMPLES:
            break
    r = warped(s) - (a * T + b)
    resid = float(np.sqrt(np.sum(w * r ** 2) / max(float(np.sum(w)), 1e-9))) / sd
    return s, resid


def patch_increments(patches, centres: np.ndarray, radius: float, usable: np.ndarray, *,
                     block_frames: int = 3000, on_frames=None) -> tuple[np.ndarray, np.ndarray]:
    """Per frame and eye, the iris's registered shift from the frame before (N, 2, 2; patch samples, NaN where
    none) and the fit's residual (N, 2).

    ``patches``: (N, 2, H, W) uint8, or any sequence whose slice ``[a:b]`` gives that array (read in blocks of
    ``block_frames``); ``centres``: (N, 2, 2) the absolute iris centres in patch coordinates (the disc of frame
    ``t - 1`` is centred on its centre; the absolute step is the second start); ``radius``: the disc's radius,
    samples; ``usable``: (N,) frames whose eyes are open (both frames of a pair must be). ``on_frames``: called
    with the number of frames done every :data:`CALLBACK_FRAMES` frames and at the end (progress; an exception
    it raises, such as a cancellation, stops the work).
    """
    n = len(patches)
    d = np.full((n, 2, 2), np.nan)
    res = np.full((n, 2), np.nan)
    c = np.asarray(centres, float)
    use = np.asarray(usable, bool)
    step = c[1:] - c[:-1]
    prev = None
    for a in range(0, n, max(int(block_frames), 1)):
        block = np.asarray(patches[a:min(a + block_frames, n)], np.float32)
        for i in range(len(block)):
            t = a + i
            cur = block[i]
            if prev is not None and use[t] and use[t - 1]:
                for e in range(2):
                    if not np.isfinite(c[t - 1, e]).all():
                        continue
                    best = None
                    g = step[t - 1, e]
                    starts = [None] + ([g] if np.isfinite(g).all() and np.hypot(g[0], g[1]) > SECOND_START_SAMPLES
                                       else [])
                    for s0 in starts:
                        s, r = register_shift(prev[e], cur[e], c[t - 1, e], radius, start=s0)
                        if np.isfinite(r) and (best is None or r < best[1]):
                            best = (s, r)
                    if best is not None:
                        d[t, e], res[t, e] = best
            prev = cur
            if on_frames is not None and (t + 1) % CALLBACK_FRAMES == 0:
                on_frames(t + 1)
    if on_frames is not None:
        on_frames(n)
    return d, res


def reject_failed(d: np.ndarray, res: np.ndarray, radius: float) -> np.ndarray:
    """The increments with failed registrations set to NaN: a shift longer than :data:`MAX_SHIFT_RADII` of the
    disc's ``radius``, or a residual above the clip's median by :data:`RESIDUAL_SD` robust SD."""
    d = np.array(d, float)
    bad = ~np.isfinite(res) | (np.abs(d) > MAX_SHIFT_RADII * radius).any(axis=-1)
    r = np.where(bad, np.nan, res)
    if np.isfinite(r).sum() >= 10:
        med = float(np.nanmedian(r))
        mad = 1.4826 * float(np.nanmedian(np.abs(r - med)))
        bad |= r > med + RESIDUAL_SD * mad
    d[bad] = np.nan
    return d


def clip_gain(z: np.ndarray, d: np.ndarray, span: int = GAIN_SPAN_FRAMES, limits=GAIN_LIMITS) -> float:
    """The factor that takes summed increments ``d`` (N,) onto the absolute estimate ``z`` (N,): the least-squares
    slope (through the origin) of ``z[t + span] - z[t]`` on ``d[t + 1] + ... + d[t + span]`` over the spans whose
    increments are all there, within ``limits``; 1 with fewer than 20 spans."""
    z = np.asarray(z, float)
    d = np.asarray(d, float)
    n = len(z)
    if n <= span:
        return 1.0
    D = np.concatenate([[0.0], np.cumsum(np.nan_to_num(d[1:]))])
    C = np.concatenate([[0], np.cumsum(np.isfinite(d[1:]).astype(int))])
    a = np.arange(n - span)
    b = a + span
    ok = ((C[b] - C[a]) == span) & np.isfinite(z[a]) & np.isfinite(z[b])
    if ok.sum() < 20:
        return 1.0
    x, y = (D[b] - D[a])[ok], (z[b] - z[a])[ok]
    den = float(np.sum(x * x))
    if not den > 0:
        return 1.0
    return float(np.clip(np.sum(x * y) / den, *limits))


def _trimmed_variance(x: np.ndarray) -> float:
    """Variance about the mean of the finite values of ``x`` within :data:`INNOVATION_TRIM_SD` robust SD of their
    median; NaN with fewer than 20."""
    x = np.asarray(x, float)
    ok = np.isfinite(x)
    if ok.sum() < 20:
        return float("nan")
    med = float(np.median(x[ok]))
    sig = 1.4826 * float(np.median(np.abs(x[ok] - med)))
    keep = ok & (np.abs(x - med) <= INNOVATION_TRIM_SD * max(sig, 1e-9))
    return float(np.var(x[keep]))


def noise_levels(z: np.ndarray, d: np.ndarray, gain: float = 1.0, other: np.ndarray | None = None) -> tuple[float, float]:
    """(Q, R): the variances of the registration's error per increment and of the absolute estimate's frame-to-frame
    error, from the clip itself.

    The innovations ``e_t = z_t - z_{t-1} - gain * d_t = v_t - v_{t-1} + w_t`` have ``var(e) = 2R + Q`` and, for
    white errors, ``cov(e_t, e_{t-1}) = -R``. Where R is much larger than Q the first gives Q only as a small
    difference of large numbers, so with ``other`` - the other eye's increments along the same axis, already
    scaled by its gain - Q is half the variance of the two eyes' difference (the eyes move together; their
    registrations' errors are independent; vergence changes only add to it) and R = (var(e) - Q) / 2.
    Innovations and differences beyond :data:`INNOVATION_TRIM_SD` robust SD are left out (failed fits, a saccade
    read short). NaN, NaN with fewer than 20 innovations.
    """
    z = np.asarray(z, float)
    e = np.diff(z) - gain * np.asarray(d, float)[1:]
    var = _trimmed_variance(e)
    if not np.isfinite(var):
        return float("nan"), float("nan")
    q2 = _trimmed_variance(gain * np.asarray(d, float) - np.asarray(other, float)) if other is not None else np.nan
    if np.isfinite(q2):
        Q = max(0.5 * q2, MIN_VARIANCE)
        return Q, max(0.5 * (var - Q), MIN_VARIANCE)
    ok = np.isfinite(e)
    med = float(np.median(e[ok]))
    sig = 1.4826 * float(np.median(np.abs(e[ok] - med)))
    ev = np.where(np.abs(e - med) <= INNOVATION_TRIM_SD * max(sig, 1e-9), e - med, np.nan)
    pair = np.isfinite(ev[1:]) & np.isfinite(ev[:-1])
    c1 = float(np.mean(ev[1:][pair] * ev[:-1][pair])) if pair.sum() >= 10 else 0.0
    R = max(-c1, MIN_VARIANCE)
    return max(var - 2.0 * R, MIN_VARIANCE), R


def smooth(z: np.ndarray, d: np.ndarray, gain: float, Q: float, R: float) -> np.ndarray:
    """Kalman filter and Rauch-Tung-Striebel smoother of one coordinate: process ``x_t = x_{t-1} + gain * d_t``
    (variance ``Q`` per step), observations ``z_t`` (variance ``R``); a missing increment restarts the state from
    the next observation (no prior across it). NaN before the first observation and where a run has none."""
    z = np.asarray(z, float)
    d = np.asarray(d, float)
    n = len(z)
    xf, Pf = np.full(n, np.nan), np.full(n, np.nan)
    xp, Pp = np.full(n, np.nan), np.full(n, np.inf)
    x, P = np.nan, np.inf
    for t in range(n):
        if t > 0 and np.isfinite(x) and np.isfinite(d[t]):
            x, P = x + gain * d[t], P + Q
        else:
            x, P = np.nan, np.inf
        xp[t], Pp[t] = x, P
        if np.isfinite(z[t]):
            if np.isfinite(x):
                K = P / (P + R)
                x, P = x + K * (z[t] - x), (1.0 - K) * P
            else:
                x, P = z[t], R
        xf[t], Pf[t] = x, P
    xs = xf.copy()
    for t in range(n - 2, -1, -1):
        if np.isfinite(Pp[t + 1]) and np.isfinite(xs[t + 1]) and np.isfinite(xf[t]):
            xs[t] = xf[t] + Pf[t] / Pp[t + 1] * (xs[t + 1] - xp[t + 1])
    return xs


def picture_increments(centres: np.ndarray, d: np.ndarray, gains: np.ndarray, affines: np.ndarray) -> np.ndarray:
    """The registered increments (N, 2, 2; patch samples, frame t's against t-1's) as picture motion (px):
    frame t-1's ``centres`` (patch coordinates) moved by ``gains`` (2 eyes, 2 axes) times the increment, through
    frame t's transform, minus those centres through frame t-1's (``affines``: (N, 2, 2, 3)). Motion of the patch
    frame itself between the two frames is in both terms and cancels. NaN in the first frame and wherever an
    input is missing."""
    z = np.asarray(centres, float)
    A = np.asarray(affines, float)
    out = np.full(z.shape, np.nan)
    if len(z) > 1:
        moved = z[:-1] + np.asarray(gains, float)[None] * np.asarray(d, float)[1:]
        out[1:] = to_picture(moved, A[1:]) - to_picture(z[:-1], A[:-1])
    return out


def registered_iris(patches, affines: np.ndarray, iris_px: np.ndarray, iris_diam_px: np.ndarray,
                    usable: np.ndarray, *, on_frames=None) -> tuple[np.ndarray, dict]:
    """The absolute iris centres ``iris_px`` (N, 2, 2; picture px, NaN where none) fused with the registered motion
    of the iris disc in the eye ``patches`` (see the module docstring); frames without an absolute centre or a
    patch keep ``iris_px``. ``affines``: (N, 2, 2, 3) the patches' transforms (NaN where a frame has none);
    ``iris_diam_px``: (N, 2) the iris diameters (px; the disc's size); ``usable``: (N,) frames with open eyes;
    ``on_frames``: progress and cancellation during the registration (:func:`patch_increments`).
    Returns the centres and a record (per eye and axis the gain and both noise levels, px; increments found;
    frames fused - those the smoother joined to a neighbour by an increment, on both axes -; ``applied`` False,
    with a reason, where no eye and axis had enough increments for its noise levels and nothing was fused).
    """
    iris = np.array(iris_px, float)
    A = np.asarray(affines, float)
    n = len(iris)
    info: dict = {"applied": False}
    if n < 3 or len(patches) != n:
        info["reason"] = "too few frames" if n < 3 else "the eye patches do not cover the clip"
        return iris, info
    have = np.isfinite(A).all(axis=(2, 3))
    step_px = np.hypot(A[..., 0, 0], A[..., 1, 0])  # picture px per patch sample along the patch's x
    diam = np.where(np.asarray(iris_diam_px, float) > 0, np.asarray(iris_diam_px, float), np.nan)
    ratio = diam / np.where(have, step_px, np.nan)
    if not np.isfinite(ratio).any():
        info["reason"] = "no frame with both an iris diameter and a patch"
        return iris, info
    radius = DISC_RADII * 0.5 * float(np.nanmedian(ratio))
    z = to_patch(iris, np.where(have[..., None, None], A, np.nan))
    d, res = patch_increments(patches, z, radius, np.asarray(usable, bool), on_frames=on_frames)
    d = reject_failed(d, res, radius)
    gains = np.array([[clip_gain(z[:, e, ax], d[:, e, ax]) for ax in range(2)] for e in range(2)])
    # each increment taken into the picture: frame t-1's centre moved by the scaled increment, through frame t's
    # transform, minus that centre through frame t-1's. The patches' frame jitters with the eye anchors, each eye's
    # on its own (0.3 patch samples a frame at 12 px), but that jitter is in both the registered shift and the
    # transforms and cancels here, so in the picture the two eyes' true increments agree (the binocular noise
    # level below needs that; in patch coordinates they differ by the anchors' jitter)
    inc = picture_increments(z, d, gains, np.where(have[..., None, None], A, np.nan))
    out = np.full_like(iris, np.nan)
    smoothed = np.zeros((2, 2), bool)  # eyes and axes with noise levels, whose centres the smoother gives
    levels = {}
    for e in range(2):
        for ax in range(2):
            Q, R = noise_levels(iris[:, e, ax], inc[:, e, ax], 1.0, other=inc[:, 1 - e, ax])
            name = f"{('right', 'left')[e]}_{'xy'[ax]}"
            if not (np.isfinite(Q) and np.isfinite(R)):
                out[:, e, ax] = iris[:, e, ax]
                levels[name] = None
                continue
            out[:, e, ax] = smooth(iris[:, e, ax], inc[:, e, ax], 1.0, Q, R)
            smoothed[e, ax] = True
            levels[name] = {"gain": round(float(gains[e, ax]), 3), "increment_sd_px": round(float(np.sqrt(Q)), 4),
                            "absolute_sd_px": round(float(np.sqrt(R)), 4)}
    take = have[..., None] & np.isfinite(out) & np.isfinite(iris)
    iris = np.where(take, out, iris)
    # fused: a smoothed axis's frame joined to a neighbour by an increment (a frame with none on either side
    # keeps its own observation, as do the axes without noise levels)
    linked = np.isfinite(inc)
    linked[:-1] |= np.isfinite(inc[1:])
    fused = (take & smoothed[None] & linked).all(axis=2)
    info.update({"applied": bool(fused.any()), "disc_radius_samples": round(radius, 3),
                 "increments": [int(np.isfinite(d[:, e]).all(axis=1).sum()) for e in range(2)],
                 "frames_fused": [int(fused[:, e].sum()) for e in range(2)], "levels": levels})
    if not info["applied"]:
        info["reason"] = (f"too few registered increments for the noise levels (at least 20 per eye are needed; "
                          f"found {min(info['increments'])} for one eye, {max(info['increments'])} for the other): the centres "
                          "are the absolute estimate's")
    return iris, info
