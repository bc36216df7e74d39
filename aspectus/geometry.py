"""Small 3-D geometry helpers (rotations, rigid fits, ray-sphere intersection).

Angles in degrees at the interface; radians only inside. Conventions follow
:mod:`aspectus.schema` (OpenCV camera frame; yaw to the subject's right and
pitch up positive; picture positions with pixel i spanning [i, i + 1), converted
to and from OpenCV's pixel-centre positions only by :func:`to_opencv_px` and
:func:`from_opencv_px`).
"""
from __future__ import annotations

import numpy as np

#: where pixel i's centre lies in aspectus's picture coordinates (pixel i spans [i, i + 1); :mod:`aspectus.schema`)
PIXEL_CENTRE_PX = 0.5


def to_opencv_px(xy):
    """Picture positions (px, aspectus's convention: pixel i spans [i, i + 1)) in OpenCV's, where pixel i's centre
    lies at i: for ``remap``/``warpAffine`` sampling, pixel indices and drawing."""
    return np.asarray(xy, float) - PIXEL_CENTRE_PX


def from_opencv_px(xy):
    """Inverse of :func:`to_opencv_px`: OpenCV's pixel-centre positions (px) in aspectus's picture convention."""
    return np.asarray(xy, float) + PIXEL_CENTRE_PX


def umeyama(src: np.ndarray, dst: np.ndarray, *, with_scale: bool = True):
    """Least-squares similarity transform ``dst ~ s R src + t``.

    Umeyama, S. (1991). Least-squares estimation of transformation parameters
    between two point patterns. IEEE TPAMI 13(4), 376-380.

    Returns
    -------
    s : float, R : (3, 3) ndarray, t : (3,) ndarray
    """
    src = np.asarray(src, float)
    dst = np.asarray(dst, float)
    mu_s, mu_d = src.mean(0), dst.mean(0)
    xs, xd = src - mu_s, dst - mu_d
    cov = xd.T @ xs / len(src)
    U, D, Vt = np.linalg.svd(cov)
    S = np.eye(3)
    if np.linalg.det(U) * np.linalg.det(Vt) < 0:
        S[2, 2] = -1
    R = U @ S @ Vt
    var_s = (xs ** 2).sum() / len(src)
    s = float(np.trace(np.diag(D) @ S) / var_s) if with_scale else 1.0
    t = mu_d - s * R @ mu_s
    return s, R, t


