"""bench/gaze_picture_limit.py: the model fit that measures how precise the gaze could be from the decoded picture.

The fit and its bound are checked against estimation theory: for a picture with independent Gaussian noise the
least-squares (maximum-likelihood) estimate of a few parameters is unbiased and its variance reaches the
Cramér-Rao bound where the picture is linear in them over the noise's reach (Kay 1993, *Fundamentals of Statistical
Signal Processing: Estimation Theory*, ch. 3 and 7; from memory)."""
from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "bench"))
sys.path.insert(0, str(Path(__file__).resolve().parent))

import _gaze_grid as G  # noqa: E402
import gaze_picture_limit as PL  # noqa: E402


def _rendered(tmp_path, cond: G.Condition, yaw_deg: float, pitch_deg: float, frames: int = 3, crf: int = 16):
    """A short clip of ``cond``'s picture with the gaze held still (no head motion), its truth and decoded frames."""
    from aspectus.synth.render import render_clip
    from aspectus.synth.trajectory import Trajectory

    n = frames + 1
    traj = Trajectory.from_samples(pd.DataFrame({"t_s": np.arange(n) / 30.0, "yaw_deg": np.full(n, yaw_deg),
                                                 "pitch_deg": np.full(n, pitch_deg)}),
                                   head_distance_mm=cond.distance_mm)
    res = render_clip(tmp_path / "c.mp4", traj, face=cond.face, size_px=cond.size_px, fps=30.0, crf=crf,
                      seed=cond.seed, lid_follow=cond.lid_follow, lighting_drift=cond.lighting_drift,
                      lighting_gradient=cond.lighting_gradient, glasses=cond.glasses, mirror=cond.mirror,
                      iris_sampling=cond.iris_sampling)
    return res.truth, PL.decoded_frames(res.path)


def test_the_fit_on_a_picture_with_gaussian_noise_is_unbiased_and_its_spread_is_the_cramer_rao_bound(tmp_path):
    """One 12 px frame (640 x 480 at 55 cm) drawn 40 times with independent Gaussian noise of 12 grey levels: the
    linearised fit's error per axis has an SD within 0.72-1.35 of the bound (the SD of 40 draws has a relative
    standard error of about 0.11) and a mean within 3 standard errors of zero."""
    cond = G.Condition("t", size_px=(640, 480), distance_mm=550.0, iris_sampling="area", lighting_drift=0.0,
                       lighting_gradient=0.0, head_motion=None, seed=5)
    truth, _ = _rendered(tmp_path, cond, 4.0, -3.0, frames=1)
    fm = PL.PictureModel(cond, truth).frame(0)
    g0 = np.array([4.0, -3.0])
    clean = fm.render(*g0)
    J = fm.jacobian(*g0)
    noise_sd = 12.0
    bound = PL.cramer_rao_sd(J, noise_sd=noise_sd)
    assert np.all(np.isfinite(bound)) and np.all(bound > 0)
    rng = np.random.default_rng(11)
    err = np.array([PL.linearised_fit(fm, clean + rng.normal(0.0, noise_sd, clean.shape), g0, J)[0] - g0
                    for _ in range(40)])
    sd = err.std(axis=0, ddof=1)
    assert np.all(sd / bound > 0.72) and np.all(sd / bound < 1.35), (sd, bound)
    assert np.all(np.abs(err.mean(axis=0)) < 3 * sd / np.sqrt(len(err))), (err.mean(axis=0), sd)
    # the bound scales with the noise: twice the noise, twice the SD
    assert np.allclose(PL.cramer_rao_sd(J, noise_sd=2 * noise_sd), 2 * bound)


