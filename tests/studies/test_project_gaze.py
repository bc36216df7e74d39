"""The gaze-measurement settings a study saves: the plain choices the app offers map onto GazeParams, survive
saving and loading, an older study without them loads with GazeParams' defaults, a stored value outside the
choices falls back to the default with a sentence naming the setting, and the app hands them to processing as
the command line's ``--gaze NAME=VALUE`` does (the reference: ``aspectus.cli.process_cmd.gaze_params_from_args``).
"""
from __future__ import annotations

import argparse
import json

import pytest

from aspectus.studies import project as study_mod
from aspectus.webcam.gaze import (GAZE_CHOICE_OF, GAZE_CHOICES, IRIS_COMBINE, IRIS_SCALES, IRIS_SHAPES, GazeParams, describe_iris_estimate,
                                  gaze_settings_from_stored)
from aspectus.webcam.pipeline import ProcessParams


def test_choices_are_exactly_the_values_gazeparams_accepts():
    from aspectus.webcam.eye_anchors import ANCHOR_SET_CHOICES

    assert set(GAZE_CHOICE_OF["iris_combine"].values) == set(IRIS_COMBINE)
    assert set(GAZE_CHOICE_OF["eye_anchor_set"].values) == set(ANCHOR_SET_CHOICES)
    assert GAZE_CHOICE_OF["head_rotation"].values == ("mesh", "skin")
    assert GAZE_CHOICE_OF["mirrored"].values == (False, True)
    assert set(GAZE_CHOICE_OF["iris_scale"].values) == set(IRIS_SCALES)
    assert set(GAZE_CHOICE_OF["iris_shape"].values) == set(IRIS_SHAPES)
    assert GAZE_CHOICE_OF["iris_registration"].values == (False, True)
    defaults = GazeParams().to_dict()
    for c in GAZE_CHOICES:
        assert c.values[0] == defaults[c.name], f"{c.name}: the first choice must be GazeParams' default"
        assert c.options[0][1].endswith("(default)") and sum("(default)" in t for _, t, _ in c.options) == 1
        for value, text, help_ in c.options:
            assert GazeParams(**{c.name: value}).to_dict()[c.name] == value
            # plain words: no field names or values in code spelling on screen
            assert "_" not in text and "_" not in c.label and "_" not in help_, (c.name, value)
            assert len(help_) > 40, f"{c.name}={value!r}: help says what it does and when to choose it"


def test_study_round_trip_and_old_study_defaults(tmp_path):
    s = study_mod.new_study(path=tmp_path / "pilot.aspectus-study.json")
    s.process = {"fov_deg": 60.0, "face": "largest", "max_faces": 2,
                 "gaze": {"iris_combine": "limbus", "head_rotation": "skin", "eye_anchor_set": "below_and_beside",
                          "mirrored": True}}
    s.save()
    back = study_mod.load_study(s.path)
    assert back.process == s.process and back.notes == []
    # a study written before the gaze settings existed: no key, no message, GazeParams' defaults
    raw = json.loads(s.path.read_text())
    raw["process"].pop("gaze")
    s.path.write_text(json.dumps(raw))
    old = study_mod.load_study(s.path)
    assert "gaze" not in old.process and old.notes == []
    from ui.job_runner import _make_params

    assert _make_params(old.process, {}).gaze == GazeParams()


def test_invalid_stored_value_falls_back_with_a_message_naming_the_setting(tmp_path):
    settings, notes = gaze_settings_from_stored({"iris_combine": "sideways", "mirrored": "yes",
                                                 "head_rotation": "skin", "pupil_colour": "blue"})
    assert settings == {"head_rotation": "skin"}
    assert len(notes) == 3
    assert "Iris height from" in notes[0] and "'sideways'" in notes[0] and "automatic: the eye's appearance" in notes[0]
    assert "The clips show the student" in notes[1] and "'yes'" in notes[1]  # a string is not the boolean
    assert "pupil_colour" in notes[2]
    # a combination GazeParams refuses (the appearance estimate needs the eye anchors) drops the hidden one
    settings, notes = gaze_settings_from_stored({"iris_combine": "appearance", "eye_anchors": False})
    assert settings == {"iris_combine": "appearance"} and "do not go together" in notes[0]
    assert gaze_settings_from_stored([1, 2])[0] == {} and "not readable" in gaze_settings_from_stored([1, 2])[1][0]
    # through the study file
    p = tmp_path / "s.aspectus-study.json"
    p.write_text(json.dumps({"format": study_mod.STUDY_FORMAT, "version": 1, "process": {
        "fov_deg": 60.0, "gaze": {"iris_combine": "sideways", "eye_anchor_set": "below_and_beside"}}}))
    s = study_mod.load_study(p)
    assert s.process["gaze"] == {"eye_anchor_set": "below_and_beside"}
    assert len(s.notes) == 1 and "Iris height from" in s.notes[0] and p.name in s.notes[0]


