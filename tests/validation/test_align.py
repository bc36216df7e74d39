"""Time alignment: cross-correlation on the hand-coded Lund recordings and on synthetic gaze, markers, drift."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from _lund import degrade, load_trial
from aspectus.validation.align import (apply_alignment, estimate_offset, find_marker, marker_alignment, user_alignment)
from aspectus.errors import AspectusInputError, ParameterError

FRAME_S = 1.0 / 30.0  # one webcam frame


def _samples(t, yaw, pitch, valid=None):
    valid = np.isfinite(yaw) & np.isfinite(pitch) if valid is None else valid
    return pd.DataFrame({"t_s": t, "valid": valid, "yaw_deg": np.where(valid, yaw, np.nan),
                         "pitch_deg": np.where(valid, pitch, np.nan)})


@pytest.mark.parametrize("shift_s", [1.234, -1.234])
def test_lund_trial_against_itself_shifted(lund_dir, shift_s):
    """Andersson et al. (2017) trial as the reference; a 30 Hz noisy copy, shifted, as the webcam."""
    trial = load_trial(lund_dir, "TH34_img_Europe")
    cam = degrade(trial, rate_hz=30.0, noise_rms_deg=0.5, seed=1)
    # webcam clock: clip time = reference time - shift; the clip starts where both exist
    t_clip = cam.t_s - shift_s
    keep = t_clip >= 0
    webcam = _samples(t_clip[keep], 1.1 * cam.yaw_deg[keep] + 5.0, 0.9 * cam.pitch_deg[keep] - 3.0,
                      cam.valid[keep])  # webcam gain and angle-kappa offset do not matter
    t_ref = trial.t_s.copy()
    # with a negative shift the reference starts later than the clip: drop its first 1.234 s
    ref_keep = t_ref >= -shift_s if shift_s < 0 else np.ones(len(t_ref), bool)
    ref = _samples(t_ref[ref_keep] - t_ref[ref_keep][0], trial.yaw_deg[ref_keep], trial.pitch_deg[ref_keep],
                   trial.valid[ref_keep])
    expected = -shift_s + (t_ref[ref_keep][0])  # clip time of the reference's first sample
    al = estimate_offset(webcam, ref, search_range_s=5.0)
    assert abs(al.offset_s - expected) < FRAME_S, (al.offset_s, expected)
    assert al.confidence > 0.25 and al.peak_corr > 0.5
    assert al.method.startswith("cross-correlation")
    d = al.to_dict()
    assert {"offset_s", "confidence", "method", "search_range_s"} <= set(d)
    for sig in ("angle", "speed"):
        assert abs(estimate_offset(webcam, ref, search_range_s=5.0, signal=sig).offset_s - expected) < FRAME_S


def _synthetic(duration_s=60.0, rate=250.0, seed=0):
    rng = np.random.default_rng(seed)
    t = np.arange(0, duration_s, 1 / rate)
    durs = rng.uniform(0.15, 0.5, int(duration_s / 0.15) + 5)
    onsets = np.cumsum(durs)
    idx = np.searchsorted(onsets, t)
    yaw = rng.uniform(-10, 10, len(durs) + 1)[idx]
    pitch = rng.uniform(-5, 5, len(durs) + 1)[idx]
    return t, yaw, pitch


def test_offset_on_synthetic_reading_with_noise_and_gaps():
    t, yaw, pitch = _synthetic()
    rng = np.random.default_rng(2)
    ref_t = t[t >= 0]
    ref = _samples(ref_t, yaw + rng.normal(0, 0.2, len(t)), pitch + rng.normal(0, 0.2, len(t)))
    true_offset = -2.5  # reference started 2.5 s before the clip
    cam_t = np.arange(0, 50, 1 / 30)
    ref_time = cam_t - true_offset
    cy = np.interp(ref_time, t, yaw) * 0.8 + rng.normal(0, 0.7, len(cam_t))
    cp = np.interp(ref_time, t, pitch) * 1.2 + rng.normal(0, 0.7, len(cam_t))
    valid = rng.random(len(cam_t)) > 0.1
    valid[300:360] = False  # a two-second loss
    al = estimate_offset(_samples(cam_t, cy, cp, valid), ref)
    assert abs(al.offset_s - true_offset) < FRAME_S / 2
    assert 40.0 < al.overlap_s < 50.0  # valid overlap: 50 s minus the 10 % lost samples and the 2 s loss
    shifted = apply_alignment(ref, al)
    assert shifted["t_s"].iloc[0] == pytest.approx(al.offset_s)
    assert (shifted["t_ref_s"] == ref["t_s"]).all()


def test_drift_is_estimated():
    t, yaw, pitch = _synthetic(duration_s=130.0, seed=4)
    ref = _samples(t, yaw, pitch)
    drift = 200e-6  # 200 ppm: the clip clock gains 0.2 ms per second of reference time
    cam_t = np.arange(0, 120, 1 / 30)
    # clip time = ref time + offset + drift * ref time  ->  ref time = (clip - offset) / (1 + drift)
    ref_time = (cam_t - (-3.0)) / (1 + drift)
    rng = np.random.default_rng(5)
    cam = _samples(cam_t, np.interp(ref_time, t, yaw) + rng.normal(0, 0.5, len(cam_t)),
                   np.interp(ref_time, t, pitch) + rng.normal(0, 0.5, len(cam_t)))
    al = estimate_offset(cam, ref, estimate_drift=True)
    assert al.drift_s_per_s == pytest.approx(drift, abs=60e-6)
    assert al.drift_ci[0] < al.drift_s_per_s < al.drift_ci[1]
    assert al.offset_s == pytest.approx(-3.0, abs=0.01)
    assert "drift" in al.method


def test_no_common_signal_is_low_confidence():
    rng = np.random.default_rng(9)
    cam_t = np.arange(0, 40, 1 / 30)
    cam = _samples(cam_t, rng.normal(0, 1, len(cam_t)), rng.normal(0, 1, len(cam_t)))
    t, yaw, pitch = _synthetic(duration_s=40.0, seed=8)
    al = estimate_offset(cam, _samples(t, yaw, pitch))
    assert al.confidence < 0.25 or al.peak_corr < 0.2
    assert al.notes and "uncertain" in al.notes[0]


def test_marker_and_user_alignment():
    al = marker_alignment(webcam_marker_s=2.0, reference_marker_s=3.25, label="page_1")
    assert al.offset_s == pytest.approx(-1.25) and al.method == "marker: page_1" and al.confidence == 1.0
    msgs = pd.DataFrame({"label": ["start", "page_1"], "t_s": [0.5, 3.25]})
    assert find_marker(msgs, "PAGE_1") == 3.25
    with pytest.raises(AspectusInputError, match="no marker 'page_9'.*page_1"):
        find_marker(msgs, "page_9")
    assert user_alignment(-1.0).to_clip_time([0.0, 1.0]).tolist() == [-1.0, 0.0]
    with pytest.raises(ParameterError):
        user_alignment(float("nan"))


def test_bad_alignment_input():
    cam = _samples(np.arange(5) / 30, np.zeros(5), np.zeros(5))
    with pytest.raises(AspectusInputError, match="too short"):
        estimate_offset(cam, cam)
    t, yaw, pitch = _synthetic(duration_s=20.0)
    ref = _samples(t, yaw, pitch)
    with pytest.raises(ParameterError, match="signal"):
        estimate_offset(ref, ref, signal="pupil")
    far = ref.assign(t_s=ref["t_s"])
    cam = _samples(np.arange(0, 10, 1 / 30), np.interp(np.arange(0, 10, 1 / 30), t, yaw), np.zeros(300))
    with pytest.raises(AspectusInputError, match="never overlap"):
        estimate_offset(cam, far, search_range_s=30.0, min_overlap_s=15.0)
