"""Pins the signs of aspectus's one coordinate frame (aspectus/schema.py)."""
import numpy as np
import pytest

from aspectus.geometry import (angles_to_gaze_vector, camera_matrix, gaze_vector_to_angles, head_rotation,
                              ray_sphere_near, rotation_to_head_angles, umeyama)


def test_looking_to_own_right_is_positive_yaw_and_image_left():
    # subject's right = camera -x (picture left in an unmirrored clip)
    g = angles_to_gaze_vector(20.0, 0.0)
    assert g[0] < 0 and g[2] < 0
    yaw, pitch = gaze_vector_to_angles(np.array([-0.3, 0.0, -1.0]))
    assert yaw > 0 and abs(pitch) < 1e-12


def test_looking_up_is_positive_pitch():
    g = angles_to_gaze_vector(0.0, 10.0)
    assert g[1] < 0  # camera y runs down the picture
    _, pitch = gaze_vector_to_angles(np.array([0.0, -0.2, -1.0]))
    assert pitch > 0


def test_straight_back_at_camera_is_zero():
    yaw, pitch = gaze_vector_to_angles(np.array([0.0, 0.0, -1.0]))
    assert yaw == 0 and pitch == 0


@pytest.mark.parametrize("yaw,pitch", [(0, 0), (15, -5), (-30, 20), (44, 10)])
def test_angle_vector_round_trip(yaw, pitch):
    y2, p2 = gaze_vector_to_angles(angles_to_gaze_vector(yaw, pitch))
    assert y2 == pytest.approx(yaw, abs=1e-9) and p2 == pytest.approx(pitch, abs=1e-9)


def test_head_rotation_signs():
    fwd = np.array([0, 0, -1.0])
    top = np.array([0, -1.0, 0])
    assert (head_rotation(10, 0, 0) @ fwd)[0] < 0  # face turns to the subject's right = camera -x
    assert (head_rotation(0, 10, 0) @ fwd)[1] < 0  # face tilts up = camera -y
    assert (head_rotation(0, 0, 10) @ top)[0] < 0  # head top leans to the subject's right shoulder
    for a in [(12, -7, 5), (-30, 20, -10), (0, 0, 0)]:
        assert np.allclose(rotation_to_head_angles(head_rotation(*a)), a, atol=1e-9)


def test_camera_matrix_from_field_of_view():
    K = camera_matrix(1280, 720, 90.0)
    assert K[0, 0] == pytest.approx(640.0)  # tan(45 deg) = 1
    assert (K[0, 2], K[1, 2]) == (640.0, 360.0)


def test_umeyama_recovers_similarity():
    rng = np.random.default_rng(1)
    src = rng.normal(size=(30, 3))
    R = head_rotation(20, -10, 5)
    dst = 2.5 * src @ R.T + [1, 2, 3]
    s, R2, t = umeyama(src, dst)
    assert s == pytest.approx(2.5) and np.allclose(R2, R) and np.allclose(t, [1, 2, 3])


def test_ray_sphere_near_intersection_and_miss():
    pts, missed = ray_sphere_near(np.array([[0, 0, 1.0], [1, 0, 0.0]]), np.array([[0, 0, 10.0], [0, 0, 10.0]]), 2.0)
    assert not missed[0] and np.allclose(pts[0], [0, 0, 8.0])
    assert missed[1]
