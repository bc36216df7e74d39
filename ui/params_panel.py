"""Parameters panel: the detector and its parameters (with units and limits),
feature windows, the clip's task segments, and the processing settings.

The form is built from :class:`aspectus.events.analysis.AnalysisParams` itself: the
parameters listed in :data:`SPECS` get a label, unit, limits and help text;
any other field of the dataclass still appears under "More parameters" with
limits guessed from its unit, so the panel never hides a library parameter.
Edits are collected for 400 ms and then emitted as one ``analysis_changed``
(the app re-runs detection from the cached samples); processing settings emit
``process_changed`` (they need the clips processed again).
"""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass

from PySide6.QtCore import Qt, QTimer, Signal
from PySide6.QtWidgets import (QCheckBox, QComboBox, QDoubleSpinBox, QFormLayout, QGroupBox, QHBoxLayout, QLabel,
                               QLineEdit, QPushButton, QScrollArea, QSizePolicy, QSpinBox, QVBoxLayout, QWidget)


@dataclass(frozen=True)
class Spec:
    """How one parameter is shown: label, unit, limits, step, help, and group."""

    label: str
    unit: str = ""
    lo: float = 0.0
    hi: float = 1e6
    step: float = 1.0
    decimals: int = 0
    help: str = ""
    group: str = "detection"  # detection / cleanup / windows / idt / ivt / i2mc / more
    choices: tuple = ()  # (value, text) pairs for str fields
    optional: str | None = None  # for float|None fields: text of the "automatic" tick box


DETECTOR_TEXT = {
    "i2mc": "I2MC – two-means clustering (Hessels et al. 2017)",
    "idt": "I-DT – dispersion threshold (Salvucci & Goldberg 2000)",
    "ivt": "I-VT – velocity threshold, data-driven",
}