@pytest.mark.parametrize("gaze", [{"iris_combine": "limbus"},
                                  {"iris_combine": "fuse", "head_rotation": "skin", "mirrored": True},
                                  {"eye_anchor_set": "below_and_facing_beside", "iris_combine": "appearance"}])
def test_the_app_passes_gaze_settings_as_the_command_line_does(gaze):
    from aspectus.cli.process_cmd import gaze_params_from_args
    from ui.job_runner import _make_params

    cli = gaze_params_from_args(argparse.Namespace(gaze_settings=[f"{k}={str(v).lower()}" for k, v in gaze.items()]))
    app = _make_params({"fov_deg": 60.0, "face": "largest", "max_faces": 2, "gaze": gaze}, {})
    assert app.gaze == cli
    assert app.fingerprint() == ProcessParams(gaze=cli).fingerprint()


def _study_with_a_clip(tmp_path):
    """A study with one (undecodable) clip and its empty output folder: (study, clip, folder)."""
    s = study_mod.new_study(path=tmp_path / "s.aspectus-study.json")
    clip = tmp_path / "p01_s01.mp4"
    clip.write_bytes(b"\0" * 16)
    c = s.add_clip(clip)
    out = s.clip_out_dir(c)
    out.mkdir(parents=True)
    return s, c, out


def test_outdated_when_a_run_used_other_gaze_settings(tmp_path):
    """A clip whose run.json records other gaze settings than the study's is outdated; the same ones are current."""
    s, c, out = _study_with_a_clip(tmp_path)
    (out / "run.json").write_text(json.dumps({"params": ProcessParams().to_dict()}))
    s.process = {"fov_deg": 60.0, "face": "largest", "max_faces": 2, "gaze": {"iris_combine": "auto"}}
    assert s.refresh_status(c) == study_mod.STATUS_DONE
    s.process["gaze"] = {"iris_combine": "limbus"}
    assert s.refresh_status(c) == study_mod.STATUS_STALE
    s.process["gaze"] = {}  # every gaze setting at its default
    assert s.refresh_status(c) == study_mod.STATUS_DONE


def test_iris_estimate_in_plain_words():
    # the shapes pipeline.extract_samples writes into run.json's extraction.gaze_model.iris_estimate
    assert describe_iris_estimate({"setting": "limbus", "used": "limbus"}) == \
        "Iris height from: circle fit to the iris edge (as chosen)."
    assert describe_iris_estimate({"setting": "limbus", "used": "face mesh"}).startswith(
        "Iris height from: the face tracker's iris point (chosen: circle fit to the iris edge, which could not be used")
    # a run.json written before 2026-12-05, when "auto" chose by the iris size (its threshold recorded)
    auto_big = describe_iris_estimate({"setting": "auto", "used": "limbus", "iris_px": 24.5,
                                       "iris_px_source": "limbus fit", "mesh_median_iris_px": 26.1, "threshold_px": 16.8,
                                       "reason": "the clip's iris diameter 24.5 px (limbus fit) is not below 16.8 px"})
    # the measure is named (the verdict's "irises about N px across" is the face tracker's, which reads larger)
    assert auto_big == ("Iris height from: circle fit to the iris edge (chosen automatically: the circle fit measures "
                        "the iris 24.5 px across, not below 16.8 px).")
    assert "automatic:" not in auto_big and "_" not in auto_big
    # small iris, but the appearance estimate could not be learnt: said without the method's inner words (a run.json
    # written before the choice read the limbus fit's size: the face mesh's as median_iris_px)
    short = describe_iris_estimate({
        "setting": "auto", "used": "limbus", "median_iris_px": 12.1, "threshold_px": 16.8,
        "reason": "the appearance regression was not fitted (too few open-eye frames with a limbus fit: at least "
                  "150 per eye are needed): the limbus fit is used"})
    assert short == ("Iris height from: circle fit to the iris edge (chosen automatically: the iris is 12.1 px "
                     "across, below 16.8 px, but the clip has too few frames with open eyes to learn the eye's "
                     "appearance).")
    # since then "auto" takes the appearance estimate at every size; where it could not be learnt it says why
    now = describe_iris_estimate({"setting": "auto", "used": "limbus", "iris_px": 24.5, "iris_px_source": "limbus fit",
                                  "reason": "the appearance regression was not fitted (too few open-eye frames with a "
                                            "limbus fit: at least 150 per eye are needed): the limbus fit is used"})
    assert now == ("Iris height from: circle fit to the iris edge (chosen automatically: the clip has too few frames "
                   "with open eyes to learn the eye's appearance).")
    assert describe_iris_estimate(None) is None and describe_iris_estimate({}) is None
    # learnt from a short clip: said, with what to do; from a long one (or a run.json without the figure): not
    fitted = {"setting": "auto", "used": "appearance", "iris_px": 11.6, "iris_px_source": "limbus fit",
              "reason": "the appearance estimate was fitted on the clip's own eyes"}
    short = describe_iris_estimate(fitted | {"learnt_from_s": 12.3})
    assert short.startswith("Iris height from: the eye's appearance (chosen automatically), learnt from 12.3 s of "
                            "open eyes:") and "40 s" in short and "segments file" in short
    for long_enough in ({"learnt_from_s": 40.0}, {"learnt_from_s": 312.0}, {}, {"learnt_from_s": None}):
        assert describe_iris_estimate(fitted | long_enough) == "Iris height from: the eye's appearance (chosen automatically)."


