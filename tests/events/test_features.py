"""Features per clip, window and segment; segment files; exports and sidecar."""
from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from aspectus.events.analysis import AnalysisParams, DegenerateWindowWarning, run_analysis, write_analysis
from aspectus.atomic import sha256_file
from aspectus.errors import AspectusInputError, ParameterError
from aspectus.events.features import FEATURE_COLUMNS, compute_features
from aspectus.events.segments import fixed_windows, read_segments


def _events(rows):
    ev = pd.DataFrame(rows, columns=["type", "onset_s", "offset_s", "amplitude_deg"])
    ev["duration_ms"] = (ev.offset_s - ev.onset_s) * 1000
    return ev


def _scopes(*rows):
    return pd.DataFrame(list(rows), columns=["scope", "label", "start_s", "end_s"])


def test_hand_computed_features():
    # 10 s at 10 Hz; three fixations (onsets 0.5, 3.0, 6.0 s), two saccades, one blink. Each sample stands for
    # half an interval either side of it: samples at 0.05, 0.15, ... cover the clip [0, 10] s exactly
    t = 0.05 + np.arange(100) / 10.0
    valid = np.ones(100, bool)
    valid[70:75] = False
    labels = np.array(["unclassified"] * 100, dtype=object)
    ev = _events([("fixation", 0.5, 2.5, np.nan), ("saccade", 2.5, 3.0, 4.0), ("fixation", 3.0, 3.2, np.nan),
                  ("saccade", 3.2, 6.0, 2.0), ("fixation", 6.0, 6.6, np.nan), ("blink", 7.0, 7.5, np.nan)])
    f = compute_features(ev, t_s=t, valid=valid, yaw_deg=np.zeros(100), pitch_deg=np.zeros(100), labels=labels,
                         scopes=_scopes(("clip", "clip", 0.0, 10.0), ("window", "w0", 0.0, 5.0),
                                        ("segment", "read", 5.0, 10.0)))
    clip, w0, seg = (f.iloc[i] for i in range(3))
    assert clip.fixation_count == 3 and clip.fixation_rate_per_s == pytest.approx(0.3)
    assert clip.fixation_duration_mean_ms == pytest.approx((2000 + 200 + 600) / 3)
    assert clip.fixation_duration_median_ms == pytest.approx(600)
    assert clip.fixation_duration_sd_ms == pytest.approx(np.std([2000, 200, 600], ddof=1))
    assert clip.fixation_time_frac == pytest.approx(2.8 / 10)
    assert clip.saccade_count == 2 and clip.saccade_amplitude_mean_deg == pytest.approx(3.0)
    assert clip.blink_count == 1 and clip.blink_rate_per_min == pytest.approx(6.0)
    assert clip.valid_frac == pytest.approx(0.95)
    assert w0.fixation_count == 2 and w0.fixation_time_frac == pytest.approx(2.2 / 5)
    assert seg.fixation_count == 1 and seg.blink_count == 1 and seg.valid_frac == pytest.approx(45 / 50)
    assert seg.label == "read" and seg.scope == "segment"
    assert list(f.columns[:4]) == ["scope", "label", "start_s", "end_s"]
    for c in FEATURE_COLUMNS:
        assert c in f.columns


def test_fixation_time_is_clipped_at_scope_edges():
    t = 0.05 + np.arange(40) / 10.0  # spans cover [0, 4] s
    ev = _events([("fixation", 0.5, 2.5, np.nan)])
    f = compute_features(ev, t_s=t, valid=np.ones(40, bool), yaw_deg=np.zeros(40), pitch_deg=np.zeros(40),
                         labels=np.array(["fixation"] * 40), scopes=_scopes(("window", "w", 2.0, 4.0)))
    # the fixation started before the window: not counted there, but its 0.5 s inside are fixation time
    assert f.iloc[0].fixation_count == 0 and f.iloc[0].fixation_time_frac == pytest.approx(0.25)


def test_noise_only_within_fixations():
    rng = np.random.default_rng(1)
    n = 300
    t = np.arange(n) / 30.0
    x = rng.normal(0, 0.3, n)
    y = rng.normal(0, 0.3, n)
    labels = np.array(["fixation"] * n, dtype=object)
    labels[100:200] = "saccade"
    x[100:200] += np.linspace(0, 50, 100)
    ev = _events([("fixation", 0.0, t[100], np.nan)])
    f = compute_features(ev, t_s=t, valid=np.ones(n, bool), yaw_deg=x, pitch_deg=y, labels=labels,
                         scopes=_scopes(("clip", "clip", 0.0, 10.0)))
    # RMS-S2S of white noise with per-axis SD 0.3 deg is 0.6 deg (Holmqvist et al. 2012 definition)
    assert f.iloc[0].noise_rms_s2s_deg == pytest.approx(0.6, rel=0.12)


