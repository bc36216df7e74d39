"""The gaze-measurement choices in the app: shown in plain words apart from the detection settings, saved with
the study and read back, an invalid saved value named and replaced by the default, an offer to process clips
again when a choice changes, and a clip processed with a non-default choice records it in run.json (where the
clip view reads which iris estimate was used)."""
from __future__ import annotations

import json
import shutil

import pytest

pytest.importorskip("PySide6")
pytestmark = pytest.mark.gui

from _window import shown_window  # noqa: E402
from aspectus.studies import project as study_mod  # noqa: E402
from aspectus.webcam.pipeline import ProcessParams  # noqa: E402

RUN_TIMEOUT_MS = 240_000


def _window(qtbot, mode="thread"):
    w = shown_window(qtbot, mode)
    return w


@pytest.fixture()
def window(qtbot):
    w = _window(qtbot)
    yield w
    w.shutdown()


def _study(tmp_path, clip_src=None, *, gaze=None):
    d = tmp_path / "study"
    d.mkdir()
    s = study_mod.new_study(path=d / "pilot.aspectus-study.json", name="Linden Brook reading pilot")
    if clip_src is not None:
        shutil.copy(clip_src, d / "p01_s01.mp4")
    else:
        (d / "p01_s01.mp4").write_bytes(b"\0" * 64)  # never decoded by these tests
    s.add_clip(d / "p01_s01.mp4")
    if gaze is not None:
        s.process = {"fov_deg": 60.0, "face": "largest", "max_faces": 2, "gaze": gaze}
    s.save()
    return s


def _choose(window, name, value):
    combo = window.params._gaze_combos[name]
    i = next(i for i in range(combo.count()) if combo.itemData(i) == value and type(combo.itemData(i)) is type(value))
    combo.setCurrentIndex(i)


def test_gaze_choices_are_plain_and_apart_from_detection(window):
    p = window.params
    sec = p.sections["gaze"]
    assert sec.header.isChecked() and "Takes effect when the clips are processed again" in p.findChild(
        type(p.message), "gaze_note").text()
    assert sec.parent() is p.sections["detection"].parent() and sec.y() > p.sections["detection"].y()  # apart
    combo = p._gaze_combos["iris_combine"]
    texts = [combo.itemText(i) for i in range(combo.count())]
    assert texts[0] == "automatic: the eye's appearance (default)" and "circle fit to the iris edge" in texts
    assert p._labels["gaze:iris_combine"].text() == "Iris height from"
    # the chosen option's help is shown under it, and changes with the choice
    help_lab = p._gaze_help["iris_combine"]
    assert "too few frames with open eyes" in help_lab.text()
    _choose(window, "iris_combine", "limbus")
    assert "circle is fitted to the edge of the iris" in help_lab.text()
    # at 1366x768 every option's text fits its choice (test_gui_layout checks the shown ones)
    from PySide6.QtWidgets import QApplication

    p.scroll_to("gaze")
    QApplication.processEvents()
    for name, combo in p._gaze_combos.items():
        for i in range(combo.count()):
            need = combo.fontMetrics().horizontalAdvance(combo.itemText(i))
            assert need <= combo.width() - 30, (name, combo.itemText(i), need, combo.width())


def test_choice_round_trips_through_saving_and_loading(qtbot, tmp_path):
    s = _study(tmp_path)
    w = _window(qtbot)
    try:
        assert w.open_study(s.path)
        assert w.study.notes == [] and "gaze" not in json.loads(s.path.read_text())["process"]
        _choose(w, "iris_combine", "limbus")
        _choose(w, "mirrored", True)
        assert w.study.process["gaze"]["iris_combine"] == "limbus" and w.study.process["gaze"]["mirrored"] is True
        w.flush_saves()
        saved = json.loads(s.path.read_text())["process"]["gaze"]
        assert saved == {"iris_combine": "limbus", "head_rotation": "mesh", "eye_anchor_set": "auto",
                         "iris_scale": "limbus", "iris_shape": "circle", "iris_registration": False,
                         "mirrored": True}
    finally:
        w.shutdown()
    w2 = _window(qtbot)
    try:
        assert w2.open_study(s.path)
        p = w2.params
        assert p._gaze_combos["iris_combine"].currentData() == "limbus"
        assert p._gaze_combos["mirrored"].currentData() is True
        assert p._gaze_combos["head_rotation"].currentData() == "mesh"
        from ui.params_panel import CHANGED_MARK

        assert p._labels["gaze:iris_combine"].text() == CHANGED_MARK + "Iris height from"
        assert not p._labels["gaze:head_rotation"].text().startswith(CHANGED_MARK)
        # Restore defaults puts the gaze choices back too
        p.restore_defaults()
        assert w2.study.process["gaze"] == {"iris_combine": "auto", "head_rotation": "mesh",
                                            "eye_anchor_set": "auto", "iris_scale": "limbus",
                                            "iris_shape": "circle", "iris_registration": False,
                                            "mirrored": False}
    finally:
        w2.shutdown()


