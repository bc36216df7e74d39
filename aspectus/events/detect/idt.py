"""I-DT: dispersion-threshold identification of fixations.

Salvucci, D. D., & Goldberg, J. H. (2000). Identifying fixations and saccades
in eye-tracking protocols. Proceedings of the Eye Tracking Research &
Applications Symposium (ETRA), 71-78. doi:10.1145/355017.355028.

The algorithm (their Table 4): a window covering the duration threshold is
placed at the first remaining sample; if its dispersion ``(max x - min x) +
(max y - min y)`` is at most the dispersion threshold, the window grows
sample by sample until the dispersion would exceed the threshold, and the
window is a fixation; otherwise the first sample is dropped. aspectus adds two
things: windows never span unusable samples, and the dispersion threshold
may adapt to the clip's measured noise (``dispersion_deg=None``).
"""
from __future__ import annotations

import numpy as np

from aspectus.errors import ParameterError
from aspectus.events.detect.runs import end_times, true_runs
from aspectus.events.detect.types import Candidates


def _range_table_query(x: np.ndarray, starts: np.ndarray, ends: np.ndarray) -> np.ndarray:
    """max - min of ``x[s:e]`` for each window (``e > s``), O(n log w) memory-light sparse table."""
    out = np.full(len(starts), np.nan)
    if not len(starts):
        return out
    length = ends - starts
    level = np.floor(np.log2(np.maximum(length, 1))).astype(int)
    mx = x.copy()
    mn = x.copy()
    for k in range(int(level.max()) + 1):
        if k > 0:
            half = 1 << (k - 1)
            mx = np.maximum(mx[: len(mx) - half], mx[half:]) if len(mx) > half else mx[:0]
            mn = np.minimum(mn[: len(mn) - half], mn[half:]) if len(mn) > half else mn[:0]
        sel = np.flatnonzero(level == k)
        if not len(sel):
            continue
        s = starts[sel]
        e2 = ends[sel] - (1 << k)
        out[sel] = np.maximum(mx[s], mx[e2]) - np.minimum(mn[s], mn[e2])
    return out


def detect_idt(t_s, yaw_deg, pitch_deg, usable, *, dispersion_deg: float | None = None,
               noise_rms_s2s_deg: float | None = None, noise_factor: float = 3.5,
               min_dispersion_deg: float = 1.5, min_duration_ms: float = 60.0) -> Candidates:
    """Fixation candidates by I-DT (Salvucci & Goldberg 2000).

    Parameters
    ----------
    t_s : array_like, shape (n,)
        Sample times in s, increasing.
    yaw_deg, pitch_deg : array_like, shape (n,)
        Gaze angles in degrees.
    usable : array_like of bool, shape (n,)
        Samples that may belong to a fixation.
    dispersion_deg : float or None, default None
        Dispersion threshold in degrees, ``(max-min yaw) + (max-min pitch)``.
        ``None`` adapts it to the noise: ``max(min_dispersion_deg,
        noise_factor * noise_rms_s2s_deg)``.
    noise_rms_s2s_deg : float, optional
        The clip's RMS-S2S noise in degrees (needed when ``dispersion_deg`` is
        None; see :mod:`aspectus.events.detect.noise`).
    noise_factor : float, default 3.5
        Adaptive threshold in units of RMS-S2S.
    min_dispersion_deg : float, default 1.5
        Floor of the adaptive threshold, degrees.
    min_duration_ms : float, default 60
        Duration threshold: the initial window covers at least this many ms.

    Returns
    -------
    Candidates
        Fixation candidates as index ranges, plus ``info["dispersion_deg"]``.
    """
    t = np.asarray(t_s, dtype=float)
    x = np.asarray(yaw_deg, dtype=float)
    y = np.asarray(pitch_deg, dtype=float)
    ok = np.asarray(usable, dtype=bool) & np.isfinite(x) & np.isfinite(y)
    n = len(t)
    if dispersion_deg is None:
        noise = noise_rms_s2s_deg if noise_rms_s2s_deg is not None and np.isfinite(noise_rms_s2s_deg) else 0.0
        thr = max(float(min_dispersion_deg), float(noise_factor) * float(noise))
    else:
        thr = float(dispersion_deg)
    if not (np.isfinite(thr) and thr > 0):
        raise ParameterError(f"I-DT dispersion threshold must be > 0 deg, got {thr!r}")
    if not (np.isfinite(min_duration_ms) and min_duration_ms > 0):
        raise ParameterError(f"I-DT min_duration_ms must be > 0 ms, got {min_duration_ms!r}")
    info = {"dispersion_deg": thr, "min_duration_ms": float(min_duration_ms)}
    if n < 2 or not ok.any():
        return Candidates.empty(info)
    dt = float(np.median(np.diff(t)))
    te = end_times(t, dt)
    # run end (exclusive) for each sample
    rs, re_ = true_runs(ok)
    run_end = np.full(n, -1, dtype=np.int64)
    run_id = np.cumsum(np.isin(np.arange(n), rs)) - 1
    run_end[ok] = re_[run_id[ok]]
    # initial window [i, e0) covering the duration threshold
    need = t + min_duration_ms / 1000.0 - 1e-9
    e0 = np.searchsorted(te, need, side="left")
    e0 = np.maximum(e0, np.arange(n) + 1)
    cand = np.flatnonzero(ok & (e0 <= np.where(ok, run_end, -1)))
    if not len(cand):
        return Candidates.empty(info)
    disp = _range_table_query(x, cand, e0[cand]) + _range_table_query(y, cand, e0[cand])
    good = np.zeros(n, dtype=bool)
    good[cand[disp <= thr]] = True
    if not good.any():
        return Candidates.empty(info)
    # next good start at or after each index
    idx = np.where(good, np.arange(n), n)
    next_good = np.minimum.accumulate(idx[::-1])[::-1]
    chunk0 = max(16, int(np.ceil(1.0 / dt)) if dt > 0 else 16)
    starts, ends = [], []
    i = 0
    while i < n:
        i = int(next_good[i])
        if i >= n:
            break
        e = int(e0[i])
        stop = int(run_end[i])
        # grow while the dispersion stays within the threshold
        chunk = chunk0
        while e < stop:
            hi = min(stop, e + chunk)
            xs = x[i:hi]
            ys = y[i:hi]
            d = (np.maximum.accumulate(xs) - np.minimum.accumulate(xs)
                 + np.maximum.accumulate(ys) - np.minimum.accumulate(ys))
            over = d[e - i:] > thr
            k = int(over.argmax())
            if over[k]:
                e = e + k
                break
            e = hi
            chunk *= 2
        starts.append(i)
        ends.append(e)
        i = e
    return Candidates(np.asarray(starts, dtype=np.int64), np.asarray(ends, dtype=np.int64), info)
