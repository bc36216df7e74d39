"""bench/noise_figure_gap.py: the error steps inside the coders' fixations, split by whether the detector's
fixations kept them (the measurement behind README's note that the clip's own noise figure reads low)."""
from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "bench"))
sys.path.insert(0, str(Path(__file__).resolve().parent))

import _lund  # noqa: E402
import noise_figure_gap as NG  # noqa: E402


def test_fixation_ids_follow_the_events_even_where_two_fixations_abut():
    events = pd.DataFrame({"type": ["fixation", "saccade", "fixation", "fixation"],
                           "onset_s": [0.05, 0.15, 0.15, 0.25], "offset_s": [0.15, 0.15, 0.25, 0.35]})
    t = np.arange(12) / 30.0  # samples every 33 ms; span edges half-way between samples
    ids = NG.fixation_ids(events, t)
    assert ids.tolist() == [-1, -1, 0, 0, 0, 1, 1, 1, 2, 2, 2, -1]
    assert NG.fixation_ids(events.iloc[:0], t).tolist() == [-1] * 12


def test_an_excursion_of_three_frames_is_cut_out_of_the_detector_fixations_but_not_the_coders():
    """Three 1-s fixations that the coders label whole; the measured gaze has white noise and, in the middle of
    the second fixation, a jump of 6 deg for three frames (100 ms, longer than the 75 ms across which the detector
    joins two fixations) and back. The detector ends its fixation there, so the steps into and out of the jump are
    among the cut ones; the kept steps carry the noise alone. (A one-frame jump is joined into the fixation, and
    counted in the clip's own figure.)"""
    fps, n = 30.0, 90
    t = np.arange(n) / fps
    true_yaw = np.repeat([-5.0, 0.0, 5.0], 30)
    true_pitch = np.zeros(n)
    coder = np.where(np.isin(np.arange(n), [29, 30, 59, 60]), 2, _lund.FIXATION)  # 2: a saccade label
    trial = _lund.LundTrial("synthetic", t, true_yaw, true_pitch, np.ones(n, bool),
                            labels={c: coder.copy() for c in _lund.CODERS})
    rng = np.random.default_rng(3)
    yaw = true_yaw + rng.normal(0, 0.15, n)
    pitch = true_pitch + rng.normal(0, 0.15, n)
    pitch[44:47] += 6.0
    samples = pd.DataFrame({"t_s": t, "valid": True, "yaw_deg": yaw, "pitch_deg": pitch})
    truth = pd.DataFrame({"t_s": t, "yaw_deg": true_yaw, "pitch_deg": true_pitch})
    g = NG.gap(samples, truth, trial)
    assert 2 <= g["cut_steps"] <= 6
    assert g["error_cut_deg"] > 3.0  # the 6-deg jump, out and back
    assert g["error_kept_deg"] < 0.4  # white noise of 0.15 deg per axis: RMS-S2S 0.3
    assert g["error_coder_fix_deg"] > g["error_kept_deg"]
    assert g["noise_33ms_deg"] < 0.4  # the clip's own figure sees only the kept steps
