"""Face photographs for rendered clips: the pictures, their landmarks and colours.

The renderer needs a real face so that the face mesh behaves as it does on a
real webcam picture. Two photographs ship with the project's dependencies:
``grace_hopper.jpg`` from matplotlib's sample data and the astronaut picture
from scikit-image's data. Each is landmarked once per process with the
MediaPipe face mesh (478 points including both irises) and cached in memory.
"""
from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np

from aspectus.errors import ParameterError
from aspectus.face_mesh import (EYES, LEFT_IRIS_CENTRE, LEFT_IRIS_RING, RIGHT_IRIS_CENTRE, RIGHT_IRIS_RING,
                                eye_contour_lower_first)

#: faces :func:`load_face` knows
FACES = ("hopper", "astronaut")

#: MediaPipe eye contours: outer corner, 7 lower-lid points, inner corner, 7 upper-lid points (inner to outer)
RIGHT_EYE_CONTOUR = eye_contour_lower_first("right")
LEFT_EYE_CONTOUR = eye_contour_lower_first("left")
#: iris centre and its four rim points (rim: temporal/up/nasal/down order as MediaPipe gives them)
RIGHT_IRIS = (RIGHT_IRIS_CENTRE, *RIGHT_IRIS_RING)
LEFT_IRIS = (LEFT_IRIS_CENTRE, *LEFT_IRIS_RING)
EYE_CONTOUR = {"right": RIGHT_EYE_CONTOUR, "left": LEFT_EYE_CONTOUR}
EYE_IRIS = {"right": RIGHT_IRIS, "left": LEFT_IRIS}

#: horizontal visible iris diameter of adults, mm (Ruefer, Schroeder & Erb 2005 - field notes, from memory)
IRIS_DIAMETER_MM = 11.7


@dataclass(frozen=True)
class EyeLook:
    """Colours of one eye in the photograph, RGB 0-255."""

    sclera_rgb: tuple[float, float, float]
    iris_rgb: tuple[float, float, float]
    skin_rgb: tuple[float, float, float]
    lash_rgb: tuple[float, float, float]


@dataclass(frozen=True)
class FacePhoto:
    """A landmarked face photograph.

    Attributes
    ----------
    name : str
        ``"hopper"`` or ``"astronaut"``.
    image : numpy.ndarray
        The photograph, RGB uint8, shape (height, width, 3).
    landmarks_px : numpy.ndarray
        (478, 3) face-mesh landmarks in photo pixels; ``x`` right and ``y``
        down from the top-left corner of the picture (pixel centres at
        ``i + 0.5``), ``z`` the mesh's relative depth in the same pixel units
        (smaller = nearer the camera).
    iris_diameter_px : float
        Mean horizontal iris diameter of both eyes, photo pixels.
    eyes : dict
        ``{"right": EyeLook, "left": EyeLook}`` (the subject's own eyes).
    """

    name: str
    image: np.ndarray
    landmarks_px: np.ndarray
    iris_diameter_px: float
    eyes: dict

    @property
    def mm_per_px(self) -> float:
        """Millimetres per photo pixel at the eyes, from the 11.7 mm iris."""
        return IRIS_DIAMETER_MM / self.iris_diameter_px


def _photo(name: str) -> np.ndarray:
    if name == "hopper":
        import matplotlib.image as mpimg
        from matplotlib import cbook

        img = mpimg.imread(cbook.get_sample_data("grace_hopper.jpg", asfileobj=False))
    elif name == "astronaut":
        import skimage.data

        img = skimage.data.astronaut()
    else:
        raise ParameterError(f"face must be one of {', '.join(FACES)}, got {name!r}")
    img = np.asarray(img)
    if img.dtype != np.uint8:
        img = np.clip(img * (255.0 if img.max() <= 1.0 else 1.0), 0, 255).astype(np.uint8)
    return np.ascontiguousarray(img[..., :3])


def landmark_image(image: np.ndarray, *, max_faces: int = 1) -> list[np.ndarray]:
    """Run the MediaPipe face mesh (static image mode, irises refined) on one RGB picture.

    Parameters
    ----------
    image : numpy.ndarray
        RGB uint8 picture, shape (height, width, 3).
    max_faces : int, default 1
        Most faces to return.

    Returns
    -------
    list of numpy.ndarray
        One (478, 3) array per face found, in pixels (``x = x_norm * width``,
        ``y = y_norm * height``, ``z = z_norm * width``).
    """
    from aspectus._env import import_mediapipe, native_stderr_silenced

    mp = import_mediapipe()

    h, w = image.shape[:2]
    with native_stderr_silenced(), mp.solutions.face_mesh.FaceMesh(  # start-up lines mean nothing to a user
            static_image_mode=True, refine_landmarks=True, max_num_faces=max_faces) as fm:
        res = fm.process(np.ascontiguousarray(image))
    out = []
    for face in res.multi_face_landmarks or []:
        out.append(np.array([[p.x * w, p.y * h, p.z * w] for p in face.landmark], dtype=float))
    return out


