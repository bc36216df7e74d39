"""Validation: compare a clip's webcam features with a lab eye tracker's recording.

Pick the reference file (a BIDS eye-tracking recording, or a plain table with
the column-mapping dialog; the mapping is remembered in the study), then
"Compare" runs the library's validation (:mod:`aspectus.validation.pair`) in a worker
thread and shows the alignment offset, the agreement table, and the scatter
and Bland-Altman plots; "Export report…" writes the library's HTML report.

"Compare all clips" validates the whole study at once: every processed clip
with a reference goes into a manifest (:func:`aspectus.studies.project.write_validation_manifest`,
kept in the output folder so the command line can re-run it), and
:func:`aspectus.validation.study.validate_study` writes the per-participant and pooled
results and the study report there (the folder is replaced only when the
comparison is complete: :func:`aspectus.studies.project.run_study_validation`); the
view shows the summary table. It shows its progress and can be cancelled.
"""
from __future__ import annotations

import html
import threading
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import (QCheckBox, QComboBox, QDoubleSpinBox, QFileDialog, QHBoxLayout, QLabel, QMessageBox,
                               QProgressBar, QPushButton, QSplitter, QTableView, QVBoxLayout, QWidget)

from aspectus.studies import project as study_mod

from . import theme
from .plot_canvas import PlotCanvas
from .results_view import DataFrameModel


def offset_words(offset_s: float) -> str:
    """The clock offset in words: which recording started first and by how much, then the figure as the library
    defines it (the clip time of the reference's first sample)."""
    when = "before" if offset_s < 0 else "after"
    return (f"the lab tracker started {abs(offset_s):.3f} s {when} the webcam (its recording starts at "
            f"{offset_s:+.3f} s on the clip's clock)")


@dataclass
class ValidationOutcome:
    """What the view shows, taken from the library's validation result.

    Attributes
    ----------
    offset_s : float
        Clip time of the reference's first sample (s), as aligned.
    offset_note : str
        How the offset was found / how sure it is.
    table : DataFrame
        Agreement per feature (one row per feature).
    pairs : DataFrame
        Paired values for the plots: columns feature, webcam, reference.
    result : object
        The library's own result object (for the report).
    """

    offset_s: float
    offset_note: str = ""
    table: pd.DataFrame = field(default_factory=pd.DataFrame)
    pairs: pd.DataFrame = field(default_factory=pd.DataFrame)
    result: object = None
    offset_given: bool = False
    reference_rel: str | None = None