SPECS: dict[str, Spec] = {
    "detector": Spec("Detector", help="Method that finds fixations in the gaze signal. I2MC copes best with the "
                     "noise and low frame rate of webcam clips.", group="detection"),
    "min_fixation_ms": Spec("Shortest fixation", "ms", 20, 1000, 10, help="Fixations shorter than this are "
                            "dropped after merging (common practice: 60-100 ms).", group="detection"),
    "merge_gap_ms": Spec("Merge fixations closer than", "ms", 0, 500, 5, help="Fixations separated by at most "
                         "this much time and the distance below are merged into one (Komogortsev et al. 2010).",
                         group="detection"),
    "merge_distance_deg": Spec("… and nearer than", "°", 0, 10, 0.1, 1, help="Angular distance for merging.",
                               group="detection"),
    "saccade_max_ms": Spec("Longest saccade", "ms", 20, 1000, 10, help="A longer interval between two "
                           "fixations is not called a saccade.", group="detection"),
    "gap_fill_max_ms": Spec("Fill gaps up to", "ms", 0, 500, 5, help="Shorter losses of the signal are "
                            "interpolated; longer ones count as data loss.", group="cleanup"),
    "interpolation": Spec("Gap filling", choices=(("steffen", "Steffen (monotone)"), ("linear", "linear")),
                          group="cleanup"),
    "smoothing": Spec("Smoothing", choices=((None, "none"), ("median", "median filter"),
                                            ("savgol", "Savitzky-Golay")), group="cleanup",
                      help="Optional smoothing before detection (centred, no lag)."),
    "smoothing_window_ms": Spec("Smoothing window", "ms", 20, 1000, 10, group="cleanup"),
    "window_s": Spec("Feature window length", "s", 1, 3600, 1, 1, help="Features are also computed in fixed "
                     "windows of this length.", group="windows"),
    "step_s": Spec("Window step", "s", 1, 3600, 1, 1, help="Start-to-start distance of the fixed windows "
                   "(equal to the length: windows do not overlap).", group="windows"),
    "idt_dispersion_deg": Spec("Dispersion threshold", "°", 0.1, 20, 0.1, 1, group="idt",
                               optional="adapt to the clip's noise",
                               help="Largest (max-min yaw) + (max-min pitch) inside a fixation."),
    "idt_noise_factor": Spec("Adaptive threshold", "× noise", 1, 20, 0.5, 1, group="idt",
                             help="Threshold in units of the clip's RMS-S2S noise."),
    "idt_min_dispersion_deg": Spec("Smallest adaptive threshold", "°", 0.1, 10, 0.1, 1, group="idt"),
    "idt_min_duration_ms": Spec("Initial window", "ms", 20, 1000, 10, group="idt"),
    "ivt_method": Spec("Threshold rule", choices=(("nh2010", "Nyström & Holmqvist 2010"),
                                                  ("ek2003", "Engbert & Kliegl 2003")), group="ivt"),
    "ivt_velocity_window_ms": Spec("Velocity window", "ms", 5, 300, 5, group="ivt"),
    "ivt_initial_threshold_deg_s": Spec("Initial threshold", "°/s", 10, 2000, 10, group="ivt"),
    "ivt_sd_factor": Spec("Peak threshold", "SD", 1, 20, 0.5, 1, group="ivt"),
    "ivt_onset_sd_factor": Spec("Onset threshold", "SD", 0.5, 20, 0.5, 1, group="ivt"),
    "ivt_ek_lambda": Spec("λ (Engbert & Kliegl)", "× SD", 1, 20, 0.5, 1, group="ivt"),
    "i2mc_window_ms": Spec("Clustering window", "ms", 50, 2000, 10, group="i2mc"),
    "i2mc_step_ms": Spec("Window step", "ms", 5, 500, 5, group="i2mc"),
    "i2mc_cutoff_sd": Spec("Weight cut-off", "SD", 0.5, 10, 0.1, 1, group="i2mc"),
    "i2mc_onoffset_mad": Spec("Edge trimming", "MAD", 0.5, 10, 0.1, 1, group="i2mc"),
    "i2mc_downsamples": Spec("Downsampling factors", group="i2mc", help="Comma-separated whole numbers."),
    "i2mc_min_window_samples": Spec("Fewest samples per window", "", 2, 100, 1, group="i2mc"),
    "i2mc_chebyshev_order": Spec("Anti-alias filter order", "", 1, 20, 1, group="i2mc"),
    "i2mc_kmeans_iterations": Spec("Clustering iterations", "", 1, 100, 1, group="i2mc"),
}

_GROUP_TITLES = (("detection", "Fixation detection"), ("idt", "I-DT settings"), ("ivt", "I-VT settings"),
                 ("i2mc", "I2MC settings"), ("cleanup", "Gaps and smoothing"), ("windows", "Feature windows"),
                 ("more", "More parameters"))


def _narrow(w: QWidget) -> None:
    """Let a field shrink to the panel's width instead of pushing the panel wider."""
    pol = w.sizePolicy()
    pol.setHorizontalPolicy(QSizePolicy.Ignored)
    w.setSizePolicy(pol)
    w.setMinimumWidth(90)


def _guess_spec(name: str, default) -> Spec:
    """Limits from the unit in a field's name, for fields without a :data:`SPECS` entry."""
    label = name.replace("_", " ")
    for suffix, unit, hi, dec in (("_ms", "ms", 10000, 0), ("_deg_s", "°/s", 5000, 1), ("_deg", "°", 90, 2),
                                  ("_s", "s", 36000, 1), ("_px", "px", 10000, 0), ("_mm", "mm", 10000, 0)):
        if name.endswith(suffix):
            return Spec(label[: -len(suffix) + 1].strip(), unit, 0, hi, 1 if dec == 0 else 0.1, dec, group="more")
    return Spec(label, "", -1e6, 1e6, 0.1 if isinstance(default, float) else 1, 3 if isinstance(default, float) else 0,
                group="more")


