"""process_clip / reanalyse / aspectus process on small rendered clips through the real decoder."""
from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from aspectus.atomic import sha256_file
from aspectus.errors import NoFaceError
from aspectus.webcam.pipeline import CacheError, ProcessParams, load_samples, process_clip, reanalyse
from aspectus.schema import REQUIRED_SAMPLE_COLUMNS, SAMPLE_COLUMNS

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def clip(tmp_path_factory):
    from aspectus.synth.render import render_clip
    from aspectus.synth.trajectory import synth_trajectory

    d = tmp_path_factory.mktemp("pipe")
    traj = synth_trajectory(duration_s=3.0, seed=5, task="scene", blink_rate_per_min=30)
    res = render_clip(d / "p09_s01.mp4", traj, size_px=(640, 360), fps=30.0, seed=5)
    return res.path


@pytest.fixture(scope="module")
def processed(clip, tmp_path_factory):
    out = tmp_path_factory.mktemp("out") / "p09_s01"
    return process_clip(clip, out), out


def test_outputs_and_sidecar(processed, clip):
    res, out = processed
    for name in ("samples.parquet", "samples.csv", "events.csv", "events.parquet", "features.csv",
                 "features.parquet", "run.json"):
        assert (out / name).is_file(), name
    run = json.loads((out / "run.json").read_text())
    assert run["input_sha256"] == sha256_file(clip)
    for name, meta in run["outputs"].items():  # every output listed with the checksum it has on disk
        assert sha256_file(out / name) == meta["sha256"], name
    assert run["params"]["fov_deg"] == 60.0 and "analysis" in run["params"]
    assert run["software"]["mediapipe"] == "0.10.21"
    assert set(run["columns"]) >= set(REQUIRED_SAMPLE_COLUMNS)


def test_samples_table_schema(processed):
    res, out = processed
    s = pd.read_parquet(out / "samples.parquet")
    assert list(s.columns[: len(SAMPLE_COLUMNS)]) == [c.name for c in SAMPLE_COLUMNS]
    assert s["t_s"].iloc[0] == 0.0 and np.all(np.diff(s["t_s"]) > 0)
    assert s["valid"].dtype == bool
    assert s.loc[~s["valid"], "yaw_deg"].isna().all()  # invalid samples carry no angle
    assert s.loc[s["blink"], "valid"].eq(False).all()
    csv = pd.read_csv(out / "samples.csv")
    assert len(csv) == len(s) and np.allclose(csv["t_s"], s["t_s"])


def test_summary_and_blinks(processed):
    res, _ = processed
    s = res.summary
    assert s["frames"] == 90 and s["face_found_frac"] > 0.95
    assert s["usable"] is True and s["verdict"].startswith(("Usable:", "Partly usable:"))
    assert s["blink_count"] >= 1  # the trajectory blinks about 1.5 times in 3 s


def test_reuse_skips_landmarking_and_damaged_cache_is_rebuilt(processed, clip):
    res, out = processed
    again = process_clip(clip, out)
    assert again.reused_samples
    pd.testing.assert_frame_equal(again.samples, res.samples)
    # damage the cache: it is detected by its checksum and never used
    p = out / "samples.parquet"
    p.write_bytes(p.read_bytes()[:-100] + b"\0" * 100)
    with pytest.raises(CacheError, match="checksum"):
        load_samples(out)
    rebuilt = process_clip(clip, out)
    assert not rebuilt.reused_samples
    pd.testing.assert_frame_equal(load_samples(out), res.samples)
    # the CSV export deleted by hand: a reusing run writes it again and run.json vouches for the new file
    csv = out / "samples.csv"
    before = csv.read_bytes()
    csv.unlink()
    again = process_clip(clip, out)
    assert again.reused_samples and csv.read_bytes() == before
    run = json.loads((out / "run.json").read_text())
    assert run["outputs"]["samples.csv"]["sha256"] == sha256_file(csv)
    assert "clip_resolved" not in run  # absolute paths only on request (issue 17.2)
    assert (out / run["clip"]).resolve() == clip.resolve()


