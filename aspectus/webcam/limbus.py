"""Iris centre from the limbus: a circle fitted to the iris-sclera edges.

The face mesh's iris point follows horizontal eye movements well but
vertical ones poorly (at webcam scale the iris fills most of the eye opening
and the lids hide its top and bottom). The left and right limbus arcs stay
visible, though, and their curvature fixes the circle's centre in both
directions: for an iris of radius r the visible width of the iris in a row
at height y is ``2 sqrt(r^2 - (y - cy)^2)``.

For each eye, rays are cast from the face mesh's iris point; on each the
strongest dark-to-bright step (sub-pixel) is a limbus candidate if it lies
inside the mesh's eye outline and at least 2 px from it. A circle of about
the mesh's iris radius (within +-15 %) is fitted to the candidates by
Gauss-Newton least squares on the geometric distance, and the rays are cast
again from the fitted centre for a second fit (:func:`limbus_centres`).

The weights of that fit are one-sided (:func:`fit_circle`, ``inside_px``).
Measured against the renderer's per-frame iris truth, the candidates that
were wrong are the lid/iris junctions: where a lid crosses the iris the
lid's edge (dark iris above bright skin, for the lower lid) is a
dark-to-bright step too, 1-5 px *inside* the iris circle, and the mesh's lid
outline, which does not follow the rendered lids exactly (about 3 px too low
when the eye looks down), does not keep it out. With symmetric (Huber)
weights those junctions pulled the circle inwards - looking down, the lower
lid's junctions pulled it up by 1.5-2 px, and the right eye's vertical gain
was 0.77-0.85. An occluder can only make the visible iris smaller, so no
true edge lies outside the rim: points outside keep the Huber weight, points
further inside than the edge noise count little. Too few candidates (a
nearly closed eye, a tiny iris) or a poor fit keep the mesh's point.

An iris seen obliquely is an ellipse, not a circle: the disc is perpendicular
to the gaze, so its picture's minor/major ratio is the cosine of the angle
between the gaze and the line of sight, the minor axis along the direction
the eye is turned (:func:`iris_shape`). With the lids hiding the top and
bottom arcs, a circle through the side arcs then misses the centre: on drawn
ellipses of a 25 px iris 30 deg off the line of sight by 0.4-0.8 px, at 10
deg by 0.07 px. Given the eyeballs' picture positions
(:func:`limbus_centres_many`, ``eyeball_px``) the circle's centre predicts
the ellipse, and its centre and major radius are fitted as a circle to the
candidates stretched along the minor axis (:func:`shape_warp`), twice. It is
an option (``GazeParams.iris_shape``): docs/notes/gaze-measurement.md.

Where on a ray the candidate lies: by default at the steepest dark-to-bright
step. A shading that darkens the sclera towards a lid moves the steepest
point of the blurred step into the iris; ``limbus_centres_many(...,
edge="model")`` takes instead the midpoint of a blurred step with a shading
ramp fitted to the ray's profile (:func:`_model_edges`). Measured on rendered
clips it lowers the noise on blurred, compressed eyes but also the vertical
gain, and it is not the pipeline's (docs/notes/target-check.md, "The limbus
candidate from a model of the edge profile").
"""
from __future__ import annotations

import numpy as np

from aspectus._env import import_cv2
from aspectus.geometry import from_opencv_px, to_opencv_px
from aspectus.webcam.landmarks import LEFT_EYE_OUTLINE, RIGHT_EYE_OUTLINE

_OUTLINES = (np.array(RIGHT_EYE_OUTLINE), np.array(LEFT_EYE_OUTLINE))
_THIRDS = np.full((1, 3), 1.0 / 3.0, np.float32)  # grey = mean of R, G, B
_RAYS: dict[int, tuple[np.ndarray, np.ndarray]] = {}
#: the eye region read around each mesh iris point, in iris radii
ROI_RADII = 2.6
#: SD of a limbus candidate's distance from the true iris rim, px: the sub-pixel edge's own noise, measured
#: on rendered clips against their truth (0.41-0.47 px at 540p and 720p, candidates within 15 deg of the
#: horizontal, where no lid is in the way). Points further inside the fitted circle than this are taken to be
#: lid edges in front of the iris rather than the rim (:func:`fit_circle`, ``inside_px``).
EDGE_NOISE_PX = 0.45
#: the fitted radius stays within this fraction of the face mesh's iris radius
_R_TOL = 0.15
#: with ``side_arcs`` (:func:`limbus_centres_many`; ``GazeParams.side_arcs``): limbus candidates within this angle of
#: the horizontal (seen from the circle's centre) count as rim, never as lid in front of it - in an open eye the
#: upper lid covers some 1-2 mm of the 11.7 mm iris and the lower lid less (common anatomy, from memory), while a
#: lid reaches these angles only when it covers half the iris's radius (2.9 mm) or more. :func:`fit_circle`'s
#: one-sided weights then apply to the other candidates only.
SIDE_DEG = 30.0
#: the iris plane's distance from the eyeball centre in iris radii (10.5 mm / 5.85 mm: the gaze model's,
#: aspectus.webcam.gaze.IRIS_PLANE_RADIUS_MM over half of IRIS_DIAMETER_MM)
_PLANE_PER_IRIS_RADIUS = float(np.sqrt(12.0 ** 2 - 5.85 ** 2) / 5.85)
#: the iris shape's largest sin(angle off the line of sight) (60 deg: ratio 0.5)
_MAX_SIN = float(np.sin(np.radians(60.0)))
#: the edge-profile model's search (:func:`_model_edges`): the step's midpoint within this range of the steepest
#: point, px (outward positive), on this grid; the step's blur SD, px; the profile read within this half-width
#: of the steepest point, px (chosen on the target clips a-c of bench/bench_target_error.py: 2.0-3.5 px tried)
EDGE_SHIFT_PX = (-1.0, 2.0)
_EDGE_SHIFT_STEP_PX = 0.25
EDGE_BLUR_PX = (0.5, 0.7, 0.9, 1.1, 1.3, 1.6, 2.0)
EDGE_WINDOW_PX = 3.5
#: where a ray's limbus candidate is taken on its grey profile (:func:`limbus_centres_many`, ``edge``)
EDGE_LOCATORS = ("steepest", "model")
#: the bright-spot search (:func:`fill_bright_spots`): within this many iris radii of the iris point; a pixel
#: brighter than the disc's median by this many grey levels (and 4 robust SDs) belongs to a spot; a spot
#: covers at most this share of the disc
SPOT_DISC_RADII = 0.9
SPOT_MIN_EXCESS = 25.0
SPOT_MAX_SHARE = 0.25
#: the rings, in iris radii about the iris centre the fit ends at (the mesh's point and radius where it failed),
#: whose median greys inside the eye opening give an eye's iris contrast (:func:`limbus_contrast`): the
#: iris outside a pupil and inside the limbus's blur, and the white of the eye beside it
CONTRAST_IRIS_RING = (0.55, 0.85)
CONTRAST_SCLERA_RING = (1.2, 1.7)
#: the least iris contrast against the whites of the eyes (%, :func:`limbus_contrast`) at which the limbus fit is
#: trusted to find the iris. Measured with the default chain (docs/notes/gaze-measurement.md, "Light irises and
#: exposure blur in the rendered grid"; 2026-12-04): dark irises on the rendered grid (the 15 default cells, seed 0)
#: 54.4-65.0 % and on 16 held-out rendered clips 53.3-61.5 % (the clips' lower eye's median); light blue-grey
#: irises (16.6 and 12 px, seeds 0 and 1) 0.9-18.8 %, where the gaze error's RMS-S2S was 3.3-6.3 deg. Set about
#: midway between the two.
MIN_IRIS_CONTRAST_PCT = 35.0
#: below :data:`MIN_IRIS_CONTRAST_PCT` (the median of all the eye's contrasts so far in the clip, once it has
#: at least this many) the eye's centre is its pupil's (:func:`pupil_centre`): the centroid of the darkest
#: :data:`PUPIL_DARKEST_FRAC` of the opening's pixels within :data:`PUPIL_REACH_RADII` iris radii of the face
#: mesh's iris point (twice, the second time about the first centroid)
CONTRAST_MIN_FRAMES = 1
PUPIL_DARKEST_FRAC = 0.1
PUPIL_REACH_RADII = 0.7