def test_the_linearised_fit_recovers_a_gaze_half_a_degree_away():
    """The first-order model holds over the errors the bench measures: a noise-free picture drawn 0.6 deg right of
    and 0.5 deg below the point of linearisation is read within 0.08 deg (lids that stay still and the iris drawn by
    pixel area, so that the picture changes smoothly with the gaze; drawn at pixel centres the pitch read 1.72
    for 1.5)."""
    import pandas as pd

    truth = pd.DataFrame({"t_s": [0.0], "yaw_deg": [3.0], "pitch_deg": [2.0], "lid_closure": [0.0],
                          "head_yaw_deg": [0.0], "head_pitch_deg": [0.0], "head_roll_deg": [0.0],
                          "head_x_mm": [0.0], "head_y_mm": [0.0], "head_z_mm": [550.0],
                          "right_iris_x_px": [290.0], "right_iris_y_px": [240.0], "left_iris_x_px": [350.0],
                          "left_iris_y_px": [240.0], "iris_diameter_px": [12.0]})
    cond = G.Condition("t", size_px=(640, 480), distance_mm=550.0, iris_sampling="area", lighting_drift=0.0,
                       lighting_gradient=0.0, head_motion=None, lid_follow=0.0, seed=1)
    fm = PL.PictureModel(cond, truth).frame(0)
    obs = fm.render(3.6, 1.5)
    est, resid = PL.linearised_fit(fm, obs, (3.0, 2.0))
    assert np.all(np.abs(est - [3.6, 1.5]) < 0.08), est
    assert resid > 0.5  # the picture did change


@pytest.mark.parametrize("mirror,glasses", [(False, False), (True, True)])
def test_the_picture_model_redraws_a_rendered_frame(tmp_path, mirror, glasses):
    """A lightly compressed rendered clip (CRF 16) with lighting drift and a gradient, mirrored and with glasses in
    the second case: the model's picture at the true gaze differs from the decoded frame by less than 7 grey levels
    RMS (sensor noise of 2 a channel, the codec and its halved colour resolution) and by less than 8 deg away, and
    the linearised fit about a point 1 deg off moves towards the truth (a model that forgot the mirroring, the
    light or the glasses fails all three)."""
    cond = G.Condition("t", size_px=(640, 480), distance_mm=550.0, iris_sampling="area", lighting_drift=0.15,
                       lighting_gradient=0.3, head_motion=None, mirror=mirror, glasses=glasses, face="astronaut", seed=2)
    truth, frames = _rendered(tmp_path, cond, -6.0, 5.0, frames=3)
    pm = PL.PictureModel(cond, truth)
    for i in (0, 2):
        fm = pm.frame(i)
        obs = fm.observed(frames[i])
        g = np.array([truth.yaw_deg[i], truth.pitch_deg[i]])
        at_truth = np.sqrt(np.mean((obs - fm.render(*g)) ** 2))
        off = np.sqrt(np.mean((obs - fm.render(g[0] + 8.0, g[1])) ** 2))
        assert at_truth < 7.0 and at_truth < 0.8 * off, (at_truth, off)
        est, _ = PL.linearised_fit(fm, obs, g + [1.0, -1.0])
        assert np.linalg.norm(est - g) < 0.5 * np.sqrt(2), (est, g)


def test_a_cell_with_an_exposure_is_refused_by_name(tmp_path):
    cond = G.Condition("12px_exp33ms", size_px=(640, 480), distance_mm=550.0, head_motion=None, exposure_ms=33.0)
    plain = G.Condition("t", size_px=(640, 480), distance_mm=550.0, iris_sampling="area", head_motion=None)
    truth, _ = _rendered(tmp_path, plain, 0, 0, 1)
    with pytest.raises(ValueError, match="12px_exp33ms.*33 ms exposure"):
        PL.PictureModel(cond, truth)


def test_frames_and_truth_of_different_lengths_are_refused(tmp_path):
    cond = G.Condition("t", size_px=(640, 480), distance_mm=550.0, iris_sampling="area", head_motion=None)
    truth, frames = _rendered(tmp_path, cond, 0.0, 0.0, frames=2)
    with pytest.raises(ValueError, match="decoded frames"):
        PL.model_fit_samples(cond, truth, frames[:-1])