def test_degenerate_windows_warn_and_give_nan():
    n = 300
    t = np.arange(n) / 30.0
    df = pd.DataFrame({"t_s": t, "valid": True, "yaw_deg": 0.0, "pitch_deg": 0.0})
    df.loc[150:, "valid"] = False
    segs = pd.DataFrame({"label": ["inside", "after"], "onset_s": [1.0, 20.0], "offset_s": [2.0, 30.0]})
    with pytest.warns(DegenerateWindowWarning, match="3 of 7"):
        res = run_analysis(df, AnalysisParams(detector="idt", window_s=2.5, step_s=2.5), segments=segs)
    f = res.features.set_index("label")
    assert f.loc["w0000", "fixation_count"] == 1
    for lab in ("w0002", "w0003", "after"):
        assert np.isnan(f.loc[lab, "fixation_count"]) and np.isnan(f.loc[lab, "noise_rms_s2s_deg"])
    assert f.loc["inside", "valid_frac"] == 1.0


def test_a_segment_beyond_the_recording_is_named_with_what_to_check():
    # e.g. another clip's segments file: 'questions' starts after this 12-s recording has ended
    t = np.arange(360) / 30.0
    df = pd.DataFrame({"t_s": t, "valid": True, "yaw_deg": 0.0, "pitch_deg": 0.0})
    segs = pd.DataFrame({"label": ["passage_1", "questions"], "onset_s": [0.0, 15.0], "offset_s": [8.0, 20.0]})
    with pytest.warns(DegenerateWindowWarning) as rec:
        run_analysis(df, AnalysisParams(detector="idt", window_s=10.0, step_s=10.0), segments=segs)
    msg = str(rec[0].message)
    assert "1 of 4" in msg and "segment 'questions' (15 to 20 s) lies outside the recording (-0.02 to 11.98 s)" in msg
    assert "passage_1" not in msg and "segments file belongs to this recording" in msg


def test_fixed_windows():
    w = fixed_windows(0.0, 10.0, window_s=4.0, step_s=2.0)
    assert w["start_s"].tolist() == [0.0, 2.0, 4.0, 6.0] and w["end_s"].tolist() == [4.0, 6.0, 8.0, 10.0]
    assert len(fixed_windows(0.0, 3.0, window_s=4.0, step_s=2.0)) == 0
    with pytest.raises(ParameterError):
        fixed_windows(0.0, 10.0, window_s=0.0, step_s=1.0)
    with pytest.raises(ParameterError):
        AnalysisParams(step_s=-1.0)


def test_read_segments_and_errors(tmp_path):
    p = tmp_path / "p01_s01_segments.csv"
    p.write_text("label,onset_s,offset_s\nread aloud,0.0,12.5\nquiz,12.5,30\n")
    s = read_segments(p)
    assert s["label"].tolist() == ["read aloud", "quiz"] and s["offset_s"].tolist() == [12.5, 30.0]
    p.write_text("label;onset_s;offset_s\nread;0;5\n")
    assert read_segments(p)["offset_s"].tolist() == [5.0]  # delimiter detected
    cases = [("label,onset_s\nread,0\n", "missing column", "header"),
             ("label,onset_s,offset_s\nread,0,5\nquiz,abc,9\n", "not a number", "row 3"),
             ("label,onset_s,offset_s\nread,5,5\n", "not after", "row 2"),
             ("label,onset_s,offset_s\n,0,5\n", "no label", "row 2")]
    for text, what, where in cases:
        p.write_text(text)
        with pytest.raises(AspectusInputError) as err:
            read_segments(p)
        assert what in str(err.value) and where in str(err.value) and p.name in str(err.value)
    with pytest.raises(AspectusInputError, match="not found"):
        read_segments(tmp_path / "absent.csv")
    p.write_text("# segments of p01\nhello\n")  # the header row is shown as written, not as the sniffer split it
    with pytest.raises(AspectusInputError, match=r"the header row reads 'hello'\)"):
        read_segments(p)