def _solve3(A: np.ndarray, b: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Solutions ``(x, y, z)`` of 3x3 linear systems ``A`` (E, 3, 3), ``b`` (E, 3); NaN where one is singular."""
    try:
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
            s = np.linalg.solve(A, b[..., None])[..., 0]
    except np.linalg.LinAlgError:  # a singular system in the batch: solve one by one
        s = np.full(b.shape, np.nan)
        for k in range(len(A)):
            try:
                s[k] = np.linalg.solve(A[k], b[k])
            except np.linalg.LinAlgError:
                pass
    return s[:, 0], s[:, 1], s[:, 2]


def _weights(res: np.ndarray, huber_px: float, inside_px: float | None, sided: np.ndarray | None = None) -> np.ndarray:
    """The circle fit's weights of residuals ``res`` (:func:`fit_circle`); ``sided`` (broadcastable to ``res``,
    optional): the points the one-sided weights apply to (the others get the symmetric Huber weights)."""
    if inside_px is None:
        return huber_px / np.maximum(np.abs(res), huber_px)  # 1 within huber_px, huber_px / |res| beyond
    # the first factor is 1 inside the circle, the second 1 outside it
    one = huber_px / np.maximum(res, huber_px) * np.square(inside_px / np.maximum(-res, inside_px))
    if sided is None:
        return one
    return np.where(sided, one, huber_px / np.maximum(np.abs(res), huber_px))


def fit_circle(points: np.ndarray, centre0: np.ndarray, r0: float, *, r_tol: float = 0.2,
               iterations: int = 8, huber_px: float = 1.0, inside_px: float | None = None,
               r_start: float | None = None, sided: np.ndarray | None = None) -> tuple[np.ndarray, float, float]:
    """Robust geometric circle fit (centre, radius, RMS residual in px).

    Gauss-Newton on the distances of the points from the circle, with Huber
    weights (points further than ``huber_px`` count less); the radius is
    fitted too but kept within ``r0 * (1 +- r_tol)``, starting from
    ``r_start`` (default ``r0``).

    ``inside_px`` makes the weights one-sided, for a disc that something in
    front of it may hide (the iris behind the lids): an occluder can only
    make the visible disc smaller, so an edge point that is not on the rim
    lies *inside* the circle, never outside it. Points outside keep the
    Huber weight; points inside by more than ``inside_px`` (the edge noise)
    get the weight ``(inside_px / |res|)^2``, whose influence on the fit
    falls off as ``1 / |res|`` (a redescending, Cauchy-like tail), so the
    lid/iris junctions no longer pull the circle inwards. The RMS returned
    is then weighted the same way (that of the points taken as the rim).
    ``sided`` (N,) bool, optional: the points the one-sided weights apply to;
    the others keep the symmetric Huber weight (default: all points).

    One circle; :func:`fit_circles` fits many at once.
    """
    pts = np.asarray(points, dtype=float)[None]
    c, r, rms = fit_circles(pts, np.ones(pts.shape[:2], bool), np.asarray(centre0, float)[None], np.array([float(r0)]),
                            r_tol=r_tol, iterations=iterations, huber_px=huber_px, inside_px=inside_px,
                            r_start=None if r_start is None else np.array([float(r_start)]),
                            sided=None if sided is None else np.asarray(sided, bool)[None])
    return c[0], float(r[0]), float(rms[0])


def fit_circles(points: np.ndarray, valid: np.ndarray, centre0: np.ndarray, r0: np.ndarray, *,
                r_tol: float = 0.2, iterations: int = 8, huber_px: float = 1.0, inside_px: float | None = None,
                r_start: np.ndarray | None = None, sided: np.ndarray | None = None
                ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """:func:`fit_circle` for many point sets at once.

    Parameters
    ----------
    points : (E, N, 2) candidate points of E circles (padded); valid : (E, N) bool, the points that count.
    centre0 : (E, 2) starting centres; r0 : (E,) nominal radii; r_start : (E,) starting radii, optional.
    sided : (E, N) bool, optional: the points the one-sided weights (``inside_px``) apply to.

    Returns
    -------
    centres (E, 2), radii (E,), RMS residuals (E,). Each circle iterates until
    its own step is below 0.01 px (or stops, keeping its last estimate, when
    its step cannot be computed), exactly as it would alone.
    """
    P = np.asarray(points, dtype=float)
    vf = np.asarray(valid, bool).astype(float)
    px, py = P[..., 0], P[..., 1]
    cx = np.array(centre0[:, 0], dtype=float)
    cy = np.array(centre0[:, 1], dtype=float)
    r0 = np.asarray(r0, dtype=float)
    lo, hi = r0 * (1 - r_tol), r0 * (1 + r_tol)
    r = np.minimum(np.maximum(r0 if r_start is None else np.asarray(r_start, float), lo), hi)
    active = np.ones(len(r0), bool)
    n = P.shape[1]
    # rows: the Jacobian of res wrt (cx, cy, r), which is -(ux, uy, 1), then the residuals; the normal
    # equations J'WJ s = J'W res are then one batched product of the weighted rows with all rows
    J = np.empty((len(r0), 4, n))
    J[:, 2] = 1.0
    ridge = 1e-6 * np.eye(3)
    for _ in range(iterations):
        if not active.any():
            break
        dx, dy = px - cx[:, None], py - cy[:, None]
        dist = np.sqrt(dx * dx + dy * dy)
        np.maximum(dist, 1e-9, out=dist)
        np.subtract(dist, r[:, None], out=J[:, 3])
        w = _weights(J[:, 3], huber_px, inside_px, sided) * vf
        np.divide(dx, dist, out=J[:, 0])
        np.divide(dy, dist, out=J[:, 1])
        G = (J[:, :3] * w[:, None, :]) @ J.transpose(0, 2, 1)  # (E, 3, 4): J'WJ | J'W res
        sx, sy, sr = _solve3(G[:, :, :3] + ridge, G[:, :, 3])  # = -(J'WJ)^-1 J'W res
        active &= np.isfinite(sx) & np.isfinite(sy) & np.isfinite(sr)
        cx = np.where(active, cx + sx, cx)
        cy = np.where(active, cy + sy, cy)
        r = np.where(active, np.minimum(np.maximum(r + sr, lo), hi), r)
        active &= (np.abs(sx) >= 1e-2) | (np.abs(sy) >= 1e-2) | (np.abs(sr) >= 1e-2)
    dx, dy = px - cx[:, None], py - cy[:, None]
    res = np.sqrt(dx * dx + dy * dy) - r[:, None]
    # with one-sided weights the RMS of the rim points: weighted, so that occluder edges well inside the
    # circle hardly count
    w = vf if inside_px is None else _weights(res, huber_px, inside_px, sided) * vf
    with np.errstate(invalid="ignore", divide="ignore"):
        rms = np.sqrt((w * res * res).sum(1) / w.sum(1))
    return np.stack([cx, cy], axis=1), r, rms


def limbus_centres(image: np.ndarray, points_px: np.ndarray, iris_px: np.ndarray, iris_diam_px: np.ndarray,
                   *, min_points: int = 8, n_rays: int = 48, passes: int = 2,
                   shapes: np.ndarray | None = None, edge: str = "steepest") -> tuple[np.ndarray, np.ndarray]:
    """Both eyes' iris centres (right, left) fitted to the limbus.

    Rays are cast from the face mesh's iris point every ``360 / n_rays``
    degrees; along each, the strongest dark-to-bright step between 0.6 and
    1.5 iris radii (sub-pixel, on the grey picture smoothed by a 3x3
    Gaussian) is a limbus candidate if it lies inside the eye opening, at
    least 2 px from the lids' outline (the lid edge is itself a
    dark-to-bright step). A circle of about the mesh's iris radius is fitted
    to the candidates (:func:`fit_circle`).

    Parameters
    ----------
    image : (H, W, 3) RGB or (H, W) grey picture.
    points_px : (478, 3) face-mesh landmarks in px.
    iris_px : (2, 2) mesh iris centres; iris_diam_px : (2,) mesh iris diameters.
    min_points : int
        Fewest limbus candidates needed for a fit; otherwise the mesh point is kept.
    passes : int
        Rays are cast again from the fitted centre this many times in all
        (the first pass starts from the mesh point, which may be off).

    Returns
    -------
    centres : (2, 2) px; fitted : (2,) bool (False = the mesh point was kept).

    Several frames at once: :func:`limbus_centres_many` (the same results).
    """
    return limbus_centres_many([(image, points_px, iris_px, iris_diam_px)], min_points=min_points,
                               n_rays=n_rays, passes=passes, shapes=None if shapes is None else [shapes], edge=edge)[0]


class _Eye:
    """One eye's region of one frame, prepared for ray casting (ROI px)."""

    __slots__ = ("frame", "eye", "origin", "c0", "r", "g", "dist", "radii", "cur", "r_fit", "index", "ray_x", "ray_y",
                 "rad_step", "warp", "pad", "side_arcs", "fitted")

    def __init__(self, frame, eye, origin, c0, r, g, dist, radii):
        self.frame, self.eye, self.origin = frame, eye, origin
        self.c0, self.r, self.g, self.dist, self.radii = c0, r, g, dist, radii
        self.cur, self.r_fit = c0, r
        self.index = -1  # row in the batch's distance maps (:func:`limbus_centres_many`)
        self.ray_x = self.ray_y = None  # the rays' sample offsets from the centre (the same in every pass)
        self.rad_step = (radii[-1] - radii[0]) / (len(radii) - 1)
        self.warp = None  # (2, 2) map that turns the eye's expected ellipse into a circle (:func:`shape_warp`)
        self.pad = 0  # samples read beyond each end of ``radii`` (for the edge-profile model, :func:`_model_edges`)
        self.side_arcs = False  # the fit's rule for the candidates near the horizontal (SIDE_DEG)
        self.fitted = False

    def copy(self) -> _Eye:
        """The same eye region (its arrays shared), to be fitted anew."""
        other = _Eye(self.frame, self.eye, self.origin, self.c0, self.r, self.g, self.dist, self.radii)
        other.index, other.ray_x, other.ray_y, other.pad, other.warp = (self.index, self.ray_x, self.ray_y, self.pad,
                                                                        self.warp)
        return other


