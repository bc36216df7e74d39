"""Time view: gaze yaw and pitch over time, fixations as bands, blinks and data loss marked.

Click the trace to move the video there; drag to pan; the mouse wheel zooms
around the pointer; "Whole clip" shows everything again. The figure is drawn
off the GUI thread (:class:`ui.plot_canvas.PlotCanvas`); the position cursor
is painted on top, so following the video costs nothing.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from PySide6.QtCore import Signal
from PySide6.QtWidgets import QHBoxLayout, QLabel, QPushButton, QVBoxLayout, QWidget

from . import theme
from .plot_canvas import PlotCanvas


@dataclass
class TraceData:
    """Plain arrays for one clip's trace (handed to the drawing thread)."""

    t_s: np.ndarray
    yaw_deg: np.ndarray
    pitch_deg: np.ndarray
    fixations: list = field(default_factory=list)  # (onset_s, offset_s, yaw_deg, pitch_deg)
    blinks: list = field(default_factory=list)  # (onset_s, offset_s)
    loss: list = field(default_factory=list)
    segments: list = field(default_factory=list)  # (label, onset_s, offset_s)

    @classmethod
    def from_frames(cls, samples: pd.DataFrame, events: pd.DataFrame | None,
                    segments: pd.DataFrame | None) -> TraceData:
        t = samples["t_s"].to_numpy(dtype=float).copy()
        valid = samples["valid"].to_numpy(dtype=bool)
        yaw = samples["yaw_deg"].to_numpy(dtype=float).copy()
        pitch = samples["pitch_deg"].to_numpy(dtype=float).copy()
        yaw[~valid] = np.nan
        pitch[~valid] = np.nan
        d = cls(t, yaw, pitch)
        if events is not None and len(events):
            for row in events.itertuples(index=False):
                on, off = float(row.onset_s), float(row.offset_s)
                if row.type == "fixation":
                    d.fixations.append((on, off, float(getattr(row, "yaw_deg", np.nan)),
                                        float(getattr(row, "pitch_deg", np.nan))))
                elif row.type == "blink":
                    d.blinks.append((on, off))
                elif row.type == "loss":
                    d.loss.append((on, off))
        if segments is not None and len(segments):
            d.segments = [(str(r.label), float(r.onset_s), float(r.offset_s)) for r in segments.itertuples(index=False)]
        return d


#: what the trace says when there are no samples and nothing else is known
NO_SAMPLES_TEXT = "No gaze samples yet: process the clip to see its gaze trace."


