"""Face and iris landmarks: MediaPipe face mesh (478 points) on the CPU.

MediaPipe 0.10.21 is pinned because it is the last release whose wheel ships
the face-mesh and iris model files; nothing is downloaded at run time. The
face mesh runs in tracking (video) mode with iris refinement.

Landmark indices used by camgaze (subject's own left/right):

* iris centre: right eye 468, left eye 473; iris outline right 469-472,
  left 474-477 (469/474 and 471/476 are the horizontal ends);
* eye corners: right eye outer 33, inner 133; left eye outer 263, inner 362;
* eyelid points for the eye aspect ratio (Soukupova & Cech 2016):
  right p1..p6 = 33, 160, 158, 133, 153, 144; left 362, 385, 387, 263, 373, 380.

Several faces: every frame the mesh is asked for up to ``max_faces`` faces and
one consistent face is followed - on the first frame the largest (or the
N-th from the picture's left edge when the user picks one), then the face
nearest to where the followed face was. It is re-acquired the same way after
it has been lost.
"""
from __future__ import annotations

import threading
from dataclasses import dataclass

import numpy as np

from ._env import native_stderr_silenced, quiet_native_logs
from .errors import ParameterError

N_LANDMARKS = 478
RIGHT_IRIS_CENTRE, LEFT_IRIS_CENTRE = 468, 473
RIGHT_IRIS_RING = (469, 470, 471, 472)
LEFT_IRIS_RING = (474, 475, 476, 477)
RIGHT_EYE_CORNERS = (33, 133)
LEFT_EYE_CORNERS = (263, 362)
RIGHT_EAR_POINTS = (33, 160, 158, 133, 153, 144)
LEFT_EAR_POINTS = (362, 385, 387, 263, 373, 380)
#: eye-opening outlines (upper and lower lid), for drawing and for the iris refinement mask
RIGHT_EYE_OUTLINE = (33, 246, 161, 160, 159, 158, 157, 173, 133, 155, 154, 153, 145, 144, 163, 7)
LEFT_EYE_OUTLINE = (362, 398, 384, 385, 386, 387, 388, 466, 263, 249, 390, 373, 374, 380, 381, 382)
FACE_OVAL = (10, 338, 297, 332, 284, 251, 389, 356, 454, 323, 361, 288, 397, 365, 379, 378, 400, 377, 152,
             148, 176, 149, 150, 136, 172, 58, 132, 93, 234, 127, 162, 21, 54, 103, 67, 109)


@dataclass
class FaceObservation:
    """The followed face in one frame.

    Attributes
    ----------
    points_px : ndarray, shape (478, 3)
        x, y in pixels of the (upright) picture; z in the same pixel scale,
        relative depth as the face mesh reports it (smaller = nearer).
    face_count : int
        Faces the mesh found in the frame.
    """

    points_px: np.ndarray
    face_count: int

    @property
    def bbox_px(self) -> tuple[float, float, float, float]:
        p = self.points_px
        return float(p[:, 0].min()), float(p[:, 1].min()), float(p[:, 0].max()), float(p[:, 1].max())


def parse_face_choice(face: str) -> tuple[str, int]:
    """``"largest"`` or ``"index:N"`` (N-th face from the picture's left, 0-based)."""
    face = (face or "largest").strip().lower()
    if face == "largest":
        return "largest", 0
    if face.startswith("index:"):
        try:
            n = int(face.split(":", 1)[1])
        except ValueError:
            n = -1
        if n >= 0:
            return "index", n
    raise ParameterError(f"face choice {face!r} not understood", hint='use "largest" or "index:N" (N from 0, left to right)')


_MP_LOCK = threading.Lock()


class FaceTracker:
    """Follows one face through a clip with the MediaPipe face mesh.

    Parameters
    ----------
    max_faces : int
        Faces the mesh looks for per frame (>= 1). With 1 the mesh itself
        decides which face it follows; camgaze's default of 2 lets it choose
        the largest when a second person is in the picture.
    face : str
        ``"largest"`` or ``"index:N"``.
    min_detection_confidence, min_tracking_confidence : float
        Passed to the face mesh (0-1).
    """

    def __init__(self, *, max_faces: int = 2, face: str = "largest",
                 min_detection_confidence: float = 0.5, min_tracking_confidence: float = 0.5):
        if not (1 <= int(max_faces) <= 10):
            raise ParameterError(f"max_faces must be 1-10, got {max_faces}")
        self.mode, self.index = parse_face_choice(face)
        self.max_faces = int(max_faces)
        quiet_native_logs()
        with _MP_LOCK, native_stderr_silenced():
            from mediapipe.python.solutions import face_mesh  # noqa: PLC0415 - heavy import

            self._mesh = face_mesh.FaceMesh(
                static_image_mode=False,
                max_num_faces=self.max_faces,
                refine_landmarks=True,
                min_detection_confidence=min_detection_confidence,
                min_tracking_confidence=min_tracking_confidence,
            )
        self._quiet_frames = 8
        self._last_centre: np.ndarray | None = None
        self._last_size: float | None = None

    def close(self):
        if self._mesh is not None:
            self._mesh.close()
            self._mesh = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def process(self, image_rgb: np.ndarray) -> FaceObservation | None:
        """Landmarks of the followed face in one upright RGB frame, or None."""
        h, w = image_rgb.shape[:2]
        if self._quiet_frames > 0:  # the graph's models print start-up lines on their first frames
            self._quiet_frames -= 1
            with native_stderr_silenced():
                res = self._mesh.process(image_rgb)
        else:
            res = self._mesh.process(image_rgb)
        faces = res.multi_face_landmarks
        if not faces:
            return None
        scale = np.array([w, h, w], dtype=np.float64)
        arrays = [np.array([(p.x, p.y, p.z) for p in f.landmark], dtype=np.float64) * scale for f in faces]
        k = self._choose(arrays)
        return FaceObservation(points_px=arrays[k], face_count=len(arrays))

    def _choose(self, arrays: list[np.ndarray]) -> int:
        centres = np.array([a[:, :2].mean(axis=0) for a in arrays])
        sizes = np.array([np.ptp(a[:, 0]) * np.ptp(a[:, 1]) for a in arrays]) ** 0.5
        if len(arrays) == 1:
            k = 0
        elif self._last_centre is not None:
            d = np.linalg.norm(centres - self._last_centre, axis=1)
            k = int(np.argmin(d))
            if d[k] > 1.5 * (self._last_size or sizes[k]):  # followed face gone: re-acquire
                k = self._initial(centres, sizes)
        else:
            k = self._initial(centres, sizes)
        self._last_centre, self._last_size = centres[k], float(sizes[k])
        return k

    def _initial(self, centres, sizes) -> int:
        if self.mode == "index":
            order = np.argsort(centres[:, 0])
            return int(order[min(self.index, len(order) - 1)])
        return int(np.argmax(sizes))


def mediapipe_version() -> str:
    try:
        from importlib.metadata import version

        return version("mediapipe")
    except Exception:  # noqa: BLE001
        return "unknown"
