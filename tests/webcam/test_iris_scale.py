"""The iris's size in pixels as the gaze chain's metric scale (aspectus.webcam.gaze, step 1; issue 15).

Every gaze angle is inversely proportional to the iris diameter the scale is taken from (11.7 mm visible
iris, Ruefer, Schroeder & Erb 2005 - from memory): a diameter read 6 % too large shrinks yaw and pitch by
6 %. On rendered clips the face mesh reads the iris 1-9 % too large, the limbus fit within 1 % too large to
4 % too small (docs/notes/gaze-measurement.md); these tests check the chain's arithmetic on a constructed
clip whose geometry is known exactly, and the limbus fit's diameter on a drawn disc.
"""
from __future__ import annotations

import numpy as np
import pytest

from aspectus.geometry import angles_to_gaze_vector, camera_matrix, gaze_vector_to_angles
from aspectus.webcam.gaze import (IRIS_DIAMETER_MM, IRIS_PLANE_RADIUS_MM, MIN_SCALE_FITS, GazeParams, estimate_gaze,
                                  limbus_iris_scale)
from aspectus.webcam.headpose import face_model
from aspectus.webcam.landmarks import LEFT_EYE_CORNERS, RIGHT_EYE_CORNERS

from _drawn_eye import lid_line_points


def _project(K, X):
    return np.c_[K[0, 0] * X[:, 0] / X[:, 2] + K[0, 2], K[1, 1] * X[:, 1] / X[:, 2] + K[1, 2]]


def _constructed_clip(n=300, z_mm=600.0, seed=0):
    """A model-size head facing the camera at ``z_mm``, still; the eyes sweep +-20 deg yaw and +-12 deg pitch.

    The iris centres are the eyeball model's own (the iris plane's centre 10.5 mm from the eyeball centre along
    the gaze), projected by a pinhole camera; the eye corners are the model's, so the chain's eyeball centres
    are the true ones. Returns estimate_gaze's inputs and the true (yaw, pitch) and iris diameters (N, 2).
    """
    K = camera_matrix(1280, 720, 60.0)
    model = face_model()
    t_s = np.arange(n) / 30.0
    yaw = 20.0 * np.sin(2 * np.pi * t_s / 4.0)
    pitch = 12.0 * np.sin(2 * np.pi * t_s / 2.7 + 1.0)
    g = angles_to_gaze_vector(yaw, pitch)  # (N, 3), camera frame = head frame (no rotation)
    t = np.array([0.0, 0.0, z_mm])
    centres = np.stack([model.eye_right_mm, model.eye_left_mm]) + t  # (2, 3)
    iris3 = centres[None] + IRIS_PLANE_RADIUS_MM * g[:, None, :]  # (N, 2, 3)
    iris_px = np.stack([_project(K, iris3[:, e]) for e in range(2)], axis=1)
    true_diam = K[0, 0] * IRIS_DIAMETER_MM / np.linalg.norm(iris3, axis=2)  # (N, 2)
    corners = np.stack([_project(K, model.points_mm[list(c)] + t) for c in (RIGHT_EYE_CORNERS, LEFT_EYE_CORNERS)])
    rng = np.random.default_rng(seed)
    kw = dict(K=K, found=np.ones(n, bool), R=np.repeat(np.eye(3)[None], n, axis=0), t=np.repeat(t[None], n, axis=0),
              iris_px=iris_px, corners_px=np.repeat(corners[None], n, axis=0), ear=np.full((n, 2), 0.3), t_s=t_s)
    true_yaw, true_pitch = gaze_vector_to_angles(g)
    return kw, (true_yaw, true_pitch), true_diam, rng


def _gain(est, truth):
    ok = np.isfinite(est)
    return float(np.polyfit(truth[ok], est[ok], 1)[0])


