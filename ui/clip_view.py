"""Clip view: the video with the tracked face drawn on it, transport controls,
and the clip's quality at a glance.

Frames are decoded in a background thread (:class:`FrameLoader`, PyAV, which
releases the interpreter lock while decoding), so seeking far in a long clip
never freezes the window. The overlay comes from :mod:`aspectus.webcam.overlay`; faces
- every face in the picture, bystanders too - are blurred unless "Show faces
unblurred" is ticked (never saved).
"""
from __future__ import annotations

import threading
from fractions import Fraction
from pathlib import Path

import numpy as np
import pandas as pd
from PySide6.QtCore import QEvent, QObject, QSize, Qt, QTimer, Signal
from PySide6.QtGui import QImage, QPixmap
from PySide6.QtWidgets import (QCheckBox, QFrame, QGridLayout, QHBoxLayout, QLabel, QProgressBar, QPushButton,
                               QScrollArea, QSizePolicy,
                               QSlider, QStyle, QToolButton, QVBoxLayout, QWidget)

from aspectus.webcam import overlay
from aspectus.webcam.video import upright_rgb

from .theme import fmt

#: a forward jump larger than this (s) seeks instead of decoding through
_SEEK_AHEAD_S = 1.5



#: what the noise figure of the quality panel is (the verdict's figure); the tiers' limits follow (:func:`_limits`)
NOISE_TIP = ("Noise from sample to sample, in degrees of visual angle (lower is steadier): how far the gaze estimate "
             "moves from one frame to the next while the eyes rest on one spot, as the root mean square of those "
             "steps inside fixations (RMS-S2S; Holmqvist, Nyström & Mulvey 2012). Read over 33 ms steps - at 30 fps "
             "each step from one frame to the next - so that it means the same at any frame rate: per frame the "
             "RMS-S2S reads lower at higher frame rates although the eyes are the same")


#: what the SD figure of the quality panel is (the tier's second figure)
SD_TIP = ("SD within fixations, in degrees of visual angle (lower is steadier): how widely the gaze samples of one "
          "fixation scatter about its centre, sqrt(SD yaw² + SD pitch²) pooled over the fixations (Holmqvist, "
          "Nyström & Mulvey 2012). For a plain, unsmoothed noise it is the sample-to-sample noise / √2; a gaze that "
          "wanders slowly reads higher, and smoothing lowers it far less than the sample-to-sample figure, so a "
          "smoothed gaze is not taken for a steady one")


def _limits() -> str:
    """The verdict's limits on the two figures, from the library (one rule in one place)."""
    from aspectus.webcam.pipeline import precision_limits_text

    return ". The verdict reads both figures and the iris size. " + precision_limits_text()


def shown_noise_deg(summary: dict):
    """The noise the quality panel shows: the verdict's figure (over 33 ms steps); runs from before it was recorded
    carry only the per-sample RMS-S2S, which is the same figure at 30 fps."""
    v = summary.get("noise_rms_s2s_33ms_deg")
    return summary.get("noise_rms_s2s_deg") if v is None else v


def noise_tooltip(summary: dict) -> str:
    """:data:`NOISE_TIP`, plus the per-sample RMS-S2S where it differs from the figure shown (above 30 fps)."""
    shown, per_sample = shown_noise_deg(summary), summary.get("noise_rms_s2s_deg")
    try:
        differs = abs(float(shown) - float(per_sample)) >= 0.005
    except (TypeError, ValueError):
        differs = False
    return (NOISE_TIP + (f". Per sample (run.json's noise_rms_s2s_deg): {float(per_sample):.2f}°" if differs else "")
            + _limits())


#: what the picture says without a clip: with clips in the study, and in a study without any
SELECT_CLIP_TEXT = "Select a clip in the list to see it here."
NO_CLIPS_TEXT = ("No clips yet: add recordings with Add clips… or Add folder…, or drop video files on this window.\n"
                 "Help → User guide walks through a pilot study.")


