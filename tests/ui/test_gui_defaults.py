"""The parameters panel shows the library's defaults everywhere (new study, first launch, opened study, reset),
changing one field changes only that field, and every value that differs from its default is marked.

The defaults' one source is the library: :class:`aspectus.events.analysis.AnalysisParams` and
:class:`aspectus.webcam.pipeline.ProcessParams`.
"""
from __future__ import annotations

import json

import pytest

pytest.importorskip("PySide6")
pytestmark = pytest.mark.gui

from _window import shown_window  # noqa: E402
from aspectus.events.analysis import AnalysisParams  # noqa: E402
from aspectus.studies import project as study_mod  # noqa: E402
from aspectus.webcam.pipeline import ProcessParams  # noqa: E402

DEFAULTS = AnalysisParams().to_dict()
PROCESS_DEFAULTS = {"fov_deg": ProcessParams().fov_deg, "face": ProcessParams().face,
                    "max_faces": ProcessParams().max_faces}


def _same(a, b):
    if isinstance(a, float) or isinstance(b, float):
        return a is not None and b is not None and abs(float(a) - float(b)) < 1e-9
    if isinstance(a, (list, tuple)):
        return list(a) == list(b)
    return a == b


def _diff(vals: dict, ref: dict) -> dict:
    return {k: (vals.get(k), ref[k]) for k in ref if not _same(vals.get(k), ref[k])}


@pytest.fixture()
def window(qtbot):
    w = shown_window(qtbot, "thread")
    yield w
    w.shutdown()


def _marked(panel) -> set[str]:
    from ui.params_panel import CHANGED_MARK

    return {n for n, lab in panel._labels.items() if lab.text().startswith(CHANGED_MARK)}


def test_first_launch_shows_library_defaults_and_nothing_marked(window):
    # first launch and `gui --new` build this window and open no study
    p = window.params
    assert _diff(p.values(), DEFAULTS) == {}
    assert _diff(p.process_values(), PROCESS_DEFAULTS) == {}
    assert _marked(p) == set()
    # spot checks against the defaults the README states (I-DT, 60 ms shortest fixation, 75 ms gap fill)
    assert p.values()["detector"] == "idt" and p.values()["min_fixation_ms"] == 60.0
    assert p.values()["gap_fill_max_ms"] == 75.0 and p.values()["edge_speed_factor"] == 1.75


def test_gui_new_command_starts_with_defaults(qtbot, monkeypatch):
    """`aspectus gui --new` goes through ui.app.run: the window it shows carries the defaults."""
    import ui.app as app_mod

    shown = {}

    from PySide6.QtWidgets import QApplication

    # the windows open before, held (not their ids alone: a window an earlier test left to be collected could free
    # its address for the new one, which would then read as one of them)
    before = list(QApplication.topLevelWidgets())

    def fake_exec(*_a):
        new_ = [w for w in QApplication.topLevelWidgets()
                if w.objectName() == "aspectus_main" and not any(w is b for b in before)]
        assert len(new_) == 1
        shown["win"] = new_[0]
        return 0

    monkeypatch.setattr(QApplication, "exec", fake_exec)
    monkeypatch.setattr(app_mod, "_settings", lambda: None)
    assert app_mod.run(new=True) == 0
    win = shown["win"]
    try:
        assert _diff(win.params.values(), DEFAULTS) == {}
        assert win.study.analysis in ({}, DEFAULTS)
    finally:
        win.shutdown()
        win.close()


def test_changing_one_field_changes_only_that_field(window, tmp_path, qtbot):
    window.new_study(tmp_path / "pilot.aspectus-study.json")
    with qtbot.waitSignal(window.params.analysis_changed, timeout=3000):
        window.params.set_value("min_fixation_ms", 100.0)
    window.flush_saves()
    assert _diff(window.study.analysis, DEFAULTS) == {"min_fixation_ms": (100.0, 60.0)}
    saved = json.loads((tmp_path / "pilot.aspectus-study.json").read_text())
    assert _diff(saved["analysis"], DEFAULTS) == {"min_fixation_ms": (100.0, 60.0)}
    assert _marked(window.params) == {"min_fixation_ms"}
    lab = window.params._labels["min_fixation_ms"]
    assert lab.font().bold() and "default (60 ms)" in lab.toolTip()
    # a processing setting: only it changes, and it is marked too
    with qtbot.waitSignal(window.params.process_changed, timeout=3000):
        window.params.fov.setValue(70)
    assert _diff({**PROCESS_DEFAULTS, **window.study.process}, PROCESS_DEFAULTS) == {"fov_deg": (70.0, 60.0)}
    assert _marked(window.params) == {"min_fixation_ms", "fov_deg"}


