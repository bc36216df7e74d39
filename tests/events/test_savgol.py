"""Savitzky-Golay smoothing without scipy.signal, and the detector's quantiles without scipy.stats.

Reference library: SciPy (``scipy.signal.savgol_filter`` with its default ``mode="interp"``,
``scipy.stats.norm.ppf`` and ``scipy.stats.chi2.ppf``). aspectus computes the same numbers without
importing those two subpackages, which cost some 0.8 s of CPU at every start of a process.
"""
from __future__ import annotations

import numpy as np
import pytest

from aspectus.events.savgol import savgol_filter


#: every valid (length, window, order): window <= length and order < window
VALID_FILTERS = [(n, w, p) for n in (5, 8, 31, 600) for w in (3, 4, 5, 9, 31) for p in (0, 1, 2, 3) if w <= n and p < w]


@pytest.mark.parametrize("n, window, polyorder", VALID_FILTERS)
def test_savgol_filter_equals_scipy_signal(n, window, polyorder):
    from scipy.signal import savgol_filter as scipy_savgol

    rng = np.random.default_rng(n * 100 + window * 10 + polyorder)
    x = np.cumsum(rng.normal(size=n)) * 10.0 + 50.0  # a random walk around 50 (deg or px)
    ours, ref = savgol_filter(x, window, polyorder), scipy_savgol(x, window, polyorder)
    # the same solves in the same order: equal to the last bit on this platform; 1e-9 allowed elsewhere
    np.testing.assert_allclose(ours, ref, rtol=0, atol=1e-9)
    if polyorder < window - 1:  # otherwise the fit passes through every point
        assert not np.allclose(ours, x)  # it smooths


def test_savgol_filter_keeps_a_quadratic_and_refuses_bad_windows():
    t = np.arange(40, dtype=float)
    q = 0.3 * t**2 - 2.0 * t + 1.0  # a quadratic is reproduced exactly by a 2nd-order fit (Savitzky & Golay 1964)
    np.testing.assert_allclose(savgol_filter(q, 7, 2), q, atol=1e-9)
    with pytest.raises(ValueError):
        savgol_filter(q[:5], 7, 2)
    with pytest.raises(ValueError):
        savgol_filter(q, 5, 5)


@pytest.mark.parametrize("alpha", [1e-6, 0.001, 0.01, 0.05, 0.2, 0.5])
def test_detector_quantiles_equal_scipy_stats(alpha):
    from scipy.special import gammaincinv
    from scipy.stats import chi2, norm

    from aspectus.events.detect.postprocess import _chi2_1_quantile

    q = 1 - alpha
    assert _chi2_1_quantile(q) == float(norm.ppf(0.5 + q / 2.0) ** 2)
    assert _chi2_1_quantile(q) == pytest.approx(float(chi2.ppf(q, 1)), rel=1e-9)
    # the limits of the edge test (postprocess.trim_edges) as computed there
    assert float(2.0 * gammaincinv(1.0, 1 - alpha)) == float(chi2.ppf(1 - alpha, 2))
    assert float(2.0 * gammaincinv(0.5, 1 - alpha)) == float(chi2.ppf(1 - alpha, 1))
