"""Post-processing shared by all detectors: candidates to events and labels.

0. Edge trimming by speed (aspectus's own step, in the spirit of the
   onset/offset thresholds of Nystrom & Holmqvist 2010): samples at the start
   or end of a candidate whose gaze speed exceeds ``edge_speed_factor`` times
   the recording's median speed are removed, so that the end of a saccade and
   post-saccadic oscillations (at high rates), or the one or two samples
   smeared across a saccade (at webcam rates), are not counted as fixation.
   The threshold is data-driven: it scales with the clip's noise.
1. Merge: consecutive fixation candidates separated by at most
   ``merge_gap_ms`` (offset of one to onset of the next), with no blink or
   data loss between them, whose mean positions lie at most
   ``merge_distance_deg`` apart, become one fixation (repeated until nothing
   merges). 75 ms and 0.5 deg: Komogortsev et al. (2010), IEEE Trans. Biomed.
   Eng. 57(11) - field notes, from memory. With ``merge_alpha > 0`` two such
   neighbours are also one fixation when their mean positions are the same
   within the noise: a chi-square test (2 degrees of freedom, level
   ``merge_alpha``) of the difference of the two means, each axis scaled by
   the pooled within-candidate SD of the recording
   (:func:`means_indistinguishable`, :func:`pooled_within_sd_deg`). Noisy
   low-rate data split fixations into fragments a degree or two apart whose
   means, over a handful of samples each, cannot be told apart; at 500 Hz the
   means are so precise that the 0.5 deg criterion decides.
2. Drop fixations shorter than ``min_fixation_ms`` (60-100 ms: common
   practice, field notes).
3. Saccades: between two consecutive fixations with no blink or loss
   between them and at most ``saccade_max_ms`` apart; amplitude is the
   angular distance between the two fixations' mean positions (at webcam
   rates the saccade itself covers only one or two samples). A saccade that
   fell between two samples has ``n_samples = 0`` and duration 0 ms.
4. Blinks and data-loss periods from the clean-up become their own events.

Times follow :data:`aspectus.schema.EVENT_COLUMNS`: onset = time of the
first sample, offset = time of the first sample after the event (for the
last sample: its time plus the median sample interval).
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from aspectus.schema import EVENT_COLUMNS
from aspectus.events.detect.runs import end_times, trim_runs, true_runs
from aspectus.events.detect.types import Candidates

#: per-sample label names; index = label code
LABEL_NAMES = np.array(["unclassified", "fixation", "saccade", "blink", "loss"])
UNCLASSIFIED, FIXATION, SACCADE, BLINK, LOSS = range(5)


def _prefix(v: np.ndarray, ok: np.ndarray) -> np.ndarray:
    return np.concatenate([[0.0], np.cumsum(np.where(ok, v, 0.0))])


def _means(cx, cy, cn, s, e):
    n = cn[e] - cn[s]
    with np.errstate(invalid="ignore", divide="ignore"):
        return (cx[e] - cx[s]) / n, (cy[e] - cy[s]) / n


def merge_candidates(t_s, yaw_deg, pitch_deg, usable, blocked, starts, ends, *, merge_gap_ms: float = 75.0,
                     merge_distance_deg: float = 0.5, dt_s: float | None = None,
                     noise_sd_deg: tuple[float, float] | None = None, merge_alpha: float = 0.0):
    """Merge close fixation candidates (see module docstring); returns new (starts, ends).

    With ``noise_sd_deg = (sd_yaw, sd_pitch)`` and ``merge_alpha > 0`` two
    neighbours are also merged when their mean positions do not differ
    significantly at level ``merge_alpha`` given that noise (see
    :func:`means_indistinguishable`).
    """
    t = np.asarray(t_s, dtype=float)
    s = np.asarray(starts, dtype=np.int64)
    e = np.asarray(ends, dtype=np.int64)
    if len(s) < 2:
        return s, e
    dt = float(np.median(np.diff(t))) if dt_s is None else dt_s
    te = end_times(t, dt)
    ok = np.asarray(usable, bool) & np.isfinite(yaw_deg) & np.isfinite(pitch_deg)
    cx, cy = _prefix(np.asarray(yaw_deg, float), ok), _prefix(np.asarray(pitch_deg, float), ok)
    cn = np.concatenate([[0], np.cumsum(ok)])
    cb = np.concatenate([[0], np.cumsum(np.asarray(blocked, bool))])
    test = (merge_alpha is not None and merge_alpha > 0 and noise_sd_deg is not None
            and any(np.isfinite(v) and v > 0 for v in noise_sd_deg))
    while len(s) >= 2:
        mx, my = _means(cx, cy, cn, s, e)
        gap_ms = (t[s[1:]] - te[e[:-1]]) * 1000.0
        free = (cb[s[1:]] - cb[e[:-1]]) == 0
        dist = np.hypot(mx[1:] - mx[:-1], my[1:] - my[:-1])
        close = dist <= merge_distance_deg
        if test:
            n = (cn[e] - cn[s]).astype(float)
            close |= means_indistinguishable(mx[1:] - mx[:-1], my[1:] - my[:-1], n[:-1], n[1:], noise_sd_deg,
                                             merge_alpha)
        join = free & (gap_ms <= merge_gap_ms + 1e-9) & close
        if not join.any():
            break
        # merge only non-overlapping pairs per pass so that centroids are recomputed
        first = join & ~np.concatenate([[False], join[:-1]])
        keep_start = ~np.concatenate([[False], first])
        keep_end = ~np.concatenate([first, [False]])
        s, e = s[keep_start], e[keep_end]
    return s, e


def means_indistinguishable(dx_deg, dy_deg, n1, n2, noise_sd_deg, alpha: float) -> np.ndarray:
    """Whether two fixations' mean positions are the same position within the noise.

    The difference of two means of ``n1`` and ``n2`` samples with independent
    noise of SD ``sd`` per axis has SD ``sd * sqrt(1/n1 + 1/n2)``; the sum of
    the squared standardised differences of the axes is chi-square with as
    many degrees of freedom as axes when both fixations have the same true
    position. The means are indistinguishable when that statistic stays below
    the chi-square quantile ``1 - alpha`` (``-2 ln(alpha)`` for 2 degrees of
    freedom). An axis whose noise SD is zero or not finite carries no test and
    is left out (1 degree of freedom then); with neither axis, or a mean of
    no samples, the answer is False.

    Parameters
    ----------
    dx_deg, dy_deg : array_like
        Differences of the mean yaw and pitch, deg.
    n1, n2 : array_like
        Samples averaged in each mean.
    noise_sd_deg : (float, float)
        Per-sample noise SD of yaw and pitch, deg.
    alpha : float
        Significance level of the test (0 < alpha < 1).

    Returns
    -------
    ndarray of bool
    """
    n1 = np.asarray(n1, float)
    n2 = np.asarray(n2, float)
    diffs = [np.asarray(d, float) for d, sd in zip((dx_deg, dy_deg), noise_sd_deg) if np.isfinite(sd) and sd > 0]
    sds = [float(sd) for sd in noise_sd_deg if np.isfinite(sd) and sd > 0]
    shape = np.broadcast(np.asarray(dx_deg, float), n1, n2).shape
    if not sds:
        return np.zeros(shape, bool)
    with np.errstate(divide="ignore", invalid="ignore"):
        k = 1.0 / n1 + 1.0 / n2
        stat = sum(d * d / (sd * sd) for d, sd in zip(diffs, sds)) / k
    limit = -2.0 * np.log(alpha) if len(sds) == 2 else _chi2_1_quantile(1.0 - alpha)
    return np.broadcast_to((n1 > 0) & (n2 > 0) & np.isfinite(stat) & (stat <= limit), shape).copy()


def _chi2_1_quantile(q: float) -> float:
    """Quantile of the chi-square distribution with 1 degree of freedom (the square of a normal quantile)."""
    from scipy.stats import norm

    return float(norm.ppf(0.5 + q / 2.0) ** 2)


def pooled_within_sd_deg(yaw_deg, pitch_deg, usable, starts, ends) -> tuple[float, float]:
    """Pooled within-fixation SD of yaw and pitch over candidate fixations, deg.

    ``sqrt(sum_k sum_i (x_ki - mean_k)^2 / sum_k (n_k - 1))`` over the usable
    samples of every candidate - the pooled variance of the two-sample
    t-test (any statistics text). Measured where it matters, inside the
    fixations, it follows heavy-tailed noise that a median-based figure misses.
    NaN when no candidate has two samples.
    """
    ok = np.asarray(usable, bool)
    s = np.asarray(starts, dtype=np.int64)
    e = np.asarray(ends, dtype=np.int64)
    out = []
    for v in (yaw_deg, pitch_deg):
        v = np.asarray(v, float)
        good = ok & np.isfinite(v)
        c1 = _prefix(v, good)
        c2 = _prefix(v * v, good)
        cn = np.concatenate([[0], np.cumsum(good)])
        n = (cn[e] - cn[s]).astype(float)
        sx, sxx = c1[e] - c1[s], c2[e] - c2[s]
        with np.errstate(invalid="ignore", divide="ignore"):
            ss = np.where(n > 0, sxx - sx * sx / n, 0.0)
        dof = np.clip(n - 1, 0, None).sum()
        out.append(float(np.sqrt(max(ss.sum(), 0.0) / dof)) if dof > 0 else float("nan"))
    return out[0], out[1]


def trim_by_speed(t_s, yaw_deg, pitch_deg, usable, starts, ends, *, edge_speed_factor: float = 1.75,
                  velocity_window_ms: float = 10.0) -> tuple[np.ndarray, np.ndarray, float]:
    """Trim candidates' fast edge samples (step 0 of the module docstring).

    Parameters
    ----------
    t_s, yaw_deg, pitch_deg, usable : array_like, shape (n,)
        Times (s), angles (deg), usable mask.
    starts, ends : array_like of int
        Candidate index ranges.
    edge_speed_factor : float, default 1.75
        Threshold in units of the recording's median gaze speed; <= 0 disables.
    velocity_window_ms : float, default 10
        Savitzky-Golay derivative window, ms (at least 3 samples).

    Returns
    -------
    starts, ends : ndarray
        Trimmed ranges (candidates with no slow sample are dropped).
    threshold_deg_s : float
        The speed threshold used, deg/s (NaN when disabled).
    """
    from aspectus.events.detect.ivt import velocity_deg_s

    s = np.asarray(starts, dtype=np.int64)
    e = np.asarray(ends, dtype=np.int64)
    if edge_speed_factor is None or edge_speed_factor <= 0 or not len(s):
        return s, e, float("nan")
    vx, vy = velocity_deg_s(t_s, yaw_deg, pitch_deg, usable, window_ms=velocity_window_ms)
    speed = np.hypot(vx, vy)
    if not np.isfinite(speed).any():
        return s, e, float("nan")
    thr = float(edge_speed_factor * np.nanmedian(speed))
    # a sample without a speed (window touching a gap) counts as slow: gaps are handled elsewhere
    slow = np.where(np.isfinite(speed), speed <= thr, True)
    s2, e2 = trim_runs(s, e, slow)
    return s2, e2, thr


def build_events(t_s, yaw_deg, pitch_deg, usable, blink, loss, candidates: Candidates, *,
                 merge_gap_ms: float = 75.0, merge_distance_deg: float = 0.5, min_fixation_ms: float = 60.0,
                 saccade_max_ms: float = 150.0, edge_speed_factor: float = 1.75,
                 edge_velocity_window_ms: float = 10.0, merge_noise_factor: float = 0.0,
                 noise_rms_s2s_deg: float | None = None, merge_alpha: float = 0.0) -> tuple[pd.DataFrame, np.ndarray]:
    """Events table and per-sample labels from fixation candidates.

    Parameters
    ----------
    t_s, yaw_deg, pitch_deg : array_like, shape (n,)
        Times (s) and angles (deg) after clean-up.
    usable, blink, loss : array_like of bool, shape (n,)
        Masks from :class:`aspectus.events.cleanup.CleanedSamples`.
    candidates : Candidates
        A detector's output.
    merge_gap_ms : float, default 75
        Longest gap between fixations that may be merged, ms.
    merge_distance_deg : float, default 0.5
        Largest distance between the mean positions of fixations merged, deg.
    min_fixation_ms : float, default 60
        Shorter fixations (after merging) are dropped, ms.
    saccade_max_ms : float, default 150
        Longest interval between fixations still called a saccade, ms.
    edge_speed_factor : float, default 1.75
        Edge trimming threshold in units of the median gaze speed; 0 disables.
    edge_velocity_window_ms : float, default 10
        Derivative window for the edge trimming, ms.
    merge_noise_factor : float, default 0
        If > 0, the merge distance grows with the noise:
        ``max(merge_distance_deg, merge_noise_factor * noise_rms_s2s_deg)``.
    noise_rms_s2s_deg : float, optional
        The recording's RMS-S2S noise, deg (for ``merge_noise_factor``).

    Returns
    -------
    events : pandas.DataFrame
        Columns of :data:`aspectus.schema.EVENT_COLUMNS`, sorted by onset.
    labels : ndarray of str, shape (n,)
        ``"fixation"``, ``"saccade"``, ``"blink"``, ``"loss"`` or
        ``"unclassified"`` per sample.
    """
    t = np.asarray(t_s, dtype=float)
    x = np.asarray(yaw_deg, dtype=float)
    y = np.asarray(pitch_deg, dtype=float)
    n = len(t)
    usable = np.asarray(usable, bool)
    blink = np.asarray(blink, bool)
    loss = np.asarray(loss, bool)
    codes = np.zeros(n, dtype=np.int8)
    if n == 0:
        return empty_events(), LABEL_NAMES[codes]
    dt = float(np.median(np.diff(t))) if n > 1 else 0.0
    te = end_times(t, dt)
    blocked = blink | loss
    s, e, thr = trim_by_speed(t, x, y, usable, candidates.starts, candidates.ends,
                              edge_speed_factor=edge_speed_factor, velocity_window_ms=edge_velocity_window_ms)
    candidates.info["edge_speed_threshold_deg_s"] = thr
    merge_deg = float(merge_distance_deg)
    if merge_noise_factor and noise_rms_s2s_deg is not None and np.isfinite(noise_rms_s2s_deg):
        merge_deg = max(merge_deg, float(merge_noise_factor) * float(noise_rms_s2s_deg))
    candidates.info["merge_distance_deg"] = merge_deg
    noise_sd = pooled_within_sd_deg(x, y, usable, s, e) if merge_alpha and merge_alpha > 0 else None
    if noise_sd is not None:
        candidates.info["merge_noise_sd_deg"] = list(noise_sd)
        # which axes the test of two means used (an axis without noise carries none; with neither, no test ran)
        candidates.info["merge_test_axes"] = [ax for ax, sd in zip(("yaw", "pitch"), noise_sd)
                                              if np.isfinite(sd) and sd > 0]
    s, e = merge_candidates(t, x, y, usable, blocked, s, e, merge_gap_ms=merge_gap_ms,
                            merge_distance_deg=merge_deg, dt_s=dt, noise_sd_deg=noise_sd, merge_alpha=merge_alpha)
    dur_ms = (te[e] - t[s]) * 1000.0
    keep = dur_ms >= min_fixation_ms - 1e-9
    s, e = s[keep], e[keep]
    ok = usable & np.isfinite(x) & np.isfinite(y)
    cx, cy = _prefix(x, ok), _prefix(y, ok)
    cn = np.concatenate([[0], np.cumsum(ok)])
    mx, my = _means(cx, cy, cn, s, e)
    frames = []
    if len(s):
        xp = np.append(x, 0.0)
        yp = np.append(y, 0.0)
        idx = np.empty(2 * len(s), dtype=np.int64)
        idx[0::2], idx[1::2] = s, np.minimum(e, n)
        disp = (np.maximum.reduceat(xp, idx)[0::2] - np.minimum.reduceat(xp, idx)[0::2]
                + np.maximum.reduceat(yp, idx)[0::2] - np.minimum.reduceat(yp, idx)[0::2])
        frames.append(pd.DataFrame({"type": "fixation", "onset_s": t[s], "offset_s": te[e],
                                    "yaw_deg": mx, "pitch_deg": my, "amplitude_deg": np.nan,
                                    "dispersion_deg": disp, "n_samples": (e - s)}))
        d = np.zeros(n + 1, dtype=np.int64)
        np.add.at(d, s, 1)
        np.add.at(d, e, -1)
        codes[np.cumsum(d[:-1]) > 0] = FIXATION
    if len(s) >= 2:
        cb = np.concatenate([[0], np.cumsum(blocked)])
        a, b = e[:-1], s[1:]
        free = (cb[b] - cb[a]) == 0
        gap_ms = (t[b] - te[a]) * 1000.0
        sac = free & (gap_ms <= saccade_max_ms + 1e-9)
        a, b = a[sac], b[sac]
        amp = np.hypot(mx[1:][sac] - mx[:-1][sac], my[1:][sac] - my[:-1][sac])
        frames.append(pd.DataFrame({"type": "saccade", "onset_s": te[a], "offset_s": t[b], "yaw_deg": np.nan,
                                    "pitch_deg": np.nan, "amplitude_deg": amp, "dispersion_deg": np.nan,
                                    "n_samples": (b - a)}))
        d = np.zeros(n + 1, dtype=np.int64)
        np.add.at(d, a, 1)
        np.add.at(d, b, -1)
        codes[np.cumsum(d[:-1]) > 0] = SACCADE
    for name, mask, code in (("blink", blink, BLINK), ("loss", loss, LOSS)):
        rs, re_ = true_runs(mask)
        if len(rs):
            frames.append(pd.DataFrame({"type": name, "onset_s": t[rs], "offset_s": te[re_], "yaw_deg": np.nan,
                                        "pitch_deg": np.nan, "amplitude_deg": np.nan, "dispersion_deg": np.nan,
                                        "n_samples": (re_ - rs)}))
            codes[mask] = code
    if not frames:
        return empty_events(), LABEL_NAMES[codes]
    ev = pd.concat(frames, ignore_index=True)
    ev["duration_ms"] = (ev["offset_s"] - ev["onset_s"]) * 1000.0
    ev["n_samples"] = ev["n_samples"].astype("int64")
    ev = ev[[c.name for c in EVENT_COLUMNS]].sort_values(["onset_s", "offset_s"], kind="stable")
    return ev.reset_index(drop=True), LABEL_NAMES[codes]


def empty_events() -> pd.DataFrame:
    """An events table with every column and no rows."""
    return pd.DataFrame({c.name: pd.Series(dtype="object" if c.dtype == "str" else c.dtype) for c in EVENT_COLUMNS})