def test_gaze_gain_follows_the_scale_source():
    """The face mesh's diameter 6 % too large (as it reads on rendered clips), the limbus fit's right but noisy
    and missing in a fifth of the eye-frames: with the limbus scale (the default) yaw and pitch gains are 1,
    with the mesh's they are 1 / 1.06; the head's distance likewise."""
    kw, (yaw, pitch), true_diam, rng = _constructed_clip()
    mesh = 1.06 * true_diam
    limbus = true_diam * (1 + rng.normal(0, 0.03, true_diam.shape))
    limbus[rng.random(true_diam.shape) < 0.2] = np.nan
    out = {}
    for scale in ("limbus", "mesh"):
        cols, info = estimate_gaze(**kw, iris_diam_px=mesh, limbus_diam_px=limbus,
                                   params=GazeParams(iris_scale=scale, decouple_reference=False))
        out[scale] = (_gain(cols["yaw_deg"], yaw), _gain(cols["pitch_deg"], pitch),
                      float(np.nanmedian(cols["distance_mm"])), info["iris_scale"])
    # 1 / 1.06 = 0.943: the mesh's scale shrinks both axes by the same factor
    assert out["mesh"][0] == pytest.approx(1 / 1.06, abs=0.01) and out["mesh"][1] == pytest.approx(1 / 1.06, abs=0.01)
    assert out["limbus"][0] == pytest.approx(1.0, abs=0.01) and out["limbus"][1] == pytest.approx(1.0, abs=0.01)
    # the head origin (midway between the eyeball centres) is at 600 mm; the mesh's scale puts it 6 % nearer
    assert out["limbus"][2] == pytest.approx(600.0, rel=0.005)
    assert out["mesh"][2] == pytest.approx(600.0 / 1.06, rel=0.005)
    rec, rec_mesh = out["limbus"][3], out["mesh"][3]
    assert rec["used"] == "limbus" and rec_mesh["used"] == "mesh" and rec_mesh["reason"] == "as chosen"
    assert rec["limbus_to_mesh"] == pytest.approx(1 / 1.06, abs=0.005)
    # both clip medians are recorded whichever is used
    for r in (rec, rec_mesh):
        assert r["mesh_median_px"] == pytest.approx(1.06 * np.median(true_diam), rel=0.01)
        assert r["limbus_median_px"] == pytest.approx(np.median(true_diam), rel=0.01)


def test_scale_falls_back_to_the_mesh_with_too_few_limbus_fits():
    kw, _, true_diam, rng = _constructed_clip(n=120)
    mesh = 1.06 * true_diam
    limbus = np.full_like(true_diam, np.nan)
    keep = rng.choice(limbus.size, MIN_SCALE_FITS - 1, replace=False)
    limbus.flat[keep] = true_diam.flat[keep]
    cols_few, info = estimate_gaze(**kw, iris_diam_px=mesh, limbus_diam_px=limbus, params=GazeParams())
    assert info["iris_scale"]["used"] == "mesh"
    assert str(MIN_SCALE_FITS) in info["iris_scale"]["reason"]
    cols_mesh, _ = estimate_gaze(**kw, iris_diam_px=mesh, limbus_diam_px=None, params=GazeParams())
    np.testing.assert_array_equal(cols_few["yaw_deg"], cols_mesh["yaw_deg"])
    # the samples' iris_diameter_px stays the face mesh's (the precision tier is measured on it)
    np.testing.assert_allclose(cols_few["iris_diameter_px"], mesh.mean(axis=1))


def test_limbus_iris_scale_is_a_median_ratio_over_open_eye_frames():
    n = 200
    mesh = np.full((n, 2), 13.0)
    mesh[:, 0] = np.linspace(12.0, 16.0, n)  # the head coming nearer: the ratio, not the level, is taken
    lim = mesh * 0.93
    lim[::10] = mesh[::10] * 1.3  # a tenth of outliers: the median holds
    lim[:, 1][5:15] = np.nan
    ok = np.ones(n, bool)
    ok[:50] = False
    lim[:50] = 3.0  # closed-eye frames are not counted
    f, rec = limbus_iris_scale(mesh, lim, ok)
    assert f == pytest.approx(0.93, abs=1e-9)
    assert rec["used"] == "limbus" and rec["limbus_fits"] == 2 * 150
    f_mesh, rec_mesh = limbus_iris_scale(mesh, lim, ok, setting="mesh")
    assert f_mesh == 1.0 and rec_mesh["limbus_to_mesh"] == pytest.approx(0.93, abs=1e-9)
    f_none, rec_none = limbus_iris_scale(mesh, None, ok)
    assert f_none == 1.0 and rec_none["used"] == "mesh" and "refine_iris" in rec_none["reason"]


