"""Where the eyes are: skin points below the eyes followed on the picture itself.

The head pose from PnP on the face mesh's landmarks (:mod:`aspectus.webcam.headpose`)
has a good rotation but a poor origin under head rotation: on a turned head
the mesh places its landmarks 0.2-0.6 px per degree away from where the
face's points are, with a direction that differs from face to face
(rendered clips; DEVELOPERS.md), so the PnP translation - and with it both
eyeball centres - moves by about a millimetre at 5 deg of head rotation,
which tilts the 10.5 mm eyeball-centre-to-iris vector by some 5 deg. The
mesh also moves its points with the eyes (the eyeball centres followed the
iris by 0.3-0.5 of its own vertical motion).

The picture has neither fault to that degree: skin texture just below the
lower lid moves with the head, and with the eyes far less than the lids do
(on rendered clips not at all; on real faces the lower-lid skin follows
downward gaze a little - DEVELOPERS.md, known limits). So a
few points on the skin just below each eye's opening (the face mesh's
second ring below the lower lid, :data:`ANCHOR_POINTS`) are followed from
frame to frame by normalised cross-correlation template matching (Lewis
1995, "Fast normalized cross-correlation"; sub-pixel by a parabola through
the correlation peak) against a template cut from the first frame of each
run of tracked frames, and the head translation is refitted to them with
the PnP rotation held fixed (:func:`translation_given_rotation`). The
templates are taken at the mesh's points; what is followed is each point's
offset from the mesh's point, so a failed match (a blink, a hand) keeps the
last offset, and a template is cut again - at the mesh point plus that
offset, so the anchor does not jump - after :data:`PATIENCE_FRAMES` failed
matches in a row or when the iris (the picture's scale) has grown or shrunk
by more than a fifth since it was cut.

Sizes scale with the iris radius ``r`` (about 11 px at 720p): templates of
half-width :data:`PATCH_RADII` ``r``, searched within :data:`SEARCH_RADII`
``r`` of the point predicted from the last offset, offsets kept within
:data:`OFFSET_RADII` ``r`` of the mesh's point. :func:`anchor_reach_px` is
how far from the mesh's points the matching may read, so the eye crop sent
to the geometry process covers it.

Spectacles: a rim lies some 10 mm in front of the skin below the eyes and
slides over it by parallax as the head turns; where one crosses a template
the correlation follows the rim. Such a template (a thin dark line across
it, :data:`RIM_CONTRAST`, :func:`crossed_by_rim`) is not matched: the point
keeps its last offset from the mesh's point, as after a failed match, and
is cut again - and looked at again - after :data:`PATIENCE_FRAMES`.
Templates without a rim match as before, to the bit.
"""
from __future__ import annotations

import numpy as np

from aspectus._env import import_cv2

#: the sets of face-mesh skin points that can be followed, by name. ``"below"`` (large faces' set): below the eye
#: openings (second ring below the lower lid, under the iris: right eye 229-231, left eye 449-451).
#: ``"below_and_beside"``: those and two points beside each eye's outer corner (226 and 35, 446 and 265), which
#: lie close to the eyeball centres' depth (3.9 and -0.2 mm in front of them in the face model, the points below
#: 12-15 mm), so an error of the PnP rotation moves their fitted translation - and with it the eyeball centres -
#: less. At classroom scale it halves the head placement's error, but on large faces turning +-15 deg the points
#: beside the eye turned away read worse (docs/notes/gaze-measurement.md), so it is the default on small faces
#: only (:data:`AUTO_SMALL_FACE_SET`).
#: ``"below_and_facing_beside"``: the same points, but in each frame a point beside an eye is left out of the
#: translation's refit while the head is turned away from it by more than :func:`turn_away_limits_deg`.
#: ``"below_low_cheeks_and_beside"``: the points of ``"below_and_beside"`` and four on the cheeks a little further
#: from the lower lids (117 and 118, 346 and 347: 14-16 mm below the eyeball centres, 8-13 mm in front of them).
#: ``"skin_region"``: not points followed one by one but one masked region of skin spanned by these points (below,
#: cheeks, beside the eyes; the nose bridge 6, 168, 197 only shape the map), registered to a key frame in its shift
#: (:mod:`aspectus.webcam.skin_region`). Both measured at classroom scale against ``"below_and_beside"`` and left
#: as options (neither won on a clear majority of held-out dev clips; docs/notes/gaze-measurement.md).
#: Whatever the set, the tracker follows the six points below the eyes first (the eye patches' frames are placed by
#: them), then the set's other points; only the set's own points enter the refit.
#: (``GazeParams.eye_anchor_set`` also takes ``"auto"``: :data:`AUTO_SMALL_FACE_SET` on a small face, ``"below"``
#: otherwise; :data:`ANCHOR_SET_CHOICES`.)
ANCHOR_SETS = {"below": (229, 230, 231, 449, 450, 451),
               "below_and_beside": (229, 230, 231, 449, 450, 451, 226, 35, 446, 265),
               "below_and_facing_beside": (229, 230, 231, 449, 450, 451, 226, 35, 446, 265),
               "below_low_cheeks_and_beside": (229, 230, 231, 449, 450, 451, 117, 118, 346, 347, 226, 35, 446, 265),
               "skin_region": (229, 230, 231, 449, 450, 451, 117, 118, 119, 346, 347, 348, 226, 35, 446, 265,
                               6, 168, 197)}
