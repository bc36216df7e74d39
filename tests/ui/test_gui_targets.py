"""The app's two pieces of the known-target check: the dialog that makes the sequence, the figures in the clip view."""
from __future__ import annotations

import json

import pytest

pytest.importorskip("PySide6")
pytestmark = pytest.mark.gui


def test_target_sequence_dialog_writes_schedule_and_page(qtbot, tmp_path):
    from ui.targets_dialog import TargetSequenceDialog

    dlg = TargetSequenceDialog(folder=tmp_path / "seq", screen={"width_px": 1280, "height_px": 800,
                                                                "width_mm": 286.0, "height_mm": 179.0,
                                                                "distance_mm": 550.0})
    qtbot.addWidget(dlg)
    assert dlg.w_px.value() == 1280 and dlg.d_mm.value() == 550.0  # the study's screen pre-fills the fields
    # a screen whose mm and pixels disagree in shape: the dialog stays open and says why
    dlg.h_mm.setValue(400.0)
    assert not dlg.try_accept() and "does not match its pixel grid" in dlg.error.text()
    dlg.h_mm.setValue(179.0)
    assert dlg.try_accept()
    d = json.loads((tmp_path / "seq" / "schedule.json").read_text())
    assert d["screen"] == {"width_px": 1280, "height_px": 800, "width_mm": 286.0, "height_mm": 179.0,
                           "viewing_distance_mm": 550.0}
    assert (tmp_path / "seq" / "targets.html").stat().st_size > 1000
    assert dlg.schedule is not None and dlg.want_video


def test_clip_view_shows_the_check(qtbot):
    from ui.clip_view import ClipView

    v = ClipView()
    qtbot.addWidget(v)
    assert v.targets_info.isHidden()
    doc = {"summary": {"start_s": 1.5, "n_targets_used": 9, "n_fixation_targets": 9, "accuracy_offset_deg": 1.1,
                       "accuracy_offset_gain_deg": 0.8, "accuracy_offset_gain_loo_deg": 0.9,
                       "accuracy_noise_floor_deg": 0.2, "precision_rms_s2s_deg": 0.5, "precision_sd_deg": 0.4,
                       "loss_frac": 0.02, "n_fixations_on_targets": 11, "n_targets_fixated": 9, "pursuit_gain": 0.95},
           "mapping": {"offset_yaw_deg": 3.0, "offset_pitch_deg": 4.5, "gain_yaw": 0.58, "gain_pitch": 1.0},
           "alignment": {"method": "flash"}, "flags": ["yaw gain 0.58 is outside 0.8-1.25"]}
    v.set_target_check(doc)
    text = v.targets_info.text()
    assert not v.targets_info.isHidden()
    assert "gain yaw 0.58" in text and "0.80 deg after offset+gain" in text and "yaw gain 0.58 is outside" in text
    assert "sequence starts at 1.500 s (by its flash)" in text
    # the terms are explained where they stand: offset, gain, accuracy, the left-out fit, pursuit gain
    for words in ("(the constant error)", "(1: the true scale)", "accuracy (mean angle between dot and gaze)",
                  "0.90 with each dot left out of its own fit", "pursuit gain 0.95 (gaze speed / speed of the moving dot"):
        assert words in text, words
    assert "leave-one-out" not in text
    # a figure the check could not measure reads "n/a", never "nan"
    doc["summary"]["pursuit_gain"] = float("nan")
    doc["mapping"]["gain_pitch"] = None
    v.set_target_check(doc)
    text = v.targets_info.text()
    assert "nan" not in text.lower().replace("n/a", "") and "pursuit gain n/a" in text and "pitch n/a" in text
    v.set_target_check(None)
    assert v.targets_info.isHidden()


def test_main_window_offers_the_sequence(qtbot):
    from ui.main_window import MainWindow

    w = MainWindow(worker_mode="thread")
    qtbot.addWidget(w)
    assert "target sequence" in w.act_targets.text()
    dlg = w.make_target_sequence_dialog(exec_dialog=False)
    qtbot.addWidget(dlg)
    assert dlg.w_px.value() == 1920  # no study screen known: the defaults


def test_button_opens_the_sequence_dialog_for_the_study_screen(qtbot, monkeypatch, tmp_path):
    """The processing bar's button opens the dialog with the study's screen (from its reference-table mapping)."""
    from PySide6.QtCore import Qt

    import ui.targets_dialog as td
    from aspectus.studies.project import new_study
    from ui.main_window import MainWindow

    seen = []
    monkeypatch.setattr(td.TargetSequenceDialog, "exec", lambda self: seen.append(self) or 0)
    st = new_study(path=tmp_path / "study.json")
    st.mappings["last"] = {"screen": {"width_px": 1280, "height_px": 800, "width_mm": 286.0, "height_mm": 179.0,
                                      "distance_mm": 550.0}}
    st.save()
    w = MainWindow(worker_mode="thread")
    qtbot.addWidget(w)
    w.quiet = True
    assert w.open_study(tmp_path / "study.json")
    w.resize(1366, 768)
    w.show()
    assert w.targets_btn.isVisible() and w.targets_btn.isEnabled()
    qtbot.mouseClick(w.targets_btn, Qt.LeftButton)
    assert len(seen) == 1
    dlg = seen[0]
    assert dlg.w_px.value() == 1280 and dlg.d_mm.value() == 550.0
    assert dlg.folder.text() == str(tmp_path / "results" / "target_sequence")  # in the study's results folder
