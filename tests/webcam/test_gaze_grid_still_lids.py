"""The gaze grid's 16.6 px cell with lids that do not follow the gaze (bench/bench_gaze_grid.py, ``16px_still_lids``).

1280 x 720 H.264 at CRF 28, face at 80 cm (the renderer's iris 16.55 px), lids held still, slow lighting drift with a
lateral gradient and slow head drift with rotation; the eyes follow the first 8 s of trial TH34 of Andersson et al.
(2017) (../shared/reference/lund2013). Figures as in tests/_gaze_grid.py.

The default's choice (``iris_combine="auto"``, ``eye_anchor_set="auto"``) goes by the clip's iris size as the limbus
fit reads it (aspectus.webcam.gaze.switch_iris_px). On this cell the face mesh read the iris at 17.35 px (the still
lids inflate it), above the 17.3 px switch then, and took the limbus fit; the limbus fit reads 15.97 px (below the
switch, since put on the fit's scale at 16.8 px), so the default now takes the appearance estimate and the anchors
below and beside the eyes, as the rule was written for an iris of this true size (docs/notes/gaze-measurement.md,
"The switch applied"). Measured (seed 0, RMS-S2S deg / in fixations
deg / pitch r, gain / kappa): 1.83 / 1.53 / 0.927, 0.96 / 0.269 against 2.55 / 2.23 / 0.909, 0.95 / 0.189 with the
mesh's size; the ``limbus`` row on the same head placement 2.66 / 2.43 / 0.908, 0.94 / 0.178.
Issue 15's floors at 12 px and more: RMS-S2S <= 1.5 deg NOT met (1.83), pitch |r| >= 0.95 NOT met (0.927), pitch
gain 0.85-1.15 met (0.96), kappa >= 0.5 NOT met (0.27): guarded at the levels reached.
"""
from __future__ import annotations

import pytest

import _gaze_grid as G

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def cells(lund_dir, tmp_path_factory):
    cond = G.Condition("16px_still_lids", size_px=(1280, 720), distance_mm=800.0, lid_follow=0.0,
                       trial="TH34_img_Europe")
    rows = G.run_condition(cond, tmp_path_factory.mktemp("still_lids"), lund_dir,
                           variants={"default": {}, "limbus": G.VARIANTS["limbus"]})
    return {r["variant"]: r for r in rows}


def test_the_default_chooses_on_the_limbus_fits_size_and_takes_the_appearance_estimate(cells):
    from aspectus.webcam.gaze import SMALL_FACE_BELOW_PX

    d = cells["default"]
    assert 16.0 <= d["iris_px"] <= 17.0  # the renderer's truth (16.55 px)
    assert d["iris_px_measured_from"] == "limbus fit"
    assert d["iris_px_measured"] < d["iris_px"] < SMALL_FACE_BELOW_PX  # the fit read 15.97 px
    assert d["iris_px_mesh"] > d["iris_px"]  # the face mesh read it large (17.35 px)
    assert d["iris_estimate"] == "appearance" and d["eye_anchor_set"] == "below_and_beside"


def test_the_appearance_estimate_is_guarded_at_the_level_reached(cells):
    d, lim = cells["default"], cells["limbus"]
    # 1.83 against 2.66 (the limbus row 2.44 since the side-arc rule is the default: re-estimated from fits that
    # carry it over the first 150 frames, docs/notes/gaze-measurement.md)
    assert d["rms_s2s_deg"] <= 2.0 and d["rms_s2s_deg"] <= 0.8 * lim["rms_s2s_deg"]
    assert d["rms_s2s_fix_deg"] <= 1.7  # 1.53
    assert d["pitch_r"] >= 0.91 and d["pitch_r"] >= lim["pitch_r"]  # 0.927 against 0.908
    assert 0.85 <= d["pitch_gain"] <= 1.15  # 0.96
    assert d["kappa"] >= 0.22  # 0.269 (0.178 with the limbus fit, 0.189 with the mesh's size before)
    assert abs(d["yaw_r"] - lim["yaw_r"]) <= 0.005  # yaw is the limbus fit's either way
