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

The adaptive threshold accounts for the window's sample count. The
extremes of noise grow with the number of samples: the expected range of
``m`` independent normal values is ``d2(m)`` SDs (Tippett 1925, Biometrika
17; the control-chart constant d2 - 1.13 for 2 samples, 3.08 for 10, 5.02
for 100, 6.07 for 500), and for white noise of per-axis SD ``s`` the
RMS-S2S is ``2 s``, so the noise alone gives a window of ``m`` samples an
expected dispersion ``d2(m) x RMS-S2S``. A threshold of a fixed multiple of
the noise is then rarely reached by a 60 ms window of 2 samples (30 Hz) but
usually by one of 60 samples (1000 Hz): at a lab tracker's rate a fixation
could hardly start and was cut into fragments (x1.2 fixations, -220 ms at
500 Hz, 0.3 deg noise). The threshold for a window of ``m`` samples is
therefore ``max(min_dispersion_deg, noise_factor x RMS-S2S,
noise_range_factor x d2(m0) x RMS-S2S, d2(m) x RMS-S2S)`` with ``m0`` the
sample count of the duration-threshold window: at webcam rates the first
two decide as before (a fixation of 15 samples, 500 ms at 30 Hz, reaches
d2 = 3.5); at a lab tracker's rate the third lets a fixation start and the
last lets it grow as far as the noise's own expected spread. What noise
alone still cuts lies side by side at the same place, and the merge step
joins it (:mod:`aspectus.events.detect.postprocess`).

Frame rates above 30 Hz with noise that is not white. Webcam gaze error
changes partly over tens of milliseconds, so per sample its RMS-S2S reads
lower at higher rates (some 20 % at 60 fps) although the eyes and the error's
spread are the same; a threshold of a multiple of it shrank with the rate and
the drift split fixations (on a simulated path with such an error 1.85 times
the 30 Hz count at 60 Hz; bench/rate_independence.py). So ``noise_rms_s2s_deg``
is the noise over 33 ms steps (:func:`aspectus.events.detect.noise.reference_lag`;
the RMS-S2S itself at 30 Hz and below, where nothing changes), while the d2
terms, which model independent samples, read the per-sample figure
(``noise_rms_s2s_1sample_deg``). One more term keeps what finer sampling
shows of the same error: over a window of ``m`` samples the noise reaches
``g = d2(m) / d2(m_ref)`` times as far as over the ``m_ref`` samples a 30 Hz
camera takes in the same time, so the threshold is at least ``noise_factor x
RMS-S2S x sqrt(1 + (g^2 - 1) w)``, with ``w`` the share of the noise that is
not white: ``(looks - 1) / (L - 1)``, ``looks`` from
:func:`aspectus.events.detect.noise.samples_per_look` and ``L`` the samples
of a 33 ms step (0 for white noise, whose growth the d2 terms already hold; 1
for an error that changes like a random walk within 33 ms).

