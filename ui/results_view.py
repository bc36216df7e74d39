"""Results: the feature table (per clip, window or segment), quality per clip,
a fixation-duration histogram, and export to CSV or Parquet.

Tables are read from the clips' result folders (``features.parquet``,
``events.parquet``, ``run.json``) - the files the command line writes too.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
from PySide6.QtCore import QAbstractTableModel, QModelIndex, Qt, Signal
from PySide6.QtWidgets import (QComboBox, QHBoxLayout, QHeaderView, QLabel, QPushButton, QSplitter, QTableView,
                               QVBoxLayout, QWidget)

from . import theme
from .plot_canvas import PlotCanvas

#: what the "Rows" chooser offers: (key, text)
ROW_CHOICES = (("clip", "whole clip"), ("window", "fixed windows"), ("segment", "task segments"),
               ("quality", "quality summary"))
#: what the "Clips" chooser offers
CLIP_CHOICES = (("current", "this clip"), ("all", "all processed clips"))

#: quality summary columns (from run.json) in display order
QUALITY_COLUMNS = ("frames", "duration_s", "face_found_frac", "valid_frac", "blink_count", "fixation_count",
                   "noise_rms_s2s_33ms_deg", "noise_rms_s2s_deg", "noise_sd_deg", "median_distance_mm", "precision_tier",
                   "usable", "verdict")

#: headers and definitions of the quality summary's columns that are not feature columns (aspectus.schema has
#: those); the precision tier's definition is read from the library (:func:`_tier_tip`)
_QUALITY_LABELS = {
    "frames": ("Frames", "video frames read"),
    "duration_s": ("Duration (s)", "time from the first frame to the last"),
    "face_found_frac": ("Face found (share)", "share of frames in which the face was tracked"),
    "median_distance_mm": ("Median distance (mm)", "median eye-to-camera distance, from the iris size"),
    "precision_tier": ("Precision tier", ""),
    "usable": ("Usable", "the verdict: enough face, usable gaze and a gaze signal that is not very noisy"),
    "verdict": ("Verdict", "the clip's verdict in words: hover over a cell to read it whole"),
}


#: headers and definitions of the columns that say which time span a feature row covers
_SCOPE_LABELS = {
    "clip": ("Clip", "the clip's name in the study"),
    "scope": ("Scope", "what the row covers: the whole clip, a fixed window or a task segment"),
    "label": ("Label", "the task segment's name, the fixed window's number (w0000, w0001, ...), or clip"),
    "start_s": ("Start (s)", "start of the row's time span on the clip's clock; the whole clip and its first window "
                             "start half a frame before the first frame, which stands for the time around it"),
    "end_s": ("End (s)", "end of the row's time span on the clip's clock"),
    "n_samples": ("Samples", "gaze samples (video frames) in the row's time span"),
}


def value_words(column: str) -> dict:
    """The values of ``column`` the tables show in words ({value: words}); run.json and exports keep the values."""
    if column == "precision_tier":
        from aspectus.webcam.pipeline import TIER_WORDS

        return TIER_WORDS
    return {}


def _tier_tip() -> str:
    from aspectus.webcam.pipeline import PRECISION_TIERS, TIER_WORDS, precision_limits_text

    return ("which features the clip's gaze precision supports (the verdict says why): "
            + "; ".join(f"{TIER_WORDS.get(tier, tier)} ('{tier}' in exports and run.json): {', '.join(features)}"
                        for tier, _, _, features in PRECISION_TIERS)
            + ". " + precision_limits_text())


def precision_caveat(clips) -> str:
    """A note on the clips shown whose precision tier (run.json's ``quality.precision_tier``) does not support
    fixation counts and durations (:data:`aspectus.webcam.pipeline.PRECISION_TIERS`); "" where every clip's does or
    none has a tier recorded. ``clips``: (name, out_dir, summary) as the provider gives them."""
    from aspectus.webcam.pipeline import PRECISION_TIERS

    trusted = {tier: features for tier, _, _, features in PRECISION_TIERS}
    low = [name for name, _, summary in clips
           if (summary or {}).get("precision_tier") in trusted
           and "fixation count and durations" not in trusted[summary["precision_tier"]]]
    if not low:
        return ""
    names = ", ".join(low[:3]) + (f" and {len(low) - 3} more" if len(low) > 3 else "")
    return (f"Gaze precision too low for fixation counts and durations in {names}: read those columns with care "
            "(each clip's verdict says why and what can be trusted).")


class DataFrameModel(QAbstractTableModel):
    """A read-only Qt model over a pandas DataFrame."""

    def __init__(self, df: pd.DataFrame | None = None, parent=None):
        super().__init__(parent)
        self._df = df if df is not None else pd.DataFrame()

    def set_frame(self, df: pd.DataFrame) -> None:
        self.beginResetModel()
        self._df = df.reset_index(drop=True)
        self.endResetModel()

    def frame(self) -> pd.DataFrame:
        return self._df

    def rowCount(self, parent=QModelIndex()):  # noqa: N802, B008 - Qt API
        return 0 if parent.isValid() else len(self._df)

    def columnCount(self, parent=QModelIndex()):  # noqa: N802, B008 - Qt API
        return 0 if parent.isValid() else len(self._df.columns)

    def data(self, index, role=Qt.DisplayRole):
        if not index.isValid():
            return None
        v = self._df.iat[index.row(), index.column()]
        if role == Qt.DisplayRole:
            if isinstance(v, (float, np.floating)):
                if not np.isfinite(v):
                    return "–"
                if self.human_headers and float(v).is_integer() and abs(v) < 1e9 and \
                        _is_count(str(self._df.columns[index.column()])):
                    return str(int(v))  # counts read as counts; a rate or a share keeps its decimals
                return f"{v:.3f}" if abs(v) < 100 else f"{v:.1f}"
            if isinstance(v, (bool, np.bool_)):
                return "yes" if v else "no"
            if self.human_headers and isinstance(v, str):
                return value_words(str(self._df.columns[index.column()])).get(v, v)  # exports keep the values
            return "" if v is None else str(v)
        if role == Qt.ToolTipRole and isinstance(v, str) and len(v) > 40:
            return v  # a long text (a verdict) is read whole on hover, however narrow its column
        if role == Qt.TextAlignmentRole and isinstance(v, (int, float, np.number)) and not isinstance(v, bool):
            return int(Qt.AlignRight | Qt.AlignVCenter)
        return None

    #: show column names as people read them (set by views that list the library's tables)
    human_headers = False

    def headerData(self, section, orientation, role=Qt.DisplayRole):  # noqa: N802 - Qt API
        if orientation == Qt.Horizontal and section < len(self._df.columns):
            name = str(self._df.columns[section])
            if role == Qt.DisplayRole:
                return _human(name) if self.human_headers else name
            if role == Qt.ToolTipRole and self.human_headers:
                return _column_tip(name)
            return None
        if role != Qt.DisplayRole:
            return None
        return str(section + 1)


def _is_count(name: str) -> bool:
    """A column of whole numbers (aspectus.schema's int64 columns, the quality summary's frame count)."""
    from aspectus.schema import column

    c = column(name)
    return name == "frames" or (c is not None and c.dtype == "int64")


def _human(name: str) -> str:
    """A column's label with its unit (aspectus.schema), two lines when long, so columns stay narrow."""
    from aspectus.schema import column, human_label

    if name in _SCOPE_LABELS:
        return _SCOPE_LABELS[name][0]
    if column(name) is None and name in _QUALITY_LABELS:
        text = _QUALITY_LABELS[name][0]
    else:
        text = human_label(name) if column(name) is not None or name in QUALITY_COLUMNS else name
    if len(text) > 16 and " (" in text:
        text = text.replace(" (", "\n(", 1)
    elif len(text) > 16 and ", " in text:
        text = text.replace(", ", ",\n", 1)
    return text


def _column_tip(name: str) -> str:
    from aspectus.schema import column

    c = column(name)
    if name in _SCOPE_LABELS:
        return f"{name}: {_SCOPE_LABELS[name][1]}"
    if c is None and name in _QUALITY_LABELS:
        doc = _tier_tip() if name == "precision_tier" else _QUALITY_LABELS[name][1]
        return f"{name}: {doc}"
    return f"{name}: {c.doc}" if c is not None and c.doc else name


_CACHE: dict[Path, tuple[float, pd.DataFrame]] = {}


def _read_table(out_dir: Path, stem: str) -> pd.DataFrame | None:
    """``<stem>.parquet`` (else ``.csv``) of a result folder, cached by modification time."""
    for suffix in (".parquet", ".csv"):
        p = Path(out_dir) / (stem + suffix)
        try:
            mtime = p.stat().st_mtime_ns
        except OSError:
            continue
        hit = _CACHE.get(p)
        if hit is not None and hit[0] == mtime:
            return hit[1]
        df = pd.read_parquet(p) if suffix == ".parquet" else pd.read_csv(p)
        _CACHE[p] = (mtime, df)
        return df
    return None


def read_features(out_dir: Path) -> pd.DataFrame | None:
    return _read_table(out_dir, "features")


def read_events(out_dir: Path) -> pd.DataFrame | None:
    return _read_table(out_dir, "events")


def _frame_quantum_ms(d: np.ndarray) -> float | None:
    """The frame interval the durations are whole multiples of (webcam data), or None."""
    u = np.unique(np.round(np.asarray(d, float), 3))
    gaps = np.diff(u)
    gaps = gaps[gaps > 1.0]
    if len(u) < 3 or not len(gaps):
        return None
    q = float(gaps.min())
    k = d / q
    return q if q >= 5.0 and np.all(np.abs(k - np.round(k)) < 0.05) else None


def draw_histogram(fig, durations_ms: np.ndarray, what: str = ""):
    """Fixation-duration histogram (runs in the drawing thread); ``what`` says whose fixations, in the title."""
    from matplotlib.ticker import MaxNLocator

    fig.subplots_adjust(left=0.16, right=0.97, top=0.9, bottom=0.15)
    ax = fig.add_subplot(1, 1, 1)
    d = durations_ms
    if len(d):
        hi = max(100.0, float(np.percentile(d, 99)) * 1.05)
        step = 25.0 if hi <= 1500 else 50.0
        start = 0.0
        q = _frame_quantum_ms(d)
        if q:  # durations from a camera come in whole frames: one bar per frame count, centred on it
            step = q * np.ceil(step / q)
            start = -step / 2
        bins = np.arange(start, hi + step, step)
        ax.hist(np.clip(d, 0, bins[-1]), bins=bins, color=theme.HIST_COLOUR, edgecolor="white", lw=0.5)
        over = int(np.count_nonzero(np.clip(d, 0, bins[-1]) >= bins[-2]))  # the last bin holds its left edge
        if np.any(d > bins[-1]):  # the longest 1 % are piled into the last bar: say so
            ax.text(0.99, 0.90, f"last bar: {bins[-2]:.0f} ms or longer ({over})", transform=ax.transAxes,
                    ha="right", va="top", fontsize=7, color="#555")
        ax.yaxis.set_major_locator(MaxNLocator(integer=True))  # counts are whole numbers
        med = float(np.median(d))
        ax.axvline(med, color=theme.CURSOR_COLOUR, lw=1.2)
        ax.text(med, 0.97, f" median {med:.0f} ms", transform=ax.get_xaxis_transform(), va="top", ha="left",
                fontsize=8, color=theme.CURSOR_COLOUR)
        ax.set_title(f"Fixation durations{', ' + what if what else ''} (n = {len(d)})", fontsize=9)
    else:
        ax.text(0.5, 0.5, "No fixations to show", ha="center", va="center", transform=ax.transAxes, color="#555")
        ax.set_title(f"Fixation durations{', ' + what if what else ''}", fontsize=9)
    ax.set_xlabel("fixation duration (ms)", fontsize=8)
    ax.set_ylabel("number of fixations", fontsize=8)
    ax.tick_params(labelsize=7)
    return int(len(d))


class ResultsView(QWidget):
    """Feature and quality tables with a fixation-duration histogram.

    The owner supplies a ``provider`` with ``clips()`` -> list of (name,
    out_dir, summary) for processed clips and ``current()`` -> name or None.

    Signals
    -------
    export_done(path) : a table was written.
    """

    export_done = Signal(str)

    def __init__(self, parent=None):
        super().__init__(parent)
        self.provider = None
        self._override: dict[str, tuple[pd.DataFrame, pd.DataFrame]] = {}
        self.clips_box = QComboBox()
        for key, text in CLIP_CHOICES:
            self.clips_box.addItem(text, key)
        self.rows_box = QComboBox()
        for key, text in ROW_CHOICES:
            self.rows_box.addItem(text, key)
        self.clips_box.currentIndexChanged.connect(self.refresh)
        self.rows_box.currentIndexChanged.connect(self.refresh)
        self.export_btn = QPushButton("Export table…")
        self.export_btn.setToolTip("Save the table shown as CSV (for spreadsheets, R, SPSS) or Parquet")
        self.export_btn.clicked.connect(self._export_dialog)
        self.count_label = QLabel()
        self.count_label.setStyleSheet("color: #555;")
        self.count_label.setWordWrap(True)
        top = QHBoxLayout()
        top.addWidget(QLabel("Clips:"))
        top.addWidget(self.clips_box)
        top.addWidget(QLabel("Rows:"))
        top.addWidget(self.rows_box)
        top.addWidget(self.count_label, 1)
        top.addWidget(self.export_btn)
        # clips whose gaze precision does not support the fixation columns (their precision tier)
        self.caveat_label = QLabel()
        self.caveat_label.setWordWrap(True)
        self.caveat_label.setStyleSheet("color: #b26a00;")
        self.caveat_label.hide()

        self.model = DataFrameModel()
        self.model.human_headers = True
        self.table = QTableView()
        self.table.setModel(self.model)
        self.table.setAlternatingRowColors(True)
        self.table.horizontalHeader().setSectionResizeMode(QHeaderView.Interactive)
        self.table.verticalHeader().setDefaultSectionSize(22)

        self.canvas = PlotCanvas(min_height=200)
        self.canvas.setMinimumWidth(280)
        self._dirty = True

        # the histogram below the table: the table gets the tab's whole width for its many columns
        split = QSplitter(Qt.Vertical)
        split.addWidget(self.table)
        split.addWidget(self.canvas)
        split.setStretchFactor(0, 3)
        split.setStretchFactor(1, 2)
        split.setSizes([380, 240])  # the table first: the canvas' own size hint would otherwise take most
        self.split = split
        lay = QVBoxLayout(self)
        lay.setContentsMargins(4, 4, 4, 4)
        lay.addLayout(top)
        lay.addWidget(self.caveat_label)
        lay.addWidget(split, 1)
        self.n_histogram_fixations = 0
        self.histogram_what = ""  # whose fixations the histogram counts, as its title says
        self.refresh()

    # ----------------------------------------------------------------- API
    def set_result(self, name: str, features: pd.DataFrame, events: pd.DataFrame) -> None:
        """Use a fresh in-memory result for a clip (after a re-analysis) and redraw."""
        self._override[name] = (features, events)
        self.refresh()

    def forget(self, name: str | None = None) -> None:
        if name is None:
            self._override.clear()
        else:
            self._override.pop(name, None)

    def _clip_tables(self, name, out_dir):
        if name in self._override:
            return self._override[name]
        return read_features(out_dir), read_events(out_dir)

    def _shown_clips(self) -> list:
        """The clips the table shows: (name, out_dir, summary)."""
        if self.provider is None:
            return []
        clips = self.provider.clips()
        if self.clips_box.currentData() == "current":
            cur = self.provider.current()
            clips = [c for c in clips if c[0] == cur]
        return clips

    def current_table(self) -> pd.DataFrame:
        """The table as shown (also what Export writes)."""
        if self.provider is None:
            return pd.DataFrame()
        rows = self.rows_box.currentData()
        clips = self._shown_clips()
        parts = []
        for name, out_dir, summary in clips:
            if rows == "quality":
                d = {"clip": name}
                d.update({k: summary.get(k) for k in QUALITY_COLUMNS})
                parts.append(pd.DataFrame([d]))
                continue
            feats, _ev = self._clip_tables(name, out_dir)
            if feats is None or not len(feats):
                continue
            f = feats[feats["scope"] == rows] if "scope" in feats else feats
            f = f.copy()
            f.insert(0, "clip", name)
            parts.append(f)
        parts = [p for p in parts if len(p)]
        return pd.concat(parts, ignore_index=True) if parts else pd.DataFrame()

    def refresh(self, *_):
        """Rebuild the table and histogram (at once when visible, else when next shown)."""
        if not self.isVisible():
            self._dirty = True
            return
        self._dirty = False
        df = self.current_table()
        self.model.set_frame(df)
        self.table.resizeColumnsToContents()
        for c in range(min(df.shape[1], 60)):
            if self.table.columnWidth(c) > 260:
                self.table.setColumnWidth(c, 260)
        n = len(df)
        self.count_label.setText(f"{n} row{'s' if n != 1 else ''}" if n else
                                 "Nothing to show yet: process clips first.")
        caveat = precision_caveat(self._shown_clips()) if n else ""
        self.caveat_label.setText(caveat)
        self.caveat_label.setVisible(bool(caveat))
        self.export_btn.setEnabled(n > 0)
        self._draw_histogram()

    def showEvent(self, ev):  # noqa: N802 - Qt override
        super().showEvent(ev)
        if self._dirty:
            self.refresh()

    def _draw_histogram(self):
        durations = []
        what = ""
        if self.provider is not None:
            clips = self.provider.clips()
            # the histogram takes every fixation of the whole clip(s), whichever rows the table shows
            what = f"{len(clips)} processed clips, whole clips" if len(clips) != 1 else "the processed clip, whole"
            if self.clips_box.currentData() == "current":
                cur = self.provider.current()
                clips = [c for c in clips if c[0] == cur]
                what = f"{cur}, whole clip" if cur else ""
            for name, out_dir, _s in clips:
                _f, ev = self._clip_tables(name, out_dir)
                if ev is not None and len(ev):
                    durations.append(ev.loc[ev["type"] == "fixation", "duration_ms"].to_numpy(dtype=float))
        d = np.concatenate(durations) if durations else np.empty(0)
        d = d[np.isfinite(d)]
        self.n_histogram_fixations = int(len(d))
        self.histogram_what = what
        self.canvas.plot(draw_histogram, d, what)

    def export(self, path) -> Path:
        """Write the shown table; ``.parquet`` writes Parquet, anything else CSV."""
        from aspectus.atomic import write_csv, write_parquet

        path = Path(path)
        df = self.current_table()
        if path.suffix.lower() == ".parquet":
            write_parquet(path, df, metadata={"rows": self.rows_box.currentData(),
                                              "clips": self.clips_box.currentData()})
        else:
            if path.suffix.lower() != ".csv":
                path = path.with_suffix(path.suffix + ".csv") if path.suffix else path.with_suffix(".csv")
            write_csv(path, df)
        self.export_done.emit(str(path))
        return path

    def _export_dialog(self):
        from PySide6.QtWidgets import QFileDialog, QMessageBox

        rows = self.rows_box.currentData()
        suggestion = f"features_{rows}.csv" if rows != "quality" else "quality_per_clip.csv"
        start = str(Path(getattr(self.provider, "export_dir", lambda: Path.cwd())()) / suggestion)
        path, flt = QFileDialog.getSaveFileName(self, "Export table", start,
                                                "CSV table (*.csv);;Parquet table (*.parquet)")
        if not path:
            return
        if "parquet" in flt and not path.lower().endswith(".parquet"):
            path += ".parquet"
        try:
            self.export(path)
        except Exception as exc:  # noqa: BLE001 - shown to the user
            QMessageBox.warning(self, "Export failed", f"The table could not be written: {exc}")
