"""Drawing what the tracker saw on a video frame, and blurring faces.

Qt-free, OpenCV only: the desktop app's clip view and the screenshot script
both use it, and so can a report. Everything works on ``(H, W, 3)`` uint8 RGB
pictures and returns a new picture (the input is never changed).

Privacy: classroom clips show minors. :func:`draw_overlay` blurs every face
in the picture by default - the followed one and any bystander (found with the
face detector unless the caller passes the boxes it found); when it does not
know where any face is, it blurs the whole picture rather than risk showing
one. Only an explicit ``blur=False`` shows faces.

Landmark indices follow MediaPipe's 478-point face mesh with irises
(``refine_landmarks=True``): the loops below are the face oval, the eyelid
contours and the iris rings, listed in drawing order; ``tests/ui/test_gui_overlay.py``
checks them against MediaPipe's own connection sets.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from aspectus._env import import_cv2

from aspectus.face_mesh import (FACE_OVAL, LEFT_IRIS_CENTRE, LEFT_IRIS_RING, N_LANDMARKS,  # noqa: F401 (re-exported)
                                RIGHT_IRIS_CENTRE, RIGHT_IRIS_RING, eye_contour_lower_first)
from aspectus.geometry import focal_length_px, project_point, to_opencv_px  # noqa: F401 (re-exported)

#: lid contours of the subject's left and right eye, and the iris rings, in drawing order
LEFT_EYE = eye_contour_lower_first("left")
RIGHT_EYE = eye_contour_lower_first("right")
LEFT_IRIS = LEFT_IRIS_RING
RIGHT_IRIS = RIGHT_IRIS_RING

#: a face is about this wide and tall (mm) for the blur box when only the head position is known
FACE_WIDTH_MM = 160.0
FACE_HEIGHT_MM = 220.0


@dataclass(frozen=True)
class OverlayStyle:
    """Colours (RGB) and line widths (px) of the overlay.

    The defaults are chosen to stay visible on skin, hair and classroom walls,
    and to be told apart by readers with red-green colour vision deficiency
    (blue-orange contrast).
    """

    mesh_rgb: tuple[int, int, int] = (120, 200, 255)
    eye_rgb: tuple[int, int, int] = (255, 255, 255)
    iris_rgb: tuple[int, int, int] = (255, 170, 0)
    ray_rgb: tuple[int, int, int] = (255, 90, 30)
    invalid_rgb: tuple[int, int, int] = (160, 160, 160)
    line_px: int = 1
    ray_px: int = 2


def _as_points(landmarks_px) -> np.ndarray | None:
    if landmarks_px is None:
        return None
    pts = np.asarray(landmarks_px, dtype=float)
    if pts.ndim != 2 or pts.shape[0] < N_LANDMARKS or pts.shape[1] < 2:
        return None
    pts = pts[:, :2]
    if not np.isfinite(pts[list(FACE_OVAL)]).all():
        return None
    return pts


def face_box_from_landmarks(landmarks_px, *, shape: tuple[int, int], margin: float = 0.2):
    """Bounding box ``(x0, y0, x1, y1)`` in px of the face mesh, grown by ``margin`` (fraction of size).

    Returns None when the landmarks are missing or not finite.
    """
    pts = _as_points(landmarks_px)
    if pts is None:
        return None
    x0, y0 = pts.min(axis=0)
    x1, y1 = pts.max(axis=0)
    return _grow_clip((x0, y0, x1, y1), margin=margin, shape=shape)


def _grow_clip(box, *, margin: float, shape: tuple[int, int]):
    x0, y0, x1, y1 = box
    w, h = x1 - x0, y1 - y0
    x0, x1 = x0 - margin * w, x1 + margin * w
    y0, y1 = y0 - margin * h, y1 + margin * h
    H, W = shape[:2]
    x0, x1 = int(max(0, math.floor(x0))), int(min(W, math.ceil(x1)))
    y0, y1 = int(max(0, math.floor(y0))), int(min(H, math.ceil(y1)))
    if x1 <= x0 or y1 <= y0:
        return None
    return x0, y0, x1, y1


def face_box_from_head(*, head_x_mm: float, head_y_mm: float, head_z_mm: float, shape: tuple[int, int],
                       fov_deg: float = 60.0, margin: float = 0.2):
    """Approximate face box in px from the head position (mm) and the camera's field of view (deg).

    Used to blur the face when no landmarks are cached for a frame.
    """
    c = project_point(x_mm=head_x_mm, y_mm=head_y_mm, z_mm=head_z_mm, shape=shape, fov_deg=fov_deg)
    if c is None:
        return None
    f = focal_length_px(width_px=shape[1], fov_deg=fov_deg)
    half_w = 0.5 * f * FACE_WIDTH_MM / head_z_mm
    half_h = 0.5 * f * FACE_HEIGHT_MM / head_z_mm
    u, v = c
    # the head origin is between the eyes, which sit above the middle of the face
    return _grow_clip((u - half_w, v - 0.4 * 2 * half_h, u + half_w, v + 0.6 * 2 * half_h), margin=margin,
                      shape=shape)


def blur_region(image: np.ndarray, box) -> np.ndarray:
    """Return a copy of ``image`` with ``box`` (x0, y0, x1, y1 px; None = whole picture) made unrecognisable.

    The region is reduced to a coarse mosaic (about 10 blocks across) and then
    smoothed, which removes identity while keeping the head's position visible.
    """
    cv2 = import_cv2()
    out = np.array(image, copy=True)
    H, W = out.shape[:2]
    x0, y0, x1, y1 = box if box is not None else (0, 0, W, H)
    roi = out[y0:y1, x0:x1]
    if roi.size == 0:
        return out
    h, w = roi.shape[:2]
    blocks = max(1, min(w, 10)), max(1, min(h, max(1, round(10 * h / max(w, 1)))))
    small = cv2.resize(roi, blocks, interpolation=cv2.INTER_AREA)
    small = cv2.GaussianBlur(small, (3, 3), 0)
    out[y0:y1, x0:x1] = cv2.resize(small, (w, h), interpolation=cv2.INTER_LINEAR)
    return out


def _poly(cv2, img, pts, idx, rgb, width):
    p = np.round(to_opencv_px(pts[list(idx)])).astype(np.int32).reshape(-1, 1, 2)  # cv2 draws at pixel centres
    cv2.polylines(img, [p], isClosed=True, color=tuple(int(c) for c in rgb), thickness=width, lineType=cv2.LINE_AA)


def gaze_ray_end(origin_px, *, yaw_deg: float, pitch_deg: float, length_px: float):
    """End point in px of a gaze ray drawn from ``origin_px``.

    In an unmirrored picture a gaze to the subject's right (yaw > 0) points to
    the picture's left, and up (pitch > 0) points to the top
    (:mod:`aspectus.schema`). The ray is the gaze direction projected onto the
    picture plane, scaled so a gaze straight at the camera has length 0.
    """
    y, p = math.radians(yaw_deg), math.radians(pitch_deg)
    dx = -math.sin(y) * math.cos(p)
    dy = -math.sin(p)
    return origin_px[0] + length_px * dx, origin_px[1] + length_px * dy


def draw_overlay(image: np.ndarray, *, landmarks_px=None, yaw_deg: float = float("nan"),
                 pitch_deg: float = float("nan"), head_mm: tuple[float, float, float] | None = None,
                 fov_deg: float = 60.0, blur: bool = True, show_mesh: bool = True,
                 style: OverlayStyle = OverlayStyle(), face_boxes=None) -> np.ndarray:
    """Draw the tracked face on a frame.

    Parameters
    ----------
    image : ndarray
        ``(H, W, 3)`` uint8 RGB frame.
    landmarks_px : array, optional
        ``(478, 2 or 3)`` face-mesh landmarks in picture px for this frame.
    yaw_deg, pitch_deg : float
        Gaze angles of the frame (deg, :mod:`aspectus.schema` frame); NaN =
        no valid gaze, no ray drawn.
    head_mm : (x_mm, y_mm, z_mm), optional
        Head position in the camera frame (mm): places the blur box and the
        ray's origin when no landmarks are given.
    fov_deg : float
        Assumed horizontal field of view of the webcam (deg).
    blur : bool
        Blur every face (default): the tracked one and every box in
        ``face_boxes``. With no face position known at all, the whole picture
        is blurred.
    show_mesh : bool
        Draw the face outline, eyelids and iris rings.
    style : OverlayStyle
        Colours and line widths.
    face_boxes : list of (x0, y0, x1, y1), optional
        Boxes (px) of every face the caller found in this picture (e.g. with
        :class:`aspectus.privacy.blur.FaceBoxFinder`; an empty list means it
        looked and found none). When None and ``blur`` is on, the face
        detector is run here, so bystanders are blurred too.

    Returns
    -------
    ndarray
        A new ``(H, W, 3)`` uint8 RGB picture.
    """
    cv2 = import_cv2()
    img = np.ascontiguousarray(image[..., :3], dtype=np.uint8)
    shape = img.shape[:2]
    pts = _as_points(landmarks_px)
    box = None
    if pts is not None:
        box = face_box_from_landmarks(pts, shape=shape)
    elif head_mm is not None:
        box = face_box_from_head(head_x_mm=head_mm[0], head_y_mm=head_mm[1], head_z_mm=head_mm[2], shape=shape,
                                 fov_deg=fov_deg)
    if blur:
        if face_boxes is None:
            from aspectus.webcam.face_boxes import find_face_boxes

            face_boxes = find_face_boxes(img)
        boxes = ([box] if box is not None else []) + [tuple(int(v) for v in b) for b in face_boxes]
        if not boxes:
            img = blur_region(img, None)
        else:
            for b in boxes:
                img = blur_region(img, b)
    else:
        img = img.copy()
    origin = None
    scale_px = None
    if pts is not None:
        if show_mesh:
            _poly(cv2, img, pts, FACE_OVAL, style.mesh_rgb, style.line_px)
            _poly(cv2, img, pts, LEFT_EYE, style.eye_rgb, style.line_px)
            _poly(cv2, img, pts, RIGHT_EYE, style.eye_rgb, style.line_px)
            _poly(cv2, img, pts, LEFT_IRIS, style.iris_rgb, style.line_px + 1)
            _poly(cv2, img, pts, RIGHT_IRIS, style.iris_rgb, style.line_px + 1)
        origin = (pts[LEFT_IRIS_CENTRE] + pts[RIGHT_IRIS_CENTRE]) / 2.0
        scale_px = float(np.linalg.norm(pts[LEFT_IRIS_CENTRE] - pts[RIGHT_IRIS_CENTRE]))
    elif head_mm is not None:
        c = project_point(x_mm=head_mm[0], y_mm=head_mm[1], z_mm=head_mm[2], shape=shape, fov_deg=fov_deg)
        if c is not None:
            origin = np.array(c)
            scale_px = focal_length_px(width_px=shape[1], fov_deg=fov_deg) * 63.0 / head_mm[2]
    if origin is not None and np.isfinite(yaw_deg) and np.isfinite(pitch_deg) and scale_px:
        length = 4.0 * scale_px
        end = gaze_ray_end(origin, yaw_deg=yaw_deg, pitch_deg=pitch_deg, length_px=length)
        o = tuple(int(round(v)) for v in to_opencv_px(origin))  # cv2 draws at pixel centres
        e = tuple(int(round(v)) for v in to_opencv_px(end))
        cv2.circle(img, o, max(2, style.ray_px + 1), style.ray_rgb, -1, lineType=cv2.LINE_AA)
        cv2.arrowedLine(img, o, e, style.ray_rgb, style.ray_px, line_type=cv2.LINE_AA, tipLength=0.2)
    return img


class FrameLandmarker:
    """Face mesh on single pictures, for frames whose landmarks are not cached.

    MediaPipe is imported when the first picture is processed. Not
    thread-safe: use one instance per thread.
    """

    def __init__(self, *, max_faces: int = 1):
        self._mesh = None
        self._max_faces = max_faces

    def __call__(self, image: np.ndarray):
        """``(478, 2)`` landmarks in px of the largest face, or None."""
        from aspectus._env import native_stderr_silenced

        if self._mesh is None:
            from aspectus._env import import_mediapipe, quiet_native_logs

            quiet_native_logs()
            with native_stderr_silenced():  # the graph's start-up lines are not for the user's terminal
                mp = import_mediapipe()  # heavy, only when needed
                self._mesh = mp.solutions.face_mesh.FaceMesh(static_image_mode=True, refine_landmarks=True,
                                                             max_num_faces=self._max_faces)
                self._mesh.process(np.zeros((64, 64, 3), dtype=np.uint8))  # as landmarks._warm_up
        H, W = image.shape[:2]
        if not getattr(self, "_face_seen", False):
            # the landmark model starts (and prints its lines) only with the first picture that holds a face
            with native_stderr_silenced():
                res = self._mesh.process(np.ascontiguousarray(image[..., :3]))
            self._face_seen = bool(res.multi_face_landmarks)
        else:
            res = self._mesh.process(np.ascontiguousarray(image[..., :3]))
        if not res.multi_face_landmarks:
            return None
        best, best_area = None, -1.0
        for face in res.multi_face_landmarks:
            pts = np.array([(lm.x * W, lm.y * H) for lm in face.landmark], dtype=float)
            area = float(np.ptp(pts[:, 0]) * np.ptp(pts[:, 1]))
            if area > best_area:
                best, best_area = pts, area
        return best

    def close(self):
        if self._mesh is not None:
            self._mesh.close()
            self._mesh = None
