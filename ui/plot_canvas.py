"""A plot widget whose matplotlib drawing happens off the GUI thread.

Drawing even a simple two-panel matplotlib figure costs 80-150 ms of CPU,
more than the app may spend on the GUI thread at once. :class:`PlotCanvas`
therefore builds and renders each figure in a worker thread (a fresh Agg
figure per request; the newest request wins) and only paints the finished
picture. It remembers where each axes landed so that clicks can be turned
into data coordinates, and it draws vertical cursor lines itself with
QPainter, so following the video costs nothing.
"""
from __future__ import annotations

import threading
from dataclasses import dataclass

import numpy as np
from PySide6.QtCore import QObject, QPointF, Qt, QTimer, Signal
from PySide6.QtGui import QColor, QImage, QPainter, QPen
from PySide6.QtWidgets import QSizePolicy, QWidget


@dataclass(frozen=True)
class AxesBox:
    """Where an axes is in the rendered picture (px, origin top left) and its data limits."""

    x0: float
    y0: float
    width: float
    height: float
    xlim: tuple[float, float]
    ylim: tuple[float, float]

    def contains(self, x: float, y: float) -> bool:
        return self.x0 <= x <= self.x0 + self.width and self.y0 <= y <= self.y0 + self.height

    def to_data(self, x: float, y: float) -> tuple[float, float]:
        fx = (x - self.x0) / max(self.width, 1e-9)
        fy = 1.0 - (y - self.y0) / max(self.height, 1e-9)
        return (self.xlim[0] + fx * (self.xlim[1] - self.xlim[0]),
                self.ylim[0] + fy * (self.ylim[1] - self.ylim[0]))

    def x_to_px(self, xd: float) -> float:
        span = self.xlim[1] - self.xlim[0]
        return self.x0 + (xd - self.xlim[0]) / (span if span else 1.0) * self.width


class _Renderer(QObject):
    done = Signal(object)  # (request id, QImage, [AxesBox], extra)

    def __init__(self):
        super().__init__()
        self._cv = threading.Condition()
        self._job = None
        self._stop = False
        self._thread = threading.Thread(target=self._run, name="aspectus-plot", daemon=True)
        self._thread.start()

    def submit(self, job) -> None:
        with self._cv:
            self._job = job
            self._cv.notify()

    def close(self) -> None:
        with self._cv:
            self._stop = True
            self._cv.notify()
        self._thread.join(timeout=5)

    def _run(self):
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure

        while True:
            with self._cv:
                while self._job is None and not self._stop:
                    self._cv.wait()
                if self._stop:
                    return
                job, self._job = self._job, None
            rid, fn, args, w_px, h_px, dpr = job
            try:
                dpi = 96.0 * dpr
                fig = Figure(figsize=(w_px / 96.0, h_px / 96.0), dpi=dpi)
                canvas = FigureCanvasAgg(fig)
                extra = fn(fig, *args)
                canvas.draw()
                buf = np.asarray(canvas.buffer_rgba())
                H, W = buf.shape[:2]
                img = QImage(buf.data, W, H, 4 * W, QImage.Format_RGBA8888).copy()
                img.setDevicePixelRatio(dpr)
                boxes = []
                for ax in fig.axes:
                    x0, y0, bw, bh = ax.bbox.bounds  # display px, origin bottom left
                    boxes.append(AxesBox(x0 / dpr, (H - y0 - bh) / dpr, bw / dpr, bh / dpr,
                                         tuple(map(float, ax.get_xlim())), tuple(map(float, ax.get_ylim()))))
                self.done.emit((rid, img, boxes, extra))
            except Exception as exc:  # noqa: BLE001 - a plot that fails shows its message instead
                self.done.emit((rid, None, [], f"The plot could not be drawn ({type(exc).__name__}: {exc})"))


