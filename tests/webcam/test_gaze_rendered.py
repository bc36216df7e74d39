"""Gaze, head pose and metric scale against rendered clips with known truth, and real photographs.

Rendered clips come from aspectus.synth.render (a shipped face photograph animated
along a known gaze trajectory, encoded with libx264 and decoded by the real
decoder). The floors are the foundation issue's: r >= 0.95, gain 0.8-1.25
over +-15 deg, head-compensated median error < 3 deg.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from aspectus.webcam import pipeline
from aspectus.webcam.gaze import estimate_gaze, interpupillary_distance_mm
from aspectus.webcam.landmarks import FaceTracker
from aspectus.webcam.pipeline import ProcessParams, extract_samples

pytestmark = pytest.mark.slow


def _trajectory(duration_s=6.0, rate=240.0, head=False):
    from aspectus.synth.trajectory import Trajectory

    t = np.arange(int(duration_s * rate)) / rate
    df = pd.DataFrame({
        "t_s": t,
        "yaw_deg": 15 * np.sin(2 * np.pi * t / 3.0),
        "pitch_deg": 15 * np.sin(2 * np.pi * t / 2.2 + 0.5),
        "blink": False, "lid_closure": 0.0,
        "head_yaw_deg": 15 * np.sin(2 * np.pi * t / 5.0 + 1.0) if head else 0.0,
        "head_pitch_deg": 5 * np.sin(2 * np.pi * t / 4.0) if head else 0.0,
        "head_roll_deg": 0.0, "head_x_mm": 0.0, "head_y_mm": 0.0, "head_z_mm": 600.0,
    })
    empty = pd.DataFrame({c: [] for c in ("onset_s", "offset_s", "duration_ms", "yaw_deg", "pitch_deg",
                                          "amplitude_deg", "closure_onset_s", "closure_offset_s")})
    return Trajectory(samples=df, fixations=empty, saccades=empty, blinks=empty,
                      params={"rate_hz": rate, "duration_s": duration_s})


@pytest.fixture(scope="module")
def rendered(tmp_path_factory):
    from aspectus.synth.render import render_clip

    d = tmp_path_factory.mktemp("gaze")
    out = {}
    for name, head, face in (("still_head", False, "hopper"), ("moving_head", True, "hopper"),
                             ("moving_head_astronaut", True, "astronaut")):
        clip = d / f"{name}.mp4"
        res = render_clip(clip, _trajectory(head=head), face=face, size_px=(1280, 720), fps=30.0, seed=3)
        captured = {}

        def spy(**kw):  # keep the estimator's inputs (one clip's head poses and iris centres)
            captured.update(kw)  # noqa: B023 - used within the iteration
            return estimate_gaze(**kw)

        pipeline.estimate_gaze = spy
        try:
            samples, _ = extract_samples(clip, params=ProcessParams())
        finally:
            pipeline.estimate_gaze = estimate_gaze
        out[name] = (samples, res.truth.reset_index(drop=True))
        out[name + "_inputs"] = {k: (np.array(v) if isinstance(v, np.ndarray) else v) for k, v in captured.items()}
    return out


def _fit(est, truth):
    ok = np.isfinite(est)
    r = np.corrcoef(est[ok], truth[ok])[0, 1]
    gain = np.polyfit(truth[ok], est[ok], 1)[0]
    return r, gain


def test_recovered_yaw_follows_truth_with_still_head(rendered):
    s, truth = rendered["still_head"]
    assert s["valid"].mean() > 0.95
    r, gain = _fit(s["yaw_deg"].to_numpy(), truth["yaw_deg"].to_numpy())
    assert r >= 0.95, f"yaw: r={r:.3f}"  # issue 2 floor
    # issue 2 floor 0.8-1.25; measured 1.07 (r 0.998) with the metric scale from the limbus fit's iris diameter
    # (GazeParams.iris_scale, the default), 0.98 with the face mesh's, which reads this clip's iris 8 % larger;
    # 0.99 with the mesh's in an earlier measurement, 0.90 before the head translation was refitted to skin
    # points followed on the picture (aspectus.webcam.eye_anchors), when the eyeball centres followed horizontal
    # eye movement by 4-10 % with the face mesh
    assert 0.8 <= gain <= 1.25, f"yaw: gain={gain:.2f}"


def test_recovered_pitch_follows_truth_with_still_head(rendered):
    s, truth = rendered["still_head"]
    r, gain = _fit(s["pitch_deg"].to_numpy(), truth["pitch_deg"].to_numpy())
    # Issue 2 floors over +-15 deg: r >= 0.95, gain 0.8-1.25. Measured over +-15 deg with the limbus fit's iris
    # scale (the default): r 0.981, gain 0.89 (astronaut face on the same trajectory: 0.994, 0.98); with the
    # face mesh's 0.82 (0.92); an earlier measurement r 0.982, gain 0.93 (0.994, 1.00). Over +-12 deg (the trajectory until the fifth
    # session): r 0.984, gain 0.96 (astronaut 0.994, 1.00) since the head translation is refitted to skin
    # points below the eyes followed on the picture (aspectus.webcam.eye_anchors); r 0.971, gain 0.92 (astronaut
    # 0.984, 1.00) before that, with the
    # limbus fit's one-sided weights (aspectus.webcam.limbus); r 0.935, gain 0.79 before those. What is left: the
    # subject's left eye on this face shows only short limbus arcs near the horizontal, which fix the
    # centre's height weakly (DEVELOPERS.md, known limits).
    assert r >= 0.95, f"pitch: r={r:.3f}"
    assert 0.8 <= gain <= 1.25, f"pitch: gain={gain:.2f}"


def test_signs_follow_the_documented_frame(rendered):
    s, truth = rendered["still_head"]
    # looking to the subject's right (truth yaw > 10) gives clearly positive yaw relative to looking left
    right = s["yaw_deg"][truth["yaw_deg"] > 10].median()
    left = s["yaw_deg"][truth["yaw_deg"] < -10].median()
    up = s["pitch_deg"][truth["pitch_deg"] > 8].median()
    down = s["pitch_deg"][truth["pitch_deg"] < -8].median()
    assert right > left + 15
    assert up > down + 4


def test_distance_from_iris_scale(rendered):
    s, truth = rendered["still_head"]
    # the iris scale (11.7 mm, Ruefer et al. 2005 - from memory) must put the head near the rendered 600 mm
    # (distance_mm is the head origin's, midway between the eyeball centres, as the truth's head_*_mm);
    # measured with the limbus fit's iris diameter (the default) +3.4 % (still head), +2.5 to +3.6 % on three
    # more clips of this trajectory; with the face mesh's -4.6 % and -2.3 to -2.9 %
    head = np.linalg.norm(truth[["head_x_mm", "head_y_mm", "head_z_mm"]].to_numpy(float), axis=1)
    assert s["distance_mm"].median() == pytest.approx(np.median(head), rel=0.06)


@pytest.mark.parametrize("clip, min_gain", [("moving_head", 0.88), ("moving_head_astronaut", 0.85)])
def test_head_pose_tracks_rendered_head(rendered, clip, min_gain):
    s, truth = rendered[clip]
    r, gain = _fit(s["head_yaw_deg"].to_numpy(), truth["head_yaw_deg"].to_numpy())
    assert r > 0.97
    # measured yaw gain 0.94 (hopper face) and 0.91 (astronaut) now that the renderer turns the whole head;
    # 0.77 and 0.79 when only the face-mesh surface turned and hair and outline were stretched in 2-D
    assert gain > min_gain, f"head yaw gain {gain:.2f}"


@pytest.mark.parametrize("clip", ["moving_head", "moving_head_astronaut"])
def test_head_compensated_gaze_with_moving_head(rendered, clip):
    s, truth = rendered[clip]
    ok = s["valid"].to_numpy()
    ey = (s["yaw_deg"] - truth["yaw_deg"]).to_numpy()[ok]
    ep = (s["pitch_deg"] - truth["pitch_deg"]).to_numpy()[ok]
    err = np.hypot(ey - np.median(ey), ep - np.median(ep))  # the constant offset (angle kappa) is unknowable
    r_yaw, _ = _fit(s["yaw_deg"].to_numpy(), truth["yaw_deg"].to_numpy())
    # issue 2 floor r >= 0.95: measured 0.993 (hopper face) and 0.991 (astronaut) with the head translation
    # refitted to skin points below the eyes followed on the picture (aspectus.webcam.eye_anchors); 0.91 and 0.98
    # with the translation from PnP on the face mesh's landmarks
    assert r_yaw >= 0.95, f"gaze yaw r {r_yaw:.3f}"
    # issue 2 floor: median error < 3 deg. Measured with gaze over +-15 deg yaw and pitch: 1.9 deg (hopper
    # face) and 1.4 (astronaut), seed 3, with the limbus fit's iris scale (face mesh's: 2.1 and 1.8; 2.0 and 1.3
    # in an earlier measurement). With pitch over +-12 deg: 1.7 deg and 1.7 deg, seed 3;
    # seed 5: 1.7 and 1.5 - with the head translation refitted, the PnP rotation held, to six skin points
    # below the eyes that are followed on the picture by template matching (aspectus.webcam.eye_anchors). With the
    # translation from PnP on the face mesh's landmarks: 5.9 and 3.1 (seed 5: 6.6 and 3.2), because the mesh
    # places its landmarks on a turned face 0.2-0.6 px per degree of head rotation away from the face's
    # points, with signs that differ between the two faces, and the eyeball centres moved with them
    # (DEVELOPERS.md, known limits). With the true head pose: 1.5 and 0.8 (the next test).
    assert np.median(err) < 3.0, f"median error {np.median(err):.2f} deg"


def _median_error(yaw, pitch, truth, ok):
    ey = (yaw - truth["yaw_deg"].to_numpy())[ok]
    ep = (pitch - truth["pitch_deg"].to_numpy())[ok]
    return float(np.median(np.hypot(ey - np.median(ey), ep - np.median(ep))))


@pytest.mark.parametrize("clip", ["moving_head", "moving_head_astronaut"])
def test_gaze_meets_the_floor_with_the_true_head_pose(rendered, clip):
    """The eyeball model and iris centres are good enough on their own: the floor with the rendered head pose.

    The estimator is run again on the clip's own iris centres and eye measurements, with the rendered head
    pose in place of the one from PnP: rotation = truth times the constant rotation between the photographed
    head and the model (the mean over the clip), translation = the rendered head origin on the model's scale.
    """
    from scipy.spatial.transform import Rotation

    from aspectus.synth.frame import head_rotation

    _, truth = rendered[clip]
    kw = dict(rendered[clip + "_inputs"])
    R_true = np.stack([head_rotation(*row) for row in truth[["head_yaw_deg", "head_pitch_deg", "head_roll_deg"]].to_numpy()])
    R0 = Rotation.from_matrix(np.einsum("nji,njk->nik", R_true, kw["R"])).mean().as_matrix()
    _, info = estimate_gaze(**kw)
    t_true = truth[["head_x_mm", "head_y_mm", "head_z_mm"]].to_numpy() / info["model_scale"]
    cols_true, _ = estimate_gaze(**(kw | {"R": R_true @ R0, "t": t_true}))
    with_true_pose = _median_error(cols_true["yaw_deg"], cols_true["pitch_deg"], truth, cols_true["valid"])
    # issue 2 floor: median error < 3 deg. Measured on the earlier +-12 deg pitch trajectory: 1.5 deg (hopper
    # face) and 0.8 (astronaut) with the true head pose (2.2 and 1.8 before the limbus fit's one-sided weights), against 1.7 and 1.7 with the
    # PnP rotation and the translation refitted to the eye anchors (aspectus.webcam.eye_anchors), and 5.9 and 3.1
    # with the whole pose from PnP on the face mesh's landmarks
    assert with_true_pose < 3.0, f"{with_true_pose:.2f} deg with the true head pose"


@pytest.mark.parametrize("photo", ["hopper", "astronaut"])
def test_interpupillary_distance_on_shipped_photographs(photo):
    """IPD on the iris scale within 50-75 mm (Dodgson 2004; iris 11.7 mm, Ruefer et al. 2005 - both from memory)."""
    from aspectus._env import import_cv2

    cv2 = import_cv2()
    if photo == "hopper":
        import matplotlib.cbook as cbook

        img = cv2.cvtColor(cv2.imread(str(cbook.get_sample_data("grace_hopper.jpg", asfileobj=False))), cv2.COLOR_BGR2RGB)
    else:
        from skimage import data

        img = np.ascontiguousarray(data.astronaut())
    with FaceTracker(max_faces=1) as tr:
        obs = tr.process(img)
    assert obs is not None
    assert 50.0 <= interpupillary_distance_mm(obs.points_px) <= 75.0


#: slow head drift in translation, distance and roll without rotation (issue 15's second finding)
DRIFT = {"yaw_deg": 0.0, "pitch_deg": 0.0, "roll_deg": 3.0, "x_mm": 20.0, "y_mm": 15.0, "z_mm": 40.0,
         "period_s": 12.0}


@pytest.mark.parametrize("trial", ["TH34_img_Europe", "UH21_img_Rome", "TL20_img_konijntjes"])
def test_pitch_gain_with_slow_head_drift_on_large_faces(lund_dir, tmp_path, trial):
    """Issue 15 floor: large faces with slow head drift in translation, distance and roll: pitch gain 0.85-1.15.

    The eyes follow the first 8 s of a hand-coded recording (Andersson et al. 2017, ../shared/reference/
    lund2013); 1280 x 720, MPEG-4 part 2, the head 530 mm away (iris about 25 px). Measured pitch gain
    (r): TH34 0.93 (0.986), UH21 0.98 (0.963), TL20 0.98 (0.979) with the limbus fit's iris scale (the face
    mesh's: 0.86, 0.91, 0.91; yaw gain 0.98, 0.96, 0.97 against 0.91, 0.90, 0.90); earlier TH34 0.85, UH21 0.95, TL20
    0.89 with the mesh's since the coders' blinks are rendered as blinks (0.87, 0.95, 0.92 before); before the decoupling was measured on
    local-quadratic residuals (aspectus.webcam.gaze.decouple_reference) 0.85, 1.65 and 1.48 - slow head drift read
    as the eyeball centres' coupling to the eyes.
    """
    from _lund import as_trajectory, load_trial

    from aspectus.synth.render import render_clip

    traj = as_trajectory(load_trial(lund_dir, trial), duration_s=8.0, head_motion=DRIFT, distance_mm=530.0,
                         seed=0)
    res = render_clip(tmp_path / "drift.mp4", traj, size_px=(1280, 720), codec="mpeg4", seed=1)
    samples, _ = extract_samples(res.path, params=ProcessParams())
    truth = res.truth
    assert truth["iris_diameter_px"].median() > 22
    r_y, g_y = _fit(samples["yaw_deg"].to_numpy(), truth["yaw_deg"].to_numpy())
    r_p, g_p = _fit(samples["pitch_deg"].to_numpy(), truth["pitch_deg"].to_numpy())
    assert r_y >= 0.95 and 0.85 <= g_y <= 1.15, f"yaw r {r_y:.3f} gain {g_y:.2f}"
    assert r_p >= 0.95 and 0.85 <= g_p <= 1.15, f"pitch r {r_p:.3f} gain {g_p:.2f}"


def test_mirrored_clip_with_glasses(tmp_path):
    """A mirrored picture (as webcam software records it) of a face with glasses: with ``mirrored`` the gaze
    comes out in the subject's frame (issue 2's floors: r >= 0.95, gain 0.8-1.25).

    Measured on this trajectory (+-15 deg, 4 s, 1280 x 720, seed 3), yaw r / gain, pitch r / gain: astronaut
    face mirrored with glasses 0.997 / 1.04, 0.995 / 1.00 with the limbus fit's iris scale (the face mesh's:
    1.02, 0.98); earlier 0.997 / 1.01, 0.994 / 0.98 (plain 0.998 / 0.95, 0.997 / 0.97); hopper face
    mirrored with glasses 0.995 / 1.02, 0.982 / 0.80 (plain 0.998 / 0.99, 0.988 / 0.86; glasses alone 0.88,
    mirrored alone 0.90 pitch gain).
    """
    from aspectus.webcam.gaze import GazeParams
    from aspectus.synth.render import render_clip

    t = _trajectory(duration_s=4.0)
    res = render_clip(tmp_path / "mirror.mp4", t, face="astronaut", size_px=(1280, 720), seed=3, mirror=True,
                      glasses=True)
    s, _ = extract_samples(res.path, params=ProcessParams(gaze=GazeParams(mirrored=True)))
    for ax in ("yaw_deg", "pitch_deg"):
        r, gain = _fit(s[ax].to_numpy(), res.truth[ax].to_numpy())
        assert r >= 0.95 and 0.8 <= gain <= 1.25, f"{ax}: r {r:.3f} gain {gain:.2f}"


def test_iris_centres_are_in_the_picture_convention_of_the_truth(rendered):
    """The iris centres the estimator takes (the limbus fit's at this size) lie on the renderer's true iris
    centres, both in aspectus.schema's picture convention (pixel i spans [i, i + 1)): no constant
    half-pixel shift, which would move every absolute gaze angle by about 1.5 deg at a 21 px iris."""
    _, truth = rendered["still_head"]
    iris = rendered["still_head_inputs"]["iris_px"]
    true = np.stack([truth[["right_iris_x_px", "right_iris_y_px"]].to_numpy(float),
                     truth[["left_iris_x_px", "left_iris_y_px"]].to_numpy(float)], axis=1)
    open_ = (truth["lid_closure"].to_numpy() < 0.2) & np.isfinite(iris).all(axis=(1, 2))
    bias = np.median(iris[open_] - true[open_], axis=0)  # (eye, axis), px
    print("median iris centre minus truth (right x, y; left x, y), px:", np.round(bias, 2).tolist())
    # horizontally the limbus fit is unbiased apart from the convention (the lids do not cover the sides):
    # within a quarter pixel, half the shift the mixed conventions left (0.39-0.69 px on three dev clips).
    # Measured on this clip: x +0.03 / +0.01 px, y -0.26 / -0.42 (right / left); with the fit's region read
    # in OpenCV's convention (before): x -0.48 / -0.52, y -0.93 / -0.91. The vertical bias left is the lids'
    assert np.all(np.abs(bias[:, 0]) < 0.25), bias
