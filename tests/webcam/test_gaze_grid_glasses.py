"""The gaze grid's glasses and mirror cell (bench/bench_gaze_grid.py): issue 15's floors at iris >= 12 px, the
level reached guarded.

1280 x 720 at 800 mm (iris 16.5 px), H.264 CRF 28, lids that follow vertical gaze, lighting drift with a lateral
gradient, head drift and turns, spectacles, mirrored picture; the eyes follow the first 8 s of trial UL23 of the
hand-coded recordings (Andersson et al. 2017, ../shared/reference/lund2013). Figures against the renderer's truth
(tests/_gaze_grid.py). The cell split link by link: docs/notes/gaze-measurement.md ("The glasses cell split link
by link").

Measured first with the iris drawn at pixel centres; since the renderer draws it by pixel area (2026-12-05;
docs/notes/gaze-measurement.md, "The renderer's aliased small irises") re-measured and guarded at: RMS-S2S 1.51
deg, pitch r 0.945 with gain 1.19, yaw r 0.893 with gain 0.90; with the true iris centres 0.36 deg and yaw r
0.889.
"""
from __future__ import annotations

import pytest

import _gaze_grid as G

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def cell(lund_dir, tmp_path_factory):
    cond = G.Condition("16px_glasses_mirror", size_px=(1280, 720), distance_mm=800.0, glasses=True, mirror=True,
                       face="astronaut", trial="UL23_img_Europe")
    rows = G.run_condition(cond, tmp_path_factory.mktemp("glasses"), lund_dir, variants={"default": {}} | G.TRUE_IRIS)
    return {r["variant"]: r for r in rows}


def test_noise_and_pitch_guarded_at_the_level_reached(cell):
    d = cell["default"]
    assert 16.0 <= d["iris_px"] <= 17.0
    # Issue 15's floors RMS-S2S <= 1.5 deg and pitch |r| >= 0.95 were met on point-sampled irises since a frame
    # where either eye reads closed is a blink (measured 1.31 deg, r 0.959; before, 2.30 and 0.936: three
    # closed-lid frames the two eyes' mean aperture read open were valid gaze 14-22 deg off,
    # tests/webcam/test_blink_either_eye.py). On area-drawn irises NOT met, just: 1.51 deg, r 0.945 - guarded at
    # the reached level.
    assert d["rms_s2s_deg"] <= 1.65
    assert d["pitch_r"] >= 0.93
    # pitch gain: floor 0.85-1.15 NOT met (measured 1.19; 1.155 and 1.14 on point-sampled irises): guarded
    assert 0.85 <= d["pitch_gain"] <= 1.25


def test_yaw_guarded_below_the_floor_and_not_the_localisers(cell):
    d, t = cell["default"], cell["true_iris"]
    # NOT met: issue 15's yaw floor |r| >= 0.95 (measured r 0.893, gain 0.90 - the gain inside 0.85-1.15; point-
    # sampled irises r 0.841, gain 0.88). The eye anchors follow the spectacle rims as the head turns; with the
    # renderer's skin points in their place the yaw r is 0.992 (notes). A perfect iris localiser leaves it where
    # it is (true iris 0.889; point-sampled 0.841):
    assert d["yaw_r"] >= 0.80 and 0.85 <= d["yaw_gain"] <= 1.15
    assert abs(t["yaw_r"] - d["yaw_r"]) <= 0.03
    # the localiser is what the noise is: with the true iris centres 0.36 deg (0.38 point-sampled)
    assert t["rms_s2s_deg"] <= 0.6