class FrameLoader(QObject):
    """Decodes the frame at a requested time in a worker thread; only the newest request counts.

    Signals
    -------
    frame_ready(t_s, image, landmarks, face_boxes) : frame time on the clip's clock (s from
        the first frame), RGB uint8 array, face-mesh landmarks (px) found
        on that frame when ``find_face`` is on (else None), and the boxes of
        every face the face detector found on it (for blurring bystanders too).
    failed(message)
    """

    frame_ready = Signal(float, object, object, object)
    opened = Signal(str, float)  # clip path, duration in s (0 if unknown)
    failed = Signal(str)

    def __init__(self, parent=None):
        super().__init__(parent)
        self._cv = threading.Condition()
        self._path: Path | None = None
        self._target: float | None = None
        self._stop = False
        self.find_face = False
        self._reopen = False
        self._thread = threading.Thread(target=self._run, name="aspectus-frames", daemon=True)
        self._thread.start()

    def open(self, path) -> None:
        with self._cv:
            self._path = Path(path) if path is not None else None
            self._target = None
            self._reopen = True
            self._cv.notify()

    def request(self, t_s: float) -> None:
        with self._cv:
            self._target = float(t_s)
            self._cv.notify()

    def close(self) -> None:
        with self._cv:
            self._stop = True
            self._cv.notify()
        self._thread.join(timeout=5)

    # -------------------------------------------------------------- thread
    def _run(self):
        import av

        container = stream = None
        first_t = 0.0
        tb = Fraction(1, 90000)
        last_t = None
        decoder = None
        path = None
        landmarker = None
        finder = None
        while True:
            with self._cv:
                while not self._stop and self._target is None and not self._reopen:
                    self._cv.wait()
                if self._stop:
                    break
                if self._reopen:
                    self._reopen = False
                    if container is not None:
                        container.close()
                    container = stream = decoder = None
                    path = self._path
                    last_t = None
                target = self._target
                self._target = None
                find_face = self.find_face
            if target is None or path is None:
                continue
            try:
                if container is None:
                    container = av.open(str(path))
                    stream = container.streams.video[0]
                    stream.thread_type = "AUTO"
                    tb = stream.time_base or Fraction(1, 90000)
                    first_t = float(stream.start_time * tb) if stream.start_time is not None else 0.0
                    decoder = None
                    last_t = None
                    if stream.duration is not None:
                        dur = float(stream.duration * tb)
                    elif container.duration is not None:
                        dur = container.duration / 1e6
                    else:
                        dur = 0.0
                    self.opened.emit(str(path), dur)
                if decoder is None or last_t is None or target < last_t - 1e-6 or target > last_t + _SEEK_AHEAD_S:
                    pts = int((first_t + max(0.0, target)) / float(tb))
                    container.seek(pts, stream=stream, backward=True, any_frame=False)
                    decoder = container.decode(stream)
                    last_t = None
                frame = None
                for fr in decoder:
                    if fr.pts is None:
                        continue
                    t = float(fr.pts * tb) - first_t
                    frame = (t, fr)
                    last_t = t
                    if t >= target - 1e-3:
                        break
                if frame is None:  # past the end: nothing newer to show
                    decoder = None
                    continue
                t, fr = frame
                img = upright_rgb(fr)  # the same rule as processing: quarter turns and mirroring matrices
                lms = None
                if find_face:
                    if landmarker is None:
                        landmarker = overlay.FrameLandmarker()
                    try:
                        lms = landmarker(img)
                    except Exception:  # noqa: BLE001 - the mesh is a nicety; the frame still shows
                        lms = None
                if finder is None:
                    from aspectus.webcam.face_boxes import FaceBoxFinder

                    finder = FaceBoxFinder()
                try:
                    boxes = finder(img)
                except Exception:  # noqa: BLE001 - without boxes the overlay looks for faces itself
                    boxes = None
                self.frame_ready.emit(t, img, lms, boxes)
            except Exception as exc:  # noqa: BLE001 - shown in the view, never a crash
                reason = (getattr(exc, "strerror", None) or next(iter(str(exc).strip().splitlines()), "")
                          or type(exc).__name__)  # the decoder's words without its error number and path
                self.failed.emit(f"The video of {Path(path).name} cannot be shown: {reason}.")
                if container is not None:
                    container.close()
                container = stream = decoder = None
        if container is not None:
            container.close()
        if landmarker is not None:
            landmarker.close()
        if finder is not None:
            finder.close()


