"""The gaze grid's 12 px cell with the screen mirrored by the corneas (bench/bench_gaze_grid.py --reflection).

640 x 480 at 550 mm (iris 12.1 px), H.264 CRF 28, lids that follow vertical gaze, lighting drift with a lateral
gradient, head drift and turns; the eyes follow the first 8 s of trial UH21 of the hand-coded recordings
(Andersson et al. 2017, ../shared/reference/lund2013); a 50 x 30 cm screen 16 cm below the camera reflected by
each cornea (aspectus.synth.frame.CornealReflection). Figures against the renderer's truth (tests/_gaze_grid.py);
docs/notes/gaze-measurement.md ("A screen mirrored by the corneas").
"""
from __future__ import annotations

import pytest

import _gaze_grid as G

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def cell(lund_dir, tmp_path_factory):
    cond = G.Condition("12px_crf28_reflection", size_px=(640, 480), distance_mm=550.0, trial="UH21_img_Rome",
                       corneal_reflection=True)
    rows = G.run_condition(cond, tmp_path_factory.mktemp("reflection"), lund_dir, variants={"default": {}},
                           pipeline_gaze={"fill_reflections": True})
    return rows[0]


@pytest.fixture(scope="module")
def default_cell(lund_dir, tmp_path_factory):
    # drawn at pixel centres on purpose: on that picture (the renderer's before 2026-12-05) this cell is a known case
    # of an appearance estimate blended away to weight 0; drawn by pixel area the blend keeps it (share 0.9), and
    # the test is about how such a run is reported, not about a precision level
    cond = G.Condition("12px_crf28_reflection", size_px=(640, 480), distance_mm=550.0, trial="UH21_img_Rome",
                       corneal_reflection=True, iris_sampling="point")
    return G.run_condition(cond, tmp_path_factory.mktemp("reflection_default"), lund_dir,
                           variants={"default": {}})[0]


def test_an_appearance_estimate_that_carries_no_weight_is_reported_as_the_limbus_fit(default_cell):
    """On this cell (12.1 px, below the switch) the appearance regression was fitted on one eye only (the other had
    146 open-eye frames with a limbus fit, fewer than the 150 needed) and its blend with the limbus fit chose weight 0
    (the fit alone agreed better with the other eye), so the gaze is the limbus fit's: RMS-S2S 4.01 deg against 4.02
    for the ``limbus`` row (grid, seed 0, 2026-12-05). The run must say so rather than name the appearance
    estimate (run.json's iris_estimate, the verdict and the app's line read ``used``)."""
    from aspectus.webcam.gaze import describe_iris_estimate

    d = default_cell
    assert d["iris_px_measured"] < 12.7
    assert d["appearance_share"] == 0.0
    assert d["iris_estimate"] == "limbus"
    assert "no weight" in d["iris_estimate_reason"]
    text = describe_iris_estimate({"setting": "auto", "used": d["iris_estimate"], "iris_px": d["iris_px_measured"],
                                   "reason": d["iris_estimate_reason"]})
    assert text.startswith("Iris height from: circle fit") and "agreed less between the two eyes" in text


def test_with_fill_reflections_the_reflection_is_filled_before_the_face_mesh(cell):
    """The face mesh read the reflection as part of the eye: on this cell its iris point's horizontal error SD on
    one eye went from 0.38 px (the same cell without the reflection) to 1.15 px, and the default chain measured
    RMS-S2S 4.01 deg, yaw r 0.891, pitch r 0.657, sample kappa -0.005 against the coders. With the reflections
    near the last frame's irises filled before the mesh runs (``GazeParams(fill_reflections=True)``, an option:
    aspectus.webcam.limbus.fill_iris_reflections): 2.55 deg, yaw r 0.967, pitch r 0.707, kappa 0.247 (without the
    reflection: 1.68 deg, 0.967, 0.916, 0.277). The default (no fill) stays at the figures before. Those figures
    are on point-sampled irises; drawn by pixel area (the renderer's default since 2026-12-05): no fill 2.47 deg,
    yaw r 0.904, pitch r 0.842, kappa 0.209; with the fill 1.61 deg, yaw r 0.976, pitch r 0.832 (gain 0.75), kappa
    0.325.
    Issue 15's 12 px floors (RMS-S2S <= 1.5 deg, |r| >= 0.95, gains 0.85-1.15, kappa >= 0.5) are NOT met here,
    nor on the cell without the reflection; the levels reached are guarded."""
    assert 11.5 <= cell["iris_px"] <= 12.7
    assert cell["rms_s2s_deg"] <= 3.0
    assert cell["yaw_r"] >= 0.95
    assert cell["pitch_r"] >= 0.65 and cell["pitch_gain"] >= 0.5
    assert cell["kappa"] >= 0.15