def gaze_vector_to_angles(g: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Unit gaze vectors (..., 3) in camera frame to (yaw_deg, pitch_deg) per aspectus.schema."""
    g = np.asarray(g, float)
    gx, gy, gz = g[..., 0], g[..., 1], g[..., 2]
    yaw = np.degrees(np.arctan2(-gx, -gz))
    pitch = np.degrees(np.arctan2(-gy, np.hypot(gx, gz)))
    return yaw, pitch


def angles_to_gaze_vector(yaw_deg, pitch_deg) -> np.ndarray:
    """Inverse of :func:`gaze_vector_to_angles`: (yaw_deg, pitch_deg) to unit vectors (..., 3)."""
    yaw = np.radians(np.asarray(yaw_deg, float))
    pitch = np.radians(np.asarray(pitch_deg, float))
    c = np.cos(pitch)
    return np.stack([-np.sin(yaw) * c, -np.sin(pitch), -np.cos(yaw) * c], axis=-1)


def head_rotation(yaw_deg: float, pitch_deg: float, roll_deg: float) -> np.ndarray:
    """Rotation matrix (head frame -> camera frame) for a head pose in aspectus's convention.

    At zero pose the head frame equals the camera frame (the face looks back
    at the camera along -z). ``yaw > 0`` turns the face towards the subject's
    right (the face's forward vector -z swings towards camera -x), ``pitch > 0``
    tilts it up, ``roll > 0`` tilts it towards the subject's right shoulder.
    Composition: R = R_yaw @ R_pitch @ R_roll.
    """
    y, p, r = np.radians([yaw_deg, pitch_deg, roll_deg])
    # yaw about camera y axis: forward (0,0,-1) -> (-sin y, 0, -cos y)
    Ry = np.array([[np.cos(y), 0, np.sin(y)], [0, 1, 0], [-np.sin(y), 0, np.cos(y)]])
    # pitch about x: forward (0,0,-1) -> (0, -sin p, -cos p), i.e. up
    Rp = np.array([[1, 0, 0], [0, np.cos(p), np.sin(p)], [0, -np.sin(p), np.cos(p)]])
    # roll about z: head top (0,-1,0) -> (-sin r, -cos r, 0), towards camera -x = the subject's right shoulder
    Rr = np.array([[np.cos(r), np.sin(r), 0], [-np.sin(r), np.cos(r), 0], [0, 0, 1]])
    return Ry @ Rp @ Rr


def rotation_to_head_angles(R: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Inverse of :func:`head_rotation` for (..., 3, 3) arrays: (yaw_deg, pitch_deg, roll_deg)."""
    R = np.asarray(R, float)
    # R = Ry Rp Rr: R[1,2] = sin p, R[0,2] = sin y cos p, R[2,2] = cos y cos p,
    # R[1,0] = -cos p sin r, R[1,1] = cos p cos r
    pitch = np.arcsin(np.clip(R[..., 1, 2], -1, 1))
    yaw = np.arctan2(R[..., 0, 2], R[..., 2, 2])
    roll = np.arctan2(-R[..., 1, 0], R[..., 1, 1])
    return np.degrees(yaw), np.degrees(pitch), np.degrees(roll)


def focal_length_px(*, width_px: int, fov_deg: float = 60.0) -> float:
    """Pinhole focal length in px from the picture width and the horizontal field of view (deg).

    ``f = (width / 2) / tan(fov / 2)``: the one place aspectus relates a field
    of view to pixels (the webcam side, the overlay and the renderer use it).
    """
    return float((width_px / 2.0) / np.tan(np.radians(fov_deg) / 2.0))


def project_point(*, x_mm: float, y_mm: float, z_mm: float, shape: tuple[int, int], fov_deg: float = 60.0):
    """Camera-frame point (mm, :mod:`aspectus.schema` frame) to picture px ``(u, v)``; None if behind the camera."""
    if not (np.isfinite(x_mm) and np.isfinite(y_mm) and np.isfinite(z_mm)) or z_mm <= 0:
        return None
    H, W = shape[:2]
    f = focal_length_px(width_px=W, fov_deg=fov_deg)
    return W / 2.0 + f * x_mm / z_mm, H / 2.0 + f * y_mm / z_mm


def camera_matrix(width_px: int, height_px: int, fov_deg: float) -> np.ndarray:
    """Pinhole intrinsics from a horizontal field of view; principal point at the centre."""
    f = focal_length_px(width_px=width_px, fov_deg=fov_deg)
    return np.array([[f, 0, width_px / 2.0], [0, f, height_px / 2.0], [0, 0, 1.0]])


def ray_sphere_near(rays: np.ndarray, centres: np.ndarray, radius: float) -> tuple[np.ndarray, np.ndarray]:
    """Nearest intersection of rays from the origin with spheres.

    Parameters
    ----------
    rays : (N, 3) directions (need not be unit); centres : (N, 3); radius : float (same unit)

    Returns
    -------
    points : (N, 3) the near intersection, or the point of the ray closest to
        the sphere where the ray misses it; missed : (N,) bool
    """
    d = rays / np.linalg.norm(rays, axis=-1, keepdims=True)
    b = np.einsum("ij,ij->i", d, centres)
    c2 = np.einsum("ij,ij->i", centres, centres) - radius ** 2
    disc = b ** 2 - c2
    missed = disc < 0
    s = b - np.sqrt(np.where(missed, 0.0, disc))
    pts = d * s[:, None]
    return pts, missed
