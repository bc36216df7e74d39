"""The app runs the known-target check on a clip: schedule picked, background job with progress and Cancel,
figures shown; a cancelled check writes nothing; errors are plain messages naming the file.

The clip is rendered with eyes that follow the schedule (aspectus.synth.target_gaze, gain 0.6 so the
figures carry a flag that the view must show); the check runs the face mesh on it.
"""
from __future__ import annotations

import json
import shutil

import pytest

pytest.importorskip("PySide6")
pytestmark = [pytest.mark.gui, pytest.mark.slow]


@pytest.fixture(scope="module")
def target_clip(tmp_path_factory):
    from aspectus.synth.target_gaze import render_target_clip
    from aspectus.targets.schedule import Screen, make_schedule

    d = tmp_path_factory.mktemp("app_check")
    sched = make_schedule(Screen(1280, 720, 344.0, 193.5, 600.0), seed=5, fixation_s=1.2, n_fixations=5,
                          pursuit_sweeps=0)
    sched.write(d / "schedule.json")
    render_target_clip(d / "clips" / "student.mp4", sched, lead_in_s=1.0, tail_s=0.5, gain=(0.6, 0.6),
                       offset_deg=(2.0, -2.0), size_px=(640, 480), fov_deg=45.0, seed=3)
    return d


def _window(qtbot, tmp_path, clip):
    from aspectus.studies.project import new_study
    from ui.main_window import MainWindow

    st = new_study(path=tmp_path / "study.json")
    c = st.add_clip(clip)
    st.save()
    w = MainWindow(worker_mode="thread")
    qtbot.addWidget(w)
    w.quiet = True
    assert w.open_study(tmp_path / "study.json")
    w.select_clip(c.stem)
    return w, w.study.find(c.stem)


def _files(folder):
    return sorted(p.relative_to(folder).as_posix() for p in folder.rglob("*")) if folder.exists() else []


def test_app_checks_a_clip_and_shows_the_figures(qtbot, tmp_path, target_clip):
    clip = tmp_path / "clips" / "student.mp4"
    clip.parent.mkdir()
    shutil.copy(target_clip / "clips" / "student.mp4", clip)
    w, c = _window(qtbot, tmp_path, clip)
    v = w.clip_view
    assert v.check_btn.isEnabled() and v.targets_info.isHidden()
    fractions = []
    w._check_progress.connect(lambda key, f, m: fractions.append(f))
    with qtbot.waitSignal(w.target_check_finished, timeout=300_000):
        assert w.check_targets(schedule=target_clip / "schedule.json")
        assert not v.check_bar.isHidden() and not v.check_cancel_btn.isHidden() and not v.check_btn.isEnabled()
        # one job per clip folder at a time: no processing run and no second check while the check runs
        assert not w.process([c.stem], force=True) and "target check" in w.statusBar().currentMessage()
        assert not w.check_targets(schedule=target_clip / "schedule.json")
    out = w.study.clip_out_dir(c)
    doc = json.loads((out / "target_check.json").read_text())
    # the figures the library wrote are the ones shown
    assert not v.targets_info.isHidden()
    text = v.targets_info.text()
    assert f"gain yaw {doc['mapping']['gain_yaw']:.2f}" in text and "outside 0.8-1.25" in text
    assert doc["mapping"]["gain_yaw"] < 0.75  # rendered 0.6: the flag is real, not a display artefact
    assert v.check_bar.isHidden() and v.check_btn.isEnabled() and "target_check.json" in v.check_status.text()
    assert fractions and max(fractions) == pytest.approx(1.0) and fractions == sorted(fractions)
    # the check processed the clip with the study's settings: the clip list shows it done
    assert w.study.find(c.stem).status == "done"


