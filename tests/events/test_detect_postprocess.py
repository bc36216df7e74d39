"""Shared post-processing: merging, minimum duration, saccades, blinks, loss, labels."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from _signals import step_signal

from aspectus.events.analysis import AnalysisParams, run_analysis
from aspectus.events.detect import Candidates, build_events
from aspectus.events.detect.postprocess import merge_candidates, trim_by_speed
from aspectus.schema import EVENT_COLUMNS


def _arrays(n=100, rate=100.0):
    t = np.arange(n) / rate
    return t, np.zeros(n), np.zeros(n), np.ones(n, bool), np.zeros(n, bool), np.zeros(n, bool)


def test_merge_close_in_time_and_space():
    t, x, y, ok, bl, lo = _arrays()
    x[50:] = 0.3  # 0.3 deg apart: merged when <= 75 ms apart
    s, e = merge_candidates(t, x, y, ok, bl | lo, [0, 57], [43, 100])  # gap 43..57 = 140 ms: too long
    assert s.tolist() == [0, 57] and e.tolist() == [43, 100]
    s, e = merge_candidates(t, x, y, ok, bl | lo, [0, 50], [43, 100])  # gap 70 ms, 0.3 deg: merged
    assert s.tolist() == [0] and e.tolist() == [100]
    x[50:] = 0.8  # too far apart
    s, e = merge_candidates(t, x, y, ok, bl | lo, [0, 50], [43, 100])
    assert s.tolist() == [0, 50]
    x[50:] = 0.3
    bl[45] = True  # a blink between them: never merged
    s, e = merge_candidates(t, x, y, ok, bl | lo, [0, 50], [43, 100])
    assert s.tolist() == [0, 50]


def test_merge_chain_of_three():
    t, x, y, ok, bl, lo = _arrays()
    s, e = merge_candidates(t, x, y, ok, bl | lo, [0, 32, 65], [30, 62, 100])
    assert s.tolist() == [0] and e.tolist() == [100]


def test_min_duration_saccades_blinks_loss_and_labels():
    t, x, y, ok, bl, lo = _arrays(n=100, rate=100.0)
    x[10:20] = 0.0
    x[30:] = 5.0
    x[36:] = 5.0
    y[60:] = 4.0
    bl[80:85] = True
    ok[80:85] = False
    lo[95:] = True
    ok[95:] = False
    cand = Candidates(np.array([0, 32, 36, 60]), np.array([28, 36, 58, 80]))
    ev, lab = build_events(t, x, y, ok, bl, lo, cand, edge_speed_factor=0, min_fixation_ms=60)
    assert list(ev.columns) == [c.name for c in EVENT_COLUMNS]
    fx = ev[ev.type == "fixation"]
    # [32, 36) (40 ms) touches [36, 58) at the same place: merged first, so it is not dropped as too short;
    # (5, 0) and (5, 4) are 4 deg apart: not merged. Each sample stands for 5 ms either side of it.
    assert fx[["onset_s", "offset_s"]].to_numpy().round(6).tolist() == [[-0.005, 0.275], [0.315, 0.575],
                                                                          [0.595, 0.795]]
    assert fx["duration_ms"].round(6).tolist() == [280.0, 260.0, 200.0]
    assert fx["yaw_deg"].tolist() == pytest.approx([0.0, 5.0, 5.0])
    assert fx["pitch_deg"].tolist() == pytest.approx([0.0, 0.0, 4.0])
    sc = ev[ev.type == "saccade"]
    # from the last fixation sample to the next one's first: 0.27 -> 0.32, a saccade of 5 deg; 0.57 -> 0.60: 4 deg
    assert sc[["onset_s", "offset_s"]].to_numpy().round(6).tolist() == [[0.27, 0.32], [0.57, 0.6]]
    assert sc["n_samples"].tolist() == [4, 2]
    assert sc["amplitude_deg"].tolist() == pytest.approx([5.0, 4.0])
    b = ev[ev.type == "blink"]
    assert b[["onset_s", "offset_s", "n_samples"]].to_numpy().round(6).tolist() == [[0.795, 0.845, 5]]
    lo_ev = ev[ev.type == "loss"]
    assert lo_ev[["onset_s", "offset_s", "n_samples"]].to_numpy().round(6).tolist() == [[0.945, 0.995, 5]]
    assert (lab[:28] == "fixation").all() and (lab[28:32] == "saccade").all()
    assert (lab[80:85] == "blink").all() and (lab[95:] == "loss").all()
    assert (lab[85:95] == "unclassified").all()
    assert ev["onset_s"].is_monotonic_increasing


def test_no_saccade_across_a_blink_or_a_long_interval():
    t, x, y, ok, bl, lo = _arrays(n=100, rate=100.0)
    x[50:] = 5.0
    bl[40:45] = True
    ok[40:45] = False
    ev, _ = build_events(t, x, y, ok, bl, lo, Candidates(np.array([0, 50]), np.array([40, 100])), edge_speed_factor=0)
    assert (ev.type == "saccade").sum() == 0
    bl[:] = False
    ok[:] = True
    ev, _ = build_events(t, x, y, ok, bl, lo, Candidates(np.array([0, 70]), np.array([30, 100])), edge_speed_factor=0)
    assert (ev.type == "saccade").sum() == 0  # 400 ms between them > saccade_max_ms


def test_edge_trimming_removes_the_samples_beside_a_jump():
    df, truth = step_signal(rate_hz=30.0)
    t = df.t_s.to_numpy()
    s, e, thr = trim_by_speed(t, df.yaw_deg.to_numpy(), df.pitch_deg.to_numpy(), df.valid.to_numpy(),
                              [a for a, _, _, _ in truth], [b for _, b, _, _ in truth])
    assert np.isfinite(thr) and thr > 0
    # (the first sample's one-sided derivative may exceed the threshold by noise alone)
    assert s[0] in (0, 1) and s.tolist()[1:] == [a + 1 for a, _, _, _ in truth[1:]]
    assert e.tolist() == [b - 1 for _, b, _, _ in truth[:-1]] + [truth[-1][1]]


def test_end_to_end_exact_times_with_idt():
    df, truth = step_signal(rate_hz=60.0)
    # no edge test here: at its 10 % level it removes a genuine edge sample now and then (on average a few ms)
    res = run_analysis(df, AnalysisParams(detector="idt", edge_alpha=0.0))
    fx = res.events[res.events.type == "fixation"]
    t = df.t_s.to_numpy()
    h = 0.5 / 60.0
    # each fixation runs from half an interval before its first sample to half an interval after its last one:
    # its duration is the planned one exactly
    assert fx["onset_s"].tolist() == pytest.approx([t[a] - h for a, _, _, _ in truth])
    assert fx["offset_s"].tolist() == pytest.approx([t[b - 1] + h for _, b, _, _ in truth])
    assert fx["duration_ms"].tolist() == pytest.approx([(b - a) * 1000 / 60.0 for a, b, _, _ in truth])
    sc = res.events[res.events.type == "saccade"]
    # jumps happen between two samples: the saccade runs from the last sample before to the first after it
    # (one sample interval, never zero), with fixation-to-fixation amplitude; no peak velocity at 60 Hz
    amp = [np.hypot(b[2] - a[2], b[3] - a[3]) for a, b in zip(truth[:-1], truth[1:])]
    assert sc["amplitude_deg"].tolist() == pytest.approx(amp, abs=0.05)
    assert sc["duration_ms"].tolist() == pytest.approx([1000 / 60.0] * len(amp)) and (sc["n_samples"] == 0).all()
    assert sc["onset_s"].tolist() == pytest.approx([t[b - 1] for _, b, _, _ in truth[:-1]])
    assert sc["peak_velocity_deg_s"].isna().all() and sc["peak_velocity_note"].str.contains("60 Hz").all()
    assert (res.labels == "fixation").all()


def test_empty_input():
    z = np.zeros(0)
    ev, lab = build_events(z, z, z, z.astype(bool), z.astype(bool), z.astype(bool), Candidates.empty())
    assert len(ev) == 0 and len(lab) == 0 and list(ev.columns) == [c.name for c in EVENT_COLUMNS]
    assert isinstance(ev, pd.DataFrame)


def test_short_isolated_fixation_is_dropped():
    t, x, y, ok, bl, lo = _arrays(n=100, rate=100.0)
    x[40:45] = 6.0
    x[45:] = 12.0
    ev, lab = build_events(t, x, y, ok, bl, lo, Candidates(np.array([0, 40, 45]), np.array([40, 45, 100])),
                           edge_speed_factor=0, min_fixation_ms=60)
    fx = ev[ev.type == "fixation"]
    assert fx["onset_s"].round(6).tolist() == [-0.005, 0.445]
    assert (lab[40:45] == "saccade").all()
    assert ev[ev.type == "saccade"]["amplitude_deg"].tolist() == pytest.approx([12.0])


# --- merging by a test of the two means (merge_alpha)

def test_means_indistinguishable_uses_the_chi_square_quantile():
    from scipy.stats import chi2

    from aspectus.events.detect.postprocess import means_indistinguishable

    # the 2-dof chi-square quantile is -2 ln(alpha): scipy.stats (reference library)
    crit = chi2.ppf(0.95, 2)
    assert crit == pytest.approx(-2 * np.log(0.05), rel=1e-12)
    # worked by hand: sd 1 deg on both axes, 2 + 2 samples -> SD of the difference of means 1 deg,
    # so the statistic is dx^2 + dy^2
    d = np.sqrt(crit)
    got = means_indistinguishable([d - 1e-6, d + 1e-6, 0.0], [0.0, 0.0, d + 1e-6], [2, 2, 2], [2, 2, 2], (1.0, 1.0), 0.05)
    assert got.tolist() == [True, False, False]
    # each axis scaled by its own noise: 2 deg in yaw is nothing with yaw noise 4 deg, much with 0.5 deg
    assert means_indistinguishable([2.0], [0.0], [4], [4], (4.0, 0.5), 0.05).tolist() == [True]
    assert means_indistinguishable([0.0], [2.0], [4], [4], (4.0, 0.5), 0.05).tolist() == [False]


def test_means_indistinguishable_holds_its_level_on_simulated_fixations():
    # Monte Carlo: two fragments of the same fixation, white Gaussian noise; the test must call them
    # different in about alpha of the cases (binomial SD at 20000 draws: 0.0015)
    from aspectus.events.detect.postprocess import means_indistinguishable

    rng = np.random.default_rng(7)
    n1, n2, sx, sy, reps = 4, 7, 0.4, 1.5, 20000
    ax = rng.normal(0, sx, (reps, n1)).mean(1) - rng.normal(0, sx, (reps, n2)).mean(1)
    ay = rng.normal(0, sy, (reps, n1)).mean(1) - rng.normal(0, sy, (reps, n2)).mean(1)
    for alpha in (0.05, 0.01):
        rate = 1 - means_indistinguishable(ax, ay, n1, n2, (sx, sy), alpha).mean()
        assert rate == pytest.approx(alpha, abs=0.005)


def test_pooled_within_sd_matches_a_direct_computation():
    from aspectus.events.detect.postprocess import pooled_within_sd_deg

    rng = np.random.default_rng(3)
    n = 60
    x, y = rng.normal(0, 1.0, n), rng.normal(0, 2.0, n)
    x[20:45] += 5.0  # a different position per fixation does not enter the within-fixation SD
    ok = np.ones(n, bool)
    ok[30] = False  # an unusable sample is left out
    starts, ends = np.array([0, 20, 45]), np.array([18, 45, 60])
    got = pooled_within_sd_deg(x, y, ok, starts, ends)
    for v, g in zip((x, y), got):
        groups = [v[s:e][ok[s:e]] for s, e in zip(starts, ends)]
        # pooled variance of the t-test: sum of (n_k - 1) s_k^2 over sum of (n_k - 1)
        want = np.sqrt(sum((len(a) - 1) * np.var(a, ddof=1) for a in groups) / sum(len(a) - 1 for a in groups))
        assert g == pytest.approx(want, rel=1e-9)
    assert all(np.isnan(pooled_within_sd_deg(x, y, ok, [0, 5], [1, 6])))  # no candidate with two samples


def test_merge_by_test_joins_noisy_fragments_but_not_precise_ones():
    # 30 Hz, two fragments of 5 samples 1.2 deg apart, 75 ms criteria met in time
    t = np.arange(10) / 30.0
    x = np.r_[np.zeros(5), np.full(5, 1.2)]
    y = np.zeros(10)
    ok = np.ones(10, bool)
    blocked = np.zeros(10, bool)
    kw = dict(merge_gap_ms=75.0, merge_distance_deg=0.5)
    # noise SD 1 deg per axis: the means of 5 samples are 0.63 deg uncertain in their difference -> one fixation
    s, e = merge_candidates(t, x, y, ok, blocked, [0, 5], [5, 10], noise_sd_deg=(1.0, 1.0), merge_alpha=0.05, **kw)
    assert s.tolist() == [0] and e.tolist() == [10]
    # without the test (or with precise data, as at 500 Hz) 1.2 deg apart stays two fixations
    assert merge_candidates(t, x, y, ok, blocked, [0, 5], [5, 10], **kw)[0].tolist() == [0, 5]
    s, _ = merge_candidates(t, x, y, ok, blocked, [0, 5], [5, 10], noise_sd_deg=(0.05, 0.05), merge_alpha=0.05, **kw)
    assert s.tolist() == [0, 5]
    # far apart in space or in time: never merged by the test
    x2 = np.r_[np.zeros(5), np.full(5, 6.0)]
    s, _ = merge_candidates(t, x2, y, ok, blocked, [0, 5], [5, 10], noise_sd_deg=(1.0, 1.0), merge_alpha=0.05, **kw)
    assert s.tolist() == [0, 5]
    s, _ = merge_candidates(t, x, y, ok, blocked, [0, 8], [4, 10], noise_sd_deg=(1.0, 1.0), merge_alpha=0.05, **kw)
    assert s.tolist() == [0, 8]  # 4 frames = 133 ms apart


def test_merge_alpha_parameter_checked_and_reported():
    from aspectus.errors import ParameterError

    for bad in (-0.1, 1.0, float("nan")):
        with pytest.raises(ParameterError, match="merge_alpha"):
            AnalysisParams(merge_alpha=bad)
    t, x, y, ok, bl, lo = _arrays(n=60, rate=30.0)
    x += np.random.default_rng(0).normal(0, 0.3, 60)
    samples = pd.DataFrame({"t_s": t, "valid": ok, "yaw_deg": x, "pitch_deg": y})
    y += np.random.default_rng(1).normal(0, 0.2, 60)
    samples = pd.DataFrame({"t_s": t, "valid": ok, "yaw_deg": x, "pitch_deg": y})
    info = run_analysis(samples).quality["detector_thresholds"]
    sd = info["merge_noise_sd_deg"]
    assert len(sd) == 2 and all(np.isfinite(v) and v > 0 for v in sd)
    assert sd[0] == pytest.approx(0.3, rel=0.35) and sd[1] == pytest.approx(0.2, rel=0.35)  # the noise put in
    assert info["merge_test_axes"] == ["yaw", "pitch"]
    assert "merge_noise_sd_deg" not in run_analysis(samples, AnalysisParams(merge_alpha=0)).quality["detector_thresholds"]
    # a pitch trace without any noise (e.g. a quantised table): the test runs on yaw alone, and says so
    flat = samples.assign(pitch_deg=0.0)
    info = run_analysis(flat).quality["detector_thresholds"]
    assert info["merge_noise_sd_deg"][1] == 0.0 and info["merge_test_axes"] == ["yaw"]


def test_means_test_with_one_axis_and_empty_fragments():
    """1 degree of freedom when one axis has no noise; the quantile against scipy.stats.chi2 (reference library)."""
    import warnings

    from scipy.stats import chi2

    from aspectus.events.detect.postprocess import _chi2_1_quantile, means_indistinguishable

    for q in (0.9, 0.95, 0.99):
        assert _chi2_1_quantile(q) == pytest.approx(chi2.ppf(q, 1), rel=1e-9)
    lim = np.sqrt(chi2.ppf(0.95, 1) * (1 / 4 + 1 / 4))  # largest |dx| still the same position, sd 1
    got = means_indistinguishable([lim - 1e-6, lim + 1e-6], [5.0, 5.0], [4, 4], [4, 4], (1.0, 0.0), 0.05)
    assert got.tolist() == [True, False]  # the pitch difference of an axis without noise is not tested
    assert means_indistinguishable([0.0], [0.0], [4], [4], (0.0, float("nan")), 0.05).tolist() == [False]
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # a mean of no samples: no division warning, and never "the same"
        assert means_indistinguishable([0.0, 0.0], [0.0, 0.0], [0, 3], [5, 0], (1.0, 1.0), 0.05).tolist() == [
            False, False]


def test_a_merged_fixation_can_exceed_the_dispersion_threshold_and_the_schema_says_so():
    """Two fixations 0.2 deg apart with a one-sample excursion of 3 deg between them (30 Hz, noise SD 0.1 deg):
    I-DT finds them apart, each within its threshold; the merge (gap <= 75 ms, means <= 0.5 deg apart) joins
    them with the excursion, so the one fixation's dispersion_deg exceeds dispersion_threshold_deg. With the
    merge switched off no fixation exceeds its threshold. The schema's definition says why."""
    plan = [(0.6, 0.0, 0.0), (1 / 30, 3.0, 0.0), (0.6, 0.2, 0.0), (0.5, 8.0, 4.0)]
    s, _ = step_signal(rate_hz=30.0, noise_sd_deg=0.1, plan=plan, seed=1)
    fx = run_analysis(s, AnalysisParams()).events.query("type == 'fixation'")
    over = fx[fx["dispersion_deg"] > fx["dispersion_threshold_deg"]]
    assert len(over) == 1 and over["dispersion_deg"].iloc[0] > 2.5  # the 3-deg excursion is inside it
    apart = run_analysis(s, AnalysisParams(merge_gap_ms=0.0)).events.query("type == 'fixation'")
    assert len(apart) == len(fx) + 1
    assert (apart["dispersion_deg"] <= apart["dispersion_threshold_deg"]).all()
    doc = {c.name: c.doc for c in EVENT_COLUMNS}
    assert "can exceed dispersion_threshold_deg" in doc["dispersion_deg"]
    assert "merged fixation may exceed it" in doc["dispersion_threshold_deg"]
