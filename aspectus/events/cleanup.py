"""Clean-up of a samples table before event detection.

Steps, in order:

1. Blink and no-face samples are excluded: a sample is usable only when the
   table marks it ``valid`` and its angles are finite. A run of unusable
   samples that contains any ``blink`` sample is a blink period as a whole.
2. Short gaps are interpolated: a run of unusable samples (not a blink, not at
   the start or end) lasting at most ``gap_fill_max_ms`` - measured from its
   first missing sample to the next usable one - is filled by Steffen
   interpolation (default) or linearly. Longer runs are data loss.
3. Optional smoothing, within each run of usable samples only (never across a
   loss): ``"median"`` (running median) or ``"savgol"`` (Savitzky-Golay,
   polynomial order 2). Both are centred, so their lag is 0 ms; they blur
   saccade edges by about half the window.
4. A per-clip noise estimate: RMS sample-to-sample distance in degrees
   (Holmqvist, Nystrom & Mulvey 2012), robust form (see
   :func:`aspectus.events.detect.noise.robust_rms_s2s_deg`), over steps between
   two originally valid samples.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from aspectus.events.detect.noise import rms_s2s_deg, robust_rms_s2s_deg
from aspectus.events.detect.runs import runs_to_mask, true_runs
from aspectus.errors import ParameterError
from aspectus.schema import check_samples

SMOOTHERS = (None, "median", "savgol")
INTERPOLATIONS = ("steffen", "linear")


@dataclass
class CleanedSamples:
    """A samples table after clean-up, as arrays (one entry per input row).

    Attributes
    ----------
    t_s : ndarray
        Sample times in seconds, on the input's own clock.
    yaw_deg, pitch_deg : ndarray
        Gaze angles after gap filling and smoothing; NaN where not usable.
    valid_in : ndarray of bool
        The input's own validity (finite angles and ``valid``).
    usable : ndarray of bool
        ``valid_in`` or filled.
    filled : ndarray of bool
        Samples filled by interpolation.
    blink, loss : ndarray of bool
        Samples in blink periods / in data-loss periods (unusable, not blink).
    sample_interval_s : float
        Median interval between samples.
    noise_rms_s2s_deg : float
        Robust RMS-S2S of the valid input samples, degrees.
    noise_rms_s2s_plain_deg : float
        Plain RMS-S2S over the same steps (inflated by saccades).
    smoothing : dict
        Filter name, its parameters and its lag in ms.
    """

    t_s: np.ndarray
    yaw_deg: np.ndarray
    pitch_deg: np.ndarray
    valid_in: np.ndarray
    usable: np.ndarray
    filled: np.ndarray
    blink: np.ndarray
    loss: np.ndarray
    sample_interval_s: float
    noise_rms_s2s_deg: float
    noise_rms_s2s_plain_deg: float
    smoothing: dict = field(default_factory=dict)

    @property
    def n(self) -> int:
        return len(self.t_s)

    @property
    def rate_hz(self) -> float:
        return 1.0 / self.sample_interval_s if self.sample_interval_s > 0 else float("nan")


def steffen_interpolate(x, y, xi) -> np.ndarray:
    """Monotone piecewise-cubic interpolation of Steffen (1990).

    Steffen, M. (1990). A simple method for monotonic interpolation in one
    dimension. Astronomy and Astrophysics 239, 443-450 (eqs. 11, 26-27).
    Hessels et al. (2017) use it to fill short gaps before I2MC.

    Parameters
    ----------
    x : array_like, shape (n,)
        Strictly increasing knots (here: times in s), ``n >= 2``.
    y : array_like, shape (n,)
        Values at the knots (here: angles in deg).
    xi : array_like
        Where to evaluate; values outside ``[x[0], x[-1]]`` are clamped.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    xi = np.clip(np.asarray(xi, dtype=float), x[0], x[-1])
    h = np.diff(x)
    s = np.diff(y) / h
    n = len(x)
    yp = np.zeros(n)
    if n > 2:
        p = (s[:-1] * h[1:] + s[1:] * h[:-1]) / (h[:-1] + h[1:])
        yp[1:-1] = (np.sign(s[:-1]) + np.sign(s[1:])) * np.minimum.reduce(
            [np.abs(s[:-1]), np.abs(s[1:]), 0.5 * np.abs(p)])

        def end_slope(s0, s1, h0, h1):
            p0 = s0 * (1 + h0 / (h0 + h1)) - s1 * h0 / (h0 + h1)
            if p0 * s0 <= 0:
                return 0.0
            if abs(p0) > 2 * abs(s0):
                return 2 * s0
            return p0

        yp[0] = end_slope(s[0], s[1], h[0], h[1])
        yp[-1] = end_slope(s[-1], s[-2], h[-1], h[-2])
    else:
        yp[:] = s[0]
    k = np.clip(np.searchsorted(x, xi, side="right") - 1, 0, n - 2)
    dx = xi - x[k]
    hk = h[k]
    a = (yp[k] + yp[k + 1] - 2 * s[k]) / hk**2
    b = (3 * s[k] - 2 * yp[k] - yp[k + 1]) / hk
    return ((a * dx + b) * dx + yp[k]) * dx + y[k]


def _window_samples(window_ms: float, dt_s: float) -> int:
    w = int(round(window_ms / 1000.0 / dt_s))
    if w % 2 == 0:
        w += 1
    return max(w, 3)


