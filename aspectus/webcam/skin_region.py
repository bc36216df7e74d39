"""Where the head is on the picture: a region of skin round the eyes, the eye openings masked, registered to a key frame.

The eye anchors (:mod:`aspectus.webcam.eye_anchors`) follow a few templates of a few pixels each; at classroom
scale (iris 8-12 px) those templates are 6-12 px wide and lie next to the lower lid, and on rendered clips they
moved with the eyes (up to 0.5-1.3 px per 10 deg of eye-in-head pitch; docs/notes/gaze-measurement.md). Here one
larger region is followed instead: the skin below and beside both eyes, the hull of each side's points
(:data:`HULLS`; the nose bridge's points 6, 168, 197 of :data:`REGION_POINTS` enter the affine map below, not the
region), with each eye opening and a margin round it (:data:`EYE_MARGIN_RADII` iris radii beyond the face mesh's
eye outline; the same erosion trims the region's outer edge) left out. It is registered to a key frame by the Lucas-Kanade method (Lucas & Kanade
1981; Baker & Matthews 2004, the inverse-compositional form) in its translation only: the face mesh's region
points give the rest of the map from the key frame to this frame (an affine map fitted to them by least squares:
scale, roll and the foreshortening of a turning head), and the registration finds the sub-pixel shift that the
mesh's own points - which follow the eyes - cannot give. The brightness is matched up to a gain and an offset
(each frame's masked pixels are brought to the key frame's mean and SD).

The result is each region point's picture position: the mesh's points moved together by the shift of the region
(so their centroid is where the picture puts it, their spread the mesh's), to which the head translation is
refitted as for the anchors (:func:`aspectus.webcam.eye_anchors.translation_given_rotation`).

A key frame is cut again when the face's scale has changed by more than
:data:`aspectus.webcam.eye_anchors.RESCALE_FRACTION` or the head has turned by more than
:data:`aspectus.webcam.eye_anchors.RECUT_ROTATION_DEG` since it was cut, or after
:data:`aspectus.webcam.eye_anchors.PATIENCE_FRAMES` failed registrations; the new key frame's region points start
where the last frame put them, so the placement does not jump.
"""
from __future__ import annotations

import numpy as np

from aspectus._env import import_cv2
from aspectus.face_mesh import LEFT_EYE_OUTLINE, RIGHT_EYE_OUTLINE
from aspectus.webcam.eye_anchors import ANCHOR_SETS, PATIENCE_FRAMES, RESCALE_FRACTION, _turned

#: face-mesh points spanning the region (face model: the second ring below each lower lid 229-231 / 449-451, the
#: cheek below it 117-119 / 346-348, beside the outer eye corners 226, 35 / 446, 265, the nose bridge 6, 168, 197)
REGION_POINTS = ANCHOR_SETS["skin_region"]
#: rows of REGION_POINTS whose convex hulls (grown by the margin) make the region; empty: the whole bounding box
HULLS = ((0, 1, 2, 6, 7, 8, 12, 13), (3, 4, 5, 9, 10, 11, 14, 15))
#: the region reaches this many iris radii beyond its points' bounding box
REGION_MARGIN_RADII = 0.5
#: pixels closer than this many iris radii to an eye opening (the face mesh's eye outline) are left out
EYE_MARGIN_RADII = 0.6
#: Gauss-Newton steps per frame, and the step (px) below which it has converged: OpenCV's bilinear warp places
#: its samples on a grid of 1/32 px (INTER_BITS = 5, OpenCV's imgproc documentation), so a shift changed by less
#: than that leaves the warped region as it was and the iteration cannot settle finer. A registration still
#: stepping further than this after MAX_STEPS steps is a miss (the last shift is kept).
MAX_STEPS = 8
STOP_STEP_PX = 1.0 / 32.0
#: a registration that moves the region further than this many iris radii from the mesh's prediction fails
MAX_SHIFT_RADII = 1.0
#: fewest usable (masked-in) pixels
MIN_PIXELS = 80


def _grey(image: np.ndarray) -> np.ndarray:
    if image.ndim == 3:
        cv2 = import_cv2()
        image = cv2.cvtColor(np.ascontiguousarray(image), cv2.COLOR_RGB2GRAY)
    return image.astype(np.float32)


def _affine(src: np.ndarray, dst: np.ndarray) -> np.ndarray | None:
    """The 2 x 3 affine map taking ``src`` (k, 2) onto ``dst`` (k, 2) by least squares, or None."""
    A = np.c_[src, np.ones(len(src))]
    M, *_ = np.linalg.lstsq(A, dst, rcond=None)
    M = M.T
    return M if np.isfinite(M).all() and abs(np.linalg.det(M[:, :2])) > 1e-3 else None