def test_invalid_stored_value_falls_back_with_a_message(window, tmp_path):
    s = _study(tmp_path, gaze={"iris_combine": "sideways", "head_rotation": "skin"})
    assert window.open_study(s.path)
    p = window.params
    assert p._gaze_combos["iris_combine"].currentData() == "auto"  # the default
    assert p._gaze_combos["head_rotation"].currentData() == "skin"  # the valid one is kept
    assert "Iris height from" in p.message.text() and "'sideways'" in p.message.text()
    assert p.message.isVisibleTo(window)
    from ui.job_runner import _make_params

    assert _make_params(window.study.process, {}).gaze.iris_combine == "auto"


def test_reprocess_offer_appears_when_a_gaze_choice_changes(window, tmp_path, qtbot):
    s = _study(tmp_path)
    c = s.clips[0]
    out = s.clip_out_dir(c)
    out.mkdir(parents=True)
    (out / "run.json").write_text(json.dumps({"params": ProcessParams().to_dict()}))  # processed with the defaults
    assert window.open_study(s.path)
    assert window.study.clips[0].status == study_mod.STATUS_DONE
    p = window.params
    assert not p.reprocess_box.isVisibleTo(window)
    window.select_clip("p01_s01")
    _choose(window, "head_rotation", "skin")
    assert window.study.clips[0].status == study_mod.STATUS_STALE
    assert p.reprocess_box.isVisibleTo(window)
    assert "1 clip was measured with other settings" in p.reprocess_label.text()
    # and where it is seen whatever part of the panel is in view: the status bar
    assert "1 clip now outdated" in window.statusBar().currentMessage() and "processed again" in (
        window.statusBar().currentMessage())
    assert p.reprocess_selected_btn.isVisibleTo(window) and "selected clip" in p.reprocess_selected_btn.text()
    # back to the default: the clip is current again and the offer goes
    _choose(window, "head_rotation", "mesh")
    assert window.study.clips[0].status == study_mod.STATUS_DONE and not p.reprocess_box.isVisibleTo(window)


@pytest.mark.slow
def test_reprocessing_with_a_non_default_choice_records_it(qtbot, tmp_path, rendered_clip):
    clip = rendered_clip(duration_s=1.5, seed=10, size_px=(640, 360)).path
    s = _study(tmp_path, clip)
    w = _window(qtbot, mode="process")
    try:
        assert w.open_study(s.path)
        with qtbot.waitSignal(w.run_finished, timeout=RUN_TIMEOUT_MS) as blocker:
            assert w.process()
        assert blocker.args[0] == {"p01_s01": "done"}
        w.select_clip("p01_s01")
        out = w.study.clip_out_dir(w.study.find("p01_s01"))
        run = json.loads((out / "run.json").read_text())
        assert run["extraction"]["gaze_model"]["iris_estimate"]["setting"] == "auto"
        assert w.clip_view.iris_info.text().startswith("Iris height from:")
        assert "chosen automatically" in w.clip_view.iris_info.text()
        _choose(w, "iris_combine", "limbus")
        assert w.params.reprocess_box.isVisibleTo(w)
        with qtbot.waitSignal(w.run_finished, timeout=RUN_TIMEOUT_MS) as blocker:
            w.params.reprocess_selected_btn.click()
            assert w.cancel_btn.isEnabled()  # the run shows progress and can be cancelled as any run
        assert blocker.args[0] == {"p01_s01": "done"}
        run = json.loads((out / "run.json").read_text())
        assert run["params"]["gaze"]["iris_combine"] == "limbus"
        assert run["params"]["gaze"] == ProcessParams.from_dict({"gaze": {"iris_combine": "limbus"}}).gaze.to_dict()
        assert run["extraction"]["gaze_model"]["iris_estimate"] == {"setting": "limbus", "used": "limbus"}
        assert w.study.find("p01_s01").status == study_mod.STATUS_DONE
        assert not w.params.reprocess_box.isVisibleTo(w)
        w.select_clip("p01_s01")
        assert w.clip_view.iris_info.text() == "Iris height from: circle fit to the iris edge (as chosen)."
    finally:
        w.shutdown()
