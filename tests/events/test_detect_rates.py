"""Detection that does not depend on the sampling rate, and the time axis as it is.

Synthetic scan paths with known fixations (tests/_signals.scan_path: fixations 150-600 ms, saccades 5-15 deg with
the main-sequence duration 2.2 ms/deg x A + 21 ms - Carpenter 1988, from memory - and a minimum-jerk profile),
sampled at 30-1000 Hz with white noise of 0.1-0.5 deg RMS. Before the changes of this file's commit, I-DT's mean
fixation duration was 52 ms short at 30 Hz (edge trimming by speed) and fixations fragmented at 500 Hz (count
x1.2, -220 ms) or vanished at 1000 Hz (count x0.1) at 0.3 deg noise.
"""
from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from _signals import scan_path

from aspectus.events.analysis import AnalysisParams, DegenerateWindowWarning, run_analysis
from aspectus.events.detect import DetectionWarning
from aspectus.events.detect.idt import expected_range_sd
from aspectus.events.detect.ivt import velocity_deg_s

RATES = (30, 60, 120, 250, 500, 1000)


def _matched(fx: pd.DataFrame, truth: pd.DataFrame):
    """Per true fixation (first and last left out: cut by the recording), the detected one overlapping it most."""
    on, off = fx["onset_s"].to_numpy(), fx["offset_s"].to_numpy()
    d = []
    for r in truth.iloc[1:-1].itertuples():
        ov = np.minimum(off, r.offset_s) - np.maximum(on, r.onset_s)
        k = int(np.argmax(ov))
        if ov[k] > 0:
            d.append((off[k] - on[k]) - (r.offset_s - r.onset_s))
    return np.asarray(d) * 1000.0


@pytest.fixture(scope="module")
def rate_table():
    out = {}
    for noise in (0.1, 0.3, 0.5):
        for rate in RATES:
            errs, counts = [], []
            for seed in (3, 4, 5):  # three 60-s paths, some 400 fixations
                df, truth, _ = scan_path(rate_hz=rate, noise_rms_deg=noise, duration_s=60.0, seed=seed)
                res = run_analysis(df)
                fx = res.events[res.events.type == "fixation"]
                errs.append(_matched(fx, truth))
                counts.append(len(fx) / len(truth))
            out[noise, rate] = (float(np.concatenate(errs).mean()), float(np.mean(counts)), res)
    return out


@pytest.mark.parametrize("noise", [0.1, 0.3, 0.5])
def test_fixation_count_and_duration_do_not_depend_on_the_rate(rate_table, noise):
    errs = np.array([rate_table[noise, r][0] for r in RATES])
    counts = np.array([rate_table[noise, r][1] for r in RATES])
    # count within +-10 % of the truth at every rate (issue floor)
    assert np.all(np.abs(counts - 1) <= 0.10), dict(zip(RATES, counts))
    # mean duration error within +-10 ms at every rate (issue floor); before this change it ran from -52 ms
    # (30 Hz) to -296 ms (1000 Hz) at 0.3 deg
    assert np.all(np.abs(errs) <= 10.0), dict(zip(RATES, errs.round(1)))


def test_low_noise_durations_within_10_ms_at_lab_rates(rate_table):
    # where velocity is measured (>= 200 Hz) the edges are found by speed as well: within the issue's +-10 ms
    for rate in (250, 500, 1000):
        assert abs(rate_table[0.1, rate][0]) <= 10.0, rate_table[0.1, rate][0]
        assert abs(rate_table[0.3, rate][0]) <= 10.0, rate_table[0.3, rate][0]


def test_no_zero_length_saccades_and_peak_velocity_only_where_measurable(rate_table):
    for rate in RATES:
        ev = rate_table[0.3, rate][2].events
        sc = ev[ev.type == "saccade"]
        assert len(sc) > 50
        assert (sc["duration_ms"] >= 1000.0 / rate - 1e-6).all()
        if rate < 200:
            assert sc["peak_velocity_deg_s"].isna().all()
            assert sc["peak_velocity_note"].str.contains(f"{rate} Hz").all()
        else:
            ok = sc["peak_velocity_deg_s"].notna()
            assert ok.mean() > 0.9
            assert (sc.loc[ok, "peak_velocity_note"] == "").all()


def test_peak_velocity_follows_the_main_sequence_at_500_hz():
    # minimum-jerk profile: peak speed = 1.875 x amplitude / duration (Flash & Hogan 1985 - from memory)
    df, truth, _ = scan_path(rate_hz=500.0, noise_rms_deg=0.05, duration_s=30.0, seed=5)
    ev = run_analysis(df).events
    sc = ev[ev.type == "saccade"].dropna(subset=["peak_velocity_deg_s"])
    amp = sc["amplitude_deg"].to_numpy()
    expect = 1.875 * amp / ((2.2 * amp + 21.0) / 1000.0)
    # a 20 ms Savitzky-Golay derivative flattens the peak of a 30-50 ms saccade a little
    ratio = sc["peak_velocity_deg_s"].to_numpy() / expect
    assert 0.8 <= np.median(ratio) <= 1.05, np.median(ratio)


