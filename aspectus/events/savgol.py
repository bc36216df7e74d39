"""Savitzky-Golay smoothing (Savitzky & Golay 1964) without importing scipy.signal.

``scipy.signal`` imports ``scipy.stats`` and much else: some 0.7-0.9 s of CPU
at every start of a process (bench/bench_cpu.py), for one filter. This is the
same computation as ``scipy.signal.savgol_filter(x, window_length, polyorder)``
with its default ``mode="interp"`` (the coefficients from the same
least-squares solve, the same convolution, the edges from a polynomial fitted
to the first and last windows); tests/events/test_savgol.py compares the two.
"""
from __future__ import annotations

import numpy as np


def savgol_coeffs(window_length: int, polyorder: int) -> np.ndarray:
    """Convolution coefficients of the smoothing (zeroth-derivative) filter, centred (odd or even length)."""
    from scipy.linalg import lstsq

    if polyorder >= window_length:
        raise ValueError("polyorder must be less than window_length")
    halflen, rem = divmod(window_length, 2)
    pos = halflen if rem else halflen - 0.5
    x = np.arange(-pos, window_length - pos, dtype=np.float64)[::-1]
    A = x ** np.arange(polyorder + 1, dtype=np.float64).reshape(-1, 1)
    y = np.zeros(polyorder + 1)
    y[0] = 1.0
    return lstsq(A, y, cond=np.finfo(np.float64).eps * max(A.shape))[0]


def _polyfit(x: np.ndarray, y: np.ndarray, deg: int) -> np.ndarray:
    """Least-squares polynomial coefficients, highest power first (columns scaled, as numpy's polyfit)."""
    from scipy.linalg import lstsq

    lhs = x[:, None] ** np.arange(deg + 1, dtype=x.dtype)[::-1][None, :]
    scale = np.sqrt(np.sum(lhs * lhs, axis=0))
    lhs /= scale
    c = lstsq(lhs, y, cond=x.shape[0] * np.finfo(x.dtype).eps)[0]
    return c / scale


def _fit_edge(x: np.ndarray, start: int, stop: int, i0: int, i1: int, polyorder: int, y: np.ndarray) -> None:
    """``y[i0:i1]`` from the polynomial fitted to ``x[start:stop]``."""
    c = _polyfit(np.arange(0, stop - start, dtype=x.dtype), x[start:stop], polyorder)
    i = np.arange(i0 - start, i1 - start, dtype=c.dtype)
    v = np.zeros_like(i)
    for cj in c:  # Horner's scheme, as scipy evaluates it
        v = v * i + cj
    y[i0:i1] = v


def savgol_filter(x, window_length: int, polyorder: int, *, mode: str = "interp") -> np.ndarray:
    """Savitzky-Golay smoothing of a 1-d series, ends fitted by a polynomial (``mode="interp"``, the only one)."""
    from scipy.ndimage import convolve1d

    if mode != "interp":
        raise ValueError(f"only mode='interp' is implemented, not {mode!r}")
    x = np.asarray(x)
    if x.dtype not in (np.float64, np.float32):
        x = x.astype(np.float64)
    if x.ndim != 1:
        raise ValueError("savgol_filter takes a 1-d series")
    window_length, polyorder = int(window_length), int(polyorder)
    if window_length > len(x):
        raise ValueError("window_length must not exceed the length of the series")
    y = convolve1d(x, savgol_coeffs(window_length, polyorder), mode="constant")
    half, n = window_length // 2, len(x)
    _fit_edge(x, 0, window_length, 0, half, polyorder, y)
    _fit_edge(x, n - window_length, n, n - half, n, polyorder, y)
    return y