def test_reanalyse_changes_results_without_landmarking(processed):
    from aspectus.events.analysis import AnalysisParams

    res, out = processed
    d = AnalysisParams().to_dict()
    d["window_s"] = 1.0
    d["step_s"] = 1.0
    new = reanalyse(out, AnalysisParams.from_dict(d))
    n_windows = (new.features["scope"] == "window").sum()
    assert n_windows >= 3
    run = json.loads((out / "run.json").read_text())
    assert run["params"]["analysis"]["window_s"] == 1.0
    assert sha256_file(out / "features.csv") == run["outputs"]["features.csv"]["sha256"]
    # the quality summary follows the new events (it was left from the first run)
    assert run["quality"]["fixation_count"] == int((new.events["type"] == "fixation").sum())
    d["min_fixation_ms"] = 200.0  # fewer fixations survive
    fewer = reanalyse(out, AnalysisParams.from_dict(d))
    run = json.loads((out / "run.json").read_text())
    assert run["quality"]["fixation_count"] == int((fewer.events["type"] == "fixation").sum())
    assert run["quality"]["fixation_count"] < int((new.events["type"] == "fixation").sum())


def test_verdict_notes_repaired_timestamps(processed):
    """Frames whose timestamps were missing or out of order are placed just after the previous one by the
    decoder; the verdict says how many, so nobody reads those intervals as measured."""
    from aspectus.webcam.pipeline import summarise

    res, _ = processed
    s = summarise(res.samples, res.analysis, {"decode": {"frames": 90, "pts_missing": 1, "pts_non_increasing": 2}})
    assert "3 frame(s) had a missing or out-of-order timestamp" in s["verdict"]
    clean = summarise(res.samples, res.analysis, {"decode": {"frames": 90, "pts_missing": 0}})
    assert "timestamp" not in clean["verdict"]
    # the default's fallback to the circle fit is named in words; where run.json keeps the details is no key path
    # to type; the default itself (the eyes' appearance) needs no sentence, nor a fit chosen explicitly
    fell = summarise(res.samples, res.analysis, {"gaze_model": {"iris_estimate": {"setting": "auto", "used": "limbus"}}})
    assert "circle fitted to the iris edge" in fell["verdict"] and "gaze_model" not in fell["verdict"]
    for est in ({"setting": "auto", "used": "appearance"}, {"setting": "limbus", "used": "limbus"}):
        s = summarise(res.samples, res.analysis, {"gaze_model": {"iris_estimate": est}})
        assert "iris height" not in s["verdict"], est


def test_verdict_of_a_short_noisy_clip_advises_whole_recordings(processed):
    """A clip whose appearance estimate learnt from less than WELL_LEARNT_S s and whose precision falls short of
    the finest tier: the verdict says what may help (a whole recording); a long clip, or a precise one, reads
    without it."""
    import numpy as np

    from aspectus.events.analysis import run_analysis
    from aspectus.webcam.gaze import WELL_LEARNT_S
    from aspectus.webcam.pipeline import PRECISION_TIERS, summarise

    res, _ = processed
    noisy = res.samples.copy()
    rng = np.random.default_rng(4)
    for c in ("yaw_deg", "pitch_deg"):
        noisy[c] = noisy[c] + rng.normal(0, 2.5, len(noisy))
    an = run_analysis(noisy)

    def verdict(samples, analysis, learnt):
        est = {"setting": "auto", "used": "appearance", "learnt_from_s": learnt}
        return summarise(samples, analysis, {"gaze_model": {"iris_estimate": est}})

    short = verdict(noisy, an, 12.5)
    assert short["precision_tier"] != PRECISION_TIERS[0][0]
    assert "learnt from only 12.5 s of open eyes" in short["verdict"] and "segments file" in short["verdict"]
    assert "learnt from only" not in verdict(noisy, an, WELL_LEARNT_S)["verdict"]
    # the rule itself: no advice at the finest tier, nor for the fallback, nor without the figure (older run.json)
    from aspectus.webcam.pipeline import short_learning_sentence

    finest, other = PRECISION_TIERS[0][0], PRECISION_TIERS[1][0]
    assert short_learning_sentence({"used": "appearance", "learnt_from_s": 12.5}, finest) == ""
    assert short_learning_sentence({"used": "appearance", "learnt_from_s": 12.5}, other).startswith(" The iris height")
    for est in ({"used": "limbus", "learnt_from_s": 12.5}, {"used": "appearance"},
                {"used": "appearance", "learnt_from_s": True}, {}):
        assert short_learning_sentence(est, other) == "", est