The noise in the ``noise_factor x RMS-S2S`` terms (the first and the last)
is the larger of that figure and the same figure read over steps as long
as the duration threshold (60 ms: 2 samples at 30 Hz, 4 at 60 Hz), measured
here on the clip's own samples
(:func:`aspectus.events.detect.noise.wander_rms_deg`) below 100 Hz
(:data:`aspectus.events.detect.noise.WANDER_MIN_INTERVAL_S`).
A webcam gaze's error is mostly slow (lag-1 autocorrelation 0.6-0.9): its
per-sample steps are short while the gaze wanders further within a
fixation, so a threshold set from them alone was too tight and split
fixations - the more so the better a gaze estimate removed the fast part
of its error. For white noise both readings are the same. Measured on the
Lund trials at 30 Hz with AR(1) noise (rho 0.7-0.9) and on rendered
webcam clips against the coders (docs/notes/lund-30hz-limits.md, "Noise
that wanders").
"""
from __future__ import annotations

import numpy as np

from aspectus.errors import ParameterError
from aspectus.events.detect.noise import (WANDER_MIN_INTERVAL_S, reference_lag, samples_per_look, span_lag,
                                          wander_rms_deg)
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


_D2_TABLE = np.zeros(2)  # d2(0) (unused) and d2(1) = 0; grown on demand


def expected_range_sd(m) -> np.ndarray:
    """Expected range of ``m`` independent standard normal values, ``d2(m)`` (Tippett 1925).

    ``d2(m) = integral of 1 - Phi(x)^m - (1 - Phi(x))^m dx`` over the real
    line, by numerical quadrature; ``d2(1) = 0``, ``d2(2) = 2 / sqrt(pi)``.
    Vectorised over ``m``; the table of values is kept.
    """
    global _D2_TABLE
    from scipy.special import log_ndtr

    m = np.maximum(np.asarray(m, dtype=np.int64), 1)
    top = int(m.max()) if m.size else 1
    if top >= len(_D2_TABLE):
        x = np.linspace(-12.0, 12.0, 4801)
        lp, lq = log_ndtr(x), log_ndtr(-x)
        new = np.arange(len(_D2_TABLE), max(top + 1, 2 * len(_D2_TABLE)), dtype=float)
        parts = []
        for b in range(0, len(new), 256):
            ks = new[b:b + 256, None]
            f = 1.0 - np.exp(ks * lp[None, :]) - np.exp(ks * lq[None, :])
            parts.append(np.trapz(f, x, axis=1))
        _D2_TABLE = np.concatenate([_D2_TABLE, *parts])
    return _D2_TABLE[m]


def detect_idt(t_s, yaw_deg, pitch_deg, usable, *, dispersion_deg: float | None = None,
               noise_rms_s2s_deg: float | None = None, noise_factor: float = 3.5,
               min_dispersion_deg: float = 1.5, min_duration_ms: float = 60.0,
               noise_range_factor: float = 1.2, noise_rms_s2s_1sample_deg: float | None = None) -> Candidates:
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
        noise_factor * max(noise_rms_s2s_deg, wander))``, the wander the
        same figure read over steps of ``min_duration_ms`` on these samples
        (module docstring; ``info["noise_wander_deg"]``).
    noise_rms_s2s_deg : float, optional
        The clip's RMS-S2S noise in degrees (needed when ``dispersion_deg`` is
        None; see :mod:`aspectus.events.detect.noise`), read over 33 ms steps
        by :func:`aspectus.events.analysis.run_analysis` (module docstring).
    noise_rms_s2s_1sample_deg : float, optional
        The same per sample, for the terms that count samples (the expected
        range of ``m`` independent samples); defaults to ``noise_rms_s2s_deg``.
    noise_factor : float, default 3.5
        Adaptive threshold in units of RMS-S2S.
    min_dispersion_deg : float, default 1.5
        Floor of the adaptive threshold, degrees.
    min_duration_ms : float, default 60
        Duration threshold: the initial window covers at least this many ms.
    noise_range_factor : float, default 1.2
        Adaptive threshold at least this many times the dispersion the noise
        alone is expected to reach over the duration-threshold window's
        samples (module docstring); 0 ignores the sample count.

    Returns
    -------
    Candidates
        Fixation candidates as index ranges, plus ``info["dispersion_deg"]``
        (the threshold of the duration-threshold window) and the rule;
        ``threshold_of_samples`` gives the threshold for any window length and
        ``noise_dispersion_of_samples`` the dispersion the noise alone is
        expected to reach over it.
    """
    t = np.asarray(t_s, dtype=float)
    x = np.asarray(yaw_deg, dtype=float)
    y = np.asarray(pitch_deg, dtype=float)
    ok = np.asarray(usable, dtype=bool) & np.isfinite(x) & np.isfinite(y)
    n = len(t)
    if not (np.isfinite(noise_range_factor) and noise_range_factor >= 0):
        raise ParameterError(f"I-DT noise_range_factor must be >= 0, got {noise_range_factor!r}")
    noise = noise1 = 0.0
    if dispersion_deg is None:
        noise = noise_rms_s2s_deg if noise_rms_s2s_deg is not None and np.isfinite(noise_rms_s2s_deg) else 0.0
        noise1 = (noise_rms_s2s_1sample_deg if noise_rms_s2s_1sample_deg is not None
                  and np.isfinite(noise_rms_s2s_1sample_deg) else noise)
        thr = max(float(min_dispersion_deg), float(noise_factor) * float(noise))
        k_range = float(noise_range_factor)
    else:
        thr = float(dispersion_deg)
        k_range = 0.0
    if not (np.isfinite(thr) and thr > 0):
        raise ParameterError(f"I-DT dispersion threshold must be > 0 deg, got {thr!r}")
    if not (np.isfinite(min_duration_ms) and min_duration_ms > 0):
        raise ParameterError(f"I-DT min_duration_ms must be > 0 ms, got {min_duration_ms!r}")
    wander = float("nan")
    noise_main = float(noise)  # the noise of the noise_factor terms: the larger of the 33 ms figure and the wander
    if dispersion_deg is None and noise > 0 and n > 1:
        # the wander over the duration threshold's span (module docstring)
        dt_w = float(np.median(np.diff(t)))
        span = span_lag(dt_w, float(min_duration_ms))
        wander = (wander_rms_deg(x, y, ok, span, max_step_deg=thr) if span > 1 and dt_w > WANDER_MIN_INTERVAL_S
                  else float("nan"))
        if np.isfinite(wander) and wander > noise:
            noise_main = float(wander)
            thr = max(thr, float(noise_factor) * wander)
    base = thr
    noise, noise1 = float(noise), float(noise1)
    k_noise = float(noise_factor) if dispersion_deg is None else 0.0

    m0_box = [2]  # samples in the duration-threshold window (set below)
    dt0 = float(np.median(np.diff(t))) if n > 1 else 0.0
    lag = reference_lag(dt0)
    looks = samples_per_look(dt0, noise1, noise) if noise > 0 else 1.0

    def thr_of(m):
        """The threshold (deg) used for a window of ``m`` samples (module docstring)."""
        m = np.asarray(m)
        if k_range <= 0 or noise1 <= 0:
            return np.full(m.shape, base)
        first = max(base, k_range * float(expected_range_sd(m0_box[0])) * noise1)
        out = np.maximum(first, expected_range_sd(m) * noise1)
        if lag > 1 and looks > 1:
            # the threshold a 30 Hz camera would use over the same time, grown by how much further the noise
            # reaches over m samples than over the m_ref such a camera takes in that time (module docstring)
            m_ref = np.maximum(1 + np.floor((m - 1) / lag + 0.5).astype(np.int64), 2)
            g = np.maximum(expected_range_sd(m) / expected_range_sd(m_ref), 1.0)
            out = np.maximum(out, k_noise * noise_main * np.sqrt(1.0 + (g * g - 1.0) * (looks - 1.0) / (lag - 1.0)))
        return out

    def noise_disp_of(m):
        return expected_range_sd(np.asarray(m)) * noise1 if noise1 > 0 else np.full(np.shape(m), np.nan)

    info = {"dispersion_deg": thr, "min_duration_ms": float(min_duration_ms),
            "dispersion_rule": ("fixed" if dispersion_deg is not None else
                                f"max({float(min_dispersion_deg):g} deg, {float(noise_factor):g} x max(RMS-S2S, RMS-S2S over "
                                f"{float(min_duration_ms):g} ms steps), "
                                f"{k_range:g} x d2(samples in {float(min_duration_ms):g} ms) x RMS-S2S per sample, "
                                "d2(samples in the window) x RMS-S2S per sample, "
                                f"{float(noise_factor):g} x RMS-S2S x the growth of d2 from the samples a 30 Hz "
                                "camera takes in the window to its samples, as far as the noise is not white); "
                                "RMS-S2S over 33 ms steps"),
            "noise_rms_s2s_deg": noise if dispersion_deg is None else None,
            "noise_rms_s2s_1sample_deg": noise1 if dispersion_deg is None else None,
            "noise_wander_deg": wander if dispersion_deg is None else None}
    if n < 2 or not ok.any():
        return Candidates(np.zeros(0, np.int64), np.zeros(0, np.int64), info, thr_of, noise_disp_of)
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
    empty = Candidates(np.zeros(0, np.int64), np.zeros(0, np.int64), info, thr_of, noise_disp_of)
    cand = np.flatnonzero(ok & (e0 <= np.where(ok, run_end, -1)))
    if not len(cand):
        return empty
    disp = _range_table_query(x, cand, e0[cand]) + _range_table_query(y, cand, e0[cand])
    m0_box[0] = int(np.median(e0[cand] - cand))
    info["dispersion_deg"] = float(thr_of(m0_box[0]))
    good = np.zeros(n, dtype=bool)
    good[cand[disp <= thr_of(e0[cand] - cand)]] = True
    if not good.any():
        return empty
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
            over = d[e - i:] > thr_of(np.arange(e - i, hi - i) + 1)
            k = int(over.argmax())
            if over[k]:
                e = e + k
                break
            e = hi
            chunk *= 2
        starts.append(i)
        ends.append(e)
        i = e
    return Candidates(np.asarray(starts, dtype=np.int64), np.asarray(ends, dtype=np.int64), info, thr_of,
                      noise_disp_of)
