"""I2MC: identification by two-means clustering, for noisy and low-rate data.

Hessels, R. S., Niehorster, D. C., Kemner, C., & Hooge, I. T. C. (2017).
Noise-robust fixation detection in eye movement data: Identification by
two-means clustering (I2MC). Behavior Research Methods 49(5), 1802-1823.
doi:10.3758/s13428-016-0822-1.

Steps as in the paper:

1. Short gaps are filled by Steffen interpolation - in aspectus that is the
   clean-up step (:func:`aspectus.events.cleanup.clean_samples`), which runs first.
2. A window of ``window_ms`` (200 ms) moves over the signal in steps of
   ``step_ms`` (20 ms). In each window without missing samples, k-means with
   k = 2 splits the gaze positions into two clusters; every transition between
   clusters in time order gets the weight ``1 / (number of transitions in the
   window)``, so one clean saccade concentrates weight on one sample while
   noise spreads it thinly.
3. The same is done on versions of the window downsampled by the factors in
   ``downsamples`` (after a Chebyshev type I anti-alias filter of order 8);
   a transition's weight goes to the original samples of the downsampled
   sample before it. Factors that would leave fewer than
   ``min_window_samples`` samples in a window are skipped (at 30 Hz a 200 ms
   window has 6 samples, so only the full rate is used).
4. The clustering weight of a sample is its summed weight divided by the
   number of clusterings that contained it.
5. Samples with a weight below ``mean + cutoff_sd * SD`` of all weights are
   fixation samples; runs of them are fixation candidates. Each candidate's
   start and end are trimmed of samples farther from its median position
   than ``median + onoffset_mad * MAD`` of those distances.
6. Merging and the minimum duration are aspectus's shared post-processing
   (:mod:`aspectus.events.detect.postprocess`).

Vectorised: windows are batched (k-means runs on all windows at once with a
fixed number of Lloyd iterations, seeded with each window's first and last
sample). The anti-alias filter runs once on the whole signal (zero-phase)
instead of per window, with missing samples bridged linearly for the filter
only; windows touching missing samples are skipped, as in the paper.
"""
from __future__ import annotations

import numpy as np

from aspectus.errors import ParameterError
from aspectus.events.detect.runs import run_ids, true_runs
from aspectus.events.detect.types import Candidates


def _kmeans2(X: np.ndarray, Y: np.ndarray, iterations: int) -> np.ndarray:
    """Batched 2-means of each row of (X, Y); returns cluster membership (bool) per sample."""
    c0x, c0y = X[:, 0].copy(), Y[:, 0].copy()
    c1x, c1y = X[:, -1].copy(), Y[:, -1].copy()
    lab = None
    for _ in range(iterations):
        d0 = (X - c0x[:, None]) ** 2 + (Y - c0y[:, None]) ** 2
        d1 = (X - c1x[:, None]) ** 2 + (Y - c1y[:, None]) ** 2
        new = d1 < d0
        if lab is not None and np.array_equal(new, lab):
            break
        lab = new
        n1 = lab.sum(axis=1)
        n0 = lab.shape[1] - n1
        with np.errstate(invalid="ignore", divide="ignore"):
            c1x = np.where(n1 > 0, (X * lab).sum(axis=1) / n1, c1x)
            c1y = np.where(n1 > 0, (Y * lab).sum(axis=1) / n1, c1y)
            c0x = np.where(n0 > 0, (X * ~lab).sum(axis=1) / n0, c0x)
            c0y = np.where(n0 > 0, (Y * ~lab).sum(axis=1) / n0, c0y)
    return lab


def _antialias(v: np.ndarray, ok: np.ndarray, factor: int, order: int) -> np.ndarray:
    from scipy.signal import cheby1, sosfiltfilt

    idx = np.arange(len(v))
    vf = np.interp(idx, idx[ok], v[ok])
    sos = cheby1(order, 0.05, 0.8 / factor, output="sos")
    if len(vf) <= 3 * (2 * len(sos) + 1):
        return vf
    return sosfiltfilt(sos, vf)


