"""Precision as the SD of samples about their fixation's mean (``noise_sd_deg``) beside the RMS-S2S.

Holmqvist, Nystrom & Mulvey (2012), "Eye tracker data quality: what it is and how to measure it", Proc. ETRA
45-52, report precision both as RMS-S2S and as SD (``sqrt(sd_x^2 + sd_y^2)``) and show that filtering lowers the
first far more than the second. For white noise of per-axis SD ``s`` the two are ``2 s`` and ``sqrt(2) s``.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from aspectus.events.analysis import run_analysis
from aspectus.events.detect.noise import SD_PER_RMS_S2S_WHITE, fixation_sd_deg
from aspectus.events.features import compute_features


def test_pooled_sd_against_a_hand_computation():
    # fixation 0: yaw 1, 3 (mean 2: squares 1 + 1), pitch 0, 0; fixation 1: yaw 0, 0, 0, pitch 1, 2, 6 (mean 3:
    # squares 4 + 1 + 9); outside (-1) and the NaN sample left out. Pooled: (2 + 14) / ((2 - 1) + (3 - 1)) = 16 / 3
    yaw = [1.0, 3.0, 50.0, 0.0, 0.0, np.nan, 0.0]
    pitch = [0.0, 0.0, 50.0, 1.0, 2.0, 0.0, 6.0]
    group = [0, 0, -1, 1, 1, 1, 1]
    assert fixation_sd_deg(yaw, pitch, group) == pytest.approx(np.sqrt(16.0 / 3.0))
    # ids need not be consecutive; one fixation alone is its own 2-D sample SD (numpy's ddof=1)
    x, y = np.array([0.1, -0.4, 0.7, 0.2]), np.array([1.0, 1.5, 0.2, 0.9])
    assert fixation_sd_deg(x, y, [7, 7, 7, 7]) == pytest.approx(np.hypot(np.std(x, ddof=1), np.std(y, ddof=1)))


@pytest.mark.parametrize("yaw, pitch, group", [
    ([], [], []),                                   # no samples
    ([1.0, 2.0, 3.0], [0.0, 0.0, 0.0], [-1, -1, -1]),  # no fixation
    ([1.0, 2.0, 3.0], [0.0, 0.0, 0.0], [0, 1, 2]),     # one sample per fixation: no degree of freedom
    ([1.0, np.nan, 3.0], [0.0, 0.0, np.nan], [0, 0, 0]),  # one usable sample
])
def test_without_two_samples_in_a_fixation_the_sd_is_nan(yaw, pitch, group):
    assert np.isnan(fixation_sd_deg(yaw, pitch, group))


def _fixation_features(x, y, labels, valid=None):
    n = len(x)
    t = np.arange(n) / 30.0
    fix = labels == "fixation"
    # one fixation event per run of fixation labels
    edges = np.flatnonzero(np.diff(np.concatenate([[0], fix.astype(int), [0]])))
    ev = pd.DataFrame([("fixation", t[a] - 1 / 60, t[b - 1] + 1 / 60) for a, b in zip(edges[::2], edges[1::2])],
                      columns=["type", "onset_s", "offset_s"])
    ev["duration_ms"] = (ev.offset_s - ev.onset_s) * 1000
    scopes = pd.DataFrame([("clip", "clip", -1 / 60, t[-1] + 1 / 60)], columns=["scope", "label", "start_s", "end_s"])
    return compute_features(ev, t_s=t, valid=np.ones(n, bool) if valid is None else valid, yaw_deg=x, pitch_deg=y,
                            labels=labels, scopes=scopes).iloc[0]


def test_feature_reads_within_fixations_only_and_skips_invalid_samples():
    rng = np.random.default_rng(3)
    n = 600
    x, y = rng.normal(0, 0.3, n), rng.normal(0, 0.3, n)
    labels = np.array(["fixation"] * n, dtype=object)
    labels[290:310] = "saccade"
    x[290:310] += np.linspace(0, 40, 20)  # the saccade's samples do not count
    x[310:] += 40.0                         # nor does the jump between the two fixations' means
    valid = np.ones(n, bool)
    valid[100:110] = False
    x[100:110] = 1e3                        # gap-filled values of invalid samples do not count either
    f = _fixation_features(x, y, labels, valid)
    # white noise of per-axis SD 0.3 deg: SD sqrt(2) x 0.3 = 0.424 deg, RMS-S2S 2 x 0.3 = 0.6 deg
    assert f.noise_sd_deg == pytest.approx(0.3 * np.sqrt(2), rel=0.08)
    assert f.noise_sd_deg / f.noise_rms_s2s_deg == pytest.approx(SD_PER_RMS_S2S_WHITE, rel=0.08)


def test_slow_wander_raises_the_sd_not_the_rms_s2s():
    """An error that changes slowly (a random walk within each fixation) moves each sample little from the last but
    far from the fixation's mean: the SD exceeds RMS-S2S / sqrt(2), the white-noise relation, several-fold."""
    rng = np.random.default_rng(4)
    n = 600
    labels = np.array(["fixation"] * n, dtype=object)
    labels[::30] = "saccade"  # 20 fixations of 29 samples
    x = np.cumsum(rng.normal(0, 0.1, n))
    y = np.cumsum(rng.normal(0, 0.1, n))
    f = _fixation_features(x, y, labels)
    assert f.noise_sd_deg > 2.5 * SD_PER_RMS_S2S_WHITE * f.noise_rms_s2s_deg


