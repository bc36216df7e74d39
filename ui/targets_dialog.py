"""Dialog: make the known-target sequence (schedule, offline page, video) for the study's screen.

A thin shell over :mod:`aspectus.targets`: it asks for the screen and a
folder and writes ``schedule.json`` and ``targets.html`` on OK; the caller
writes the video (``schedule``, ``out_dir``, ``want_video``) where it
likes, e.g. in a background thread.
"""
from __future__ import annotations

from pathlib import Path

from PySide6.QtWidgets import (QCheckBox, QDialog, QDialogButtonBox, QDoubleSpinBox, QFileDialog, QFormLayout,
                               QHBoxLayout, QLabel, QLineEdit, QPushButton, QSpinBox, QVBoxLayout)


def _dspin(lo, hi, value, suffix):
    s = QDoubleSpinBox()
    s.setRange(lo, hi)
    s.setDecimals(1)
    s.setValue(value)
    s.setSuffix(suffix)
    return s


def _ispin(lo, hi, value, suffix=""):
    s = QSpinBox()
    s.setRange(lo, hi)
    s.setValue(value)
    s.setSuffix(suffix)
    return s


class TargetSequenceDialog(QDialog):
    """Screen size (px, mm), viewing distance, seed and output folder of the target sequence.

    ``screen`` pre-fills the fields (keys ``width_px``, ``height_px``,
    ``width_mm``, ``height_mm``, ``distance_mm``, as a reference table's
    column mapping stores the lab screen).
    """

    def __init__(self, parent=None, *, folder: Path | None = None, screen: dict | None = None):
        super().__init__(parent)
        self.setWindowTitle("Make the target sequence")
        s = screen or {}
        self.w_px = _ispin(64, 16384, int(s.get("width_px") or 1920), " px")
        self.h_px = _ispin(64, 16384, int(s.get("height_px") or 1080), " px")
        self.w_mm = _dspin(20, 5000, float(s.get("width_mm") or 344.0), " mm")
        self.h_mm = _dspin(20, 5000, float(s.get("height_mm") or 194.0), " mm")
        self.d_mm = _dspin(100, 10000, float(s.get("distance_mm") or 600.0), " mm")
        self.seed = _ispin(0, 1_000_000, 0)
        self.video = QCheckBox("Also write the sequence as a video (targets.mp4)")
        self.video.setChecked(True)
        self.folder = QLineEdit(str(folder or Path.cwd() / "target_sequence"))
        browse = QPushButton("Choose…")
        browse.clicked.connect(self._browse)
        self.error = QLabel()
        self.error.setStyleSheet("color: #b00020;")
        self.error.setWordWrap(True)

        form = QFormLayout()
        res = QHBoxLayout()
        res.addWidget(self.w_px)
        res.addWidget(QLabel("×"))
        res.addWidget(self.h_px)
        form.addRow("Screen resolution", res)
        size = QHBoxLayout()
        size.addWidget(self.w_mm)
        size.addWidget(QLabel("×"))
        size.addWidget(self.h_mm)
        form.addRow("Visible screen size", size)
        form.addRow("Eye-to-screen distance", self.d_mm)
        form.addRow("Seed (order of the dots)", self.seed)
        row = QHBoxLayout()
        row.addWidget(self.folder, 1)
        row.addWidget(browse)
        form.addRow("Folder", row)
        buttons = QDialogButtonBox(QDialogButtonBox.Ok | QDialogButtonBox.Cancel)
        buttons.accepted.connect(self.try_accept)
        buttons.rejected.connect(self.reject)
        lay = QVBoxLayout(self)
        lay.addWidget(QLabel("Show <b>targets.html</b> full screen on the study's screen while the webcam records "
                             "(space bar starts it); then run the check on the clip."))
        lay.addLayout(form)
        lay.addWidget(self.video)
        lay.addWidget(self.error)
        lay.addWidget(buttons)
        self.written: list[Path] = []
        self.schedule = None
        self.out_dir: Path | None = None

    def _browse(self):
        d = QFileDialog.getExistingDirectory(self, "Folder for the target sequence", self.folder.text())
        if d:
            self.folder.setText(d)

    def try_accept(self) -> bool:
        """Write the schedule and the page (the video in a background thread); accept if that worked."""
        from aspectus.errors import AspectusInputError
        from aspectus.targets.page import write_page
        from aspectus.targets.schedule import Screen, make_schedule

        try:
            screen = Screen(self.w_px.value(), self.h_px.value(), self.w_mm.value(), self.h_mm.value(),
                            self.d_mm.value())
            sched = make_schedule(screen, seed=self.seed.value())
            out = Path(self.folder.text()).expanduser()
            out.mkdir(parents=True, exist_ok=True)
            self.written = [sched.write(out / "schedule.json"), write_page(sched, out / "targets.html")]
        except (AspectusInputError, OSError) as exc:
            self.error.setText(str(exc))
            return False
        self.schedule, self.out_dir = sched, out
        self.accept()
        return True

    @property
    def want_video(self) -> bool:
        return self.video.isChecked()