def test_learnt_from_counts_the_eye_with_fewer_training_frames_at_the_clips_frame_rate():
    import numpy as np

    from aspectus.webcam.pipeline import _learnt_from_s

    info = {"blocks": [{"right": {"fitted": True, "train_frames": 2900}, "left": {"fitted": True, "train_frames": 2950}},
                       {"right": {"fitted": True, "train_frames": 600}, "left": {"fitted": False}}]}
    assert _learnt_from_s(info, np.arange(4000) / 30.0) == pytest.approx(2950 / 30.0, abs=0.05)  # right 2900 + 600, left 2950 + 0
    assert _learnt_from_s(info, np.arange(4000) / 60.0) == pytest.approx(2950 / 60.0, abs=0.05)
    t = np.arange(4000) / 30.0
    t[100:200] = np.nan  # frames without a face keep their times unknown: the median interval still holds
    assert _learnt_from_s(info, t) == pytest.approx(2950 / 30.0, abs=0.05)
    assert _learnt_from_s(info, np.array([0.0])) is None and _learnt_from_s({"blocks": []}, t) == 0.0


def test_a_blink_pad_saved_in_frames_is_read_in_ms(tmp_path):
    """The older setting ``blink_pad_frames`` n (frames at 30 fps) reads as ``blink_pad_ms`` 40 n ms, in a saved
    study and in a run's run.json alike (aspectus.webcam.gaze.GazeParams.from_dict)."""
    settings, notes = gaze_settings_from_stored({"blink_pad_frames": 2, "mirrored": True})
    assert settings == {"blink_pad_ms": 80.0, "mirrored": True} and notes == []
    s, c, out = _study_with_a_clip(tmp_path)
    params = ProcessParams().to_dict()
    del params["gaze"]["blink_pad_ms"]
    s.process = {"fov_deg": 60.0, "face": "largest", "max_faces": 2, "gaze": {}}  # the default pad, 40 ms
    for frames, status in ((3, study_mod.STATUS_STALE), (1, study_mod.STATUS_DONE)):
        params["gaze"]["blink_pad_frames"] = frames  # a run made when the pad was set in frames
        (out / "run.json").write_text(json.dumps({"params": params}))
        assert s.refresh_status(c) == status, frames


@pytest.mark.parametrize("name, value", [("iris_registration", True), ("iris_shape", "ellipse")])
def test_a_run_from_before_a_setting_existed_ran_with_its_default(tmp_path, name, value):
    """A run.json written before a gaze setting existed has no entry for it: that run measured as the setting's
    default does (the settings added later default to the earlier behaviour). It is current for a study at the
    default, and outdated for a study that chose another value - not counted as done with it."""
    s, c, out = _study_with_a_clip(tmp_path)
    params = ProcessParams().to_dict()
    del params["gaze"][name]
    (out / "run.json").write_text(json.dumps({"params": params}))
    s.process = {"fov_deg": 60.0, "face": "largest", "max_faces": 2, "gaze": {}}
    assert s.refresh_status(c) == study_mod.STATUS_DONE
    s.process["gaze"] = {name: value}
    assert s.refresh_status(c) == study_mod.STATUS_STALE