def _prepare_eye(cv2, image, points_px, outline, c0, r, frame, e) -> _Eye | None:
    """The eye region, its smoothed grey picture and the distance to the lids (once per eye and frame)."""
    h, w = image.shape[:2]
    reach = ROI_RADII * r
    x0, x1 = int(max(0, np.floor(c0[0] - reach))), int(min(w, np.ceil(c0[0] + reach) + 1))
    y0, y1 = int(max(0, np.floor(c0[1] - reach))), int(min(h, np.ceil(c0[1] + reach) + 1))
    if x1 - x0 < 8 or y1 - y0 < 8:
        return None
    roi = image[y0:y1, x0:x1]
    g = cv2.transform(roi.astype(np.float32), _THIRDS) if roi.ndim == 3 else roi.astype(np.float32)
    g = cv2.GaussianBlur(g, (3, 3), 0.8)
    # the region's coordinates are OpenCV's (its pixel (0, 0)'s centre at 0): picture position = region
    # position + origin, with origin the picture position of that pixel's centre (aspectus.schema's convention)
    origin = from_opencv_px([x0, y0])
    mask = np.zeros(g.shape, np.uint8)
    # the outline at 1/16 px (fillPoly's fixed-point vertices), not rounded to whole pixels
    cv2.fillPoly(mask, [np.round((points_px[outline, :2] - origin) * 16).astype(np.int32)], 1, cv2.LINE_8, 4)
    dist = cv2.distanceTransform(mask, cv2.DIST_L2, 3)
    radii = np.linspace(0.6 * r, 1.5 * r, max(12, int(np.ceil(1.8 * r))))
    return _Eye(frame, e, origin, c0 - origin, r, g, dist, radii)