def test_clip_without_face(tmp_path):
    from aspectus.synth.render import render_clip
    from aspectus.synth.trajectory import synth_trajectory

    traj = synth_trajectory(duration_s=1.0, seed=1)
    res = render_clip(tmp_path / "empty_room.mp4", traj, size_px=(320, 240), face_visible=[False] * 30)
    with pytest.raises(NoFaceError, match="empty_room.mp4.*no face"):
        process_clip(res.path, tmp_path / "out")
    assert not (tmp_path / "out" / "run.json").exists()


def test_cli_reports_bad_clip_and_finishes_the_others(clip, tmp_path):
    bad = tmp_path / "broken.mp4"
    bad.write_text("this is not a video")
    out = tmp_path / "cli"
    r = subprocess.run([sys.executable, "-m", "aspectus", "process", str(bad), str(clip), "-o", str(out), "--quiet"],
                       capture_output=True, text=True, timeout=600)
    assert r.returncode == 1
    assert "broken.mp4" in r.stderr and "not a readable video" in r.stderr
    assert "Traceback" not in r.stderr
    # the face mesh's start-up lines from its C++ side are kept off the user's terminal (each new graph is run
    # once on a blank picture while stderr is silenced: aspectus.webcam.landmarks._warm_up)
    assert "inference_feedback_manager" not in r.stderr and "TensorFlow Lite" not in r.stderr
    assert (out / clip.stem / "run.json").exists()
    assert "frames" in r.stdout and "face found" in r.stdout
    assert "reused" not in r.stdout
    # a second run says that it reused the gaze samples, and how to redo them
    r2 = subprocess.run([sys.executable, "-m", "aspectus", "process", str(clip), "-o", str(out), "--quiet"],
                        capture_output=True, text=True, timeout=600)
    assert r2.returncode == 0 and "gaze samples reused" in r2.stdout and "--no-reuse" in r2.stdout


