"""The error of a fixation's mean position with a correlated error (aspectus.validation.pair._mean_error_sd).

The validation's Deming slopes weigh the two sides by the error variance of their fixation means. A mean of ``n``
samples of white noise has ``1 / n`` of its variance; an error that changes slowly (webcam gaze: lag-1
autocorrelation 0.6-0.9 on rendered clips) averages out over far fewer independent looks. The variance of the mean
of ``n`` consecutive samples of a stationary series with autocorrelations ``rho_k`` is
``s^2 / n * (1 + 2 sum_{k<n} (1 - k/n) rho_k)`` (Brockwell & Davis 1991, Time Series: Theory and Methods, Theorem
7.1.1 - from memory); for an AR(1) error ``rho_k = rho^k``. The checks: that formula against first principles
(two samples) and against simulated AR(1) series; the lag-1 correlation read off the noise over one- and two-sample
steps; the whole figure against the spread of simulated fixation means; and white noise giving the old
``RMS-S2S / 2 / sqrt(n)``.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from aspectus.events.detect.noise import MAX_STEP_CORRELATION, mean_variance_factor, rms_s2s_deg, step_correlation
from aspectus.validation.pair import _error_correlation, _mean_error_sd


def _ar1(rng, shape, rho, sd):
    """AR(1) series along the last axis, stationary from the first sample, per-sample SD ``sd``."""
    e = rng.normal(0.0, sd * np.sqrt(1.0 - rho ** 2), shape)
    x = np.empty(shape)
    x[..., 0] = rng.normal(0.0, sd, shape[:-1])
    for i in range(1, shape[-1]):
        x[..., i] = rho * x[..., i - 1] + e[..., i]
    return x


def test_variance_factor_of_two_samples_from_first_principles():
    # var((x1 + x2) / 2) = (s^2 + s^2 + 2 rho s^2) / 4 = s^2 / 2 * (1 + rho)
    for rho in (0.0, 0.3, 0.8):
        assert mean_variance_factor(rho, 2) == pytest.approx(1.0 + rho)
    assert mean_variance_factor(0.0, 12) == 1.0 and mean_variance_factor(0.9, 1) == 1.0


@pytest.mark.parametrize("rho,n", [(0.6, 8), (0.85, 12), (0.5, 150)])
def test_variance_factor_matches_simulated_ar1_means(rho, n):
    rng = np.random.default_rng(1)
    x = _ar1(rng, (20000, n), rho, 1.0)
    measured = float(np.var(x.mean(axis=1))) * n  # in units of s^2 / n
    # 20000 means: the variance is known to some 1 % (sqrt(2 / 20000))
    assert measured == pytest.approx(mean_variance_factor(rho, n), rel=0.04)


@pytest.mark.parametrize("rho", [0.0, 0.6, 0.85])
def test_step_correlation_reads_an_ar1_errors_lag1_correlation(rho):
    rng = np.random.default_rng(2)
    yaw, pitch = _ar1(rng, (2, 30000), rho, 0.7)
    r = step_correlation(rms_s2s_deg(yaw, pitch, lag=1), rms_s2s_deg(yaw, pitch, lag=2))
    assert r == pytest.approx(rho, abs=0.03)
    assert step_correlation(1.0, 3.0) == MAX_STEP_CORRELATION and step_correlation(float("nan"), 1.0) == 0.0


def _fixations(rho, *, n=10, count=1500, sd=0.8, seed=3):
    """Fixations of ``n`` samples at random places, a one-sample saccade between, the gaze error one AR(1) series
    throughout (it does not restart at a fixation). Returns the samples with their labels, the events table and
    the fixation means' error (count, 2)."""
    rng = np.random.default_rng(seed)
    per = n + 1
    total = count * per
    err = _ar1(rng, (2, total), rho, sd)
    where = rng.uniform(-15, 15, (count, 2))
    true = np.repeat(where, per, axis=0)
    lab = np.tile(np.r_[np.full(n, "fixation"), ["saccade"]], count)
    true[lab == "saccade"] = 0.5 * (true[lab == "saccade"] + np.roll(true, -per, axis=0)[lab == "saccade"])
    yaw, pitch = true[:, 0] + err[0], true[:, 1] + err[1]
    samples = pd.DataFrame({"t_s": np.arange(total) / 30.0, "yaw_deg": yaw, "pitch_deg": pitch})
    fix = lab == "fixation"
    idx = np.arange(total).reshape(count, per)[:, :n]
    means = np.stack([yaw[idx].mean(axis=1), pitch[idx].mean(axis=1)], axis=1)
    events = pd.DataFrame({"type": "fixation", "n_samples": np.full(count, n)})
    noise = rms_s2s_deg(yaw, pitch, fix)  # the quality figure: consecutive steps within fixations
    return samples, lab, events, noise, means - where