def draw_trace(fig, data: TraceData | None, xlim: tuple[float, float], empty_text: str = NO_SAMPLES_TEXT):
    """Fill ``fig`` with the yaw and pitch panels (runs in the drawing thread)."""
    from matplotlib.collections import PolyCollection
    from matplotlib.patches import Patch

    fig.subplots_adjust(left=0.11, right=0.99, top=0.9, bottom=0.17, hspace=0.1)
    ax_y = fig.add_subplot(2, 1, 1)
    ax_p = fig.add_subplot(2, 1, 2, sharex=ax_y)
    # the sign convention on the axis itself (aspectus.schema: yaw > 0 is the student's right, pitch > 0 is up)
    for ax, name in ((ax_y, "yaw (°)\n+ right"), (ax_p, "pitch (°)\n+ up")):
        ax.set_ylabel(name, fontsize=8)
        ax.tick_params(labelsize=7)
        ax.grid(True, color="#e6e6e6", lw=0.6)
        ax.set_axisbelow(True)
    ax_y.tick_params(labelbottom=False)
    ax_p.set_xlabel("time (s)", fontsize=8)
    if data is None or not len(data.t_s):
        ax_y.text(0.5, 0.5, empty_text, ha="center",
                  va="center", transform=ax_y.transAxes, color="#555", fontsize=9)
        ax_y.set_xlim(0, 1)
        return None

    def bands(ax, spans, colour, hatch=None):
        if not spans:
            return
        verts = [[(a, 0), (a, 1), (b, 1), (b, 0)] for a, b in spans]
        pc = PolyCollection(verts, facecolors=colour, edgecolors="none", transform=ax.get_xaxis_transform(),
                            zorder=0)
        if hatch:
            pc.set_hatch(hatch)
            pc.set_edgecolor("#9e9e9e")
            pc.set_linewidth(0)
        ax.add_collection(pc)

    fix_spans = [(a, b) for a, b, _y, _p in data.fixations]
    for ax, y, colour, k in ((ax_y, data.yaw_deg, theme.YAW_COLOUR, 2), (ax_p, data.pitch_deg, theme.PITCH_COLOUR, 3)):
        bands(ax, fix_spans, theme.FIXATION_BAND)
        bands(ax, data.blinks, theme.BLINK_BAND)
        bands(ax, data.loss, theme.LOSS_BAND, hatch="///")
        ax.plot(data.t_s, y, color=colour, lw=1.0)
        if data.fixations:
            f = np.array(data.fixations, dtype=float)
            ax.hlines(f[:, k], f[:, 0], f[:, 1], colors="#0d2b45", lw=1.6, alpha=0.8)
        for label, on, _off in data.segments:
            ax.axvline(on, color=theme.SEGMENT_EDGE, lw=0.8, ls="--")
            if ax is ax_y:
                ax.text(on, 0.97, f" {label}", transform=ax.get_xaxis_transform(), va="top", ha="left",
                        fontsize=7, color=theme.SEGMENT_EDGE, clip_on=True)
        finite = y[np.isfinite(y)]
        if len(finite):
            lo, hi = np.percentile(finite, [0.5, 99.5])
            pad = max(1.0, 0.1 * (hi - lo))
            ax.set_ylim(lo - pad, hi + pad)
    handles = [Patch(facecolor=theme.FIXATION_BAND, label="fixation"),
               Patch(facecolor=theme.BLINK_BAND, label="blink"),
               Patch(facecolor=theme.LOSS_BAND, hatch="///", edgecolor="#9e9e9e", label="data loss")]
    ax_y.legend(handles=handles, loc="lower right", bbox_to_anchor=(1.0, 1.0), fontsize=7, ncol=3, frameon=False,
                borderaxespad=0.1)
    ax_y.set_xlim(*xlim)
    return len(data.fixations)


