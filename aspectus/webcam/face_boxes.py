"""Boxes around every face in a picture, with MediaPipe's face detector.

Used to blur faces wherever a picture is shown or written: the clip view's
overlay (:func:`aspectus.webcam.overlay.draw_overlay`) and the previews of
:mod:`aspectus.privacy.blur`. The detector is tuned to miss no face -
blurring a non-face costs little, showing a face costs much.
"""
from __future__ import annotations

import numpy as np


class FaceBoxFinder:
    """MediaPipe's face detector kept open, for many pictures in a row (a video player's frames).

    Calling it gives the boxes ``(x0, y0, x1, y1)`` in px of every face in an
    RGB picture (see :func:`find_face_boxes`). Not thread-safe: one instance
    per thread; :meth:`close` when done.
    """

    def __init__(self, *, min_confidence: float = 0.3, margin: float = 0.35):
        self.min_confidence = float(min_confidence)
        self.margin = float(margin)
        self._detectors = None

    def _open(self):
        from aspectus._env import import_mediapipe, native_stderr_silenced

        mp = import_mediapipe()  # heavy, only when a picture is shown or written
        dets = []
        for model in (0, 1):
            with native_stderr_silenced():
                det = mp.solutions.face_detection.FaceDetection(model_selection=model,
                                                                min_detection_confidence=self.min_confidence)
                det.process(np.zeros((64, 64, 3), dtype=np.uint8))  # its start-up lines come with a first picture
                dets.append(det)
        return dets

    def __call__(self, image: np.ndarray) -> list[tuple]:
        if self._detectors is None:
            self._detectors = self._open()
        img = np.ascontiguousarray(np.asarray(image)[..., :3], dtype=np.uint8)
        H, W = img.shape[:2]
        boxes = []
        for det in self._detectors:
            res = det.process(img)
            for d in res.detections or []:
                bb = d.location_data.relative_bounding_box
                x0, y0, w, h = bb.xmin * W, bb.ymin * H, bb.width * W, bb.height * H
                boxes.append(_grow((x0, y0, x0 + w, y0 + h), margin=self.margin, shape=(H, W)))
        return boxes

    def close(self) -> None:
        for det in self._detectors or []:
            det.close()
        self._detectors = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


def find_face_boxes(image: np.ndarray, *, min_confidence: float = 0.3, margin: float = 0.35) -> list[tuple]:
    """Boxes ``(x0, y0, x1, y1)`` in px of every face MediaPipe's face detector finds in an RGB picture.

    Parameters
    ----------
    image : ndarray
        ``(H, W, 3)`` uint8 RGB picture.
    min_confidence : float, default 0.3
        Detection score (0-1) above which a face counts; low on purpose -
        blurring a non-face costs little, missing a face costs much.
    margin : float, default 0.35
        Each box is grown by this fraction of its size on every side (hair,
        ears, chin).

    Notes
    -----
    Runs both of the detector's models (short range, within about 2 m, and
    full range, up to about 5 m) so that small faces of bystanders are found
    too. The model files ship inside the mediapipe wheel. For many pictures
    in a row keep a :class:`FaceBoxFinder` open instead.
    """
    with FaceBoxFinder(min_confidence=min_confidence, margin=margin) as finder:
        return finder(image)


def _grow(box, *, margin: float, shape) -> tuple[int, int, int, int]:
    H, W = shape[:2]
    x0, y0, x1, y1 = box
    mx, my = margin * (x1 - x0), margin * (y1 - y0)
    return (int(max(0, np.floor(x0 - mx))), int(max(0, np.floor(y0 - my))),
            int(min(W, np.ceil(x1 + mx))), int(min(H, np.ceil(y1 + my))))