def test_unknown_scale_source_is_refused():
    from aspectus.errors import ParameterError

    with pytest.raises(ParameterError, match="iris_scale"):
        GazeParams(iris_scale="pupil")


def test_limbus_fit_measures_a_drawn_disc_the_mesh_reads_too_large():
    """A dark disc of known radius between two lids that cover its top and bottom; the mesh's diameter handed
    in 8 % too large. The fitted circle's diameter (diameters=True) comes back near the drawn one: measured
    3.7 % small at an 8.5 px iris, 1.0 % at 12 px and 0.2 % at 25 px (the edge of a blurred disc moves
    inwards by about sigma^2 / 2r, and the fit smooths the picture by a Gaussian of sigma 0.8 px), each
    far nearer than the mesh's 8 %."""
    from aspectus.webcam.limbus import limbus_centres_many

    for r, tol in ((4.25, 0.05), (6.0, 0.02), (12.5, 0.01)):  # 8.5, 12 and 25 px irises
        centre = np.array([45.3, 31.6])
        w, h = 120, 80
        yy, xx = np.mgrid[0:h, 0:w].astype(float)
        iris = np.clip(r - np.hypot(xx - centre[0], yy - centre[1]) + 0.5, 0, 1)
        upper, lower = 0.8 * r, 0.7 * r
        opening = np.clip(np.minimum(yy - (centre[1] - upper), centre[1] + lower - yy) + 0.5, 0, 1)
        opening *= np.abs(xx - centre[0]) < 2.4 * r
        img = np.clip(150.0 * (1 - opening) + (220.0 * (1 - iris) + 60.0 * iris) * opening, 0, 255).astype(np.uint8)
        pts = lid_line_points(centre, 2.4 * r, upper, lower)
        item = (img, pts, np.array([centre + [0.3, -0.2], [np.nan, np.nan]]), np.array([2 * r * 1.08, np.nan]))
        (c, fitted, diam), = limbus_centres_many([item], diameters=True)
        assert fitted[0] and not fitted[1] and np.isnan(diam[1])
        assert diam[0] == pytest.approx(2 * r, rel=tol), (r, diam)


@pytest.mark.slow
@pytest.mark.parametrize("name, size, dist, face, trial, seed", [
    ("12px", (640, 480), 550.0, "astronaut", "TL20_img_konijntjes", 21),
    ("8.5px", (640, 480), 780.0, "hopper", "TH34_img_Europe", 22),
])
def test_rendered_clip_records_both_scales_and_the_limbus_level(lund_dir, tmp_path, name, size, dist, face, trial,
                                                                 seed):
    """A rendered classroom clip (H.264 CRF 28, lids following, head drift and turns; seeds and trial/face pairs
    that no measurement used): run.json's ``gaze_model.iris_scale`` holds both clip medians and their ratio
    and says the limbus fit was used; the limbus fit reads the iris smaller than the face mesh and within
    0.93-1.02 of the rendered truth. Measured here: 12 px mesh 1.040, limbus 0.962 of the truth (the limbus
    fit nearer); 8.5 px mesh 1.020, limbus 0.945 (the mesh nearer: on twelve dev clips it read 1.008-1.086,
    the limbus fit 0.957-1.009, nearer on ten; docs/notes/gaze-measurement.md)."""
    import _gaze_grid as G

    from aspectus.webcam.pipeline import ProcessParams, extract_samples

    cond = G.Condition(name, size_px=size, distance_mm=dist, face=face, trial=trial, seed=seed, duration_s=4.0)
    res, _ = G.render_condition(cond, tmp_path, lund_dir)
    _, meta = extract_samples(res.path, params=ProcessParams())
    rec = meta["gaze_model"]["iris_scale"]
    truth = res.truth.loc[res.truth["lid_closure"] < 0.2, "iris_diameter_px"].median()
    assert rec["setting"] == "limbus" and rec["used"] == "limbus", rec
    assert rec["limbus_fits"] >= MIN_SCALE_FITS
    assert rec["limbus_to_mesh"] == pytest.approx(rec["limbus_median_px"] / rec["mesh_median_px"], rel=0.02)
    assert rec["limbus_to_mesh"] < 1.0
    assert 0.93 <= rec["limbus_median_px"] / truth <= 1.02, (rec, truth)
    assert 0.98 <= rec["mesh_median_px"] / truth <= 1.10, (rec, truth)