def clustering_weights(t_s, yaw_deg, pitch_deg, usable, *, window_ms: float = 200.0, step_ms: float = 20.0,
                       downsamples: tuple[int, ...] = (2, 5, 10), min_window_samples: int = 4,
                       chebyshev_order: int = 8, kmeans_iterations: int = 10,
                       max_windows_per_batch: int = 20000) -> tuple[np.ndarray, dict]:
    """Per-sample two-means clustering weights of Hessels et al. (2017).

    Parameters
    ----------
    t_s, yaw_deg, pitch_deg, usable : array_like, shape (n,)
        Times (s), angles (deg), usable-sample mask.
    window_ms : float, default 200
        Moving window length in ms (at least ``min_window_samples`` samples).
    step_ms : float, default 20
        Window step in ms (at least one sample).
    downsamples : tuple of int, default (2, 5, 10)
        Downsampling factors clustered in addition to the full rate.
    min_window_samples : int, default 4
        Fewest samples a (downsampled) window must hold to be clustered.
    chebyshev_order : int, default 8
        Order of the Chebyshev type I anti-alias filter (0.05 dB ripple,
        cut-off 0.8 of the new Nyquist frequency).
    kmeans_iterations : int, default 10
        Lloyd iterations per window.

    Returns
    -------
    weights : ndarray, shape (n,)
        Mean clustering weight per sample; NaN where no window was clustered.
    info : dict
        Window and step in samples, the factors used.
    """
    t = np.asarray(t_s, dtype=float)
    x = np.asarray(yaw_deg, dtype=float)
    y = np.asarray(pitch_deg, dtype=float)
    ok = np.asarray(usable, dtype=bool) & np.isfinite(x) & np.isfinite(y)
    n = len(t)
    dt = float(np.median(np.diff(t))) if n > 1 else 0.0
    w = max(int(min_window_samples), int(round(window_ms / 1000.0 / dt)) if dt > 0 else 0)
    step = max(1, int(round(step_ms / 1000.0 / dt)) if dt > 0 else 1)
    factors = [1] + [int(f) for f in downsamples if int(f) > 1 and -(-w // int(f)) >= min_window_samples]
    info = {"window_samples": w, "step_samples": step, "downsample_factors": factors[1:]}
    total = np.zeros(n)
    count = np.zeros(n)
    if n < w or ok.sum() < w:
        return np.full(n, np.nan), info
    starts = np.arange(0, n - w + 1, step)
    if starts[-1] != n - w:
        starts = np.append(starts, n - w)
    cbad = np.concatenate([[0], np.cumsum(~ok)])
    starts = starts[(cbad[starts + w] - cbad[starts]) == 0]
    if not len(starts):
        return np.full(n, np.nan), info
    offs = np.arange(w)
    for f in factors:
        if f == 1:
            xs, ys = x, y
        else:
            xs, ys = _antialias(x, ok, f, chebyshev_order), _antialias(y, ok, f, chebyshev_order)
        sub = np.arange(0, w, f)
        m = len(sub)
        owner = offs // f  # downsampled sample that each original offset belongs to
        for b in range(0, len(starts), max_windows_per_batch):
            s = starts[b:b + max_windows_per_batch]
            X = xs[s[:, None] + sub[None, :]]
            Y = ys[s[:, None] + sub[None, :]]
            lab = _kmeans2(X, Y, kmeans_iterations)
            sw = lab[:, 1:] != lab[:, :-1]
            nsw = sw.sum(axis=1)
            with np.errstate(divide="ignore"):
                per = np.where(nsw > 0, 1.0 / np.maximum(nsw, 1), 0.0)
            wd = np.zeros((len(s), m))
            wd[:, :-1] = sw * per[:, None]
            full = wd[:, owner]
            pos = (s[:, None] + offs[None, :]).ravel()
            total += np.bincount(pos, weights=full.ravel(), minlength=n)
            count += np.bincount(pos, minlength=n)
    with np.errstate(invalid="ignore", divide="ignore"):
        weights = np.where(count > 0, total / np.maximum(count, 1), np.nan)
    return weights, info


def _trim_edges(t_s, x, y, starts, ends, k_mad: float) -> tuple[np.ndarray, np.ndarray]:
    """Trim each candidate's leading/trailing samples far from its median position (vectorised)."""
    import pandas as pd

    if not len(starts):
        return starts, ends
    n = len(x)
    d = np.zeros(n + 1, dtype=np.int64)
    np.add.at(d, starts, 1)
    np.add.at(d, ends, -1)
    member = np.cumsum(d[:-1]) > 0
    gid = run_ids(member)
    sel = np.flatnonzero(member)
    g = gid[sel]
    df = pd.DataFrame({"g": g, "x": x[sel], "y": y[sel]})
    med = df.groupby("g")[["x", "y"]].transform("median")
    dist = np.hypot(df["x"].to_numpy() - med["x"].to_numpy(), df["y"].to_numpy() - med["y"].to_numpy())
    df["d"] = dist
    md = df.groupby("g")["d"].transform("median").to_numpy()
    df["a"] = np.abs(dist - md)
    mad = df.groupby("g")["a"].transform("median").to_numpy()
    inside = dist <= md + k_mad * mad
    pos = pd.Series(sel[inside]).groupby(g[inside])
    first = pos.min()
    last = pos.max()
    new_s = np.asarray(starts).copy()
    new_e = np.asarray(starts).copy()  # empty unless some sample is inside
    new_s[first.index.to_numpy()] = first.to_numpy()
    new_e[last.index.to_numpy()] = last.to_numpy() + 1
    keep = new_e > new_s
    return new_s[keep], new_e[keep]


def detect_i2mc(t_s, yaw_deg, pitch_deg, usable, *, window_ms: float = 200.0, step_ms: float = 20.0,
                downsamples: tuple[int, ...] = (2, 5, 10), min_window_samples: int = 4,
                cutoff_sd: float = 2.0, onoffset_mad: float = 3.0, chebyshev_order: int = 8,
                kmeans_iterations: int = 10, noise_rms_s2s_deg: float | None = None,
                noise_rms_s2s_1sample_deg: float | None = None) -> Candidates:
    """Fixation candidates by I2MC (Hessels et al. 2017).

    Parameters
    ----------
    t_s, yaw_deg, pitch_deg, usable : array_like, shape (n,)
        Times (s), angles (deg), usable-sample mask (gaps already filled).
    window_ms, step_ms, downsamples, min_window_samples, chebyshev_order, kmeans_iterations
        See :func:`clustering_weights`.
    cutoff_sd : float, default 2.0
        lambda: samples with a clustering weight below ``mean + lambda * SD``
        of the weights are fixation samples.
    onoffset_mad : float, default 3.0
        Edge trimming: samples at a candidate's start or end farther from its
        median position than ``median + onoffset_mad * MAD`` of the distances
        are removed.
    noise_rms_s2s_deg, noise_rms_s2s_1sample_deg : float, optional
        Not needed: the cut-off adapts through the weight distribution.

    Returns
    -------
    Candidates
        With ``info["weight_cutoff"]`` and the window settings.
    """
    if not (np.isfinite(cutoff_sd) and cutoff_sd > 0):
        raise ParameterError(f"I2MC cutoff_sd must be > 0, got {cutoff_sd!r}")
    if not (np.isfinite(window_ms) and window_ms > 0 and np.isfinite(step_ms) and step_ms > 0):
        raise ParameterError("I2MC window_ms and step_ms must be > 0 ms")
    t = np.asarray(t_s, dtype=float)
    x = np.asarray(yaw_deg, dtype=float)
    y = np.asarray(pitch_deg, dtype=float)
    ok = np.asarray(usable, dtype=bool) & np.isfinite(x) & np.isfinite(y)
    weights, info = clustering_weights(t, x, y, ok, window_ms=window_ms, step_ms=step_ms, downsamples=downsamples,
                                       min_window_samples=min_window_samples, chebyshev_order=chebyshev_order,
                                       kmeans_iterations=kmeans_iterations)
    fin = np.isfinite(weights)
    if not fin.any():
        info["weight_cutoff"] = float("nan")
        return Candidates.empty(info)
    cutoff = float(np.mean(weights[fin]) + cutoff_sd * np.std(weights[fin]))
    info["weight_cutoff"] = cutoff
    fix = ok & fin & (np.where(fin, weights, np.inf) < cutoff)
    s, e = true_runs(fix)
    s, e = _trim_edges(t, x, y, s, e, onoffset_mad)
    return Candidates(s, e, info)