def test_cancel_leaves_no_partial_output(qtbot, tmp_path, target_clip):
    from PySide6.QtCore import Qt

    clip = tmp_path / "clips" / "student.mp4"
    clip.parent.mkdir()
    shutil.copy(target_clip / "clips" / "student.mp4", clip)
    w, c = _window(qtbot, tmp_path, clip)
    out = w.study.clip_out_dir(c)
    # 1. cancelled while the clip is processed: no result folder content at all
    w._check_progress.connect(lambda key, f, m: w._check_cancel and w._check_cancel.set(), Qt.DirectConnection)
    with qtbot.waitSignal(w.target_check_finished, timeout=300_000):
        assert w.check_targets(schedule=target_clip / "schedule.json")
    assert "cancelled; nothing of it was written" in w.clip_view.check_status.text()
    assert [f for f in _files(out) if not f.startswith(".next")] == [] and not (out / ".next").exists()
    assert w.clip_view.targets_info.isHidden() and w.clip_view.check_btn.isEnabled()
    # 2. the clip processed, the check cancelled while it looks for the sequence: the results stay as they were
    from aspectus.webcam.pipeline import process_clip

    from ui.job_runner import _make_params

    process_clip(clip, out, params=_make_params(w.study.process, w.study.analysis))
    before = {f: (out / f).read_bytes() for f in _files(out) if (out / f).is_file()}
    w._check_progress.disconnect()

    def cancel_when_searching(key, f, m):
        if "finding the target sequence" in m and w._check_cancel is not None:
            w._check_cancel.set()

    w._check_progress.connect(cancel_when_searching, Qt.DirectConnection)
    w._check_progress.connect(w._on_check_progress)
    with qtbot.waitSignal(w.target_check_finished, timeout=300_000):
        assert w.check_targets(schedule=target_clip / "schedule.json")
    assert "cancelled" in w.clip_view.check_status.text()
    after = {f: (out / f).read_bytes() for f in _files(out) if (out / f).is_file()}
    # nothing of the check; the clip's results complete and the same: reusing the samples, the pipeline runs
    # the event analysis again and rewrites its tables (as `aspectus targets check` does), so parquet files
    # and run.json carry a new write time - their content is compared
    assert sorted(after) == sorted(before) and not any(f.startswith("target_check") for f in after)
    assert after["samples.parquet"] == before["samples.parquet"]
    import io

    import pandas as pd

    for f in after:
        if f.endswith(".csv"):
            assert after[f] == before[f], f
        elif f.endswith(".parquet"):
            pd.testing.assert_frame_equal(pd.read_parquet(io.BytesIO(after[f])), pd.read_parquet(io.BytesIO(before[f])))
    run_a, run_b = json.loads(after["run.json"]), json.loads(before["run.json"])
    assert "target_check" not in run_a
    for k in ("input_sha256", "params_sha256", "clip"):
        assert run_a[k] == run_b[k]


def test_errors_are_plain_messages_naming_the_file(qtbot, tmp_path, target_clip):
    """A schedule that is not one, and a clip without the sequence in it (the sequence is longer than the clip)."""
    clip = tmp_path / "clips" / "student.mp4"
    clip.parent.mkdir()
    shutil.copy(target_clip / "clips" / "student.mp4", clip)
    w, c = _window(qtbot, tmp_path, clip)
    bad = tmp_path / "not_a_schedule.json"
    bad.write_text('{"format": "something else"}')
    with qtbot.waitSignal(w.target_check_finished, timeout=300_000):
        assert w.check_targets(schedule=bad)
    msg = w.clip_view.check_status.text()
    print(msg)
    assert "not_a_schedule.json" in msg and "Traceback" not in msg
    assert "#b00020" in w.clip_view.check_status.styleSheet()
    assert not (w.study.clip_out_dir(c) / "target_check.json").exists()
    from aspectus.targets.schedule import Screen, make_schedule

    long = make_schedule(Screen(1280, 720, 344.0, 193.5, 600.0), seed=1, fixation_s=3.0, n_fixations=13)
    long.write(tmp_path / "long.json")
    with qtbot.waitSignal(w.target_check_finished, timeout=300_000):
        assert w.check_targets(schedule=tmp_path / "long.json")
    msg = w.clip_view.check_status.text()
    print(msg)
    assert "student.mp4" in msg and "long.json" in msg and "Traceback" not in msg
    assert not (w.study.clip_out_dir(c) / "target_check.json").exists()
