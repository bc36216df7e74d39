"""I-DT (Salvucci & Goldberg 2000) on constructed signals with known fixations."""
from __future__ import annotations

import numpy as np
import pytest
from _signals import PLAN, step_signal

from aspectus.events.cleanup import clean_samples
from aspectus.events.detect import detect_idt
from aspectus.errors import ParameterError


@pytest.mark.parametrize("rate_hz", [30.0, 60.0, 500.0])
def test_exact_onsets_and_offsets(rate_hz):
    df, truth = step_signal(rate_hz=rate_hz)
    cl = clean_samples(df)
    c = detect_idt(cl.t_s, cl.yaw_deg, cl.pitch_deg, cl.usable, noise_rms_s2s_deg=cl.noise_rms_s2s_deg)
    assert list(zip(c.starts.tolist(), c.ends.tolist())) == [(a, b) for a, b, _, _ in truth]


def test_threshold_adapts_to_noise():
    # noise 0.03 deg per axis -> floor 1.5 deg; noise 0.5 deg -> 3.5 x RMS-S2S (= 3.5 x 2 x 0.5 = 3.5 deg, +-15 %)
    for sd, expect in ((0.03, 1.5), (0.5, 3.5)):
        df, _ = step_signal(rate_hz=30.0, noise_sd_deg=sd, seed=1, plan=PLAN * 8)
        cl = clean_samples(df)
        c = detect_idt(cl.t_s, cl.yaw_deg, cl.pitch_deg, cl.usable, noise_rms_s2s_deg=cl.noise_rms_s2s_deg)
        assert c.info["dispersion_deg"] == pytest.approx(expect, rel=0.15)
    c = detect_idt(cl.t_s, cl.yaw_deg, cl.pitch_deg, cl.usable, dispersion_deg=2.5)
    assert c.info["dispersion_deg"] == 2.5


def test_window_never_spans_a_gap():
    df, truth = step_signal(rate_hz=60.0)
    df.loc[5:9, "valid"] = False  # 83 ms loss inside the first fixation
    cl = clean_samples(df)
    c = detect_idt(cl.t_s, cl.yaw_deg, cl.pitch_deg, cl.usable, noise_rms_s2s_deg=0.06, min_duration_ms=100)
    pairs = list(zip(c.starts.tolist(), c.ends.tolist()))
    assert pairs[0] == (10, truth[0][1])  # the 5 samples before the gap are shorter than 100 ms
    c = detect_idt(cl.t_s, cl.yaw_deg, cl.pitch_deg, cl.usable, noise_rms_s2s_deg=0.06, min_duration_ms=60)
    pairs = list(zip(c.starts.tolist(), c.ends.tolist()))
    assert pairs[:2] == [(0, 5), (10, truth[0][1])]  # 5 samples at 60 Hz = 83 ms >= 60 ms: a fixation of its own
    for s, e in pairs:
        assert cl.usable[s:e].all()


def test_too_short_fixation_not_found():
    plan = ((0.5, 0.0, 0.0), (0.05, 6.0, 0.0), (0.5, 0.0, 5.0))
    df, truth = step_signal(rate_hz=500.0, plan=plan)
    cl = clean_samples(df)
    c = detect_idt(cl.t_s, cl.yaw_deg, cl.pitch_deg, cl.usable, noise_rms_s2s_deg=0.06, min_duration_ms=100)
    assert list(zip(c.starts.tolist(), c.ends.tolist())) == [truth[0][:2], truth[2][:2]]


def test_bad_parameters():
    t = np.arange(10) / 30.0
    z = np.zeros(10)
    with pytest.raises(ParameterError):
        detect_idt(t, z, z, np.ones(10, bool), dispersion_deg=-1.0)
    with pytest.raises(ParameterError):
        detect_idt(t, z, z, np.ones(10, bool), min_duration_ms=0)
