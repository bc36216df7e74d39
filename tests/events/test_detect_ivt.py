"""I-VT with data-driven thresholds (Nystrom & Holmqvist 2010; Engbert & Kliegl 2003)."""
from __future__ import annotations

import numpy as np
import pytest
from _signals import step_signal

from aspectus.events.cleanup import clean_samples
from aspectus.events.detect import detect_ivt
from aspectus.events.detect.ivt import nh2010_thresholds, velocity_deg_s
from aspectus.errors import ParameterError


def _pairs(c):
    return list(zip(c.starts.tolist(), c.ends.tolist()))


@pytest.mark.parametrize("method", ["nh2010", "ek2003"])
def test_500hz_fixations_lose_only_the_samples_beside_each_jump(method):
    # an instantaneous jump makes the 11-sample (20 ms) derivative window fast on the 5 samples each side of it
    df, truth = step_signal(rate_hz=500.0)
    cl = clean_samples(df)
    c = detect_ivt(cl.t_s, cl.yaw_deg, cl.pitch_deg, cl.usable, method=method)
    expect = [(a + (5 if k else 0), b - (5 if k < len(truth) - 1 else 0)) for k, (a, b, _, _) in enumerate(truth)]
    assert _pairs(c) == expect


def test_30hz_ek2003_finds_every_fixation():
    # at 30 Hz the central difference is fast on the sample each side of a jump; the very first sample's
    # one-sided derivative amplifies noise and may cross the threshold, so the first onset may be 0 or 1
    df, truth = step_signal(rate_hz=30.0)
    cl = clean_samples(df)
    c = detect_ivt(cl.t_s, cl.yaw_deg, cl.pitch_deg, cl.usable, method="ek2003")
    expect = [(a + (1 if k else 0), b - (1 if k < len(truth) - 1 else 0)) for k, (a, b, _, _) in enumerate(truth)]
    got = _pairs(c)
    assert got[1:] == expect[1:]
    assert got[0][1] == expect[0][1] and got[0][0] in (0, 1)


def test_nh2010_iteration_converges_on_noise_plus_saccades():
    rng = np.random.default_rng(0)
    v = np.abs(rng.normal(0, 5.0, 5000))
    v[::100] = 300.0  # saccade peaks
    pt, onset = nh2010_thresholds(v)
    below = v[v < pt]
    assert pt == pytest.approx(below.mean() + 6 * below.std(), abs=1.0)
    assert onset == pytest.approx(below.mean() + 3 * below.std(), abs=1.0)
    assert 20 < pt < 60


def test_velocity_of_a_ramp():
    t = np.arange(50) / 100.0
    vx, vy = velocity_deg_s(t, 20.0 * t, -10.0 * t, np.ones(50, bool), window_ms=50.0)
    np.testing.assert_allclose(vx, 20.0, atol=1e-9)
    np.testing.assert_allclose(vy, -10.0, atol=1e-9)
    ok = np.ones(50, bool)
    ok[20] = False
    vx, _ = velocity_deg_s(t, 20.0 * t, -10.0 * t, ok, window_ms=50.0)
    assert np.isnan(vx[18:23]).all() and np.isfinite(vx[:17]).all()


def test_unknown_method():
    t = np.arange(10) / 30.0
    with pytest.raises(ParameterError, match="I-VT method"):
        detect_ivt(t, t, t, np.ones(10, bool), method="fixed")


@pytest.mark.parametrize("window", [3, 5, 11, 21])
def test_numpy_savgol_derivative_matches_scipy(window):
    # scipy.signal.savgol_filter as the reference implementation of Savitzky & Golay (1964)
    from scipy.signal import savgol_filter

    from aspectus.events.detect.ivt import savgol_derivative

    v = np.random.default_rng(window).normal(size=300).cumsum()
    ref = savgol_filter(v, window, 2, deriv=1, delta=0.002, mode="interp")
    np.testing.assert_allclose(savgol_derivative(v, window, 0.002), ref, rtol=1e-9, atol=1e-6)
