"""Drawing one webcam-like frame: a posed face with moving eyes and lids.

Geometry (all in the camera frame of :mod:`aspectus.schema`, millimetres):

* A pinhole camera with principal point at the picture centre and focal
  length ``f = (width / 2) / tan(fov / 2)`` pixels. Picture coordinates are
  continuous with pixel ``i`` covering ``[i, i + 1)`` (the face mesh's
  convention: ``x = x_norm * width``).
* The photograph is scaled so that, with the head at its rest position, the
  photo's iris has the size an 11.7 mm iris has at that distance. Each
  landmark is lifted to 3-D by back-projecting its picture position at the
  depth ``Z_iris + z_mesh * mm_per_px``; the rest pose therefore reprojects
  exactly onto the photograph.
* Each eyeball is a 12 mm sphere (Bekerman, Gottlieb & Vaiman 2014 - field
  notes, from memory) centred 12 mm behind the photo's iris (the photographed
  person looks at the camera). The head origin is the midpoint of the two
  eyeball centres.
* A head pose ``(R, T)`` moves a rest point ``P`` to ``R (P - O_rest) + T``
  with ``R = Ry(yaw) Rx(-pitch) Rz(-roll)`` (see :func:`head_rotation`).
* The iris is a disc of diameter 11.7 mm perpendicular to the gaze
  direction ``g`` whose rim lies on the eyeball sphere, so its centre is
  ``eyeball_centre + sqrt(12^2 - 5.85^2) mm * g = eyeball_centre + 10.5 mm * g``
  (the same geometry :mod:`aspectus.webcam.gaze` assumes). It is drawn as its
  (affine-approximated) perspective image and clipped to the eyelid opening.
  (The disc's centre used to sit on the sphere, 12 mm from the eyeball
  centre: the drawn iris then moved 14 % further than the eyeball model
  predicts, which inflated every measured gaze gain by that much.)

The skin around the eyes follows the head by a piecewise-linear warp of the
photograph from the rest landmarks to the posed landmarks (Delaunay
triangulation with fixed anchors on a box around the face, so the background
outside the box does not move).

The whole head turns, not only the face-mesh surface. Hair, ears and
headwear beyond the face outline lie on a shell around the skull centre
(:meth:`FaceRig._head_shell`): each face-outline point's own distance from
that centre, continued outwards in the picture up to the shell's silhouette,
so they move rigidly with the head and go out of sight behind it when it
turns away. Only the neck below the mouth and the background beyond the
silhouette stay put. With the head off its rest pose the photograph is
warped as a textured triangle mesh fixed on the rest picture, drawn far to
near with back-facing triangles culled, so a turned head hides what a real
one would. (The warp used to move only the face-mesh points and stretch
everything outside them to the fixed box; the picture was then not that of a
turned head - the outline stayed nearly where it was - and the face mesh
read only 0.74-0.94 of a 15 deg head yaw on single frames.)
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from aspectus._env import import_cv2
from aspectus.geometry import focal_length_px
from aspectus.synth.face import EYE_CONTOUR, EYE_IRIS, EYES, IRIS_DIAMETER_MM, FacePhoto

#: eyeball radius, mm (Bekerman, Gottlieb & Vaiman 2014 - field notes, from memory)
EYEBALL_RADIUS_MM = 12.0
#: distance of the iris plane's centre from the eyeball centre: the 11.7 mm iris disc's rim on the sphere, mm
IRIS_PLANE_RADIUS_MM = float(np.sqrt(EYEBALL_RADIUS_MM ** 2 - (IRIS_DIAMETER_MM / 2) ** 2))
#: pupil diameter drawn inside the iris, mm (a mid-range indoor pupil - common practice, from memory)
PUPIL_DIAMETER_MM = 3.8
_TEX_PX = 64  # side of the canonical iris texture
#: iris colour presets, sRGB 0-255, for :class:`FaceRig`'s ``iris_rgb`` (the renderer's ``iris_colour``): the mean
#: colour of the iris stroma as a webcam shows it under indoor light (common practice, from memory; not measured).
#: The light one is about as bright as a dim sclera in the picture, so the limbus has little grey-level contrast.
IRIS_COLOURS = {"dark_brown": (62.0, 38.0, 26.0), "hazel": (124.0, 96.0, 58.0),
                "light_blue_grey": (132.0, 150.0, 162.0)}
#: anterior corneal radius of curvature, mm (Le Grand's schematic eye 7.8 mm, Gullstrand's 7.7 mm - from memory)
CORNEA_RADIUS_MM = 7.8
#: distance of the corneal apex from the eye's centre of rotation (the eyeball centre here), mm (field notes: about
#: 13 mm - from memory); the cornea's centre of curvature lies CORNEA_RADIUS_MM behind the apex, so
#: 13 - 7.8 = 5.2 mm in front of the centre of rotation (between it and the 10.5 mm iris plane)
CORNEA_APEX_MM = 13.0
CORNEA_CENTRE_MM = CORNEA_APEX_MM - CORNEA_RADIUS_MM

#: MediaPipe face-oval landmarks in order around the face (forehead, subject's left side, chin, right side)
FACE_OVAL = (10, 338, 297, 332, 284, 251, 389, 356, 454, 323, 361, 288, 397, 365, 379, 378, 400, 377, 152,
             148, 176, 149, 150, 136, 172, 58, 132, 93, 234, 127, 162, 21, 54, 103, 67, 109)
#: glabella (between the brows) and the mouth corners of the face mesh
GLABELLA, MOUTH_CORNERS = 9, (61, 291)
#: maximum head length (glabella to opisthocranion) of adults, mm (Farkas 1994, anthropometry of the head
#: and face - from memory, about 185-195 mm); the skull centre lies half of it behind the glabella
HEAD_LENGTH_MM = 190.0
#: where the shell points sit, as fractions of the way from a face-outline point to the shell's silhouette (sampling
#: of the surface, not a physical size; the last one stays just inside the silhouette, where rays graze the sphere)
_SHELL_STEPS = (0.3, 0.6, 0.97)


def gaze_vector(yaw_deg, pitch_deg) -> np.ndarray:
    """Unit gaze direction(s) in the camera frame from yaw and pitch in degrees (schema.py's frame).

    ``yaw = atan2(-gx, -gz)`` and ``pitch = atan2(-gy, hypot(gx, gz))``; the
    result has shape ``(..., 3)``.
    """
    y = np.radians(np.asarray(yaw_deg, dtype=float))
    p = np.radians(np.asarray(pitch_deg, dtype=float))
    return np.stack([-np.cos(p) * np.sin(y), -np.sin(p), -np.cos(p) * np.cos(y)], axis=-1)


def head_rotation(yaw_deg: float = 0.0, pitch_deg: float = 0.0, roll_deg: float = 0.0) -> np.ndarray:
    """Head-to-camera rotation matrix for a head pose in degrees (schema.py's frame).

    ``R = Ry(yaw) @ Rx(-pitch) @ Rz(-roll)``: the face normal ``(0, 0, -1)``
    (towards the camera) turns to yaw ``yaw_deg`` and pitch ``pitch_deg`` by
    the same formulas as gaze; roll turns the head's up vector towards the
    subject's right shoulder (picture left) for ``roll_deg > 0``.
    """
    a, b, c = np.radians([yaw_deg, -pitch_deg, -roll_deg])
    ry = np.array([[np.cos(a), 0, np.sin(a)], [0, 1, 0], [-np.sin(a), 0, np.cos(a)]])
    rx = np.array([[1, 0, 0], [0, np.cos(b), -np.sin(b)], [0, np.sin(b), np.cos(b)]])
    rz = np.array([[np.cos(c), -np.sin(c), 0], [np.sin(c), np.cos(c), 0], [0, 0, 1]])
    return ry @ rx @ rz


@dataclass(frozen=True)
class Camera:
    """Pinhole camera: picture size in pixels and horizontal field of view in degrees."""

    width_px: int
    height_px: int
    fov_deg: float = 60.0

    @property
    def focal_px(self) -> float:
        return focal_length_px(width_px=self.width_px, fov_deg=self.fov_deg)

    @property
    def centre_px(self) -> tuple[float, float]:
        return self.width_px / 2.0, self.height_px / 2.0

    def project(self, pts_mm: np.ndarray) -> np.ndarray:
        """Project (N, 3) camera-frame points (mm) to (N, 2) picture coordinates (px)."""
        f = self.focal_px
        cx, cy = self.centre_px
        z = pts_mm[..., 2]
        return np.stack([cx + f * pts_mm[..., 0] / z, cy + f * pts_mm[..., 1] / z], axis=-1)


@dataclass(frozen=True)
class CornealReflection:
    """A light source mirrored by the cornea (the first Purkinje image), drawn on each eye.

    The default is a 50 x 30 cm screen facing the subject, its centre 16 cm below the camera and 2 cm behind
    it (a monitor with the webcam on its top edge).

    Attributes
    ----------
    source_mm : (x, y, z)
        The source's centre in the camera frame (aspectus.schema: x to the picture's right, y down, z away
        from the camera), mm.
    size_mm : (width, height)
        The source's extent, a rectangle facing the camera's direction (in the camera's x-y plane), mm.
    brightness : float
        Grey level (0-255) the reflection shows where it covers a whole pixel before blur, compression and the
        lighting changes (a screen's reflection is near saturated on webcam pictures).
    """

    source_mm: tuple = (0.0, 160.0, -20.0)
    size_mm: tuple = (500.0, 300.0)
    brightness: float = 245.0

    def __post_init__(self):
        from aspectus.errors import ParameterError

        src, size = np.asarray(self.source_mm, float), np.asarray(self.size_mm, float)
        if src.shape != (3,) or not np.all(np.isfinite(src)):
            raise ParameterError(f"corneal reflection source_mm must be (x, y, z) in mm, got {self.source_mm!r}")
        if size.shape != (2,) or not np.all(np.isfinite(size)) or np.any(size <= 0):
            raise ParameterError(f"corneal reflection size_mm must be (width, height) above 0 mm, got {self.size_mm!r}")
        if not (np.isfinite(self.brightness) and 0.0 <= float(self.brightness) <= 255.0):
            raise ParameterError(f"corneal reflection brightness must be a grey level 0-255, got {self.brightness!r}")

    def outline_mm(self) -> np.ndarray:
        """(4, 3) corners of the source, camera frame, mm."""
        (x, y, z), (w, h) = self.source_mm, self.size_mm
        return np.array([[x - w / 2, y - h / 2, z], [x + w / 2, y - h / 2, z], [x + w / 2, y + h / 2, z],
                         [x - w / 2, y + h / 2, z]], float)


def corneal_reflection_points_mm(eyeball_mm, gaze, sources_mm) -> tuple[np.ndarray, np.ndarray]:
    """Where the cornea mirrors point sources towards the camera (at the origin), camera frame, mm.

    The cornea is a sphere of radius :data:`CORNEA_RADIUS_MM` centred :data:`CORNEA_CENTRE_MM` from the
    eyeball centre along the gaze. A source is seen where the sphere's outward normal bisects the directions to
    the camera and to the source (the law of reflection); with both much further away than the radius, the
    virtual image lies on that line of sight, about half the radius behind the surface, so its picture
    position is the projection of this surface point. Returns the (N, 3) points and (N,) bool: the point lies
    on the corneal cap (within the 11.7 mm limbus circle), not on the sclera.
    """
    centre = np.asarray(eyeball_mm, float) + CORNEA_CENTRE_MM * np.asarray(gaze, float)
    src = np.atleast_2d(np.asarray(sources_mm, float))
    to_cam = -centre / np.linalg.norm(centre)
    to_src = src - centre
    to_src /= np.linalg.norm(to_src, axis=1, keepdims=True)
    n = to_cam[None, :] + to_src
    n /= np.linalg.norm(n, axis=1, keepdims=True)
    cap = np.cos(np.arcsin((IRIS_DIAMETER_MM / 2) / CORNEA_RADIUS_MM))
    return centre + CORNEA_RADIUS_MM * n, (n @ np.asarray(gaze, float)) >= cap


def _iris_texture(rgb, seed: int) -> np.ndarray:
    """Canonical iris disc (RGBA float32, _TEX_PX square): radial streaks, dark limbus, pupil."""
    rng = np.random.default_rng(seed)
    n = _TEX_PX
    yy, xx = np.mgrid[0:n, 0:n]
    c = (n - 1) / 2.0
    rho = np.hypot(xx - c, yy - c) / (n / 2.0)
    th = np.arctan2(yy - c, xx - c)
    streak = np.zeros_like(rho)
    for k in rng.integers(12, 60, 10):
        streak += np.sin(k * th + rng.uniform(0, 2 * np.pi)) * rng.uniform(0.3, 1.0)
    streak /= np.abs(streak).max()
    base = np.asarray(rgb, dtype=float)
    shade = 0.9 + 0.18 * streak * (rho > 0.35)
    shade *= 1.0 + 0.12 * np.exp(-((rho - 0.5) / 0.08) ** 2)  # collarette
    shade *= np.where(rho > 0.82, 1.0 - 0.55 * np.clip((rho - 0.82) / 0.18, 0, 1), 1.0)  # limbus
    col = base[None, None, :] * shade[..., None]
    pupil_r = PUPIL_DIAMETER_MM / IRIS_DIAMETER_MM
    pw = np.clip((rho - pupil_r) / 0.05 + 0.5, 0, 1)[..., None]
    col = col * pw + np.array([14.0, 12.0, 12.0]) * (1 - pw)
    alpha = np.clip((1.0 - rho) * (n / 2.0) + 0.5, 0, 1)
    return np.dstack([col, alpha]).astype(np.float32)


#: most sub-pixels per picture pixel (per axis) with which a minified texture is drawn
MAX_SUPERSAMPLE = 8
#: how the iris texture becomes pixels (:class:`FaceRig`'s ``iris_sampling``)
IRIS_SAMPLING = ("area", "point")
#: the renderer's default ``iris_sampling``
DEFAULT_IRIS_SAMPLING = "area"


def _area_sampled_warp(texture: np.ndarray, A: np.ndarray, size_px: tuple[int, int], *,
                       max_supersample: int = MAX_SUPERSAMPLE) -> np.ndarray:
    """``texture`` warped by the affine map ``A`` (texture -> picture) into a ``size_px`` (w, h) patch, each picture
    pixel the mean over its area, as a camera's pixel integrates the light falling on it.

    A plain bilinear warp samples the texture at each pixel's centre only. Where the texture is minified (an iris
    of 8-16 px drawn from a 64-texel disc) that aliases: the disc's edge and its dark rim then move in jumps of up to
    about half a pixel as the disc moves smoothly (the rim's centre 0.05 px SD off at a 12 px iris), and the
    streaks shimmer. So the texture is warped onto ``k`` x ``k`` sub-pixels per pixel, ``k`` enough for at most one
    texel per sub-pixel along the disc's shorter axis (at most ``max_supersample``), and averaged back by area;
    ``max_supersample=1`` is the plain warp (``iris_sampling="point"``).
    """
    cv2 = import_cv2()
    w, h = size_px
    texel_px = float(np.linalg.svd(A[:, :2], compute_uv=False)[-1])  # picture px per texel, shorter axis
    k = int(np.clip(np.ceil(1.0 / max(texel_px, 1e-6) - 1e-9), 1, max_supersample))
    if k == 1:
        return cv2.warpAffine(texture, A, (w, h), flags=cv2.INTER_LINEAR, borderMode=cv2.BORDER_CONSTANT,
                              borderValue=0)
    # a picture coordinate u (pixel centres at whole numbers) is sub-pixel coordinate (u + 0.5) k - 0.5
    Ak = A.astype(np.float64) * k
    Ak[:, 2] += (k - 1) / 2.0
    fine = cv2.warpAffine(texture, Ak, (w * k, h * k), flags=cv2.INTER_LINEAR, borderMode=cv2.BORDER_CONSTANT,
                          borderValue=0)
    return cv2.resize(fine, (w, h), interpolation=cv2.INTER_AREA)


def _box_anchors(x0: float, y0: float, x1: float, y1: float, per_side: int = 12) -> np.ndarray:
    """Fixed points along the edges of the warped box (so the warp leaves the picture outside it as it is)."""
    bx = np.linspace(x0, x1, per_side)
    by = np.linspace(y0, y1, per_side)
    return np.unique(np.vstack([np.c_[bx, np.full_like(bx, y0)], np.c_[bx, np.full_like(bx, y1)],
                                np.c_[np.full_like(by, x0), by], np.c_[np.full_like(by, x1), by]]), axis=0)


def _piecewise_affine_grid(dst: np.ndarray, src: np.ndarray, *, x0: int, y0: int, nx: int, ny: int,
                           step_px: int) -> np.ndarray:
    """Source positions of a piecewise-affine warp, sampled on a grid of destination positions.

    The destination points are Delaunay-triangulated; each triangle maps
    affinely onto its source triangle. Grid node ``(i, j)`` sits at picture
    position ``(x0 + (j + 0.5) * step_px, y0 + (i + 0.5) * step_px)``; nodes
    outside every triangle keep their own position. Returns (ny, nx, 2)
    float32 source positions in picture coordinates.
    """
    from scipy.spatial import Delaunay

    cv2 = import_cv2()
    tri = Delaunay(dst)
    simp = tri.simplices
    d = dst[simp]                                    # (k, 3, 2)
    m = np.concatenate([d, np.ones(d.shape[:2] + (1,))], axis=2)  # rows [x, y, 1]
    coef = np.linalg.pinv(m) @ src[simp]             # (k, 3, 2): [x, y, 1] @ coef = source
    ids = np.zeros((ny, nx), np.int32)
    grid_pts = ((d - [x0, y0]) / step_px - 0.5) * 16  # cv2 pixel-centre grid coordinates, 4 fractional bits
    grid_pts = np.round(grid_pts).astype(np.int32)
    for k in range(len(simp)):
        cv2.fillConvexPoly(ids, grid_pts[k], k + 1, lineType=cv2.LINE_8, shift=4)
    gx = x0 + (np.arange(nx) + 0.5) * step_px
    gy = y0 + (np.arange(ny) + 0.5) * step_px
    GX, GY = np.meshgrid(gx, gy)
    out = np.stack([GX, GY], axis=-1)
    inside = ids > 0
    c = coef[ids[inside] - 1]                        # (n, 3, 2)
    xs, ys = GX[inside], GY[inside]
    out[inside] = xs[:, None] * c[:, 0] + ys[:, None] * c[:, 1] + c[:, 2]
    return out.astype(np.float32)


def _mesh_warp_grid(src: np.ndarray, dst: np.ndarray, simplices: np.ndarray, depth: np.ndarray, *, x0: int, y0: int,
                    nx: int, ny: int, step_px: int) -> np.ndarray:
    """Source positions of a textured triangle mesh drawn with occlusion, on a grid of destination positions.

    Unlike :func:`_piecewise_affine_grid` the triangles are fixed on the
    source (rest) picture, so a surface that turns away folds over instead of
    being re-triangulated: triangles are drawn far to near (mean depth of
    their corners, ``depth`` per point), the nearer one wins where they
    overlap, and triangles whose orientation flips (seen from behind) are
    not drawn. Grid nodes covered by no triangle keep their own position.
    Grid layout and return value as in :func:`_piecewise_affine_grid`.
    """
    cv2 = import_cv2()
    d = dst[simplices]                                # (k, 3, 2)
    s = src[simplices]
    area = lambda t: ((t[:, 1, 0] - t[:, 0, 0]) * (t[:, 2, 1] - t[:, 0, 1])
                      - (t[:, 1, 1] - t[:, 0, 1]) * (t[:, 2, 0] - t[:, 0, 0]))
    a_src, a_dst = area(s), area(d)
    front = (a_src * a_dst > 0) & (np.abs(a_dst) > 1e-6)
    m = np.concatenate([d, np.ones(d.shape[:2] + (1,))], axis=2)
    coef = np.zeros((len(simplices), 3, 2))
    coef[front] = np.linalg.solve(m[front], s[front])  # [x, y, 1] @ coef = source
    order = np.flatnonzero(front)
    order = order[np.argsort(-depth[simplices[order]].mean(axis=1), kind="stable")]  # far first
    ids = np.zeros((ny, nx), np.int32)
    grid_pts = np.round(((d - [x0, y0]) / step_px - 0.5) * 16).astype(np.int32)
    for k in order:
        cv2.fillConvexPoly(ids, grid_pts[k], int(k) + 1, lineType=cv2.LINE_8, shift=4)
    gx = x0 + (np.arange(nx) + 0.5) * step_px
    gy = y0 + (np.arange(ny) + 0.5) * step_px
    GX, GY = np.meshgrid(gx, gy)
    out = np.stack([GX, GY], axis=-1)
    inside = ids > 0
    c = coef[ids[inside] - 1]
    xs, ys = GX[inside], GY[inside]
    out[inside] = xs[:, None] * c[:, 0] + ys[:, None] * c[:, 1] + c[:, 2]
    return out.astype(np.float32)


#: the first three rings of face-mesh points below each lower lid, outer corner to inner corner (checked on
#: the rendered rest mesh: each ring lies 3-4, 8-9 and 13-15 mm below the lid's middle); the eye anchors
#: (aspectus.webcam.eye_anchors.ANCHOR_SETS) are the middle of the second ring and the outer ends of the second and
#: third rings
LOWER_SKIN_RINGS = {
    "right": ((130, 25, 110, 24, 23, 22, 26, 112, 243), (226, 31, 228, 229, 230, 231, 232, 233, 244),
              (35, 111, 117, 118, 119, 120, 121, 128, 245)),
    "left": ((359, 255, 339, 254, 253, 252, 256, 341, 463), (446, 261, 448, 449, 450, 451, 452, 453, 464),
             (265, 340, 346, 347, 348, 349, 350, 357, 465)),
}


class FaceRig:
    """A face photograph placed in front of a camera, posable and with drawable eyes.

    Parameters
    ----------
    face : FacePhoto
        The landmarked photograph.
    camera : Camera
        The camera the frames are rendered for.
    rest_head_mm : tuple of float
        Head origin (midpoint of the eyeball centres) in the camera frame at
        the rest pose, mm; the photograph is laid out for it.
    background : numpy.ndarray
        The plain picture behind the photograph, RGB uint8, camera size.
    lower_skin_follow : float
        How far the skin below each lower lid follows the lid's vertical
        movement with gaze (0 = not at all, the default; 1 = the first ring of
        face-mesh points below the lid moves as much as the lid, the second
        ring half as much, the third a quarter). For measuring how much of
        that motion reaches the gaze through the eye anchors
        (:mod:`aspectus.webcam.eye_anchors` follow skin of the second ring).
    lid_follow : float
        How far the lids follow vertical gaze, as a share of the usual
        lid-eye coordination (1 = the default: upper lid 0.8, lower lid 0.3
        of the front of the eye's vertical travel; 0 = lids that stay still).
    glasses : bool
        Draw spectacles: dark rims round both eyes about 24 mm in front of
        the eyeball centres, a bridge, slightly tinted lenses with a soft
        reflection, all moving with the head.
    iris_rgb : (float, float, float), optional
        Iris colour of both eyes, sRGB 0-255 (e.g. a value of
        :data:`IRIS_COLOURS`); by default each eye's colour in the photograph.
    corneal_reflection : CornealReflection, optional
        Draw the source's reflection on each cornea (None: no reflection,
        the default).
    iris_sampling : {"area", "point"}
        How the iris texture becomes pixels: ``"area"`` (the default since
        2026-12-05) averages it over each pixel's area, as a camera's pixel
        integrates light; ``"point"`` samples it at each pixel's centre, as
        the renderer did before, which aliases a small iris (its rim moves
        in jumps; :func:`_area_sampled_warp`). Kept for re-measuring figures
        taken on that renderer.
    """

    def __init__(self, face: FacePhoto, camera: Camera, *, rest_head_mm=(0.0, 0.0, 600.0),
                 background: np.ndarray, seed: int = 0, lower_skin_follow: float = 0.0, lid_follow: float = 1.0,
                 glasses: bool = False, iris_rgb=None, corneal_reflection: CornealReflection | None = None,
                 iris_sampling: str = DEFAULT_IRIS_SAMPLING):
        self.corneal_reflection = corneal_reflection
        if iris_sampling not in IRIS_SAMPLING:
            from aspectus.errors import ParameterError

            raise ParameterError(f"iris_sampling must be one of {', '.join(IRIS_SAMPLING)}, got {iris_sampling!r}")
        self.iris_sampling = iris_sampling
        cv2 = import_cv2()
        for name, v in (("lower_skin_follow", lower_skin_follow), ("lid_follow", lid_follow)):
            if not (0.0 <= float(v) <= 1.0):
                from aspectus.errors import ParameterError

                raise ParameterError(f"{name} must be 0-1, got {v}")
        self.lower_skin_follow = float(lower_skin_follow)
        self.lid_follow = float(lid_follow)
        self.glasses = bool(glasses)
        self.face = face
        self.camera = camera
        f = camera.focal_px
        cx, cy = camera.centre_px
        x0, y0, z0 = map(float, rest_head_mm)
        lm = face.landmarks_px
        iris_c = lm[[EYE_IRIS[e][0] for e in EYES]]
        z_iris = z0 - EYEBALL_RADIUS_MM
        # scale photo px -> canvas px so the photo iris is 11.7 mm at z_iris
        k = f * IRIS_DIAMETER_MM / (z_iris * face.iris_diameter_px)
        mid = iris_c[:, :2].mean(axis=0)
        target = np.array([cx + f * x0 / z_iris, cy + f * y0 / z_iris])
        off = target - k * mid
        self.photo_scale = k
        self.photo_offset_px = off
        uv = k * lm[:, :2] + off
        depth = z_iris + (lm[:, 2] - iris_c[:, 2].mean()) * face.mm_per_px
        self.rest_mesh_mm = np.stack([(uv[:, 0] - cx) * depth / f, (uv[:, 1] - cy) * depth / f, depth], axis=1)
        self.rest_uv = uv
        self.rest_eyeball_mm = {e: self.rest_mesh_mm[EYE_IRIS[e][0]] + np.array([0.0, 0.0, EYEBALL_RADIUS_MM])
                                for e in EYES}
        self.rest_origin_mm = 0.5 * (self.rest_eyeball_mm["right"] + self.rest_eyeball_mm["left"])
        span = uv.max(axis=0) - uv.min(axis=0)
        self.face_size_px = float(max(span))
        self.rest_shell_mm = self._head_shell()
        self.rest_shell_uv = camera.project(self.rest_shell_mm) if len(self.rest_shell_mm) else np.zeros((0, 2))

        # the photo composited onto the background with feathered edges
        h, w = camera.height_px, camera.width_px
        M = np.array([[k, 0, off[0] + 0.5 * k - 0.5], [0, k, off[1] + 0.5 * k - 0.5]])
        ph, pw = face.image.shape[:2]
        photo = cv2.warpAffine(face.image, M, (w, h), flags=cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)
        feather = max(4.0, 0.08 * k * min(ph, pw))
        a = np.zeros((ph, pw), np.float32)
        yy, xx = np.mgrid[0:ph, 0:pw]
        edge = np.minimum.reduce([xx + 0.5, yy + 0.5, pw - xx - 0.5, ph - yy - 0.5]) * k
        a[:] = np.clip(edge / feather, 0, 1)
        alpha = cv2.warpAffine(a, M, (w, h), flags=cv2.INTER_LINEAR, borderValue=0)[..., None]
        self.base = np.clip(photo * alpha + background * (1 - alpha) + 0.5, 0, 255).astype(np.uint8)
        self.background = np.ascontiguousarray(background, dtype=np.uint8).copy()
        if iris_rgb is not None:
            rgb = np.asarray(iris_rgb, dtype=float)
            if rgb.shape != (3,) or not np.all(np.isfinite(rgb)) or rgb.min() < 0 or rgb.max() > 255:
                from aspectus.errors import ParameterError

                raise ParameterError(f"iris_rgb must be three sRGB values 0-255, got {iris_rgb!r}")
        self.iris_rgb = {e: (tuple(map(float, iris_rgb)) if iris_rgb is not None else face.eyes[e].iris_rgb)
                         for e in EYES}
        self.iris_texture = {e: _iris_texture(self.iris_rgb[e], seed + i) for i, e in enumerate(EYES)}

    # ------------------------------------------------------------------ head
    def _head_shell(self) -> np.ndarray:
        """Rest 3-D positions (S, 3), mm, of the shell points that carry hair, ears and headwear with the head.

        The face mesh ends at the face outline; what the photograph shows
        beyond it down to the mouth's level (hair, ears, a cap) belongs to the
        head as well. The cranium is roughly round about its centre, which
        lies half the maximum head length (:data:`HEAD_LENGTH_MM`) straight
        behind the glabella. Each face-outline point above the mouth is
        continued outwards in the picture, along the line from the skull
        centre's image through it, on the sphere about the skull centre
        through that outline point (so the shell meets the face mesh without
        a step in depth), up to that sphere's silhouette. Below the mouth the
        outline borders the neck, which does not turn with the head, and gets
        no shell.
        """
        cam = self.camera
        f = cam.focal_px
        cx, cy = cam.centre_px
        mesh, uv = self.rest_mesh_mm, self.rest_uv
        centre = mesh[GLABELLA] + np.array([0.0, 0.0, HEAD_LENGTH_MM / 2.0])
        c_uv = cam.project(centre[None])[0]
        mouth_y = float(mesh[list(MOUTH_CORNERS), 1].mean())
        out = []
        for i in FACE_OVAL:
            p = mesh[i]
            if p[1] >= mouth_y:
                continue
            r = float(np.linalg.norm(p - centre))
            u = uv[i] - c_uv
            if np.linalg.norm(u) < 1e-6:
                continue
            u /= np.linalg.norm(u)
            t = np.arange(0.0, 2.0 * f * r / centre[2], 0.25)  # picture distance beyond the outline point, px
            q = uv[i] + t[:, None] * u
            ray = np.c_[(q[:, 0] - cx) / f, (q[:, 1] - cy) / f, np.ones(len(t))]
            a = np.einsum("ij,ij->i", ray, ray)
            b = -2.0 * ray @ centre
            c = float(centre @ centre) - (r + 1e-6) ** 2  # the outline point itself lies on the sphere
            disc = b * b - 4 * a * c
            hit = np.flatnonzero(disc >= 0)
            if len(hit) < 2 or hit[0] != 0:
                continue
            t_max = t[hit[-1]]
            for frac in _SHELL_STEPS:
                qq = uv[i] + frac * t_max * u
                rr = np.array([(qq[0] - cx) / f, (qq[1] - cy) / f, 1.0])
                aa, bb = rr @ rr, -2.0 * rr @ centre
                lam = (-bb - np.sqrt(max(bb * bb - 4 * aa * c, 0.0))) / (2 * aa)  # the near (visible) side
                out.append(lam * rr)
        return np.array(out).reshape(-1, 3)

    def shell_mm(self, R: np.ndarray, T_mm) -> np.ndarray:
        """Head-shell points (S, 3) in the camera frame for rotation ``R`` and head origin ``T_mm``."""
        return (self.rest_shell_mm - self.rest_origin_mm) @ R.T + np.asarray(T_mm, dtype=float)

    # ------------------------------------------------------------------ pose
    def lid_offsets_mm(self, eye_pitch_deg: float) -> np.ndarray:
        """Head-frame displacement (478, 3) of the eyelid landmarks for an eye-in-head pitch in degrees.

        The eyelids follow vertical eye movements (lid-eye coordination): the
        upper lid moves about 0.8 and the lower lid about 0.3 of the vertical
        travel of the front of the eye, most at the middle of the lid and
        none at the corners (common practice, from memory).
        """
        d = np.zeros_like(self.rest_mesh_mm)
        travel = self.lid_follow * EYEBALL_RADIUS_MM * np.sin(np.radians(np.clip(eye_pitch_deg, -35.0, 35.0)))
        for e in EYES:
            ids = EYE_CONTOUR[e]
            for j in range(1, 8):  # lower lid
                d[ids[j], 1] -= 0.3 * travel * np.sin(np.pi * j / 8)
            for j in range(9, 16):  # upper lid
                d[ids[j], 1] -= 0.8 * travel * np.sin(np.pi * (j - 8) / 8)
            if self.lower_skin_follow:
                for ring, share in zip(LOWER_SKIN_RINGS[e], (1.0, 0.5, 0.25)):
                    for j in range(1, len(ring) - 1):  # corner to corner, most in the middle
                        d[ring[j], 1] -= (self.lower_skin_follow * share * 0.3 * travel
                                          * np.sin(np.pi * j / (len(ring) - 1)))
        return d

    def pose(self, R: np.ndarray, T_mm, *, eye_pitch_deg: float = 0.0) -> tuple[np.ndarray, dict]:
        """Posed mesh (478, 3) and eyeball centres for rotation ``R`` and head origin ``T_mm``.

        ``eye_pitch_deg`` (gaze pitch relative to the head) moves the eyelids
        with the eyes, see :meth:`lid_offsets_mm`.
        """
        T = np.asarray(T_mm, dtype=float)
        rest = self.rest_mesh_mm
        if eye_pitch_deg:
            rest = rest + self.lid_offsets_mm(eye_pitch_deg)
        mesh = (rest - self.rest_origin_mm) @ R.T + T
        eyes = {e: R @ (c - self.rest_origin_mm) + T for e, c in self.rest_eyeball_mm.items()}
        return mesh, eyes

    def iris_centres_mm(self, R, T_mm, gaze: np.ndarray) -> dict:
        """3-D iris centres (camera frame, mm) for a head pose and a unit gaze vector."""
        _, eyes = self.pose(R, T_mm)
        return {e: c + IRIS_PLANE_RADIUS_MM * gaze for e, c in eyes.items()}

    # ------------------------------------------------------------------ warp
    def _warped_head(self, dst_uv: np.ndarray, depth_mm: np.ndarray) -> np.ndarray:
        """The photograph warped for a moved head: face mesh and head shell as one occluding triangle mesh."""
        from scipy.spatial import Delaunay

        cv2 = import_cv2()
        h, w = self.camera.height_px, self.camera.width_px
        src_uv = np.vstack([self.rest_uv, self.rest_shell_uv])
        d = float(np.abs(dst_uv - src_uv).max())
        both = np.vstack([src_uv, dst_uv])
        g = 2
        margin = 0.1 * self.face_size_px + d
        x0 = int(np.floor(max(0, both[:, 0].min() - margin)))
        y0 = int(np.floor(max(0, both[:, 1].min() - margin)))
        x1 = int(np.ceil(min(w, both[:, 0].max() + margin)))
        y1 = int(np.ceil(min(h, both[:, 1].max() + margin)))
        nx, ny = (x1 - x0) // g, (y1 - y0) // g
        x1, y1 = x0 + nx * g, y0 + ny * g
        out = self.base.copy()
        if nx < 2 or ny < 2:
            return out
        anchors = _box_anchors(x0, y0, x1, y1)
        src = np.vstack([src_uv, anchors])
        dst = np.vstack([dst_uv, anchors])
        depth = np.r_[depth_mm, np.full(len(anchors), np.inf)]  # the still background lies behind everything
        simp = Delaunay(src).simplices
        m = _mesh_warp_grid(src, dst, simp, np.where(np.isfinite(depth), depth, 1e9), x0=x0, y0=y0, nx=nx, ny=ny,
                            step_px=g)
        mx = cv2.resize(m[..., 0], (nx * g, ny * g), interpolation=cv2.INTER_LINEAR) - 0.5
        my = cv2.resize(m[..., 1], (nx * g, ny * g), interpolation=cv2.INTER_LINEAR) - 0.5
        out[y0:y1, x0:x1] = cv2.remap(self.base, mx, my, interpolation=cv2.INTER_LINEAR,
                                      borderMode=cv2.BORDER_REPLICATE)
        return out

    def _warped_base(self, dst_uv: np.ndarray) -> np.ndarray:
        cv2 = import_cv2()
        h, w = self.camera.height_px, self.camera.width_px
        src_uv = self.rest_uv
        d = np.abs(dst_uv - src_uv).max()
        out = self.base.copy()
        if d < 0.05:
            return out
        g = 2
        moved = np.abs(dst_uv - src_uv).max(axis=1) > 0.05
        both = np.vstack([src_uv[moved], dst_uv[moved]])
        # a wide margin when the whole head moves (hair and ears stretch smoothly), a narrow one for the lids
        margin = (0.35 if moved.mean() > 0.5 else 0.1) * self.face_size_px + d
        x0 = int(np.floor(max(0, both[:, 0].min() - margin)))
        y0 = int(np.floor(max(0, both[:, 1].min() - margin)))
        x1 = int(np.ceil(min(w, both[:, 0].max() + margin)))
        y1 = int(np.ceil(min(h, both[:, 1].max() + margin)))
        nx, ny = max(2, (x1 - x0) // g), max(2, (y1 - y0) // g)
        x1, y1 = min(w, x0 + nx * g), min(h, y0 + ny * g)
        nx, ny = (x1 - x0) // g, (y1 - y0) // g
        if nx < 2 or ny < 2:
            return out
        anchors = _box_anchors(x0, y0, x1, y1)
        near = ((dst_uv[:, 0] > x0) & (dst_uv[:, 0] < x1) & (dst_uv[:, 1] > y0) & (dst_uv[:, 1] < y1)
                & (src_uv[:, 0] > x0) & (src_uv[:, 0] < x1) & (src_uv[:, 1] > y0) & (src_uv[:, 1] < y1))
        m = _piecewise_affine_grid(np.vstack([dst_uv[near], anchors]), np.vstack([src_uv[near], anchors]),
                                   x0=x0, y0=y0, nx=nx, ny=ny, step_px=g)
        mx = cv2.resize(m[..., 0], (nx * g, ny * g), interpolation=cv2.INTER_LINEAR) - 0.5
        my = cv2.resize(m[..., 1], (nx * g, ny * g), interpolation=cv2.INTER_LINEAR) - 0.5
        out[y0:y1, x0:x1] = cv2.remap(self.base, mx, my, interpolation=cv2.INTER_LINEAR,
                                      borderMode=cv2.BORDER_REPLICATE)
        return out

    # ------------------------------------------------------------------ eyes
    def _draw_eye(self, img: np.ndarray, eye: str, contour_uv: np.ndarray, iris_c_mm: np.ndarray,
                  gaze: np.ndarray, closure: float, eyeball_mm: np.ndarray | None = None) -> None:
        cv2 = import_cv2()
        look = self.face.eyes[eye]
        h, w = img.shape[:2]
        eye_w = float(np.linalg.norm(contour_uv[0] - contour_uv[8]))
        pad = int(np.ceil(0.25 * eye_w)) + 4
        x0 = int(max(0, np.floor(contour_uv[:, 0].min()) - pad))
        y0 = int(max(0, np.floor(contour_uv[:, 1].min()) - pad))
        x1 = int(min(w, np.ceil(contour_uv[:, 0].max()) + pad))
        y1 = int(min(h, np.ceil(contour_uv[:, 1].max()) + pad))
        if x1 - x0 < 3 or y1 - y0 < 3:
            return
        pw, ph = x1 - x0, y1 - y0
        org = np.array([x0 + 0.5, y0 + 0.5])  # patch cv2 coords = canvas coords - org

        def poly_mask(poly):
            m = np.zeros((ph, pw), np.uint8)
            cv2.fillPoly(m, [np.round((poly - org) * 16).astype(np.int32)], 255, lineType=cv2.LINE_AA, shift=4)
            return m.astype(np.float32) / 255.0

        full = poly_mask(contour_uv)
        full = cv2.dilate(full, np.ones((3, 3), np.uint8))
        lower = contour_uv[1:8]
        upper = contour_uv[9:][::-1]  # outer to inner, paired with lower
        c = float(np.clip(closure, 0.0, 1.0))
        upper_c = upper + c * (lower - upper)
        opening = np.vstack([contour_uv[0], lower, contour_uv[8], upper_c[::-1]])
        open_m = poly_mask(opening) if c < 0.999 else np.zeros((ph, pw), np.float32)

        patch = img[y0:y1, x0:x1].astype(np.float32)
        skin = np.asarray(look.skin_rgb, np.float32)
        # sclera with darker corners
        yy, xx = np.mgrid[0:ph, 0:pw].astype(np.float32)
        a_pt, b_pt = contour_uv[0] - org, contour_uv[8] - org
        axis = (b_pt - a_pt) / max(eye_w, 1e-6)
        s = ((xx - a_pt[0]) * axis[0] + (yy - a_pt[1]) * axis[1]) / max(eye_w, 1e-6) * 2 - 1
        shade = np.clip(1.0 - 0.35 * s ** 2, 0.5, 1.0)[..., None]
        content = np.asarray(look.sclera_rgb, np.float32)[None, None, :] * shade
        # iris: affine image of the canonical disc
        r = IRIS_DIAMETER_MM / 2.0
        ax = np.cross(gaze, [0.0, 1.0, 0.0])
        ax /= np.linalg.norm(ax)
        ay = np.cross(gaze, ax)
        ay /= np.linalg.norm(ay)
        p3 = np.array([iris_c_mm, iris_c_mm + r * ax, iris_c_mm + r * ay])
        p2 = self.camera.project(p3) - org
        tc = (_TEX_PX - 1) / 2.0
        tr = _TEX_PX / 2.0
        src = np.float32([[tc, tc], [tc + tr, tc], [tc, tc + tr]])
        A = cv2.getAffineTransform(src, p2.astype(np.float32))
        tex = _area_sampled_warp(self.iris_texture[eye], A, (pw, ph),
                                 max_supersample=MAX_SUPERSAMPLE if self.iris_sampling == "area" else 1)
        ia = tex[..., 3:4]
        content = content * (1 - ia) + tex[..., :3] * ia
        # upper-lid shadow on the eyeball
        lid = np.zeros((ph, pw), np.float32)
        cv2.polylines(lid, [np.round((np.vstack([contour_uv[0], upper_c, contour_uv[8]]) - org) * 16).astype(np.int32)],
                      False, 1.0, thickness=max(1, int(round(0.25 * eye_w / 4))), lineType=cv2.LINE_AA, shift=4)
        lid = cv2.GaussianBlur(lid, (0, 0), max(0.8, 0.04 * eye_w))
        content = content * (1 - 0.35 * lid[..., None])
        if self.corneal_reflection is not None and eyeball_mm is not None:
            # the source's outline as the cornea mirrors it: drawn on the eyeball, so the lids clip it below
            pts, on_cap = corneal_reflection_points_mm(eyeball_mm, gaze, self.corneal_reflection.outline_mm())
            if on_cap.any():
                quad = self.camera.project(pts) - org
                spot = np.zeros((ph, pw), np.uint8)
                cv2.fillPoly(spot, [np.round(quad * 16).astype(np.int32)], 255, lineType=cv2.LINE_AA, shift=4)
                # the part of the outline mirrored by the sclera is not drawn (cornea only)
                cap = np.zeros((ph, pw), np.uint8)
                ring = iris_c_mm + r * (np.cos(np.linspace(0, 2 * np.pi, 33))[:, None] * ax
                                        + np.sin(np.linspace(0, 2 * np.pi, 33))[:, None] * ay)
                cv2.fillPoly(cap, [np.round((self.camera.project(ring) - org) * 16).astype(np.int32)], 255,
                             lineType=cv2.LINE_AA, shift=4)
                a = (spot.astype(np.float32) * cap.astype(np.float32) / 255.0 ** 2)[..., None]
                content = content * (1 - a) + float(self.corneal_reflection.brightness) * a

        m_full = full[..., None]
        m_open = open_m[..., None]
        patch[:] = patch * (1 - m_full) + skin * m_full
        patch[:] = patch * (1 - m_open) + content * m_open
        # lash line along the (possibly lowered) upper lid
        lash = np.zeros((ph, pw), np.float32)
        line = np.vstack([contour_uv[0], upper_c, contour_uv[8]]) - org
        thick = max(1, int(round(eye_w / 14)))
        cv2.polylines(lash, [np.round(line * 16).astype(np.int32)], False, 1.0, thickness=thick,
                      lineType=cv2.LINE_AA, shift=4)
        lash = np.clip(lash, 0, 1)[..., None] * 0.85
        patch[:] = patch * (1 - lash) + np.asarray(look.lash_rgb, np.float32) * lash
        # a little optical blur over the drawn eye
        sig = max(0.5, 0.03 * eye_w)
        soft = cv2.GaussianBlur(cv2.dilate(full, np.ones((5, 5), np.uint8)), (0, 0), 1.5)[..., None]
        patch[:] = patch * (1 - soft) + cv2.GaussianBlur(patch, (0, 0), sig) * soft
        img[y0:y1, x0:x1] = np.clip(patch + 0.5, 0, 255).astype(np.uint8)

    def glasses_rims_mm(self, R: np.ndarray, T_mm) -> dict:
        """Spectacle rims (camera frame, mm): {eye: (48, 3) closed outline} for a head pose.

        Each rim is an ellipse 46 x 32 mm in the head's frontal plane, centred 2 mm outward of the eyeball
        centre and 24 mm in front of it (a vertex distance of about 12 mm before the cornea; common practice,
        from memory).
        """
        th = np.linspace(0.0, 2 * np.pi, 48, endpoint=False)
        out = {}
        for e, c in self.rest_eyeball_mm.items():
            outward = -1.0 if e == "right" else 1.0  # the subject's right eye lies at the picture's left (-x)
            centre = c - self.rest_origin_mm + np.array([2.0 * outward, 0.0, -24.0])
            pts = centre + np.stack([23.0 * np.cos(th), 16.0 * np.sin(th), np.zeros_like(th)], axis=1)
            out[e] = pts @ R.T + np.asarray(T_mm, dtype=float)
        return out

    def _draw_glasses(self, img: np.ndarray, R: np.ndarray, T_mm) -> None:
        cv2 = import_cv2()
        rims = self.glasses_rims_mm(R, T_mm)
        z = float(np.mean([r[:, 2].mean() for r in rims.values()]))
        px_per_mm = self.camera.focal_px / max(z, 1.0)
        h, w = img.shape[:2]
        uv = {e: self.camera.project(r) for e, r in rims.items()}
        allp = np.vstack(list(uv.values()))
        pad = int(np.ceil(4 * px_per_mm)) + 4
        x0, y0 = (max(0, int(np.floor(v)) - pad) for v in allp.min(axis=0))
        x1, y1 = int(min(w, np.ceil(allp[:, 0].max()) + pad)), int(min(h, np.ceil(allp[:, 1].max()) + pad))
        if x1 - x0 < 3 or y1 - y0 < 3:
            return
        ph, pw = y1 - y0, x1 - x0
        org = np.array([x0 + 0.5, y0 + 0.5])
        thick = max(1, int(round(1.6 * px_per_mm)))
        lens = np.zeros((ph, pw), np.uint8)
        shine = np.zeros((ph, pw), np.float32)
        lines = np.zeros((ph, pw), np.uint8)
        for e, p in uv.items():
            poly = np.round((p - org) * 16).astype(np.int32)
            cv2.fillPoly(lens, [poly], 255, lineType=cv2.LINE_AA, shift=4)
            cv2.polylines(lines, [poly], True, 255, thickness=thick, lineType=cv2.LINE_AA, shift=4)
            # a soft reflection in the upper outer part of the lens
            outward = -1.0 if e == "right" else 1.0
            spot = p.mean(axis=0) + np.array([outward * 9.0, -7.0]) * px_per_mm - org
            cv2.ellipse(shine, (int(round(spot[0])), int(round(spot[1]))),
                        (max(1, int(7 * px_per_mm)), max(1, int(3 * px_per_mm))), -25.0 * outward, 0, 360, 1.0, -1)
        # the bridge between the rims' inner tops
        a = uv["right"][np.argmax(uv["right"][:, 0] - 0.3 * uv["right"][:, 1])] - org
        b = uv["left"][np.argmin(uv["left"][:, 0] + 0.3 * uv["left"][:, 1])] - org
        cv2.line(lines, tuple(int(v) for v in np.round(a * 16)), tuple(int(v) for v in np.round(b * 16)), 255,
                 thickness=thick, lineType=cv2.LINE_AA, shift=4)
        lens_a = lens.astype(np.float32) / 255.0
        shine = cv2.GaussianBlur(shine, (0, 0), max(0.8, 2.5 * px_per_mm)) * lens_a
        out = img[y0:y1, x0:x1].astype(np.float32)
        out *= 1.0 - 0.06 * lens_a[..., None]  # a slight tint
        out += 60.0 * shine[..., None]
        a_line = (lines.astype(np.float32) / 255.0)[..., None] * 0.9
        out = out * (1 - a_line) + np.array([38.0, 32.0, 30.0], np.float32) * a_line
        img[y0:y1, x0:x1] = np.clip(out + 0.5, 0, 255).astype(np.uint8)

    # ------------------------------------------------------------------ frame
    def render(self, *, R: np.ndarray, T_mm, gaze: np.ndarray, closure: float) -> tuple[np.ndarray, dict]:
        """Render one picture (RGB uint8) and return it with the eye truth.

        Returns
        -------
        image : numpy.ndarray
            (height, width, 3) uint8.
        info : dict
            ``iris_uv`` {eye: (x, y) px}, ``iris_mm`` {eye: camera-frame mm},
            ``iris_diameter_px`` (mean of both eyes, from the projected disc).
        """
        g_head = R.T @ gaze
        eye_pitch = float(np.degrees(np.arctan2(-g_head[1], np.hypot(g_head[0], g_head[2]))))
        mesh, _ = self.pose(R, T_mm, eye_pitch_deg=eye_pitch)
        uv = self.camera.project(mesh)
        shell = self.shell_mm(R, T_mm)
        shell_uv = self.camera.project(shell)
        if len(shell) and np.abs(shell_uv - self.rest_shell_uv).max() >= 0.05:
            img = self._warped_head(np.vstack([uv, shell_uv]), np.r_[mesh[:, 2], shell[:, 2]])
        else:  # head at rest: only the lids move
            img = self._warped_base(uv)
        iris_mm = self.iris_centres_mm(R, T_mm, gaze)
        _, eyeballs = self.pose(R, T_mm)
        iris_uv, diam, glint_uv = {}, [], {}
        f = self.camera.focal_px
        for e in EYES:
            contour = uv[list(EYE_CONTOUR[e])]
            self._draw_eye(img, e, contour, iris_mm[e], gaze, closure, eyeballs[e])
            iris_uv[e] = self.camera.project(iris_mm[e][None])[0]
            diam.append(f * IRIS_DIAMETER_MM / np.linalg.norm(iris_mm[e]))
            if self.corneal_reflection is not None:
                p, _ = corneal_reflection_points_mm(eyeballs[e], gaze, np.asarray(self.corneal_reflection.source_mm))
                glint_uv[e] = self.camera.project(p)[0]
        if self.glasses:
            self._draw_glasses(img, R, T_mm)
        return img, {"iris_uv": iris_uv, "iris_mm": iris_mm, "iris_diameter_px": float(np.mean(diam)),
                     "landmarks_uv": uv, "reflection_uv": glint_uv}
