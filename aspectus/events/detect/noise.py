"""Noise (precision) estimates of a gaze signal, in degrees.

Precision as the RMS of sample-to-sample angular distances (RMS-S2S) follows
Holmqvist, Nystrom & Mulvey (2012), "Eye tracker data quality: what it is and
how to measure it", Proc. ETRA, 45-52. The robust variant used to adapt the
detectors' thresholds is aspectus's own: it reads the RMS-S2S off the *median*
sample-to-sample distance, so the few large steps of saccades do not inflate
it.
"""
from __future__ import annotations

import numpy as np

#: For white Gaussian noise of per-axis SD ``s``, sample-to-sample steps are
#: Rayleigh distributed with scale ``s * sqrt(2)``: RMS = 2 s and median =
#: s * sqrt(4 ln 2). RMS / median:
RAYLEIGH_RMS_PER_MEDIAN = 2.0 / np.sqrt(4.0 * np.log(2.0))


#: The step (s) the clip's precision figure ``noise_rms_s2s_33ms_deg`` is read at: one frame at 30 fps, the rate
#: the precision tiers were measured at. Per-sample RMS-S2S is comparable across sampling rates only for white
#: noise; webcam gaze error also changes over tens of milliseconds (drift of the iris estimate, the video codec's
#: error shared by neighbouring frames), so its steps shrink with the interval: on rendered clips run.json's noise
#: read some 20 % lower at 60 fps than at 30 fps against the same error's spread (README, "What 60 frames a
#: second buys").
REFERENCE_INTERVAL_S = 1.0 / 30.0


def reference_lag(sample_interval_s: float) -> int:
    """Samples between the two ends of a step of :data:`REFERENCE_INTERVAL_S`: the nearest whole number of sample
    intervals, at least one (1 at 30 fps and below, 2 at 50-60 fps, 4 at 120 fps)."""
    return _lag_of(sample_interval_s, REFERENCE_INTERVAL_S)


def _lag_of(sample_interval_s: float, span_s: float) -> int:
    """The nearest whole number of sample intervals in ``span_s``, at least one (one where either is unusable)."""
    dt, span_s = float(sample_interval_s), float(span_s)
    if not (np.isfinite(dt) and dt > 0 and np.isfinite(span_s) and span_s > 0):
        return 1
    return max(1, int(np.floor(span_s / dt + 0.5)))


def samples_per_look(sample_interval_s: float, noise_rms_s2s_1sample_deg: float, noise_rms_s2s_33ms_deg: float) -> float:
    """How many consecutive samples make one independent look at the error, at this sample interval.

    ``(33 ms figure / per-sample figure)^2``, the growth of the squared step from one sample interval to the
    :data:`REFERENCE_INTERVAL_S` step, within ``[1, L]`` (``L =`` :func:`reference_lag`). Exact at both ends: for
    white noise steps of any length are alike (1: every sample a new look, as a lab tracker's); for an error that
    changes over tens of milliseconds like a random walk, the squared step grows with its length (``L``: one new
    look per 33 ms step, as at 30 Hz); between, it interpolates. 1 at 30 Hz and below whatever the noise. The rules
    that count samples as evidence or as draws of the noise - the merge test of two means, the fewest samples of a
    fixation, the I-DT threshold's growth with the window - count looks, so they ask the same of the same eyes at
    any rate. Both figures are the robust ones over all valid steps (:func:`robust_rms_s2s_deg`).
    """
    lag = reference_lag(sample_interval_s)
    n1, n33 = float(noise_rms_s2s_1sample_deg), float(noise_rms_s2s_33ms_deg)
    if lag == 1 or not (np.isfinite(n1) and np.isfinite(n33) and n33 > 0):
        return 1.0
    if n1 <= 0:
        return float(lag)
    return float(np.clip((n33 / n1) ** 2, 1.0, lag))


def s2s_distances_deg(yaw_deg, pitch_deg, ok=None, lag: int = 1, max_step_deg: float | None = None) -> np.ndarray:
    """Angular distances between samples ``lag`` apart (consecutive samples by default), in degrees.

    Parameters
    ----------
    yaw_deg, pitch_deg : array_like, shape (n,)
        Gaze angles in degrees (NaN where missing).
    ok : array_like of bool, shape (n,), optional
        Samples to use; a step counts only when both its samples are ok.
    lag : int, default 1
        Samples between the two ends of a step (:func:`reference_lag` gives the one of a 33 ms step).
    max_step_deg : float, optional
        Leave out the steps over which one sample-to-sample distance exceeds this (or is missing): steps
        across a saccade, where a fixation cannot hold such a distance. ``inf`` leaves out only the steps over
        a missing sample (NaN angles).

    Returns
    -------
    numpy.ndarray, shape (m,)
        Distances of the usable steps (small-angle: Euclidean in yaw/pitch).
    """
    x = np.asarray(yaw_deg, dtype=float)
    y = np.asarray(pitch_deg, dtype=float)
    lag = max(1, int(lag))
    if len(x) <= lag:
        return np.zeros(0)
    d = np.hypot(x[lag:] - x[:-lag], y[lag:] - y[:-lag])
    keep = np.isfinite(d)
    if ok is not None:
        ok = np.asarray(ok, dtype=bool)
        keep &= ok[lag:] & ok[:-lag]
    if max_step_deg is not None and not np.isnan(max_step_deg) and max_step_deg > 0 and lag > 1:
        one = np.hypot(np.diff(x), np.diff(y))
        jump = np.concatenate([[0], np.cumsum(~(one <= float(max_step_deg)))])
        keep &= (jump[lag:] - jump[:-lag]) == 0
    return d[keep]


