"""I2MC (Hessels et al. 2017) on constructed signals with known fixations."""
from __future__ import annotations

import numpy as np
import pytest
from _signals import step_signal

from aspectus.events.cleanup import clean_samples
from aspectus.events.detect import detect_i2mc
from aspectus.events.detect.i2mc import _kmeans2, clustering_weights
from aspectus.errors import ParameterError


def test_kmeans_splits_two_clusters():
    X = np.array([[0.0, 0.1, 0.0, 5.0, 5.1, 5.0], [1.0, 1.0, 1.1, 1.0, 1.0, 1.1]])
    Y = np.zeros_like(X)
    lab = _kmeans2(X, Y, 10)
    assert (lab[0] == np.array([0, 0, 0, 1, 1, 1], bool)).all()
    assert lab[1].sum() in (1, 2, 4, 5) or lab[1].sum() == 3  # noise: any split, no crash


@pytest.mark.parametrize("rate_hz", [30.0, 500.0])
def test_weight_peaks_at_the_jumps(rate_hz):
    df, truth = step_signal(rate_hz=rate_hz)
    cl = clean_samples(df)
    w, info = clustering_weights(cl.t_s, cl.yaw_deg, cl.pitch_deg, cl.usable)
    cutoff = np.nanmean(w) + 2 * np.nanstd(w)
    high = np.flatnonzero(w >= cutoff)
    jumps = np.array([a for a, _, _, _ in truth[1:]])
    # every high-weight sample lies within one downsampling block before a jump
    block = max([1] + info["downsample_factors"])
    assert all(((jumps - h) >= 0).any() and ((jumps - h)[(jumps - h) >= 0].min() <= block) for h in high)
    assert info["window_samples"] == max(4, round(0.2 * rate_hz))


@pytest.mark.parametrize("rate_hz, tol", [(30.0, 1), (500.0, 10)])
def test_fixations_found_within_a_block_of_truth(rate_hz, tol):
    # the transition weight sits on the (downsampled) sample before each jump, so a fixation may end up to
    # one block early (10 samples at 500 Hz with factor 10, 1 sample at 30 Hz) and start up to one sample late
    df, truth = step_signal(rate_hz=rate_hz)
    cl = clean_samples(df)
    c = detect_i2mc(cl.t_s, cl.yaw_deg, cl.pitch_deg, cl.usable)
    assert len(c) == len(truth)
    for (s, e), (a, b, _, _) in zip(zip(c.starts, c.ends), truth):
        assert 0 <= s - a <= 1
        assert 0 <= b - e <= tol


def test_windows_with_missing_samples_are_skipped():
    df, _ = step_signal(rate_hz=30.0)
    df.loc[30:33, "valid"] = False
    cl = clean_samples(df)
    w, _ = clustering_weights(cl.t_s, cl.yaw_deg, cl.pitch_deg, cl.usable)
    assert np.isnan(w[30:34]).all()
    c = detect_i2mc(cl.t_s, cl.yaw_deg, cl.pitch_deg, cl.usable)
    for s, e in zip(c.starts, c.ends):
        assert cl.usable[s:e].all()


def test_too_short_for_a_window():
    t = np.arange(3) / 30.0
    c = detect_i2mc(t, np.zeros(3), np.zeros(3), np.ones(3, bool))
    assert len(c) == 0


def test_bad_parameters():
    t = np.arange(10) / 30.0
    with pytest.raises(ParameterError):
        detect_i2mc(t, t, t, np.ones(10, bool), cutoff_sd=0)
    with pytest.raises(ParameterError):
        detect_i2mc(t, t, t, np.ones(10, bool), window_ms=-5)
