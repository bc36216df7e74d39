"""Column-mapping dialog: tell aspectus which columns of a plain gaze table hold what.

Shows the first rows of the file, offers its columns for time, horizontal and
vertical position (and optional validity, pupil and event columns), the units,
and the screen geometry needed for pixel, millimetre or normalised positions.
"OK" is only accepted once :func:`aspectus.reference.table.read_gaze_table`
reads the whole file with the mapping; otherwise its message is shown.
"""
from __future__ import annotations

from pathlib import Path

from PySide6.QtWidgets import (QCheckBox, QComboBox, QDialog, QDialogButtonBox, QDoubleSpinBox, QFormLayout,
                               QGroupBox, QHBoxLayout, QLabel, QSpinBox, QTableWidget, QTableWidgetItem,
                               QVBoxLayout)

_NONE = "(none)"

_TIME_UNITS = (("s", "seconds"), ("ms", "milliseconds"), ("us", "microseconds"), ("ns", "nanoseconds"))
_POS_UNITS = (("deg", "degrees of visual angle"), ("px", "screen pixels"), ("mm", "millimetres on the screen"),
              ("norm", "screen fraction (0-1)"))


class MappingDialog(QDialog):
    """Edit a :class:`aspectus.reference.table.TableMapping` for one file.

    After ``exec()`` returns accepted, :attr:`mapping` holds the mapping and
    :attr:`samples` the table read with it.
    """

    def __init__(self, path, *, initial: dict | None = None, parent=None):
        super().__init__(parent)
        from aspectus.reference.table import read_raw_table

        self.path = Path(path)
        self._initial = dict(initial or {})
        self.mapping = None
        self.samples = None
        self.setWindowTitle(f"Columns of {self.path.name}")
        self.resize(760, 620)
        self.error = QLabel()
        self.error.setWordWrap(True)
        self.error.setStyleSheet("color: #c62828;")
        try:
            self._raw = read_raw_table(self.path)
            cols = [str(c) for c in self._raw.frame.columns]
        except Exception as exc:  # noqa: BLE001 - shown in the dialog
            self._raw = None
            cols = []
            self.error.setText(f"The file cannot be read as a table: {exc}")

        preview = QTableWidget()
        preview.setEditTriggers(QTableWidget.NoEditTriggers)
        if self._raw is not None:
            head = self._raw.frame.head(8)
            preview.setColumnCount(len(cols))
            preview.setRowCount(len(head))
            preview.setHorizontalHeaderLabels(cols)
            for r in range(len(head)):
                for c in range(len(cols)):
                    preview.setItem(r, c, QTableWidgetItem(str(head.iat[r, c])))
        preview.verticalHeader().setDefaultSectionSize(preview.fontMetrics().height() + 6)
        # room for the header and five rows: the layout would otherwise squeeze it to two
        preview.setMinimumHeight(preview.horizontalHeader().sizeHint().height()
                                 + 5 * preview.verticalHeader().defaultSectionSize() + 4)
        preview.setMaximumHeight(max(200, preview.minimumHeight()))

        def combo(optional=False):
            cb = QComboBox()
            if optional:
                cb.addItem(_NONE)
            cb.addItems(cols)
            return cb

        self.time_col = combo()
        self.time_unit = QComboBox()
        for key, text in _TIME_UNITS:
            self.time_unit.addItem(f"{key} ({text})", key)
        self.x_col = combo()
        self.y_col = combo()
        self.units = QComboBox()
        for key, text in _POS_UNITS:
            self.units.addItem(f"{key} ({text})", key)
        self.origin = QComboBox()
        self.origin.addItem("top-left corner of the screen", "top-left")
        self.origin.addItem("centre of the screen", "center")
        self.y_up = QCheckBox("vertical position grows upwards")
        self.validity_col = combo(True)
        self.pupil_col = combo(True)
        self.event_col = combo(True)

        form = QFormLayout()
        form.addRow("Time column", self.time_col)
        form.addRow("Time unit", self.time_unit)
        form.addRow("Horizontal position", self.x_col)
        form.addRow("Vertical position", self.y_col)
        form.addRow("Position unit", self.units)
        form.addRow("Positions measured from", self.origin)
        form.addRow("", self.y_up)
        form.addRow("Validity column (optional)", self.validity_col)
        form.addRow("Pupil size column (optional)", self.pupil_col)
        form.addRow("Event label column (optional)", self.event_col)

        self.screen_box = QGroupBox("Screen (needed for pixels, millimetres and screen fractions)")
        sf = QFormLayout(self.screen_box)
        self.w_mm = _dspin(50, 3000, 531.0, " mm")
        self.h_mm = _dspin(50, 3000, 299.0, " mm")
        self.d_mm = _dspin(100, 5000, 650.0, " mm")
        self.w_px = _ispin(1, 20000, 1920, " px")
        self.h_px = _ispin(1, 20000, 1080, " px")
        sf.addRow("Visible width", self.w_mm)
        sf.addRow("Visible height", self.h_mm)
        sf.addRow("Eye-to-screen distance", self.d_mm)
        res = QHBoxLayout()
        res.addWidget(self.w_px)
        res.addWidget(QLabel("×"))
        res.addWidget(self.h_px)
        sf.addRow("Resolution", res)

        buttons = QDialogButtonBox(QDialogButtonBox.Ok | QDialogButtonBox.Cancel)
        buttons.accepted.connect(self.try_accept)
        buttons.rejected.connect(self.reject)
        self.ok_button = buttons.button(QDialogButtonBox.Ok)

        lay = QVBoxLayout(self)
        lay.addWidget(QLabel(f"First rows of <b>{self.path.name}</b>:"))
        lay.addWidget(preview)
        lay.addLayout(form)
        lay.addWidget(self.screen_box)
        lay.addWidget(self.error)
        lay.addWidget(buttons)
        self.units.currentIndexChanged.connect(self._units_changed)
        self._guess(cols)
        if initial:
            self.set_mapping(initial)
        self._units_changed()

    # ---------------------------------------------------------------- state
    def _guess(self, cols):
        low = [c.lower() for c in cols]

        def pick(cb, words):
            for w in words:
                for i, c in enumerate(low):
                    if w in c:
                        cb.setCurrentText(cols[i])
                        return

        pick(self.time_col, ("time", "t_", "timestamp"))
        pick(self.x_col, ("x", "yaw", "horiz"))
        pick(self.y_col, ("y", "pitch", "vert"))
        pick(self.validity_col, ("valid",))
        pick(self.pupil_col, ("pupil",))
        pick(self.event_col, ("event", "label"))

    def set_mapping(self, d: dict) -> None:
        for cb, key in ((self.time_col, "time_col"), (self.x_col, "x_col"), (self.y_col, "y_col")):
            if d.get(key):
                cb.setCurrentText(str(d[key]))
        for cb, key in ((self.validity_col, "validity_col"), (self.pupil_col, "pupil_col"),
                        (self.event_col, "event_col")):
            cb.setCurrentText(str(d[key]) if d.get(key) else _NONE)
        for cb, key in ((self.time_unit, "time_unit"), (self.units, "units"), (self.origin, "origin")):
            i = cb.findData(d.get(key))
            if i >= 0:
                cb.setCurrentIndex(i)
        if d.get("y_up") is not None:
            self.y_up.setChecked(bool(d["y_up"]))
        s = d.get("screen") or {}
        for sp, key in ((self.w_mm, "width_mm"), (self.h_mm, "height_mm"), (self.d_mm, "distance_mm"),
                        (self.w_px, "width_px"), (self.h_px, "height_px")):
            if s.get(key) is not None:
                sp.setValue(s[key])

    def _units_changed(self, *_):
        u = self.units.currentData()
        self.screen_box.setEnabled(u != "deg")
        self.origin.setEnabled(u != "deg")
        self.y_up.setChecked(u == "deg")

    def mapping_dict(self) -> dict:
        def opt(cb):
            t = cb.currentText()
            return None if t == _NONE or not t else t

        u = self.units.currentData()
        d = {k: v for k, v in self._initial.items() if k not in ("kind", "aspectus_version")}
        d.update({"time_col": self.time_col.currentText(), "time_unit": self.time_unit.currentData(),
             "x_col": self.x_col.currentText(), "y_col": self.y_col.currentText(), "units": u,
             "origin": self.origin.currentData(), "y_up": self.y_up.isChecked(),
             "validity_col": opt(self.validity_col), "pupil_col": opt(self.pupil_col),
             "event_col": opt(self.event_col), "screen": None})
        if d.get("y_up") is not None and self._initial.get("y_up") is None and \
                self.y_up.isChecked() == (u == "deg"):
            d["y_up"] = None  # the unit's own convention
        if u != "deg":
            d["screen"] = {"width_mm": self.w_mm.value(), "height_mm": self.h_mm.value(),
                           "distance_mm": self.d_mm.value(), "width_px": self.w_px.value(),
                           "height_px": self.h_px.value(), "origin_px": None}
        return d

    def try_accept(self) -> bool:
        """Build the mapping and read the file with it; accept only if that works."""
        from aspectus.reference.table import TableMapping, read_gaze_table

        try:
            m = TableMapping.from_dict(self.mapping_dict())
            samples = read_gaze_table(self.path, m)
        except Exception as exc:  # noqa: BLE001 - shown to the user, dialog stays open
            self.error.setText(str(exc))
            return False
        self.mapping, self.samples = m, samples
        self.error.setText("")
        self.accept()
        return True


def _dspin(lo, hi, val, suffix):
    sp = QDoubleSpinBox()
    sp.setRange(lo, hi)
    sp.setDecimals(1)
    sp.setValue(val)
    sp.setSuffix(suffix)
    return sp


def _ispin(lo, hi, val, suffix):
    sp = QSpinBox()
    sp.setRange(lo, hi)
    sp.setValue(val)
    sp.setSuffix(suffix)
    return sp