#: the sets with points further from the eyes than the others': the eye crop covers them only when they are chosen
#: (:func:`aspectus.webcam.frame_geometry.eye_crop_box`), so the other settings read the same crop as before
WIDE_SETS = ("below_low_cheeks_and_beside", "skin_region")
#: the sets followed as one masked region of skin (:mod:`aspectus.webcam.skin_region`), not point by point
REGION_SETS = ("skin_region",)
#: the sets whose points beside the eyes are left out while the head is turned away from them
TURN_LIMITED_SETS = ("below_and_facing_beside",)
#: the points beside the eyes (the rest of every set lies below the eyes and is always used)
BESIDE_POINTS = (226, 35, 446, 265)
DEFAULT_ANCHOR_SET = "below"
#: with ``eye_anchor_set="auto"`` (the default of ``GazeParams``) the set used where the iris is small in the picture
#: (the same rule as ``iris_combine="auto"``: :func:`aspectus.webcam.iris_appearance.small_iris` below
#: ``aspectus.webcam.gaze.SMALL_FACE_BELOW_PX``); :data:`DEFAULT_ANCHOR_SET` elsewhere. Measured on fourteen
#: small-face dev clips (8.4-12.1 px, eight of them with the head turning +-15 deg): yaw r up on ten, by 0.04-0.38
#: on all seven astronaut-face clips, down by 0.01-0.06 on four hopper-face clips (docs/notes/gaze-measurement.md).
AUTO_SMALL_FACE_SET = "below_and_beside"
#: what ``GazeParams.eye_anchor_set`` may be: ``"auto"`` or a key of :data:`ANCHOR_SETS`
ANCHOR_SET_CHOICES = ("auto", *ANCHOR_SETS)
#: every point any set may follow (what the eye crop must cover)
ANCHOR_POINTS = tuple(dict.fromkeys(p for pts in ANCHOR_SETS.values() for p in pts))
#: template half-width, in iris radii
PATCH_RADII = 0.7
#: search half-range around the point predicted from the last offset, in iris radii
SEARCH_RADII = 0.4
#: largest offset of an anchor from the mesh's point, in iris radii
OFFSET_RADII = 1.0
#: matches with a lower normalised correlation are not used
MIN_SCORE = 0.6
#: a template is cut again after this many failed matches in a row
PATIENCE_FRAMES = 15
#: ... or when the iris radius has changed by more than this fraction since it was cut
RESCALE_FRACTION = 0.2
#: a thin dark line - a spectacle rim, a frame's side - is a structure darker than its surroundings and narrower
#: than this many iris radii (the diameter of the disc a grey-level closing fills it with; an iris radius is about
#: 5.9 mm on the face, rims are 1-5 mm wide)
LINE_WIDTH_RADII = 1.0
#: ... whose pixels are darker than the closing by more than this fraction of the template's median grey (skin
#: texture and the sensor's noise stay below a few per cent)
LINE_CONTRAST = 0.25
#: a template is not matched when such a line crosses it (spans its full width or height) and is somewhere darker
#: than the closing by more than this fraction of the median grey: a spectacle rim (on rendered dev clips
#: 0.78-1.30 with glasses; the darkest lines crossing a template without glasses, skin folds and painted strokes
#: below the eyes, 0.50-0.57 - docs/notes/gaze-measurement.md). Lines that do not cross it (an eye's corner,
#: lashes) leave it matched.
RIM_CONTRAST = 0.7
#: ... and a line's pixels must be darker than the closing by more than this many of the box's noise SDs (robust,
#: from its neighbouring pixels' differences): the contrasts above are fractions of the grey level, which in a
#: dark, noisy picture the sensor's noise alone exceeds (a uniform grey 20 with noise SD 5 was read as crossed
#: in 41 of 50 boxes without it). Four SDs: a 4-SD pixel has a chance of about 3e-5 (one-sided normal tail,
#: from memory), so a chain of them spanning the box is not noise (common practice for a significance bound).
LINE_NOISE_SDS = 4.0
#: templates kept per point for heads turned back (key frames; the oldest is dropped)
MAX_KEY_TEMPLATES = 8
#: ... or (when the tracker is given the head rotation) when the head has turned by more than this since it was
#: cut: the angle whose sine is :data:`RESCALE_FRACTION`, so that a point at the template's edge has moved by the
#: same fraction of the half-width as under the scale rule (11.5 deg)
RECUT_ROTATION_DEG = float(np.degrees(np.arcsin(RESCALE_FRACTION)))


