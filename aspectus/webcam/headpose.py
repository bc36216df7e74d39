"""Head pose by Perspective-n-Point against aspectus's 3-D face model.

The model (``aspectus/data/face_model_mm.csv``, built by
``scripts/build_face_model.py``) holds the 478 face-mesh points and both
eyeball centres in millimetres in the head frame (origin midway between the
eyeball centres, axes equal to the camera frame at zero pose). Only points on
the rigid part of the face are used for the pose - forehead, nose, sides of
the face, cheeks - because the eyelids, eye corners, mouth and jaw move on
their own. (Known limit: the face mesh shifts even these points slightly with
vertical gaze - on rendered clips the fitted head moved up by about 0.2 mm
whenever the eyes looked up, r = -0.97 - which costs part of the vertical
gaze signal; see DEVELOPERS.md.)

Camera intrinsics come from an assumed horizontal field of view (default 60
deg, a common laptop webcam; the user can override it); the principal point is
the picture centre and lens distortion is ignored.

The PnP translation is not what places the eyeballs: on a turned head the
face mesh puts its landmarks a fraction of a pixel per degree away from the
face's points, which moves the translation by about a millimetre at 5 deg.
:mod:`aspectus.webcam.frame_geometry` keeps this rotation and refits the
translation to skin points below the eyes followed on the picture
(:mod:`aspectus.webcam.eye_anchors`).

The model has an average adult size. Its scale only multiplies the
translation (PnP is scale-equivariant), so :mod:`aspectus.webcam.gaze` fixes the
metric scale per clip afterwards from the iris diameter.
"""
from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache
from importlib import resources

import numpy as np

from aspectus._env import import_cv2
from aspectus.geometry import camera_matrix, rotation_to_head_angles

#: rigid face-mesh points used for PnP: forehead, nose bridge and tip, temples, cheekbones
RIGID_POINTS = (
    10, 151, 9, 109, 338, 67, 297, 103, 332, 54, 284,  # forehead, well above the brows
    1, 2, 4, 5, 19, 94, 195, 197, 98, 327, 129, 358, 64, 294, 48, 278,  # nose below the eyes
    127, 356, 234, 454, 93, 323, 132, 361,  # sides of the face
    205, 425, 50, 280, 36, 266, 101, 330,  # cheeks below the cheekbones
)


@dataclass(frozen=True)
class FaceModel:
    points_mm: np.ndarray  # (478, 3)
    eye_right_mm: np.ndarray  # (3,)
    eye_left_mm: np.ndarray  # (3,)


@lru_cache(maxsize=1)
def face_model() -> FaceModel:
    """The packaged 3-D face model (mm, head frame)."""
    text = resources.files("aspectus").joinpath("data/face_model_mm.csv").read_text()
    pts = np.zeros((478, 3))
    eyes = {}
    for line in text.splitlines():
        if not line or line.startswith("#") or line.startswith("index"):
            continue
        k, x, y, z = line.split(",")
        v = np.array([float(x), float(y), float(z)])
        if k.startswith("eye_"):
            eyes[k] = v
        else:
            pts[int(k)] = v
    return FaceModel(points_mm=pts, eye_right_mm=eyes["eye_right"], eye_left_mm=eyes["eye_left"])


class HeadPoseSolver:
    """Per-frame PnP with the previous pose as the starting guess.

    Parameters
    ----------
    width_px, height_px : int
        Picture size (upright).
    fov_deg : float
        Assumed horizontal field of view of the camera, degrees (20-120).
    """

    def __init__(self, width_px: int, height_px: int, *, fov_deg: float = 60.0):
        from aspectus.errors import ParameterError

        if not (20.0 <= float(fov_deg) <= 120.0):
            raise ParameterError(f"field of view {fov_deg} deg outside 20-120 deg",
                                 hint="give the webcam's horizontal field of view in degrees (laptop webcams: about 55-75)")
        self.K = camera_matrix(width_px, height_px, fov_deg)
        self.model = face_model()
        self._obj = self.model.points_mm[list(RIGID_POINTS)].astype(np.float64)
        self._rvec = None
        self._tvec = None

    def reset(self):
        self._rvec = self._tvec = None

    def solve(self, points_px: np.ndarray) -> tuple[np.ndarray, np.ndarray] | None:
        """Rotation matrix (head -> camera) and translation (mm, model scale) for one frame."""
        cv2 = import_cv2()
        img = np.ascontiguousarray(points_px[list(RIGID_POINTS), :2], dtype=np.float64)
        ok = False
        if self._rvec is not None:
            ok, rvec, tvec = cv2.solvePnP(self._obj, img, self.K, None, self._rvec.copy(), self._tvec.copy(),
                                          useExtrinsicGuess=True, flags=cv2.SOLVEPNP_ITERATIVE)
            if ok and (tvec[2, 0] <= 0 or not np.all(np.isfinite(tvec))):
                ok = False
        if not ok:
            ok, rvec, tvec = cv2.solvePnP(self._obj, img, self.K, None, flags=cv2.SOLVEPNP_SQPNP)
            if ok:
                ok, rvec, tvec = cv2.solvePnP(self._obj, img, self.K, None, rvec, tvec,
                                              useExtrinsicGuess=True, flags=cv2.SOLVEPNP_ITERATIVE)
        if not ok or tvec[2, 0] <= 0:
            self.reset()
            return None
        self._rvec, self._tvec = rvec, tvec
        R, _ = cv2.Rodrigues(rvec)
        return R, tvec[:, 0].copy()


def pose_angles(R: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(head_yaw_deg, head_pitch_deg, head_roll_deg) of head->camera rotations (..., 3, 3)."""
    return rotation_to_head_angles(R)