def test_clip_quality_carries_the_sd_as_its_feature():
    rng = np.random.default_rng(5)
    n = 900
    t = np.arange(n) / 30.0
    smp = pd.DataFrame({"t_s": t, "valid": True,
                        "yaw_deg": np.repeat(rng.uniform(-8, 8, 30), 30) + rng.normal(0, 0.25, n),
                        "pitch_deg": np.repeat(rng.uniform(-5, 5, 30), 30) + rng.normal(0, 0.25, n)})
    res = run_analysis(smp)
    clip = res.features.iloc[0]
    assert res.quality["noise_sd_deg"] == clip.noise_sd_deg
    assert clip.noise_sd_deg == pytest.approx(0.25 * np.sqrt(2), rel=0.08)
    assert "noise_sd_deg" in res.quality["noise_definitions"]
    # no valid sample: NaN, not 0
    smp["valid"] = False
    with pytest.warns(Warning):
        assert np.isnan(run_analysis(smp).quality["noise_sd_deg"])


def test_each_noise_figure_says_which_samples_it_reads():
    """run.json's quality holds precision figures read before the optional smoothing (the clip's features) beside
    the thresholds' noise figures read from the samples the detectors see (after it). With smoothing on the two
    kinds differ several-fold, so each definition says which it is, and the figures are what they say."""
    from aspectus.events.analysis import AnalysisParams
    from aspectus.events.detect.noise import robust_rms_s2s_deg, rms_s2s_deg

    rng = np.random.default_rng(6)
    n = 900
    smp = pd.DataFrame({"t_s": np.arange(n) / 30.0, "valid": True,
                        "yaw_deg": np.repeat(rng.uniform(-8, 8, 30), 30) + rng.normal(0, 0.5, n),
                        "pitch_deg": np.repeat(rng.uniform(-5, 5, 30), 30) + rng.normal(0, 0.5, n)})
    res = run_analysis(smp, AnalysisParams(smoothing="median", smoothing_window_ms=200.0))
    q, cl = res.quality, res.cleaned
    ok = cl.valid_in
    assert q["noise_rms_s2s_robust_deg"] == pytest.approx(robust_rms_s2s_deg(cl.yaw_deg, cl.pitch_deg, ok))
    assert q["noise_rms_s2s_all_steps_deg"] == pytest.approx(rms_s2s_deg(cl.yaw_deg, cl.pitch_deg, ok))
    assert q["noise_rms_s2s_robust_deg"] < 0.6 * q["noise_rms_s2s_deg"]  # the smoothed samples' figure
    defs = q["noise_definitions"]
    for k in ("noise_rms_s2s_deg", "noise_rms_s2s_33ms_deg", "noise_sd_deg"):
        assert "before any smoothing" in defs[k], k
    for k in ("noise_rms_s2s_robust_deg", "noise_rms_s2s_33ms_robust_deg", "noise_rms_s2s_all_steps_deg"):
        assert "after any smoothing" in defs[k], k