def surface_normal(points_mm: np.ndarray, j: int, k: int = 10) -> np.ndarray:
    """The outward (towards -z, the face's front) unit normal of the model's surface at point ``j``: the
    plane through its ``k`` nearest model points."""
    d = np.linalg.norm(points_mm - points_mm[j], axis=1)
    nb = points_mm[np.argsort(d)[:k]]
    n = np.linalg.svd(nb - nb.mean(axis=0))[2][-1]
    return -n if n[2] > 0 else n


def turn_away_limits_deg(points, points_mm: np.ndarray) -> np.ndarray:
    """For each of ``points``, the head yaw (deg, turned away from the point's side) beyond which it is left out.

    Geometry, not a fit to clips: a point whose surface normal lies ``a`` deg (horizontally) from the face's
    forward direction shows its template foreshortened sideways by ``cos(a + yaw) / cos(a)`` when the head
    turns ``yaw`` away from it, against a template cut with the face towards the camera. The limit is the yaw
    where that reaches ``1 - RESCALE_FRACTION``: the scale change beyond which the tracker cuts a new template
    for a changed iris size. In the face model the points beside the eyes face 34-41 deg sideways, which gives
    12-14 deg; points below the eyes get no limit (``inf``).
    """
    out = np.full(len(points), np.inf)
    for i, j in enumerate(points):
        if j not in BESIDE_POINTS:
            continue
        n = surface_normal(points_mm, j)
        a = abs(np.arctan2(n[0], -n[2]))
        out[i] = np.degrees(np.arccos((1.0 - RESCALE_FRACTION) * np.cos(a)) - a)
    return out


#: below this iris radius (px) the anchors are not followed (as the limbus fit: a face a few dozen pixels wide)
MIN_ANCHOR_RADIUS_PX = 2.5


def anchor_radius_px(iris_diam_px) -> float:
    """The iris radius the anchors' sizes scale with: half the mean of both eyes' iris diameters (px).

    One definition for the tracker and for the eye crop that must cover what it reads.
    """
    d = np.asarray(iris_diam_px, float)
    return 0.25 * float(d[0] + d[1])


def anchor_reach_px(iris_radius_px: float) -> float:
    """How far from an anchor's mesh point the matching may read (px), for the eye crop."""
    r = float(iris_radius_px)
    return (OFFSET_RADII + SEARCH_RADII + PATCH_RADII * (1.0 + RESCALE_FRACTION)) * r + 3.0


def _grey(image: np.ndarray, x0: int, y0: int, x1: int, y1: int) -> np.ndarray | None:
    """The grey (float32) picture in ``[y0:y1, x0:x1]``, or None when that reaches outside it."""
    h, w = image.shape[:2]
    if x0 < 0 or y0 < 0 or x1 > w or y1 > h or x1 <= x0 or y1 <= y0:
        return None
    patch = image[y0:y1, x0:x1]
    if patch.ndim == 3:
        cv2 = import_cv2()
        patch = cv2.cvtColor(np.ascontiguousarray(patch), cv2.COLOR_RGB2GRAY)
    return patch.astype(np.float32)