class ValidationView(QWidget):
    """The validation tab.

    Signals
    -------
    compared(str) : a comparison finished for a clip (shown in the view).
    failed(str) : a comparison failed (message shown in the view).
    study_compared(str) : the whole-study comparison finished (its output folder).
    """

    compared = Signal(str)
    failed = Signal(str)
    study_compared = Signal(str)
    _done = Signal(str, object)
    _err = Signal(str, str)
    _study_progress = Signal(float, str)
    _study_done = Signal(object, object)

    def __init__(self, *, window=None, parent=None):
        super().__init__(parent)
        self.window = window
        self.clip: study_mod.StudyClip | None = None
        self.outcome: ValidationOutcome | None = None
        self._done.connect(self._on_done)
        self._err.connect(self._on_err)
        self._study_progress.connect(self._on_study_progress)
        self._study_done.connect(self._on_study_done)
        self._study_cancel: threading.Event | None = None
        self.study_outcome = None
        self._plot_pairs = pd.DataFrame()

        self.ref_label = QLabel("No reference recording chosen for this clip.")
        self.ref_label.setWordWrap(True)
        self.choose_btn = QPushButton("Choose reference recording…")
        self.choose_btn.clicked.connect(self.choose_reference_dialog)
        self.mapping_btn = QPushButton("Columns…")
        self.mapping_btn.setToolTip("Which columns of the table hold time and gaze position, and their units")
        self.mapping_btn.clicked.connect(self.edit_mapping_dialog)
        self.compare_btn = QPushButton("Compare")
        self.compare_btn.setToolTip("Align the clocks and compute the agreement of webcam and reference features")
        self.compare_btn.clicked.connect(self.compare)
        self.report_btn = QPushButton("Export report…")
        self.report_btn.clicked.connect(self.export_report_dialog)
        self.manual_offset = QCheckBox("Offset known:")
        self.manual_offset.setToolTip("Give the clip time of the reference's first sample yourself instead of "
                                      "finding it by cross-correlation (needs 5 s of overlap)")
        self.offset_spin = QDoubleSpinBox()
        self.offset_spin.setRange(-3600.0, 3600.0)
        self.offset_spin.setDecimals(3)
        self.offset_spin.setSuffix(" s")
        self.offset_spin.setEnabled(False)
        self.manual_offset.toggled.connect(self.offset_spin.setEnabled)
        ref_row = QHBoxLayout()
        ref_row.addWidget(self.choose_btn)
        ref_row.addWidget(self.mapping_btn)
        ref_row.addStretch(1)
        top = QHBoxLayout()
        top.addWidget(self.compare_btn)
        self.study_btn = QPushButton("Compare all clips")
        self.study_btn.setToolTip("Compare every processed clip that has a reference recording; per-participant and "
                                  "pooled agreement and a study report go to the output folder")
        self.study_btn.clicked.connect(lambda: self.compare_study())
        self.study_cancel_btn = QPushButton("Cancel")
        self.study_cancel_btn.clicked.connect(self.cancel_study)
        self.study_cancel_btn.hide()
        self.study_bar = QProgressBar()
        self.study_bar.setRange(0, 1000)
        self.study_bar.setMinimumWidth(260)
        self.study_bar.hide()
        top.addWidget(self.manual_offset)
        top.addWidget(self.offset_spin)
        top.addWidget(self.report_btn)
        top.addStretch(1)
        study_row = QHBoxLayout()
        study_row.addWidget(QLabel("Whole study:"))
        study_row.addWidget(self.study_btn)
        study_row.addWidget(self.study_bar, 1)
        study_row.addWidget(self.study_cancel_btn)
        study_row.addStretch(0)

        self.offset_label = QLabel("")
        self.offset_label.setWordWrap(True)
        self.status = QLabel("")
        self.status.setWordWrap(True)
        self.model = DataFrameModel()
        self.table = QTableView()
        self.table.setModel(self.model)
        self.table.setAlternatingRowColors(True)
        self.table.verticalHeader().setDefaultSectionSize(22)
        self.feature_box = QComboBox()
        self.feature_box.currentIndexChanged.connect(self._draw)
        self.canvas = PlotCanvas(min_height=200)
        plots = QWidget()
        pl = QVBoxLayout(plots)
        pl.setContentsMargins(0, 0, 0, 0)
        fr = QHBoxLayout()
        fr.addWidget(QLabel("Feature:"))
        fr.addWidget(self.feature_box, 1)
        pl.addLayout(fr)
        pl.addWidget(self.canvas, 1)
        split = QSplitter(Qt.Vertical)
        split.addWidget(self.table)
        split.addWidget(plots)
        split.setStretchFactor(0, 2)
        split.setStretchFactor(1, 3)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(4, 4, 4, 4)
        lay.addLayout(ref_row)
        lay.addWidget(self.ref_label)
        lay.addLayout(top)
        lay.addLayout(study_row)
        lay.addWidget(self.offset_label)
        lay.addWidget(self.status)
        lay.addWidget(split, 1)
        self.show_clip(None)

    # ----------------------------------------------------------------- API
    @property
    def study(self):
        return self.window.study if self.window is not None else None

    def show_clip(self, clip) -> None:
        self.clip = clip
        self.outcome = None
        self.saved_outcome = None
        self._plot_pairs = pd.DataFrame()
        self.model.set_frame(pd.DataFrame())
        self.feature_box.clear()
        self.offset_label.setText("")
        self.status.setText("")
        if clip is not None and self.study is not None and clip.validation:
            saved = load_outcome(self.study.clip_out_dir(clip))
            ref = clip.reference.path if clip.reference else None
            if saved is not None and saved.get("reference") == ref:
                self.saved_outcome = saved
                self.offset_label.setText(
                    f"<b>Earlier comparison</b> ({saved.get('saved_at', '')}): {offset_words(saved['offset_s'])}. "
                    f"{saved.get('offset_note', '')} "
                    "Press Compare to compute it again (and to export the report).")
                self._show_table(saved["table"])
                self._show_pairs(saved["pairs"])
        if clip is not None and self.saved_outcome is None and self.study is not None:
            self._show_earlier_study()
        self._draw()
        self._update()

    def _show_earlier_study(self) -> None:
        """The last whole-study comparison (Compare all clips), when one is in the study's output folder."""
        import datetime

        out = self.study.output_root() / "validation"
        try:
            pooled = pd.read_csv(out / "pooled_agreement.csv")
            when = datetime.datetime.fromtimestamp((out / "pooled_agreement.csv").stat().st_mtime)
        except (OSError, ValueError):
            return
        from aspectus.validation.report import compact_agreement

        self.offset_label.setText(f"<b>Earlier whole-study comparison</b> ({when:%Y-%m-%d %H:%M}), all clips "
                                  f"pooled; report: {out / 'report.html'}. Press Compare for this clip alone or "
                                  "Compare all clips to compute it again.")
        self.model.set_frame(compact_agreement(pooled, "window"))
        self._fit_columns()

    def set_reference(self, path, *, mapping: dict | None = None, kind: str | None = None) -> bool:
        """Attach a reference recording to the current clip (a table needs a mapping, asked for if unknown)."""
        if self.clip is None or self.study is None:
            return False
        kind = kind or study_mod.guess_reference_kind(Path(path))
        if kind == "table" and mapping is None:
            rel = self.study.relative(path)
            mapping = self.study.mappings.get(rel) or self.study.mappings.get("last")
            if mapping is None or not self._mapping_reads(path, mapping):
                mapping = self._ask_mapping(path, mapping)
                if mapping is None:
                    return False
        try:
            self.study.set_reference(self.clip, path, kind=kind, mapping=mapping)
        except Exception as exc:  # noqa: BLE001 - shown to the user
            self.status.setText(str(exc))
            return False
        self.window._autosave()
        self.show_clip(self.clip)
        return True

    def compare(self) -> bool:
        """Run the validation for the current clip in a worker thread."""
        if self.clip is None or self.clip.reference is None:
            self.status.setText("Choose a reference recording first.")
            return False
        if self.clip.status not in (study_mod.STATUS_DONE, study_mod.STATUS_STALE):
            self.status.setText("Process the clip first: the comparison uses its gaze samples.")
            return False
        s = self.study
        args = dict(out_dir=s.clip_out_dir(self.clip), reference=s.resolve(self.clip.reference.path),
                    kind=self.clip.reference.kind, mapping=self.clip.reference.mapping, analysis=dict(s.analysis),
                    segments=s.resolve(self.clip.segments) if self.clip.segments else None,
                    offset_s=float(self.offset_spin.value()) if self.manual_offset.isChecked() else None)
        key = self.clip.stem
        ref_rel = self.clip.reference.path
        self.status.setText("Comparing…")
        self.compare_btn.setEnabled(False)

        def work():
            try:
                out = run_validation(**args)
            except Exception as exc:  # noqa: BLE001 - shown in the view
                self._err.emit(key, str(exc))
                return
            out.reference_rel = ref_rel
            try:
                save_outcome(args["out_dir"], out)
            except OSError as exc:  # shown, but the result is still there to look at
                out.offset_note += f" (Not saved for the next session: {exc})"
            self._done.emit(key, out)

        threading.Thread(target=work, name="aspectus-validate", daemon=True).start()
        return True

    def compare_study(self, out_dir=None) -> bool:
        """Compare every processed clip that has a reference (in a worker thread); see the module notes.

        ``out_dir`` defaults to ``<study output folder>/validation``; it is
        replaced only when the whole comparison is written
        (:func:`aspectus.studies.project.run_study_validation`).
        """
        s = self.study
        if s is None or self._study_cancel is not None:
            return False
        out = Path(out_dir) if out_dir is not None else s.output_root() / "validation"
        s.refresh_all()
        outdated = [c.name for c in s.clips if c.reference is not None and c.status == study_mod.STATUS_STALE]
        analysis = dict(s.analysis)
        cancel = threading.Event()
        self._study_cancel = cancel
        self.status.setStyleSheet("")
        self.status.setText("Comparing the study's clips…")
        self.study_bar.setValue(0)
        self.study_bar.show()
        self.study_cancel_btn.show()
        self._update()

        def progress(frac, message):
            if cancel.is_set() and frac < 1.0:  # at 1.0 everything is written: nothing left to stop
                from aspectus.errors import Cancelled

                raise Cancelled("study comparison cancelled")
            self._study_progress.emit(float(frac), str(message))

        def work():
            from aspectus.events.analysis import AnalysisParams
            from aspectus.errors import Cancelled
            from aspectus.validation.pair import ValidateParams

            try:
                ap = AnalysisParams.from_dict(analysis) if analysis else AnalysisParams()
                res, skipped = study_mod.run_study_validation(s, out, params=ValidateParams(analysis=ap),
                                                              progress=progress)
            except Cancelled:
                self._study_done.emit(None, {"cancelled": True, "out": out})
                return
            except Exception as exc:  # noqa: BLE001 - shown in the view
                self._study_done.emit(None, {"error": str(exc), "out": out})
                return
            self._study_done.emit(res, {"skipped": skipped, "out": out, "outdated": outdated})

        threading.Thread(target=work, name="aspectus-validate-study", daemon=True).start()
        return True

    def cancel_study(self) -> None:
        """Stop the whole-study comparison after the pair being compared."""
        if self._study_cancel is not None:
            self._study_cancel.set()
            self.status.setText("Cancelling after the current pair…")

    @property
    def study_running(self) -> bool:
        return self._study_cancel is not None

    def export_report(self, path) -> Path:
        """Write the HTML report of the last comparison."""
        if self.outcome is None:
            raise RuntimeError("compare first")
        return write_report(self.outcome, path)

    # ------------------------------------------------------------- dialogs
    def choose_reference_dialog(self):
        if self.clip is None:
            return
        start = str(self.study.base_dir)
        path, _ = QFileDialog.getOpenFileName(self, f"Reference recording for {self.clip.stem}", start,
                                              "Gaze recordings (*.tsv *.tsv.gz *.csv *.txt *.json);;All files (*)")
        if path:
            self.set_reference(path)

    def edit_mapping_dialog(self):
        if self.clip is None or self.clip.reference is None or self.clip.reference.kind != "table":
            return
        path = self.study.resolve(self.clip.reference.path)
        m = self._ask_mapping(path, self.clip.reference.mapping)
        if m is not None:
            self.study.set_reference(self.clip, path, kind="table", mapping=m)
            self.window._autosave()
            self.show_clip(self.clip)

    def export_report_dialog(self):
        if self.outcome is None:
            return
        start = str(self.study.output_root() / f"{self.clip.stem}_validation.html")
        path, _ = QFileDialog.getSaveFileName(self, "Export validation report", start, "HTML report (*.html)")
        if path:
            try:
                p = self.export_report(path)
            except Exception as exc:  # noqa: BLE001 - shown to the user
                QMessageBox.warning(self, "Report not written", str(exc))
                return
            self.status.setText(f"Report written to {p}")

    def _ask_mapping(self, path, initial):
        from .mapping_dialog import MappingDialog

        dlg = MappingDialog(path, initial=initial, parent=self)
        if dlg.exec() != MappingDialog.Accepted or dlg.mapping is None:
            return None
        return dlg.mapping.to_dict()

    @staticmethod
    def _mapping_reads(path, mapping) -> bool:
        try:
            from aspectus.reference.table import TableMapping, read_gaze_table

            read_gaze_table(path, TableMapping.from_dict(mapping))
            return True
        except Exception:  # noqa: BLE001 - the dialog will say what is wrong
            return False

    # ------------------------------------------------------------- results
    def _on_done(self, key, outcome):
        self.compare_btn.setEnabled(True)
        # kept on the compared clip even when another one is shown by now: the whole-study comparison uses it
        compared = self.study.find(key) if self.study is not None else None
        if compared is not None:
            compared.validation = {"offset_s": outcome.offset_s, "features": int(len(outcome.table)),
                                   "offset_given": bool(outcome.offset_given), "saved": SAVED_DIR}
            if self.window is not None:
                self.window._autosave()
        if self.clip is None or self.clip.stem != key:
            return
        self.outcome = outcome
        self.offset_label.setText(f"<b>Alignment:</b> {offset_words(outcome.offset_s)}. {outcome.offset_note}")
        self._show_table(outcome.table)
        self._show_pairs(outcome.pairs)
        self._draw()
        self._update()
        self.compared.emit(key)

    def _on_err(self, key, message):
        self.compare_btn.setEnabled(True)
        if self.clip is not None and self.clip.stem == key:
            self.status.setText(f"The comparison could not be made: {message}")
            self.status.setStyleSheet("color: #c62828;")
        self.failed.emit(message)

    def _on_study_progress(self, frac, message):
        self.study_bar.setValue(int(round(1000 * max(0.0, min(1.0, frac)))))
        self.study_bar.setFormat(f"{message} – %p%")

    def _show_study_error(self, message):
        self.status.setText(f"The study comparison could not be made: {message}")
        self.status.setStyleSheet("color: #c62828;")
        self.failed.emit(message)

    def _on_study_done(self, res, extra):
        out = extra["out"]
        self._study_cancel = None
        self.study_bar.hide()
        self.study_cancel_btn.hide()
        if res is None:
            self._update()
            if extra.get("cancelled"):
                self.status.setStyleSheet("")
                self.status.setText(f"Study comparison cancelled; nothing was written, and an earlier comparison "
                                    f"in {out} is as it was.")
            else:
                self._show_study_error(extra.get("error", "unknown error"))
            return
        self.study_outcome = res
        self.outcome = None
        self._update()
        n_ok, n_bad = len(res.results), len(res.failures)

        def listed(items, what):
            shown = [f"{what}{m}" for m in items[:5]]
            if len(items) > 5:
                shown.append(f"… and {len(items) - 5} more (see participants.csv)")
            return shown

        lines = [f"<b>Study:</b> {n_ok} clip{'' if n_ok == 1 else 's'} compared with {'its' if n_ok == 1 else 'their'} "
                 "reference"
                 + (f", {n_bad} failed" if n_bad else "") + f". Summary below; report, pooled and per-participant "
                 f"tables in <b>{out}</b> (report.html, summary.csv, participants.csv). Participant and session "
                 f"labels were taken from the clip names (validation_manifest.csv; edit it and run "
                 f"<code>aspectus validate --manifest</code> to change them)."]
        lines += listed([f"{k}: {m}" for k, m in res.failures.items()], "")
        lines += listed(list(extra.get("skipped") or []), "left out – ")
        outdated = list(extra.get("outdated") or [])
        if outdated:
            lines.append(f"{len(outdated)} clip{' was' if len(outdated) == 1 else 's were'} processed with other "
                         "parameters than the study's current ones and compared as they are: " + ", ".join(outdated[:5])
                         + (" …" if len(outdated) > 5 else ""))
        from aspectus.validation.report import compact_agreement, compact_participants

        shown = compact_agreement(res.pooled, "window")
        if not len(shown):  # e.g. clips shorter than one window: the per-pair table says what there is
            shown = compact_participants(res.per_participant)
            lines.append("No windows could be paired for a pooled summary; the table lists each pair.")
        else:
            n_max = int(pd.to_numeric(shown["n"]).max())
            from aspectus.validation.windows import MIN_PAIRS

            if n_max < MIN_PAIRS:
                from aspectus.validation.report import withheld_reason

                lines.append(withheld_reason(n_max, pooled=True))
        self.status.setStyleSheet("")
        self.status.setText("<br>".join(lines))
        self.offset_label.setText("")
        self.model.set_frame(shown)
        self._fit_columns()
        # the plots pool the windows of every pair (one point per window, as in pooled_agreement.csv)
        self._show_pairs(pd.concat([_long_pairs(r.pairs) for r in res.results.values()], ignore_index=True))
        self._draw()
        self.study_compared.emit(str(out))

    def _update(self):
        c = self.clip
        has_clip = c is not None
        ref = c.reference if has_clip else None
        self.choose_btn.setEnabled(has_clip)
        self.mapping_btn.setEnabled(ref is not None and ref.kind == "table")
        self.compare_btn.setEnabled(ref is not None)
        self.report_btn.setEnabled(self.outcome is not None)
        self.study_btn.setEnabled(self.study is not None and self._study_cancel is None)
        if not has_clip:
            self.ref_label.setText("Select a clip to compare it with a reference recording.")
            self.ref_label.setToolTip("")
        elif ref is None:
            self.ref_label.setText(f"No reference recording chosen for {c.stem}.")
            self.ref_label.setToolTip("")
        else:
            what = "BIDS eye-tracking recording" if ref.kind == "bids" else "gaze table"
            self.ref_label.setText(f"Reference for {c.stem}: <b>{html.escape(Path(ref.path).name)}</b> ({what}).")
            self.ref_label.setToolTip(f"{ref.path} (from the study file's folder)")
        if not self.status.text().startswith(("The comparison", "The study comparison")):
            self.status.setStyleSheet("")

    def _show_table(self, agreement: pd.DataFrame) -> None:
        """The library's agreement table in the report's compact form (names with units, no statistics below
        the minimum n - and the reason why above the table)."""
        from aspectus.validation.report import compact_agreement, withheld_reason
        from aspectus.validation.windows import MIN_PAIRS

        parts = []
        for scope in ("window", "segment"):
            t = compact_agreement(agreement, scope)
            if len(t):
                if scope != "window":  # counts say "(per segment)" already; the rest say it here
                    t["Feature"] = [f if "per segment" in f else f"{f}, segments" for f in t["Feature"]]
                parts.append(t.assign(Per=scope))
        from aspectus.validation.report import COMPACT_COLUMNS

        shown = pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(columns=[*COMPACT_COLUMNS, "Per"])
        per = shown.pop("Per")
        # two-line headers keep the columns narrow enough for the tab at 1366 px
        self.model.set_frame(shown.rename(columns={c: c.replace(" [", "\n[").replace(" mean", "\nmean")
                                                   for c in shown.columns}))
        self._fit_columns()
        note = ""
        if len(shown):
            win = shown[per == "window"]
            n_max = int(pd.to_numeric(win["n"]).max()) if len(win) else 0
            if n_max < MIN_PAIRS:
                note = withheld_reason(n_max)
        self.status.setStyleSheet("")
        self.status.setText(note)

    def _fit_columns(self) -> None:
        """Columns as wide as their contents, but the feature names never wider than a third of the view."""
        self.table.resizeColumnsToContents()
        cap = max(160, self.table.viewport().width() // 3)
        for c in range(self.model.columnCount()):
            if self.table.columnWidth(c) > cap:
                self.table.setColumnWidth(c, cap)

    def _show_pairs(self, pairs: pd.DataFrame) -> None:
        """Offer the features of ``pairs`` (long form) for plotting; the one with most pairs first."""
        self._plot_pairs = pairs
        self.feature_box.blockSignals(True)
        self.feature_box.clear()
        if len(pairs):
            best, best_n = 0, -1
            for i, ((feat, scope), g) in enumerate(pairs.groupby(["feature", "scope"], sort=False)):
                from aspectus.validation.report import feature_label

                self.feature_box.addItem(f"{_scoped_label(feature_label(feat, scope=scope), scope)} "
                                         f"(n = {len(g)})", (feat, scope))
                if len(g) > best_n:
                    best, best_n = i, len(g)
            self.feature_box.setCurrentIndex(best)
        self.feature_box.blockSignals(False)

    def _draw(self, *_):
        pairs = self._plot_pairs
        key = self.feature_box.currentData()
        if not len(pairs) or not key:
            self.canvas.plot(draw_agreement, None, None, "")
            return
        feat, scope = key
        p = pairs[(pairs["feature"] == feat) & (pairs["scope"] == scope)]
        from aspectus.validation.report import feature_label

        self.canvas.plot(draw_agreement, p["webcam"].to_numpy(dtype=float), p["reference"].to_numpy(dtype=float),
                         _scoped_label(feature_label(feat, scope=scope), scope))



def _scoped_label(label: str, scope: str) -> str:
    """A feature's label with the scope it was paired over, said once: "Fixations (per window)" stays as it is
    (it read "Fixations (per window) – per window"), "Fixation rate (1/min)" becomes "Fixation rate (1/min), per
    window"."""
    return label if label.endswith(f"(per {scope})") else f"{label}, per {scope}"


def _same_decimals(*values: float) -> list[str]:
    """Figures printed side by side with one number of decimals, three significant digits for the largest
    ("-0.80, -2.35 to 0.75", not "-0.8, -2.35 to 0.746"); no "-0.00"."""
    finite = [abs(float(v)) for v in values if np.isfinite(v)]
    big = max(finite) if finite else 0.0
    nd = 2 if big < 1e-9 else int(min(6, max(0, 2 - np.floor(np.log10(big)))))
    out = []
    for v in values:
        if not np.isfinite(v):
            out.append("n/a")
            continue
        t = f"{float(v):.{nd}f}"
        out.append(t[1:] if t.startswith("-") and float(t) == 0 else t)
    return out


def draw_agreement(fig, webcam, reference, feature: str):
    """Scatter of webcam against reference and the Bland-Altman plot (runs in the drawing thread)."""
    import warnings

    fig.subplots_adjust(left=0.09, right=0.98, top=0.84, bottom=0.17, wspace=0.3)
    ax_s = fig.add_subplot(1, 2, 1)
    ax_b = fig.add_subplot(1, 2, 2)
    if webcam is None:
        for ax in (ax_s, ax_b):
            ax.set_axis_off()
        ax_s.text(0.5, 0.5, "Compare to see the plots", ha="center", va="center", transform=ax_s.transAxes,
                  color="#555")
        return 0
    ok = np.isfinite(webcam) & np.isfinite(reference)
    a, b = webcam[ok], reference[ok]
    ax_s.scatter(b, a, s=14, color=theme.POINT_COLOUR, alpha=0.8)
    if len(a):
        lo, hi = float(min(a.min(), b.min())), float(max(a.max(), b.max()))
        ax_s.plot([lo, hi], [lo, hi], color="#888", lw=0.8, ls="--")
    ax_s.set_xlabel("lab tracker", fontsize=8)
    ax_s.set_ylabel("webcam", fontsize=8)
    fig.suptitle(feature, fontsize=9)
    ax_s.set_title(f"Webcam against lab tracker, n = {len(a)}", fontsize=8)
    ax_b.scatter((a + b) / 2, a - b, s=14, color=theme.POINT_COLOUR, alpha=0.8)
    from aspectus.validation.windows import MIN_PAIRS

    if len(a) >= MIN_PAIRS:
        from aspectus.validation.agreement import bland_altman

        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ba = bland_altman(a, b)
        for y, ls in ((ba.bias, "-"), (ba.loa_low, "--"), (ba.loa_high, "--")):
            if np.isfinite(y):
                ax_b.axhline(y, color=theme.CURSOR_COLOUR, lw=1, ls=ls)
        b_, lo_, hi_ = _same_decimals(ba.bias, ba.loa_low, ba.loa_high)
        ax_b.set_title(f"Bias {b_}, limits {lo_} to {hi_}", fontsize=8)
    else:
        ax_b.set_title(f"Differences (limits need {MIN_PAIRS}+ pairs)", fontsize=8)
    ax_b.set_xlabel("mean of webcam and lab tracker", fontsize=8)
    ax_b.set_ylabel("webcam − lab tracker", fontsize=8)
    from aspectus.validation.report import _plain_axes

    for ax in (ax_s, ax_b):
        ax.tick_params(labelsize=7)
        ax.grid(True, color="#e6e6e6", lw=0.6)
        _plain_axes(ax)
    return int(len(a))


# ------------------------------------------------------------------ library adapters
def run_validation(*, out_dir, reference, kind, mapping, analysis, segments=None,
                   offset_s: float | None = None) -> ValidationOutcome:
    """Compare one processed clip with its reference via :func:`aspectus.validation.pair.validate_pair`.

    The same detector and parameters as the study's run on both sides; nothing
    is written (the report is written on request, :func:`write_report`).
    """
    from aspectus.events.analysis import AnalysisParams
    from aspectus.reference.table import TableMapping
    from aspectus.validation.pair import ValidateParams, validate_pair

    ap = AnalysisParams.from_dict(analysis) if analysis else AnalysisParams()
    m = TableMapping.from_dict(mapping) if (kind == "table" and mapping) else None
    result = validate_pair(out_dir, reference, mapping=m, params=ValidateParams(analysis=ap, offset_s=offset_s),
                           segments=segments, write=False, figures=False)
    al = result.alignment
    from aspectus.validation.align import method_text

    note = f"Found by {method_text(al.method)}"
    conf = getattr(al, "confidence", float("nan"))
    if conf == conf and al.method != "user":
        from aspectus.validation.report import confidence_words

        note += (f", confidence {conf:.2f} on a scale from 0 (another offset fits as well) to 1 (no other offset "
                 f"fits): {confidence_words(conf)}")
    note += "."
    extra = list(getattr(al, "notes", []) or [])
    if extra:
        note += " " + " ".join(extra)
    return ValidationOutcome(offset_s=float(al.offset_s), offset_note=note, table=result.agreement,
                             pairs=_long_pairs(result.pairs), result=result, offset_given=offset_s is not None)


#: where the app keeps a clip's last comparison (inside the clip's result folder), to show it when the study is
#: opened again; the files are the library's agreement table and the paired values
SAVED_DIR = "app_validation"


def save_outcome(out_dir, outcome: ValidationOutcome) -> Path:
    """Keep a comparison's table and pairs beside the clip's results (atomically; note json last)."""
    import datetime

    from aspectus.atomic import write_csv, write_json

    d = Path(out_dir) / SAVED_DIR
    d.mkdir(parents=True, exist_ok=True)
    write_csv(d / "agreement.csv", outcome.table)
    write_csv(d / "pairs_long.csv", outcome.pairs)
    meta = getattr(outcome.result, "meta", {}) or {}
    write_json(d / "comparison.json", {
        "offset_s": float(outcome.offset_s), "offset_note": outcome.offset_note,
        "offset_given": bool(outcome.offset_given), "reference": getattr(outcome, "reference_rel", None),
        "saved_at": datetime.datetime.now().strftime("%Y-%m-%d %H:%M"),
        "window_s": (meta.get("params") or {}).get("window_s"), "windows": meta.get("windows")})
    return d


def load_outcome(out_dir) -> dict | None:
    """The comparison :func:`save_outcome` kept, or None (none, or unreadable: then it is simply not shown)."""
    import json

    d = Path(out_dir) / SAVED_DIR
    try:
        meta = json.loads((d / "comparison.json").read_text(encoding="utf-8"))
        table = pd.read_csv(d / "agreement.csv")
        pairs = pd.read_csv(d / "pairs_long.csv", keep_default_na=False, na_values=[""])
    except (OSError, ValueError):
        return None
    for c in ("webcam", "reference"):
        if c in pairs:
            pairs[c] = pd.to_numeric(pairs[c], errors="coerce")
    meta.update(table=table, pairs=pairs)
    return meta


def _long_pairs(pairs: pd.DataFrame) -> pd.DataFrame:
    """Wide ``<feature>_webcam`` / ``<feature>_reference`` columns to rows of (feature, webcam, reference)."""
    if pairs is None or not len(pairs):
        return pd.DataFrame(columns=["feature", "scope", "label", "webcam", "reference"])
    p = pairs[pairs["paired"]] if "paired" in pairs else pairs
    feats = [c[: -len("_webcam")] for c in p.columns
             if c.endswith("_webcam") and f"{c[: -len('_webcam')]}_reference" in p.columns
             and not c.startswith("valid_frac")]
    rows = [pd.DataFrame({"feature": f, "scope": p.get("scope", ""), "label": p.get("label", ""),
                          "webcam": p[f"{f}_webcam"].astype(float), "reference": p[f"{f}_reference"].astype(float)})
            for f in feats]
    return pd.concat(rows, ignore_index=True) if rows else pd.DataFrame(
        columns=["feature", "scope", "label", "webcam", "reference"])


def write_report(outcome: ValidationOutcome, path) -> Path:
    """Write the library's HTML validation report (figures embedded) to ``path``, atomically."""
    from aspectus.atomic import write_text
    from aspectus.validation.report import render_pair_figures, render_pair_report

    path = Path(path)
    if path.suffix.lower() not in (".html", ".htm"):
        path = path.with_suffix(".html")
    html = render_pair_report(outcome.result, render_pair_figures(outcome.result))
    return write_text(path, html)
