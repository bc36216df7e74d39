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
point's 3-D position is where the line of sight through the cut position meets the face's surface as the face
mesh reports it in that frame (its landmarks lifted to 3-D by their own relative depth, one depth offset fitted
to the face model under the pose; the plane through the point's landmark along its 10 nearest), under that
frame's pose, so the points reproject exactly where they were cut and the mesh's errors at later frames do not
enter. (On the face model's own local planes instead - ``mesh_depth=False``, as before - the followed points lie
a few mm off the skin they were cut from, which attenuates the rotation: head yaw gain 0.86 on a rendered face
turning +-15 deg even with exact picture positions, 0.98 on the face mesh's surface.) Two further options were
measured and are left off: the points' depths learnt from the clip (``learn_shape``: :func:`refine_shape`) and
template matches warped by the predicted pose (``warp``); see docs/notes/gaze-measurement.md. The pose is
then solved per frame by PnP on the matched points
(:func:`solve_pose`: Levenberg-Marquardt from the previous frame's pose; points beyond three robust scales
of the residuals are left out and the pose solved again).

Where fewer than :data:`MIN_POINTS` points are matched (a hand, a turn too far, a face too small), the
rotation is the face mesh's PnP rotation turned by the last solved frame's difference from it, so a switch
does not jump.
"""
from __future__ import annotations

import time

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

    def __init__(self, points=SKIN_POSE_POINTS, *, learn_shape: bool = False, warp: bool = False,
                 mesh_depth: bool = True):
        from aspectus.webcam.headpose import face_model

        self.points = tuple(points)
        self.learn_shape = bool(learn_shape)
        self.warp = bool(warp)
        self.mesh_depth = bool(mesh_depth)
        self.tracker = EyeAnchorTracker(self.points)
        pts = face_model().points_mm
        self._model = pts[list(self.points)].astype(np.float64)
        self._normals = np.array([surface_normal(pts, j) for j in self.points])
        # per point, its 10 nearest model points (the local surface the cut point is put on with mesh_depth)
        self._near = [np.argsort(np.linalg.norm(pts - pts[j], axis=1))[:10] for j in self.points]
        self._rows = np.array(self.points, dtype=np.intp)
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
        # the learnt shape: per template number, (where its line of sight met the model, the unit line of sight,
        # the learnt shift along it); the kept frames: (R, t, template numbers, picture points)
        self._rays: dict[int, list] = {}
        self._cuts: dict[int, tuple] = {}  # per template number: its centre pixel, the pose at the cut
        self._plane_points: dict[int, np.ndarray] = {}  # per template number: its plane's points for the warp
        self._kept: list[tuple] = []
        self._since_kept = 0
        self._since_refined = 0
        self.refinements = 0
        self.refine_cpu_s = 0.0
        self.shape_rms_px = float("nan")

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
        warp = None
        if self.warp:
            def warp(j, tid):
                return self._template_map(j, tid, K, R_g, t_g, off)
        a = self.tracker.update(image, local, iris_radius_px, rotation=R_g, warp=warp) + off
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
            if self.learn_shape:
                self._keep(R, t, np.flatnonzero(use)[inl], a)
        else:
            R = R_mesh if self._diff is None else self._diff @ R_mesh
            t = np.asarray(t_mesh, float)
            self._R = self._t = None
            self.fallback_frames += 1
        lifted = None
        if self.mesh_depth and self.tracker.last_cut.any():
            lifted = self._lifted(points_px, K, R, t)
        for j in np.flatnonzero(self.tracker.last_cut):  # where the line of sight meets the face model
            if lifted is not None:
                self.X[j] = self._on_mesh_surface(a[j], K, R, t, lifted, j)
            else:
                self.X[j] = back_project(a[j], K, R, t, self._model[j], self._normals[j])
            tid = int(self.tracker.template_ids[j])
            self._X_by_template[tid] = self.X[j].copy()
            if self.warp:
                self._cuts[tid] = (np.round(a[j]), R.copy(), np.asarray(t, float).copy())
                self._plane_points.pop(tid, None)
            if self.learn_shape and np.isfinite(self.X[j]).all():
                d = R.T @ np.array([(a[j, 0] - K[0, 2]) / K[0, 0], (a[j, 1] - K[1, 2]) / K[1, 1], 1.0])
                self._rays[tid] = [self.X[j].copy(), d / np.linalg.norm(d), 0.0]
        if self.learn_shape and self._since_refined >= SHAPE_REFINE_EVERY and len(self._kept) >= SHAPE_REFINE_EVERY:
            c0 = time.process_time()
            self._refine(K)
            self.refine_cpu_s += time.process_time() - c0
        if len(self._X_by_template) > 4 * len(self.points) * 8:  # forget templates no longer kept
            live = {int(t[6]) for ks in self.tracker._keys for t in ks} | set(self.tracker.template_ids.tolist())
            self._X_by_template = {k: v for k, v in self._X_by_template.items() if k in live}
            live |= {int(i) for f in self._kept for i in f[2]}
            self._rays = {k: v for k, v in self._rays.items() if k in live}
            self._cuts = {k: v for k, v in self._cuts.items() if k in live}
            self._plane_points = {k: v for k, v in self._plane_points.items() if k in live}
        return R

    def _lifted(self, points_px, K, R, t) -> np.ndarray | None:
        """The face mesh's landmarks of this frame in the head frame (mm): each lifted to the depth its own
        relative depth gives (the mesh reports it in the picture's pixel scale), one depth offset for the face
        fitted to the model's depths at the followed points under the pose ``(R, t)``; None when unusable."""
        q = np.asarray(points_px, float)
        if q.ndim != 2 or q.shape[1] < 3 or not np.isfinite(q[self._rows]).all():
            return None
        f = float(K[0, 0])
        z_model = self._model @ np.asarray(R, float)[2] + float(t[2])  # the model's depths at the points
        zr = q[self._rows, 2]
        # depth Z_k = D (1 + z_k / f): D fitted to the model's depths (least squares)
        g = 1.0 + zr / f
        D = float(g @ z_model / (g @ g))
        if not D > 0:
            return None
        Z = D * (1.0 + q[:, 2] / f)
        cam = np.c_[(q[:, 0] - K[0, 2]) * Z / f, (q[:, 1] - K[1, 2]) * Z / float(K[1, 1]), Z]
        return (cam - np.asarray(t, float)) @ np.asarray(R, float)

    def _on_mesh_surface(self, point_px, K, R, t, lifted: np.ndarray, j: int) -> np.ndarray:
        """Where the line of sight through ``point_px`` meets the plane through the lifted mesh's point of
        :attr:`points` ``[j]`` along its 10 nearest (head frame, mm)."""
        nb = lifted[self._near[j]]
        n = np.linalg.svd(nb - nb.mean(axis=0))[2][-1]
        return back_project(point_px, K, R, t, lifted[self.points[j]], n)

    def on_surface(self, point_px, K, R, t, lifted: np.ndarray, mesh_point: int) -> np.ndarray:
        """The same for any face-mesh point ``mesh_point`` (head frame, mm)."""
        from aspectus.webcam.headpose import face_model

        pts = face_model().points_mm
        near = np.argsort(np.linalg.norm(pts - pts[mesh_point], axis=1))[:10]
        nb = lifted[near]
        n = np.linalg.svd(nb - nb.mean(axis=0))[2][-1]
        return back_project(point_px, K, R, t, lifted[mesh_point], n)

    def _template_map(self, j: int, tid: int, K, R, t, off):
        """The affine map from template ``tid``'s pixel offsets to this picture's crop (point ``j``, head at the
        predicted pose ``(R, t)``): through the face model's local plane at the point, seen under the pose the
        template was cut at and under this one (the plane's homography, taken as affine at the point). None
        where the template's cut is not known or the plane is seen edge-on."""
        cut = self._cuts.get(int(tid))
        X = self._X_by_template.get(int(tid))
        if cut is None or X is None or not np.isfinite(X).all():
            return None
        P = self._plane_points.get(int(tid))
        # The map takes the template's centre pixel index (C, OpenCV's convention) as a picture position
        # (aspectus.schema's) and its output serves both as OpenCV sampling coordinates and, through the
        # matched offset, as the anchor's position: consistent at the cut's pose; the half pixel only moves
        # where the plane is evaluated (second order, docs/notes/gaze-measurement.md).
        if P is None:  # the template's centre and two pixels beside it on the model's local plane (head frame)
            C, Rc, tc = cut
            P = np.array([back_project(q, K, Rc, tc, X, self._normals[j])
                          for q in C + np.array([[0.0, 0.0], [4.0, 0.0], [0.0, 4.0]])])
            self._plane_points[int(tid)] = P
        if not np.isfinite(P).all():
            return None
        Pc = P @ np.asarray(R, float).T + np.asarray(t, float)
        if not np.all(Pc[:, 2] > 0):
            return None
        dst = np.c_[K[0, 0] * Pc[:, 0] / Pc[:, 2] + K[0, 2] - off[0], K[1, 1] * Pc[:, 1] / Pc[:, 2] + K[1, 2] - off[1]]
        A = np.c_[dst[1] - dst[0], dst[2] - dst[0]] / 4.0
        return np.c_[A, dst[0]]

    def _keep(self, R, t, rows, a) -> None:
        """Keep every :data:`SHAPE_FRAME_STEP`-th solved frame's pose and inlier points for the shape."""
        self._since_kept += 1
        if self._since_kept < SHAPE_FRAME_STEP:
            return
        self._since_kept = 0
        tids = self.tracker.template_ids[rows]
        rows = rows[(tids >= 0) & self.tracker.last_matched[rows]]
        if len(rows) < MIN_POINTS:
            return
        self._kept.append((R.copy(), t.copy(), self.tracker.template_ids[rows].copy(), a[rows].copy()))
        self._since_refined += 1
        if len(self._kept) > SHAPE_MAX_FRAMES:  # let go of the older of the two frames nearest in rotation
            Rs = np.stack([f[0] for f in self._kept])
            c = np.einsum("aij,bij->ab", Rs, Rs)  # trace(Ra Rb^T): larger is nearer
            np.fill_diagonal(c, -np.inf)
            a_, b_ = np.unravel_index(int(np.argmax(c)), c.shape)
            del self._kept[min(a_, b_)]

    def _refine(self, K) -> None:
        """Learn the skin points' depths (and refit the kept frames' poses): :func:`refine_shape`."""
        self._since_refined = 0
        tids = sorted({int(i) for f in self._kept for i in f[2]} & set(self._rays))
        if not tids:
            return
        index = {tid: k for k, tid in enumerate(tids)}
        obs_f, obs_k, obs_px = [], [], []
        for fi, f in enumerate(self._kept):
            for tid, p in zip(f[2].tolist(), f[3]):
                if tid in index:
                    obs_f.append(fi)
                    obs_k.append(index[tid])
                    obs_px.append(p)
        rays = [self._rays[tid] for tid in tids]
        X0 = np.array([r[0] for r in rays])
        u = np.array([r[1] for r in rays])
        s0 = np.array([r[2] for r in rays])
        s, R, t, rms = refine_shape(X0, u, s0, np.stack([f[0] for f in self._kept]),
                                    np.stack([f[1] for f in self._kept]), np.array(obs_f), np.array(obs_k),
                                    np.array(obs_px, float), K)
        if not (np.isfinite(s).all() and np.isfinite(R).all() and np.isfinite(t).all()):
            return
        self.refinements += 1
        self.shape_rms_px = rms
        self._kept = [(R[i], t[i], f[2], f[3]) for i, f in enumerate(self._kept)]
        for tid, r, sk in zip(tids, rays, s):
            r[2] = float(sk)
            self._X_by_template[tid] = r[0] + sk * r[1]
            self._plane_points.pop(tid, None)
        for j, tid in enumerate(self.tracker.template_ids.tolist()):
            if tid in index:
                self.X[j] = self._X_by_template[tid]

    def fallback(self, R_mesh: np.ndarray) -> np.ndarray:
        """The rotation of a frame whose skin points cannot be followed: the mesh's turned by the last solved
        difference (the mesh's own where none was solved)."""
        self._R = self._t = None
        self.fallback_frames += 1
        return np.asarray(R_mesh, float) if self._diff is None else self._diff @ R_mesh


#: the learnt skin shape: every this many solved frames is kept for the refinement
SHAPE_FRAME_STEP = 3
#: the refinement runs after every this many kept frames (and once this many are kept)
SHAPE_REFINE_EVERY = 10
#: at most this many frames are kept (past it the one nearest in rotation to another is let go)
SHAPE_MAX_FRAMES = 90
#: the prior's SD of a point's depth along its line of sight from the face model's surface, mm
SHAPE_PRIOR_MM = 3.0
#: fewest kept frames the shape is learnt from
SHAPE_MIN_FRAMES = 3
#: the matcher's SD the data are weighted by, px (its sub-pixel error is a few tenths of a pixel)
SHAPE_NOISE_PX = 0.5
#: Gauss-Newton steps per refinement
SHAPE_ITERATIONS = 3
#: a learnt point may move at most this far along its line of sight from where it was cut, mm
SHAPE_MAX_SHIFT_MM = 15.0


def _skew(v: np.ndarray) -> np.ndarray:
    """(n, 3) vectors -> (n, 3, 3) cross-product matrices."""
    z = np.zeros(len(v))
    return np.stack([np.stack([z, -v[:, 2], v[:, 1]], -1), np.stack([v[:, 2], z, -v[:, 0]], -1),
                     np.stack([-v[:, 1], v[:, 0], z], -1)], 1)


def _exp_so3(w: np.ndarray) -> np.ndarray:
    """(n, 3) rotation vectors -> (n, 3, 3) rotations (Rodrigues' formula)."""
    th = np.linalg.norm(w, axis=1)
    k = np.where(th[:, None] > 1e-12, w / np.maximum(th, 1e-12)[:, None], 0.0)
    Kx = _skew(k)
    s, c = np.sin(th)[:, None, None], np.cos(th)[:, None, None]
    return np.eye(3)[None] + s * Kx + (1.0 - c) * (Kx @ Kx)


def _sum_by(index: np.ndarray, values: np.ndarray, n: int) -> np.ndarray:
    """Rows of ``values`` (m, c) summed by ``index`` (m,) into (n, c)."""
    return np.stack([np.bincount(index, weights=values[:, c], minlength=n) for c in range(values.shape[1])], 1)


def refine_shape(X0: np.ndarray, u: np.ndarray, s: np.ndarray, R: np.ndarray, t: np.ndarray, obs_f: np.ndarray,
                 obs_k: np.ndarray, obs_px: np.ndarray, K: np.ndarray, *, prior_mm: float = SHAPE_PRIOR_MM,
                 noise_px: float = SHAPE_NOISE_PX, iterations: int = SHAPE_ITERATIONS,
                 max_shift_mm: float = SHAPE_MAX_SHIFT_MM, keep_relief: bool = True):
    """Structure from motion with the head pose: each skin point's depth along the line of sight it was cut on,
    with the poses of the kept frames, by robust Gauss-Newton (a bundle adjustment: Triggs et al. 2000).

    Point ``k`` lies at ``X0[k] + s[k] * u[k]`` in the head frame (``X0``: where its line of sight met the face
    model's surface at the cut, ``u``: the unit line of sight, so it still projects where it was cut); frame
    ``f`` has the pose ``(R[f], t[f])``; observation ``i`` saw point ``obs_k[i]`` in frame ``obs_f[i]`` at
    ``obs_px[i]``. The squared reprojection errors (in ``noise_px``, Huber-weighted at two robust scales, left
    out past five) plus ``(s / prior_mm)^2`` (the prior toward the face model: a point seen only near the pose it
    was cut at, as on a still head, keeps the model's surface, since its depth does not change its picture) are
    minimised over the poses and ``s``; the per-point unknowns are eliminated first (a 6 x 6 block per frame;
    Schur complement onto the points). Returns ``(s, R, t, rms_px)``; ``s`` is clipped to ``max_shift_mm``.
    """
    s, R, t = np.array(s, float), np.array(R, float), np.array(t, float)
    nF, nK = len(R), len(X0)
    info = np.zeros(nK)
    obs_f, obs_k = np.asarray(obs_f, np.intp), np.asarray(obs_k, np.intp)
    obs_px = np.asarray(obs_px, float).reshape(-1, 2)
    good = np.isfinite(obs_px).all(axis=1) & (obs_f >= 0) & (obs_f < nF) & (obs_k >= 0) & (obs_k < nK)
    obs_f, obs_k, obs_px = obs_f[good], obs_k[good], obs_px[good]
    seen = np.bincount(obs_k, minlength=nK) > 0
    if nF < SHAPE_MIN_FRAMES or len(obs_f) < MIN_POINTS * SHAPE_MIN_FRAMES or not (
            np.isfinite(X0).all() and np.isfinite(u).all() and np.isfinite(s).all()):
        return s, R, t, float("nan")  # too little to learn from: the shape as it was
    fx, fy, cx, cy = float(K[0, 0]), float(K[1, 1]), float(K[0, 2]), float(K[1, 2])
    lam = (noise_px / prior_mm) ** 2
    rms = np.nan
    for _ in range(iterations):
        X = X0 + s[:, None] * u
        RX = np.einsum("nij,nj->ni", R[obs_f], X[obs_k])
        P = RX + t[obs_f]
        z = P[:, 2]
        if not np.all(z > 1e-6):
            break
        r = np.c_[fx * P[:, 0] / z + cx, fy * P[:, 1] / z + cy] - obs_px
        e = np.hypot(r[:, 0], r[:, 1])
        scale = max(MIN_SCALE_PX, 1.4826 * float(np.median(e)))
        w = np.where(e <= 2 * scale, 1.0, 2 * scale / np.maximum(e, 1e-12))
        w[e > 5 * scale] = 0.0
        rms = float(np.sqrt(np.average(e ** 2, weights=np.maximum(w, 1e-12))))
        D = np.zeros((len(z), 2, 3))  # d(picture point) / d(camera point)
        D[:, 0, 0] = fx / z
        D[:, 0, 2] = -fx * P[:, 0] / z ** 2
        D[:, 1, 1] = fy / z
        D[:, 1, 2] = -fy * P[:, 1] / z ** 2
        Jp = np.concatenate([-D @ _skew(RX), D], axis=2)  # (n, 2, 6): rotation (left-multiplied), translation
        Js = np.einsum("nij,nj->ni", D, np.einsum("nij,nj->ni", R[obs_f], u[obs_k]))  # (n, 2)
        wr = w[:, None] * r
        Jw = Jp * w[:, None, None]
        A = _sum_by(obs_f, np.einsum("nij,nik->njk", Jw, Jp).reshape(-1, 36), nF).reshape(nF, 6, 6)
        A += 1e-6 * np.eye(6)
        gA = _sum_by(obs_f, np.einsum("nij,ni->nj", Jp, wr), nF)
        info = _sum_by(obs_k, (w * (Js ** 2).sum(1))[:, None], nK)[:, 0]
        C = lam + info
        gC = lam * s + _sum_by(obs_k, (Js * wr).sum(1)[:, None], nK)[:, 0]
        B = _sum_by(obs_f * nK + obs_k, np.einsum("nij,ni->nj", Jw, Js), nF * nK).reshape(nF, nK, 6)
        B = B.transpose(0, 2, 1)
        Ainv = np.linalg.inv(A)
        AiB = Ainv @ B  # (F, 6, K)
        S = np.diag(C) - np.einsum("fjk,fjl->kl", B, AiB)
        rhs = -gC + np.einsum("fjk,fj->k", AiB, gA)
        try:
            ds = np.linalg.solve(S, rhs)
        except np.linalg.LinAlgError:
            break
        dp = -np.einsum("fjk,fk->fj", Ainv, gA) - np.einsum("fjk,k->fj", AiB, ds)
        ds[~seen] = 0.0  # a point not seen in these frames keeps its depth
        s = np.clip(s + ds, -max_shift_mm, max_shift_mm)
        R = _exp_so3(dp[:, :3]) @ R
        t = t + dp[:, 3:]
    if keep_relief:
        s = _relief_kept(X0, u, s, info / (info + lam), seen)
    return s, R, t, rms


def _relief_kept(X0: np.ndarray, u: np.ndarray, s: np.ndarray, weight: np.ndarray, seen: np.ndarray) -> np.ndarray:
    """The learnt depths rescaled about their mean so that the face model's depths regress on them with slope 1.

    A depth relief scaled by c with rotations scaled by 1 / c fits the picture almost as well (the bas-relief
    ambiguity; only perspective and the second-order terms of large turns tell them apart), so the relief's
    scale is taken from the model: its depths at the points (``X0``) are the true ones plus errors that do not
    depend on them, and regressed on depths that are right up to a scale (the learnt ones) they give the
    inverse of that scale. ``weight`` (0-1): how far each point's depth was set by the picture, not the prior;
    points not ``seen`` are left as they are.
    """
    X = X0 + s[:, None] * u
    z, z0, w = X[:, 2], X0[:, 2], np.clip(weight, 0.0, 1.0)
    ok = (w > 0.5) & (np.abs(u[:, 2]) > 0.5)
    if ok.sum() < MIN_POINTS:
        return s
    w = w[ok]
    zm = float(np.average(z[ok], weights=w))
    dz = z[ok] - zm
    var = float(np.average(dz ** 2, weights=w))
    if not var > 0:
        return s
    b = float(np.average((z0[ok] - np.average(z0[ok], weights=w)) * dz, weights=w)) / var
    if not 0.5 <= b <= 2.0:
        return s
    z_new = zm + b * (z - zm)
    return np.where(seen & (np.abs(u[:, 2]) > 0.5), s + (z_new - z) / np.where(np.abs(u[:, 2]) > 0.5, u[:, 2], 1.0), s)
