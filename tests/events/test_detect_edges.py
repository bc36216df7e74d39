"""Edge cases, checked for every detector through the full analysis."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from _signals import step_signal

from aspectus.events.analysis import AnalysisParams, DegenerateWindowWarning, run_analysis
from aspectus.events.detect import DETECTORS
from aspectus.errors import AspectusInputError

ALL = sorted(DETECTORS)


@pytest.mark.parametrize("detector", ALL)
def test_all_invalid(detector):
    n = 90
    df = pd.DataFrame({"t_s": np.arange(n) / 30.0, "valid": False, "yaw_deg": np.nan, "pitch_deg": np.nan})
    with pytest.warns(DegenerateWindowWarning):
        res = run_analysis(df, AnalysisParams(detector=detector, window_s=1.0, step_s=1.0))
    assert (res.labels == "loss").all()
    assert res.events["type"].tolist() == ["loss"]
    assert res.events["duration_ms"].iloc[0] == pytest.approx(3000.0)
    assert res.features["fixation_count"].isna().all()
    assert (res.features["valid_frac"] == 0).all()


@pytest.mark.parametrize("detector", ALL)
def test_single_sample(detector):
    df = pd.DataFrame({"t_s": [12.5], "valid": [True], "yaw_deg": [1.0], "pitch_deg": [-1.0]})
    # one sample spans no time (no sample interval is known): the clip scope is degenerate
    with pytest.warns(DegenerateWindowWarning):
        res = run_analysis(df, AnalysisParams(detector=detector))
    assert len(res.labels) == 1 and res.labels[0] == "unclassified"
    assert (res.events["type"] == "fixation").sum() == 0
    assert res.features.loc[0, "scope"] == "clip" and np.isnan(res.features.loc[0, "fixation_count"])


@pytest.mark.parametrize("detector", ALL)
def test_empty_table(detector):
    df = pd.DataFrame({"t_s": [], "valid": [], "yaw_deg": [], "pitch_deg": []})
    res = run_analysis(df, AnalysisParams(detector=detector))
    assert len(res.labels) == 0 and len(res.events) == 0 and len(res.features) == 0


@pytest.mark.parametrize("detector", ALL)
def test_gaps_at_start_and_end(detector):
    df, truth = step_signal(rate_hz=500.0 if detector == "ivt" else 60.0)
    n = len(df)
    df.loc[: 9, ["valid"]] = False
    df.loc[n - 10:, ["valid"]] = False
    res = run_analysis(df, AnalysisParams(detector=detector))
    loss = res.events[res.events.type == "loss"]
    t = df.t_s.to_numpy()
    dt = t[1] - t[0]
    h = dt / 2  # each sample stands for half an interval either side of it
    assert loss["onset_s"].tolist() == pytest.approx([t[0] - h, t[n - 10] - h])
    assert loss["offset_s"].tolist() == pytest.approx([t[10] - h, t[-1] + h])
    fx = res.events[res.events.type == "fixation"]
    assert len(fx) == len(truth)
    assert fx["onset_s"].min() >= t[10] - h - 1e-9 and fx["offset_s"].max() <= t[n - 10] - h + 1e-9
    assert (res.labels[:10] == "loss").all() and (res.labels[-10:] == "loss").all()


@pytest.mark.parametrize("detector", ALL)
@pytest.mark.parametrize("times, word", [([0.0, 0.1, 0.05, 0.2, 0.3], "backwards"),
                                         ([0.0, 0.1, 0.1, 0.2, 0.3], "duplicate"),
                                         ([0.0, 0.1, np.nan, 0.2, 0.3], "not a number")])
def test_bad_timestamps_clear_error(detector, times, word):
    df = pd.DataFrame({"t_s": times, "valid": True, "yaw_deg": 0.0, "pitch_deg": 0.0})
    with pytest.raises(AspectusInputError) as err:
        run_analysis(df, AnalysisParams(detector=detector), source="p02_s01.csv")
    msg = str(err.value)
    assert word in msg and "p02_s01.csv" in msg and "row 3" in msg


@pytest.mark.parametrize("detector", ALL)
def test_nan_angles_with_valid_true_are_not_used(detector):
    df, _ = step_signal(rate_hz=60.0)
    df.loc[20:40, "yaw_deg"] = np.nan  # marked valid, but no angle: treated as missing
    res = run_analysis(df, AnalysisParams(detector=detector))
    assert (res.labels[20:41] == "loss").all()
    fx = res.events[res.events.type == "fixation"]
    t = df.t_s.to_numpy()
    assert not ((fx.onset_s < t[41] - 1e-9) & (fx.offset_s > t[20] + 1e-9)).any()