def fill_bright_spots(g: np.ndarray, centre: np.ndarray, r: float) -> int:
    """Fill compact bright spots inside the iris disc from their surround, in place; returns the pixels filled.

    A light source mirrored by the cornea (a screen, a window, a lamp: the first Purkinje image) is a small
    near-saturated patch on the iris. Common practice in pupil and iris localisation is to find such
    reflections and leave them out (fill them in) before measuring the eye. Here, within ``SPOT_DISC_RADII`` iris
    radii of ``centre`` (the region's coordinates, pixel centres at integers), pixels brighter than the disc's
    median by ``SPOT_MIN_EXCESS`` grey levels and 4 robust SDs form spots; a spot that reaches the disc's edge
    (sclera or lid skin where the centre is off) or covers more than ``SPOT_MAX_SHARE`` of the disc is left
    alone. Each spot takes in the pixels within a tenth of the radius (and 1 px) of it that are still brighter
    than the median by a fifth of that excess (its blurred halo), and one pixel more, within the disc; it is
    filled with the median of the unlit disc pixels within 2 px around it (the iris there).
    """
    cv2 = import_cv2()
    h, w = g.shape
    rad = SPOT_DISC_RADII * r
    x0, x1 = int(max(0, np.floor(centre[0] - rad - 3))), int(min(w, np.ceil(centre[0] + rad + 4)))
    y0, y1 = int(max(0, np.floor(centre[1] - rad - 3))), int(min(h, np.ceil(centre[1] + rad + 4)))
    if x1 - x0 < 3 or y1 - y0 < 3:
        return 0
    sub = g[y0:y1, x0:x1]
    yy, xx = np.mgrid[y0:y1, x0:x1]
    d = np.hypot(xx - centre[0], yy - centre[1])
    disc = d <= rad
    if disc.sum() < 12:
        return 0
    vals = sub[disc]
    med = float(np.median(vals))
    sd = 1.4826 * float(np.median(np.abs(vals - med)))
    excess = max(SPOT_MIN_EXCESS, 4.0 * sd)
    seeds = (disc & (sub > med + excess)).astype(np.uint8)
    if not seeds.any():
        return 0
    n, lab = cv2.connectedComponents(seeds, connectivity=8)
    edge = disc & (d > rad - 1.0)
    core = np.zeros(sub.shape, np.uint8)
    for k in range(1, n):
        spot = lab == k
        if (spot & edge).any() or spot.sum() > SPOT_MAX_SHARE * disc.sum():
            continue
        core[spot] = 1
    if not core.any():
        return 0
    # the blurred halo: pixels near a core still above the median by a fifth of the excess, and one pixel more
    reach = 1 + int(round(0.1 * r))
    near = cv2.dilate(core, np.ones((2 * reach + 1,) * 2, np.uint8)).astype(bool)
    lit = sub > med + 0.2 * excess
    mask = cv2.dilate((core.astype(bool) | (near & lit)).astype(np.uint8), np.ones((3, 3), np.uint8)).astype(bool)
    mask &= disc
    # the fill: the iris around the spot (the disc's pixels within 2 px of it that are not lit), not the rim's
    # blur or the sclera beyond it
    ring = cv2.dilate(mask.astype(np.uint8), np.ones((5, 5), np.uint8)).astype(bool) & ~mask & disc & ~lit
    if ring.sum() < 3:
        return 0
    sub[mask] = np.median(sub[ring])
    return int(mask.sum())


def fill_iris_reflections(image: np.ndarray, iris_px, iris_diam_px) -> tuple[np.ndarray, int]:
    """A copy of the RGB picture with compact bright spots on both irises filled (:func:`fill_bright_spots` on
    the grey picture, the change added to each colour channel), and the pixels filled; the picture itself when
    there is nothing to fill.

    ``iris_px`` (2, 2) and ``iris_diam_px`` (2,): where the irises are expected (aspectus.schema's picture
    convention), e.g. the face mesh's in the frame before. The face mesh reads a screen mirrored by the cornea
    as part of the eye (on rendered 12 px irises its iris point's horizontal error SD went from 0.4 to 1.2 px
    on one eye: docs/notes/gaze-measurement.md), so the pipeline fills the reflections before it runs the mesh.
    """
    out, n = image, 0
    h, w = image.shape[:2]
    for c, dmt in zip(np.asarray(iris_px, float), np.asarray(iris_diam_px, float)):
        r = 0.5 * dmt
        if not (np.isfinite(r) and r >= 2.5 and np.all(np.isfinite(c))):
            continue
        x0, y0 = int(max(0, np.floor(c[0] - 2 * r))), int(max(0, np.floor(c[1] - 2 * r)))
        x1, y1 = int(min(w, np.ceil(c[0] + 2 * r) + 1)), int(min(h, np.ceil(c[1] + 2 * r) + 1))
        if x1 - x0 < 4 or y1 - y0 < 4:
            continue
        sub = image[y0:y1, x0:x1].astype(np.float32)
        grey = sub.mean(axis=2) if sub.ndim == 3 else sub.copy()
        before = grey.copy()
        k = fill_bright_spots(grey, to_opencv_px(c) - [x0, y0], r)
        if not k:
            continue
        if out is image:
            out = image.copy()
        change = grey - before
        out[y0:y1, x0:x1] = np.clip(sub + (change[..., None] if sub.ndim == 3 else change) + 0.5, 0, 255).astype(
            image.dtype)
        n += k
    return out, n