def _vertex(a: float, b: float, c: float) -> float:
    den = a - 2.0 * b + c
    return min(0.5, max(-0.5, 0.5 * (a - c) / den)) if den != 0 else 0.0


def _peak(res: np.ndarray) -> tuple[float, float, float] | None:
    """Sub-pixel (x, y) and height of the correlation peak; None at the border of the search range."""
    _, score, _, (x, y) = import_cv2().minMaxLoc(res)
    h, w = res.shape
    if not (0 < x < w - 1 and 0 < y < h - 1):
        return None
    row, col = res[y].tolist(), res[:, x].tolist()
    return x + _vertex(row[x - 1], row[x], row[x + 1]), y + _vertex(col[y - 1], col[y], col[y + 1]), float(score)


class EyeAnchorTracker:
    """Follows :data:`ANCHOR_POINTS` on the picture, frame after frame (one face, one run of frames)."""

    def __init__(self, points=ANCHOR_SETS[DEFAULT_ANCHOR_SET]):
        self.points = tuple(points)
        self._rows = np.array(self.points, dtype=np.intp)
        self.reset()

    def reset(self) -> None:
        self._templates: list | None = None
        self.offsets_px = np.zeros((len(self.points), 2))
        self._misses = [0] * len(self.points)
        self.matched = 0
        self.missed = 0
        #: per point, whether the last :meth:`update` placed it by a match (within the offset bound)
        self.last_matched = np.zeros(len(self.points), bool)
        #: per point, whether its template in use is crossed by a spectacle rim (:func:`crossed_by_rim`)
        self.on_rim = np.zeros(len(self.points), bool)
        #: per point, whether the last :meth:`update` cut its template (at the position it returned)
        self.last_cut = np.zeros(len(self.points), bool)
        #: per point, a number naming the template in use (new for every cut; a key frame's template taken up
        #: again keeps its number)
        self.template_ids = np.full(len(self.points), -1, dtype=np.int64)
        self._keys: list[list] = [[] for _ in self.points]  # per point, the templates cut at turned heads
        self._next_id = 0

    def _cut(self, j: int, image: np.ndarray, p, half: int, r: float, rotation=None, keep_keys: bool = False) -> None:
        # p in aspectus.schema's picture convention; matches return the pixel-index displacement plus p - xi,
        # so the anchors stay in p's convention (no pixel-centre conversion needed)
        xi, yi = int(round(p[0])), int(round(p[1]))
        tpl = _grey(image, xi - half, yi - half, xi + half + 1, yi + half + 1)
        t = None
        if tpl is not None:
            t = (tpl, (p[0] - xi, p[1] - yi), half, r, rotation, tuple(self.offsets_px[j]), self._next_id,
                 crossed_by_rim(image, xi, yi, half, r))
            self._next_id += 1
        self._templates[j] = t
        self.on_rim[j] = t is not None and t[7]
        self._misses[j] = 0
        self.last_cut[j] = t is not None
        self.template_ids[j] = -1 if t is None else t[6]
        if rotation is not None:
            keys = self._keys[j] if keep_keys else []
            if t is not None:
                keys = (keys + [t])[-MAX_KEY_TEMPLATES:]
            self._keys[j] = keys

    def _key_for(self, j: int, rotation, r: float):
        """The stored template of point ``j`` cut nearest to ``rotation`` (within the turn and scale limits)."""
        best, best_c = None, _RECUT_COS
        for t in self._keys[j]:
            if abs(t[3] / r - 1.0) > RESCALE_FRACTION:
                continue
            c = 0.5 * (float(np.trace(np.asarray(rotation) @ np.asarray(t[4]).T)) - 1.0)
            if c >= best_c:
                best, best_c = t, c
        return best

    def update(self, image: np.ndarray, points_px: np.ndarray, iris_radius_px: float,
               rotation: np.ndarray | None = None, warp=None) -> np.ndarray:
        """The anchors' picture positions (k, 2) in this frame: the mesh's points plus the followed offsets.

        ``image`` is the picture or a crop of it, and ``points_px`` are in the same coordinates. ``rotation``
        (the head rotation of this frame, 3 x 3), when given, also changes a template once the head has
        turned by :data:`RECUT_ROTATION_DEG` since it was cut: to one cut earlier at a rotation within that
        angle (a key frame taken up again, so a head that turns away and back comes back to the same
        templates rather than to a chain of cuts), or to a new one. ``warp``, when given, is called as
        ``warp(j, template_number)`` and returns the 2 x 3 affine map from the template's pixel offsets (from
        its centre pixel) to this picture's coordinates, or None: the picture is then resampled into the
        template's geometry before the match (the skin seen under another pose changes its shape on the
        picture, which moves a plain match's peak), and the peak mapped back.
        """
        r = float(iris_radius_px)
        mesh = np.asarray(points_px, float)[self._rows, :2]
        self.last_matched[:] = False
        self.last_cut[:] = False
        if not (np.isfinite(r) and r > 0 and np.all(np.isfinite(mesh))):
            return mesh + self.offsets_px
        half = max(3, int(round(PATCH_RADII * r)))
        if self._templates is None:
            self._templates = [None] * len(self.points)
            for j in range(len(self.points)):
                self._cut(j, image, mesh[j].tolist(), half, r, rotation)
            return mesh + self.offsets_px
        cv2 = import_cv2()
        s = max(2, int(round(SEARCH_RADII * r)))
        bound = OFFSET_RADII * r
        # plain floats from here on: the same float64 arithmetic without NumPy's per-scalar cost
        pred = (mesh + np.clip(self.offsets_px, -bound, bound)).tolist()
        mesh_l = mesh.tolist()
        offsets = self.offsets_px.tolist()
        h, w = image.shape[:2]
        jobs = []  # (anchor, window box) of the anchors matched in this frame
        turned = {}  # per rotation the templates were cut at (most share one): turned since?
        for j, t in enumerate(self._templates):
            if t is not None and rotation is not None and id(t[4]) not in turned:
                turned[id(t[4])] = _turned(rotation, t[4])
            if t is None or abs(t[3] / r - 1.0) > RESCALE_FRACTION or self._misses[j] >= PATIENCE_FRAMES:
                self._cut(j, image, [mesh_l[j][0] + offsets[j][0], mesh_l[j][1] + offsets[j][1]], half, r, rotation)
                continue
            if turned.get(id(t[4]), False):
                key = self._key_for(j, rotation, r)
                if key is None:
                    self._cut(j, image, [mesh_l[j][0] + offsets[j][0], mesh_l[j][1] + offsets[j][1]], half, r,
                              rotation, keep_keys=True)
                    continue
                # the key frame's template, searched where its skin lay from the mesh's point when it was cut
                self._templates[j] = t = key
                self.template_ids[j] = t[6]
                ox, oy = t[5]
                pred[j] = [mesh_l[j][0] + min(bound, max(-bound, ox)), mesh_l[j][1] + min(bound, max(-bound, oy))]
            e = t[2] + s
            xi, yi = int(round(pred[j][0])), int(round(pred[j][1]))
            box = (xi - e, yi - e, xi + e + 1, yi + e + 1)
            jobs.append((j, xi, yi, box, box[0] >= 0 and box[1] >= 0 and box[2] <= w and box[3] <= h))
        if not jobs:
            return mesh + self.offsets_px
        # one grey conversion for all the windows that lie in the picture
        inside = [jb[3] for jb in jobs if jb[4]]
        grey = None
        if inside:
            bx0 = min(b[0] for b in inside)
            by0 = min(b[1] for b in inside)
            grey = _grey(image, bx0, by0, max(b[2] for b in inside), max(b[3] for b in inside))
        for j, xi, yi, (x0, y0, x1, y1), ok in jobs:
            pk = None
            tpl, sub = self._templates[j][:2]
            self.on_rim[j] = self._templates[j][7]
            if self.on_rim[j]:  # a rim slides over the skin: no match (the offset is kept, the template cut again)
                self._misses[j] += 1
                self.missed += 1
                continue
            G = None if warp is None else warp(j, self._templates[j][6])
            if G is not None:
                found = _warped_match(image, tpl, G, pred[j], s)
                if found is None or not found[2] >= MIN_SCORE:
                    self._misses[j] += 1
                    self.missed += 1
                    continue
                du, dv = found[0] + sub[0], found[1] + sub[1]
                fx, fy = G[0, 0] * du + G[0, 1] * dv + G[0, 2], G[1, 0] * du + G[1, 1] * dv + G[1, 2]
            else:
                if grey is not None and ok:
                    win = grey[y0 - by0:y1 - by0, x0 - bx0:x1 - bx0]
                    pk = _peak(cv2.matchTemplate(win, tpl, cv2.TM_CCOEFF_NORMED))
                if pk is None or not pk[2] >= MIN_SCORE:
                    self._misses[j] += 1
                    self.missed += 1
                    continue
                fx, fy = xi - s + pk[0] + sub[0], yi - s + pk[1] + sub[1]
            mx, my = mesh_l[j]
            ox, oy = fx - mx, fy - my
            self.offsets_px[j] = (min(bound, max(-bound, ox)), min(bound, max(-bound, oy)))
            self.last_matched[j] = abs(ox) <= bound and abs(oy) <= bound
            self._misses[j] = 0
            self.matched += 1
        return mesh + self.offsets_px