def iris_diameter_px(landmarks_px: np.ndarray) -> float:
    """Mean horizontal iris diameter of both eyes (rim points 1 and 3 of each iris), pixels."""
    d = [np.linalg.norm(landmarks_px[ids[1], :2] - landmarks_px[ids[3], :2]) for ids in (RIGHT_IRIS, LEFT_IRIS)]
    return float(np.mean(d))


def _poly_mask(shape, poly_px: np.ndarray) -> np.ndarray:
    from aspectus._env import import_cv2

    cv2 = import_cv2()
    m = np.zeros(shape[:2], np.uint8)
    cv2.fillPoly(m, [np.round((poly_px - 0.5) * 16).astype(np.int32)], 1, lineType=cv2.LINE_8, shift=4)
    return m.astype(bool)


def _eye_look(image: np.ndarray, lm: np.ndarray, eye: str, iris_d_px: float) -> EyeLook:
    contour = lm[list(EYE_CONTOUR[eye]), :2]
    centre = lm[EYE_IRIS[eye][0], :2]
    r = iris_d_px / 2
    yy, xx = np.mgrid[0:image.shape[0], 0:image.shape[1]]
    dist = np.hypot(xx + 0.5 - centre[0], yy + 0.5 - centre[1])
    inside = _poly_mask(image.shape, contour)
    px = image.astype(float)
    lum = px @ np.array([0.299, 0.587, 0.114])

    sel = inside & (dist < 0.85 * r)
    if sel.sum() >= 4:
        vals, l = px[sel], lum[sel]  # noqa: E741
        iris = np.median(vals[l >= np.percentile(l, 25)], axis=0)
    else:  # pragma: no cover - both shipped photos have visible irises
        iris = np.array([90.0, 70.0, 55.0])

    sel = inside & (dist > 1.1 * r)
    if sel.sum() >= 4:
        vals, l = px[sel], lum[sel]  # noqa: E741
        sclera = np.median(vals[l >= np.percentile(l, 60)], axis=0)
    else:  # pragma: no cover
        sclera = np.array([215.0, 205.0, 195.0])
    sclera = 0.5 * sclera + 0.5 * np.array([228.0, 222.0, 214.0])  # small photos give a greyish sclera

    eye_w = np.linalg.norm(contour[0] - contour[8])
    upper = contour[9:]
    pts = []
    for f in np.linspace(0.25, 0.45, 5):
        pts.append(upper - np.array([0.0, f * eye_w]))
    pts = np.concatenate(pts)
    ij = np.clip(np.floor(pts).astype(int), 0, [image.shape[1] - 1, image.shape[0] - 1])
    skin = np.median(px[ij[:, 1], ij[:, 0]], axis=0)
    lash = 0.35 * skin
    return EyeLook(tuple(map(float, sclera)), tuple(map(float, iris)), tuple(map(float, skin)), tuple(map(float, lash)))


@functools.lru_cache(maxsize=4)
def load_face(name: str = "hopper") -> FacePhoto:
    """Load and landmark one of the shipped face photographs (cached per process).

    Parameters
    ----------
    name : {"hopper", "astronaut"}
        ``"hopper"``: matplotlib's ``grace_hopper.jpg`` (512 x 600 px);
        ``"astronaut"``: scikit-image's astronaut (512 x 512 px).

    Returns
    -------
    FacePhoto
    """
    if name not in FACES:
        raise ParameterError(f"face must be one of {', '.join(FACES)}, got {name!r}")
    img = _photo(name)
    faces = landmark_image(img, max_faces=1)
    if not faces:  # pragma: no cover - the shipped photos are known to work
        raise ParameterError(f"the face mesh found no face in the {name} photograph")
    lm = faces[0]
    d = iris_diameter_px(lm)
    eyes = {e: _eye_look(img, lm, e, d) for e in EYES}
    img.setflags(write=False)
    lm.setflags(write=False)
    return FacePhoto(name=name, image=img, landmarks_px=lm, iris_diameter_px=d, eyes=eyes)