def shape_warp(ratio: float, angle_rad: float) -> np.ndarray | None:
    """The linear map that stretches an ellipse of minor/major ``ratio``, minor axis at ``angle_rad`` from the
    picture's x axis (towards +y), along its minor axis into a circle of its major radius (None: a circle)."""
    if not (np.isfinite(ratio) and np.isfinite(angle_rad)) or ratio >= 1.0 or ratio <= 0.0:
        return None
    u = np.array([np.cos(angle_rad), np.sin(angle_rad)])
    return np.eye(2) + (1.0 / ratio - 1.0) * np.outer(u, u)


def iris_shape(offset_px: np.ndarray, r_px: float) -> tuple[float, float]:
    """The projected iris's (minor/major ratio, minor-axis angle, rad) from the iris centre's picture offset from
    the eyeball centre's picture position and the iris's radius, px (weak perspective).

    The iris centre lies ``IRIS_PLANE_RADIUS_MM`` (10.5 mm) from the eyeball centre along the gaze ``g``, so its
    offset in the picture is that length times the component of ``g`` across the line of sight, at the iris's
    own scale (``r_px`` per 5.85 mm): ``|offset| / (r_px * 10.5 / 5.85) = sin(theta)``, ``theta`` the angle
    between the gaze and the line of sight. The iris disc is perpendicular to ``g``, so its picture is an
    ellipse with minor/major ratio ``cos(theta)``, its minor axis along the offset (the orthographic image of
    a tilted circle).
    """
    s = float(np.hypot(offset_px[0], offset_px[1])) / (r_px * _PLANE_PER_IRIS_RADIUS)
    if not np.isfinite(s):
        return 1.0, 0.0
    s = min(s, _MAX_SIN)
    return float(np.sqrt(1.0 - s * s)), float(np.arctan2(offset_px[1], offset_px[0]))


def limbus_centres_many(items, *, min_points: int = 8, n_rays: int = 48, passes: int = 2,
                        diameters: bool = False, shapes=None, eyeball_px=None,
                        edge: str = "steepest", contrast: bool = False, side_arcs: bool = False
                        ) -> list[tuple[np.ndarray, ...]]:
    """:func:`limbus_centres` of several frames, ``items`` = [(image, points_px, iris_px, iris_diam_px), ...].

    With ``diameters`` each frame's tuple also holds both eyes' fitted circle diameters, px (2,), NaN where
    the fit failed (the iris scale, :func:`aspectus.webcam.gaze.limbus_iris_scale`). With ``contrast`` it then
    also holds both eyes' iris contrast against the sclera, % (:func:`limbus_contrast`; NaN where it was not measured).

    ``eyeball_px``: per frame None or both eyeball centres' picture positions (2, 2), in the pictures'
    coordinates: the iris is then fitted as the ellipse the first pass's circle predicts (:func:`iris_shape`),
    ``passes`` more times, and the diameters are the ellipses' major axes. ``shapes``: per frame None or a
    fixed (ratio, minor-axis angle) per eye (2, 2) for every pass (for measurements against a known shape).

    ``side_arcs``: the candidates within :data:`SIDE_DEG` of the horizontal count as rim, never as lid (the
    one-sided weights apply to the others only; ``GazeParams.side_arcs``). Both fits of the same frames at once:
    :func:`limbus_centres_variants`.

    The ray casting and circle fits of all eyes run together, pass by pass
    (the per-eye arithmetic is the same; NumPy's per-call cost, which is
    most of the time for a few dozen points, is paid once per pass rather
    than once per eye).
    """
    variant = "side" if side_arcs else "plain"
    plain, side = limbus_centres_variants(items, [variant] * len(items), min_points=min_points, n_rays=n_rays,
                                          passes=passes, diameters=diameters, shapes=shapes, eyeball_px=eyeball_px,
                                          edge=edge, contrast=contrast)
    return side if side_arcs else plain


#: the fits :func:`limbus_centres_variants` makes of a frame
FIT_VARIANTS = ("plain", "side", "both")


def limbus_centres_variants(items, variants, *, min_points: int = 8, n_rays: int = 48, passes: int = 2,
                            diameters: bool = False, shapes=None, eyeball_px=None, edge: str = "steepest",
                            contrast: bool = False) -> tuple[list, list]:
    """:func:`limbus_centres_many` of each frame without (``"plain"``), with (``"side"``) or without and with
    (``"both"``) ``side_arcs``, ``variants`` one per frame: (the fits without, the fits with), each a list with
    one entry per frame, None for a frame not fitted that way. The eye regions are prepared once and all fits
    run in one batch."""
    if edge not in EDGE_LOCATORS:
        raise ValueError(f"edge = {edge!r} is not one of {EDGE_LOCATORS}")
    if len(variants) != len(items) or any(v not in FIT_VARIANTS for v in variants):
        raise ValueError(f"variants: one of {FIT_VARIANTS} per frame expected")
    cv2 = import_cv2()
    if n_rays not in _RAYS:
        ang = np.linspace(0, 2 * np.pi, n_rays, endpoint=False)
        _RAYS[n_rays] = (np.cos(ang), np.sin(ang))
    cos_a, sin_a = _RAYS[n_rays]
    prepared = []
    for f, (image, points_px, iris_px, iris_diam_px) in enumerate(items):
        for e, outline in enumerate(_OUTLINES):
            r = 0.5 * float(iris_diam_px[e])
            c0 = np.array(iris_px[e], float)
            if not (np.isfinite(r) and r >= 2.5 and np.all(np.isfinite(c0))):
                continue
            eye = _prepare_eye(cv2, image, points_px, outline, c0, r, f, e)
            if eye is not None:
                if shapes is not None and shapes[f] is not None:
                    eye.warp = shape_warp(float(shapes[f][e][0]), float(shapes[f][e][1]))
                prepared.append(eye)
    dist = _distance_maps(prepared) if prepared else None
    # the batch: the eyes fitted without the side-arc rule first, then those fitted with it (copies of the same
    # regions where a frame is fitted both ways)
    plain_eyes = [eye for eye in prepared if variants[eye.frame] != "side"]
    side_eyes = [eye.copy() if variants[eye.frame] == "both" else eye for eye in prepared
                 if variants[eye.frame] != "plain"]
    for eye in side_eyes:
        eye.side_arcs = True
    eyes = plain_eyes + side_eyes
    active = eyes
    # with the eyeball centres a circle is fitted first and the ellipse it predicts ``passes`` times after it,
    # each time with the shape its last fit predicts (the circle's radius lies between the ellipse's axes, which
    # makes the first prediction's ratio a little off)
    for _ in range(passes + (eyeball_px is not None)):
        if not active:
            break
        results = _fit_many(cv2, active, cos_a, sin_a, min_points, dist, edge)
        still = []
        for eye, nxt in zip(active, results):
            if nxt is None or np.hypot(*(nxt[0] - eye.c0)) > eye.r:
                continue
            eye.cur, eye.r_fit = nxt
            eye.fitted = True
            if eyeball_px is not None and eyeball_px[eye.frame] is not None:
                # the next pass fits the ellipse this centre predicts
                ratio, ang = iris_shape(eye.cur + eye.origin - np.asarray(eyeball_px[eye.frame][eye.eye], float),
                                        eye.r_fit)
                eye.warp = shape_warp(ratio, ang)
            still.append(eye)
        active = still
    out = []
    for name, mine in (("plain", plain_eyes), ("side", side_eyes)):
        wanted = [v in (name, "both") for v in variants]
        outs = [np.array(item[2], float).copy() if w_ else None for item, w_ in zip(items, wanted)]
        fitted = [np.zeros(2, bool) if w_ else None for w_ in wanted]
        diams = [np.full(2, np.nan) if w_ else None for w_ in wanted]
        steps = [np.full(2, np.nan) if w_ else None for w_ in wanted]
        for eye in mine:
            outs[eye.frame][eye.eye] = eye.cur + eye.origin
            if eye.fitted:
                fitted[eye.frame][eye.eye] = True
                diams[eye.frame][eye.eye] = 2.0 * eye.r_fit
            if contrast:
                steps[eye.frame][eye.eye] = limbus_contrast(eye.g, eye.dist, eye.cur, eye.r_fit)
        if contrast:
            rows = [(o, f_, d, st) for o, f_, d, st in zip(outs, fitted, diams, steps)]
        elif diameters:
            rows = [(o, f_, d) for o, f_, d in zip(outs, fitted, diams)]
        else:
            rows = [(o, f_) for o, f_ in zip(outs, fitted)]
        out.append([row if w_ else None for row, w_ in zip(rows, wanted)])
    return out[0], out[1]


