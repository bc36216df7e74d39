"""run.json's per-eye records name the subject's own eyes, mirrored clip or not (aspectus.webcam.gaze.unmirror_record).

The face mesh names its eyes as a face seen unmirrored: its right eye is the one on the picture's left. In a
mirrored picture that is the subject's left eye, so the gaze columns are swapped back (gaze.unmirror) - and the
per-eye records written beside them in run.json's ``gaze_model`` (eyeball offsets, iris-gap bridging, the
eyeball centres' coupling, the appearance and registration records) must be too. The check: a constructed clip
and the same clip seen in a mirror (the picture flipped left to right, so the mesh's eyes trade places and the
head pose is reflected) give the same columns and the same per-eye records with the matching ``mirrored``
setting (the eyeball offsets within the face model's own asymmetry). The reflection is exact geometry (a pinhole
camera with its principal point at the picture's centre), not a measurement.
"""
from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from aspectus.geometry import angles_to_gaze_vector, camera_matrix
from aspectus.webcam.gaze import IRIS_DIAMETER_MM, IRIS_PLANE_RADIUS_MM, GazeParams, estimate_gaze, unmirror_record
from aspectus.webcam.headpose import face_model
from aspectus.webcam.landmarks import LEFT_EYE_CORNERS, RIGHT_EYE_CORNERS

W, H = 1280, 720
M = np.diag([-1.0, 1.0, 1.0])  # the reflection of the camera frame that mirrors the picture left to right


def _project(K, X):
    return np.stack([K[0, 0] * X[..., 0] / X[..., 2] + K[0, 2], K[1, 1] * X[..., 1] / X[..., 2] + K[1, 2]], axis=-1)


def _clip(n=240):
    """A head 600 mm away, turned and moving a little; the eyes sweep yaw and pitch. The subject's eyes differ:
    the right eye's corners sit 6 px (some 3 mm) further out (so its eyeball offset differs from the left's), its limbus
    fit fails for 6 frames (bridged by fill_iris_gaps) and it is a little more closed. Index 0 is the subject's
    right eye, as the face mesh reports it on an unmirrored picture."""
    K = camera_matrix(W, H, 60.0)
    model = face_model()
    t_s = np.arange(n) / 30.0
    g = angles_to_gaze_vector(18.0 * np.sin(2 * np.pi * t_s / 4.0), 10.0 * np.sin(2 * np.pi * t_s / 2.7 + 1.0))
    R = Rotation.from_euler("yx", np.c_[8.0 + 3.0 * np.sin(t_s), 2.0 * np.cos(0.7 * t_s)], degrees=True).as_matrix()
    t = np.c_[30.0 + 5.0 * np.sin(0.5 * t_s), -10.0 + 0 * t_s, 600.0 + 10.0 * np.cos(0.3 * t_s)]
    centres = np.stack([np.einsum("nij,j->ni", R, c) + t for c in (model.eye_right_mm, model.eye_left_mm)], axis=1)
    iris3 = centres + IRIS_PLANE_RADIUS_MM * g[:, None, :]
    iris = _project(K, iris3)  # (N, 2, 2)
    diam = K[0, 0] * IRIS_DIAMETER_MM / np.linalg.norm(iris3, axis=2)
    corners = np.stack([_project(K, np.einsum("nij,kj->nki", R, model.points_mm[list(c)]) + t[:, None])
                        for c in (RIGHT_EYE_CORNERS, LEFT_EYE_CORNERS)], axis=1)  # (N, 2 eyes, 2 corners, 2)
    corners[:, 0, :, 0] -= 6.0  # the subject's right eye lies at the picture's left: "further out" is -x
    mesh = iris + np.array([0.4, -0.8])  # the face mesh's own iris point, a little off
    limbus = iris.copy()
    limbus[100:106, 0] = np.nan  # the right eye's fit fails for 0.2 s
    ear = np.c_[np.full(n, 0.27), np.full(n, 0.31)]
    return dict(K=K, found=np.ones(n, bool), R=R, t=t, iris_px=limbus, iris_diam_px=diam, corners_px=corners,
                ear=ear, t_s=t_s, iris_mesh_px=mesh)


def _mirrored(kw):
    """The same clip as the face mesh would report it from the mirrored picture: x -> W - x, its right eye (index
    0) the subject's left eye's reflection, the head pose reflected (R -> M R M, t -> M t: the face model is
    left-right symmetric, so the reflected model is the model)."""
    def px(a):
        a = np.array(a, float)[:, ::-1].copy()  # the mesh's eyes trade places
        a[..., 0] = W - a[..., 0]
        return a
    return dict(kw, iris_px=px(kw["iris_px"]), iris_mesh_px=px(kw["iris_mesh_px"]), corners_px=px(kw["corners_px"]),
                iris_diam_px=kw["iris_diam_px"][:, ::-1], ear=kw["ear"][:, ::-1],
                R=np.einsum("ij,njk,kl->nil", M, kw["R"], M), t=kw["t"] @ M)


def _assert_same(a, b, path="gaze_model"):
    if isinstance(a, dict):
        assert isinstance(b, dict) and set(a) == set(b), f"{path}: keys {sorted(a)} against {sorted(b)}"
        for k in a:
            _assert_same(a[k], b[k], f"{path}.{k}")
    elif isinstance(a, (list, tuple)):
        assert len(a) == len(b), path
        for i, (x, y) in enumerate(zip(a, b)):
            _assert_same(x, y, f"{path}[{i}]")
    elif isinstance(a, float) or isinstance(b, float):
        # records are rounded to 3 places; the mirrored clip's arithmetic differs in the last bits
        assert a == pytest.approx(b, abs=2e-3), f"{path}: {a} against {b}"
    else:
        assert a == b, f"{path}: {a!r} against {b!r}"


