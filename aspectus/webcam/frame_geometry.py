"""Per-frame geometry (head pose, iris refinement) beside the face mesh.

For every frame the face mesh has landmarked, :class:`FrameGeometry` solves
the head pose, refits its translation to skin points below the eyes followed
on the picture (:mod:`aspectus.webcam.eye_anchors`) and refines both iris centres
from the picture, giving one row of the per-frame record (layout:
:data:`RECORD_COLUMNS`; the ``t_mm`` column holds the refitted translation). This work is
Python and NumPy and holds the interpreter lock for about 2 ms a frame, as
long as the face mesh's own Python share; run in a thread of the same
process it keeps the mesh waiting for the lock. So for clips of more than a
few seconds it runs in a separate process (:class:`GeometryProcess`) that
receives only what it needs: the landmarks and a crop of the picture around
both eyes and the skin below them (about 55 kB at 720p). Short clips, a bundled (frozen) application and
processes that cannot start a child use a thread (:class:`GeometryThread`). Both give identical rows (a test compares them).
"""
from __future__ import annotations

import functools
import os
import pickle
import queue
import subprocess
import sys
import threading
from pathlib import Path

import numpy as np

from aspectus.webcam.eye_anchors import (ANCHOR_SET_CHOICES, ANCHOR_SETS, AUTO_SMALL_FACE_SET, DEFAULT_ANCHOR_SET,
                                         MIN_ANCHOR_RADIUS_PX, REGION_SETS, TURN_LIMITED_SETS, WIDE_SETS,
                                         EyeAnchorTracker, anchor_radius_px, anchor_reach_px,
                                         translation_given_rotation, turn_away_limits_deg)
from aspectus.webcam.gaze import SMALL_FACE_BELOW_PX, frame_measurements
from aspectus.webcam.iris_appearance import DECIDE_FRAMES, PATCH_BYTES, EyePatchSampler, small_iris
from aspectus.webcam.headpose import HeadPoseSolver
from aspectus.webcam.landmarks import LEFT_IRIS_CENTRE, LEFT_IRIS_RING, RIGHT_IRIS_CENTRE, RIGHT_IRIS_RING
from aspectus.webcam.limbus import (CONTRAST_MIN_FRAMES, MIN_IRIS_CONTRAST_PCT, ROI_RADII, limbus_centres_variants,
                                    pupil_centre)
from aspectus.webcam.skin_pose import SKIN_POSE_POINTS, SkinPose
from aspectus.webcam.skin_region import SkinRegionTracker

#: columns of one row of the per-frame record (the width of each block in brackets)
RECORD_COLUMNS = (("pts_s", 1), ("found", 1), ("face_count", 1), ("R", 9), ("t_mm", 3), ("iris_px", 4),
                  ("iris_diam_px", 2), ("corners_px", 8), ("ear", 2), ("iris_mesh_px", 4), ("t_small_face_mm", 3),
                  ("limbus_diam_px", 2), ("limbus_contrast_pct", 2))
