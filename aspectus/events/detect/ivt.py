"""I-VT: velocity-threshold identification with a data-driven threshold.

I-VT itself is from Salvucci & Goldberg (2000), Proc. ETRA 71-78: samples
slower than a velocity threshold are fixation samples, runs of them are
fixations. A fixed threshold does not suit webcam data, whose noise varies
from clip to clip, so the threshold is taken from the data, by one of:

``"nh2010"``
    Nystrom, M., & Holmqvist, K. (2010). An adaptive algorithm for fixation,
    saccade, and glissade detection in eyetracking data. Behavior Research
    Methods 42(1), 188-204. The peak threshold ``PT`` starts high and is
    iterated as ``PT = mean + 6 SD`` of the velocities below ``PT`` until it
    changes by less than 1 deg/s; a saccade is a run of samples faster than
    the onset threshold ``mean + 3 SD`` that contains a sample faster than
    ``PT``. Velocities come from a Savitzky-Golay derivative (order 2).
    If the iteration would raise ``PT`` (no convergence from that start),
    it stops at the lower value.
``"ek2003"``
    Engbert, R., & Kliegl, R. (2003). Microsaccades uncover the orientation of
    covert attention. Vision Research 43(9), 1035-1045. Per-axis thresholds
    ``lambda * sqrt(median(v^2) - median(v)^2)``; a sample is saccadic when
    ``(vx/eta_x)^2 + (vy/eta_y)^2 > 1``.

Everything not saccadic and usable is a fixation candidate.
"""
from __future__ import annotations

import warnings

import numpy as np

from aspectus.errors import ParameterError
from aspectus.events.detect.noise import median_sd
from aspectus.events.detect.runs import true_runs
from aspectus.events.detect.types import Candidates, DetectionWarning

#: nh2010 needs saccade velocity profiles: below this rate it is warned against (Hz). Nystrom & Holmqvist (2010)
#: developed it on 1250 Hz data; velocity profiles need some 200 Hz or more (Holmqvist et al. 2011 - from memory).
NH2010_MIN_RATE_HZ = 200.0


def _odd_window(window_ms: float, dt: float) -> int:
    w = int(round(window_ms / 1000.0 / dt)) if dt > 0 else 3
    if w % 2 == 0:
        w += 1
    return max(w, 3)


def savgol_derivative(v: np.ndarray, window: int, dt_s: float, polyorder: int = 2) -> np.ndarray:
    """First derivative by a Savitzky-Golay filter (odd ``window`` samples, uniform spacing ``dt_s``).

    Savitzky, A., & Golay, M. J. E. (1964). Analytical Chemistry 36(8),
    1627-1639. Interior samples use the centred least-squares polynomial; the
    first and last ``window // 2`` samples use the polynomial fitted to the
    first / last ``window`` samples (like scipy's ``mode="interp"``). Plain
    numpy, so no import of :mod:`scipy.signal` is needed.
    """
    v = np.asarray(v, dtype=float)
    n = len(v)
    w = int(window)
    h = w // 2
    p = min(polyorder, w - 1)
    pos = np.arange(-h, h + 1, dtype=float)
    A = np.vander(pos, p + 1, increasing=True)  # columns 1, x, x^2
    pinv = np.linalg.pinv(A)  # rows: coefficients of 1, x, x^2 as weights on the samples
    out = np.empty(n)
    # interior: derivative at x = 0 is the x coefficient
    c1 = pinv[1]
    out[h:n - h] = np.convolve(v, c1[::-1], mode="valid") / dt_s
    # edges: derivative of the fitted polynomial at the edge positions
    for sl, xs in ((slice(0, w), pos[:h]), (slice(n - w, n), pos[h + 1:])):
        coef = pinv @ v[sl]
        dcoef = coef[1:] * np.arange(1, p + 1)
        vals = np.polynomial.polynomial.polyval(xs, dcoef) / dt_s
        if sl.start == 0:
            out[:h] = vals
        else:
            out[n - h:] = vals
    return out


