"""tests/_gaze_grid.py's precision figures inside the coders' fixations, on errors with known statistics."""
from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pytest

import _gaze_grid as G
import _lund


def _trial(t_s, fixation):
    lab = np.where(fixation, _lund.FIXATION, _lund.SACCADE)
    return SimpleNamespace(t_s=np.asarray(t_s, float), labels={c: lab.copy() for c in _lund.CODERS})


def test_fixation_sd_is_unbiased_for_short_fixations():
    """White noise of SD s per axis about each fixation's own mean: the pooled 2-D SD reads s sqrt(2) (the
    2-D SD of Holmqvist, Nystrom & Mulvey 2012; n - 1 per fixation, the textbook unbiased variance, from
    memory), whatever the fixations' length; the RMS-S2S reads 2 s (successive differences of independent
    samples, variance 2 s^2 per axis). Fixations of 4 frames: dividing by n read the first sqrt(3/4) = 0.87 of it."""
    rng = np.random.default_rng(0)
    s, n_fix, length = 0.5, 3000, 4
    fix = np.tile(np.r_[np.ones(length, bool), False], n_fix)  # 4 frames of fixation, one of saccade
    ey, ep = rng.normal(0, s, len(fix)), rng.normal(0, s, len(fix))
    ey += np.repeat(rng.normal(0, 3, n_fix), length + 1)  # each fixation's own offset (removed by its mean)
    ok = np.ones(len(fix), bool)
    out = G._within_fixations(ey, ep, ok, {"a": fix, "b": fix})
    assert out["rms_fix_deg"] == pytest.approx(s * np.sqrt(2), rel=0.02)
    assert out["rms_s2s_fix_deg"] == pytest.approx(2 * s, rel=0.02)


def test_a_saccade_between_two_frames_ends_the_fixation():
    """30 frames a second over labels at 500 Hz: a 14 ms saccade between frames 9 and 10 leaves both frames
    labelled fixation, but the step between them crosses from one fixation to the next (a 2 deg step of the
    error, as a gain of 0.8 makes of a 10 deg saccade); it is not a step inside a fixation, and the two
    fixations have their own means."""
    fine_t = np.arange(0, 20 / 30, 0.002)
    fixation = ~((fine_t > 9 / 30 + 0.01) & (fine_t < 9 / 30 + 0.024))
    trial = _trial(fine_t, fixation)
    t = np.arange(20) / 30
    coders = G._labels_at(trial, t)
    assert all(m.all() for m in coders.values())  # the frames alone do not see the saccade
    breaks = G._fixation_breaks(trial, t)
    assert np.flatnonzero(breaks).tolist() == [9]
    ey = np.where(np.arange(20) < 10, 0.0, 2.0) + 0.1 * (-1.0) ** np.arange(20)  # +-0.1 deg about each mean
    ep = np.zeros(20)
    out = G._within_fixations(ey, ep, np.ones(20, bool), coders, breaks)
    assert out["rms_s2s_fix_deg"] == pytest.approx(0.2)  # every step inside a fixation is 0.2 deg
    # SD about each fixation's mean: 10 samples of +-0.1, n - 1 = 9 per fixation
    assert out["rms_fix_deg"] == pytest.approx(np.sqrt(20 * 0.01 / 18))
    # without the breaks the crossing step (2.2 deg) and one mean over both fixations enter
    merged = G._within_fixations(ey, ep, np.ones(20, bool), coders)
    assert merged["rms_s2s_fix_deg"] > 0.4 and merged["rms_fix_deg"] > 0.9
