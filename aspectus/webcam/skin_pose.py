"""Head rotation from skin points followed on the picture, not from the face mesh's landmarks.

The face mesh moves its "rigid" points with the eyes (forehead and eye corners by 0.1-0.25 px per degree
of vertical gaze on rendered clips), so the rotation that PnP on them gives (:mod:`aspectus.webcam.headpose`)
follows the gaze: on a still-head 720p clip it moved by SD 0.32 deg in pitch between fixations, and at
classroom scale its error (0.3-0.9 deg) moved the eyeball centres by 0.3-1 mm over the lever from the eye
anchors to them (docs/notes/gaze-measurement.md).

Here the rotation comes from the picture instead. Skin points spread over the rigid face
(:data:`SKIN_POSE_POINTS`: forehead, nose bridge and tip, cheeks, temples - away from the lids, brows and
mouth) are followed by the eye anchors' template matcher (:class:`aspectus.webcam.eye_anchors.EyeAnchorTracker`:
the same templates, search, score and rules for cutting a template again - after failed matches, a changed
face scale, or a head turned by :data:`aspectus.webcam.eye_anchors.RECUT_ROTATION_DEG` since the cut, where a
template of the same point cut earlier near the present rotation is taken up again). Each template is matched
against the frame it was cut from (a key frame), not chained from frame to frame, so a still head gives a
still pose, and a head turned away and back returns to its first templates. When a template is cut, its
point's 3-D position is where the line of sight through the cut position meets the face model's surface (the plane through the model point and its 10
nearest neighbours) under that frame's pose, so the points reproject exactly where they were cut and the
mesh's errors at later frames do not enter. The pose is then solved per frame by PnP on the matched points
(:func:`solve_pose`: Levenberg-Marquardt from the previous frame's pose; points beyond three robust scales
of the residuals are left out and the pose solved again).

Where fewer than :data:`MIN_POINTS` points are matched (a hand, a turn too far, a face too small), the
rotation is the face mesh's PnP rotation turned by the last solved frame's difference from it, so a switch
does not jump.
"""
from __future__ import annotations

import numpy as np

from aspectus._env import import_cv2
from aspectus.webcam.eye_anchors import EyeAnchorTracker, surface_normal

#: face-mesh points followed for the rotation (face model, mm: forehead 32-44 mm above the eyes, the nose from
#: its bridge between the eyes to its tip, cheeks 14-34 mm below the eyes, temples beside and above the eyes)
SKIN_POSE_POINTS = (10, 151, 108, 337, 109, 338, 67, 297,  # forehead, well above the brows
                    6, 197, 195, 5, 4, 48, 278,  # nose: bridge, back, tip, wings
                    50, 280, 205, 425, 117, 346, 36, 266,  # cheeks
                    54, 284, 139, 368)  # temples
#: fewest matched points the rotation is solved from
MIN_POINTS = 8
#: the robust scale's floor, px (the matcher's own sub-pixel error is a few tenths of a pixel)
MIN_SCALE_PX = 0.3
#: a solved rotation further than this from its start (the previous frame's) is refused, deg
MAX_STEP_DEG = 20.0
_MAX_STEP_COS = float(np.cos(np.radians(MAX_STEP_DEG)))
#: a point is an outlier of the solve beyond this many robust scales
OUTLIER_SCALES = 3.0


def solve_pose(model_mm: np.ndarray, points_px: np.ndarray, K: np.ndarray, R0: np.ndarray, t0: np.ndarray, *,
               rounds: int = 3) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
    """Robust PnP: rotation R (head -> camera), translation t and the inlier mask, or None.

    Levenberg-Marquardt on the reprojection error of ``model_mm`` (k, 3) onto ``points_px`` (k, 2) from
    ``(R0, t0)`` (OpenCV's iterative PnP), then up to ``rounds`` times: the points whose residual exceeds
    :data:`OUTLIER_SCALES` robust scales (1.4826 times the median residual, at least :data:`MIN_SCALE_PX`)
    are left out and the pose is solved again from the last one on the others (a trimmed least-squares fit:
    rejection by the median absolute deviation, Hampel 1974). None when fewer than :data:`MIN_POINTS` finite
    points are given or remain, when the start or a point lies behind the camera, when the solve fails, or when
    it ends more than :data:`MAX_STEP_DEG` from ``R0``.
    """
    X = np.asarray(model_mm, float)
    p = np.asarray(points_px, float)
    ok = np.isfinite(X).all(axis=1) & np.isfinite(p).all(axis=1)
    if ok.sum() < MIN_POINTS or not (np.isfinite(R0).all() and np.isfinite(t0).all()) or not t0[2] > 0:
        return None
    X, p = np.ascontiguousarray(X[ok]), np.ascontiguousarray(p[ok])
    cv2 = import_cv2()
    fx, fy, cx, cy = float(K[0, 0]), float(K[1, 1]), float(K[0, 2]), float(K[1, 2])
    rvec, _ = cv2.Rodrigues(np.asarray(R0, float))
    tvec = np.array(t0, float).reshape(3, 1)
    inl = np.ones(len(X), bool)
    for _ in range(rounds + 1):
        try:
            good, rvec, tvec = cv2.solvePnP(X[inl], p[inl], K, None, rvec, tvec, useExtrinsicGuess=True,
                                            flags=cv2.SOLVEPNP_ITERATIVE)
        except cv2.error:
            return None
        if not good or not (np.isfinite(rvec).all() and np.isfinite(tvec).all()):
            return None
        R, _ = cv2.Rodrigues(rvec)
        Xc = X @ R.T + tvec[:, 0]
        if not np.all(Xc[:, 2] > 0):
            return None
        res = np.hypot(fx * Xc[:, 0] / Xc[:, 2] + cx - p[:, 0], fy * Xc[:, 1] / Xc[:, 2] + cy - p[:, 1])
        scale = max(MIN_SCALE_PX, 1.4826 * float(np.median(res[inl])))
        new = res <= OUTLIER_SCALES * scale
        if new.sum() < MIN_POINTS:
            return None
        if np.array_equal(new, inl):
            break
        inl = new
    if 0.5 * (float(np.trace(R @ np.asarray(R0, float).T)) - 1.0) < _MAX_STEP_COS:
        return None  # not the head's motion from the starting pose (a solve caught in another minimum)
    mask = np.zeros(len(ok), bool)
    mask[np.flatnonzero(ok)[inl]] = True
    return R, tvec[:, 0].copy(), mask