def _smooth_runs(v: np.ndarray, usable: np.ndarray, method: str, w: int) -> np.ndarray:
    from scipy.ndimage import median_filter
    from scipy.signal import savgol_filter

    out = v.copy()
    starts, ends = true_runs(usable)
    for s, e in zip(starts, ends):
        seg = v[s:e]
        if len(seg) < 3:
            continue
        ww = min(w, len(seg) if len(seg) % 2 else len(seg) - 1)
        if ww < 3:
            continue
        if method == "median":
            out[s:e] = median_filter(seg, size=ww, mode="nearest")
        else:
            out[s:e] = savgol_filter(seg, ww, polyorder=min(2, ww - 1), mode="interp")
    return out


def clean_samples(samples: pd.DataFrame, *, gap_fill_max_ms: float = 75.0, interpolation: str = "steffen",
                  smoothing: str | None = None, smoothing_window_ms: float = 100.0,
                  source: str = "samples table") -> CleanedSamples:
    """Exclude blinks and no-face samples, fill short gaps, optionally smooth, estimate noise.

    Parameters
    ----------
    samples : pandas.DataFrame
        A samples table (:data:`aspectus.schema.SAMPLE_COLUMNS`; needs t_s,
        valid, yaw_deg, pitch_deg; uses ``blink`` when present).
    gap_fill_max_ms : float, default 75
        Longest gap (ms, from its first missing sample to the next usable one)
        that is interpolated; 0 disables filling.
    interpolation : {"steffen", "linear"}
        How gaps are filled.
    smoothing : {None, "median", "savgol"}
        Optional centred smoothing filter (lag 0 ms).
    smoothing_window_ms : float, default 100
        Smoothing window in ms (rounded to an odd number of samples, >= 3).
    source : str
        Name of the input for error messages.

    Returns
    -------
    CleanedSamples

    Raises
    ------
    aspectus.errors.AspectusInputError
        Missing columns, non-finite, non-increasing or duplicate times.
    aspectus.errors.ParameterError
        A parameter out of range.
    """
    if smoothing not in SMOOTHERS:
        raise ParameterError(f"unknown smoothing {smoothing!r}; choose one of {SMOOTHERS}")
    if interpolation not in INTERPOLATIONS:
        raise ParameterError(f"unknown interpolation {interpolation!r}; choose one of {INTERPOLATIONS}")
    if not (np.isfinite(gap_fill_max_ms) and gap_fill_max_ms >= 0):
        raise ParameterError(f"gap_fill_max_ms must be >= 0 ms, got {gap_fill_max_ms!r}")
    if not (np.isfinite(smoothing_window_ms) and smoothing_window_ms > 0):
        raise ParameterError(f"smoothing_window_ms must be > 0 ms, got {smoothing_window_ms!r}")
    df = check_samples(samples, source=source)
    t = df["t_s"].to_numpy(dtype=float)
    n = len(t)
    yaw = df["yaw_deg"].to_numpy(dtype=float).copy()
    pitch = df["pitch_deg"].to_numpy(dtype=float).copy()
    valid = df["valid"].to_numpy(dtype=bool)
    if "blink" in df.columns:
        bl = df["blink"]
        if bl.dtype != bool:
            bl = bl.map(lambda v: str(v).strip().lower() in ("1", "true", "yes", "1.0"))
        blink_flag = bl.to_numpy(dtype=bool) & ~valid
    else:
        blink_flag = np.zeros(n, dtype=bool)
    dt = float(np.median(np.diff(t))) if n > 1 else 0.0
    yaw[~valid] = np.nan
    pitch[~valid] = np.nan

    filled = np.zeros(n, dtype=bool)
    blink = np.zeros(n, dtype=bool)
    starts, ends = true_runs(~valid)
    if len(starts):
        # a run containing a blink sample is a blink as a whole
        cb = np.concatenate([[0], np.cumsum(blink_flag)])
        has_blink = (cb[ends] - cb[starts]) > 0
        blink = runs_to_mask(starts[has_blink], ends[has_blink], n)
        inner = (starts > 0) & (ends < n) & ~has_blink
        gap_ms = np.where(inner, (t[np.minimum(ends, n - 1)] - t[starts]) * 1000.0, np.inf)
        fill = inner & (gap_ms <= gap_fill_max_ms + 1e-9)
        if fill.any():
            filled = runs_to_mask(starts[fill], ends[fill], n)
            tv = t[valid]
            if interpolation == "steffen" and valid.sum() >= 2:
                yaw[filled] = steffen_interpolate(tv, yaw[valid], t[filled])
                pitch[filled] = steffen_interpolate(tv, pitch[valid], t[filled])
            else:
                yaw[filled] = np.interp(t[filled], tv, yaw[valid])
                pitch[filled] = np.interp(t[filled], tv, pitch[valid])
    usable = valid | filled
    loss = ~usable & ~blink

    smooth_info: dict = {"filter": None, "lag_ms": 0.0}
    if smoothing is not None and n >= 3 and dt > 0:
        w = _window_samples(smoothing_window_ms, dt)
        yaw = _smooth_runs(yaw, usable, smoothing, w)
        pitch = _smooth_runs(pitch, usable, smoothing, w)
        smooth_info = {"filter": smoothing, "window_samples": w, "window_ms": w * dt * 1000.0,
                       "polyorder": 2 if smoothing == "savgol" else None, "centred": True, "lag_ms": 0.0}
    noise = robust_rms_s2s_deg(yaw, pitch, valid) if n > 1 else float("nan")
    noise_plain = rms_s2s_deg(yaw, pitch, valid) if n > 1 else float("nan")
    return CleanedSamples(t_s=t, yaw_deg=yaw, pitch_deg=pitch, valid_in=valid, usable=usable, filled=filled,
                          blink=blink, loss=loss, sample_interval_s=dt, noise_rms_s2s_deg=noise,
                          noise_rms_s2s_plain_deg=noise_plain, smoothing=smooth_info)
