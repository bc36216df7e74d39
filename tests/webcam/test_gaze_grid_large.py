"""The gaze grid's large-face cell: the default (the appearance estimate) meets issue 15's floors; with the limbus fit
(``iris_combine="limbus"``) frames where the fit fails must not take the face mesh's raw iris point.

One cell of bench/bench_gaze_grid.py: 1280 x 720 H.264 at CRF 28, face at 53 cm (iris 25 px), lids that follow
vertical gaze, slow lighting drift with a lateral gradient and slow head drift with rotation; the eyes follow the
first 8 s of trial TL20 of Andersson et al. (2017) (../shared/reference/lund2013). Figures as in
tests/_gaze_grid.py. Issue 15's floors: RMS-S2S <= 1.5 deg, pitch |r| >= 0.95, gain 0.85-1.15.

Decomposed against the renderer's truth, the error's frame-to-frame RMS of 2.02 deg (pitch gain 0.81) came to a
large part from the 7 + 34 frames (right, left eye) where the limbus fit failed: those took the face mesh's iris
point, 2-3 px off vertically there, so the gaze stepped by 5-8 deg each time the source changed. With the true
centres in those frames the figures were 1.60 deg and gain 0.89; the gaps bridged in the head
(:func:`aspectus.webcam.gaze.fill_iris_gaps`) read 1.53 deg and 0.87. The rest is the limbus fit's own vertical
error on fitted frames (SD 0.75 / 1.09 px right / left; docs/notes/gaze-measurement.md). Those figures are the
limbus fit's without the side-arc rule, which the default now applies (its own test below).

All of the above was measured with the iris drawn at pixel centres. Re-measured since the renderer draws it by
pixel area (2026-12-05; docs/notes/gaze-measurement.md, "The renderer's aliased small irises"), the guards below
hold the levels measured so: with the raw mesh point in the 7 + 30 failed frames 2.28 deg (pitch r 0.948, gain
0.89), bridged 1.78 (0.959, 0.95), with the side-arc rule 1.69 (0.964, 0.91); issue 15's floors RMS-S2S <= 1.5 and
pitch |r| >= 0.95 with gain 0.85-1.15: the pitch floor met, the noise floor NOT met on area-drawn irises (it was,
1.39, on point-sampled ones) by the limbus fit, which was the default at this size until 2026-12-05. The default
since, the appearance estimate at every size, reads 1.27 deg (pitch r 0.970, gain 0.94): the floor met (last test).
"""
from __future__ import annotations

import numpy as np
import pytest

import _gaze_grid as G

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def cell(lund_dir, tmp_path_factory):
    from aspectus.webcam.gaze import GazeParams
    from aspectus.webcam.pipeline import ProcessParams, extract_samples

    cond = G.Condition("25px", size_px=(1280, 720), distance_mm=530.0, trial="TL20_img_konijntjes", face="hopper")
    res, trial = G.render_condition(cond, tmp_path_factory.mktemp("large"), lund_dir)
    with G.gaze_inputs() as kw:  # the limbus fit without the side-arc rule (the default before it), as measured
        samples, meta = extract_samples(res.path, params=ProcessParams(gaze=GazeParams(iris_combine="limbus",
                                                                                       side_arcs=False)))
    return dict(kw), samples, meta, res.truth, trial, res.path


def test_frames_without_a_limbus_fit_are_bridged_not_taken_from_the_raw_mesh_point(cell):
    from aspectus.webcam.gaze import GazeParams

    kw, samples, meta, truth, trial, _ = cell
    assert meta["gaze_model"]["iris_estimate"]["used"] == "limbus"
    failed = ~np.isfinite(kw["limbus_diam_px"]) & kw["found"][:, None]
    assert failed.sum() >= 10  # measured 7 + 34 frames
    assert np.isnan(kw["iris_px"][failed]).all()  # marked missing, not the mesh point
    gaps = meta["gaze_model"]["iris_gaps"]
    assert gaps["left"]["filled_frames"] + gaps["right"]["filled_frames"] >= 20  # measured 7 + 25
    now = G.measure(samples, truth, trial)
    raw = np.where(np.isfinite(kw["iris_px"]), kw["iris_px"], kw["iris_mesh_px"])  # the mesh point in the gaps
    before = G.measure(G.with_gaze(samples, **(kw | {"iris_px": raw}),
                                   params=GazeParams(iris_combine="limbus", side_arcs=False)), truth, trial)
    # measured 2.28 -> 1.78 deg, pitch r 0.948 -> 0.959, gain 0.89 -> 0.95 (point-sampled irises: 2.02 -> 1.53,
    # 0.969 -> 0.977, 0.81 -> 0.87; issue 15's floor RMS-S2S <= 1.5 is not met: the limbus fit's own vertical
    # error on fitted frames remains)
    assert now["rms_s2s_deg"] <= 0.85 * before["rms_s2s_deg"]
    assert now["rms_s2s_deg"] <= 1.9
    assert now["pitch_gain"] >= 0.85 and now["pitch_gain"] >= before["pitch_gain"] + 0.03
    assert now["pitch_r"] >= 0.95
    assert now["yaw_r"] >= 0.98 and 0.9 <= now["yaw_gain"] <= 1.1  # measured 0.992, gain 1.01