def rms_s2s_deg(yaw_deg, pitch_deg, ok=None, lag: int = 1, max_step_deg: float | None = None) -> float:
    """RMS of sample-to-sample distances (Holmqvist et al. 2012; of steps ``lag`` samples long; ``max_step_deg``
    as in :func:`s2s_distances_deg`), in degrees; NaN if no step."""
    d = s2s_distances_deg(yaw_deg, pitch_deg, ok, lag, max_step_deg)
    return float(np.sqrt(np.mean(d * d))) if len(d) else float("nan")


def robust_rms_s2s_deg(yaw_deg, pitch_deg, ok=None, lag: int = 1, max_step_deg: float | None = None) -> float:
    """RMS-S2S estimated from the median step (of steps ``lag`` samples long; ``max_step_deg`` as in
    :func:`s2s_distances_deg`), in degrees; NaN if no step.

    ``median(step) * 2 / sqrt(4 ln 2)`` equals the RMS-S2S for white Gaussian
    noise and is barely moved by saccades, which are a minority of steps.
    """
    d = s2s_distances_deg(yaw_deg, pitch_deg, ok, lag, max_step_deg)
    return float(np.median(d) * RAYLEIGH_RMS_PER_MEDIAN) if len(d) else float("nan")


def median_sd(v) -> float:
    """Median-based SD of a velocity component, ``sqrt(median(v^2) - median(v)^2)``.

    Engbert & Kliegl (2003), "Microsaccades uncover the orientation of covert
    attention", Vision Research 43(9), 1035-1045, eq. 2.
    """
    v = np.asarray(v, dtype=float)
    v = v[np.isfinite(v)]
    if not len(v):
        return float("nan")
    return float(np.sqrt(max(np.median(v * v) - np.median(v) ** 2, 0.0)))


#: The I-DT reads the wander (:func:`wander_rms_deg`) only at sample intervals longer than this (below 100 Hz:
#: cameras). At a lab tracker's rate the 60 ms steps hold the eye's own fixational movement, which the threshold's
#: terms for many samples and the coders already count as fixation; read there it lowered the count on the Lund
#: trials at 500 Hz (0.979 -> 0.955 of the coders') and with it issue 4's lab reference (end-to-end r 0.849 ->
#: 0.832). The same 10 ms bound as the edge step's by speed (``edge_velocity_window_ms``).
WANDER_MIN_INTERVAL_S = 0.010


def span_lag(sample_interval_s: float, span_ms: float) -> int:
    """Samples between the two ends of a step spanning ``span_ms``: the nearest whole number of sample intervals,
    at least one (2 for 60 ms at 30 fps, 4 at 60 fps, 30 at 500 Hz)."""
    return _lag_of(sample_interval_s, float(span_ms) / 1000.0)


def wander_rms_deg(yaw_deg, pitch_deg, ok=None, lag: int = 1, max_step_deg: float | None = None) -> float:
    """The robust RMS-S2S (:func:`robust_rms_s2s_deg`) of steps ``lag`` samples long, in degrees; NaN if no step.

    For white noise it equals the per-sample figure at any ``lag``. For an error that changes slowly (a webcam
    gaze's: lag-1 autocorrelation 0.6-0.9) the per-sample steps are short and understate how far the gaze wanders
    within a fixation; steps as long as the I-DT duration threshold's window measure the wander that window sees
    (an AR(1) error of stationary per-axis SD ``s`` and lag-1 correlation ``rho`` gives ``2 s sqrt(1 - rho^lag)``,
    the white-noise figure ``2 s`` once ``rho^lag`` is small). The I-DT threshold adapts to it
    (:mod:`aspectus.events.detect.idt`). Steps over a sample-to-sample step longer than ``max_step_deg`` (the I-DT
    passes its threshold before the wander: no fixation holds such a step) are left out, and the median
    leaves out most of the rest of those that straddle a saccade while ``lag`` stays well below a fixation's
    length.
    """
    return robust_rms_s2s_deg(yaw_deg, pitch_deg, ok, lag, max_step_deg)


#: The largest lag-1 correlation :func:`step_correlation` reports: near 1 the growth of the steps from one sample
#: to two cannot tell a slow error from a drift, and the stationary SD an AR(1) reading implies
#: (``1 / sqrt(1 - rho)`` times the white-noise figure) grows without bound. A bound of this module, not a
#: measurement; webcam gaze on rendered clips reads 0.6-0.9.
MAX_STEP_CORRELATION = 0.95


