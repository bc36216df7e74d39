"""Post-processing shared by all detectors: candidates to events and labels.

0. Edge trimming: only what is measurably not fixation.

   a. By speed, where speed is measured: when the sample interval is no
      longer than ``edge_velocity_window_ms`` (10 ms: 100 Hz and above), edge
      samples faster than ``edge_speed_factor`` times the recording's median
      gaze speed are removed (aspectus's own step, in the spirit of the
      onset/offset thresholds of Nystrom & Holmqvist 2010): the slow end of
      a saccade and the post-saccadic oscillation stay within the noise of
      position but not of speed. With longer intervals the derivative
      window (at least 3 samples) reaches into the saccade and the step
      would remove genuine fixation samples - 50 ms per fixation at 30 Hz -
      so it is not applied there (``edge_speed_low_rates`` forces it).
   b. By position, at every rate: a candidate's first (last) sample is
      removed while it differs from the mean of the next (previous) samples
      over ``edge_window_ms`` (at least 2) by more than the noise allows, at
      level ``edge_alpha`` (:func:`trim_by_position`: along the line to the
      neighbouring fixation, else on both axes), with the recording's
      within-fixation noise SD (median absolute deviation from each
      candidate's median, pooled, times 1.4826). That removes the samples
      caught mid-saccade at webcam rates and keeps the last genuine fixation
      sample beside a saccade.

   Durations then do not depend on the rate (tests/test_detect_rates.py).
   What position cannot resolve stays in the fixation: at webcam rates with
   0.3-0.5 deg noise, the slow start and end of a saccade and the
   post-saccadic oscillation, which expert coders label as not fixation
   (README, detector comparison).
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
   means are so precise that the 0.5 deg criterion decides. The test counts
   independent looks at the error, not samples
   (:func:`aspectus.events.detect.noise.samples_per_look`: one sample at 30 Hz
   and for white noise, up to two at 60 Hz where the error changes over tens
   of milliseconds), so it asks the same of the same eyes at either rate.
2. Drop fixations shorter than ``min_fixation_ms`` (60-100 ms: common
   practice, field notes) or made of fewer than :data:`MIN_FIXATION_SAMPLES`
   usable samples (at webcam rates two noisy samples are no evidence of a
   fixation: common practice).
3. Saccades: between two consecutive fixations with no blink or loss
   between them and at most ``saccade_max_ms`` apart; amplitude is the
   angular distance between the two fixations' mean positions (at webcam
   rates the saccade itself covers only one or two samples). A saccade runs
   from the time of the last sample of the fixation before to the time of
   the first sample of the fixation after - the interval the movement is
   known to lie in - so it lasts at least one sample interval, also when it
   fell between two samples (``n_samples``, the samples strictly between,
   is then 0). Its peak velocity (:func:`peak_velocities`) is reported only
   where the rate resolves it (at least ``PEAK_VELOCITY_MIN_RATE_HZ`` and 3
   samples inside the saccade); elsewhere it is NaN and
   ``peak_velocity_note`` says why.
4. Blinks and data-loss periods from the clean-up become their own events.

Times follow :data:`aspectus.schema.EVENT_COLUMNS`: a sample stands for the
time from half an interval before it to half an interval after it
(:func:`aspectus.events.cleanup.sample_spans`), so a fixation, blink or loss runs
from the start of its first sample's span to the end of its last one's. The
duration of a fixation sampled at any rate then estimates its true duration
without bias.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from aspectus.schema import EVENT_COLUMNS
from aspectus.events.detect.noise import samples_per_look
from aspectus.events.detect.runs import end_times, runs_to_mask, trim_runs, true_runs
from aspectus.events.detect.types import Candidates

#: Peak saccade velocity is reported only at this rate or above (Hz). Velocity
#: profiles of saccades need a rate of some 200 Hz or more (Holmqvist et al.
#: 2011, "Eye tracking: a comprehensive guide to methods and measures",
#: chapter on sampling frequency - from memory); below, a saccade spans one
#: or two samples and the "peak" is the mean speed between two samples.
PEAK_VELOCITY_MIN_RATE_HZ = 200.0
#: ... and only for saccades with at least this many samples inside them.
PEAK_VELOCITY_MIN_SAMPLES = 3

#: per-sample label names; index = label code
LABEL_NAMES = np.array(["unclassified", "fixation", "saccade", "blink", "loss"])
UNCLASSIFIED, FIXATION, SACCADE, BLINK, LOSS = range(5)


#: fewest usable samples a fixation may hold (3: at 30 Hz 100 ms; at lab rates min_fixation_ms decides).
#: Measured (docs/notes/lund-30hz-limits.md): with 2 the demo clips' webcam gaze gives 82 and 45 fixations for
#: 78 and 39 rendered ones (with 3: 74 and 34), half of the extra ones fragments split off a neighbour; the Lund
#: coders' shortest fixations, in exchange, are dropped at 30 Hz (+9 ms on their mean duration).
MIN_FIXATION_SAMPLES = 3


def _prefix(v: np.ndarray, ok: np.ndarray) -> np.ndarray:
    return np.concatenate([[0.0], np.cumsum(np.where(ok, v, 0.0))])


def _means(cx, cy, cn, s, e):
    n = cn[e] - cn[s]
    with np.errstate(invalid="ignore", divide="ignore"):
        return (cx[e] - cx[s]) / n, (cy[e] - cy[s]) / n


def merge_candidates(t_s, yaw_deg, pitch_deg, usable, blocked, starts, ends, *, merge_gap_ms: float = 75.0,
                     merge_distance_deg: float = 0.5, dt_s: float | None = None,
                     noise_sd_deg: tuple[float, float] | None = None, merge_alpha: float = 0.0,
                     lo_s=None, hi_s=None, samples_per_look: float = 1.0):
    """Merge close fixation candidates (see module docstring); returns new (starts, ends).

    With ``noise_sd_deg = (sd_yaw, sd_pitch)`` and ``merge_alpha > 0`` two
    neighbours are also merged when their mean positions do not differ
    significantly at level ``merge_alpha`` given that noise (see
    :func:`means_indistinguishable`), each mean over its samples divided by
    ``samples_per_look`` independent looks at the error
    (:func:`aspectus.events.detect.noise.samples_per_look`).
    """
    t = np.asarray(t_s, dtype=float)
    s = np.asarray(starts, dtype=np.int64)
    e = np.asarray(ends, dtype=np.int64)
    if len(s) < 2:
        return s, e
    dt = float(np.median(np.diff(t))) if dt_s is None else dt_s
    per_look = max(float(samples_per_look), 1.0) if np.isfinite(samples_per_look) else 1.0
    if lo_s is None or hi_s is None:
        te = end_times(t, dt)
        lo = t
        hi_of_last = lambda ee: te[ee]  # noqa: E731
    else:
        lo = np.asarray(lo_s, float)
        hi = np.asarray(hi_s, float)
        hi_of_last = lambda ee: hi[ee - 1]  # noqa: E731
    ok = np.asarray(usable, bool) & np.isfinite(yaw_deg) & np.isfinite(pitch_deg)
    cx, cy = _prefix(np.asarray(yaw_deg, float), ok), _prefix(np.asarray(pitch_deg, float), ok)
    cn = np.concatenate([[0], np.cumsum(ok)])
    cb = np.concatenate([[0], np.cumsum(np.asarray(blocked, bool))])
    test = (merge_alpha is not None and merge_alpha > 0 and noise_sd_deg is not None
            and any(np.isfinite(v) and v > 0 for v in noise_sd_deg))
    while len(s) >= 2:
        mx, my = _means(cx, cy, cn, s, e)
        gap_ms = (lo[s[1:]] - hi_of_last(e[:-1])) * 1000.0
        free = (cb[s[1:]] - cb[e[:-1]]) == 0
        dist = np.hypot(mx[1:] - mx[:-1], my[1:] - my[:-1])
        close = dist <= merge_distance_deg
        if test:
            # samples closer than 33 ms are not all independent draws of webcam error (part of it changes over
            # tens of ms): count independent looks, as many at any rate as at 30 Hz (per sample at 30 Hz)
            n = np.maximum((cn[e] - cn[s]) / per_look, 1.0)
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
    from scipy.special import ndtri  # the normal quantile (what scipy.stats.norm.ppf computes), without scipy.stats

    return float(ndtri(0.5 + q / 2.0) ** 2)


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


def within_fixation_mad_sd_deg(yaw_deg, pitch_deg, usable, starts, ends) -> tuple[float, float]:
    """Robust within-fixation noise SD of yaw and pitch, deg.

    ``1.4826 x median |x - median of its candidate|`` over the usable samples
    of every candidate (the MAD scaled to the SD of normal noise; any
    statistics text). A few saccade samples at a candidate's edges barely move
    it. NaN when there is no candidate.
    """
    ok = np.asarray(usable, bool)
    s = np.asarray(starts, dtype=np.int64)
    e = np.asarray(ends, dtype=np.int64)
    if not len(s):
        return float("nan"), float("nan")
    lens = np.maximum(e - s, 0)
    pos = np.repeat(s - np.concatenate([[0], np.cumsum(lens)[:-1]]), lens) + np.arange(lens.sum())
    gid = np.repeat(np.arange(len(s)), lens)
    keep = ok[pos]
    pos, gid = pos[keep], gid[keep]
    out = []
    for v in (yaw_deg, pitch_deg):
        v = np.asarray(v, float)[pos]
        fin = np.isfinite(v)
        if not fin.any():
            out.append(float("nan"))
            continue
        med = pd.Series(v[fin]).groupby(gid[fin]).transform("median").to_numpy()
        out.append(float(1.4826 * np.median(np.abs(v[fin] - med))))
    return out[0], out[1]


def trim_by_position(t_s, yaw_deg, pitch_deg, usable, starts, ends, *, noise_sd_deg, alpha: float = 0.1,
                     window_ms: float = 20.0, neighbour_gap_ms: float = 150.0) -> tuple[np.ndarray, np.ndarray]:
    """Trim candidates' edge samples that are measurably away from the fixation (step 0 of the module docstring).

    An edge sample is compared with the mean of its inner neighbours. Where the
    candidate has a neighbouring candidate on that side (at most
    ``neighbour_gap_ms`` away), the eye left (or arrived) along the line
    between the two, so the difference is projected on that line and tested
    two-sided with one degree of freedom (a saccade's tail and the
    post-saccadic oscillation lie along it); elsewhere both axes are tested
    (2 degrees of freedom).

    Parameters
    ----------
    t_s, yaw_deg, pitch_deg, usable : array_like, shape (n,)
    starts, ends : array_like of int
        Candidate index ranges, sorted.
    noise_sd_deg : (float, float)
        Per-sample noise SD of yaw and pitch, deg.
    alpha : float
        Level of the test (chi-square quantile ``1 - alpha`` with 1 or 2
        degrees of freedom).
    window_ms : float
        Inner neighbours compared with: those within this time (at least 2).
    neighbour_gap_ms : float
        Largest gap to a neighbouring candidate that gives the test its direction, ms.

    Returns
    -------
    starts, ends : ndarray
        Trimmed ranges (a candidate may shrink to nothing and is then dropped).
    """
    from scipy.special import gammaincinv

    t = np.asarray(t_s, float)
    x = np.asarray(yaw_deg, float)
    y = np.asarray(pitch_deg, float)
    s = np.asarray(starts, dtype=np.int64).copy()
    e = np.asarray(ends, dtype=np.int64).copy()
    sds = [float(v) if np.isfinite(v) and v > 0 else np.nan for v in noise_sd_deg]
    if not len(s) or not (alpha and alpha > 0) or all(np.isnan(sds)):
        return s, e
    n = len(t)
    dt = float(np.median(np.diff(t))) if n > 1 else 0.0
    k = max(2, int(round(window_ms / 1000.0 / dt))) if dt > 0 else 2
    ok = np.asarray(usable, bool) & np.isfinite(x) & np.isfinite(y)
    cx, cy = _prefix(x, ok), _prefix(y, ok)
    cn = np.concatenate([[0], np.cumsum(ok)])
    # chi-square quantiles, 2 gammaincinv(df / 2, p) as scipy.stats.chi2.ppf computes them (without importing
    # scipy.stats: 0.7 s of CPU per process)
    lim2, lim1 = float(2.0 * gammaincinv(1.0, 1 - alpha)), float(2.0 * gammaincinv(0.5, 1 - alpha))
    vx, vy = [v * v if np.isfinite(v) else np.nan for v in sds]
    # direction of the neighbouring candidate on each side (unit vector; NaN where none)
    mx, my = _means(cx, cy, cn, s, e)
    te = t[np.maximum(e - 1, 0)]
    close_prev = np.concatenate([[False], (t[s[1:]] - te[:-1]) * 1000.0 <= neighbour_gap_ms + 1e-9])
    close_next = np.concatenate([close_prev[1:], [False]])

    def unit(dx, dy, close):
        d = np.hypot(dx, dy)
        with np.errstate(invalid="ignore", divide="ignore"):
            good = close & np.isfinite(d) & (d > 0)
            return np.where(good, dx / d, np.nan), np.where(good, dy / d, np.nan)

    ux_prev, uy_prev = unit(np.concatenate([[np.nan], mx[:-1] - mx[1:]]), np.concatenate([[np.nan], my[:-1] - my[1:]]),
                            close_prev)
    ux_next, uy_next = unit(np.concatenate([mx[1:] - mx[:-1], [np.nan]]), np.concatenate([my[1:] - my[:-1], [np.nan]]),
                            close_next)

    def far(i, a, b, ux, uy):
        """Sample i against the mean of the usable samples [a, b)."""
        m = (cn[b] - cn[a]).astype(float)
        with np.errstate(invalid="ignore", divide="ignore"):
            dx = x[i] - (cx[b] - cx[a]) / m
            dy = y[i] - (cy[b] - cy[a]) / m
            f = 1.0 + 1.0 / m
            two = np.zeros(len(i))
            if np.isfinite(vx):
                two += dx * dx / (vx * f)
            if np.isfinite(vy):
                two += dy * dy / (vy * f)
            var1 = (np.nan_to_num(vx) * ux * ux + np.nan_to_num(vy) * uy * uy) * f
            one = (dx * ux + dy * uy) ** 2 / var1
            directed = np.isfinite(one)
            hit = np.where(directed, one > lim1, np.isfinite(two) & (two > lim2))
        return (m >= 1) & hit

    for side in ("start", "end"):
        active = np.ones(len(s), bool)
        for _ in range(n):
            idx = np.flatnonzero(active & (e - s > 1))
            if not len(idx):
                break
            if side == "start":
                i = s[idx]
                hit = far(i, i + 1, np.minimum(i + 1 + k, e[idx]), ux_prev[idx], uy_prev[idx])
                s[idx[hit]] += 1
            else:
                i = e[idx] - 1
                hit = far(i, np.maximum(i - k, s[idx]), i, ux_next[idx], uy_next[idx])
                e[idx[hit]] -= 1
            active[:] = False
            active[idx[hit]] = True
    keep = e > s
    return s[keep], e[keep]


def peak_velocities(t_s, yaw_deg, pitch_deg, usable, a, b, *, rate_hz: float, window_ms: float = 20.0):
    """Peak gaze speed (deg/s) of each saccade from the last fixation sample ``a`` to the next one's first ``b``.

    Savitzky-Golay speed (order 2, ``window_ms``, on the samples' own times;
    :func:`aspectus.events.detect.ivt.velocity_deg_s`), maximum over the samples
    ``a..b``. NaN, with the reason, where the rate cannot resolve a velocity
    profile (below :data:`PEAK_VELOCITY_MIN_RATE_HZ`), the saccade has fewer
    than :data:`PEAK_VELOCITY_MIN_SAMPLES` samples inside it, or its speed
    touches missing data.

    Returns
    -------
    peak_deg_s : ndarray
    notes : ndarray of str
        ``""`` where measured, else why not.
    """
    from aspectus.events.detect.ivt import velocity_deg_s

    a = np.asarray(a, dtype=np.int64)
    b = np.asarray(b, dtype=np.int64)
    peak = np.full(len(a), np.nan)
    notes = np.full(len(a), "", dtype=object)
    if not len(a):
        return peak, notes.astype(str)
    if not (np.isfinite(rate_hz) and rate_hz >= PEAK_VELOCITY_MIN_RATE_HZ):
        notes[:] = (f"not measurable at {rate_hz:.0f} Hz: a saccade spans one or two samples "
                    f"(peak velocity needs >= {PEAK_VELOCITY_MIN_RATE_HZ:.0f} Hz)")
        return peak, notes.astype(str)
    vx, vy = velocity_deg_s(t_s, yaw_deg, pitch_deg, usable, window_ms=window_ms)
    sp = np.hypot(vx, vy)
    inside = b - a - 1
    few = inside < PEAK_VELOCITY_MIN_SAMPLES
    notes[few] = f"not measurable: fewer than {PEAK_VELOCITY_MIN_SAMPLES} samples inside the saccade"
    for k in np.flatnonzero(~few):
        seg = sp[a[k]:b[k] + 1]
        if np.isfinite(seg).all():
            peak[k] = float(seg.max())
        else:
            notes[k] = "not measurable: the velocity window touches missing data"
    return peak, notes.astype(str)


def build_events(t_s, yaw_deg, pitch_deg, usable, blink, loss, candidates: Candidates, *,
                 merge_gap_ms: float = 75.0, merge_distance_deg: float = 0.5, min_fixation_ms: float = 60.0,
                 saccade_max_ms: float = 150.0, edge_speed_factor: float = 0.0,
                 edge_velocity_window_ms: float = 10.0, merge_noise_factor: float = 0.0,
                 noise_rms_s2s_deg: float | None = None, merge_alpha: float = 0.0, edge_alpha: float = 0.0,
                 edge_window_ms: float = 20.0, lo_s=None, hi_s=None, inserted=None,
                 noise_rms_s2s_1sample_deg: float | None = None,
                 peak_velocity_window_ms: float = 20.0, edge_speed_low_rates: bool = False) -> tuple[pd.DataFrame, np.ndarray]:
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
    edge_speed_factor : float, default 0
        Trimming by speed, in units of the median gaze speed (applied only
        where the sample interval is at most ``edge_velocity_window_ms``,
        unless ``edge_speed_low_rates``); 0 disables.
    edge_velocity_window_ms : float, default 10
        Derivative window for the trimming by speed, ms.
    merge_noise_factor : float, default 0
        If > 0, the merge distance grows with the noise:
        ``max(merge_distance_deg, merge_noise_factor * noise_rms_s2s_deg)``.
    noise_rms_s2s_deg : float, optional
        The recording's RMS-S2S noise, deg (for ``merge_noise_factor``), read
        over 33 ms steps by :func:`aspectus.events.analysis.run_analysis`.
    noise_rms_s2s_1sample_deg : float, optional
        The same per sample; with ``noise_rms_s2s_deg`` it sets how many
        samples make one independent look at the error
        (:func:`aspectus.events.detect.noise.samples_per_look`) for the merge
        test and the fewest samples of a fixation. Absent: one sample.
    merge_alpha : float, default 0
        Level of the merge test of two means; 0 disables.
    edge_alpha : float, default 0
        Level of the edge trimming test (:func:`trim_by_position`); 0 disables.
    edge_window_ms : float, default 20
        Inner neighbours the edge samples are compared with, ms.
    lo_s, hi_s : array_like, optional
        Span of time each sample stands for
        (:func:`aspectus.events.cleanup.sample_spans`; computed when absent).
    inserted : array_like of bool, optional
        Rows not in the input (holes in the time axis): not counted in
        ``n_samples``.
    peak_velocity_window_ms : float, default 20
        Derivative window of the saccades' peak velocity, ms.
    edge_speed_low_rates : bool, default False
        Trim by speed at every rate (the earlier behaviour; biased at low rates).

    Returns
    -------
    events : pandas.DataFrame
        Columns of :data:`aspectus.schema.EVENT_COLUMNS`, sorted by onset.
    labels : ndarray of str, shape (n,)
        ``"fixation"``, ``"saccade"``, ``"blink"``, ``"loss"`` or
        ``"unclassified"`` per sample.
    """
    from aspectus.events.cleanup import spans_and_real_counts

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
    lo_s, hi_s, creal = spans_and_real_counts(t, dt, lo_s, hi_s, inserted)
    blocked = blink | loss
    s, e = np.asarray(candidates.starts, dtype=np.int64), np.asarray(candidates.ends, dtype=np.int64)
    rate = 1.0 / dt if dt > 0 else float("nan")
    # speed is a measurement where the sample interval is no longer than the derivative window asked for;
    # with longer intervals the (3-sample) window reaches into the saccade and flags genuine fixation samples
    if (dt > 0 and dt * 1000.0 <= edge_velocity_window_ms + 1e-9) or edge_speed_low_rates:
        s, e, thr = trim_by_speed(t, x, y, usable, s, e, edge_speed_factor=edge_speed_factor,
                                  velocity_window_ms=edge_velocity_window_ms)
    else:
        thr = float("nan")
    candidates.info["edge_speed_threshold_deg_s"] = thr
    if edge_alpha and edge_alpha > 0:
        sd = within_fixation_mad_sd_deg(x, y, usable, s, e)
        s, e = trim_by_position(t, x, y, usable, s, e, noise_sd_deg=sd, alpha=edge_alpha, window_ms=edge_window_ms)
        candidates.info["edge_noise_sd_deg"] = list(sd)
        candidates.info["edge_alpha"] = float(edge_alpha)
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
    looks = (samples_per_look(dt, noise_rms_s2s_1sample_deg, noise_rms_s2s_deg)
             if noise_rms_s2s_1sample_deg is not None and noise_rms_s2s_deg is not None else 1.0)
    candidates.info["samples_per_look"] = looks
    s, e = merge_candidates(t, x, y, usable, blocked, s, e, merge_gap_ms=merge_gap_ms,
                            merge_distance_deg=merge_deg, dt_s=dt, noise_sd_deg=noise_sd, merge_alpha=merge_alpha,
                            lo_s=lo_s, hi_s=hi_s, samples_per_look=looks)
    dur_ms = (hi_s[np.maximum(e - 1, 0)] - lo_s[s]) * 1000.0
    # a fixation needs at least MIN_FIXATION_SAMPLES samples whatever min_fixation_ms says: over fewer, its
    # position and dispersion rest on one or two noisy samples (at 30 Hz: 100 ms; at 60 Hz and above
    # min_fixation_ms decides)
    n_usable = np.concatenate([[0], np.cumsum(usable)])
    keep = (dur_ms >= min_fixation_ms - 1e-9) & (n_usable[e] - n_usable[s] >= MIN_FIXATION_SAMPLES)
    candidates.info["min_fixation_samples"] = MIN_FIXATION_SAMPLES
    s, e = s[keep], e[keep]
    ok = usable & np.isfinite(x) & np.isfinite(y)
    cx, cy = _prefix(x, ok), _prefix(y, ok)
    cn = np.concatenate([[0], np.cumsum(ok)])
    mx, my = _means(cx, cy, cn, s, e)
    nan = np.full(len(s), np.nan)
    frames = []
    if len(s):
        xp = np.append(np.where(ok, x, np.nan), 0.0)
        yp = np.append(np.where(ok, y, np.nan), 0.0)
        idx = np.empty(2 * len(s), dtype=np.int64)
        idx[0::2], idx[1::2] = s, np.minimum(e, n)
        with np.errstate(invalid="ignore"):
            disp = (np.fmax.reduceat(xp, idx)[0::2] - np.fmin.reduceat(xp, idx)[0::2]
                    + np.fmax.reduceat(yp, idx)[0::2] - np.fmin.reduceat(yp, idx)[0::2])
        m_ok = (cn[e] - cn[s]).astype(np.int64)
        thr_fn = getattr(candidates, "threshold_of_samples", None)
        noise_fn = getattr(candidates, "noise_dispersion_of_samples", None)
        frames.append(pd.DataFrame({
            "type": "fixation", "onset_s": lo_s[s], "offset_s": hi_s[e - 1], "yaw_deg": mx, "pitch_deg": my,
            "amplitude_deg": np.nan, "dispersion_deg": disp, "n_samples": creal[e] - creal[s],
            "dispersion_threshold_deg": thr_fn(m_ok) if thr_fn is not None else nan,
            "dispersion_noise_deg": noise_fn(m_ok) if noise_fn is not None else nan,
            "peak_velocity_deg_s": np.nan, "peak_velocity_note": ""}))
        codes[runs_to_mask(s, e, n)] = FIXATION
    if len(s) >= 2:
        cb = np.concatenate([[0], np.cumsum(blocked)])
        a, b = e[:-1] - 1, s[1:]  # last sample of one fixation, first of the next
        free = (cb[b] - cb[a + 1]) == 0
        gap_ms = (lo_s[b] - hi_s[a]) * 1000.0
        sac = free & (gap_ms <= saccade_max_ms + 1e-9)
        a, b = a[sac], b[sac]
        amp = np.hypot(mx[1:][sac] - mx[:-1][sac], my[1:][sac] - my[:-1][sac])
        rate = 1.0 / dt if dt > 0 else float("nan")
        peak, notes = peak_velocities(t, x, y, usable, a, b, rate_hz=rate, window_ms=peak_velocity_window_ms)
        frames.append(pd.DataFrame({"type": "saccade", "onset_s": t[a], "offset_s": t[b], "yaw_deg": np.nan,
                                    "pitch_deg": np.nan, "amplitude_deg": amp, "dispersion_deg": np.nan,
                                    "n_samples": creal[b] - creal[a + 1], "dispersion_threshold_deg": np.nan,
                                    "dispersion_noise_deg": np.nan, "peak_velocity_deg_s": peak,
                                    "peak_velocity_note": notes}))
        codes[runs_to_mask(a + 1, b, n)] = SACCADE
    for name, mask, code in (("blink", blink, BLINK), ("loss", loss, LOSS)):
        rs, re_ = true_runs(mask)
        if len(rs):
            frames.append(pd.DataFrame({"type": name, "onset_s": lo_s[rs], "offset_s": hi_s[re_ - 1],
                                        "yaw_deg": np.nan, "pitch_deg": np.nan, "amplitude_deg": np.nan,
                                        "dispersion_deg": np.nan, "n_samples": creal[re_] - creal[rs],
                                        "dispersion_threshold_deg": np.nan, "dispersion_noise_deg": np.nan,
                                        "peak_velocity_deg_s": np.nan, "peak_velocity_note": ""}))
            codes[mask] = code
    if not frames:
        return empty_events(), LABEL_NAMES[codes]
    ev = pd.concat(frames, ignore_index=True)
    ev["duration_ms"] = (ev["offset_s"] - ev["onset_s"]) * 1000.0
    ev["n_samples"] = ev["n_samples"].astype("int64")
    ev["peak_velocity_note"] = ev["peak_velocity_note"].astype(str)
    ev = ev[[c.name for c in EVENT_COLUMNS]].sort_values(["onset_s", "offset_s"], kind="stable")
    return ev.reset_index(drop=True), LABEL_NAMES[codes]


def empty_events() -> pd.DataFrame:
    """An events table with every column and no rows."""
    return pd.DataFrame({c.name: pd.Series(dtype="object" if c.dtype == "str" else c.dtype) for c in EVENT_COLUMNS})