def crossed_by_rim(image: np.ndarray, xi: int, yi: int, half: int, r: float) -> bool:
    """Whether a thin dark line crosses the template box of half-width ``half`` at pixel ``(xi, yi)``
    (:data:`LINE_WIDTH_RADII`, :data:`LINE_CONTRAST`, :data:`RIM_CONTRAST`): a grey-level black top-hat (closing
    minus picture, read on a margin around the box so its edge is right) with a connected set of line pixels that
    spans the box and is somewhere darker than :data:`RIM_CONTRAST` of the box's median grey (every line pixel also
    darker than :data:`LINE_NOISE_SDS` of the box's noise SDs, so noise alone is not a line). A spectacle rim, in
    front of the face, slides over the skin by parallax as the head turns and would hold the correlation's peak.
    Near the picture's edge (the picture may be a crop round the eyes) the box and its margin are read where they
    are inside it: the closing there takes only the pixels inside, and a line spans the box's inside part; False
    where none of the box is inside."""
    cv2 = import_cv2()
    k = max(3, 2 * int(round(0.5 * LINE_WIDTH_RADII * r)) + 1)
    m = k // 2 + 1
    h, w = image.shape[:2]
    bx0, by0, bx1, by1 = max(0, xi - half), max(0, yi - half), min(w, xi + half + 1), min(h, yi + half + 1)
    if bx1 <= bx0 or by1 <= by0:
        return False
    x0, y0 = max(0, bx0 - m), max(0, by0 - m)
    g = _grey(image, x0, y0, min(w, bx1 + m), min(h, by1 + m))
    # OpenCV's morphology leaves the pixels beyond the picture out of its maxima and minima (its default border)
    hat = cv2.morphologyEx(g, cv2.MORPH_BLACKHAT, cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (k, k)))
    inside = (slice(by0 - y0, by1 - y0), slice(bx0 - x0, bx1 - x0))
    hat, box = hat[inside], g[inside]
    med = float(np.median(box))
    line = hat > max(LINE_CONTRAST * med, LINE_NOISE_SDS * _noise_sd(box))
    if not line.any():
        return False
    n, lab, st, _ = cv2.connectedComponentsWithStats(line.astype(np.uint8))
    return any((st[i, 2] >= bx1 - bx0 or st[i, 3] >= by1 - by0) and float(hat[lab == i].max()) > RIM_CONTRAST * med
               for i in range(1, n))