def limbus_contrast(grey: np.ndarray, lid_dist: np.ndarray, centre: np.ndarray, r: float) -> float:
    """How much darker the iris is than the white of the eye, in % of the white's grey: 100 x (sclera - iris) /
    sclera, with ``sclera`` and ``iris`` the median greys of the rings :data:`CONTRAST_SCLERA_RING` and
    :data:`CONTRAST_IRIS_RING` (iris radii ``r`` about ``centre``, px, in ``grey``'s coordinates), both read inside
    the eye opening (``lid_dist``, the distance to the lids' outline, at least 1 px). The grey is what the limbus
    fit reads (the mean of R, G, B). NaN where a ring holds fewer than 3 pixels.

    A ratio, so that the same eye reads the same under a brighter or dimmer light (a gain on the picture). A dark
    iris is 50-70 % darker than the sclera beside it on the rendered grid; a light (blue-grey) one 14-22 %, and the
    limbus fit then follows whatever edge is strongest (docs/notes/gaze-measurement.md, "Light irises and
    exposure blur in the rendered grid").
    """
    h, w = grey.shape
    yy, xx = np.mgrid[0:h, 0:w]
    d = np.hypot(xx - centre[0], yy - centre[1]) / max(float(r), 1e-6)
    inside = lid_dist >= 1.0
    iris = grey[inside & (d >= CONTRAST_IRIS_RING[0]) & (d <= CONTRAST_IRIS_RING[1])]
    sclera = grey[inside & (d >= CONTRAST_SCLERA_RING[0]) & (d <= CONTRAST_SCLERA_RING[1])]
    if iris.size < 3 or sclera.size < 3:
        return float("nan")
    white = float(np.median(sclera))
    return 100.0 * (white - float(np.median(iris))) / max(white, 1.0)


def pupil_centre(image: np.ndarray, points_px: np.ndarray, iris_px, iris_diam_px: float, eye: int):
    """One eye's pupil centre, px (2,), or None: the centroid of the darkest :data:`PUPIL_DARKEST_FRAC` of the
    pixels inside the eye opening within :data:`PUPIL_REACH_RADII` iris radii of ``iris_px`` (the face mesh's
    point), then again about that centroid. What a light iris keeps where its edge against the sclera has gone
    (:func:`limbus_contrast`): its pupil, far darker than the iris round it. ``eye``: 0 right, 1 left (the mesh's
    outlines, as in :func:`limbus_centres`)."""
    cv2 = import_cv2()
    r = 0.5 * float(iris_diam_px)
    c = np.asarray(iris_px, float)
    if not (np.isfinite(r) and r >= 2.5 and np.all(np.isfinite(c))):
        return None
    for _ in range(2):
        e = _prepare_eye(cv2, image, points_px, _OUTLINES[eye], c, r, 0, eye)
        if e is None:
            return None
        yy, xx = np.mgrid[0:e.g.shape[0], 0:e.g.shape[1]]
        m = (np.hypot(xx - e.c0[0], yy - e.c0[1]) <= PUPIL_REACH_RADII * r) & (e.dist >= 1.0)
        if m.sum() < 10:
            return None
        k = max(3, int(round(PUPIL_DARKEST_FRAC * m.sum())))
        dark = np.argsort(e.g[m], kind="stable")[:k]
        c = np.array([xx[m][dark].mean(), yy[m][dark].mean()]) + e.origin
    return c


def _distance_maps(eyes: list) -> np.ndarray:
    """The eyes' distance-to-the-lids maps in one zero-padded (E, H, W) array (built once for all passes)."""
    hmax = max(eye.dist.shape[0] for eye in eyes)
    wmax = max(eye.dist.shape[1] for eye in eyes)
    dist = np.zeros((len(eyes), hmax, wmax), np.float32)
    for k, eye in enumerate(eyes):
        eye.index = k
        dist[k, : eye.dist.shape[0], : eye.dist.shape[1]] = eye.dist
    return dist


