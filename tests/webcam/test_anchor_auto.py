"""The default ``GazeParams(eye_anchor_set="auto")``: the skin points below and beside the eyes on a small face,
those below the eyes alone on a large one, by the rule ``iris_combine="auto"`` follows (one threshold,
``aspectus.webcam.gaze.SMALL_FACE_BELOW_PX``, one rule, ``aspectus.webcam.iris_appearance.small_iris`` on the
limbus fit's iris size),
recorded in run.json.

Why the sets differ by size is a measurement on held-out rendered clips (bench/bench_anchor_sets.py,
docs/notes/gaze-measurement.md); the tests here check the rule and that "auto" gives exactly what the chosen set
gives alone. The clips are rendered (aspectus.synth) well on either side of the threshold: 640 x 360 at 60 cm
(about 11 px) and 1280 x 720 at 60 cm (about 22 px).
"""
from __future__ import annotations

import numpy as np
import pytest


def test_the_default_is_auto_and_the_setting_is_checked():
    from aspectus.errors import ParameterError
    from aspectus.webcam.eye_anchors import ANCHOR_SET_CHOICES, ANCHOR_SETS, AUTO_SMALL_FACE_SET
    from aspectus.webcam.gaze import GazeParams

    assert GazeParams().eye_anchor_set == "auto"
    assert AUTO_SMALL_FACE_SET in ANCHOR_SETS and set(ANCHOR_SET_CHOICES) == {"auto", *ANCHOR_SETS}
    for v in ANCHOR_SET_CHOICES:
        assert GazeParams(eye_anchor_set=v).eye_anchor_set == v
    with pytest.raises(ParameterError, match="auto, below, below_and_beside"):
        GazeParams(eye_anchor_set="beside")


def test_the_rule_picks_the_set_by_the_iris_size_of_the_first_frames_and_the_clip():
    from aspectus.webcam.eye_anchors import AUTO_SMALL_FACE_SET, DEFAULT_ANCHOR_SET
    from aspectus.webcam.gaze import SMALL_FACE_BELOW_PX, GazeParams
    from aspectus.webcam.pipeline import _anchor_set_choice

    def size(px):
        return {"iris_px": px, "iris_px_source": "limbus fit", "limbus_fits": 600, "mesh_iris_px": px + 0.8}

    small, large = (True, size(11.0)), (False, size(22.0))
    auto = GazeParams()
    c = _anchor_set_choice(auto, True, True, *small)
    assert c["used"] == AUTO_SMALL_FACE_SET and c["iris_px"] == 11.0 and c["iris_px_source"] == "limbus fit"
    assert c["mesh_median_iris_px"] == 11.8
    assert c["threshold_px"] == SMALL_FACE_BELOW_PX and "is below" in c["reason"]
    c = _anchor_set_choice(auto, True, False, *large)
    assert c["used"] == DEFAULT_ANCHOR_SET and "first frames" in c["reason"]
    # small at first, large over the clip: the clip decides, as for the iris estimate
    c = _anchor_set_choice(auto, True, True, *large)
    assert c["used"] == DEFAULT_ANCHOR_SET and "22.0 px (limbus fit) is not below" in c["reason"]
    # which sizes are small (below the threshold, not at it) is iris_appearance.small_iris's rule (test_iris_auto)
    # a set chosen by name is used as it is; no anchors at all without the eye picture
    assert _anchor_set_choice(GazeParams(eye_anchor_set="below_and_facing_beside"), True, None, *small) == {
        "setting": "below_and_facing_beside", "used": "below_and_facing_beside"}
    c = _anchor_set_choice(GazeParams(refine_iris=False), False, None, *small)
    assert c["used"] is None and "refine_iris" in c["reason"]


def _extract(clip, anchor_set=None, **kw):
    from aspectus.webcam.gaze import GazeParams
    from aspectus.webcam.pipeline import ProcessParams, extract_samples

    gaze = GazeParams() if anchor_set is None else GazeParams(eye_anchor_set=anchor_set)
    return extract_samples(clip, params=ProcessParams(gaze=gaze), **kw)


_COLS = ("yaw_deg", "pitch_deg", "head_x_mm", "head_y_mm", "head_z_mm")


@pytest.mark.slow
def test_auto_on_a_small_face_gives_the_set_beside_the_eyes(rendered_clip):
    from aspectus.webcam.eye_anchors import AUTO_SMALL_FACE_SET

    clip = rendered_clip(duration_s=6.0, seed=31, size_px=(640, 360), head_motion=True, name="p31_s01.mp4").path
    s_auto, meta = _extract(clip, geometry_mode="thread")
    c = meta["gaze_model"]["eye_anchor_set"]
    assert c["setting"] == "auto" and c["used"] == AUTO_SMALL_FACE_SET, c
    assert 9.0 <= c["iris_px"] < c["threshold_px"] and c["iris_px_source"] == "limbus fit"
    s_set, meta_set = _extract(clip, AUTO_SMALL_FACE_SET, geometry_mode="thread")
    assert meta_set["gaze_model"]["eye_anchor_set"] == {"setting": AUTO_SMALL_FACE_SET, "used": AUTO_SMALL_FACE_SET}
    for col in _COLS:  # the extra points followed by a tracker of their own: the same samples as the set alone
        np.testing.assert_array_equal(s_auto[col].to_numpy(), s_set[col].to_numpy(), err_msg=col)
    s_below, _ = _extract(clip, "below", geometry_mode="thread")
    assert not np.allclose(s_auto["head_x_mm"], s_below["head_x_mm"], equal_nan=True)


@pytest.mark.slow
def test_auto_on_a_large_face_is_the_set_below_the_eyes_bit_for_bit(rendered_clip):
    clip = rendered_clip(duration_s=6.0, seed=22, size_px=(1280, 720), name="p22_s01.mp4").path
    s_auto, meta = _extract(clip, geometry_mode="process")  # the setting passed on to the geometry's child
    c = meta["gaze_model"]["eye_anchor_set"]
    assert c["used"] == "below" and "first frames" in c["reason"], c
    assert c["iris_px"] >= c["threshold_px"]
    s_below, _ = _extract(clip, "below", geometry_mode="thread")
    for col in _COLS:
        np.testing.assert_array_equal(s_auto[col].to_numpy(), s_below[col].to_numpy(), err_msg=col)