class _TextPane(QScrollArea):
    """The texts under the video (quality figures, verdict, known-target check) at their full wrapped height where
    the pane has room, scrolled where it has not: wrapped labels have a height for a width, which a splitter does not
    ask for, so without it the texts were drawn over the video and its controls when the pane was short."""

    def __init__(self, inner: QWidget, parent=None):
        super().__init__(parent)
        self.setWidget(inner)
        self.setWidgetResizable(True)
        self.setFrameShape(QFrame.NoFrame)
        self.setHorizontalScrollBarPolicy(Qt.ScrollBarAlwaysOff)
        self.setSizePolicy(QSizePolicy.Preferred, QSizePolicy.Maximum)
        inner.installEventFilter(self)

    def content_height(self) -> int:
        inner = self.widget()
        width = self.viewport().width()
        return inner.heightForWidth(width) if inner.hasHeightForWidth() else inner.sizeHint().height()

    def sizeHint(self) -> QSize:  # noqa: N802 - Qt override
        return QSize(super().sizeHint().width(), self.content_height())

    def minimumSizeHint(self) -> QSize:  # noqa: N802 - Qt override
        # at least the quality figures' two rows; the rest scrolls
        return QSize(0, min(self.content_height(), 3 * self.fontMetrics().height()))

    def eventFilter(self, obj, ev):  # noqa: N802 - Qt override
        if obj is self.widget() and ev.type() == QEvent.LayoutRequest:
            self.updateGeometry()
        return super().eventFilter(obj, ev)

    def resizeEvent(self, ev):  # noqa: N802 - Qt override
        super().resizeEvent(ev)
        if ev.size().width() != ev.oldSize().width():
            self.updateGeometry()  # the wrapped texts' height follows the width


