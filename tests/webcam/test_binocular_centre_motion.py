"""Which motion of the eyeball centres reaches the binocular gaze (aspectus.webcam.gaze, the last step).

On rendered still-head target clips the face mesh's PnP rotation follows the eyes: a roll with the gaze yaw
(0.03-0.16 deg per 10 deg) and a pitch with the gaze pitch (0.5-1.1 deg per 10 deg). The translation is
fitted to the eye anchors below the eyes under that rotation, so the head turns about the anchors. Removing
the centres' motion that differs between the eyes changed the known-target check by at most 0.05 deg on five
clips, removing the shared sideways or vertical part by up to 0.36 deg (bench/bench_target_error.py; docs/notes/target-check.md,
"The eyeball centres' motion"). These tests check the geometry that reading rests on, on a constructed clip
whose geometry is exact (the model head still at 600 mm, the iris centres the eyeball model's own, projected
by a pinhole camera): a roll of the head estimate moves the two eyes' pitch in opposite directions and the
binocular pitch not at all; a pitch moves both and the binocular pitch with them.
"""
from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from aspectus.geometry import angles_to_gaze_vector, camera_matrix, gaze_vector_to_angles
from aspectus.webcam.eye_anchors import ANCHOR_SETS, DEFAULT_ANCHOR_SET
from aspectus.webcam.gaze import IRIS_DIAMETER_MM, IRIS_PLANE_RADIUS_MM, GazeParams, estimate_gaze
from aspectus.webcam.headpose import face_model
from aspectus.webcam.landmarks import LEFT_EYE_CORNERS, RIGHT_EYE_CORNERS


def _project(K, X):
    return np.c_[K[0, 0] * X[:, 0] / X[:, 2] + K[0, 2], K[1, 1] * X[:, 1] / X[:, 2] + K[1, 2]]


def _gaze_errors(axis: int, deg_per_deg: float, drive: str, n: int = 300) -> dict:
    """The eyes sweep +-20 deg yaw and +-12 deg pitch; the head estimate turns about the eye anchors' point by
    ``deg_per_deg`` times the gaze ``drive`` ("yaw", "pitch" or "pitch^2", deg squared) about the head's ``axis`` (0 pitch, 2 roll),
    the translation following so that the anchors stay where they are (as the anchored refit does). Returns
    the range (max - min, deg) of each gaze column's error against the true gaze, the clip's ends left out, and
    (``..._after_gain``) of what is left after an offset and gain fitted on the true gaze."""
    K = camera_matrix(1280, 720, 60.0)
    model = face_model()
    t_s = np.arange(n) / 30.0
    yaw = 20.0 * np.sin(2 * np.pi * t_s / 4.0)
    pitch = 12.0 * np.sin(2 * np.pi * t_s / 2.7 + 1.0)
    g = angles_to_gaze_vector(yaw, pitch)
    t = np.array([0.0, 0.0, 600.0])
    centres = np.stack([model.eye_right_mm, model.eye_left_mm]) + t
    iris3 = centres[None] + IRIS_PLANE_RADIUS_MM * g[:, None, :]
    iris_px = np.stack([_project(K, iris3[:, e]) for e in range(2)], axis=1)
    diam = K[0, 0] * IRIS_DIAMETER_MM / np.linalg.norm(iris3, axis=2)
    corners = np.stack([_project(K, model.points_mm[list(c)] + t) for c in (RIGHT_EYE_CORNERS, LEFT_EYE_CORNERS)])
    pivot = model.points_mm[list(ANCHOR_SETS[DEFAULT_ANCHOR_SET])].mean(axis=0)
    rv = np.zeros((n, 3))
    rv[:, axis] = np.radians(deg_per_deg * {"yaw": yaw, "pitch": pitch, "pitch^2": pitch ** 2}[drive])
    R = Rotation.from_rotvec(rv).as_matrix()
    cols, _ = estimate_gaze(K=K, found=np.ones(n, bool), R=R, t=t + pivot - R @ pivot, iris_px=iris_px,
                            iris_diam_px=diam, corners_px=np.repeat(corners[None], n, axis=0),
                            ear=np.full((n, 2), 0.3), t_s=t_s, params=GazeParams(decouple_reference=False))
    true_yaw, true_pitch = gaze_vector_to_angles(g)
    inner = slice(30, n - 30)  # the head-pose smoothing's ends
    out = {}
    for c, truth in (("yaw_deg", true_yaw), ("pitch_deg", true_pitch)):
        for eye in ("", "right_", "left_"):
            e = (cols[eye + c] - truth)[inner]
            out[eye + c] = float(e.max() - e.min())
            # what is left after an offset and gain per axis (what the known-target check fits)
            r = e - np.polyval(np.polyfit(truth[inner], e, 1), truth[inner])
            out[eye + c + "_after_gain"] = float(r.max() - r.min())
    return out


def test_a_roll_of_the_head_estimate_moves_each_eye_but_not_the_binocular_pitch():
    """A roll of 0.15 deg per 10 deg of gaze yaw (the face mesh's on the astronaut face) about the anchors: each
    eye's pitch error spans well over a degree (one centre rises as the other falls, 0.1 mm being some 0.55 deg
    at the 10.5 mm iris plane), the binocular pitch's stays at the still estimate's. The anchors lie 9 mm below
    the eyeball centres' line in the face model, so the roll also moves both centres sideways: the binocular
    yaw changes, but in proportion to the yaw - a gain, which the known-target check's fit takes out."""
    still = _gaze_errors(2, 0.0, "yaw")
    rolled = _gaze_errors(2, 0.015, "yaw")
    print("still", still, "\nrolled", rolled)
    assert still["pitch_deg"] < 0.3  # the constructed clip itself: the estimate's own non-linearity only
    assert rolled["right_pitch_deg"] > 1.0 and rolled["left_pitch_deg"] > 1.0
    assert rolled["pitch_deg"] == pytest.approx(still["pitch_deg"], abs=0.05)
    assert rolled["yaw_deg"] > still["yaw_deg"] + 0.3
    assert rolled["yaw_deg_after_gain"] < 0.05


def test_a_pitch_of_the_head_estimate_reaches_the_binocular_pitch():
    """A pitch of 0.6 deg per 10 deg of gaze pitch (the face mesh's on rendered target clips: 0.5-1.1) about the
    anchors moves both centres together: the binocular pitch error spans as much as each eye's. In proportion
    to the gaze it is a gain; on the rendered clips the coupling differs from dot to dot (a linear fit on the
    dot's place leaves most of the check's error), and that part the fit cannot take out: driven by the gaze
    pitch's square here, the binocular pitch keeps it after the gain."""
    still = _gaze_errors(0, 0.0, "pitch")
    tilted = _gaze_errors(0, 0.06, "pitch")
    print("still", still, "\ntilted", tilted)
    assert tilted["pitch_deg"] > still["pitch_deg"] + 1.0
    assert tilted["pitch_deg"] == pytest.approx(tilted["right_pitch_deg"], rel=0.1)
    assert tilted["pitch_deg"] == pytest.approx(tilted["left_pitch_deg"], rel=0.1)
    assert tilted["pitch_deg_after_gain"] < 0.05
    bent = _gaze_errors(0, 0.06 / 12.0, "pitch^2")  # 0.6 deg at +-12 deg of gaze pitch, the same sign both ways
    print("bent", bent)
    assert bent["pitch_deg_after_gain"] > 0.5
    assert bent["pitch_deg_after_gain"] == pytest.approx(bent["right_pitch_deg_after_gain"], rel=0.1)