def test_cli_outdir_that_is_a_file_is_refused_before_any_work(clip, tmp_path, capsys):
    from aspectus.cli import main

    not_a_dir = tmp_path / "results.txt"
    not_a_dir.write_text("notes of the pilot")
    assert main(["process", str(clip), "-o", str(not_a_dir), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert "results.txt" in err and "is a file, not a folder" in err and "Traceback" not in err
    assert not_a_dir.read_text() == "notes of the pilot"


def test_cli_clip_whose_output_cannot_be_written_fails_alone(clip, tmp_path, capsys):
    """One clip's output folder cannot be created (a file is in the way): that clip gets a one-line error
    naming it, the next clip still finishes, the exit code says a clip failed."""
    import shutil

    from aspectus.cli import main

    other = tmp_path / "p09_s02.mp4"
    shutil.copy(clip, other)
    out = tmp_path / "cli"
    out.mkdir()
    (out / "p09_s02").write_text("in the way")
    assert main(["process", str(other), str(clip), "-o", str(out), "--quiet"]) == 1
    cap = capsys.readouterr()
    assert "p09_s02.mp4" in cap.err and "could not write its outputs" in cap.err and "Traceback" not in cap.err
    assert "1 of 2 clip(s) failed" in cap.err
    assert (out / clip.stem / "run.json").exists()
    assert (out / "p09_s02").read_text() == "in the way"


def test_bad_parameters_are_refused():
    from aspectus.errors import ParameterError

    with pytest.raises(ParameterError, match=r"field of view 5 deg is outside 20-120 deg.*--fov-deg"):
        ProcessParams(fov_deg=5)
    with pytest.raises(ParameterError, match="face choice"):
        ProcessParams(face="biggest")


def test_gaze_parameters_are_checked():
    from aspectus.errors import ParameterError
    from aspectus.webcam.gaze import GazeParams

    with pytest.raises(ParameterError, match="blink_rel_threshold"):
        GazeParams(blink_rel_threshold=1.5)
    with pytest.raises(ParameterError, match="iris_combine"):
        GazeParams(iris_combine="average")
    with pytest.raises(ParameterError, match="needs refine_iris and eye_anchors"):
        GazeParams(iris_combine="appearance", eye_anchors=False)
    with pytest.raises(ParameterError, match="needs refine_iris and eye_anchors"):
        GazeParams(iris_combine="appearance", refine_iris=False)
    with pytest.raises(ParameterError, match="eye_anchors"):
        GazeParams(eye_anchors="no")
    with pytest.raises(ParameterError, match="head_rotation = 'face'"):
        GazeParams(head_rotation="face")
    with pytest.raises(ParameterError, match="head_rotation = 'skin' needs refine_iris"):
        GazeParams(head_rotation="skin", refine_iris=False)
    assert GazeParams(head_rotation="skin", eye_anchors=False).head_rotation == "skin"
    with pytest.raises(ParameterError, match="blink_pad_ms = 200"):
        GazeParams(blink_pad_ms=200)
    # the blink pad was in frames before it was in ms: older settings read as 40 ms a frame
    assert ProcessParams.from_dict({"gaze": {"blink_pad_frames": 2}}).gaze.blink_pad_ms == 80.0
    # an older run.json without the newer keys still reads, with the defaults
    p = ProcessParams.from_dict({"fov_deg": 60.0, "gaze": {"blink_rel_threshold": 0.5}})
    assert p.gaze.blink_rel_threshold == 0.5 and p.gaze.eye_anchors is True


def test_stored_gaze_settings_that_cannot_be_read_are_named(tmp_path):
    """Gaze settings read from a file (a batch's --params run.json): a name this version does not know, a gaze entry
    that is not name: value pairs, or an older blink pad that is not a number are refused with the setting's
    name, not a Python error."""
    from aspectus.errors import ParameterError
    from aspectus.webcam.gaze import GazeParams

    with pytest.raises(ParameterError, match="unknown gaze parameter 'pupil_colour'") as exc:
        ProcessParams.from_dict({"gaze": {"pupil_colour": "blue"}})
    assert "blink_pad_ms" in exc.value.hint
    with pytest.raises(ParameterError, match="gaze settings .* name: value pairs"):
        ProcessParams.from_dict({"gaze": "limbus"})
    with pytest.raises(ParameterError, match="blink_pad_frames = 'one'"):
        GazeParams.from_dict({"blink_pad_frames": "one"})
    # a batch's --params file: the error names it
    import argparse

    from aspectus.cli.batch_cmd import _params_from_args

    f = tmp_path / "run.json"
    f.write_text(json.dumps({"params": {"gaze": {"pupil_colour": "blue"}}}))
    with pytest.raises(ParameterError, match="unknown gaze parameter 'pupil_colour'") as exc:
        _params_from_args(argparse.Namespace(params=str(f)))
    assert exc.value.path == f
    f.write_text(json.dumps({"params": {"gaze": {"blink_pad_frames": 2}}}))
    assert _params_from_args(argparse.Namespace(params=str(f))).gaze.blink_pad_ms == 80.0


def test_cli_gaze_setting_switches_the_eye_anchors_off(clip, tmp_path):
    """``--gaze eye_anchors=false`` keeps the head translation from PnP; the sidecar records it."""
    out = tmp_path / "cli"
    r = subprocess.run([sys.executable, "-m", "aspectus", "process", str(clip), "-o", str(out), "--quiet",
                        "--gaze", "eye_anchors=false"], capture_output=True, text=True, timeout=600)
    assert r.returncode == 0, r.stderr
    run = json.loads((out / clip.stem / "run.json").read_text())
    assert run["params"]["gaze"]["eye_anchors"] is False
    assert run["extraction"]["eye_anchor_frames"] == 0
    with_anchors = process_clip(clip, tmp_path / "default" / clip.stem)
    run2 = json.loads((tmp_path / "default" / clip.stem / "run.json").read_text())
    assert run2["extraction"]["eye_anchor_frames"] > 0.8 * len(with_anchors.samples)
    off = pd.read_parquet(out / clip.stem / "samples.parquet")
    assert not np.allclose(off["head_x_mm"], with_anchors.samples["head_x_mm"], equal_nan=True)  # it does differ
    bad = subprocess.run([sys.executable, "-m", "aspectus", "process", str(clip), "-o", str(tmp_path / "x"),
                          "--quiet", "--gaze", "anchors=off"], capture_output=True, text=True, timeout=600)
    assert bad.returncode != 0 and "unknown gaze parameter 'anchors'" in bad.stderr and "eye_anchors" in bad.stderr
    assert "Traceback" not in bad.stderr


@pytest.mark.parametrize("option, setting, message", [
    ("--gaze", "blink_pad_ms=abc", "--gaze blink_pad_ms='abc': expected a number"),
    ("--gaze", "eye_anchors=maybe", "--gaze eye_anchors='maybe': expected true or false"),
    ("--set", "min_fixation_ms=abc", "--set min_fixation_ms='abc': expected"),
])
def test_cli_bad_setting_values_name_the_parameter(clip, tmp_path, option, setting, message):
    r = subprocess.run([sys.executable, "-m", "aspectus", "process", str(clip), "-o", str(tmp_path / "x"), "--quiet",
                        option, setting], capture_output=True, text=True, timeout=300)
    assert r.returncode != 0
    assert message in r.stderr, r.stderr
    assert "Traceback" not in r.stderr
    assert not (tmp_path / "x").exists() or not any((tmp_path / "x").rglob("run.json"))


def test_frames_with_only_a_bystander_are_invalid_and_reported(rendered_clip, tmp_path):
    """The student leaves the picture for half a second while a classmate stays in view: those rows stay in
    the table, invalid, with the classmate counted in face_count; run.json and the verdict say how many."""
    vis = np.ones(90, bool)
    vis[30:45] = False
    clip = rendered_clip(duration_s=3.0, seed=3, extra_faces=1, face_visible=vis, name="p10_s01.mp4").path
    res = process_clip(clip, tmp_path / "out" / "p10_s01")
    s = res.samples
    assert len(s) == 90
    gap = s.iloc[33:44]
    assert not gap["face_found"].any() and not gap["valid"].any()
    assert (gap["face_count"] >= 1).all()
    run = json.loads((tmp_path / "out" / "p10_s01" / "run.json").read_text())
    ft = run["extraction"]["face_tracking"]
    assert ft["other_faces_only_frames"] >= 11 and ft["reacquired_at_frames"] == []
    assert run["quality"]["other_faces_only_frames"] == ft["other_faces_only_frames"]
    assert f"In {ft['other_faces_only_frames']} frame(s) the followed face was not found while other faces were in view" in run["quality"]["verdict"]
    # the distance stays the student's: the classmate sits farther back (aspectus.synth.render)
    after = s.iloc[50:]
    assert after["face_found"].mean() > 0.9
    assert abs(np.nanmedian(after["distance_mm"]) - np.nanmedian(s.iloc[:30]["distance_mm"])) < 60


def test_cli_unexpected_fault_in_one_clip_does_not_stop_the_others(clip, tmp_path, capsys, monkeypatch):
    """A fault inside aspectus (here: the geometry process dying, simulated) ends that clip with one line that
    names it and the fault; the other clips are still processed."""
    import shutil

    import aspectus.webcam.pipeline as pipeline
    from aspectus.cli import main

    real = pipeline.process_clip

    def flaky(path, *a, **k):
        if Path(path).stem == "p09_s03":
            raise RuntimeError("the geometry process stopped unexpectedly (exit code -9)")
        return real(path, *a, **k)

    monkeypatch.setattr(pipeline, "process_clip", flaky)
    other = tmp_path / "p09_s03.mp4"
    shutil.copy(clip, other)
    out = tmp_path / "cli"
    assert main(["process", str(other), str(clip), "-o", str(out), "--quiet"]) == 1
    err = capsys.readouterr().err
    line = [ln for ln in err.splitlines() if "p09_s03.mp4" in ln]
    assert len(line) == 1 and "RuntimeError" in line[0] and "geometry process stopped" in line[0]
    assert "Traceback" not in err
    log = out / "p09_s03" / "error.log"
    assert str(log) in line[0]  # the traceback is kept for the report, not shown
    assert "Traceback" in log.read_text() and "geometry process stopped" in log.read_text()
    assert (out / clip.stem / "run.json").exists() and not (out / "p09_s03" / "run.json").exists()


def test_a_clip_too_short_to_measure_is_not_usable(tmp_path):
    """A few frames (a still picture saved as video, a recording cut off at once) give a face but nothing to
    measure: the verdict says so instead of 'Usable ... noise nan'; the CLI prints n/a and warnings on one line."""
    import subprocess as sp

    from aspectus.synth.render import render_clip
    from aspectus.synth.trajectory import synth_trajectory

    clip = render_clip(tmp_path / "p11_s01.mp4", synth_trajectory(duration_s=0.2, seed=2), size_px=(320, 240),
                       fps=30.0, seed=2).path
    res = process_clip(clip, tmp_path / "out" / "p11_s01")
    assert res.samples["face_found"].any()
    assert res.summary["usable"] is False
    assert res.summary["verdict"].startswith("Not usable: the clip is too short to measure (6 frame(s)")
    # one frame: no noise figure at all
    one = render_clip(tmp_path / "p11_s02.mp4", synth_trajectory(duration_s=1 / 30, seed=2), size_px=(320, 240),
                      fps=30.0, seed=2).path
    r = sp.run([sys.executable, "-m", "aspectus", "process", str(one), "-o", str(tmp_path / "cli"), "--quiet"],
               capture_output=True, text=True, timeout=300)
    assert r.returncode == 0, r.stderr
    assert "p11_s02.mp4: 1 frame (" in r.stdout and "noise n/a" in r.stdout and "nan" not in r.stdout
    assert "Not usable: the clip is too short" in r.stdout
    warn = [ln for ln in r.stderr.splitlines() if "aspectus: warning:" in ln]
    assert warn and not any("features = compute_features" in ln for ln in r.stderr.splitlines())


def test_field_of_view_override_scales_distance_by_the_pinhole_model(processed, clip, tmp_path):
    """--fov-deg sets the focal length f = (width / 2) / tan(fov / 2) (pinhole camera, e.g. Hartley &
    Zisserman, Multiple View Geometry, ch. 6 - from memory). The iris scale gives distance = f x 11.7 mm /
    iris diameter in px, so going from 60 to 45 deg must multiply every distance by tan 30 / tan 22.5."""
    res60, _ = processed
    res45 = process_clip(clip, tmp_path / "fov45", params=ProcessParams(fov_deg=45.0))
    ratio = np.nanmedian(res45.samples["distance_mm"]) / np.nanmedian(res60.samples["distance_mm"])
    assert ratio == pytest.approx(np.tan(np.radians(30.0)) / np.tan(np.radians(22.5)), rel=0.01)
    run = json.loads((tmp_path / "fov45" / "run.json").read_text())
    K = np.array(run["extraction"]["camera_matrix"])
    assert K[0, 0] == pytest.approx(0.5 * 640 / np.tan(np.radians(22.5)))
    # the gaze angles barely depend on it (the issue: the user may override an assumed value)
    d = (res45.samples["yaw_deg"] - res60.samples["yaw_deg"]).abs()
    assert np.nanmedian(d) < 1.0


def test_a_clip_that_cannot_be_read_is_an_input_error(tmp_path):
    """Reading the clip fails with an I/O error (here: a folder's permissions keep it out): the message
    names the clip and says it cannot be read - not that the outputs could not be written."""
    import os

    from aspectus.errors import VideoError

    if os.geteuid() == 0:
        # root reads everything; an unreadable stand-in: a FIFO nobody writes to would hang, so use /proc
        clip = tmp_path / "p12_s01.mp4"
        clip.symlink_to("/proc/self/mem")
    else:
        clip = tmp_path / "p12_s01.mp4"
        clip.write_bytes(b"\0" * 64)
        clip.chmod(0)
    with pytest.raises(VideoError, match="p12_s01.mp4.*(cannot be read|not a readable video)"):
        process_clip(clip, tmp_path / "out")
    assert not (tmp_path / "out" / "run.json").exists()


def test_cli_refuses_to_overwrite_files_it_did_not_write(clip, tmp_path, capsys):
    """A clip's output folder holding a user's own samples.csv (no run.json of aspectus): nothing is written
    over it; one line names the folder, the file and what to do."""
    from aspectus.cli import main

    out = tmp_path / "X"
    mine = out / clip.stem / "samples.csv"
    mine.parent.mkdir(parents=True)
    mine.write_text("mine\n")
    rc = main(["process", str(clip), "-o", str(out), "--quiet"])
    err = capsys.readouterr().err
    assert rc == 1
    assert mine.read_text() == "mine\n"
    assert sorted(p.name for p in mine.parent.iterdir()) == ["samples.csv"]  # no run.json, no staging left
    line = next(ln for ln in err.splitlines() if "samples.csv" in ln)
    assert str(mine.parent) in line and "did not write" in line
    assert "-o OUTDIR" in line and "move those files" in line


def test_reprocessing_keeps_a_users_other_files_and_refuses_unlisted_outputs(processed, clip, tmp_path):
    import shutil

    from aspectus.errors import AspectusInputError

    _, out = processed
    d = tmp_path / out.name
    shutil.copytree(out, d)
    (d / "notes.txt").write_text("lighting was poor\n")  # a name aspectus never writes: kept, not in the way
    again = process_clip(clip, d, reuse=False)
    assert not again.reused_samples and (d / "notes.txt").read_text() == "lighting was poor\n"
    # an output name that aspectus's run.json does not list: someone else's file, never overwritten
    run = json.loads((d / "run.json").read_text())
    del run["outputs"]["features.csv"]
    (d / "run.json").write_text(json.dumps(run))
    (d / "features.csv").write_text("a,b\n1,2\n")
    with pytest.raises(AspectusInputError, match=r"features\.csv, which aspectus did not write \(its run\.json"):
        process_clip(clip, d)
    assert (d / "features.csv").read_text() == "a,b\n1,2\n"


def test_appearance_without_enough_frames_reads_the_iris_as_the_limbus_setting_does(clip):
    """``iris_combine="appearance"`` on a clip too short to learn the regression (90 frames, 150 open-eye frames
    a block needed) takes the limbus fit: the same gaze as ``iris_combine="limbus"``, frames where the fit failed
    included (bridged from the neighbouring fits, not the face mesh's raw iris point). The fit as the appearance
    estimate learns from it, without the side-arc rule (``GazeParams.side_arcs`` acts only where the limbus fit is
    the chosen estimate), so compared with ``limbus`` without it."""
    from aspectus.webcam.gaze import GazeParams, describe_iris_estimate
    from aspectus.webcam.pipeline import extract_samples

    app, meta_app = extract_samples(clip, params=ProcessParams(gaze=GazeParams(iris_combine="appearance")))
    lim, meta_lim = extract_samples(clip, params=ProcessParams(gaze=GazeParams(iris_combine="limbus",
                                                                               side_arcs=False)))
    gm = meta_lim["gaze_model"]
    assert sum(v["filled_frames"] for v in gm["iris_gaps"].values()) > 0  # the fit failed somewhere, bridged
    assert meta_app["gaze_model"]["iris_gaps"] == gm["iris_gaps"]
    assert meta_app["gaze_model"]["iris_estimate"] == {"setting": "appearance", "used": "limbus"}  # as it was
    said = describe_iris_estimate(meta_app["gaze_model"]["iris_estimate"])
    assert said.startswith("Iris height from: circle fit") and "could not be used" in said, said
    for col in ("yaw_deg", "pitch_deg"):
        np.testing.assert_array_equal(app[col].to_numpy(), lim[col].to_numpy(), err_msg=col)


def test_reflections_are_filled_before_the_face_mesh_only_when_asked(clip, tmp_path, monkeypatch):
    """``GazeParams.fill_reflections`` is off by default: the fill moved the face mesh's tracking on a clip without
    any reflection (docs/notes/gaze-measurement.md, "A screen mirrored by the corneas"), so the mesh sees the frame
    as decoded unless asked; with it, every frame after the first with a face goes through the fill."""
    import aspectus.webcam.pipeline as pipeline
    from aspectus.webcam.gaze import GazeParams

    calls = []
    real = pipeline.fill_iris_reflections

    def counting(image, iris_px, iris_diam_px):
        calls.append(1)
        return real(image, iris_px, iris_diam_px)

    monkeypatch.setattr(pipeline, "fill_iris_reflections", counting)
    process_clip(clip, tmp_path / "default" / clip.stem)
    assert not calls
    res = process_clip(clip, tmp_path / "fill" / clip.stem, params=ProcessParams(gaze=GazeParams(fill_reflections=True)))
    assert len(calls) >= 0.8 * len(res.samples)
    run = json.loads((tmp_path / "fill" / clip.stem / "run.json").read_text())
    assert run["params"]["gaze"]["fill_reflections"] is True
