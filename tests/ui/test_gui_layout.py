"""The main window at 1366x768 (a common laptop screen): no label, button, tab, column header, clip name or
choice is cut, and the parameters panel needs no horizontal scrolling. Offscreen, with the fonts of the
machine the tests run on."""
from __future__ import annotations

import shutil
from pathlib import Path

import pytest

pytest.importorskip("PySide6")
pytestmark = pytest.mark.gui

from _window import shown_window  # noqa: E402
from PySide6.QtWidgets import QAbstractButton, QApplication, QComboBox, QLabel, QTabBar, QTreeWidget  # noqa: E402

from aspectus.studies import project as study_mod  # noqa: E402

NAMES = ("linden_brook_p01_s01", "linden_brook_p02_s01", "linden_brook_p13_s02")


@pytest.fixture()
def window(qtbot, tmp_path):

    src = Path(__file__).resolve().parents[2] / "sample_clips"
    clip = next(iter(sorted(src.glob("*.mp4"))), None)
    if clip is None:
        pytest.skip("sample_clips/*.mp4 absent: run scripts/make_sample_clips.py")
    d = tmp_path / "study"
    d.mkdir()
    for n in NAMES:
        shutil.copy(clip, d / f"{n}.mp4")
    s = study_mod.new_study(path=d / "pilot.aspectus-study.json", name="Linden Brook Primary School reading pilot")
    s.add_paths(sorted(d.glob("*.mp4")))
    s.save()
    w = shown_window(qtbot, "thread")
    assert w.open_study(s.path)
    yield w
    w.shutdown()


def _visible(w, win) -> bool:
    return w.isVisibleTo(win) and w.width() > 0


def _cut(win) -> list[str]:
    """Every text in the window that does not fit its widget."""
    QApplication.processEvents()
    bad = []
    for lab in win.findChildren(QLabel):
        if not _visible(lab, win) or lab.wordWrap() or not lab.text() or lab.textFormat() == 1:
            continue
        if "<" in lab.text():  # rich text wraps or is sized by its layout
            continue
        need = lab.fontMetrics().horizontalAdvance(lab.text())
        if need > lab.contentsRect().width() + 1:
            bad.append(f"label {lab.text()!r}: {need} px in {lab.contentsRect().width()}")
    for b in win.findChildren(QAbstractButton):
        if not _visible(b, win) or not b.text() or b.parent() is None:
            continue
        text = b.text().replace("&", "")
        need = b.fontMetrics().horizontalAdvance(text)
        room = b.width() - (24 if b.metaObject().className() in ("QCheckBox", "QRadioButton") else 8)
        if need > room:
            bad.append(f"button {text!r}: {need} px in {room}")
    for c in win.findChildren(QComboBox):
        if not _visible(c, win) or not c.currentText():
            continue
        need = c.fontMetrics().horizontalAdvance(c.currentText())
        room = c.width() - 30  # the arrow and frame
        if need > room:
            bad.append(f"choice {c.currentText()!r}: {need} px in {room}")
    for tb in win.findChildren(QTabBar):
        if not _visible(tb, win):
            continue
        for i in range(tb.count()):
            need = tb.fontMetrics().horizontalAdvance(tb.tabText(i).replace("&", ""))
            if need > tb.tabRect(i).width() - 8:
                bad.append(f"tab {tb.tabText(i)!r}")
    for tree in win.findChildren(QTreeWidget):
        if not _visible(tree, win):
            continue
        hdr = tree.header()
        fm = hdr.fontMetrics()
        for col in range(tree.columnCount()):
            if hdr.isSectionHidden(col):
                continue
            text = tree.headerItem().text(col)
            if fm.horizontalAdvance(text) + 12 > hdr.sectionSize(col):
                bad.append(f"column header {text!r}: {fm.horizontalAdvance(text) + 12} px in {hdr.sectionSize(col)}")
            for i in range(tree.topLevelItemCount()):
                t = tree.topLevelItem(i).text(col)
                if t and tree.fontMetrics().horizontalAdvance(t) + 10 > tree.columnWidth(col):
                    bad.append(f"cell {t!r} in column {text!r}")
    return bad


def test_nothing_cut_at_1366x768(window):
    from ui.main_window import COL_STATUS

    win = window
    for tab in range(win.tabs.count()):
        win.tabs.setCurrentIndex(tab)
        assert not _cut(win), f"tab {win.tabs.tabText(tab)}: " + "; ".join(_cut(win))
    # every status a clip can show fits its column
    fm = win.clip_list.fontMetrics()
    for status in (*study_mod.STATUSES, "processing", "queued"):
        assert fm.horizontalAdvance(status) + 10 <= win.clip_list.columnWidth(COL_STATUS), status
    # every detector's name fits the choice
    combo = win.params._widgets["detector"][1]
    for i in range(combo.count()):
        assert combo.fontMetrics().horizontalAdvance(combo.itemText(i)) <= combo.width() - 30, combo.itemText(i)
    # folded sections say how many of their values differ from the default
    win.params.set_value("gap_fill_max_ms", 100.0)
    sec = win.params.sections["cleanup"]
    assert not sec.header.isChecked() and "1 changed" in sec.header.text()
    # no horizontal scrolling in the parameters panel
    from PySide6.QtWidgets import QScrollArea

    for sa in win.params.findChildren(QScrollArea):
        inner = sa.widget()
        assert inner.minimumSizeHint().width() <= sa.viewport().width() + 1, (
            inner.minimumSizeHint().width(), sa.viewport().width())


def test_every_parameter_group_fits(window):
    """Each detector's settings in turn (the panel shows only the chosen detector's group), every section open."""
    win = window
    for sec in win.params.sections.values():
        sec.unfold()
    for det in ("idt", "ivt", "i2mc"):
        win.params.set_value("detector", det)
        bad = _cut(win)
        assert not bad, f"{det}: " + "; ".join(bad)