def _model_edges(profs: np.ndarray, i: np.ndarray, rad_step: np.ndarray, *, shift_px=EDGE_SHIFT_PX,
                 blur_px=EDGE_BLUR_PX, window_px: float | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Each ray's step position from a model of its grey profile rather than its steepest point.

    The profile within ``window_px`` of the steepest step is fitted, by least squares, with a blurred step
    from a flat level (the iris) to a level that changes linearly outwards (the sclera under a shading)::

        p(s) = a + c Phi(u) + e w (u Phi(u) + phi(u)),    u = (s - s0) / w

    (``Phi`` and ``phi`` the normal distribution and density: a step and a ramp that both start at ``s0``,
    blurred by the same Gaussian of SD ``w``). The position ``s0`` of the step's midpoint is the candidate.
    A shading that darkens the sclera towards a lid is a factor on the bright side of the step only, so it
    moves the steepest point of the blurred step into the iris - by up to a pixel where it leaves the step
    weak - while the midpoint of the fitted step stays: the ramp is part of the model. The three levels are
    linear given ``(s0, w)``, which are searched on a grid (``s0`` within ``shift_px`` of the steepest point in
    0.25 px steps; ``w`` each blur SD in ``blur_px``, one for the whole eye: the one
    most of its stronger steps fit best), the best ``s0`` refined by a parabola through the residuals of its
    grid neighbours. (A linear shading on the iris's side as well, or a blur fitted per ray, made the centres
    noisier on the rendered target clips: the extra terms trade against the step's position.)

    Parameters
    ----------
    profs : (E, R, M) grey profiles along the rays, evenly spaced ``rad_step`` (E,) px apart.
    i : (E, R) index in ``profs`` of the steepest step's inner sample (the step lies between ``i`` and ``i + 1``).

    Returns
    -------
    shift : (E, R) px, the fitted midpoint's distance outward from the steepest step's (``i + 0.5``);
    fitted : (E, R) bool, False where no dark-to-bright step fits better inside the grid's range (the steepest
    point is kept there).
    """
    E, R, M = profs.shape
    window_px = EDGE_WINDOW_PX if window_px is None else window_px
    h = int(np.ceil(window_px / float(np.min(rad_step)))) + 1
    offs = np.arange(-h, h + 1)
    pos = (offs[None, :] - 0.5) * rad_step[:, None]  # (E, W) px from the steepest step
    inwin = np.abs(pos) <= window_px
    j = np.clip(i[..., None] + offs, 0, M - 1)
    y = np.take_along_axis(profs, j, axis=2)
    ok_y = np.isfinite(y) & inwin[:, None, :]
    y = np.where(ok_y, y, 0.0)
    s0 = np.arange(shift_px[0], shift_px[1] + 1e-9, _EDGE_SHIFT_STEP_PX)
    from scipy.special import ndtr

    w = np.asarray(blur_px, float)
    d = pos[:, :, None, None] - s0[None, None, :, None]  # (E, W, S, 1)
    u = d / w  # (E, W, S, G)
    Phi = ndtr(u)
    ramp = w * (u * Phi + np.exp(-0.5 * u * u) / np.sqrt(2.0 * np.pi))
    B = np.stack(np.broadcast_arrays(np.ones_like(u), Phi, ramp), axis=-1)
    B *= inwin[:, :, None, None, None]
    A = np.einsum("ewsga,ewsgb->esgab", B, B) + 1e-9 * np.eye(3)
    by = np.einsum("erw,ewsga->ersga", y, B)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        coef = np.einsum("esgab,ersgb->ersga", np.linalg.pinv(A), by)
        sse = np.einsum("erw,erw->er", y, y)[..., None, None] - np.einsum("ersga,ersga->ersg", coef, by)
    n_s, n_g = len(s0), len(w)
    best = np.argmin(sse.reshape(E, R, -1), axis=2)
    bs, bg = best // n_g, best % n_g
    # one blur for the eye: the one most of its stronger steps chose (the picture's blur is the same on every
    # ray; a blur fitted per ray trades against the step's position where the step is weak)
    amp0 = np.take_along_axis(coef[..., 1].reshape(E, R, -1), best[..., None], axis=2)[..., 0]
    strong = amp0 >= np.median(amp0, axis=1, keepdims=True)
    votes = np.stack([((bg == g_) & strong).sum(axis=1) for g_ in range(n_g)], axis=1)
    bg = np.broadcast_to(np.argmax(votes, axis=1)[:, None], (E, R)).copy()
    bs = np.argmin(np.take_along_axis(sse, np.repeat(bg[..., None, None], n_s, axis=2), axis=3)[..., 0], axis=2)
    best = bs * n_g + bg
    inner = (bs > 0) & (bs < n_s - 1)
    gi = bg[..., None, None]
    line = np.take_along_axis(sse, np.broadcast_to(gi, (E, R, n_s, 1)), axis=3)[..., 0]  # (E, R, S) at the best w
    a_ = np.take_along_axis(line, np.clip(bs - 1, 0, n_s - 1)[..., None], axis=2)[..., 0]
    b_ = np.take_along_axis(line, bs[..., None], axis=2)[..., 0]
    c_ = np.take_along_axis(line, np.clip(bs + 1, 0, n_s - 1)[..., None], axis=2)[..., 0]
    amp = np.take_along_axis(coef[..., 1].reshape(E, R, -1), best[..., None], axis=2)[..., 0]
    with np.errstate(invalid="ignore", divide="ignore"):
        den = a_ - 2 * b_ + c_
        frac = np.where(den > 0, np.clip(0.5 * (a_ - c_) / np.where(den > 0, den, 1.0), -0.5, 0.5), 0.0)
    shift = s0[bs] + frac * _EDGE_SHIFT_STEP_PX
    fitted = inner & (amp > 0) & np.all(ok_y == inwin[:, None, :], axis=2) & np.isfinite(shift)
    return shift, fitted


def _fit_many(cv2, eyes: list, cos_a, sin_a, min_points, dist_all: np.ndarray | None = None, edge: str = "steepest"):
    """One pass of ray casting from each eye's current centre and circle fitting: [(centre, radius) or None].

    ``edge``: where on its grey profile a ray's candidate lies, ``"steepest"`` (the steepest step, sub-pixel) or
    ``"model"`` (the midpoint of a blurred step fitted to the profile around it, :func:`_model_edges`).

    The fit starts from the eye's current centre and radius (the previous pass's circle), with the radius
    kept within 15 % of the mesh's. ``dist_all`` holds the distance maps of the eyes' batch
    (:func:`_distance_maps`; built here when not given).
    """
    if dist_all is None:
        dist_all = _distance_maps(eyes)
    n_eyes, n_rays = len(eyes), len(cos_a)
    m = max(len(eye.radii) for eye in eyes)
    step = np.full((n_eyes, n_rays, m - 1), -np.inf)
    centre = np.array([eye.cur for eye in eyes], float)
    r = np.array([eye.r for eye in eyes])
    r_start = np.array([eye.r_fit for eye in eyes])
    n_rad = np.array([len(eye.radii) for eye in eyes])
    rad0 = np.array([eye.radii[0] for eye in eyes])
    rad_step = np.array([eye.rad_step for eye in eyes])
    shape = np.array([eye.g.shape for eye in eyes])
    rows = np.array([eye.index for eye in eyes])
    model = edge == "model"
    if model:
        # the profiles read EDGE_WINDOW_PX beyond the search range's ends as well, at the same spacing
        pads = [int(np.ceil(EDGE_WINDOW_PX / eye.rad_step)) + 1 for eye in eyes]
        profs = np.full((n_eyes, n_rays, m + 2 * max(pads)), np.nan)
    for k, eye in enumerate(eyes):
        if eye.ray_x is None or (model and eye.pad != pads[k]):
            eye.pad = pads[k] if model else 0
            rad = eye.radii if not eye.pad else eye.radii[0] + eye.rad_step * np.arange(-eye.pad, len(eye.radii) + eye.pad)
            eye.ray_x = cos_a[:, None] * rad[None, :]
            eye.ray_y = sin_a[:, None] * rad[None, :]
        cx, cy = eye.cur
        px = (cx + eye.ray_x).astype(np.float32)
        py = (cy + eye.ray_y).astype(np.float32)
        prof = cv2.remap(eye.g, px, py, cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)
        if model:
            profs[k, :, : prof.shape[1]] = prof
            prof = prof[:, eye.pad: eye.pad + len(eye.radii)]
        step[k, :, : len(eye.radii) - 1] = prof[:, 1:] - prof[:, :-1]  # outward dark -> bright is positive
    i = np.argmax(step, axis=2)  # (E, rays); the padding (-inf) is never the maximum
    peak = np.take_along_axis(step, i[..., None], axis=2)[..., 0]
    last = (n_rad - 2)[:, None]
    il, ir = np.maximum(i - 1, 0), np.minimum(i + 1, last)
    a_ = np.take_along_axis(step, il[..., None], axis=2)[..., 0]
    c_ = np.take_along_axis(step, ir[..., None], axis=2)[..., 0]
    with np.errstate(invalid="ignore"):
        den = a_ - 2 * peak + c_
        inner = (i > 0) & (i < last) & (den < 0)
        frac = np.where(inner, np.minimum(np.maximum(0.5 * (a_ - c_) / np.where(den == 0, -1, den), -0.5), 0.5), 0.0)
    # the radius at fractional sample index i + frac + 0.5 (samples evenly spaced; clamped at the ends as
    # linear interpolation between them is)
    x = i + frac + 0.5
    if model:
        shift, fitted = _model_edges(profs, i + np.array(pads)[:, None], rad_step)
        x = np.where(fitted, i + 0.5 + shift / rad_step[:, None], x)
    x = np.minimum(np.maximum(x, 0.0), (n_rad - 1)[:, None])
    rr = rad0[:, None] + x * rad_step[:, None]
    qx = centre[:, :1] + cos_a[None, :] * rr
    qy = centre[:, 1:] + sin_a[None, :] * rr
    # inside the eye opening, at least 2 px (distance transform) from the lid outline
    xi = np.minimum(np.maximum(np.round(qx).astype(np.intp), 0), shape[:, 1:2] - 1)
    yi = np.minimum(np.maximum(np.round(qy).astype(np.intp), 0), shape[:, 0:1] - 1)
    keep = (peak > 2.0) & (dist_all[rows[:, None], yi, xi] >= 2.0)  # > 2 grey levels per sample: a real edge
    ok = keep.sum(axis=1) >= min_points
    out: list = [None] * n_eyes
    if not ok.any():
        return out
    sel = np.flatnonzero(ok)
    pts = np.stack([qx[sel], qy[sel]], axis=2)
    c0 = centre[sel]
    # a known ellipse: the points stretched along its minor axis lie on a circle of its major radius
    warps = [eyes[k].warp for k in sel]
    shaped = np.array([w_ is not None for w_ in warps])
    if shaped.any():
        W = np.stack([np.eye(2) if w_ is None else w_ for w_ in warps])
        pts = np.einsum("eij,enj->eni", W, pts)
        c0 = np.einsum("eij,ej->ei", W, c0)
    # with the side-arc rule the candidates near the horizontal are rim whatever the lids do (SIDE_DEG): with
    # one-sided weights there too, a circle 2-3 px higher and 5-9 % larger through the lower lid's junction with
    # the iris, with the true rim's upper side arcs inside it, costs little, and the fit can flip between the two
    # from frame to frame (docs/notes/gaze-measurement.md)
    sides = np.array([eyes[k].side_arcs for k in sel])
    sided = None
    if sides.any():
        sided = ~sides[:, None] | (np.abs(sin_a)[None, :] >= np.sin(np.radians(SIDE_DEG)))
    c, rfit, rms = fit_circles(pts, keep[sel], c0, r[sel], r_tol=_R_TOL, inside_px=EDGE_NOISE_PX,
                               r_start=r_start[sel], sided=sided)
    grown = rfit >= (1 + _R_TOL) * r[sel] * (1 - 1e-9)
    if grown.any():
        # With the one-sided weights a circle that holds every candidate inside it costs little, so a fit
        # can grow round the candidates instead of running through the rim; its radius then ends at the
        # upper bound (on the rendered moving-head clips the fits that missed the iris centre by more than
        # 1.5 px had mostly reached it; the others end at a median 0.91-0.96 of the mesh's radius). The
        # symmetric fit is used instead.
        g_ = np.flatnonzero(grown)
        c2, r2, rms2 = fit_circles(pts[g_], keep[sel][g_], c0[g_], r[sel][g_], r_tol=_R_TOL,
                                   r_start=r_start[sel][g_])
        c[g_], rfit[g_], rms[g_] = c2, r2, rms2
    if shaped.any():
        c = np.einsum("eij,ej->ei", np.linalg.inv(W), c)
    for j, k in enumerate(sel):
        cj = c[j]
        if not np.all(np.isfinite(cj)) or np.hypot(cj[0] - centre[k, 0], cj[1] - centre[k, 1]) > r[k] or not rms[j] <= 1.5:
            continue
        out[k] = (cj.copy(), float(rfit[j]))
    return out
