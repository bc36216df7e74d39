"""Clean-up of a samples table before event detection.

Steps, in order:

0. Holes in the time axis are made explicit: where two consecutive rows are
   more than 1.5 median intervals apart, the missing samples are inserted as
   not valid (rows the input did not have; :attr:`CleanedSamples.inserted`).
   A hole whose missing time exceeds ``gap_fill_max_ms`` gets a single
   inserted row that stands for the whole missing time, so it becomes data
   loss whatever the validity column says, and no fixation spans it.
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
   two originally valid samples. It adapts the detectors' thresholds; the
   figure reported as ``noise_rms_s2s_deg`` is measured within fixations
   (:mod:`aspectus.events.features`).

Every sample stands for the time from half an interval before it to half an
interval after it (:attr:`CleanedSamples.lo_s`, :attr:`~CleanedSamples.hi_s`:
half-way to each neighbour; half the median interval at the ends and beside a
hole), so the spans of consecutive samples tile the time axis and the
fraction of valid *time* (``valid_frac``) counts holes as missing.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from aspectus.events.detect.noise import reference_lag, rms_s2s_deg, robust_rms_s2s_deg
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
    noise_rms_s2s_33ms_deg : float
        The robust figure over steps 33 ms long
        (:func:`aspectus.events.detect.noise.reference_lag`): ``noise_rms_s2s_deg`` at
        30 Hz and below, comparable across sampling rates; it adapts the
        detectors' thresholds.
    smoothing : dict
        Filter name, its parameters and its lag in ms.
    lo_s, hi_s : ndarray
        Start and end of the time each sample stands for, s.
    inserted : ndarray of bool
        Rows inserted for holes in the time axis (not in the input).
    row_index : ndarray of int
        For each input row, its index here.
    holes : int
        Holes found in the time axis (intervals over 1.5 median intervals).
    yaw_unsmoothed_deg, pitch_unsmoothed_deg : ndarray or None
        The angles after gap filling, before smoothing (None where no smoothing ran: then ``yaw_deg`` and
        ``pitch_deg``). The clip's precision figures are read from them (:func:`aspectus.events.analysis.run_analysis`):
        precision describes the recording, which a smoothing filter would state as steadier than it is.
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
    noise_rms_s2s_33ms_deg: float = float("nan")
    smoothing: dict = field(default_factory=dict)
    lo_s: np.ndarray | None = None
    hi_s: np.ndarray | None = None
    inserted: np.ndarray | None = None
    row_index: np.ndarray | None = None
    holes: int = 0
    yaw_unsmoothed_deg: np.ndarray | None = None
    pitch_unsmoothed_deg: np.ndarray | None = None

    @property
    def unsmoothed(self) -> tuple[np.ndarray, np.ndarray]:
        """(yaw, pitch) before smoothing, deg: the smoothed ones where no smoothing ran."""
        if self.yaw_unsmoothed_deg is None or self.pitch_unsmoothed_deg is None:
            return self.yaw_deg, self.pitch_deg
        return self.yaw_unsmoothed_deg, self.pitch_unsmoothed_deg

    def __post_init__(self):
        n = len(self.t_s)
        if self.inserted is None:
            self.inserted = np.zeros(n, dtype=bool)
        if self.row_index is None:
            self.row_index = np.flatnonzero(~self.inserted)
        if self.lo_s is None or self.hi_s is None:
            self.lo_s, self.hi_s = sample_spans(self.t_s, self.sample_interval_s)

    @property
    def n(self) -> int:
        return len(self.t_s)

    @property
    def span_s(self) -> np.ndarray:
        """Time each sample stands for, s."""
        return self.hi_s - self.lo_s

    def time_frac(self, mask) -> float:
        """Fraction of the recording's time (first span start to last span end) covered by ``mask``'s samples."""
        if not self.n:
            return float("nan")
        total = float(self.hi_s[-1] - self.lo_s[0])
        if total <= 0:
            return float(np.mean(mask))
        return float(self.span_s[np.asarray(mask, bool)].sum() / total)

    @property
    def rate_hz(self) -> float:
        return 1.0 / self.sample_interval_s if self.sample_interval_s > 0 else float("nan")


#: an interval longer than this many median intervals is a hole in the time axis
HOLE_FACTOR = 1.5


def sample_spans(t_s, dt_s: float, hole_after=None) -> tuple[np.ndarray, np.ndarray]:
    """Start and end (s) of the time each sample stands for.

    Half-way to each neighbour; at the ends, and at a hole (``hole_after[i]``:
    the interval after sample ``i`` is a hole), half the median interval
    ``dt_s``.
    """
    t = np.asarray(t_s, dtype=float)
    n = len(t)
    half = 0.5 * float(dt_s) if np.isfinite(dt_s) and dt_s > 0 else 0.0
    if n == 0:
        return t.copy(), t.copy()
    mid = 0.5 * (t[1:] + t[:-1])
    hi = np.append(mid, t[-1] + half)
    lo = np.insert(mid, 0, t[0] - half)
    if hole_after is not None and n > 1:
        h = np.asarray(hole_after, bool)[: n - 1]
        hi[:-1] = np.where(h, t[:-1] + half, hi[:-1])
        lo[1:] = np.where(h, t[1:] - half, lo[1:])
    return lo, hi


def spans_and_real_counts(t_s, dt_s: float, lo_s=None, hi_s=None, inserted=None):
    """The spans of the samples (:func:`sample_spans` when ``lo_s``/``hi_s`` are not given) and the running
    count of real samples (not rows inserted for holes): ``creal[j] - creal[i]`` real samples in ``[i, j)``.

    Returns ``(lo_s, hi_s, creal)`` as float, float and int arrays (``creal`` has one element more than ``t_s``).
    """
    n = len(t_s)
    if lo_s is None or hi_s is None:
        lo_s, hi_s = sample_spans(t_s, dt_s)
    real = ~np.asarray(inserted, bool) if inserted is not None else np.ones(n, bool)
    return np.asarray(lo_s, float), np.asarray(hi_s, float), np.concatenate([[0], np.cumsum(real)])


def _fill_time_holes(df: pd.DataFrame, dt: float, gap_fill_max_ms: float):
    """Insert not-valid rows for the holes in the time axis (step 0 of the module docstring).

    Returns the new frame, the inserted mask, each input row's new index, the
    span bounds of every row, and the number of holes.
    """
    t = df["t_s"].to_numpy(dtype=float)
    n = len(t)
    if n < 2 or not (dt > 0):
        lo, hi = sample_spans(t, dt)
        return df, np.zeros(n, bool), np.arange(n), lo, hi, 0
    d = np.diff(t)
    hole = d > HOLE_FACTOR * dt
    if not hole.any():
        lo, hi = sample_spans(t, dt)
        return df, np.zeros(n, bool), np.arange(n), lo, hi, 0
    idx = np.flatnonzero(hole)
    missing_ms = (d[idx] - dt) * 1000.0
    short = missing_ms <= gap_fill_max_ms + 1e-9
    # short holes: the missing samples on an even grid; long ones: one row standing for the whole hole
    k = np.where(short, np.maximum(np.round(d[idx] / dt).astype(np.int64) - 1, 1), 1)
    new_t, after, marker = [], [], []
    for i, kk, sh in zip(idx, k, short):
        if sh:
            new_t.append(t[i] + d[i] * np.arange(1, kk + 1) / (kk + 1))
        else:
            new_t.append(np.array([t[i] + 0.5 * d[i]]))
        after.append(np.full(kk, i))
        marker.append(np.full(kk, not sh))
    new_t = np.concatenate(new_t)
    after = np.concatenate(after)
    marker = np.concatenate(marker)
    # merged order: each inserted row goes after input row `after`
    key = np.concatenate([np.arange(n, dtype=float), after + 0.5])
    order = np.argsort(key, kind="stable")
    t_all = np.concatenate([t, new_t])[order]
    ins = np.concatenate([np.zeros(n, bool), np.ones(len(new_t), bool)])[order]
    mk = np.concatenate([np.zeros(n, bool), marker])[order]
    row_index = np.empty(n, dtype=np.int64)
    row_index[order[order < n]] = np.flatnonzero(order < n)
    extra = pd.DataFrame({"t_s": new_t, "valid": False, "yaw_deg": np.nan, "pitch_deg": np.nan})
    if "blink" in df.columns:
        extra["blink"] = False
    out = pd.concat([df[list(extra.columns)], extra], ignore_index=True).iloc[order].reset_index(drop=True)
    out["t_s"] = t_all
    out["valid"] = out["valid"].astype(bool)
    # spans: a marker row covers its whole hole; its neighbours keep half an interval each
    hole_after = np.zeros(len(t_all), bool)
    m_idx = np.flatnonzero(mk)
    hole_after[m_idx - 1] = True
    hole_after[m_idx] = True
    lo, hi = sample_spans(t_all, dt, hole_after[:-1])
    lo[m_idx] = t_all[m_idx - 1] + 0.5 * dt
    hi[m_idx] = t_all[m_idx + 1] - 0.5 * dt
    return out, ins, row_index, lo, hi, int(hole.sum())


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

    from aspectus.events.savgol import savgol_filter

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
    t0 = df["t_s"].to_numpy(dtype=float)
    dt = float(np.median(np.diff(t0))) if len(t0) > 1 else 0.0
    df, inserted, row_index, lo_s, hi_s, holes = _fill_time_holes(df, dt, gap_fill_max_ms)
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
    yaw[~valid] = np.nan
    pitch[~valid] = np.nan

    filled = np.zeros(n, dtype=bool)
    blink = np.zeros(n, dtype=bool)
    starts, ends = true_runs(~valid)
    if len(starts):
        # a run containing a blink sample is a blink as a whole
        cb = np.concatenate([[0], np.cumsum(blink_flag)])
        # a run holding a row that stands for a long hole in the time axis is loss: nobody saw a blink there
        long_hole = inserted & (hi_s - lo_s > 1.5 * dt) if dt > 0 else np.zeros(n, bool)
        ch = np.concatenate([[0], np.cumsum(long_hole)])
        has_blink = ((cb[ends] - cb[starts]) > 0) & ((ch[ends] - ch[starts]) == 0)
        blink = runs_to_mask(starts[has_blink], ends[has_blink], n)
        inner = (starts > 0) & (ends < n) & ~has_blink
        # missing time: from the start of the first missing sample's span to the next usable sample's start
        gap_ms = np.where(inner, (lo_s[np.minimum(ends, n - 1)] - lo_s[starts]) * 1000.0, np.inf)
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
    unsmoothed = (None, None)
    if smoothing is not None and n >= 3 and dt > 0:
        unsmoothed = (yaw.copy(), pitch.copy())
        w = _window_samples(smoothing_window_ms, dt)
        yaw = _smooth_runs(yaw, usable, smoothing, w)
        pitch = _smooth_runs(pitch, usable, smoothing, w)
        smooth_info = {"filter": smoothing, "window_samples": w, "window_ms": w * dt * 1000.0,
                       "polyorder": 2 if smoothing == "savgol" else None, "centred": True, "lag_ms": 0.0}
    noise = robust_rms_s2s_deg(yaw, pitch, valid) if n > 1 else float("nan")
    noise_plain = rms_s2s_deg(yaw, pitch, valid) if n > 1 else float("nan")
    noise_33 = robust_rms_s2s_deg(yaw, pitch, valid, reference_lag(dt)) if n > 1 else float("nan")
    return CleanedSamples(t_s=t, yaw_deg=yaw, pitch_deg=pitch, valid_in=valid, usable=usable, filled=filled,
                          blink=blink, loss=loss, sample_interval_s=dt, noise_rms_s2s_deg=noise,
                          noise_rms_s2s_plain_deg=noise_plain, noise_rms_s2s_33ms_deg=noise_33, smoothing=smooth_info, lo_s=lo_s, hi_s=hi_s,
                          inserted=inserted, row_index=row_index, holes=holes,
                          yaw_unsmoothed_deg=unsmoothed[0], pitch_unsmoothed_deg=unsmoothed[1])