class ParamsPanel(QWidget):
    """The parameter form.

    Signals
    -------
    analysis_changed(dict) : AnalysisParams as a dict, validated.
    process_changed(dict) : processing settings (fov_deg, face, max_faces).
    segments_requested() / segments_cleared() : the user wants to choose / drop the clip's segment file.
    """

    analysis_changed = Signal(dict)
    process_changed = Signal(dict)
    segments_requested = Signal()
    segments_cleared = Signal()

    def __init__(self, parent=None):
        super().__init__(parent)
        from aspectus.events.analysis import AnalysisParams
        from aspectus.events.detect import DETECTORS

        self._cls = AnalysisParams
        self._defaults = AnalysisParams().to_dict()
        self._fields = {f.name: f for f in dataclasses.fields(AnalysisParams)}
        self._widgets: dict[str, tuple] = {}
        self._loading = False
        self._debounce = QTimer(self)
        self._debounce.setSingleShot(True)
        self._debounce.setInterval(400)
        self._debounce.timeout.connect(self._emit_analysis)

        self.message = QLabel()
        self.message.setWordWrap(True)
        self.message.setStyleSheet("color: #c62828;")

        inner = QWidget()
        v = QVBoxLayout(inner)
        v.setContentsMargins(2, 2, 2, 2)
        intro = QLabel("Changes to these re-run detection on the cached gaze samples at once.")
        intro.setWordWrap(True)
        intro.setStyleSheet("color: #555;")
        v.addWidget(intro)
        self._groups: dict[str, QGroupBox] = {}
        forms: dict[str, QFormLayout] = {}
        for key, title in _GROUP_TITLES:
            box = QGroupBox(title)
            form = QFormLayout(box)
            form.setFieldGrowthPolicy(QFormLayout.AllNonFixedFieldsGrow)
            form.setContentsMargins(6, 4, 6, 4)
            self._groups[key] = box
            forms[key] = form
        for name, f in self._fields.items():  # noqa: B007
            default = self._defaults[name]
            spec = SPECS.get(name) or _guess_spec(name, default)
            if name == "detector":
                spec = dataclasses.replace(spec, choices=tuple((d, DETECTOR_TEXT.get(d, d)) for d in DETECTORS))
            w = self._make_widget(name, spec, default)
            lab = QLabel(spec.label)
            lab.setToolTip(spec.help)
            lab.setWordWrap(True)
            w.setToolTip(w.toolTip() or spec.help)
            _narrow(w)
            forms[spec.group].addRow(lab, w)
        # segments of the current clip
        seg_box = QGroupBox("Task segments of this clip")
        sl = QVBoxLayout(seg_box)
        self.segments_label = QLabel("none")
        self.segments_label.setWordWrap(True)
        row = QHBoxLayout()
        self.segments_btn = QPushButton("Choose file…")
        self.segments_btn.setToolTip("A CSV with columns label, onset_s, offset_s (seconds on the clip's clock)")
        self.segments_btn.clicked.connect(self.segments_requested.emit)
        self.segments_clear = QPushButton("Remove")
        self.segments_clear.clicked.connect(self.segments_cleared.emit)
        row.addWidget(self.segments_btn)
        row.addWidget(self.segments_clear)
        sl.addWidget(self.segments_label)
        sl.addLayout(row)
        # processing settings
        proc = QGroupBox("Processing settings")
        pf = QFormLayout(proc)
        note = QLabel("These apply when clips are processed again (face tracking is redone).")
        note.setWordWrap(True)
        note.setStyleSheet("color: #555;")
        pf.addRow(note)
        self.fov = QDoubleSpinBox()
        self.fov.setRange(20, 120)
        self.fov.setDecimals(0)
        self.fov.setSuffix(" °")
        self.fov.setValue(60)
        self.fov.setToolTip("Assumed horizontal field of view of the webcam (laptop webcams: about 60°)")
        self.face = QComboBox()
        self.face.setSizeAdjustPolicy(QComboBox.AdjustToMinimumContentsLengthWithIcon)
        self.face.setMinimumContentsLength(10)
        self.face.addItem("the largest face", "largest")
        for i in range(4):
            self.face.addItem(f"face {i + 1} from the left", f"index:{i}")
        self.face.setToolTip("Whose face to follow when more than one is in the picture")
        self.max_faces = QSpinBox()
        self.max_faces.setRange(1, 10)
        self.max_faces.setValue(2)
        for w in (self.fov, self.face, self.max_faces):
            _narrow(w)
        pf.addRow("Camera field of view", self.fov)
        pf.addRow("Follow", self.face)
        pf.addRow("Faces to look for", self.max_faces)
        for w in (self.fov, self.max_faces):
            w.valueChanged.connect(self._emit_process)
        self.face.currentIndexChanged.connect(self._emit_process)

        self.defaults_btn = QPushButton("Restore defaults")
        self.defaults_btn.clicked.connect(self.restore_defaults)

        for key, _t in _GROUP_TITLES:
            if forms[key].rowCount():
                v.addWidget(self._groups[key])
        v.addWidget(seg_box)
        v.addWidget(proc)
        v.addWidget(self.defaults_btn)
        v.addStretch(1)
        scroll = QScrollArea()
        scroll.setWidget(inner)
        scroll.setWidgetResizable(True)
        scroll.setHorizontalScrollBarPolicy(Qt.ScrollBarAlwaysOff)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(0, 0, 0, 0)
        lay.addWidget(self.message)
        lay.addWidget(scroll, 1)
        self._show_detector_groups()

    # -------------------------------------------------------------- widgets
    def _make_widget(self, name, spec: Spec, default):
        if spec.choices:
            w = QComboBox()
            w.setSizeAdjustPolicy(QComboBox.AdjustToMinimumContentsLengthWithIcon)
            w.setMinimumContentsLength(10)
            for val, text in spec.choices:
                w.addItem(text, val)
            w.currentIndexChanged.connect(self._changed)
            if name == "detector":
                w.currentIndexChanged.connect(self._show_detector_groups)
            w.setToolTip(spec.help)
            self._widgets[name] = ("choice", w)
            return w
        if isinstance(default, (tuple, list)):
            w = QLineEdit(", ".join(str(x) for x in default))
            w.setToolTip(spec.help)
            w.editingFinished.connect(self._changed)
            self._widgets[name] = ("list", w)
            return w
        if isinstance(default, bool):
            w = QCheckBox()
            w.toggled.connect(self._changed)
            self._widgets[name] = ("bool", w)
            return w
        is_int = isinstance(default, int) and spec.decimals == 0 and not isinstance(default, bool) \
            and self._fields[name].type in ("int", int)
        sp = QSpinBox() if is_int else QDoubleSpinBox()
        if not is_int:
            sp.setDecimals(spec.decimals)
            sp.setSingleStep(spec.step)
        sp.setRange(int(spec.lo) if is_int else spec.lo, int(spec.hi) if is_int else spec.hi)
        if spec.unit:
            sp.setSuffix(f" {spec.unit}" if spec.unit not in ("°",) else "°")
        sp.setToolTip(spec.help + (f" Allowed: {spec.lo:g}–{spec.hi:g} {spec.unit}." if spec.help else
                                   f"Allowed: {spec.lo:g}–{spec.hi:g} {spec.unit}."))
        sp.setKeyboardTracking(False)
        sp.valueChanged.connect(self._changed)
        if spec.optional is not None or default is None:
            auto = QCheckBox(spec.optional or "automatic")
            auto.toggled.connect(lambda on, s=sp: s.setEnabled(not on))
            auto.toggled.connect(self._changed)
            box = QWidget()
            hl = QVBoxLayout(box)
            hl.setContentsMargins(0, 0, 0, 0)
            hl.addWidget(auto)
            hl.addWidget(sp)
            self._widgets[name] = ("optional", sp, auto)
            return box
        self._widgets[name] = ("int" if is_int else "float", sp)
        return sp

    def _show_detector_groups(self, *_):
        det = self._widgets["detector"][1].currentData() if "detector" in self._widgets else None
        for key in ("idt", "ivt", "i2mc"):
            if key in self._groups:
                self._groups[key].setVisible(key == det)

    # ---------------------------------------------------------------- state
    def set_values(self, analysis: dict | None, process: dict | None = None) -> None:
        """Show parameters without emitting change signals."""
        self._loading = True
        try:
            vals = dict(self._defaults)
            vals.update({k: v for k, v in (analysis or {}).items() if k in vals})
            for name, w in self._widgets.items():
                v = vals[name]
                kind = w[0]
                if kind == "choice":
                    i = w[1].findData(v)
                    w[1].setCurrentIndex(max(i, 0))
                elif kind == "list":
                    w[1].setText(", ".join(str(x) for x in v))
                elif kind == "bool":
                    w[1].setChecked(bool(v))
                elif kind == "optional":
                    w[2].setChecked(v is None)
                    w[1].setEnabled(v is not None)
                    if v is not None:
                        w[1].setValue(float(v))
                    elif not w[1].value():
                        w[1].setValue(1.0)
                else:
                    w[1].setValue(v)
            p = process or {}
            self.fov.setValue(float(p.get("fov_deg", 60.0)))
            i = self.face.findData(p.get("face", "largest"))
            self.face.setCurrentIndex(max(i, 0))
            self.max_faces.setValue(int(p.get("max_faces", 2)))
        finally:
            self._loading = False
        self._show_detector_groups()
        self.message.setText("")

    def values(self) -> dict:
        """The form as an AnalysisParams dict (not validated)."""
        out = {}
        for name, w in self._widgets.items():
            kind = w[0]
            if kind == "choice":
                out[name] = w[1].currentData()
            elif kind == "list":
                out[name] = [int(x) for x in w[1].text().replace(";", ",").split(",") if x.strip()]
            elif kind == "bool":
                out[name] = w[1].isChecked()
            elif kind == "optional":
                out[name] = None if w[2].isChecked() else float(w[1].value())
            elif kind == "int":
                out[name] = int(w[1].value())
            else:
                out[name] = float(w[1].value())
        return out

    def process_values(self) -> dict:
        return {"fov_deg": float(self.fov.value()), "face": self.face.currentData(),
                "max_faces": int(self.max_faces.value())}

    def set_value(self, name: str, value) -> None:
        """Set one parameter as if the user had edited it (emits after the debounce)."""
        w = self._widgets[name]
        if w[0] == "choice":
            w[1].setCurrentIndex(w[1].findData(value))
        elif w[0] == "optional":
            w[2].setChecked(value is None)
            if value is not None:
                w[1].setValue(float(value))
        elif w[0] == "list":
            w[1].setText(", ".join(str(x) for x in value))
            self._changed()
        elif w[0] == "bool":
            w[1].setChecked(bool(value))
        else:
            w[1].setValue(value)

    def flush(self) -> None:
        """Emit a pending change now (instead of after the debounce)."""
        if self._debounce.isActive():
            self._debounce.stop()
            self._emit_analysis()

    def set_segments_text(self, text: str | None, *, enabled: bool = True) -> None:
        self.segments_label.setText(text or "none")
        self.segments_btn.setEnabled(enabled)
        self.segments_clear.setEnabled(enabled and bool(text))

    def restore_defaults(self) -> None:
        self.set_values({}, {})
        self._emit_analysis()
        self._emit_process()

    def _changed(self, *_):
        if not self._loading:
            self._debounce.start()

    def _emit_analysis(self):
        try:
            d = self._cls.from_dict(self.values()).to_dict()
        except Exception as exc:  # noqa: BLE001 - ParameterError and friends, shown in the panel
            self.message.setText(f"Not applied: {exc}")
            return
        self.message.setText("")
        self.analysis_changed.emit(d)

    def _emit_process(self, *_):
        if not self._loading:
            self.process_changed.emit(self.process_values())