def local_quadratic_derivative(t_s, v, window: int, *, chunk: int = 200_000) -> np.ndarray:
    """First derivative by a least-squares quadratic over ``window`` samples, on the samples' own times.

    The Savitzky-Golay derivative (Savitzky & Golay 1964, order 2) generalised
    to uneven sampling: for each sample a parabola in ``t - t_i`` is fitted to
    the ``window`` samples centred on it (at the ends: the first / last
    ``window`` samples, like scipy's ``mode="interp"``) and its slope at
    ``t_i`` is the derivative. On an even grid it equals
    :func:`savgol_derivative`; with a dropped frame it still reads a ramp's
    true slope, where a derivative assuming a uniform interval would read it
    too steep on both sides of the hole.
    """
    t = np.asarray(t_s, dtype=float)
    v = np.asarray(v, dtype=float)
    n = len(t)
    w = int(window)
    h = w // 2
    out = np.empty(n)
    if n < w:
        raise ValueError("window longer than the signal")
    scale = float(np.median(np.diff(t))) if n > 1 else 1.0
    scale = scale if scale > 0 else 1.0
    j = np.arange(w)
    for c0 in range(0, n, chunk):
        i = np.arange(c0, min(n, c0 + chunk))
        ws = np.clip(i - h, 0, n - w)
        tau = (t[ws[:, None] + j[None, :]] - t[i][:, None]) / scale
        vv = v[ws[:, None] + j[None, :]]
        s = [np.ones(len(i)) * w] + [(tau ** k).sum(axis=1) for k in range(1, 5)]
        r = [(vv * tau ** k).sum(axis=1) for k in range(3)]
        A = np.stack([np.stack([s[0], s[1], s[2]], -1), np.stack([s[1], s[2], s[3]], -1),
                      np.stack([s[2], s[3], s[4]], -1)], -2)
        b = np.stack(r, -1)[..., None]
        coef = np.linalg.solve(A, b)[..., 0]
        out[i] = coef[:, 1] / scale
    return out


