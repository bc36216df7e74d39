"""Clean-up: gap filling, blinks, data loss, smoothing, noise estimate."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from aspectus.events.cleanup import clean_samples, steffen_interpolate
from aspectus.events.detect.noise import median_sd, rms_s2s_deg, robust_rms_s2s_deg
from aspectus.errors import AspectusInputError, ParameterError


def _samples(n=60, rate=30.0, invalid=(), blink=()):
    t = np.arange(n) / rate
    yaw = np.linspace(0.0, 6.0, n)
    pitch = np.linspace(0.0, -3.0, n)
    valid = np.ones(n, bool)
    valid[list(invalid)] = False
    bl = np.zeros(n, bool)
    bl[list(blink)] = True
    valid[list(blink)] = False
    return pd.DataFrame({"t_s": t, "valid": valid, "yaw_deg": np.where(valid, yaw, np.nan),
                         "pitch_deg": np.where(valid, pitch, np.nan), "blink": bl}), yaw, pitch


def test_short_gap_filled_exactly_on_a_line():
    # two missing samples at 30 Hz = 66.7 ms <= 75 ms: filled; on a straight line the fill is exact
    df, yaw, pitch = _samples(invalid=(10, 11))
    cl = clean_samples(df)
    assert cl.filled[[10, 11]].all() and cl.filled.sum() == 2
    assert cl.usable.all() and not cl.loss.any()
    np.testing.assert_allclose(cl.yaw_deg[10:12], yaw[10:12], atol=1e-9)
    np.testing.assert_allclose(cl.pitch_deg[10:12], pitch[10:12], atol=1e-9)


def test_long_gap_is_loss_and_threshold_configurable():
    # three missing samples = 100 ms > 75 ms: data loss
    df, _, _ = _samples(invalid=(20, 21, 22))
    cl = clean_samples(df)
    assert cl.loss[[20, 21, 22]].all() and cl.loss.sum() == 3
    assert not cl.filled.any()
    assert np.isnan(cl.yaw_deg[20:23]).all()
    cl2 = clean_samples(df, gap_fill_max_ms=100.0)
    assert cl2.filled.sum() == 3 and not cl2.loss.any()
    cl0 = clean_samples(_samples(invalid=(5,))[0], gap_fill_max_ms=0.0)
    assert cl0.loss[5] and not cl0.filled.any()


def test_gaps_at_start_and_end_are_never_filled():
    df, _, _ = _samples(invalid=(0, 59))
    cl = clean_samples(df)
    assert cl.loss[0] and cl.loss[59] and not cl.filled.any()


def test_blink_run_includes_adjacent_invalid_samples_and_is_not_filled():
    # samples 30-31 invalid without blink flag, 32-35 flagged blink: one blink period 30-35
    df, _, _ = _samples(invalid=(30, 31), blink=(32, 33, 34, 35))
    cl = clean_samples(df)
    assert cl.blink[30:36].all() and cl.blink.sum() == 6
    assert not cl.loss.any() and not cl.filled.any()
    # a short blink (1 sample) is still a blink, not interpolated
    df1, _, _ = _samples(blink=(40,))
    cl1 = clean_samples(df1)
    assert cl1.blink[40] and not cl1.filled[40]


def test_steffen_is_monotone_and_hits_knots():
    # Steffen (1990): no overshoot between knots of monotone data
    x = np.array([0.0, 1.0, 2.0, 3.0, 4.0])
    y = np.array([0.0, 0.0, 1.0, 1.0, 1.0])
    xi = np.linspace(0, 4, 401)
    yi = steffen_interpolate(x, y, xi)
    assert np.all(np.diff(yi) >= -1e-12)
    assert yi.min() >= -1e-12 and yi.max() <= 1 + 1e-12
    np.testing.assert_allclose(steffen_interpolate(x, y, x), y, atol=1e-12)
    # linear data is reproduced exactly
    np.testing.assert_allclose(steffen_interpolate(x, 2 * x + 1, xi), 2 * xi + 1, atol=1e-12)


def test_smoothing_is_centred_zero_lag_and_stays_within_runs():
    n = 90
    t = np.arange(n) / 30.0
    rng = np.random.default_rng(3)
    yaw = 0.5 * t * 30 / 30 + rng.normal(0, 0.3, n)
    df = pd.DataFrame({"t_s": t, "valid": True, "yaw_deg": yaw, "pitch_deg": np.zeros(n)})
    for method in ("median", "savgol"):
        cl = clean_samples(df, smoothing=method, smoothing_window_ms=170.0)
        assert cl.smoothing["filter"] == method and cl.smoothing["lag_ms"] == 0.0
        assert cl.smoothing["window_samples"] == 5
        # a centred filter on a ramp plus noise: no lag, so the mean residual to the ramp stays ~0
        resid = cl.yaw_deg - 0.5 * t
        assert abs(np.mean(resid[5:-5])) < 0.1
        assert np.std(resid) < np.std(yaw - 0.5 * t)
    # a loss period is not bridged by the filter
    df.loc[40:45, "valid"] = False
    cl = clean_samples(df, smoothing="median")
    assert np.isnan(cl.yaw_deg[40:46]).all() and np.isfinite(cl.yaw_deg[:40]).all()


def test_noise_estimate_matches_white_noise():
    # per-axis SD s -> RMS-S2S = 2 s (steps have per-axis SD s*sqrt(2)); Holmqvist et al. (2012) definition
    rng = np.random.default_rng(0)
    s = 0.4
    n = 20000
    x, y = rng.normal(0, s, n), rng.normal(0, s, n)
    assert rms_s2s_deg(x, y) == pytest.approx(2 * s, rel=0.02)
    assert robust_rms_s2s_deg(x, y) == pytest.approx(2 * s, rel=0.03)
    # a few big saccade steps inflate the plain RMS but hardly the robust one
    x2 = x + np.repeat(np.arange(n // 100) * 5.0, 100)
    assert rms_s2s_deg(x2, y) > 1.15 * 2 * s  # sqrt(0.64 + 0.01 * 25) = 0.95 deg
    assert robust_rms_s2s_deg(x2, y) == pytest.approx(2 * s, rel=0.05)
    # median-based SD (Engbert & Kliegl 2003, eq. 2) of N(0, 1): sqrt(median(v^2)) = 0.674 (normal quartile)
    assert median_sd(rng.normal(0, 1, 40001)) == pytest.approx(0.674, abs=0.02)
    df = pd.DataFrame({"t_s": np.arange(n) / 30.0, "valid": True, "yaw_deg": x, "pitch_deg": y})
    assert clean_samples(df).noise_rms_s2s_deg == pytest.approx(2 * s, rel=0.03)


def test_all_invalid_and_single_sample():
    df = pd.DataFrame({"t_s": [0.0, 0.1, 0.2], "valid": False, "yaw_deg": np.nan, "pitch_deg": np.nan})
    cl = clean_samples(df)
    assert cl.loss.all() and not cl.usable.any() and np.isnan(cl.noise_rms_s2s_deg)
    one = clean_samples(pd.DataFrame({"t_s": [1.0], "valid": [True], "yaw_deg": [1.0], "pitch_deg": [2.0]}))
    assert one.n == 1 and one.usable.all() and np.isnan(one.noise_rms_s2s_deg)


@pytest.mark.parametrize("times, word, row", [([0.0, 0.1, 0.05, 0.2], "backwards", "row 3"),
                                               ([0.0, 0.1, 0.1, 0.2], "duplicate", "row 3")])
def test_bad_timestamps_name_the_row(times, word, row):
    df = pd.DataFrame({"t_s": times, "valid": True, "yaw_deg": 0.0, "pitch_deg": 0.0})
    with pytest.raises(AspectusInputError) as err:
        clean_samples(df, source="p01_s01_samples.csv")
    assert word in str(err.value) and row in str(err.value) and "p01_s01_samples.csv" in str(err.value)


def test_bad_parameters():
    df, _, _ = _samples()
    with pytest.raises(ParameterError):
        clean_samples(df, smoothing="wavelet")
    with pytest.raises(ParameterError):
        clean_samples(df, gap_fill_max_ms=-1)
    with pytest.raises(AspectusInputError, match="missing column"):
        clean_samples(df.drop(columns=["pitch_deg"]))