def test_exports_and_sidecar(tmp_path):
    rng = np.random.default_rng(0)
    n = 600
    t = 100.0 + np.arange(n) / 30.0  # own clock, not starting at 0
    x = np.repeat(rng.uniform(-10, 10, 20), 30) + rng.normal(0, 0.2, n)
    y = np.repeat(rng.uniform(-5, 5, 20), 30) + rng.normal(0, 0.2, n)
    df = pd.DataFrame({"t_s": t, "valid": True, "yaw_deg": x, "pitch_deg": y})
    res = run_analysis(df, AnalysisParams(window_s=5.0, step_s=5.0))
    src = tmp_path / "in.csv"
    df.to_csv(src, index=False)
    paths = write_analysis(res, tmp_path / "out", meta={"input": {"sha256": sha256_file(src)}},
                           sidecar_name="events.json")
    ev = pd.read_csv(paths["events_csv"])
    pd.testing.assert_frame_equal(pd.read_parquet(paths["events_parquet"]), res.events, check_dtype=False)
    # times on the input's own axis: the first sample (100.0 s) stands for half an interval either side
    assert ev["onset_s"].min() >= 100.0 - 0.5 / 30.0 - 1e-9
    feats = pd.read_parquet(paths["features_parquet"])
    assert feats["scope"].tolist() == ["clip", "window", "window", "window", "window"]
    side = json.loads(paths["sidecar"].read_text())
    assert side["detector"] == AnalysisParams().detector
    assert side["params"] == AnalysisParams(window_s=5.0, step_s=5.0).to_dict()
    assert side["input"]["sha256"] == sha256_file(src)
    for k in ("aspectus", "numpy", "scipy"):
        assert side["software"][k]
    for k in ("noise_rms_s2s_deg", "valid_frac", "loss_frac", "sample_rate_hz"):
        assert k in side["quality"]
    assert side["quality"]["sample_rate_hz"] == pytest.approx(30.0)
    assert not list((tmp_path / "out").glob("*.part"))


def test_params_round_trip():
    p = AnalysisParams(detector="idt", idt_dispersion_deg=2.0, i2mc_downsamples=(2, 5))
    d = json.loads(json.dumps(p.to_dict()))
    assert AnalysisParams.from_dict(d) == p
    with pytest.raises(ParameterError, match="unknown analysis parameter"):
        AnalysisParams.from_dict({"dispersion": 1})
    with pytest.raises(ParameterError, match="unknown detector"):
        AnalysisParams(detector="magic")


def test_features_do_not_assume_sorted_events():
    t = 0.05 + np.arange(100) / 10.0
    rows = [("fixation", 0.5, 2.5, np.nan), ("saccade", 2.5, 3.0, 4.0), ("fixation", 3.0, 3.2, np.nan),
            ("blink", 7.0, 7.5, np.nan), ("saccade", 3.2, 6.0, 2.0), ("fixation", 6.0, 6.6, np.nan)]
    kw = dict(t_s=t, valid=np.ones(100, bool), yaw_deg=np.zeros(100), pitch_deg=np.zeros(100),
              labels=np.array(["unclassified"] * 100), scopes=_scopes(("clip", "clip", 0.0, 10.0),
                                                                      ("window", "w0", 0.0, 5.0)))
    sorted_ = compute_features(_events(rows), **kw)
    shuffled = compute_features(_events([rows[i] for i in (5, 3, 0, 4, 2, 1)]), **kw)
    pd.testing.assert_frame_equal(sorted_, shuffled)
    assert sorted_.loc[1, "fixation_count"] == 2 and sorted_.loc[1, "saccade_count"] == 2