#: with ``anchor_set="auto"``: the translation refitted to :data:`aspectus.webcam.eye_anchors.AUTO_SMALL_FACE_SET`
#: (NaN once the first frames have shown a face that is not small, and with any other set); ``t_mm`` holds the
#: one refitted to :data:`aspectus.webcam.eye_anchors.DEFAULT_ANCHOR_SET`, and the pipeline takes one of the two
SMALL_FACE_T_COLUMNS = slice(35, 38)
RECORD_WIDTH = sum(n for _, n in RECORD_COLUMNS)
#: the record's columns of both eyes' limbus-fit diameters, px (NaN where the fit failed or did not run): the
#: iris scale (:func:`aspectus.webcam.gaze.limbus_iris_scale`); 16 bytes a frame, some 1.7 MB an hour at 30 fps
LIMBUS_DIAM = slice(RECORD_WIDTH - 4, RECORD_WIDTH - 2)
#: the record's columns of both eyes' iris contrast against the sclera about the limbus fit's circle, % (NaN where not
#: measured; :func:`aspectus.webcam.limbus.limbus_contrast`): the clip's check of the iris's contrast
LIMBUS_CONTRAST = slice(RECORD_WIDTH - 2, RECORD_WIDTH)
#: columns that follow those with ``appearance`` on (:mod:`aspectus.webcam.iris_appearance`): whether each
#: eye's limbus fit succeeded (1/0), each eye's patch frame (2 x 2 x 3, NaN where the frame has no patch), the
#: limbus fits the appearance estimate learns from (centres, diameters; NaN where the frame was not fitted that
#: way): those without the side-arc rule (``side_arcs``, :data:`aspectus.webcam.limbus.SIDE_DEG`), which
#: ``iris_px`` and ``limbus_diam_px`` then hold only where the limbus fit is itself the gaze estimate - and both
#: eyes' patches, uint8 bytes carried in float64 columns (read back with ``.view(np.uint8)``); ``limbus_ok`` is
#: that of the label fits where a frame has them
APPEARANCE_COLUMNS = (("limbus_ok", 2), ("patch_affine", 12), ("label_iris_px", 4), ("label_diam_px", 2),
                      ("patches", PATCH_BYTES // 8))
#: offsets of the label fits' columns and of the patches from :data:`RECORD_WIDTH` (rows with ``appearance`` on)
LABEL_IRIS = slice(14, 18)
LABEL_DIAM = slice(18, 20)
PATCHES_AT = 20
APPEARANCE_WIDTH = sum(n for _, n in APPEARANCE_COLUMNS)


def decision_limbus_diam(rows: np.ndarray) -> np.ndarray:
    """Both eyes' limbus-fit diameters (M, 2) of record rows (M, >= RECORD_WIDTH), as the ``"auto"`` settings' iris
    size reads them: :data:`LIMBUS_DIAM`, or where a row holds the appearance estimate's label fits (``side_arcs``
    with the appearance columns: both fits made) theirs - the fits without the side-arc rule, on which the size rule
    was measured."""
    rows = np.asarray(rows, float)
    d = np.array(rows[:, LIMBUS_DIAM], float)
    w = RECORD_WIDTH
    if rows.shape[1] >= w + LABEL_DIAM.stop:
        has = np.isfinite(rows[:, w + LABEL_IRIS.start:w + LABEL_IRIS.stop]).all(axis=1)
        d[has] = rows[has, w + LABEL_DIAM.start:w + LABEL_DIAM.stop]
    return d


def first_frames_small_iris(rows: np.ndarray, below_px: float) -> tuple[bool, dict]:
    """:func:`aspectus.webcam.iris_appearance.small_iris` on the record rows (M, >= RECORD_WIDTH) of the first frames
    with a face: their face-mesh and limbus-fit iris diameters (:func:`decision_limbus_diam`) and eye aspect ratios.
    ``eye_anchor_set="auto"``'s first-frames decision in the per-frame geometry (whether the face is small)."""
    rows = np.asarray(rows, float)
    if rows.ndim != 2:  # no rows
        rows = rows.reshape(-1, RECORD_WIDTH)
    return small_iris(np.ones(len(rows), bool), rows[:, 19:21], decision_limbus_diam(rows), rows[:, 29:31],
                      below_px)

#: frames per message to the geometry process, and most frames per batch of limbus fits in either runner
#: (measured here: fitting 16 frames' eyes together costs 0.4-0.9 ms a frame, one frame at a time 1.2-2.0 ms;
#: the machine's speed drifts)
_BATCH = 16
#: clips shorter than this (frames) use the thread: starting a process costs about a second
PROCESS_MIN_FRAMES = 450


#: landmarks the eye crop is placed by: both iris centres, the horizontal ends of both iris outlines
#: (the diameters as :func:`aspectus.webcam.gaze.frame_measurements` measures them), then the eye anchors
_IRIS_CROP_POINTS = (RIGHT_IRIS_CENTRE, LEFT_IRIS_CENTRE, RIGHT_IRIS_RING[0], RIGHT_IRIS_RING[2],
                     LEFT_IRIS_RING[0], LEFT_IRIS_RING[2])


@functools.lru_cache(maxsize=16)
def _crop_points(anchor_set: str | None, skin_pose: bool) -> np.ndarray:
    """The landmarks the eye crop covers: the iris points, then the skin points of every anchor set but those
    further out (:data:`aspectus.webcam.eye_anchors.WIDE_SETS`), those only when ``anchor_set`` is one of them (or
    ``"auto"`` takes one for a small face), and, with ``skin_pose``, the skin points the head rotation is followed
    by. (One crop for the other settings: the same pixels, so ``"auto"`` gives what its set gives alone, bit for
    bit.)"""
    sets = [name for name in ANCHOR_SETS if name not in WIDE_SETS]
    for extra in (anchor_set, AUTO_SMALL_FACE_SET if anchor_set in (None, "auto") else None):
        if extra in WIDE_SETS:
            sets.append(extra)
    pts = tuple(dict.fromkeys(p for name in sets for p in ANCHOR_SETS[name]))
    if skin_pose:
        pts = pts + tuple(p for p in SKIN_POSE_POINTS if p not in pts)
    return np.array(_IRIS_CROP_POINTS + pts)


def eye_crop_box(points_px: np.ndarray, size_px: tuple[int, int], *, skin_pose: bool = False,
                 anchor_set: str | None = None) -> tuple[int, int, int, int] | None:
    """``(x0, y0, x1, y1)``: the part of the picture the iris refinement and the eye anchors read, or None.

    The union of the limbus fit's two eye regions (:data:`aspectus.webcam.limbus.ROI_RADII`
    iris radii around each mesh iris point) with a 2 px margin and of the
    eye anchors' reach (:func:`aspectus.webcam.eye_anchors.anchor_reach_px` around
    each anchor's mesh point), clipped to the picture. With ``skin_pose`` the
    same reach around the skin points the head rotation is followed by
    (:data:`aspectus.webcam.skin_pose.SKIN_POSE_POINTS`: most of the face). ``anchor_set`` (the
    ``GazeParams.eye_anchor_set``; None: ``"auto"``) says which anchor points it must cover.
    """
    w, h = size_px
    # read straight from the landmarks (this runs on the face mesh's thread, which sets the pipeline's pace)
    p = np.asarray(points_px)[_crop_points(anchor_set, bool(skin_pose)), :2]
    c, ends = p[:2], p[2:6]
    r = 0.5 * np.sqrt(np.square(ends[0::2] - ends[1::2]).sum(axis=1))  # half the iris diameters
    if not (np.isfinite(c).all() and np.isfinite(r).all()):
        return None
    reach = (ROI_RADII * r + 2.0)[:, None]
    lo, hi = (c - reach).min(axis=0), (c + reach).max(axis=0)
    a = p[6:]
    if np.isfinite(a).all():
        a_reach = anchor_reach_px(anchor_radius_px(2.0 * r))
        lo = np.minimum(lo, a.min(axis=0) - a_reach)
        hi = np.maximum(hi, a.max(axis=0) + a_reach)
    x0 = int(max(0, np.floor(lo[0])))
    y0 = int(max(0, np.floor(lo[1])))
    x1 = int(min(w, np.ceil(hi[0]) + 1))
    y1 = int(min(h, np.ceil(hi[1]) + 1))
    if x1 <= x0 or y1 <= y0:
        return None
    return x0, y0, x1, y1


class FrameGeometry:
    """Head pose and eye measurements of one frame, as one record row.

    Parameters
    ----------
    fov_deg : float
        Assumed horizontal field of view of the camera.
    refine_iris : bool
        Refine the iris centres by the limbus fit.
    eye_anchors : bool
        With the eye picture (``refine_iris``): refit the head translation,
        with the PnP rotation held, to skin points below the eyes followed on
        the picture (:mod:`aspectus.webcam.eye_anchors`; default True). False keeps
        the PnP translation, which the face mesh's landmark errors under head
        rotation move by about a millimetre at 5 deg.
    anchor_set : str
        Which skin points are followed (a key of :data:`aspectus.webcam.eye_anchors.ANCHOR_SETS`), or
        ``"auto"``: :data:`aspectus.webcam.eye_anchors.DEFAULT_ANCHOR_SET` into ``t_mm`` and, while the first
        :data:`aspectus.webcam.iris_appearance.DECIDE_FRAMES` frames with a face show a small iris
        (:func:`aspectus.webcam.iris_appearance.small_iris` below
        :data:`aspectus.webcam.gaze.SMALL_FACE_BELOW_PX`) and after them if they did, also
        :data:`aspectus.webcam.eye_anchors.AUTO_SMALL_FACE_SET` into :data:`SMALL_FACE_T_COLUMNS` (its extra
        points followed by a tracker of their own, so the first set's rows are those it gives alone).
    skin_pose : bool
        With the eye picture (``refine_iris``): the head rotation from skin
        points over the face followed on the picture
        (:mod:`aspectus.webcam.skin_pose`) instead of PnP on the face mesh's
        points, which follows the gaze. The picture handed in must then be
        the crop ``eye_crop_box(..., skin_pose=True)`` gives (or the whole picture).
    appearance : bool
        With the eye picture and the anchors: also sample both eyes into patches in the anchors' frame
        (:class:`aspectus.webcam.iris_appearance.EyePatchSampler`) and record whether each limbus fit
        succeeded; the rows are then :data:`APPEARANCE_WIDTH` columns wider (:data:`APPEARANCE_COLUMNS`).
    iris_shape : bool
        With ``refine_iris``: fit the iris as the ellipse its circle fit's centre predicts, measured from the
        eyeball centres the head model places under the frame's pose (:meth:`_eyeball_px`;
        ``GazeParams.iris_shape="ellipse"``, :func:`aspectus.webcam.limbus.iris_shape`); default False (a circle).
    side_arcs : bool
        With ``refine_iris``: fit the limbus with the side-arc rule (``GazeParams.side_arcs``,
        :func:`aspectus.webcam.limbus.limbus_centres_many`) where the fit is itself the gaze estimate. With
        ``appearance`` too both fits are made: the fit with the rule into the iris columns, the one without into
        the label columns the appearance estimate learns from (it was measured on those). Default False.
    """

    def __init__(self, *, fov_deg: float, refine_iris: bool, eye_anchors: bool = True,
                 anchor_set: str = DEFAULT_ANCHOR_SET, skin_pose: bool = False, appearance: bool = False,
                 iris_shape: bool = False, side_arcs: bool = False):
        self.fov_deg = float(fov_deg)
        self.side_arcs = bool(side_arcs)
        self.appearance = bool(appearance)
        self.width = RECORD_WIDTH + (APPEARANCE_WIDTH if self.appearance else 0)
        self.sampler = EyePatchSampler()
        self._last_anchors: np.ndarray | None = None
        self._last_all: np.ndarray | None = None  # this frame's followed points of the anchor set
        self.refine_iris = bool(refine_iris)
        self.iris_shape = bool(iris_shape)
        self._eyes_model: np.ndarray | None = None
        self.eye_anchors = bool(eye_anchors)
        self.skin = SkinPose() if skin_pose else None
        self.solver: HeadPoseSolver | None = None
        self.size: tuple[int, int] | None = None
        self.size_changes = 0
        self.auto_anchors = anchor_set == "auto"
        if self.auto_anchors:
            anchor_set = DEFAULT_ANCHOR_SET
        # the tracker always follows the points below the eyes first (the eye patches' frames are placed by them,
        # whatever the set), then the set's other points; the refit uses the set's own points
        base = ANCHOR_SETS[DEFAULT_ANCHOR_SET]
        own = ANCHOR_SETS[anchor_set]
        # a region set: the region's tracker places the set's points; the point tracker follows only those below
        self._region = SkinRegionTracker() if anchor_set in REGION_SETS else None
        tracked = base + (() if self._region is not None else tuple(p for p in own if p not in base))
        self.anchors = EyeAnchorTracker(tracked)
        self._fit_rows = (None if self._region is not None
                          else np.array([tracked.index(p) for p in own], dtype=np.intp))
        self._tracked_model = self.anchors_model_mm(tracked)
        self._anchors_model = self.anchors_model_mm(own)
        # "auto": the small-face set's points not followed already, their own tracker (per-point tracking: the same
        # offsets as in one tracker of the whole set), the rows of the set's points among all followed points, and
        # its refit's model points in the set's order
        self._small = None
        self.small_face: bool | None = None  # the decision, once made
        if self.auto_anchors:
            # the small-face set is a set of points (a region set would need its own tracker here)
            assert AUTO_SMALL_FACE_SET not in REGION_SETS, AUTO_SMALL_FACE_SET
            small_pts = ANCHOR_SETS[AUTO_SMALL_FACE_SET]
            extra = tuple(p for p in small_pts if p not in tracked)
            self._small = EyeAnchorTracker(extra)
            self._small_rows = np.array([(tracked + extra).index(p) for p in small_pts], dtype=np.intp)
            self._small_model = self.anchors_model_mm(small_pts)
            self._small_minus_pnp: np.ndarray | None = None
        # the sets that leave out a point beside an eye while the head is turned away from it: per point, the
        # yaw limit and the sign of yaw that turns the head away from it (+ for the subject's right, model x < 0)
        self._turn_limits = None
        if anchor_set in TURN_LIMITED_SETS:
            from aspectus.webcam.headpose import face_model

            pts_mm = face_model().points_mm
            self._turn_limits = (turn_away_limits_deg(own, pts_mm),
                                 -np.sign(self._anchors_model[:, 0]))
        self._anchors_on_mesh = None  # see place_anchors_on_mesh
        # anchor_set "auto": the first frames' record rows with a face (with the appearance columns before the
        # patches), until the one decision is made
        self._decide_width = RECORD_WIDTH + (PATCHES_AT if self.appearance else 0)
        self._first_rows: list | None = [] if self.auto_anchors else None
        self.anchored_frames = 0
        self.unanchored_frames = 0
        # each eye's iris contrasts so far, counted in 1 % bins from -100 to 100 %: where their median is low the
        # eye's centre is its pupil's (a median over the clip so far at the cost of a histogram, for hour-long clips)
        self._contrasts = np.zeros((2, 201), np.int64)
        self.pupil_eye_frames = 0
        self._anchor_minus_pnp: np.ndarray | None = None

    @staticmethod
    def anchors_model_mm(points=ANCHOR_SETS[DEFAULT_ANCHOR_SET]) -> np.ndarray:
        from aspectus.webcam.headpose import face_model

        return face_model().points_mm[list(points)].astype(np.float64)

    def row(self, pts_s: float, size_px: tuple[int, int], points_px: np.ndarray | None, face_count: int,
            eyes: np.ndarray | None = None, eyes_origin_px=(0, 0)) -> np.ndarray:
        """One record row.

        ``eyes`` is the picture (or the crop of it at ``eyes_origin_px`` that
        :func:`eye_crop_box` gives) the iris refinement reads.
        """
        return self.rows([(pts_s, size_px, points_px, face_count, eyes, eyes_origin_px)])[0]

    def rows(self, items) -> np.ndarray:
        """The rows of consecutive frames, ``items`` as :func:`frame_item` gives them; (len(items), width).

        The same rows as :meth:`row` frame by frame; the limbus fits of all
        the frames' eyes run together (:func:`aspectus.webcam.limbus.limbus_centres_many`),
        which costs a fraction of fitting them one frame at a time. (Head
        pose and eye anchors follow the frames in order, as they must.)
        """
        out = np.full((len(items), self.width), np.nan)
        fits = []  # (row index, (limbus arguments, crop origin), which fits)
        first = []  # "auto": this batch's rows with a face still to enter the first frames' decision
        for k, item in enumerate(items):
            out[k], job = self._row_before_iris(*item)
            if job is not None:
                fits.append((k, job, self._fit_variant()))
            if self._first_rows is not None and out[k, 1] > 0.5:
                first.append(k)
                if len(self._first_rows) + len(first) >= DECIDE_FRAMES:
                    # the decision reads the limbus fits of its frames, and acts from the next frame on whatever
                    # the batches are: the fits so far run now, the rest of the batch's after it
                    self._limbus_fits(out, fits)
                    fits = []
                    self._first_rows.extend(out[first, :self._decide_width])
                    first = []
                    self._decide_small()
        self._limbus_fits(out, fits)
        if self._first_rows is not None:
            self._first_rows.extend(out[first, :self._decide_width])
        return out

    def _limbus_fits(self, out: np.ndarray, fits: list) -> None:
        """Run the limbus fits of ``fits`` ((row index, job of :meth:`_row_before_iris`, variant) into their rows of
        ``out``."""
        if fits:
            fits_job = {k: job[0] for k, job, _ in fits}
            eyeballs = [job[2] for _, job, _ in fits] if self.iris_shape else None
            plain, side = limbus_centres_variants([job[0] for _, job, _ in fits], [v for *_, v in fits],
                                                  diameters=True, eyeball_px=eyeballs, contrast=True)
            w = RECORD_WIDTH
            for j, (k, (_, off, *_e), _v) in enumerate(fits):
                if plain[j] is not None:
                    # the histogram of iris contrasts follows the fits without the side-arc rule where there are any
                    iris, ok, diam = self._pupil_where_faint(fits_job[k], *plain[j])
                    if self.appearance:
                        out[k, w:w + 2] = ok
                        if self.side_arcs:  # the appearance estimate's labels, apart from the gaze estimate's fits
                            out[k, w + LABEL_IRIS.start:w + LABEL_IRIS.stop] = (iris + off).ravel()
                            out[k, w + LABEL_DIAM.start:w + LABEL_DIAM.stop] = diam
                    out[k, LIMBUS_CONTRAST] = plain[j][3]
                if side[j] is not None:
                    iris, ok, diam = self._pupil_where_faint(fits_job[k], *side[j], count=plain[j] is None)
                    if self.appearance and plain[j] is None:
                        out[k, w:w + 2] = ok
                    if plain[j] is None:
                        out[k, LIMBUS_CONTRAST] = side[j][3]
                out[k, 15:19] = (iris + off).ravel()
                out[k, LIMBUS_DIAM] = diam

    def _fit_variant(self) -> str:
        """Which limbus fits the frame just placed needs (:func:`aspectus.webcam.limbus.limbus_centres_variants`):
        ``"plain"`` without the side-arc rule, ``"side"`` with it, ``"both"`` (``side_arcs`` with ``appearance``:
        the appearance estimate learns from the fits without the rule)."""
        if not self.side_arcs:
            return "plain"
        return "both" if self.appearance else "side"

    def _pupil_where_faint(self, job, iris, ok, diam, step, count: bool = True):
        """An eye whose frames so far show too little iris contrast (the median of at least
        :data:`CONTRAST_MIN_FRAMES` frames' contrasts below :data:`MIN_IRIS_CONTRAST_PCT`: a light iris) takes its
        pupil's centre (:func:`aspectus.webcam.limbus.pupil_centre`) rather than the limbus fit's, and the mesh's
        iris diameter. The median of the eye's frames, not the frame's own figure, decides: on dark irises single
        frames dip below it (a blink, compression), and so do the medians of stretches of 30 frames - switching
        there made the gaze worse (docs/notes/gaze-measurement.md). ``count``: the frame's contrasts enter the
        histogram (False for a frame's second fit)."""
        image, points_px, iris_px, iris_diam_px = job
        for e in (0, 1):
            h = self._contrasts[e]
            if count and np.isfinite(step[e]):
                h[int(np.clip(np.round(step[e]), -100, 100)) + 100] += 1
            n = int(h.sum())
            if n < CONTRAST_MIN_FRAMES:
                continue
            median = float(np.searchsorted(np.cumsum(h), (n + 1) // 2)) - 100.0  # the lower median, whole %
            if median >= MIN_IRIS_CONTRAST_PCT:
                continue
            p = pupil_centre(image, points_px, iris_px[e], float(iris_diam_px[e]), e)
            if p is None:
                continue
            iris, ok, diam = np.array(iris, float), np.array(ok, bool), np.array(diam, float)
            iris[e], ok[e], diam[e] = p, True, float(iris_diam_px[e])
            self.pupil_eye_frames += int(count)
        return iris, ok, diam

    def _row_before_iris(self, pts_s, size_px, points_px, face_count, eyes=None, eyes_origin_px=(0, 0)):
        """One frame's row with the mesh's iris centres, and the limbus fit still to run for it (or None)."""
        w, h = size_px
        if self.size != (w, h):
            if self.size is not None:
                self.size_changes += 1
            self.size = (w, h)
            self.solver = HeadPoseSolver(w, h, fov_deg=self.fov_deg)
            self.anchors.reset()
            if self._region is not None:
                self._region.reset()
            if self._small is not None:
                self._small.reset()
                self._small_minus_pnp = None
            self.sampler.reset()
            self._anchor_minus_pnp = None
            if self.skin is not None:
                self.skin.reset()
        row = np.full(self.width, np.nan)
        row[0] = pts_s
        row[1] = 0.0
        row[2] = face_count  # faces in view, the followed one or not
        # The anchors are kept through frames without a face or a pose: starting again from the mesh's
        # points would drop the skin-minus-mesh offsets followed so far and move the head translation -
        # and the gaze, by 1-2 deg - for the rest of the clip. Only a new picture size starts them afresh.
        if points_px is None:
            return row, None
        pose = self.solver.solve(points_px)
        if pose is None:
            return row, None
        R, t = pose
        m = frame_measurements(points_px)
        if self.skin is not None:
            R = self._skin_rotation(R, t, m, eyes, points_px, eyes_origin_px)
        iris = m["iris_px"]
        job = None
        if self.refine_iris and eyes is not None:
            off = np.array([eyes_origin_px[0], eyes_origin_px[1], 0.0])
            local = points_px - off
            job = ((eyes, local, iris - off[:2], m["iris_diam_px"]), off[:2])
        self._last_anchors = self._last_all = None
        if self.eye_anchors:
            t_pnp = t
            t = self._anchored_translation(R, t, m, eyes, points_px, eyes_origin_px)
            if self._small is not None and self.small_face is not False:
                row[SMALL_FACE_T_COLUMNS] = self._small_translation(R, t_pnp, m, eyes, points_px, eyes_origin_px)
        if self.appearance:
            self._appearance_columns(row, m, eyes, eyes_origin_px)
        row[1] = 1.0
        row[3:12] = R.ravel()
        row[12:15] = t
        row[15:19] = iris.ravel()
        row[19:21] = m["iris_diam_px"]
        row[21:29] = m["corners_px"].ravel()
        row[29:31] = m["ear"]
        row[31:35] = m["iris_px"].ravel()
        if job is not None and self.iris_shape:
            job = job + (self._eyeball_px(R, t) - job[1],)
        return row, job

    def _eyeball_px(self, R: np.ndarray, t: np.ndarray) -> np.ndarray:
        """Both eyeball centres' picture positions (right, left; px) by the head model under this frame's pose:
        where the iris shape the limbus fit expects is measured from (:func:`aspectus.webcam.limbus.iris_shape`)."""
        if self._eyes_model is None:
            from aspectus.webcam.headpose import face_model

            model = face_model()
            self._eyes_model = np.stack([model.eye_right_mm, model.eye_left_mm]).astype(np.float64)
        X = self._eyes_model @ np.asarray(R, float).T + np.asarray(t, float)
        p = X @ np.asarray(self.solver.K, float).T
        return p[:, :2] / p[:, 2:3]

    def _skin_rotation(self, R_mesh, t_mesh, m, eyes, points_px, eyes_origin_px) -> np.ndarray:
        """The head rotation from the skin points (:class:`aspectus.webcam.skin_pose.SkinPose`), or where they
        cannot be followed (no picture, an iris too small) the mesh's turned by the last solved difference."""
        r_px = anchor_radius_px(m["iris_diam_px"])
        if eyes is not None and np.isfinite(r_px) and r_px >= MIN_ANCHOR_RADIUS_PX:
            return self.skin.update(eyes, points_px, eyes_origin_px, r_px, self.solver.K, R_mesh, t_mesh)
        return self.skin.fallback(R_mesh)

    def _appearance_columns(self, row, m, eyes, eyes_origin_px) -> None:
        """The limbus-fit flags (0 until a fit succeeds), the patch frames and the patches of one frame."""
        w = RECORD_WIDTH
        row[w:w + 2] = 0.0
        if eyes is None or self._last_anchors is None:
            return
        A = self.sampler.affines(self._last_anchors, m["corners_px"])
        if A is None:
            return
        patches = self.sampler.sample(eyes, eyes_origin_px, A)
        if patches is None:
            return
        row[w + 2:w + 14] = A.ravel()
        row[w + PATCHES_AT:] = np.ascontiguousarray(patches).reshape(-1).view(np.float64)

    def _decide_small(self) -> None:
        """``anchor_set="auto"``'s one decision, from the frames with a face seen so far (then no more): whether the
        face is small (:func:`first_frames_small_iris`: :func:`aspectus.webcam.iris_appearance.small_iris` on those
        frames' rows - their limbus fits' diameters over the open-eye frames, the face mesh's with too few fits -
        below :data:`aspectus.webcam.gaze.SMALL_FACE_BELOW_PX`)."""
        if self._first_rows is None:
            return
        first = np.array(self._first_rows, float).reshape(-1, self._decide_width)
        self._first_rows = None
        self.small_face = first_frames_small_iris(first, SMALL_FACE_BELOW_PX)[0]

    def _small_translation(self, R, t_pnp, m, eyes, points_px, eyes_origin_px) -> np.ndarray:
        """``anchor_set="auto"``: the translation refitted to the small-face set (:meth:`_anchored_translation`
        for that set: the points below the eyes as followed for ``t_mm``, the extra ones by their own tracker)."""
        r_px = anchor_radius_px(m["iris_diam_px"])
        if eyes is not None and np.isfinite(r_px) and r_px >= MIN_ANCHOR_RADIUS_PX and self._last_all is not None:
            off = np.array([eyes_origin_px[0], eyes_origin_px[1], 0.0])
            p = np.vstack([self._last_all, self._small.update(eyes, points_px - off, r_px) + off[:2]])
            p = p[self._small_rows]
            t_s = translation_given_rotation(R, self._small_model, p, self.solver.K)
            if t_s is not None:
                self._small_minus_pnp = t_s - t_pnp
                return t_s
        return t_pnp if self._small_minus_pnp is None else t_pnp + self._small_minus_pnp

    def _anchored_translation(self, R, t_pnp, m, eyes, points_px, eyes_origin_px) -> np.ndarray:
        """The head translation refitted to the eye anchors, the rotation held.

        Where the refit cannot run (no eye picture, an iris too small to
        measure, a refit that fails), the PnP translation plus the last
        anchored frame's difference from PnP: the two differ by a slowly
        changing offset (about 1 mm sideways and 30 mm in depth on the demo
        clip), which a switch to plain PnP would turn into a jump of the gaze.
        """
        r_px = anchor_radius_px(m["iris_diam_px"])
        if eyes is not None and np.isfinite(r_px) and r_px >= MIN_ANCHOR_RADIUS_PX:
            off = np.array([eyes_origin_px[0], eyes_origin_px[1], 0.0])
            a = self.anchors.update(eyes, points_px - off, r_px) + off[:2]
            self._last_anchors = a[:6].copy()  # the tracker follows the six points below the eyes first
            self._last_all = a
            model = self._anchors_model
            if self._region is not None:
                a = self._region.update(eyes, points_px - off, r_px, rotation=R) + off[:2]
            else:
                if self._anchors_on_mesh is not None:
                    model = self._anchors_3d(R, t_pnp, points_px, a)[self._fit_rows]
                a = a[self._fit_rows]
            if self._turn_limits is not None:
                limit, away_sign = self._turn_limits
                yaw = float(np.degrees(np.arctan2(R[0, 2], R[2, 2])))  # aspectus.geometry.rotation_to_head_angles
                keep = away_sign * yaw <= limit
                if not keep.all():
                    model, a = model[keep], a[keep]
            t_a = translation_given_rotation(R, model, a, self.solver.K)
            if t_a is not None:
                self.anchored_frames += 1
                self._anchor_minus_pnp = t_a - t_pnp
                return t_a
        self.unanchored_frames += 1
        return t_pnp if self._anchor_minus_pnp is None else t_pnp + self._anchor_minus_pnp

    def place_anchors_on_mesh(self) -> None:
        """With the skin rotation (``skin_pose``): put the eye anchors' head-frame points on the face mesh's
        surface when their templates are cut, as the skin points are, instead of at the face model's points.
        Measured and left off (docs/notes/gaze-measurement.md: better on 25 px turning faces, worse at 12 px)."""
        if self.skin is None or not self.skin.mesh_depth:
            raise ValueError("the anchors go on the face mesh's surface only with the skin rotation on it")
        if self._region is not None:
            raise ValueError("the anchors go on the face mesh's surface only when followed point by point")
        self._anchors_on_mesh = np.full((len(self.anchors.points), 3), np.nan)

    def _anchors_3d(self, R, t_pnp, points_px, a) -> np.ndarray:
        """With the skin rotation on the face mesh's surface: the anchors' head-frame points put on the same
        surface when their templates are cut (as the skin points are), under this frame's rotation and the
        best translation known (PnP plus the last anchored difference); the model's points until then."""
        X = self._anchors_on_mesh
        cut = self.anchors.last_cut
        if cut.any():
            t = t_pnp if self._anchor_minus_pnp is None else t_pnp + self._anchor_minus_pnp
            lifted = self.skin._lifted(points_px, self.solver.K, R, t)
            if lifted is not None:
                for j in np.flatnonzero(cut):
                    X[j] = self.skin.on_surface(a[j], self.solver.K, R, t, lifted, self.anchors.points[j])
        return np.where(np.isfinite(X), X, self._tracked_model)

    def state(self) -> dict:
        self._decide_small()  # a clip shorter than the deciding frames
        return {"K": None if self.solver is None else self.solver.K, "size": self.size,
                "small_face": self.small_face if self.auto_anchors else None,
                "size_changes": self.size_changes, "anchored_frames": self.anchored_frames,
                "unanchored_frames": self.unanchored_frames, "anchor_matches": self.anchors.matched,
                "pupil_eye_frames": self.pupil_eye_frames,
                "anchor_misses": self.anchors.missed,
                "region_registered": None if self._region is None else self._region.registered,
                "region_failed": None if self._region is None else self._region.failed,
                "skin_pose_frames": None if self.skin is None else self.skin.solved_frames,
                "skin_pose_fallback_frames": None if self.skin is None else self.skin.fallback_frames}


def peak_rss_mb() -> float | None:
    """This process's peak resident set size in MB (None where the platform does not say).

    On Linux from ``VmHWM`` in /proc/self/status: ``ru_maxrss`` would also
    count the moment between fork and exec when the child was still a copy
    of its (much larger) parent.
    """
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("VmHWM:"):
                    return round(int(line.split()[1]) / 1024.0, 1)  # kB
    except (OSError, ValueError, IndexError):
        pass
    try:
        import resource
    except ImportError:  # Windows
        return None
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return round(peak / (2**20 if sys.platform == "darwin" else 2**10), 1)  # bytes on macOS, KiB elsewhere


def frame_item(pts_s: float, image: np.ndarray, obs, *, refine_iris: bool, faces_in_view: int = 0,
               skin_pose: bool = False, anchor_set: str | None = None) -> tuple:
    """What the geometry of one frame needs, with the picture cut down to the eyes (with ``skin_pose``, to the
    eyes and the skin points the head rotation is followed by).

    ``faces_in_view`` is the face count recorded when the followed face was not found (``obs`` None):
    other faces may be in view.
    """
    h, w = image.shape[:2]
    if obs is None:
        return pts_s, (w, h), None, int(faces_in_view), None, (0, 0)
    eyes, origin = None, (0, 0)
    if refine_iris:
        box = eye_crop_box(obs.points_px, (w, h), skin_pose=skin_pose, anchor_set=anchor_set)
        if box is not None:
            x0, y0, x1, y1 = box
            eyes, origin = np.ascontiguousarray(image[y0:y1, x0:x1]), (x0, y0)
    return pts_s, (w, h), obs.points_px, obs.face_count, eyes, origin


class GeometryThread:
    """Runs :class:`FrameGeometry` on a worker thread of this process."""

    kind = "thread"

    def __init__(self, *, fov_deg: float, refine_iris: bool, sink, eye_anchors: bool = True,
                 anchor_set: str = DEFAULT_ANCHOR_SET, skin_pose: bool = False, appearance: bool = False,
                 iris_shape: bool = False, side_arcs: bool = False):
        self._geo = FrameGeometry(fov_deg=fov_deg, refine_iris=refine_iris, eye_anchors=eye_anchors,
                                  anchor_set=anchor_set, skin_pose=skin_pose, appearance=appearance,
                                  iris_shape=iris_shape,
                                  side_arcs=side_arcs)
        self._sink = sink
        self._q: queue.Queue = queue.Queue(maxsize=2 * _BATCH)  # room for a whole batch of limbus fits
        self._failure: list[BaseException] = []
        self._thread = threading.Thread(target=self._run, name="aspectus-geometry", daemon=True)
        self._thread.start()

    def _run(self):
        done = False
        try:
            while not done:
                batch = [self._q.get()]  # waits for one frame, then takes what else is queued
                while len(batch) < _BATCH:
                    try:
                        batch.append(self._q.get_nowait())
                    except queue.Empty:
                        break
                if any(item is None for item in batch):
                    done = True
                    batch = batch[: next(k for k, item in enumerate(batch) if item is None)]
                if batch:
                    for r in self._geo.rows(batch):
                        self._sink(r)
        except BaseException as exc:  # noqa: BLE001 - handed to the submitting thread
            self._failure.append(exc)
            while not done and self._q.get() is not None:  # drain so the producer never blocks
                pass

    def check(self) -> None:
        if self._failure:
            raise self._failure[0]

    def submit(self, item: tuple) -> None:
        self._q.put(item)

    def finish(self) -> dict:
        self._q.put(None)
        self._thread.join()
        self.check()
        return self._geo.state()

    def abort(self) -> None:
        self._q.put(None)
        self._thread.join(timeout=10)


class GeometryInline:
    """Runs :class:`FrameGeometry` in the calling thread, in batches of :data:`_BATCH` frames (the same
    batches as :class:`GeometryProcess`): no hand-over at all, for a pipeline whose stages run one after
    the other on one core (batch workers: one clip per core)."""

    kind = "inline"

    def __init__(self, *, fov_deg: float, refine_iris: bool, sink, eye_anchors: bool = True,
                 anchor_set: str = DEFAULT_ANCHOR_SET, skin_pose: bool = False, appearance: bool = False,
                 iris_shape: bool = False, side_arcs: bool = False):
        self._geo = FrameGeometry(fov_deg=fov_deg, refine_iris=refine_iris, eye_anchors=eye_anchors,
                                  anchor_set=anchor_set, skin_pose=skin_pose, appearance=appearance,
                                  iris_shape=iris_shape,
                                  side_arcs=side_arcs)
        self._sink = sink
        self._pending: list = []

    def check(self) -> None:
        pass

    def _flush(self) -> None:
        if self._pending:
            for r in self._geo.rows(self._pending):
                self._sink(r)
            self._pending = []

    def submit(self, item: tuple) -> None:
        self._pending.append(item)
        if len(self._pending) >= _BATCH:
            self._flush()

    def finish(self) -> dict:
        self._flush()
        return self._geo.state()

    def abort(self) -> None:
        self._pending = []


def child_main(argv=None) -> int:
    """Entry point of the geometry child: pickled batches in on stdin, pickled replies out on stdout.

    Started by :class:`GeometryProcess` with the arguments
    ``FOV_DEG REFINE [ANCHORS [ANCHOR_SET [SKIN_POSE [APPEARANCE [IRIS_SHAPE [SIDE_ARCS]]]]]]``. Anything
    else that would print to stdout goes to stderr, so it cannot corrupt the replies.
    """
    args = list(sys.argv[1:] if argv is None else argv)
    fov_deg, refine_iris = float(args[0]), args[1] == "1"
    eye_anchors = len(args) < 3 or args[2] == "1"
    anchor_set = args[3] if len(args) > 3 else DEFAULT_ANCHOR_SET
    skin_pose = len(args) > 4 and args[4] == "1"
    appearance = len(args) > 5 and args[5] == "1"
    iris_shape = len(args) > 6 and args[6] == "1"
    side_arcs = len(args) > 7 and args[7] == "1"
    out = os.fdopen(os.dup(1), "wb")
    os.dup2(2, 1)  # stray prints from libraries go to stderr
    inp = sys.stdin.buffer
    geo = FrameGeometry(fov_deg=fov_deg, refine_iris=refine_iris, eye_anchors=eye_anchors, anchor_set=anchor_set,
                        skin_pose=skin_pose, appearance=appearance, iris_shape=iris_shape,
                        side_arcs=side_arcs)

    def reply(obj) -> bool:
        try:
            pickle.dump(obj, out, protocol=pickle.HIGHEST_PROTOCOL)
            out.flush()
            return True
        except (OSError, ValueError):  # the parent is gone
            return False

    while True:
        try:
            batch = pickle.load(inp)
        except (EOFError, OSError, pickle.UnpicklingError):  # the parent is gone
            return 0
        if batch is None:
            reply(("state", geo.state() | {"peak_rss_mb": peak_rss_mb()}))
            return 0
        try:
            rows = geo.rows(batch)
        except Exception as exc:  # noqa: BLE001 - reported to the parent
            try:
                pickle.dumps(exc)
            except Exception:  # noqa: BLE001 - an exception that does not pickle
                exc = RuntimeError(f"{type(exc).__name__}: {exc}")
            reply(("error", exc))
            return 1
        if not reply(("rows", rows)):
            return 0


#: the child's start: load this very copy of the aspectus package (by path, so neither another installed
#: copy nor the caller's working folder is picked up, and no other import is shadowed), then serve
_CHILD_BOOT = (
    "import importlib.util, os, sys\n"
    "pkg = sys.argv[1]\n"
    "spec = importlib.util.spec_from_file_location('aspectus', os.path.join(pkg, '__init__.py'),"
    " submodule_search_locations=[pkg])\n"
    "mod = importlib.util.module_from_spec(spec)\n"
    "sys.modules['aspectus'] = mod\n"
    "spec.loader.exec_module(mod)\n"
    "from aspectus.webcam.frame_geometry import child_main\n"
    "sys.exit(child_main(sys.argv[2:]))\n"
)


class GeometryProcess:
    """Runs :class:`FrameGeometry` in a child Python process.

    The child is a plain ``python -c`` interpreter that loads this copy of
    aspectus (not :mod:`multiprocessing`), so it never re-imports the caller's own script:
    a user's script calling :func:`aspectus.webcam.pipeline.process_clip` needs no
    ``if __name__ == "__main__"`` guard. Frames go over its stdin in batches of
    a few, from a sender thread so the caller never waits for the child; a
    receiver thread hands the rows to ``sink`` in frame order. Raises
    :class:`OSError` from the constructor when no child can be started.
    """

    kind = "process"

    def __init__(self, *, fov_deg: float, refine_iris: bool, sink, eye_anchors: bool = True,
                 anchor_set: str = DEFAULT_ANCHOR_SET, skin_pose: bool = False, appearance: bool = False,
                 iris_shape: bool = False, side_arcs: bool = False):
        self._sink = sink
        if anchor_set not in ANCHOR_SET_CHOICES:
            raise ValueError(f"anchor set must be one of {', '.join(ANCHOR_SET_CHOICES)}, got {anchor_set!r}")
        self._proc = subprocess.Popen(
            [sys.executable, "-c", _CHILD_BOOT, str(Path(__file__).resolve().parents[1]), repr(float(fov_deg)),
             "1" if refine_iris else "0", "1" if eye_anchors else "0", anchor_set, "1" if skin_pose else "0",
             "1" if appearance else "0", "1" if iris_shape else "0", "1" if side_arcs else "0"],
            stdin=subprocess.PIPE, stdout=subprocess.PIPE)
        self._out: queue.Queue = queue.Queue(maxsize=32)  # batches in flight: some 30 MB of eye crops at most
        self._pending: list = []
        self._failure: list[BaseException] = []
        self._state: dict | None = None
        self._sender = threading.Thread(target=self._send, name="aspectus-geometry-send", daemon=True)
        self._receiver = threading.Thread(target=self._receive, name="aspectus-geometry-receive", daemon=True)
        self._sender.start()
        self._receiver.start()

    @property
    def pid(self) -> int:
        return self._proc.pid

    def _send(self):
        stream = self._proc.stdin
        try:
            while True:
                batch = self._out.get()
                pickle.dump(batch, stream, protocol=pickle.HIGHEST_PROTOCOL)
                stream.flush()
                if batch is None:
                    return
        except (OSError, ValueError) as exc:
            self._failure.append(RuntimeError(f"the geometry process stopped unexpectedly ({exc})"))
            while self._out.get() is not None:
                pass

    def _receive(self):
        stream = self._proc.stdout
        try:
            while True:
                kind, payload = pickle.load(stream)
                if kind == "rows":
                    for r in payload:
                        self._sink(r)
                elif kind == "state":
                    self._state = payload
                    return
                else:
                    self._failure.append(payload)
                    return
        except (OSError, EOFError, ValueError, pickle.UnpicklingError) as exc:
            self._proc.poll()
            self._failure.append(RuntimeError(
                f"the geometry process stopped unexpectedly (exit code {self._proc.returncode}; {exc!r})"))

    def check(self) -> None:
        if self._failure:
            raise self._failure[0]

    def submit(self, item: tuple) -> None:
        self._pending.append(item)
        if len(self._pending) >= _BATCH:
            self._out.put(self._pending)
            self._pending = []

    def finish(self) -> dict:
        if self._pending:
            self._out.put(self._pending)
            self._pending = []
        self._out.put(None)
        self._sender.join()
        self._receiver.join()
        try:
            self._proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            self._proc.kill()
        self._close_pipes()
        self.check()
        if self._state is None:
            raise RuntimeError("the geometry process ended without its final report")
        return self._state

    def _close_pipes(self) -> None:
        for stream in (self._proc.stdin, self._proc.stdout):
            try:
                stream.close()
            except (OSError, ValueError):
                pass

    def abort(self) -> None:
        self._pending = []
        if self._proc.poll() is None:
            self._proc.kill()
        self._proc.wait(timeout=10)
        self._out.put(None)
        self._sender.join(timeout=5)
        self._receiver.join(timeout=5)
        self._close_pipes()


def start_geometry(*, fov_deg: float, refine_iris: bool, sink, frames_hint: int, mode: str = "auto",
                   eye_anchors: bool = True, anchor_set: str = DEFAULT_ANCHOR_SET, skin_pose: bool = False,
                   appearance: bool = False, iris_shape: bool = False,
                   side_arcs: bool = False):
    """A :class:`GeometryProcess` (long clips) or :class:`GeometryThread` (short clips, a frozen
    application, or when no child can be started); ``mode`` forces ``"thread"``, ``"process"`` or
    ``"inline"`` (:class:`GeometryInline`, in the calling thread). ``skin_pose``: the head rotation from skin
    points followed on the picture (:class:`FrameGeometry`); the frames must then be cut with
    ``frame_item(..., skin_pose=True)``. ``iris_shape``: the limbus fit fits the iris as the ellipse its circle
    fit's centre predicts (:class:`FrameGeometry`). ``side_arcs``: the limbus fit's side-arc rule where the fit
    is the gaze estimate (:class:`FrameGeometry`)."""
    if mode not in ("auto", "thread", "process", "inline"):
        raise ValueError(f"geometry mode must be auto, thread, process or inline, got {mode!r}")
    if mode == "inline":
        return GeometryInline(fov_deg=fov_deg, refine_iris=refine_iris, sink=sink, eye_anchors=eye_anchors,
                              anchor_set=anchor_set, skin_pose=skin_pose, appearance=appearance,
                              iris_shape=iris_shape,
                              side_arcs=side_arcs)
    frozen = bool(getattr(sys, "frozen", False))  # a bundled app has no "python -c" to start
    if mode == "process" or (mode == "auto" and frames_hint >= PROCESS_MIN_FRAMES and not frozen):
        try:
            return GeometryProcess(fov_deg=fov_deg, refine_iris=refine_iris, sink=sink, eye_anchors=eye_anchors,
                              anchor_set=anchor_set, skin_pose=skin_pose, appearance=appearance,
                              iris_shape=iris_shape,
                              side_arcs=side_arcs)
        except OSError:
            if mode == "process":
                raise
    return GeometryThread(fov_deg=fov_deg, refine_iris=refine_iris, sink=sink, eye_anchors=eye_anchors,
                              anchor_set=anchor_set, skin_pose=skin_pose, appearance=appearance,
                              iris_shape=iris_shape,
                              side_arcs=side_arcs)