class ClipView(QWidget):
    """The video of one clip with overlay, slider, play/pause/step and quality figures.

    Signals
    -------
    position_changed(t_s) : the shown frame's time (s on the samples clock).
    frame_shown(t_s) : emitted after a frame is painted (for tests and screenshots).
    """

    position_changed = Signal(float)
    frame_shown = Signal(float)
    check_requested = Signal()  # "Check against target sequence…" pressed
    check_cancel_requested = Signal()

    def __init__(self, parent=None):
        super().__init__(parent)
        self._clip_path: Path | None = None
        self._samples: pd.DataFrame | None = None
        self._frame_times: np.ndarray = np.empty(0)
        self._duration_s = 0.0
        self._fov_deg = 60.0
        self._container_duration_s = 0.0
        self._t = 0.0
        self._img: np.ndarray | None = None
        self._lms = None
        self._boxes = None
        self._playing = False
        self._frame_dt = 1 / 30
        self._slider_scale = 1000  # slider steps per second
        self._check_available = False
        self._check_running = False
        self._failure: tuple[str, str, str] | None = None  # (headline, why, what to do) of a failed processing

        self.loader = FrameLoader(self)
        self.loader.frame_ready.connect(self._on_frame)
        self.loader.opened.connect(self._on_opened)
        self.loader.failed.connect(self._on_failed)

        self.picture = QLabel(NO_CLIPS_TEXT)  # the app starts with an empty study
        self.picture.setAlignment(Qt.AlignCenter)
        self.picture.setMinimumSize(320, 180)
        self.picture.setSizePolicy(QSizePolicy.Ignored, QSizePolicy.Ignored)
        self.picture.setWordWrap(True)  # a message in the video pane is read whole, never cut off
        self.picture.setMargin(16)
        self.picture.setStyleSheet("background: #202020; color: #e0e0e0;")

        st = self.style()
        self.play_btn = QToolButton()
        self.play_btn.setIcon(st.standardIcon(QStyle.SP_MediaPlay))
        self.play_btn.setToolTip("Play / pause (Space)")
        self.play_btn.clicked.connect(self.toggle_play)
        self.back_btn = QToolButton()
        self.back_btn.setIcon(st.standardIcon(QStyle.SP_MediaSeekBackward))
        self.back_btn.setToolTip("One frame back (Left arrow)")
        self.back_btn.clicked.connect(lambda: self.step(-1))
        self.fwd_btn = QToolButton()
        self.fwd_btn.setIcon(st.standardIcon(QStyle.SP_MediaSeekForward))
        self.fwd_btn.setToolTip("One frame forward (Right arrow)")
        self.fwd_btn.clicked.connect(lambda: self.step(1))
        self.slider = QSlider(Qt.Horizontal)
        self.slider.setToolTip("Position in the clip")
        self.slider.valueChanged.connect(self._on_slider)
        self.time_label = QLabel("0.00 / 0.00 s")
        self.time_label.setMinimumWidth(110)
        self.unblur = QCheckBox("Show faces unblurred")
        self.unblur.setToolTip("Faces are blurred by default to protect the people in the clip. "
                               "This choice is not saved.")
        self.unblur.toggled.connect(self._redraw)
        self.mesh = QCheckBox("Face outline")
        self.mesh.setChecked(True)
        self.mesh.setToolTip("Draw the tracked face outline, eyelids and irises")
        self.mesh.toggled.connect(self._on_mesh_toggled)

        controls = QHBoxLayout()
        for w in (self.back_btn, self.play_btn, self.fwd_btn):
            controls.addWidget(w)
        controls.addWidget(self.slider, 1)
        controls.addWidget(self.time_label)
        controls.addWidget(self.mesh)
        controls.addWidget(self.unblur)

        # quality at a glance
        self.q_face = QLabel()
        self.q_blinks = QLabel()
        self.q_noise = QLabel()
        self.q_sd = QLabel()
        self.q_dist = QLabel()
        self.q_valid = QLabel()
        self.verdict = QLabel()
        self.verdict.setWordWrap(True)
        self.iris_info = QLabel()  # how the iris height was measured (run.json: extraction.gaze_model.iris_estimate)
        self.iris_info.setObjectName("iris_info")
        self.iris_info.setWordWrap(True)
        self.iris_info.setStyleSheet("color: #555;")
        self.iris_info.hide()
        self.targets_info = QLabel()  # the known-target check's figures, when the clip has one
        self.targets_info.setWordWrap(True)
        self.targets_info.hide()
        # running the known-target check on this clip (the window runs it; see MainWindow.check_targets)
        self.check_btn = QPushButton("Check against target sequence…")
        self.check_btn.setToolTip("Measure this clip's gaze quality on the known-target sequence recorded in it: "
                                  "pick the schedule.json that was shown (made with the Target sequence button)")
        self.check_btn.setEnabled(False)
        self.check_btn.clicked.connect(self.check_requested)
        self.check_bar = QProgressBar()
        self.check_bar.setRange(0, 1000)
        self.check_bar.setTextVisible(True)
        self.check_bar.setFormat("%p%")
        self.check_bar.setMaximumWidth(220)
        self.check_bar.hide()
        self.check_cancel_btn = QPushButton("Cancel")
        self.check_cancel_btn.setToolTip("Stop the check; nothing of it is written")
        self.check_cancel_btn.clicked.connect(self.check_cancel_requested)
        self.check_cancel_btn.hide()
        self.check_status = QLabel()
        self.check_status.setWordWrap(True)
        self.check_status.setTextInteractionFlags(Qt.TextSelectableByMouse)
        check_row = QHBoxLayout()
        check_row.setContentsMargins(0, 0, 0, 0)
        check_row.addWidget(self.check_btn)
        check_row.addWidget(self.check_bar)
        check_row.addWidget(self.check_cancel_btn)
        check_row.addWidget(self.check_status, 1)
        # two rows: how much of the clip is there (face, usable gaze, blinks), then how steady the gaze is (the two
        # precision figures the verdict reads, named as the verdict names them) and how far away the face is
        grid = QGridLayout()
        grid.setContentsMargins(0, 0, 0, 0)
        grid.setHorizontalSpacing(6)
        cells = ((("Face found", self.q_face, "Share of frames in which a face was tracked"),
                  ("Valid gaze", self.q_valid, "Share of the recorded time with a usable gaze estimate"),
                  ("Blinks", self.q_blinks, "Number of blinks detected")),
                 (("Noise, sample to sample", self.q_noise, NOISE_TIP + _limits()),
                  ("SD within fixations", self.q_sd, SD_TIP + _limits()),
                  ("Distance", self.q_dist, "Median eye-to-camera distance, from the iris size")))
        self.quality_captions: dict[str, QLabel] = {}
        for row, items in enumerate(cells):
            for i, (name, lab, tip) in enumerate(items):
                cap = QLabel(name + ":")
                cap.setToolTip(tip)
                cap.setStyleSheet("color: #555;")
                self.quality_captions[name] = cap
                grid.addWidget(cap, row, 2 * i)
                grid.addWidget(lab, row, 2 * i + 1)
                lab.setMinimumWidth(lab.fontMetrics().horizontalAdvance("100 %"))
                if i < len(items) - 1:
                    grid.setColumnMinimumWidth(2 * i + 1, lab.fontMetrics().horizontalAdvance("0000 mm") + 12)
        grid.setColumnStretch(6, 1)

        texts = QWidget()
        tl = QVBoxLayout(texts)
        tl.setContentsMargins(0, 0, 0, 0)
        tl.addLayout(grid)
        tl.addWidget(self.verdict)
        tl.addWidget(self.iris_info)
        tl.addWidget(self.targets_info)
        tl.addLayout(check_row)
        self.text_pane = _TextPane(texts)

        lay = QVBoxLayout(self)
        lay.setContentsMargins(4, 4, 4, 4)
        lay.addWidget(self.picture, 1)
        lay.addLayout(controls)
        lay.addWidget(self.text_pane)

        self._timer = QTimer(self)
        self._timer.timeout.connect(self._tick)
        self.set_summary({})

    # ----------------------------------------------------------------- API
    def set_check_state(self, *, available: bool | None = None, running: bool | None = None,
                        fraction: float | None = None, message: str | None = None, error: bool = False) -> None:
        """The known-target check's controls: button enabled (``available``), progress bar and Cancel while
        ``running``, the bar at ``fraction``, a plain ``message`` (red when ``error``)."""
        if available is not None:
            self._check_available = bool(available)
        if running is not None:
            self._check_running = bool(running)
            self.check_bar.setVisible(running)
            self.check_cancel_btn.setVisible(running)
            self.check_cancel_btn.setEnabled(running)
            if running:
                self.check_bar.setValue(0)
        self.check_btn.setEnabled(self._check_available and not self._check_running)
        if fraction is not None:
            self.check_bar.setValue(int(1000 * min(1.0, max(0.0, fraction))))
        if message is not None:
            self.check_status.setText(message)
            self.check_status.setStyleSheet("color: #b00020;" if error else "color: #555;")

    def set_clip(self, clip_path, *, samples: pd.DataFrame | None = None, summary: dict | None = None,
                 fov_deg: float = 60.0, position_s: float = 0.0, failure: str | None = None,
                 empty_text: str = SELECT_CLIP_TEXT) -> None:
        """Show a clip; ``samples`` (the saved samples table) supplies frame times, gaze and head position;
        ``failure`` is the message of a processing that failed (shown in plain words: what, why, what to do);
        ``empty_text`` is what the picture says without a clip."""
        self.pause()
        self._clip_path = Path(clip_path) if clip_path is not None else None
        if failure:
            from ui.job_runner import failure_parts

            self._failure = failure_parts(failure, clip_name=self._clip_path.name if self._clip_path else None)
        else:
            self._failure = None
        self._fov_deg = float(fov_deg)
        self._container_duration_s = 0.0
        self._img = None
        self._pixmap = None  # the previous clip's picture is never fitted back in on a resize
        self._lms = None
        self._boxes = None
        self.set_samples(samples)
        self.set_summary(summary or {})
        if self._clip_path is None:
            self.loader.open(None)
            self._img = None
            self.picture.setPixmap(QPixmap())
            self.picture.setText(empty_text)
            return
        if self._failure is not None:  # shown until (unless) a frame of the video can be shown after all
            self.picture.setPixmap(QPixmap())
            self.picture.setText(self._failure_text())
        self.loader.find_face = self.mesh.isChecked() and not self._has_landmarks()
        self.loader.open(self._clip_path)
        self.seek(position_s)

    def _failure_text(self) -> str:
        head, why, todo = self._failure
        lines = [head] + ([why] if why != head else []) + [f"What to do: {todo}"]
        return "\n\n".join(lines)

    def set_samples(self, samples: pd.DataFrame | None) -> None:
        self._samples = samples if samples is not None and len(samples) else None
        if self._samples is not None:
            self._frame_times = self._samples["t_s"].to_numpy(dtype=float)
            d = np.diff(self._frame_times)
            self._frame_dt = float(np.median(d)) if len(d) else 1 / 30
            self._duration_s = float(self._frame_times[-1] + self._frame_dt)
        else:
            self._frame_times = np.empty(0)
            self._frame_dt = 1 / 30
            self._duration_s = self._container_duration_s
        self.slider.blockSignals(True)
        self.slider.setRange(0, max(1, int(self._duration_s * self._slider_scale)))
        self.slider.blockSignals(False)
        self._sync_slider()
        self._redraw()

    def set_summary(self, s: dict) -> None:
        self.q_face.setText(fmt(s.get("face_found_frac"), pct=True))
        self.q_blinks.setText("–" if s.get("blink_count") is None else str(int(s["blink_count"])))
        self.q_noise.setText(fmt(shown_noise_deg(s), "°", digits=2))
        self.q_noise.setToolTip(noise_tooltip(s))
        self.q_sd.setText(fmt(s.get("noise_sd_deg"), "°", digits=2))  # "–" for runs from before it was recorded
        self.q_sd.setToolTip(SD_TIP + _limits())
        self.q_dist.setText(fmt(s.get("median_distance_mm"), "mm", digits=0))
        self.q_valid.setText(fmt(s.get("valid_frac"), pct=True))
        verdict = s.get("verdict")
        usable = s.get("usable")
        if verdict is None and self._failure is not None:
            head, why, _ = self._failure
            self.verdict.setText(f"<b>No quality figures:</b> processing failed. {why if why != head else head}")
            self.verdict.setStyleSheet("color: #b00020;")
        elif verdict is None:
            self.verdict.setText("No quality figures yet: process the clip to see them.")
            self.verdict.setStyleSheet("color: #555;")
        else:
            from aspectus.webcam.pipeline import usable_word

            # green: usable for everything; amber: usable for the coarser features only, or not usable
            colour = "#2e7d32" if usable_word(s) == "yes" else "#b26a00"
            head, _, rest = str(verdict).partition(":")
            if head.strip().lower() in ("usable", "partly usable", "not usable"):
                self.verdict.setText(f"<b>{head.strip()}:</b>{rest}")
            else:
                self.verdict.setText(f"<b>{'Usable' if usable else 'Not usable'}.</b> {verdict}")
            self.verdict.setStyleSheet(f"color: {colour};")

    def set_iris_estimate(self, text: str | None) -> None:
        """Which iris estimate the clip's processing used, in plain words (None hides the line)."""
        self.iris_info.setText(text or "")
        self.iris_info.setToolTip("From the clip's run.json (extraction, gaze_model, iris_estimate). Change it with "
                                  "\"Iris height from\" under Gaze measurement, then process the clip again."
                                  if text else "")
        self.iris_info.setVisible(bool(text))

    def set_target_check(self, doc: dict | None) -> None:
        """Show the figures of the clip's known-target check (``target_check.json`` as read), or hide them."""
        if not doc:
            self.targets_info.clear()
            self.targets_info.hide()
            return
        from aspectus.targets.check import summary_lines

        lines = summary_lines(doc)
        self.targets_info.setText("<b>Known-target check:</b> " + "<br>".join(lines))
        self.targets_info.setToolTip("Gaze quality measured on the target sequence in this clip "
                                     "(aspectus targets check); target_check.json in the clip's result folder")
        self.targets_info.show()

    @property
    def position_s(self) -> float:
        return self._t

    @property
    def duration_s(self) -> float:
        return self._duration_s

    def seek(self, t_s: float) -> None:
        """Show the frame at ``t_s`` (s on the samples clock)."""
        t = max(0.0, float(t_s))
        if self._duration_s > 0:  # before the clip's length is known, keep the wish as it is
            t = min(t, max(0.0, self._duration_s - 1e-3))
        self._t = t
        self._sync_slider()
        if self._clip_path is not None:
            self.loader.request(t)

    def step(self, n: int) -> None:
        self.pause()
        if len(self._frame_times):
            i = int(np.searchsorted(self._frame_times, self._t + 1e-4))
            i = i - 1 if n < 0 else i
            i = int(np.clip(i + (n if n < 0 else n - 1), 0, len(self._frame_times) - 1))
            self.seek(self._frame_times[i])
        else:
            self.seek(self._t + n * self._frame_dt)

    def toggle_play(self) -> None:
        self.pause() if self._playing else self.play()

    def play(self) -> None:
        if self._clip_path is None:
            return
        if self._t >= self._duration_s - 2 * self._frame_dt:
            self._t = 0.0
        self._playing = True
        self.play_btn.setIcon(self.style().standardIcon(QStyle.SP_MediaPause))
        self.loader.find_face = False  # the mesh would slow playback; shown again when paused
        self._timer.start(max(15, int(round(1000 * self._frame_dt))))

    def pause(self) -> None:
        if not self._playing:
            return
        self._playing = False
        self._timer.stop()
        self.play_btn.setIcon(self.style().standardIcon(QStyle.SP_MediaPlay))
        self.loader.find_face = self.mesh.isChecked() and not self._has_landmarks()
        if self.loader.find_face:
            self.loader.request(self._t)

    def shown_image(self) -> np.ndarray | None:
        """The picture as currently displayed (overlay drawn, blurred unless unblurred is ticked)."""
        return self._compose()

    def shutdown(self) -> None:
        self.pause()
        self.loader.close()

    # ------------------------------------------------------------ internals
    def _has_landmarks(self) -> bool:
        return False  # the pipeline caches no per-frame mesh yet; found on the shown frame instead

    def _on_mesh_toggled(self, on: bool) -> None:
        self.loader.find_face = on and not self._playing and not self._has_landmarks()
        if on and self.loader.find_face:
            self.loader.request(self._t)
        self._redraw()

    def _tick(self) -> None:
        nxt = self._t + self._frame_dt
        if nxt >= self._duration_s - 1e-3:
            self.pause()
            return
        self._t = nxt
        self._sync_slider()
        self.loader.request(nxt)

    def _sync_slider(self) -> None:
        self.slider.blockSignals(True)
        self.slider.setValue(int(round(self._t * self._slider_scale)))
        self.slider.blockSignals(False)
        self.time_label.setText(f"{self._t:.2f} / {self._duration_s:.2f} s")

    def _on_slider(self, v: int) -> None:
        self.pause()
        self.seek(v / self._slider_scale)
        self.position_changed.emit(self._t)

    def _on_frame(self, t_s: float, img, lms, boxes=None) -> None:
        self._img = img
        self._lms = lms
        self._boxes = boxes
        self._shown_t = t_s
        self._redraw()
        self.position_changed.emit(t_s)
        self.frame_shown.emit(t_s)

    def _on_opened(self, path: str, duration_s: float) -> None:
        if self._clip_path is None or Path(path) != self._clip_path:
            return
        self._container_duration_s = float(duration_s)
        if self._samples is None:
            self.set_samples(None)

    def _on_failed(self, message: str) -> None:
        self.pause()
        self._img = None
        self.picture.setPixmap(QPixmap())
        self.picture.setText(self._failure_text() if self._failure is not None else message)

    def _sample_at(self, t_s: float):
        if self._samples is None or not len(self._frame_times):
            return None
        i = int(np.clip(np.searchsorted(self._frame_times, t_s - 1e-4), 0, len(self._frame_times) - 1))
        if abs(self._frame_times[i] - t_s) > 2 * self._frame_dt:
            return None
        return self._samples.iloc[i]

    def _compose(self) -> np.ndarray | None:
        if self._img is None:
            return None
        row = self._sample_at(getattr(self, "_shown_t", self._t))
        yaw = pitch = float("nan")
        head = None
        if row is not None:
            if bool(row.get("valid", False)):
                yaw, pitch = float(row["yaw_deg"]), float(row["pitch_deg"])
            hx, hy, hz = (float(row.get(k, np.nan)) for k in ("head_x_mm", "head_y_mm", "head_z_mm"))
            if np.isfinite([hx, hy, hz]).all():
                head = (hx, hy, hz)
        return overlay.draw_overlay(self._img, landmarks_px=self._lms, yaw_deg=yaw, pitch_deg=pitch, head_mm=head,
                                    fov_deg=self._fov_deg,
                                    blur=not self.unblur.isChecked(), show_mesh=self.mesh.isChecked(),
                                    face_boxes=getattr(self, "_boxes", None))

    def _redraw(self, *_):
        img = self._compose()
        if img is None:
            return
        h, w = img.shape[:2]
        qimg = QImage(img.data, w, h, 3 * w, QImage.Format_RGB888).copy()
        pm = QPixmap.fromImage(qimg)
        self._pixmap = pm
        self._fit()

    def _fit(self):
        pm = getattr(self, "_pixmap", None)
        if pm is None or pm.isNull():
            return
        self.picture.setPixmap(pm.scaled(self.picture.size(), Qt.KeepAspectRatio, Qt.SmoothTransformation))

    def resizeEvent(self, ev):  # noqa: N802 - Qt override
        super().resizeEvent(ev)
        self._fit()

    def keyPressEvent(self, ev):  # noqa: N802 - Qt override
        if ev.key() == Qt.Key_Space:
            self.toggle_play()
        elif ev.key() == Qt.Key_Left:
            self.step(-1)
        elif ev.key() == Qt.Key_Right:
            self.step(1)
        else:
            super().keyPressEvent(ev)