def test_completed_features_by_hand():
    # 60 s at 10 Hz; per-minute rates are per minute of recorded time
    t = 0.05 + np.arange(600) / 10.0
    valid = np.ones(600, bool)
    valid[100:130] = False  # 3 s not valid (a loss event below)
    ev = _events([("fixation", 1.0, 1.5, np.nan), ("saccade", 1.5, 1.55, 4.0), ("fixation", 1.55, 2.0, np.nan),
                  ("saccade", 2.0, 2.1, 2.0), ("fixation", 2.1, 2.5, np.nan), ("saccade", 2.5, 2.6, 9.0),
                  ("blink", 5.0, 5.2, np.nan), ("blink", 20.0, 20.4, np.nan), ("loss", 10.0, 13.0, np.nan)])
    ev["dispersion_deg"] = [1.0, np.nan, 2.0, np.nan, 4.0, np.nan, np.nan, np.nan, np.nan]
    f = compute_features(ev, t_s=t, valid=valid, yaw_deg=np.zeros(600), pitch_deg=np.zeros(600),
                         labels=np.array(["unclassified"] * 600), scopes=_scopes(("clip", "clip", 0.0, 60.0)),
                         sample_interval_s=0.1).iloc[0]
    assert f.fixation_rate_per_min == pytest.approx(3.0) and f.fixation_rate_per_s == pytest.approx(0.05)
    assert f.saccade_rate_per_min == pytest.approx(3.0) and f.blink_rate_per_min == pytest.approx(2.0)
    assert f.saccade_amplitude_median_deg == pytest.approx(4.0)
    assert f.saccade_amplitude_sd_deg == pytest.approx(np.std([4.0, 2.0, 9.0], ddof=1))
    assert np.isnan(f.saccade_duration_mean_ms)  # 10 Hz: a saccade's duration is not measured
    assert np.isnan(f.saccade_peak_velocity_mean_deg_s)
    assert f.blink_duration_mean_ms == pytest.approx(300.0)
    assert f.loss_count == 1 and f.loss_frac == pytest.approx(3.0 / 60.0)
    assert f.valid_frac == pytest.approx(57.0 / 60.0)
    assert f.fixation_dispersion_mean_deg == pytest.approx(7.0 / 3) and f.fixation_dispersion_median_deg == 2.0


def test_every_feature_column_is_defined_once_with_a_unit_and_documented():
    from pathlib import Path

    from aspectus.schema import EVENT_COLUMNS, FEATURE_COLUMNS as FEATURE_COLUMN_DEFS

    names = [c.name for c in FEATURE_COLUMN_DEFS]
    assert tuple(names) == tuple(FEATURE_COLUMNS) and len(set(names)) == len(names)
    readme = (Path(__file__).resolve().parents[2] / "README.md").read_text(encoding="utf-8")
    for c in FEATURE_COLUMN_DEFS:  # the README's features table: tests/events/test_schema_columns.py
        assert c.doc
    events = readme.split("### The events table", 1)[1].split("\n### ", 1)[0]
    for c in EVENT_COLUMNS:
        unit = c.unit if c.unit not in ("", "1") else "-"
        assert f"| `{c.name}` | {unit} |" in events, c.name


def test_sidecar_lists_event_and_feature_columns(tmp_path):
    from aspectus.schema import FEATURE_COLUMNS as FEATURE_COLUMN_DEFS

    n = 300
    df = pd.DataFrame({"t_s": np.arange(n) / 30.0, "valid": True, "yaw_deg": 0.0, "pitch_deg": 0.0})
    res = run_analysis(df)
    paths = write_analysis(res, tmp_path, sidecar_name="events.json")
    side = json.loads(paths["sidecar"].read_text())
    assert set(side["feature_columns"]) == {c.name for c in FEATURE_COLUMN_DEFS}
    assert side["feature_columns"]["blink_rate_per_min"]["unit"] == "1/min"
    assert "peak_velocity_deg_s" in side["event_columns"]
    # one meaning of noise_rms_s2s_deg: the sidecar's figure is the clip's feature
    clip = res.features[res.features.scope == "clip"].iloc[0]
    assert side["quality"]["noise_rms_s2s_deg"] == clip.noise_rms_s2s_deg or (
        np.isnan(clip.noise_rms_s2s_deg) and side["quality"]["noise_rms_s2s_deg"] is None)


def test_noise_skips_the_jump_between_adjacent_fixations():
    # a saccade that fell between two samples leaves two fixations side by side; the step across it is not noise
    rng = np.random.default_rng(2)
    n = 200
    t = np.arange(n) / 30.0
    x = rng.normal(0, 0.3, n)
    x[100:] += 10.0
    y = rng.normal(0, 0.3, n)
    h = 0.5 / 30.0
    ev = _events([("fixation", t[0] - h, t[99] + h, np.nan), ("fixation", t[100] - h, t[199] + h, np.nan)])
    f = compute_features(ev, t_s=t, valid=np.ones(n, bool), yaw_deg=x, pitch_deg=y,
                         labels=np.array(["fixation"] * n), scopes=_scopes(("clip", "clip", t[0] - h, t[-1] + h)))
    # RMS-S2S of white noise with per-axis SD 0.3 deg is 0.6 deg (Holmqvist et al. 2012 definition); with the
    # 10 deg step counted it would be about 1.2 deg
    assert f.iloc[0].noise_rms_s2s_deg == pytest.approx(0.6, rel=0.12)