def test_side_arc_rule_lowers_the_limbus_fits_noise_on_this_cell(cell):
    """With the limbus fit, the default ``GazeParams(side_arcs=True)``: the limbus candidates within 30 deg of the horizontal count as
    rim (aspectus.webcam.limbus.SIDE_DEG), which keeps the one-sided fit off its second solution through the lower
    lid's junction. The default by the rules written before measuring (docs/notes/gaze-measurement.md,
    2026-12-05): it lowered RMS-S2S on all four 25 px grid cells and six held-out dev clips, and kept issue 4's
    per-window fixation-count r over eight fresh draws of the end-to-end clip. Measured here against the fit
    without it (the fixture's): 1.78 -> 1.69 deg, pitch r 0.959 -> 0.964, gain 0.95 -> 0.91 (point-sampled irises:
    1.53 -> 1.39 deg, issue 15's floor RMS-S2S <= 1.5 met then; on area-drawn irises NOT met)."""
    from aspectus.webcam.gaze import GazeParams
    from aspectus.webcam.pipeline import ProcessParams, extract_samples

    _, samples, _, truth, trial, path = cell
    assert GazeParams().side_arcs
    plain = G.measure(samples, truth, trial)
    side, meta = extract_samples(path, params=ProcessParams(gaze=GazeParams(iris_combine="limbus")))
    assert meta["gaze_model"]["iris_estimate"]["used"] == "limbus"
    got = G.measure(side, truth, trial)
    assert got["rms_s2s_deg"] <= 1.8 and got["rms_s2s_deg"] <= plain["rms_s2s_deg"] - 0.05
    assert got["pitch_r"] >= 0.955 and got["pitch_gain"] >= 0.85
    assert got["yaw_r"] >= 0.98 and 0.9 <= got["yaw_gain"] <= 1.1


def test_the_default_appearance_estimate_meets_the_noise_floor_on_this_cell(cell):
    """Issue 15's floors on this cell with the default: RMS-S2S <= 1.5 deg, pitch |r| >= 0.95 with gain 0.85-1.15.
    Measured (2026-12-05, area-drawn irises): 1.27 deg, pitch r 0.970, gain 0.94, yaw r 0.992, kappa 0.452 against
    the limbus fit's 1.69 / 0.964 / 0.91 / 0.992 / 0.471 (bench/bench_gaze_grid.py --appearance; over 16 draws of
    the four 25 px cells RMS-S2S 1.34 -> 0.79 deg on average, lower on all 16: docs/notes/gaze-measurement.md)."""
    from aspectus.webcam.pipeline import extract_samples

    _, limbus_samples, _, truth, trial, path = cell
    samples, meta = extract_samples(path)
    assert meta["gaze_model"]["iris_estimate"]["used"] == "appearance"
    got = G.measure(samples, truth, trial)
    assert got["rms_s2s_deg"] <= 1.5
    assert got["pitch_r"] >= 0.95 and 0.85 <= got["pitch_gain"] <= 1.15
    assert got["yaw_r"] >= 0.98 and 0.9 <= got["yaw_gain"] <= 1.1
    # quieter than the fixture's limbus fit on the same clip (1.78 deg without the side-arc rule) by a clear margin
    assert got["rms_s2s_deg"] <= G.measure(limbus_samples, truth, trial)["rms_s2s_deg"] - 0.3