def _noise_sd(grey: np.ndarray) -> float:
    """A robust estimate of the pixel noise's SD in a grey patch: the scaled median absolute deviation of its
    neighbouring pixels' differences (horizontal and vertical), divided by sqrt(2) - thin lines and edges are few
    pixels and leave the median alone."""
    d = np.concatenate([np.diff(grey, axis=1).ravel(), np.diff(grey, axis=0).ravel()])
    if d.size == 0:
        return 0.0
    return float(1.4826 * np.median(np.abs(d - np.median(d))) / np.sqrt(2.0))


def _warped_match(image: np.ndarray, tpl: np.ndarray, G: np.ndarray, pred, s: int):
    """Match ``tpl`` in the picture resampled into the template's geometry by the affine ``G`` (template pixel
    offsets -> picture), searching ``s`` px around the offset that maps to ``pred``: the matched template
    centre's offset (du, dv) and the score, or None (singular map, window off the picture, peak at the border)."""
    cv2 = import_cv2()
    A = G[:, :2]
    det = float(A[0, 0] * A[1, 1] - A[0, 1] * A[1, 0])
    if not (np.isfinite(G).all() and abs(det) > 1e-3):
        return None
    Ai = np.array([[A[1, 1], -A[0, 1]], [-A[1, 0], A[0, 0]]]) / det
    pu, pv = Ai @ (np.asarray(pred, float) - G[:, 2])
    half = tpl.shape[0] // 2
    e = half + s
    u0, v0 = int(round(pu)) - e, int(round(pv)) - e
    n = 2 * e + 1
    corners = np.array([[u0, v0], [u0 + n, v0], [u0, v0 + n], [u0 + n, v0 + n]], float) @ A.T + G[:, 2]
    bx0, by0 = int(np.floor(corners[:, 0].min())) - 1, int(np.floor(corners[:, 1].min())) - 1
    bx1, by1 = int(np.ceil(corners[:, 0].max())) + 2, int(np.ceil(corners[:, 1].max())) + 2
    grey = _grey(image, bx0, by0, bx1, by1)
    if grey is None:
        return None
    # window pixel (x, y) -> template offset (u0 + x, v0 + y) -> picture G(...) -> grey patch (minus its origin)
    M = np.c_[A, A @ [u0, v0] + G[:, 2] - [bx0, by0]].astype(np.float64)
    win = cv2.warpAffine(grey, M, (n, n), flags=cv2.INTER_LINEAR | cv2.WARP_INVERSE_MAP,
                         borderMode=cv2.BORDER_REPLICATE)
    pk = _peak(cv2.matchTemplate(win, tpl, cv2.TM_CCOEFF_NORMED))
    if pk is None:
        return None
    return u0 + pk[0] + half, v0 + pk[1] + half, pk[2]