class SkinRegionTracker:
    """Follows :data:`REGION_POINTS` as one masked region against a key frame (one face, one run of frames)."""

    points = REGION_POINTS

    def __init__(self):
        self._rows = np.array(REGION_POINTS, dtype=np.intp)
        self._eyes = (np.array(RIGHT_EYE_OUTLINE, dtype=np.intp), np.array(LEFT_EYE_OUTLINE, dtype=np.intp))
        self.reset()

    def reset(self) -> None:
        self._key = None
        self._misses = 0
        self.registered = 0
        self.failed = 0
        self.unconverged = 0  # of the failed: the step limit reached before the step fell below STOP_STEP_PX
        self.offset_px = np.zeros(2)  # this frame's region shift from the mesh's points (picture px)

    def _cut(self, grey, pts, eyes, r, rotation, offset) -> None:
        cv2 = import_cv2()
        p = pts + offset
        m = REGION_MARGIN_RADII * r
        h, w = grey.shape
        x0, y0 = int(max(0, np.floor(p[:, 0].min() - m))), int(max(0, np.floor(p[:, 1].min() - m)))
        x1, y1 = int(min(w, np.ceil(p[:, 0].max() + m) + 1)), int(min(h, np.ceil(p[:, 1].max() + m) + 1))
        self._key = None
        if x1 - x0 < 8 or y1 - y0 < 8:
            return
        T = grey[y0:y1, x0:x1].copy()
        if HULLS:
            mask = np.zeros(T.shape, np.uint8)
            for side in HULLS:
                q = np.round(p[list(side)] - [x0, y0]).astype(np.int32)
                cv2.fillConvexPoly(mask, cv2.convexHull(q), 255)
            km = max(1, int(round(m)))
            mask = cv2.dilate(mask, cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (2 * km + 1, 2 * km + 1)))
        else:
            mask = np.full(T.shape, 255, np.uint8)
        for e in eyes:
            q = np.round(e + offset - [x0, y0]).astype(np.int32)
            cv2.fillPoly(mask, [q], 0)
        k = max(1, int(round(EYE_MARGIN_RADII * r)))
        mask = cv2.erode(mask, cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (2 * k + 1, 2 * k + 1)))
        gx = cv2.Sobel(T, cv2.CV_32F, 1, 0, ksize=3, scale=0.125)
        gy = cv2.Sobel(T, cv2.CV_32F, 0, 1, ksize=3, scale=0.125)
        inner = np.zeros_like(mask)
        inner[1:-1, 1:-1] = 1
        use = (mask > 0) & (inner > 0)
        if use.sum() < MIN_PIXELS:
            return
        t = T[use]
        mu, sd = float(t.mean()), float(t.std())
        if not sd > 1e-3:
            return
        J = np.c_[gx[use], gy[use]].astype(np.float64)
        H = J.T @ J
        if not np.linalg.cond(H) < 1e6:
            return
        # key-frame pixel (x, y) of the region box <-> region points (the mesh's plus the offset at the cut)
        self._key = dict(T=T, use=use, t=(t - mu) / sd, J=J / sd, Hinv=np.linalg.inv(H / sd ** 2), origin=(x0, y0),
                         pts=p - [x0, y0], r=r, rotation=rotation)
        self._misses = 0

    def update(self, image: np.ndarray, points_px: np.ndarray, iris_radius_px: float,
               rotation: np.ndarray | None = None) -> np.ndarray:
        """The region points' picture positions (k, 2) in this frame: the mesh's points moved by the region's
        registered shift (the last shift where the registration fails). ``image`` is the picture or a crop of it
        and ``points_px`` the face mesh's points in the same coordinates."""
        cv2 = import_cv2()
        r = float(iris_radius_px)
        pts = np.asarray(points_px, float)[self._rows, :2]
        if not (np.isfinite(r) and r > 0 and np.isfinite(pts).all()):
            return pts + self.offset_px
        eyes = [np.asarray(points_px, float)[e, :2] for e in self._eyes]
        grey = _grey(image)
        k = self._key
        if (k is None or abs(k["r"] / r - 1.0) > RESCALE_FRACTION or self._misses >= PATIENCE_FRAMES
                or _turned(rotation, k["rotation"])):
            self._cut(grey, pts, eyes, r, rotation, self.offset_px)
            return pts + self.offset_px
        # the mesh's map from the key frame's region to this frame (its points moved by the current offset)
        G = _affine(k["pts"], pts + self.offset_px)
        if G is None:
            return self._miss(pts)
        T, use = k["T"], k["use"]
        hh, ww = T.shape
        d = np.zeros(2)  # the shift in key-frame pixels, composed onto G
        ok = False
        for _ in range(MAX_STEPS):
            M = G.copy()
            M[:, 2] = G[:, 2] + G[:, :2] @ d
            win = cv2.warpAffine(grey, M, (ww, hh), flags=cv2.INTER_LINEAR | cv2.WARP_INVERSE_MAP,
                                 borderMode=cv2.BORDER_REPLICATE)
            v = win[use].astype(np.float64)
            sd = v.std()
            if not sd > 1e-3:
                break
            e = (v - v.mean()) / sd - k["t"]
            step = k["Hinv"] @ (k["J"].T @ e)
            d = d - step
            if not np.isfinite(d).all() or np.hypot(*d) > MAX_SHIFT_RADII * r:
                break
            if np.hypot(*step) < STOP_STEP_PX:
                ok = True
                break
        else:  # the step limit reached before the step fell below STOP_STEP_PX: not converged, a miss
            self.unconverged += 1
        if not ok:
            return self._miss(pts)
        self.offset_px = self.offset_px + G[:, :2] @ d
        self.registered += 1
        self._misses = 0
        return pts + self.offset_px

    def _miss(self, pts):
        self._misses += 1
        self.failed += 1
        return pts + self.offset_px