def test_a_mirrored_clip_gives_the_same_per_eye_records_as_the_unmirrored_one():
    kw = _clip()
    cols, info = estimate_gaze(**kw, params=GazeParams())
    cols_m, info_m = estimate_gaze(**_mirrored(kw), params=GazeParams(mirrored=True))
    # the material is asymmetric, so a record keyed by the mesh's eyes would differ
    assert info["iris_gaps"]["right"]["filled_frames"] == 6 and info["iris_gaps"]["left"]["filled_frames"] == 0
    off, off_m = np.array(info.pop("eyeball_offset_mm")), np.array(info_m.pop("eyeball_offset_mm"))
    assert off[0, 0] < -2.0 and abs(off[1, 0]) < 0.3  # the right eye's corners sit some 3 mm further out
    # The offsets are measured from the face model's eye corners, which are not mirror-symmetric themselves (their
    # midpoints are 0.85 mm apart in x and 0.17 mm in y, from face_model()): seen in the mirror each eye is
    # measured against the other eye's corners, so the figures agree within that, not exactly. Keyed by the
    # mesh's eyes they were some 2 mm apart.
    np.testing.assert_allclose(off_m, off, atol=1.0)
    _assert_same(info, info_m)
    # the per-eye columns name the same eyes (the angles themselves differ by the model's asymmetry above)
    for c in ("ear_right", "ear_left"):
        np.testing.assert_allclose(cols_m[c], cols[c], atol=1e-9, err_msg=c)


def test_unmirror_record_swaps_every_kind_of_per_eye_entry():
    rec = {"eyeball_offset_mm": [[-1.0, 0.5, 0.0], [2.0, 0.25, 0.0]], "frames_with_face": 10,
           "iris_gaps": {"right": {"filled_frames": 3}, "left": {"filled_frames": 0}},
           "reference_coupling": {"right": 0.4, "left": None, "right_se": 0.05},
           "iris_appearance": {"blocks": [{"frames": [0, 400], "right": {"fitted": True}, "left": {"fitted": False},
                                           "gain": {"right_y": 1.1, "left_y": 0.9}, "appearance_weight": {"right": 0.5}}],
                               "frames_predicted": [380, 0]},
           "iris_registration": {"increments": [300, 12], "frames_fused": [290, 0], "levels": {"right_x": None}}}
    out = unmirror_record(rec)
    assert out is rec
    assert rec["eyeball_offset_mm"] == [[-2.0, 0.25, 0.0], [1.0, 0.5, 0.0]]  # swapped, x reflected
    assert rec["frames_with_face"] == 10
    assert rec["iris_gaps"] == {"left": {"filled_frames": 3}, "right": {"filled_frames": 0}}
    assert rec["reference_coupling"] == {"left": 0.4, "right": None, "left_se": 0.05}
    blk = rec["iris_appearance"]["blocks"][0]
    assert blk["frames"] == [0, 400] and blk["left"] == {"fitted": True} and blk["right"] == {"fitted": False}
    assert blk["gain"] == {"left_y": 1.1, "right_y": 0.9} and blk["appearance_weight"] == {"left": 0.5}
    assert rec["iris_appearance"]["frames_predicted"] == [0, 380]
    assert rec["iris_registration"] == {"increments": [12, 300], "frames_fused": [0, 290], "levels": {"left_x": None}}


@pytest.mark.slow
@pytest.mark.parametrize("mirrored", [True, False])
def test_the_pipeline_writes_the_registration_record_for_the_subjects_eyes(tmp_path, monkeypatch, mirrored):
    """The iris registration's record (measured per face-mesh eye in the pipeline, after the gaze estimate's own
    records) reaches run.json's gaze_model named for the subject's eyes: swapped on a mirrored clip, as it is."""
    import copy

    from aspectus.synth.render import render_clip, synth_trajectory
    from aspectus.webcam import pipeline
    from aspectus.webcam.pipeline import ProcessParams, extract_samples

    clip = tmp_path / "clip.mp4"
    render_clip(clip, synth_trajectory(duration_s=1.5, seed=4), size_px=(640, 480), fps=30.0, mirror=mirrored, seed=2)
    seen = {}
    orig = pipeline._registered_iris

    def spy(*a, **kw):
        iris, info = orig(*a, **kw)
        seen["info"] = copy.deepcopy(info)
        return iris, info

    monkeypatch.setattr(pipeline, "_registered_iris", spy)
    _, meta = extract_samples(clip, params=ProcessParams(gaze=GazeParams(
        mirrored=mirrored, iris_combine="limbus", iris_registration=True)))
    measured = seen["info"]
    lv = measured["levels"]
    # the two eyes' records differ, so a swap shows
    assert lv["right_x"] is not None and lv["left_x"] is not None and lv["right_x"] != lv["left_x"]
    expected = unmirror_record(copy.deepcopy(measured)) if mirrored else measured
    assert meta["gaze_model"]["iris_registration"] == expected
    if mirrored:
        assert meta["gaze_model"]["iris_registration"]["levels"]["left_x"] == lv["right_x"]