class TimeView(QWidget):
    """Yaw and pitch traces with event bands.

    Signals
    -------
    seek_requested(t_s) : the user clicked the trace at time ``t_s`` (s).
    rendered() : a new picture of the trace is shown.
    """

    seek_requested = Signal(float)
    rendered = Signal()

    def __init__(self, parent=None):
        super().__init__(parent)
        self.canvas = PlotCanvas(min_height=160)
        self.canvas.rendered.connect(self.rendered.emit)
        self.canvas.pressed.connect(self._on_press)
        self.canvas.moved.connect(self._on_motion)
        self.canvas.released.connect(self._on_release)
        self.canvas.wheel.connect(self._on_wheel)
        self._data: TraceData | None = None
        self._t_max = 1.0
        self._xlim = (0.0, 1.0)
        self._press = None
        self._cursor_t = 0.0
        self.n_fixation_bands = 0

        self.zoom_in_btn = QPushButton("Zoom in")
        self.zoom_out_btn = QPushButton("Zoom out")
        self.fit_btn = QPushButton("Whole clip")
        self.follow = QPushButton("Follow video")
        self.follow.setCheckable(True)
        self.follow.setChecked(True)
        self.follow.setToolTip("Keep the video position in view while playing")
        self.zoom_in_btn.setToolTip("Show less time (mouse wheel up)")
        self.zoom_out_btn.setToolTip("Show more time (mouse wheel down)")
        self.fit_btn.setToolTip("Show the whole clip")
        self.zoom_in_btn.clicked.connect(lambda: self.zoom(0.5))
        self.zoom_out_btn.clicked.connect(lambda: self.zoom(2.0))
        self.fit_btn.clicked.connect(self.show_all)
        self.info = QLabel("Gaze over time")
        self.info.setToolTip("Click the trace to move the video there; drag to pan; mouse wheel to zoom.")
        self.info.setStyleSheet("color: #555;")
        bar = QHBoxLayout()
        bar.addWidget(self.info, 1)
        for b in (self.zoom_in_btn, self.zoom_out_btn, self.fit_btn, self.follow):
            bar.addWidget(b)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(4, 0, 4, 4)
        lay.addLayout(bar)
        lay.addWidget(self.canvas, 1)
        self.set_data(None)

    # ----------------------------------------------------------------- API
    def set_data(self, samples: pd.DataFrame | None, *, events: pd.DataFrame | None = None,
                 segments: pd.DataFrame | None = None, keep_view: bool = False,
                 empty_text: str = NO_SAMPLES_TEXT) -> None:
        """Show a clip's samples with its events (and task segments as labelled edges); ``empty_text`` is
        what the trace says when there are no samples."""
        self._empty_text = empty_text
        if samples is None or not len(samples):
            self._data = None
            self._t_max = 1.0
            self.n_fixation_bands = 0
            self._xlim = (0.0, 1.0)
        else:
            self._data = TraceData.from_frames(samples, events, segments)
            self._t_max = float(self._data.t_s[-1]) if len(self._data.t_s) else 1.0
            self.n_fixation_bands = len(self._data.fixations)
            if not keep_view or self._xlim == (0.0, 1.0) or self._xlim[1] > self._t_max + 1.0:
                self._xlim = (0.0, max(self._t_max, 1e-3))
        self._replot()

    @property
    def empty_text(self) -> str:
        """What the trace says while it has no samples to show."""
        return getattr(self, "_empty_text", NO_SAMPLES_TEXT)

    def set_cursor(self, t_s: float) -> None:
        """Move the position cursor (and the view, when following and the cursor leaves it)."""
        self._cursor_t = float(t_s)
        lo, hi = self._xlim
        if self._data is not None and self.follow.isChecked() and not (lo <= t_s <= hi):
            w = hi - lo
            new_lo = min(max(0.0, t_s - 0.1 * w), max(0.0, self._t_max - w))
            self._xlim = (new_lo, new_lo + w)
            self._replot()
        self.canvas.set_cursor(self._cursor_t if self._data is not None else None, axes=(0, 1))

    def zoom(self, factor: float, centre: float | None = None) -> None:
        lo, hi = self._xlim
        c = self._cursor_t if centre is None else centre
        if not (lo <= c <= hi):
            c = 0.5 * (lo + hi)
        w = float(np.clip((hi - lo) * factor, 0.2, max(self._t_max, 0.2)))
        new_lo = float(np.clip(c - (c - lo) / max(hi - lo, 1e-9) * w, 0.0, max(0.0, self._t_max - w)))
        self._xlim = (new_lo, new_lo + w)
        self._replot()

    def show_all(self) -> None:
        self._xlim = (0.0, max(self._t_max, 1e-3))
        self._replot()

    def visible_range(self) -> tuple[float, float]:
        return self._xlim

    def is_current(self) -> bool:
        return self.canvas.is_current()

    def shutdown(self) -> None:
        self.canvas.shutdown()

    # ------------------------------------------------------------ internals
    def _replot(self):
        self.canvas.plot(draw_trace, self._data, tuple(self._xlim), self.empty_text)

    def _on_press(self, x, y, button):
        if button == 1 and self.canvas.axes_at(x, y) is not None:
            self._press = (x, y, self._xlim)

    def _on_motion(self, x, y):
        if self._press is None:
            return
        x0, _y0, (lo, hi) = self._press
        if abs(x - x0) < 4 or not self.canvas.boxes:
            return
        width = self.canvas.boxes[0].width
        dt = (x - x0) / max(width, 1) * (hi - lo)
        new_lo = float(np.clip(lo - dt, 0.0, max(0.0, self._t_max - (hi - lo))))
        self._xlim = (new_lo, new_lo + (hi - lo))
        self._replot()

    def _on_release(self, x, y):
        if self._press is None:
            return
        x0, y0, xlim = self._press
        self._press = None
        if abs(x - x0) < 4:
            self.click(x0, y0)

    def click(self, x_px: float, y_px: float) -> float | None:
        """Handle a click at widget pixel (x, y): seek there; returns the time (s) or None."""
        i = self.canvas.axes_at(x_px, y_px)
        if i is None or self._data is None:
            return None
        t, _ = self.canvas.boxes[i].to_data(x_px, y_px)
        t = float(np.clip(t, 0.0, self._t_max))
        self.seek_requested.emit(t)
        return t

    def _on_wheel(self, x, y, steps):
        i = self.canvas.axes_at(x, y)
        if i is None:
            return
        t, _ = self.canvas.boxes[i].to_data(x, y)
        self.zoom(0.8 ** steps, centre=t)