def step_correlation(noise_rms_s2s_1sample_deg: float, noise_rms_s2s_2sample_deg: float) -> float:
    """The error's lag-1 autocorrelation as an AR(1) error's, read off its RMS-S2S over steps of one and of two
    samples: the squared step of ``k`` samples is ``4 s^2 (1 - rho^k)`` (per-axis stationary SD ``s``), so
    ``(r2 / r1)^2 = 1 + rho``. Within ``[0,`` :data:`MAX_STEP_CORRELATION` ``]``; 0 (white) where either figure is
    unusable. Both figures should be read alike over the same stretches (e.g. :func:`rms_s2s_deg` at ``lag`` 1
    and 2 within fixations).
    """
    r1, r2 = float(noise_rms_s2s_1sample_deg), float(noise_rms_s2s_2sample_deg)
    if not (np.isfinite(r1) and np.isfinite(r2) and r1 > 0):
        return 0.0
    return float(np.clip((r2 / r1) ** 2 - 1.0, 0.0, MAX_STEP_CORRELATION))


def mean_variance_factor(rho: float, n: float) -> float:
    """How many times the white-noise figure ``s^2 / n`` the variance of the mean of ``n`` consecutive samples of an
    AR(1) error is (stationary SD ``s``, lag-1 correlation ``rho``, so lag-``k`` correlation ``rho^k``):
    ``1 + 2 sum_{k=1}^{n-1} (1 - k / n) rho^k`` (n Var(mean) = sum over |h| < n of (1 - |h| / n) gamma(h):
    Brockwell & Davis 1991, Time Series: Theory and Methods, Theorem 7.1.1 - from memory). 1 for white noise
    (``rho = 0``) or a single sample; ``n`` is rounded to whole samples, at least one.
    """
    m = max(int(round(float(n))), 1)
    r = float(rho)
    if m == 1 or not np.isfinite(r) or r == 0.0:
        return 1.0
    k = np.arange(1, m)
    return float(1.0 + 2.0 * np.sum((1.0 - k / m) * r ** k))


#: For white noise of per-axis SD ``s`` the RMS-S2S is ``2 s`` (a step's squared length has expectation
#: ``2 s^2`` per axis, two axes) and the SD of the samples about their mean, ``sqrt(sd_yaw^2 + sd_pitch^2)``, is
#: ``sqrt(2) s``: SD = RMS-S2S / sqrt(2) (Holmqvist, Nystrom & Mulvey 2012 report precision both ways; the ratio
#: follows from the definitions). A filter lowers the two by different amounts - a k-sample moving average of
#: white noise divides the RMS-S2S by k and the SD by sqrt(k) - and an error that changes slowly (webcam gaze: lag-1
#: autocorrelation 0.6-0.9) reads a higher SD than its RMS-S2S / sqrt(2).
SD_PER_RMS_S2S_WHITE = 1.0 / np.sqrt(2.0)


def fixation_sd_deg(yaw_deg, pitch_deg, group) -> float:
    """Precision as the SD of samples about their fixation's mean, pooled over fixations, in degrees.

    ``sqrt(sum over fixations of the squared distances of their samples from the fixation's mean / sum over
    fixations of (n - 1))``: the pooled per-axis variances (n - 1 per fixation: the fixations' own means cost white
    noise no bias; an error correlated from sample to sample loses more to them, :func:`mean_variance_factor`),
    summed over yaw and pitch - ``sqrt(sd_yaw^2 + sd_pitch^2)``, the 2-D SD of Holmqvist, Nystrom & Mulvey
    (2012). For white noise it is the RMS-S2S / sqrt(2) (:data:`SD_PER_RMS_S2S_WHITE`); it measures the slow
    wander within a fixation that a filter leaves, which the sample-to-sample figure barely sees.

    Parameters
    ----------
    yaw_deg, pitch_deg : array_like, shape (n,)
        Gaze angles in degrees; samples with either missing (NaN) are left out.
    group : array_like of int, shape (n,)
        The fixation each sample belongs to (any integer id, >= 0); negative for samples outside fixations.

    Returns
    -------
    float
        The SD in degrees; NaN where no fixation holds two usable samples.
    """
    x = np.asarray(yaw_deg, dtype=float)
    y = np.asarray(pitch_deg, dtype=float)
    g = np.asarray(group)
    keep = (g >= 0) & np.isfinite(x) & np.isfinite(y)
    if keep.sum() < 2:
        return float("nan")
    _, gid = np.unique(g[keep], return_inverse=True)
    x, y = x[keep], y[keep]
    n = np.bincount(gid).astype(float)
    ss = 0.0
    for v in (x, y):
        mean = np.bincount(gid, weights=v) / n
        ss += float(np.sum((v - mean[gid]) ** 2))
    dof = float(np.sum(n - 1.0))
    return float(np.sqrt(ss / dof)) if dof > 0 else float("nan")