class PlotCanvas(QWidget):
    """Shows figures drawn by a worker thread.

    Call :meth:`plot` with a function ``fn(fig, *args)`` that fills a fresh
    :class:`matplotlib.figure.Figure` (it runs in the worker thread, so it
    must only use its arguments). Its return value is kept as :attr:`extra`.

    Signals
    -------
    rendered() : a new picture is shown.
    pressed(x_px, y_px, button) / moved(x_px, y_px) / released(x_px, y_px) / wheel(x_px, y_px, steps)
    """

    rendered = Signal()
    pressed = Signal(float, float, int)
    moved = Signal(float, float)
    released = Signal(float, float)
    wheel = Signal(float, float, float)

    def __init__(self, parent=None, *, min_height: int = 120):
        super().__init__(parent)
        self.setSizePolicy(QSizePolicy.Expanding, QSizePolicy.Expanding)
        self.setMinimumHeight(min_height)
        self.setMouseTracking(False)
        self._renderer = _Renderer()
        self._renderer.done.connect(self._on_done)
        self._img: QImage | None = None
        self.boxes: list[AxesBox] = []
        self.extra = None
        self.message = ""
        self._rid = 0
        self._shown_rid = 0
        self._last = None
        self.cursors: dict[int, float] = {}  # axes index -> x in data units
        self.cursor_colour = QColor("#c2185b")
        self._resize_timer = QTimer(self)
        self._resize_timer.setSingleShot(True)
        self._resize_timer.setInterval(120)
        self._resize_timer.timeout.connect(self._replot)

    def plot(self, fn, *args) -> int:
        """Request a new picture; returns its request number."""
        self._last = (fn, args)
        self._rid += 1
        w, h = max(self.width(), 200), max(self.height(), 120)
        dpr = float(self.devicePixelRatioF() or 1.0)
        self._renderer.submit((self._rid, fn, args, w, h, dpr))
        return self._rid

    def is_current(self) -> bool:
        """True when the picture shown is the one last requested."""
        return self._shown_rid == self._rid

    def image(self) -> QImage | None:
        return self._img

    def axes_at(self, x: float, y: float) -> int | None:
        for i, b in enumerate(self.boxes):
            if b.contains(x, y):
                return i
        return None

    def set_cursor(self, x_data: float | None, axes: tuple[int, ...] = (0,)) -> None:
        if x_data is None:
            self.cursors = {}
        else:
            self.cursors = {i: float(x_data) for i in axes}
        self.update()

    def shutdown(self) -> None:
        self._renderer.close()

    # ------------------------------------------------------------ Qt parts
    def _on_done(self, payload):
        rid, img, boxes, extra = payload
        if rid < self._shown_rid:
            return
        self._shown_rid = rid
        if img is None:
            self.message = str(extra)
            self._img = None
            self.boxes = []
        else:
            self.message = ""
            self._img, self.boxes, self.extra = img, boxes, extra
        self.update()
        self.rendered.emit()

    def _replot(self):
        if self._last is not None:
            self.plot(self._last[0], *self._last[1])

    def resizeEvent(self, ev):  # noqa: N802 - Qt override
        super().resizeEvent(ev)
        if self._last is not None:
            self._resize_timer.start()

    def paintEvent(self, ev):  # noqa: N802 - Qt override
        p = QPainter(self)
        p.fillRect(self.rect(), QColor("white"))
        if self._img is not None:
            p.drawImage(QPointF(0, 0), self._img)
            pen = QPen(self.cursor_colour)
            pen.setWidthF(1.5)
            p.setPen(pen)
            for i, x in self.cursors.items():
                if i < len(self.boxes):
                    b = self.boxes[i]
                    px = b.x_to_px(x)
                    if b.x0 <= px <= b.x0 + b.width:
                        p.drawLine(QPointF(px, b.y0), QPointF(px, b.y0 + b.height))
        elif self.message:
            p.setPen(QColor("#c62828"))
            p.drawText(self.rect(), Qt.AlignCenter | Qt.TextWordWrap, self.message)
        p.end()

    def mousePressEvent(self, ev):  # noqa: N802 - Qt override
        pos = ev.position()
        self.pressed.emit(pos.x(), pos.y(), int(ev.button().value))

    def mouseMoveEvent(self, ev):  # noqa: N802 - Qt override
        pos = ev.position()
        self.moved.emit(pos.x(), pos.y())

    def mouseReleaseEvent(self, ev):  # noqa: N802 - Qt override
        pos = ev.position()
        self.released.emit(pos.x(), pos.y())

    def wheelEvent(self, ev):  # noqa: N802 - Qt override
        pos = ev.position()
        self.wheel.emit(pos.x(), pos.y(), ev.angleDelta().y() / 120.0)