@pytest.mark.parametrize("rho", [0.6, 0.85])
def test_fixation_mean_error_follows_a_correlated_error(rho):
    samples, labels, events, noise, err = _fixations(rho)
    measured = float(np.std(err))  # per axis, pooled over both axes
    r = _error_correlation(samples, labels)
    assert r == pytest.approx(rho, abs=0.05)
    sd = _mean_error_sd(events, noise, r)
    assert sd == pytest.approx(measured, rel=0.15)
    # the white-noise figure understated it (some 2.9 times at 0.6, 6.5 times at 0.85 on this material)
    old = noise / 2.0 / np.sqrt(10)
    assert old < 0.5 * measured


def test_white_noise_gives_the_independent_samples_figure():
    samples, labels, events, noise, err = _fixations(0.0)
    r = _error_correlation(samples, labels)
    assert r < 0.05
    old = noise / 2.0 / np.sqrt(10)
    assert _mean_error_sd(events, noise, 0.0) == pytest.approx(old, rel=1e-12)
    assert _mean_error_sd(events, noise, r) == pytest.approx(old, rel=0.05)
    assert float(np.std(err)) == pytest.approx(old, rel=0.05)


@pytest.mark.parametrize("rho", [0.0, 0.6, 0.85])
def test_a_saccade_between_two_samples_is_not_read_as_correlation(rho):
    """At 30 Hz a saccade often falls between two samples: the detector's labels then hold two fixations side by
    side, with no other label between. A step across them is the saccade, not the error; counted, its jump weighs
    twice in the two-sample steps and once in the one-sample ones, and the correlation read 0.95 (the bound) on
    every such series, whatever the error's own. The steps count within one fixation event only, as the clip's
    precision features count them: with the true fixations as events the correlation reads the error's own;
    with the detector's it reads lower where the error is correlated (measured 0.52 for 0.6, 0.73 for 0.85: the
    detector splits a fixation where the error wanders, leaving out more of the long two-sample steps than of
    the one-sample ones), guarded at 0.15 below and not above."""
    from aspectus.events.analysis import run_analysis

    rng = np.random.default_rng(4)
    n, count = 10, 600
    err = _ar1(rng, (2, n * count), rho, 0.5)
    where = np.repeat(rng.uniform(-15, 15, (count, 2)), n, axis=0)
    samples = pd.DataFrame({"t_s": np.arange(n * count) / 30.0, "valid": True,
                            "yaw_deg": where[:, 0] + err[0], "pitch_deg": where[:, 1] + err[1]})
    res = run_analysis(samples)
    lab = res.labels
    # most fixations sit side by side in the labels (the material's point)
    ids = np.repeat(np.arange(count), n)
    assert ((lab[1:] == "fixation") & (lab[:-1] == "fixation") & (ids[1:] != ids[:-1])).sum() > 0.5 * count
    truth = pd.DataFrame({"type": "fixation", "onset_s": (np.arange(count) * n - 0.5) / 30.0,
                          "offset_s": (np.arange(count) * n + n - 0.5) / 30.0})
    assert _error_correlation(samples, np.full(n * count, "fixation", dtype=object), truth) == pytest.approx(
        rho, abs=0.04)
    assert rho - 0.15 <= _error_correlation(samples, lab, res.events) <= rho + 0.03