def _turned(rotation, cut_rotation) -> bool:
    """Whether the head has turned by more than :data:`RECUT_ROTATION_DEG` between two rotations (None: no)."""
    if rotation is None or cut_rotation is None:
        return False
    c = 0.5 * (float(np.trace(np.asarray(rotation) @ np.asarray(cut_rotation).T)) - 1.0)
    return c < _RECUT_COS


_RECUT_COS = float(np.cos(np.radians(RECUT_ROTATION_DEG)))


def _grey_box_ok(image: np.ndarray, box) -> bool:
    h, w = image.shape[:2]
    return box[0] >= 0 and box[1] >= 0 and box[2] <= w and box[3] <= h


def translation_given_rotation(R: np.ndarray, model_mm: np.ndarray, points_px: np.ndarray,
                               K: np.ndarray) -> np.ndarray | None:
    """Translation ``t`` that best reprojects ``model_mm`` (k, 3) onto ``points_px`` (k, 2) given rotation R.

    With R fixed, ``u = cx + f (X + tx) / (Z + tz)`` is linear in ``t`` once multiplied out:
    ``f tx - (u - cx) tz = (u - cx) Z - f X`` (and the same in y), solved by least squares
    (an algebraic, not geometric, error - the two differ by the point's depth, which varies by a few
    per cent across the anchors).
    """
    X = np.asarray(model_mm, float) @ np.asarray(R, float).T
    u = np.asarray(points_px, float)[:, 0] - K[0, 2]
    v = np.asarray(points_px, float)[:, 1] - K[1, 2]
    fx, fy, k = float(K[0, 0]), float(K[1, 1]), len(X)
    A = np.zeros((2 * k, 3))
    b = np.empty(2 * k)
    A[:k, 0], A[:k, 2], b[:k] = fx, -u, u * X[:, 2] - fx * X[:, 0]
    A[k:, 1], A[k:, 2], b[k:] = fy, -v, v * X[:, 2] - fy * X[:, 1]
    if not (np.all(np.isfinite(A)) and np.all(np.isfinite(b))):
        return None
    t = np.linalg.lstsq(A, b, rcond=None)[0]
    return t if np.isfinite(t).all() and t[2] > 0 else None