def velocity_deg_s(t_s, yaw_deg, pitch_deg, usable, *, window_ms: float = 20.0):
    """Yaw and pitch velocity (deg/s) by a Savitzky-Golay derivative (order 2) on the samples' own times.

    The window is ``window_ms`` rounded to an odd number of samples, at least
    3 (at 30 Hz: 3 samples, the central difference). The fit uses each
    sample's time (:func:`local_quadratic_derivative`), so uneven intervals
    and dropped frames do not distort the velocity. Velocities are NaN where
    the window touches an unusable sample.

    Returns
    -------
    vx, vy : ndarray
        Velocity components in deg/s.
    """
    t = np.asarray(t_s, dtype=float)
    ok = np.asarray(usable, dtype=bool)
    n = len(t)
    if n < 3 or ok.sum() < 2:
        return np.full(n, np.nan), np.full(n, np.nan)
    dt = float(np.median(np.diff(t)))
    w = _odd_window(window_ms, dt)
    if w > n:
        w = n if n % 2 else n - 1
    out = []
    idx = np.arange(n)
    for v in (yaw_deg, pitch_deg):
        v = np.asarray(v, dtype=float)
        vf = np.interp(idx, idx[ok], v[ok])
        out.append(local_quadratic_derivative(t, vf, w))
    # a velocity is unusable when its window touches an unusable sample
    cb = np.concatenate([[0], np.cumsum(~ok)])
    lo = np.clip(idx - w // 2, 0, n)
    hi = np.clip(idx + w // 2 + 1, 0, n)
    bad = (cb[hi] - cb[lo]) > 0
    return np.where(bad, np.nan, out[0]), np.where(bad, np.nan, out[1])


def nh2010_thresholds(speed_deg_s, *, initial_deg_s: float = 200.0, sd_factor: float = 6.0,
                      onset_sd_factor: float = 3.0, tol_deg_s: float = 1.0, max_iter: int = 100):
    """The iterative peak and onset thresholds of Nystrom & Holmqvist (2010), deg/s."""
    v = np.asarray(speed_deg_s, dtype=float)
    v = v[np.isfinite(v)]
    pt = float(initial_deg_s)
    if not len(v):
        return float("nan"), float("nan")
    mu = sd = float("nan")
    for _ in range(max_iter):
        below = v[v < pt]
        if len(below) < 2:
            break
        mu, sd = float(below.mean()), float(below.std())
        new = mu + sd_factor * sd
        if new > pt:  # rising: no convergence from this start; keep the lower value
            break
        if abs(new - pt) < tol_deg_s:
            pt = new
            break
        pt = new
    return pt, mu + onset_sd_factor * sd


def detect_ivt(t_s, yaw_deg, pitch_deg, usable, *, method: str = "ek2003", velocity_window_ms: float = 20.0,
               initial_threshold_deg_s: float = 200.0, sd_factor: float = 6.0, onset_sd_factor: float = 3.0,
               ek_lambda: float = 6.0, noise_rms_s2s_deg: float | None = None,
               noise_rms_s2s_1sample_deg: float | None = None) -> Candidates:
    """Fixation candidates by I-VT with a data-driven velocity threshold.

    Parameters
    ----------
    t_s, yaw_deg, pitch_deg, usable : array_like, shape (n,)
        Times (s), angles (deg), usable-sample mask.
    method : {"ek2003", "nh2010"}, default "ek2003"
        Threshold rule, see the module docstring.
    velocity_window_ms : float, default 20
        Savitzky-Golay derivative window in ms (at least 3 samples).
    initial_threshold_deg_s : float, default 200
        Starting peak threshold of the nh2010 iteration, deg/s.
    sd_factor, onset_sd_factor : float, default 6 and 3
        nh2010 peak and onset thresholds in SDs above the mean velocity.
    ek_lambda : float, default 6
        ek2003 threshold multiplier of the median-based velocity SD.
    noise_rms_s2s_deg, noise_rms_s2s_1sample_deg : float, optional
        Not needed: the threshold comes from the velocities themselves.

    Returns
    -------
    Candidates
        With ``info`` holding the thresholds in deg/s.
    """
    if method not in ("nh2010", "ek2003"):
        raise ParameterError(f"unknown I-VT method {method!r}; choose 'nh2010' or 'ek2003'")
    t = np.asarray(t_s, dtype=float)
    x = np.asarray(yaw_deg, dtype=float)
    y = np.asarray(pitch_deg, dtype=float)
    ok = np.asarray(usable, dtype=bool) & np.isfinite(x) & np.isfinite(y)
    n = len(t)
    info: dict = {"method": method}
    if n < 3 or ok.sum() < 3:
        return Candidates.empty(info)
    vx, vy = velocity_deg_s(t, x, y, ok, window_ms=velocity_window_ms)
    speed = np.hypot(vx, vy)
    if method == "nh2010":
        pt, onset = nh2010_thresholds(speed, initial_deg_s=initial_threshold_deg_s, sd_factor=sd_factor,
                                      onset_sd_factor=onset_sd_factor)
        info.update(peak_threshold_deg_s=pt, onset_threshold_deg_s=onset)
        rate = 1.0 / float(np.median(np.diff(t)))
        problems = []
        if rate < NH2010_MIN_RATE_HZ:
            problems.append(f"I-VT with the Nystrom & Holmqvist (2010) threshold at {rate:.0f} Hz: the method needs "
                            f"saccade velocity profiles (>= {NH2010_MIN_RATE_HZ:.0f} Hz); at this rate a saccade "
                            "spans one or two samples and fixations are lost. Use the default detector (idt) or "
                            "--set ivt_method=ek2003")
        if np.isfinite(pt) and pt >= initial_threshold_deg_s - 1e-9:
            problems.append(f"I-VT nh2010: the peak threshold did not adapt (it stayed at its start, "
                            f"{initial_threshold_deg_s:g} deg/s): the velocities do not separate saccades from "
                            "fixations; the result is not trustworthy")
        for msg in problems:
            warnings.warn(msg, DetectionWarning, stacklevel=2)
        if problems:
            info["warnings"] = problems
        fast = np.nan_to_num(speed, nan=0.0) > onset
        peak = np.nan_to_num(speed, nan=0.0) > pt
        fs, fe = true_runs(fast)
        cp = np.concatenate([[0], np.cumsum(peak)])
        sacc_runs = (cp[fe] - cp[fs]) > 0
        sacc = np.zeros(n + 1, dtype=np.int64)
        np.add.at(sacc, fs[sacc_runs], 1)
        np.add.at(sacc, fe[sacc_runs], -1)
        saccadic = np.cumsum(sacc[:-1]) > 0
    else:
        ex, ey = ek_lambda * median_sd(vx), ek_lambda * median_sd(vy)
        ex = ex if ex > 0 else np.finfo(float).tiny
        ey = ey if ey > 0 else np.finfo(float).tiny
        info.update(threshold_yaw_deg_s=ex, threshold_pitch_deg_s=ey)
        saccadic = np.nan_to_num((vx / ex) ** 2 + (vy / ey) ** 2, nan=0.0) > 1.0
    fix = ok & ~saccadic
    s, e = true_runs(fix)
    return Candidates(s, e, info)
