"""Parameters panel: the detector and its parameters (with units and limits),
feature windows, the clip's task segments, and the processing settings.

The form is built from :class:`aspectus.events.analysis.AnalysisParams` itself: the
parameters listed in :data:`SPECS` get a label, unit, limits and help text;
any other field of the dataclass still appears under "More parameters" with
limits guessed from its unit, so the panel never hides a library parameter.
Edits are collected for 400 ms and then emitted as one ``analysis_changed``
(the app re-runs detection from the cached samples); the gaze-measurement
choices (:data:`aspectus.webcam.gaze.GAZE_CHOICES`, in plain words) and the
processing settings emit ``process_changed`` (they need the clips processed
again: the gaze section says so and offers it, ``reprocess_requested``).
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
    "i2mc": "I2MC (clustering)",
    "idt": "I-DT (spread)",
    "ivt": "I-VT (speed)",
}
DETECTOR_HELP = {
    "i2mc": "I2MC: two-means clustering (Hessels et al. 2017)",
    "idt": "I-DT: dispersion (spread) threshold (Salvucci & Goldberg 2000)",
    "ivt": "I-VT: velocity (speed) threshold, derived from the data (Engbert & Kliegl 2003; Nyström & Holmqvist 2010)",
}

#: marks a parameter whose value differs from the library's default
CHANGED_MARK = "● "

SPECS: dict[str, Spec] = {
    "detector": Spec("Method", help="How fixations are found in the gaze signal. I-DT (the default) kept fixation "
                     "counts and durations closest to hand coding on webcam-like data.", group="detection"),
    "min_fixation_ms": Spec("Shortest fixation kept", "ms", 20, 1000, 10, help="Fixations shorter than this are "
                            "dropped after merging (common practice: 60-100 ms).", group="detection"),
    "merge_gap_ms": Spec("Join fixations less than … apart", "ms", 0, 500, 5, help="Two fixations separated by at "
                         "most this much time, and close enough in angle (next rows), are joined into one "
                         "(Komogortsev et al. 2010).", group="detection"),
    "merge_distance_deg": Spec("… and nearer than", "°", 0, 10, 0.1, 2, help="Largest angle between two fixations "
                               "that are joined.", group="detection"),
    "merge_noise_factor": Spec("Joining angle at least", "× noise", 0, 10, 0.1, 2, help="The joining angle grows "
                               "with the clip's noise: the larger of the angle under Fixation detection (\"… and "
                               "nearer than\") and this many times the sample-to-sample noise (read over 33 ms "
                               "steps). 0 switches it off.", group="tuning"),
    "merge_alpha": Spec("Join when positions not different at level", "", 0, 0.5, 0.01, 3, help="Neighbouring "
                        "fixations are also joined when their mean positions do not differ at this significance "
                        "level, given the noise inside them (noisy webcam gaze splits fixations into fragments). "
                        "0 switches it off.", group="tuning"),
    "saccade_max_ms": Spec("Longest gap still called a saccade", "ms", 20, 1000, 10, help="Between two fixations "
                           "closer in time than this a saccade is recorded; a longer gap is not a saccade.",
                           group="detection"),
    "edge_speed_factor": Spec("Trim fixation edges faster than", "× median speed", 0, 20, 0.05, 2, help="Samples at "
                              "a fixation's start or end moving faster than this many times the clip's median gaze "
                              "speed belong to the saccade and are cut off - where the samples are at most the speed "
                              "window apart (100 Hz and more). 0 switches it off.", group="tuning"),
    "edge_speed_low_rates": Spec("Trim by speed at every rate", help="Also trim by speed at webcam rates (the "
                                 "earlier behaviour): fixations come out about 50 ms shorter at 30 Hz.",
                                 group="tuning"),
    "edge_alpha": Spec("Trim edges unlike the fixation at level", "", 0, 0.5, 0.01, 3, help="A fixation's first or "
                       "last sample is cut off while it differs from its neighbours inside the fixation by more than "
                       "the noise allows at this significance level. 0 switches it off.", group="tuning"),
    "edge_window_ms": Spec("… compared with the samples within", "ms", 0, 200, 5, help="Time span of the inner "
                           "neighbours an edge sample is compared with (at least 2 samples).", group="tuning"),
    "edge_velocity_window_ms": Spec("Speed measured over", "ms", 0, 200, 5, help="Time span over which that gaze "
                                    "speed is measured (at least 3 samples).", group="tuning"),
    "gap_fill_max_ms": Spec("Fill gaps up to", "ms", 0, 500, 5, help="Shorter losses of the signal are "
                            "interpolated; longer ones count as data loss.", group="cleanup"),
    "interpolation": Spec("Gap filling", choices=(("steffen", "Steffen (monotone)"), ("linear", "linear")),
                          help="How short gaps are filled.", group="cleanup"),
    "smoothing": Spec("Smoothing", choices=((None, "none"), ("median", "median filter"),
                                            ("savgol", "Savitzky-Golay")), group="cleanup",
                      help="Optional smoothing before detection (centred, no lag). The noise figures and the "
                      "verdict's precision are read from the samples before it: smoothing does not make a clip "
                      "read steadier."),
    "smoothing_window_ms": Spec("Smoothing window", "ms", 20, 1000, 10, help="Length of the smoothing filter "
                                "(used only when smoothing is on).", group="cleanup"),
    "window_s": Spec("Feature window length", "s", 0.5, 3600, 1, 1, help="Features are also computed in fixed "
                     "windows of this length.", group="windows"),
    "step_s": Spec("Window step", "s", 0.5, 3600, 1, 1, help="Start-to-start distance of the fixed windows "
                   "(equal to the length: windows do not overlap).", group="windows"),
    "idt_dispersion_deg": Spec("Spread threshold", "°", 0.1, 20, 0.1, 1, group="idt",
                               optional="adapt to each clip",
                               help="Largest spread inside a fixation: (max-min yaw) + (max-min pitch). When "
                               "adapted, each clip gets its own threshold (rows below); run.json records it."),
    "idt_noise_factor": Spec("Adapted threshold", "× noise", 1, 20, 0.5, 1, group="idt",
                             help="The adapted threshold in units of the clip's noise: its sample-to-sample (RMS-S2S) noise "
                             "read over 33 ms steps, or, below 100 frames a second, how far the gaze wanders over "
                             "the shortest fixation searched for, whichever is larger (run.json records both)."),
    "idt_min_dispersion_deg": Spec("… but at least", "°", 0.1, 10, 0.1, 1, group="idt",
                                   help="Lower bound of the adapted threshold."),
    "idt_min_duration_ms": Spec("Shortest fixation searched for", "ms", 20, 1000, 10, group="idt",
                                help="I-DT's duration threshold: the window that must stay within the spread "
                                "threshold to start a fixation."),
    "idt_noise_range_factor": Spec("… and at least", "× noise range", 0, 5, 0.1, 1, group="idt",
                                   help="The adapted threshold is at least this many times the spread the noise "
                                   "alone reaches over the samples of the shortest fixation searched for (more "
                                   "samples, wider extremes: at 500 Hz that keeps fixations whole). 0 switches "
                                   "it off."),
    "ivt_method": Spec("Speed threshold rule", choices=(("nh2010", "Nyström & Holmqvist 2010"),
                                                        ("ek2003", "Engbert & Kliegl 2003")), group="ivt",
                       help="How the saccade speed threshold is derived from the data."),
    "ivt_velocity_window_ms": Spec("Speed measured over", "ms", 5, 300, 5, group="ivt",
                                   help="Savitzky-Golay derivative window."),
    "ivt_initial_threshold_deg_s": Spec("Starting threshold", "°/s", 10, 2000, 10, group="ivt",
                                        help="Where the Nyström & Holmqvist iteration starts."),
    "ivt_sd_factor": Spec("Peak threshold", "SD", 1, 20, 0.5, 1, group="ivt",
                          help="Saccade peak: this many SDs above the mean speed (Nyström & Holmqvist)."),
    "ivt_onset_sd_factor": Spec("Onset threshold", "SD", 0.5, 20, 0.5, 1, group="ivt",
                                help="Saccade start and end: this many SDs above the mean speed."),
    "ivt_ek_lambda": Spec("Threshold multiplier λ", "× SD", 1, 20, 0.5, 1, group="ivt",
                          help="Engbert & Kliegl: multiple of the median-based speed SD."),
    "i2mc_window_ms": Spec("Clustering window", "ms", 50, 2000, 10, group="i2mc",
                           help="Length of the moving window in which two clusters are fitted."),
    "i2mc_step_ms": Spec("Window step", "ms", 5, 500, 5, group="i2mc", help="Step of that moving window."),
    "i2mc_cutoff_sd": Spec("Weight cut-off", "SD", 0.5, 10, 0.1, 1, group="i2mc",
                           help="Fixation boundaries where the clustering weight exceeds mean + this many SDs."),
    "i2mc_onoffset_mad": Spec("Edge trimming", "MAD", 0.5, 10, 0.1, 1, group="i2mc",
                              help="Samples further than this many MADs from the fixation's median are trimmed "
                              "from its edges."),
    "i2mc_downsamples": Spec("Downsampling factors", group="i2mc", help="Comma-separated whole numbers."),
    "i2mc_min_window_samples": Spec("Fewest samples per window", "", 2, 100, 1, group="i2mc",
                                    help="Windows with fewer valid samples are skipped."),
    "i2mc_chebyshev_order": Spec("Anti-alias filter order", "", 1, 20, 1, group="i2mc",
                                 help="Order of the Chebyshev filter before downsampling."),
    "i2mc_kmeans_iterations": Spec("Clustering iterations", "", 1, 100, 1, group="i2mc",
                                   help="Iterations of two-means clustering per window."),
}

_GROUP_TITLES = (("detection", "Fixation detection"), ("idt", "I-DT settings"), ("ivt", "I-VT settings"),
                 ("i2mc", "I2MC settings"), ("tuning", "Joining and trimming fixations"),
                 ("cleanup", "Gaps and smoothing"), ("windows", "Feature windows"), ("more", "More parameters"))
#: sections shown folded at first (the panel fits a 768-px-high screen); a folded section says how many of its
#: values differ from the default
FOLDED = ("tuning", "cleanup", "windows", "more", "processing")
GAZE_SECTION_TITLE = "Gaze measurement"
GAZE_NOTE = ("<b>Takes effect when the clips are processed again.</b> How the gaze is measured from the video: "
             "unlike the detection settings above, a change here means tracking the face again, which takes about "
             "as long as the first time.")


#: rows shown right after another row (the lower bounds of the adapted I-DT threshold together), not in the order
#: of AnalysisParams's fields
FOLLOWS = {"idt_noise_range_factor": "idt_min_dispersion_deg"}


def _row_order(names) -> list[str]:
    """The parameters in the order the panel shows them: AnalysisParams's order, each :data:`FOLLOWS` row moved
    after the row it follows."""
    out = []
    for name in names:
        if FOLLOWS.get(name) in names:
            continue
        out.append(name)
        out += [n for n, after in FOLLOWS.items() if after == name and n in names]
    return out


class Section(QWidget):
    """A titled section that folds: a header button (arrow, title, changed count) above its group box."""

    def __init__(self, key: str, title: str, box: QGroupBox, *, folded: bool, parent=None):
        super().__init__(parent)
        from PySide6.QtWidgets import QToolButton

        self.key, self.title, self.box = key, title, box
        self.header = QToolButton()
        self.header.setObjectName(f"section_{key}")
        self.header.setCheckable(True)
        self.header.setChecked(not folded)
        self.header.setToolButtonStyle(Qt.ToolButtonTextBesideIcon)
        self.header.setAutoRaise(True)
        self.header.setSizePolicy(QSizePolicy.Expanding, QSizePolicy.Fixed)
        self.header.setStyleSheet("QToolButton { font-weight: 600; text-align: left; }")
        self.header.toggled.connect(self._toggled)
        box.setTitle("")
        lay = QVBoxLayout(self)
        lay.setContentsMargins(0, 0, 0, 0)
        lay.setSpacing(0)
        lay.addWidget(self.header)
        lay.addWidget(box)
        self._changed = 0
        self._toggled(not folded)

    def _toggled(self, on: bool) -> None:
        self.header.setArrowType(Qt.DownArrow if on else Qt.RightArrow)
        self.box.setVisible(on)
        self.set_changed(self._changed)

    def set_changed(self, n: int) -> None:
        self._changed = n
        extra = f"  {CHANGED_MARK.strip()} {n} changed" if n and not self.header.isChecked() else ""
        self.header.setText(self.title + extra)

    def unfold(self, on: bool = True) -> None:
        self.header.setChecked(on)


def _decimals_for(value) -> int:
    """Decimals a spin box needs to show ``value`` exactly (so a default is never rounded)."""
    if not isinstance(value, float):
        return 0
    for d in range(0, 7):
        if abs(round(value, d) - value) < 1e-12:
            return d
    return 6


def fmt_value(value, spec: Spec) -> str:
    """A parameter value as the researcher reads it, with its unit."""
    if value is None:
        return spec.optional or "automatic"
    if spec.choices:
        return next((t for v, t in spec.choices if v == value), str(value))
    if isinstance(value, (list, tuple)):
        return ", ".join(str(x) for x in value)
    if isinstance(value, bool):
        return "on" if value else "off"
    txt = f"{value:g}" if isinstance(value, float) else str(value)
    if not spec.unit:
        return txt
    return f"{txt}{spec.unit}" if spec.unit == "°" else f"{txt} {spec.unit}"


def tooltip_text(name: str, spec: Spec, default) -> str:
    """What the parameter does, its unit, its default and its limits (and the library name for scripts)."""
    lines = [spec.help] if spec.help else []
    if spec.unit:
        lines.append(f"Unit: {spec.unit}.")
    lines.append(f"Default: {fmt_value(default, spec)}.")
    if not spec.choices and not isinstance(default, (list, tuple, bool)):
        lo, hi = (f"{spec.lo:g}", f"{spec.hi:g}")
        lines.append(f"Allowed: {lo} to {hi}" + (f" {spec.unit}." if spec.unit else "."))
    lines.append(f"Name in scripts and run.json: {name}.")
    return "\n".join(lines)


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
    process_changed(dict) : processing settings (fov_deg, face, max_faces, gaze: the GazeParams it sets).
    reprocess_requested(str) : the user wants clips processed again: ``"selected"`` or ``"outdated"``.
    segments_requested() / segments_cleared() : the user wants to choose / drop the clip's segment file.
    """

    analysis_changed = Signal(dict)
    process_changed = Signal(dict)
    reprocess_requested = Signal(str)
    segments_requested = Signal()
    segments_cleared = Signal()

    def __init__(self, parent=None):
        super().__init__(parent)
        from aspectus.events.analysis import AnalysisParams
        from aspectus.events.detect import DETECTORS

        self._cls = AnalysisParams
        from aspectus.webcam.pipeline import ProcessParams

        # the one source of defaults: the library's own parameter classes
        self._defaults = AnalysisParams().to_dict()
        pdef = ProcessParams()
        self._process_defaults = {"fov_deg": float(pdef.fov_deg), "face": pdef.face, "max_faces": int(pdef.max_faces)}
        self._labels: dict[str, QLabel] = {}
        self._specs: dict[str, Spec] = {}
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
        intro = QLabel("Detection settings re-run at once on the saved gaze samples; gaze measurement and "
                       "processing settings (further down) need the clips processed again. "
                       f"{CHANGED_MARK.strip()} marks a value that differs from the default; hover over a name "
                       "for what it does.")
        intro.setWordWrap(True)
        intro.setStyleSheet("color: #555;")
        v.addWidget(intro)
        self._groups: dict[str, QGroupBox] = {}
        self.sections: dict[str, Section] = {}
        self._group_of: dict[str, str] = {}
        forms: dict[str, QFormLayout] = {}
        for key, title in _GROUP_TITLES:
            box = QGroupBox(title)
            form = QFormLayout(box)
            form.setFieldGrowthPolicy(QFormLayout.AllNonFixedFieldsGrow)
            form.setContentsMargins(6, 4, 6, 4)
            self._groups[key] = box
            forms[key] = form
        for name in _row_order(self._fields):
            default = self._defaults[name]
            spec = SPECS.get(name) or _guess_spec(name, default)
            if name == "detector":
                spec = dataclasses.replace(
                    spec, choices=tuple((d, DETECTOR_TEXT.get(d, d)) for d in DETECTORS),
                    help=spec.help + " " + "; ".join(DETECTOR_HELP.get(d, d) for d in DETECTORS) + ".")
            if spec.decimals < _decimals_for(default):
                spec = dataclasses.replace(spec, decimals=_decimals_for(default))
            self._specs[name] = spec
            w = self._make_widget(name, spec, default)
            lab = QLabel(spec.label)
            lab.setObjectName(f"param_label_{name}")
            lab.setWordWrap(True)
            tip = tooltip_text(name, spec, default)
            lab.setToolTip(tip)
            w.setToolTip(tip)
            for child in w.findChildren(QWidget):
                child.setToolTip(tip)
            _narrow(w)
            self._labels[name] = lab
            self._group_of[name] = spec.group
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
        gaze_box = self._build_gaze_box()
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
        self.fov.setSuffix("°")  # as the other angles read: "60°"
        pd_ = self._process_defaults
        self.fov.setValue(pd_["fov_deg"])
        self.fov.setToolTip("Assumed horizontal field of view of the webcam (laptop webcams: about 60°).\n"
                            f"Unit: °. Default: {pd_['fov_deg']:g}°. Name in scripts and run.json: fov_deg.")
        self.face = QComboBox()
        self.face.setSizeAdjustPolicy(QComboBox.AdjustToMinimumContentsLengthWithIcon)
        self.face.setMinimumContentsLength(10)
        self.face.addItem("the largest face", "largest")
        for i in range(4):
            self.face.addItem(f"face {i + 1} from the left", f"index:{i}")
        self.face.setCurrentIndex(max(0, self.face.findData(pd_["face"])))
        self.face.setToolTip("Whose face to follow when more than one is in the picture.\n"
                             "Default: the largest face. Name in scripts and run.json: face.")
        self.max_faces = QSpinBox()
        self.max_faces.setRange(1, 10)
        self.max_faces.setValue(pd_["max_faces"])
        self.max_faces.setToolTip("How many faces the face mesh looks for in each frame (a classmate behind the "
                                  f"student is a second face).\nDefault: {pd_['max_faces']}. Allowed: 1 to 10. "
                                  "Name in scripts and run.json: max_faces.")
        for w in (self.fov, self.face, self.max_faces):
            _narrow(w)
        for key, text, w in (("fov_deg", "Camera field of view", self.fov), ("face", "Follow", self.face),
                             ("max_faces", "Faces to look for", self.max_faces)):
            lab = QLabel(text)
            lab.setObjectName(f"param_label_{key}")
            lab.setWordWrap(True)
            lab.setToolTip(w.toolTip())
            self._labels[key] = lab
            self._group_of[key] = "processing"
            pf.addRow(lab, w)
        for w in (self.fov, self.max_faces):
            w.valueChanged.connect(self._emit_process)
        self.face.currentIndexChanged.connect(self._emit_process)

        self.defaults_btn = QPushButton("Restore defaults")
        self.defaults_btn.setToolTip("Set every parameter on this panel back to the default")
        self.defaults_btn.clicked.connect(self.restore_defaults)

        for key, title in _GROUP_TITLES:
            if forms[key].rowCount():
                self.sections[key] = Section(key, title, self._groups[key], folded=key in FOLDED)
                v.addWidget(self.sections[key])
        v.addWidget(seg_box)
        self.sections["gaze"] = Section("gaze", GAZE_SECTION_TITLE, gaze_box, folded=False)
        v.addWidget(self.sections["gaze"])
        self.sections["processing"] = Section("processing", "Processing settings", proc, folded=True)
        v.addWidget(self.sections["processing"])
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
        self.set_values({}, {})  # a new panel shows the defaults (never a spin box's lower limit)

    # -------------------------------------------------------------- widgets
    def _build_gaze_box(self) -> QGroupBox:
        """The gaze-measurement choices (label above a full-width choice, the chosen option's help below it) and
        the offer to process clips again after a change."""
        from aspectus.webcam.gaze import GAZE_CHOICES

        box = QGroupBox("Gaze measurement")
        lay = QVBoxLayout(box)
        lay.setContentsMargins(6, 4, 6, 6)
        note = QLabel(GAZE_NOTE)
        note.setObjectName("gaze_note")
        note.setWordWrap(True)
        note.setStyleSheet("color: #555;")
        lay.addWidget(note)
        self._gaze_choices = {c.name: c for c in GAZE_CHOICES}
        self._gaze_combos: dict[str, QComboBox] = {}
        self._gaze_help: dict[str, QLabel] = {}
        self._gaze_extra: dict = {}  # saved gaze settings the panel does not show, handed back unchanged
        for c in GAZE_CHOICES:
            key = f"gaze:{c.name}"
            lab = QLabel(c.label)
            lab.setObjectName(f"param_label_{key}")
            lab.setWordWrap(True)
            combo = QComboBox()
            combo.setObjectName(f"gaze_{c.name}")
            combo.setSizeAdjustPolicy(QComboBox.AdjustToMinimumContentsLengthWithIcon)
            combo.setMinimumContentsLength(10)
            for i, (value, text, help_) in enumerate(c.options):
                combo.addItem(text, value)
                combo.setItemData(i, help_, Qt.ToolTipRole)
            tip = (f"{c.help}\n" + "\n".join(f"• {t}: {h}" for _, t, h in c.options)
                   + f"\nDefault: {c.options[0][1].removesuffix(' (default)')}."
                   f"\nName in scripts and run.json: gaze {c.name}.")
            lab.setToolTip(tip)
            combo.setToolTip(tip)
            _narrow(combo)
            help_lab = QLabel()
            help_lab.setObjectName(f"gaze_help_{c.name}")
            help_lab.setWordWrap(True)
            help_lab.setStyleSheet("color: #555; font-size: 90%;")
            combo.currentIndexChanged.connect(lambda _i, n=c.name: self._gaze_changed(n))
            self._labels[key] = lab
            self._group_of[key] = "gaze"
            self._gaze_combos[c.name] = combo
            self._gaze_help[c.name] = help_lab
            lay.addSpacing(8)
            lay.addWidget(lab)
            lay.addWidget(combo)
            lay.addWidget(help_lab)
        # shown after a change while clips hold results measured otherwise
        self.reprocess_box = QWidget()
        self.reprocess_box.setObjectName("reprocess_offer")
        rl = QVBoxLayout(self.reprocess_box)
        rl.setContentsMargins(0, 6, 0, 0)
        self.reprocess_label = QLabel()
        self.reprocess_label.setWordWrap(True)
        self.reprocess_label.setStyleSheet("color: #8a5a00;")
        self.reprocess_selected_btn = QPushButton("Process selected clips again")
        self.reprocess_selected_btn.setToolTip("Process the clips selected in the list again with these settings")
        self.reprocess_selected_btn.clicked.connect(lambda: self.reprocess_requested.emit("selected"))
        self.reprocess_outdated_btn = QPushButton("Process every outdated clip")
        self.reprocess_outdated_btn.setToolTip("Process again every clip whose results were measured with other "
                                               "settings")
        self.reprocess_outdated_btn.clicked.connect(lambda: self.reprocess_requested.emit("outdated"))
        rl.addWidget(self.reprocess_label)
        rl.addWidget(self.reprocess_selected_btn)
        rl.addWidget(self.reprocess_outdated_btn)
        self.reprocess_box.hide()
        lay.addWidget(self.reprocess_box)
        for c in GAZE_CHOICES:
            self._show_gaze_help(c.name)
        return box

    def _show_gaze_help(self, name: str) -> None:
        combo = self._gaze_combos[name]
        self._gaze_help[name].setText(combo.itemData(combo.currentIndex(), Qt.ToolTipRole) or "")

    def _gaze_changed(self, name: str) -> None:
        self._show_gaze_help(name)
        self._emit_process()

    def show_reprocess_offer(self, outdated: int, selected: int) -> None:
        """Offer to process clips again: ``outdated`` clips hold results measured with other settings,
        ``selected`` clips are selected in the list (0 hides the offer's buttons that do not apply)."""
        self.reprocess_box.setVisible(outdated > 0)
        if outdated <= 0:
            return
        self.reprocess_label.setText(
            f"{outdated} clip{'s' if outdated != 1 else ''} {'were' if outdated != 1 else 'was'} measured with other "
            "settings: their results stay as they are until processed again.")
        self.reprocess_selected_btn.setVisible(selected > 0)
        self.reprocess_selected_btn.setText("Process the selected clip again" if selected == 1
                                            else f"Process the {selected} selected clips again")
        self.sections["gaze"].unfold()

    def scroll_to(self, key: str) -> None:
        """Scroll the panel so that section ``key`` starts at its top."""
        sec = self.sections[key]
        scroll = self.findChild(QScrollArea)
        scroll.verticalScrollBar().setValue(sec.y())

    def gaze_values(self) -> dict:
        """The gaze settings as GazeParams fields (the shown choices and any saved ones the panel does not show)."""
        return {**self._gaze_extra, **{n: c.currentData() for n, c in self._gaze_combos.items()}}

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
            sp.setSuffix(spec.unit if spec.unit.startswith("°") else f" {spec.unit}")  # "1.5°", "30°/s", "75 ms"
        sp.setToolTip(spec.help + (f" Allowed: {spec.lo:g}–{spec.hi:g} {spec.unit}." if spec.help else
                                   f"Allowed: {spec.lo:g}–{spec.hi:g} {spec.unit}."))
        sp.setKeyboardTracking(False)
        sp.valueChanged.connect(self._changed)
        if spec.optional is not None or default is None:
            auto = QCheckBox(spec.optional or "automatic")
            auto.toggled.connect(lambda on, s=sp: s.setVisible(not on))
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
            if key in getattr(self, "sections", {}):
                self.sections[key].setVisible(key == det)

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
                    w[1].setVisible(v is not None)
                    if v is not None:
                        w[1].setValue(float(v))
                else:
                    w[1].setValue(v)
            p = dict(self._process_defaults)
            p.update({k: v for k, v in (process or {}).items() if k in p and v is not None})
            self.fov.setValue(float(p["fov_deg"]))
            i = self.face.findData(p["face"])
            self.face.setCurrentIndex(max(i, 0))
            self.max_faces.setValue(int(p["max_faces"]))
            gaze = dict((process or {}).get("gaze") or {})
            self._gaze_extra = {k: v for k, v in gaze.items() if k not in self._gaze_combos}
            for n, combo in self._gaze_combos.items():
                choice = self._gaze_choices[n]
                want = gaze.get(n, choice.values[0])
                i = next((i for i, v in enumerate(choice.values) if type(v) is type(want) and v == want), 0)
                combo.setCurrentIndex(i)
                self._show_gaze_help(n)
            self.reprocess_box.hide()
        finally:
            self._loading = False
        self._show_detector_groups()
        self.update_markers()
        self.message.setText("")

    def defaults(self) -> dict:
        """The library's defaults (AnalysisParams), as the panel shows them."""
        return dict(self._defaults)

    def process_defaults(self) -> dict:
        return dict(self._process_defaults)

    def changed_names(self) -> list[str]:
        """Parameters whose shown value differs from the library's default."""
        vals = self.values()
        out = [n for n in self._widgets if not _same(vals[n], self._defaults[n])]
        pv = self.process_values()
        out += [k for k, v in pv.items() if k in self._process_defaults and not _same(v, self._process_defaults[k])]
        out += [f"gaze:{n}" for n, c in self._gaze_combos.items() if c.currentIndex() != 0]
        return out

    def update_markers(self) -> None:
        """Mark every parameter that differs from its default (bullet, bold, tooltip says from what)."""
        changed = set(self.changed_names())
        for key, sec in getattr(self, "sections", {}).items():
            sec.set_changed(sum(1 for n in changed if self._group_of.get(n) == key))
        for name, lab in self._labels.items():
            spec = self._specs.get(name)
            base = spec.label if spec is not None else lab.property("base_text") or lab.text()
            if lab.property("base_text") is None:
                lab.setProperty("base_text", base)
                lab.setProperty("base_tip", lab.toolTip())
            base = lab.property("base_text")
            on = name in changed
            lab.setText(CHANGED_MARK + base if on else base)
            font = lab.font()
            font.setBold(on)
            lab.setFont(font)
            tip = lab.property("base_tip")
            if on and name.startswith("gaze:"):
                shown = self._gaze_choices[name[5:]].options[0][1].removesuffix(" (default)")
                tip = f"Changed from the default ({shown}).\n" + tip
            elif on:
                dflt = self._defaults.get(name, self._process_defaults.get(name))
                shown = fmt_value(dflt, spec) if spec is not None else str(dflt)
                tip = f"Changed from the default ({shown}).\n" + tip
            lab.setToolTip(tip)

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
                "max_faces": int(self.max_faces.value()), "gaze": self.gaze_values()}

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

    def set_segments_text(self, text: str | None, *, enabled: bool = True, tooltip: str = "") -> None:
        self.segments_label.setText(text or "none")
        self.segments_label.setToolTip(tooltip)
        self.segments_btn.setEnabled(enabled)
        self.segments_clear.setEnabled(enabled and bool(text))

    def restore_defaults(self) -> None:
        self.set_values({}, {})
        self._emit_analysis()
        self._emit_process()

    def _changed(self, *_):
        if not self._loading:
            self.update_markers()
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
            self.update_markers()
            self.process_changed.emit(self.process_values())


def _same(a, b) -> bool:
    if isinstance(a, (list, tuple)) and isinstance(b, (list, tuple)):
        return list(a) == list(b)
    if isinstance(a, (int, float)) and isinstance(b, (int, float)) and not isinstance(a, bool):
        return abs(float(a) - float(b)) < 1e-9
    return a == b