def test_each_fixation_reports_its_dispersion_threshold_and_noise_dispersion(rate_table):
    res = rate_table[0.3, 500][2]
    fx = res.events[res.events.type == "fixation"]
    assert fx["dispersion_deg"].notna().all() and fx["dispersion_threshold_deg"].notna().all()
    # fixations merged from fragments may exceed it; most do not
    assert (fx["dispersion_deg"] <= fx["dispersion_threshold_deg"] + 1e-9).mean() > 0.6
    # the noise's own spread grows with the sample count, and so does the threshold
    long = fx.n_samples > fx.n_samples.median()
    assert fx.loc[long, "dispersion_noise_deg"].mean() > fx.loc[~long, "dispersion_noise_deg"].mean()
    assert "d2(samples in the window)" in res.quality["detector_thresholds"]["dispersion_rule"]


def test_expected_range_matches_the_control_chart_table():
    # d2 of the statistical quality-control tables (Tippett 1925; e.g. Montgomery, Introduction to Statistical
    # Quality Control, appendix table of control chart factors - from memory)
    assert expected_range_sd([2, 3, 5, 10, 25]) == pytest.approx([1.128, 1.693, 2.326, 3.078, 3.931], abs=1e-3)
    assert expected_range_sd(2) == pytest.approx(2 / np.sqrt(np.pi), abs=1e-9)


def test_a_hole_in_the_time_axis_is_loss_whatever_the_validity_says():
    # 0.5 s of rows missing (not flagged invalid) inside a 1 s fixation: two fixations and a loss of 0.5 s
    t = np.arange(90) / 30.0
    t = np.concatenate([t[:30], t[45:]])
    df = pd.DataFrame({"t_s": t, "valid": True, "yaw_deg": 0.0, "pitch_deg": 0.0})
    res = run_analysis(df)
    loss = res.events[res.events.type == "loss"]
    assert len(loss) == 1
    assert loss["onset_s"].iloc[0] == pytest.approx(t[29] + 0.5 / 30.0)
    assert loss["offset_s"].iloc[0] == pytest.approx(t[30] - 0.5 / 30.0)
    assert loss["n_samples"].iloc[0] == 0
    fx = res.events[res.events.type == "fixation"]
    assert not ((fx.onset_s < loss.onset_s.iloc[0]) & (fx.offset_s > loss.offset_s.iloc[0])).any()
    assert res.quality["valid_frac"] == pytest.approx(75 / 90, abs=1e-9)
    assert res.quality["time_holes"] == 1
    assert len(res.labels) == len(df)


def test_a_ten_minute_gap_is_not_a_fully_valid_recording():
    t = np.concatenate([np.arange(900) / 30.0, 630.0 + np.arange(900) / 30.0])
    df = pd.DataFrame({"t_s": t, "valid": True, "yaw_deg": 0.0, "pitch_deg": 0.0})
    with pytest.warns(DegenerateWindowWarning):  # the 10 s windows inside the gap hold no sample
        res = run_analysis(df)
    loss = res.events[res.events.type == "loss"]
    assert len(loss) == 1 and loss["duration_ms"].iloc[0] == pytest.approx((630.0 - t[899] - 1 / 30.0) * 1000)
    assert res.quality["valid_frac"] == pytest.approx(60.0 / 660.0, abs=1e-6)
    clip = res.features[res.features.scope == "clip"].iloc[0]
    assert clip.valid_frac == pytest.approx(60.0 / 660.0, abs=1e-6) and clip.loss_count == 1
    assert clip.loss_frac == pytest.approx(600.0 / 660.0, abs=1e-3)


def test_short_hole_is_filled_on_the_grid():
    # one dropped frame at 30 Hz (33 ms <= 75 ms): filled, no loss
    t = np.delete(np.arange(60) / 30.0, 20)
    df = pd.DataFrame({"t_s": t, "valid": True, "yaw_deg": 0.0, "pitch_deg": 0.0})
    res = run_analysis(df)
    assert (res.events.type == "loss").sum() == 0 and res.quality["filled_frac"] > 0


def test_velocity_uses_the_samples_own_times():
    # a 30 deg/s ramp with one dropped frame: a derivative assuming a uniform interval read 45 deg/s beside it
    t = np.delete(np.arange(30) / 30.0, 15)
    vx, _ = velocity_deg_s(t, 30.0 * t, np.zeros_like(t), np.ones(len(t), bool))
    assert vx == pytest.approx(np.full(len(t), 30.0), abs=1e-9)


def test_nh2010_warns_at_webcam_rate():
    df, _, _ = scan_path(rate_hz=30.0, noise_rms_deg=0.5, duration_s=20.0, seed=1)
    with pytest.warns(DetectionWarning) as rec:
        res = run_analysis(df, AnalysisParams(detector="ivt", ivt_method="nh2010"))
    assert any("at 30 Hz" in str(w.message) and "ek2003" in str(w.message) for w in rec)
    assert any("30 Hz" in w for w in res.quality["warnings"])
    df5, _, _ = scan_path(rate_hz=500.0, noise_rms_deg=0.1, duration_s=20.0, seed=1)
    with warnings.catch_warnings():
        warnings.simplefilter("error", DetectionWarning)
        run_analysis(df5, AnalysisParams(detector="ivt", ivt_method="nh2010"))