def test_opened_study_shows_its_values_and_defaults_for_the_rest(window, tmp_path):
    s = study_mod.new_study(path=tmp_path / "old.aspectus-study.json", name="old")
    s.analysis = {"detector": "ivt", "merge_gap_ms": 120.0}  # an older study that stored only two fields
    s.process = {"max_faces": 3}
    s.save()
    assert window.open_study(s.path)
    assert _diff(window.params.values(), DEFAULTS) == {"detector": ("ivt", "idt"), "merge_gap_ms": (120.0, 75.0)}
    assert _diff(window.params.process_values(), PROCESS_DEFAULTS) == {"max_faces": (3, 2)}
    assert _marked(window.params) == {"detector", "merge_gap_ms", "max_faces"}
    # a study saved with every field at its default shows nothing marked
    s2 = study_mod.new_study(path=tmp_path / "full.aspectus-study.json", name="full")
    s2.analysis = dict(DEFAULTS)
    s2.save()
    assert window.open_study(s2.path)
    assert _marked(window.params) == set() and _diff(window.params.values(), DEFAULTS) == {}


def test_reset_restores_library_defaults(window, tmp_path, qtbot):
    s = study_mod.new_study(path=tmp_path / "changed.aspectus-study.json", name="changed")
    s.analysis = {**DEFAULTS, "detector": "i2mc", "min_fixation_ms": 20.0, "idt_dispersion_deg": 2.5,
                  "window_s": 2.0}
    s.process = {"fov_deg": 80.0, "face": "index:1", "max_faces": 4}
    s.save()
    assert window.open_study(s.path)
    assert len(_marked(window.params)) == 7
    with qtbot.waitSignal(window.params.analysis_changed, timeout=3000):
        window.params.defaults_btn.click()
    assert _diff(window.study.analysis, DEFAULTS) == {}
    assert _diff({**window.study.process}, PROCESS_DEFAULTS) == {}
    assert _marked(window.params) == set()
    # the automatic dispersion threshold hides the number field instead of showing a value that is not used
    kind, spin, auto = window.params._widgets["idt_dispersion_deg"]
    assert auto.isChecked() and not spin.isVisibleTo(window.params)


def test_every_parameter_has_plain_label_and_tooltip_with_unit_and_default(qtbot):
    from ui.params_panel import ParamsPanel

    panel = ParamsPanel()
    qtbot.addWidget(panel)
    for name, lab in panel._labels.items():
        text = lab.text()
        assert "_" not in text, f"{name}: label {text!r} is a code name"
        tip = lab.toolTip()
        assert "Default:" in tip, f"{name}: tooltip without the default"
        spec = panel._specs.get(name)
        if spec is not None:
            assert spec.help, f"{name}: no help text"
            if spec.unit:
                assert f"Unit: {spec.unit}" in tip, f"{name}: tooltip without the unit"
    # wrong names of earlier versions are gone
    texts = {lab.text() for lab in panel._labels.values()}
    assert "Initial window" not in texts and "Longest saccade" not in texts
    assert not any(t.startswith("merge ") for t in texts)
    # every angle reads alike: the field of view read "60 °" beside the thresholds' "1.5°"
    from PySide6.QtWidgets import QAbstractSpinBox

    degree = [w.suffix() for w in panel.findChildren(QAbstractSpinBox) if "°" in getattr(w, "suffix", str)()]
    assert panel.fov.suffix() == "°" and degree and set(degree) <= {"°", "°/s"}, degree