def back_project(point_px, K: np.ndarray, R: np.ndarray, t: np.ndarray, model_point_mm, normal_mm) -> np.ndarray:
    """The head-frame point (mm) where the line of sight through ``point_px`` meets the plane through
    ``model_point_mm`` with normal ``normal_mm`` (head frame), the head at pose ``(R, t)``; NaN when the line
    runs along the plane or meets it behind the camera."""
    d = np.array([(point_px[0] - K[0, 2]) / K[0, 0], (point_px[1] - K[1, 2]) / K[1, 1], 1.0])
    P = R @ np.asarray(model_point_mm, float) + t
    n = R @ np.asarray(normal_mm, float)
    den = float(n @ d)
    if abs(den) < 1e-6:
        return np.full(3, np.nan)
    s = float(n @ P) / den
    if not s > 0:
        return np.full(3, np.nan)
    return R.T @ (s * d - t)


class SkinPose:
    """The head rotation of one face over a run of frames, from :data:`SKIN_POSE_POINTS` followed on the picture."""

    def __init__(self, points=SKIN_POSE_POINTS):
        from aspectus.webcam.headpose import face_model

        self.points = tuple(points)
        self.tracker = EyeAnchorTracker(self.points)
        pts = face_model().points_mm
        self._model = pts[list(self.points)].astype(np.float64)
        self._normals = np.array([surface_normal(pts, j) for j in self.points])
        self.solved_frames = 0
        self.fallback_frames = 0
        self.reset()

    def reset(self) -> None:
        self.tracker.reset()
        self.X = np.full((len(self.points), 3), np.nan)  # each point's head-frame position at its template's cut
        self._X_by_template: dict[int, np.ndarray] = {}  # the same by template number (key frames taken up again)
        self._R = self._t = None  # the last solved pose
        self._diff: np.ndarray | None = None  # the last solved rotation times the mesh's rotation's inverse
        self.inliers = np.zeros(len(self.points), bool)

    def update(self, image: np.ndarray, points_px: np.ndarray, origin_px, iris_radius_px: float, K: np.ndarray,
               R_mesh: np.ndarray, t_mesh: np.ndarray) -> np.ndarray:
        """This frame's head rotation (3 x 3).

        ``image`` is the picture or a crop of it at ``origin_px``; ``points_px`` are the face mesh's points in
        picture coordinates; ``K`` the camera matrix; ``(R_mesh, t_mesh)`` the face mesh's PnP pose.
        """
        off = np.array([float(origin_px[0]), float(origin_px[1])])
        if self._R is not None:
            R_g, t_g = self._R, self._t
        else:
            R_g = R_mesh if self._diff is None else self._diff @ R_mesh
            t_g = np.asarray(t_mesh, float)
        local = np.asarray(points_px, float).copy()
        local[:, :2] -= off
        a = self.tracker.update(image, local, iris_radius_px, rotation=R_g) + off
        for j, tid in enumerate(self.tracker.template_ids.tolist()):
            if not self.tracker.last_cut[j]:
                self.X[j] = self._X_by_template.get(tid, self.X[j])
        use = self.tracker.last_matched & np.isfinite(self.X).all(axis=1)
        sol = solve_pose(self.X[use], a[use], K, R_g, t_g) if use.sum() >= MIN_POINTS else None
        self.inliers[:] = False
        if sol is not None:
            R, t, inl = sol
            self.inliers[np.flatnonzero(use)[inl]] = True
            self._R, self._t = R, t
            self._diff = R @ np.asarray(R_mesh, float).T
            self.solved_frames += 1
        else:
            R = R_mesh if self._diff is None else self._diff @ R_mesh
            t = np.asarray(t_mesh, float)
            self._R = self._t = None
            self.fallback_frames += 1
        for j in np.flatnonzero(self.tracker.last_cut):  # where the line of sight meets the face model
            self.X[j] = back_project(a[j], K, R, t, self._model[j], self._normals[j])
            self._X_by_template[int(self.tracker.template_ids[j])] = self.X[j].copy()
        if len(self._X_by_template) > 4 * len(self.points) * 8:  # forget templates no longer kept
            live = {int(t[6]) for ks in self.tracker._keys for t in ks} | set(self.tracker.template_ids.tolist())
            self._X_by_template = {k: v for k, v in self._X_by_template.items() if k in live}
        return R

    def fallback(self, R_mesh: np.ndarray) -> np.ndarray:
        """The rotation of a frame whose skin points cannot be followed: the mesh's turned by the last solved
        difference (the mesh's own where none was solved)."""
        self._R = self._t = None
        self.fallback_frames += 1
        return np.asarray(R_mesh, float) if self._diff is None else self._diff @ R_mesh
