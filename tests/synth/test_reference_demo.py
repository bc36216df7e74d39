"""The simulated lab recording of a demo session: both forms read back to the truth, on the documented clock."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from aspectus.reference import TableMapping, read_reference
from aspectus.synth.lab_recording import write_demo_reference


def _truth(duration_s=6.0, rate=240.0, seed=3):
    t = np.arange(0.0, duration_s, 1.0 / rate)
    rng = np.random.default_rng(seed)
    n_fix = int(duration_s / 0.25) + 1
    yaw = np.repeat(rng.uniform(-8, 8, n_fix), int(0.25 * rate))[:len(t)]
    pitch = np.repeat(rng.uniform(-4, 4, n_fix), int(0.25 * rate))[:len(t)]
    blink = (t > 2.0) & (t < 2.15)
    return pd.DataFrame({"t_s": t, "yaw_deg": yaw, "pitch_deg": pitch, "blink": blink})


def test_demo_reference_files_and_clock(tmp_path):
    truth = _truth()
    paths = write_demo_reference(truth, tmp_path, stem="p01_s01", offset_s=-1.25, rate_hz=250.0, seed=0)
    names = {p.name for p in paths.values()}
    assert "sub-p01_ses-s01_task-reading_recording-eye1_physio.tsv.gz" in names
    assert "sub-p01_ses-s01_task-reading_events.json" in names
    assert "sub-p01_ses-s01_task-reading_recording-eye1_physioevents.tsv.gz" in names
    assert "p01_s01_labtracker.csv" in names and "p01_s01_labtracker_mapping.json" in names
    assert paths["table"].read_text().startswith("# Linden Brook Primary School reading pilot")

    bids = read_reference(paths["physio"])
    table = read_reference(paths["table"], TableMapping.load(paths["mapping"]))
    for rec in (bids, table):
        s = rec.samples
        assert rec.rate_hz == pytest.approx(250.0, rel=1e-6)
        # reference time 0 is clip time -1.25: the reference sample at t_s maps to clip time t_s - 1.25
        clip_t = s["t_s"].to_numpy() - 1.25
        v = s["valid"].to_numpy()
        err = s["yaw_deg"].to_numpy()[v] - np.interp(clip_t[v], truth["t_s"], truth["yaw_deg"])
        inside = (clip_t[v] > 0.05)
        near_step = np.abs(np.diff(np.r_[0, truth["yaw_deg"].to_numpy()]))[
            np.clip(np.searchsorted(truth["t_s"], clip_t[v]), 0, len(truth) - 1)] > 0
        assert np.sqrt(np.mean(err[inside & ~near_step] ** 2)) == pytest.approx(0.2, abs=0.03)  # noise SD 0.2 deg
        # the blink is recorded as missing samples
        blink_clip = (clip_t > 2.02) & (clip_t < 2.13)
        assert not s["valid"].to_numpy()[blink_clip].any()
        assert s["valid"].mean() > 0.9
    np.testing.assert_allclose(bids.samples["yaw_deg"], table.samples["yaw_deg"], atol=1e-9)
    # the lab software logged the webcam start as a marker at clip time 0
    assert bids.messages["label"].tolist() == ["webcam_start"]
    assert bids.messages["t_s"].iloc[0] - 1.25 == pytest.approx(0.0, abs=0.004)
    fix = bids.events[bids.events["type"] == "fixation"]
    assert 18 <= len(fix) <= 26  # 24 fixations of 250 ms in 6 s, plus the held first value, minus the blink
    assert table.events is not None and (table.events["type"] == "fixation").sum() == len(fix)


def test_demo_reference_is_deterministic(tmp_path):
    truth = _truth(duration_s=2.0)
    a = write_demo_reference(truth, tmp_path / "a", stem="p01_s01", seed=5)
    b = write_demo_reference(truth, tmp_path / "b", stem="p01_s01", seed=5)
    for k in a:
        assert a[k].read_bytes() == b[k].read_bytes(), k
