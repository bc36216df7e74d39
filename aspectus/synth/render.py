"""Rendered webcam-like test clips with known gaze truth.

:func:`render_clip` draws a face photograph that ships with the project's
dependencies (:mod:`aspectus.synth.face`) in front of a pinhole camera, poses
the head, turns the eyes along a gaze trajectory
(:func:`synth_trajectory`), closes the lids for blinks, adds sensor noise and
encodes the frames lossily with their true timestamps. Beside the clip it
writes the ground truth:

* ``<stem>_truth.csv`` - one row per frame (see :data:`TRUTH_COLUMNS`);
* ``<stem>_truth_hi.csv`` - the trajectory at its own high rate;
* ``<stem>_truth_events.csv`` - the true fixations, saccades and blinks;
* ``<stem>_truth.json`` - the parameters (face, camera, noise, codec, seed,
  trajectory) and the clip's SHA-256.

The geometry is described in :mod:`aspectus.synth.frame`; angles follow
:mod:`aspectus.schema`.
"""
from __future__ import annotations

import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from aspectus import __version__
from aspectus.atomic import atomic_path, sha256_file, write_csv, write_json
from aspectus.errors import Cancelled, ParameterError
from aspectus.synth.face import EYES, FACES, IRIS_DIAMETER_MM, load_face
from aspectus.synth.frame import (DEFAULT_IRIS_SAMPLING, EYEBALL_RADIUS_MM, IRIS_COLOURS, Camera, CornealReflection,
                                   FaceRig, gaze_vector, head_rotation)
from aspectus.synth.trajectory import Trajectory, saccade_duration_ms, synth_trajectory
from aspectus.synth.clip_writer import FORMATS, ClipWriter, rotate_for_storage

__all__ = ["render_clip", "RenderResult", "synth_trajectory", "Trajectory", "saccade_duration_ms",
           "TRUTH_COLUMNS", "read_truth", "lost_frames", "constant_frame_times"]

#: Columns of ``<stem>_truth.csv``, with their meaning. Angles in schema.py's frame; pixel positions in
#: the upright picture (before any rotation tag is applied), face-mesh convention (pixel i spans [i, i+1)).
TRUTH_COLUMNS = {
    "frame_index": "0-based index of the frame in the clip",
    "t_s": "frame time on the trajectory's clock, s (the first frame of a default clip is at 0); the middle of "
           "the frame's exposure: every truth column of the row is the state at this instant",
    "pts_s": "the frame's presentation timestamp as stored in the container, s",
    "yaw_deg": "true binocular gaze yaw (head-compensated, subject's right positive), deg",
    "pitch_deg": "true gaze pitch (up positive), deg",
    "blink": "lids at least half closed",
    "lid_closure": "0 = open, 1 = closed",
    "face_visible": "the face was drawn in this frame",
    "repeated_frame": "the stored picture is the frame before's again (a recorder that repeats the last picture "
                      "when the camera delivers none); the row's other columns stay the truth at t_s",
    "head_yaw_deg": "head yaw (face turned to the subject's right positive), deg",
    "head_pitch_deg": "head pitch (up positive), deg",
    "head_roll_deg": "head roll (towards the subject's right shoulder positive), deg",
    "head_x_mm": "head origin (midpoint of the eyeball centres), camera frame x, mm",
    "head_y_mm": "head origin, camera frame y, mm",
    "head_z_mm": "head origin, camera frame z, mm",
    "eye_in_head_yaw_deg": "gaze yaw relative to the head, deg",
    "eye_in_head_pitch_deg": "gaze pitch relative to the head, deg",
    "right_iris_x_px": "picture x of the subject's right iris centre, px (empty when the face is hidden)",
    "right_iris_y_px": "picture y of the subject's right iris centre, px",
    "left_iris_x_px": "picture x of the subject's left iris centre, px",
    "left_iris_y_px": "picture y of the subject's left iris centre, px",
    "iris_diameter_px": "expected iris diameter in the picture (focal * 11.7 mm / iris distance), px",
    "distance_mm": "mean distance of the two iris centres from the camera, mm",
    "exposure_start_s": "start of the frame's exposure on the trajectory's clock, s (t_s without exposure blur)",
    "exposure_end_s": "end of the frame's exposure, s (the picture is the mean of the scene over it)",
}

#: size of a bystander's face relative to the subject's (smaller ones escape the face mesh's detector at 720p)
EXTRA_FACE_SCALE = 0.7

#: background wall colours, top and bottom (RGB)
_WALL_TOP = np.array([198.0, 192.0, 180.0])
_WALL_BOTTOM = np.array([168.0, 162.0, 150.0])


@dataclass
class RenderResult:
    """What :func:`render_clip` wrote.

    Attributes
    ----------
    path : Path
        The clip.
    truth_path, truth_hi_path, truth_events_path, truth_json_path : Path
        The truth files beside it.
    truth : pandas.DataFrame
        The per-frame truth (the content of ``truth_path``).
    frames : int
        Frames written.
    focal_px : float
        Focal length of the camera model in pixels (upright picture).
    size_px : tuple of int
        Upright picture size (width, height).
    render_ms_per_frame : float
        Mean wall time per frame (render + encode), ms.
    """

    path: Path
    truth_path: Path
    truth_hi_path: Path
    truth_events_path: Path
    truth_json_path: Path
    truth: pd.DataFrame
    frames: int
    focal_px: float
    size_px: tuple[int, int]
    render_ms_per_frame: float = float("nan")
    params: dict = field(default_factory=dict)


def _background(w: int, h: int) -> np.ndarray:
    f = np.linspace(0.0, 1.0, h)[:, None, None]
    img = _WALL_TOP * (1 - f) + _WALL_BOTTOM * f
    return np.broadcast_to(img, (h, w, 3)).astype(np.uint8)


def _paste_face(targets: list[np.ndarray], name: str, *, centre_px, iris_px: float, mirror: bool) -> None:
    """Composite a small static face (another photo) into each picture of ``targets`` (RGB uint8, in place)."""
    from aspectus._env import import_cv2

    cv2 = import_cv2()
    face = load_face(name)
    k = iris_px / face.iris_diameter_px
    img = face.image[:, ::-1] if mirror else face.image
    lm = face.landmarks_px[:, :2].copy()
    if mirror:
        lm[:, 0] = face.image.shape[1] - lm[:, 0]
    fc = 0.5 * (lm.min(axis=0) + lm.max(axis=0))
    span = lm.max(axis=0) - lm.min(axis=0)
    off = np.asarray(centre_px, float) - k * fc
    h, w = targets[0].shape[:2]
    M = np.array([[k, 0, off[0] + 0.5 * k - 0.5], [0, k, off[1] + 0.5 * k - 0.5]])
    warped = cv2.warpAffine(np.ascontiguousarray(img), M, (w, h), flags=cv2.INTER_LINEAR,
                            borderMode=cv2.BORDER_CONSTANT).astype(np.float32)
    yy, xx = np.mgrid[0:h, 0:w].astype(np.float32)
    rx, ry = 0.95 * k * span[0], 0.85 * k * span[1]
    rho = np.hypot((xx + 0.5 - centre_px[0]) / rx, (yy + 0.5 - centre_px[1]) / ry)
    alpha = np.clip((1.0 - rho) / 0.25, 0, 1)[..., None]
    for t in targets:
        t[:] = np.clip(t * (1 - alpha) + warped * alpha + 0.5, 0, 255).astype(np.uint8)


#: the scene may move this far (px, either iris centre or the lid margin) between two sub-frames of an exposure
EXPOSURE_STEP_PX = 0.5
#: most sub-frames averaged for one exposed frame
MAX_SUBFRAMES = 16


def _subframe_times(track_at, iris_at, t_mid: float, exposure_s: float, duration_s: float) -> np.ndarray:
    """Times of the sub-frames averaged for a frame exposed over ``t_mid +- exposure_s / 2`` (midpoint rule).

    Their number follows the fastest motion within the exposure: the path length of either iris centre in the
    picture (``iris_at(rows) -> (n, 2, 2) px``) and of the lid margin (the lid closure's travel times the iris
    diameter, roughly the eye's opening) divided by :data:`EXPOSURE_STEP_PX`, between 1 (a still eye: the
    instant at ``t_mid``) and :data:`MAX_SUBFRAMES`. Times are clamped to the trajectory.
    """
    probe = np.clip(t_mid + exposure_s * np.linspace(-0.5, 0.5, 9), 0.0, duration_s)
    rows = track_at(probe)
    uv, diam = iris_at(rows)
    path = np.abs(np.diff(uv, axis=0))
    iris_path = float(np.hypot(path[..., 0], path[..., 1]).sum(axis=0).max())
    lid_path = float(np.abs(np.diff(rows["lid_closure"].to_numpy())).sum() * diam)
    k = int(np.clip(np.ceil(max(iris_path, lid_path) / EXPOSURE_STEP_PX), 1, MAX_SUBFRAMES))
    return np.clip(t_mid + exposure_s * ((np.arange(k) + 0.5) / k - 0.5), 0.0, duration_s)


_NOISE_PAD = 32
_NOISE_FIELDS = 6


def _noise_bank(h: int, w: int, *, sd: float, seed: int) -> list[np.ndarray]:
    """A few Gaussian noise fields (int16, grey levels, SD ``sd``) a little larger than the picture.

    Each frame adds one of them at a random offset: independent enough from
    frame to frame for a sensor-noise model, and far cheaper than drawing
    a million normal numbers per frame.
    """
    rng = np.random.default_rng([int(seed), 3])
    return [np.round(rng.standard_normal((h + _NOISE_PAD, w + _NOISE_PAD, 3), dtype=np.float32) * sd)
            .astype(np.int16) for _ in range(_NOISE_FIELDS)]


def _per_frame_flags(flags, n: int, name: str, *, default: bool) -> np.ndarray:
    """``flags`` as (n,) bool, or ``default`` for every frame when None."""
    if flags is None:
        return np.full(n, bool(default))
    out = np.asarray(flags, dtype=bool)
    if out.shape != (n,):
        raise ParameterError(f"{name} must have one entry per frame ({n}), got shape {out.shape}")
    return out


def constant_frame_times(trajectory: Trajectory, fps: float) -> np.ndarray:
    """The frame times, s, :func:`render_clip` uses at a constant ``fps`` without ``frame_times_s``: ``i / fps``
    for every frame within the trajectory (a list of frames to drop or repeat has one entry per time).

    >>> constant_frame_times(synth_trajectory(duration_s=0.1, seed=0), 30.0).round(4).tolist()
    [0.0, 0.0333, 0.0667]
    """
    duration = float(trajectory.samples["t_s"].iloc[-1])
    return np.arange(int(np.floor(duration * float(fps) + 1e-6))) / float(fps)


def lost_frames(n: int, share: float, seed: int = 0) -> np.ndarray:
    """Which of ``n`` frames a camera misses: each but the first with probability ``share``, independently.

    Give them to :func:`render_clip` as ``repeated_frames`` (a constant-frame-rate recorder that repeats
    the last picture) or leave them out of ``frame_times_s`` (a variable-frame-rate recording with gaps).

    >>> lost_frames(6, 0.0).tolist()
    [False, False, False, False, False, False]
    >>> bool(lost_frames(1000, 0.5, seed=1)[0]), 400 < int(lost_frames(1000, 0.5, seed=1).sum()) < 600
    (False, True)
    """
    if not (np.isfinite(share) and 0.0 <= share < 1.0):
        raise ParameterError(f"the share of lost frames must be within 0-1 (1 excluded), got {share!r}")
    lost = np.random.default_rng([int(seed), 31]).random(int(n)) < float(share)
    if len(lost):
        lost[0] = False
    return lost


def _check_frame_times(frame_times_s, duration_s: float) -> np.ndarray:
    t = np.asarray(frame_times_s, dtype=float)
    if t.ndim != 1 or len(t) == 0:
        raise ParameterError("frame_times_s must be a non-empty 1-D sequence of seconds")
    bad = ~np.isfinite(t) | (t < 0)
    if bad.any():
        i = int(np.argmax(bad))
        raise ParameterError(f"frame time {t[i]!r} is not a finite time >= 0 s", where=f"frame {i}")
    d = np.diff(t)
    if (d <= 0).any():
        i = int(np.argmax(d <= 0)) + 1
        raise ParameterError(f"frame times must increase ({t[i - 1]:.6g} s then {t[i]:.6g} s)", where=f"frame {i}")
    if t[-1] > duration_s + 1e-9:
        raise ParameterError(f"frame time {t[-1]:.6g} s is past the trajectory's end ({duration_s:.6g} s)",
                             where=f"frame {len(t) - 1}", hint="make the trajectory longer")
    return t


def _angles(g: np.ndarray) -> tuple[float, float]:
    return (float(np.degrees(np.arctan2(-g[0], -g[2]))), float(np.degrees(np.arctan2(-g[1], np.hypot(g[0], g[2])))))


def _light_ramp(width_px: int) -> np.ndarray:
    """(1, w, 1) the side-to-side lighting gradient's shape: +0.5 at the picture's left edge, -0.5 at its right."""
    return (0.5 - (np.arange(width_px, dtype=np.float32) + 0.5) / width_px)[None, :, None]


def _light_gain(level: float, gradient: float, ramp: np.ndarray) -> np.ndarray:
    """The picture's gain for a frame at light ``level`` with a lateral ``gradient`` (:func:`_light_ramp`)."""
    return level * (1.0 + float(gradient) * level * ramp)


def _light_level(times_s: np.ndarray, *, seed: int, drift: float) -> np.ndarray:
    """Relative light level per frame: 1 + drift * (a sum of three slow sinusoids scaled into -1..1)."""
    if not drift:
        return np.ones(len(times_s))
    rng = np.random.default_rng([int(seed), 11])
    s = np.zeros(len(times_s))
    for period_s, weight in ((20.0, 1.0), (9.0, 0.5), (5.0, 0.25)):
        s += weight * np.sin(2 * np.pi * np.asarray(times_s) / (period_s * rng.uniform(0.8, 1.25))
                             + rng.uniform(0, 2 * np.pi))
    return 1.0 + drift * s / 1.75


def render_clip(path, trajectory: Trajectory, *, face: str = "hopper", size_px: tuple[int, int] = (1280, 720),
                fps: float = 30.0, frame_times_s=None, fov_deg: float = 60.0, noise_sd: float = 2.0,
                codec: str = "libx264", crf: int = 23, bitrate_kbps: float | None = None, rotation_deg: int = 0,
                darkness: float = 1.0, face_visible=None, extra_faces: int = 0, seed: int = 0,
                lower_skin_follow: float = 0.0, lid_follow: float = 1.0, glasses: bool = False,
                lighting_drift: float = 0.0, lighting_gradient: float = 0.0, mirror: bool = False,
                iris_colour=None, exposure_ms: float = 0.0, corneal_reflection=False,
                iris_sampling: str = DEFAULT_IRIS_SAMPLING, repeated_frames=None, progress=None,
                cancel=None) -> RenderResult:
    """Render a webcam-like clip of a face following ``trajectory`` and write its truth beside it.

    Parameters
    ----------
    path : path-like
        Clip to write (``.mp4``, ``.mov``, ``.mkv``; ``.avi`` for constant
        frame rate only). Written atomically.
    trajectory : Trajectory
        Gaze, blinks and head pose over time (:func:`synth_trajectory`).
    face : {"hopper", "astronaut"}, default "hopper"
        Which shipped photograph to animate.
    size_px : (int, int), default (1280, 720)
        Upright picture width and height in pixels (even numbers).
    fps : float, default 30
        Frame rate in frames per second; frames at ``i / fps`` unless
        ``frame_times_s`` is given.
    frame_times_s : sequence of float, optional
        Explicit frame times in seconds (variable frame rate), increasing,
        within the trajectory; stored as the container's timestamps.
    fov_deg : float, default 60
        Horizontal field of view of the camera in degrees.
    noise_sd : float, default 2
        SD of the Gaussian sensor noise in grey levels (0-255 scale).
    codec : {"libx264", "mpeg4", "mjpeg"}, default "libx264"
    crf : int, default 23
        libx264 constant-rate factor (lower = better, bigger).
    bitrate_kbps : float, optional
        Target bitrate in kbit/s instead of ``crf`` (mpeg4 default 1500).
    rotation_deg : {0, 90, 180, 270}, default 0
        Display rotation tag (counter-clockwise degrees, as
        ``VideoFrame.rotation`` reports it). The frames are stored rotated
        the other way, so a decoder honouring the tag shows them upright.
    darkness : float, default 1
        Light level in (0, 1]: the picture is multiplied by it and the noise
        SD divided by its square root (a dim room with raised gain).
    face_visible : sequence of bool, optional
        Per frame: draw the face (True) or the empty background (False).
    extra_faces : int, default 0
        Number (0-2) of other static faces, 0.7 times the subject's size,
        composited beside the subject (bystanders); smaller ones are missed
        by the face mesh's detector.
    seed : int, default 0
        Seed of the noise and of the iris textures.
    lower_skin_follow : float, default 0
        How far the skin below the lower lids follows the lids' movement
        with vertical gaze (0-1; :class:`aspectus.synth.frame.FaceRig`).
    lid_follow : float, default 1
        How far the lids follow vertical gaze (1: the upper lid 0.8 and the
        lower lid 0.3 of the front of the eye's vertical travel, as real lids
        do; 0: lids that stay still).
    glasses : bool, default False
        Spectacles on the face (dark rims, a bridge, tinted lenses with a
        soft reflection), moving with the head.
    lighting_drift : float, default 0
        Slow change of the light level: the picture is multiplied by
        ``1 + lighting_drift * s(t)`` with ``s`` a sum of slow sinusoids
        (periods of about 20, 9 and 5 s) within -1..1 (e.g. 0.15: +-15 %).
    lighting_gradient : float, default 0
        Light falling off from one side: the picture's left edge is
        ``1 + lighting_gradient / 2`` times as bright as the middle, the
        right edge ``1 - lighting_gradient / 2`` (e.g. 0.4: a window on the
        left). The gradient's strength drifts with the light level.
    mirror : bool, default False
        Store the picture mirrored left to right, as webcam software often
        shows and records it. The truth's gaze and head angles stay the
        subject's; its pixel positions are those of the stored picture (the
        subject's right iris then lies on the picture's right side).
    iris_colour : str or (float, float, float), optional
        Iris colour of both eyes: a preset of
        :data:`aspectus.synth.frame.IRIS_COLOURS` (``"dark_brown"``,
        ``"hazel"``, ``"light_blue_grey"``) or sRGB 0-255; by default the
        photograph's own (dark in both shipped faces).
    exposure_ms : float, default 0
        Exposure time per frame, ms (0: each frame is an instant). A frame is
        the mean of sub-frames rendered over ``t_s +- exposure_ms / 2``, as
        many as the fastest motion in it needs (the iris centres or the lid
        margin move at most :data:`EXPOSURE_STEP_PX` between two; at most
        :data:`MAX_SUBFRAMES`), so saccades and blinks are smeared as a
        webcam indoors smears them. The truth stays the state at the
        middle of the exposure (``t_s``); ``exposure_start_s`` and
        ``exposure_end_s`` give the exposure. At most the shortest frame
        interval.
    corneal_reflection : bool or CornealReflection, default False
        Draw the reflection of a light source on each cornea (the first
        Purkinje image; :class:`aspectus.synth.frame.CornealReflection`):
        True for the default source, a 50 x 30 cm screen just below and
        behind the camera, or a ``CornealReflection`` with the source's
        position, size and brightness. It is drawn before the optical blur,
        noise and compression and clipped by the lids.
    iris_sampling : {"area", "point"}, default "area"
        How the iris texture becomes pixels: averaged over each pixel's area
        (as a camera integrates light), or sampled at each pixel's centre as
        before 2026-12-05, which aliases irises below about 20 px (their rim
        moves in jumps); :class:`aspectus.synth.frame.FaceRig`.
    repeated_frames : sequence of bool, optional
        Per frame: store the frame before's picture again (True), as a
        recorder does when the camera misses a frame and it keeps the
        constant frame rate by repeating the last picture (sensor noise and
        all). The first frame cannot be a repeat. The truth marks these
        frames (``repeated_frame``) and keeps the true state at their time.
    progress : callable, optional
        ``progress(fraction_done, message)``, called every few frames.
    cancel : object with ``is_set()``, optional
        When set, rendering stops with :class:`aspectus.errors.Cancelled`; no
        clip is left behind.

    Returns
    -------
    RenderResult

    Notes
    -----
    The photograph is laid out for the median head position of the clip; head
    motion away from it is drawn by warping the photograph (see
    :mod:`aspectus.synth.frame`). Iris size follows the geometry: at 600 mm
    with a 60 deg field of view a 1280 px wide picture shows an 11.7 mm iris
    about 22 px wide.

    Examples
    --------
    A one-second test clip at 320 x 240 with its truth files (a few seconds):

    >>> from aspectus.synth.trajectory import synth_trajectory
    >>> res = render_clip(tmp / "test.mp4", synth_trajectory(duration_s=1.0, seed=0), size_px=(320, 240))
    >>> res.frames, res.size_px
    (30, (320, 240))
    >>> sorted(p.name for p in tmp.glob("test*"))
    ['test.mp4', 'test_truth.csv', 'test_truth.json', 'test_truth_events.csv', 'test_truth_hi.csv']
    """
    t_start = time.perf_counter()
    from aspectus._env import import_cv2

    cv2 = import_cv2()
    path = Path(path)
    if path.suffix.lower() not in FORMATS:
        raise ParameterError(f"cannot write a clip with extension {path.suffix!r}", path=path,
                             hint=f"use one of {', '.join(FORMATS)}")
    if face not in FACES:
        raise ParameterError(f"face must be one of {', '.join(FACES)}, got {face!r}")
    try:
        w, h = (int(v) for v in size_px)
    except (TypeError, ValueError):
        raise ParameterError(f"size_px must be (width, height) in pixels, got {size_px!r}") from None
    if w < 64 or h < 64 or w % 2 or h % 2:
        raise ParameterError(f"size_px must be even numbers of at least 64 pixels, got {w}x{h}")
    for name, v, lo, hi in (("fps", fps, 0.0, 1000.0), ("fov_deg", fov_deg, 10.0, 150.0),
                            ("darkness", darkness, 0.0, 1.0)):
        if not (isinstance(v, (int, float, np.integer, np.floating)) and np.isfinite(v) and lo < v <= hi):
            raise ParameterError(f"{name} must be in ({lo:g}, {hi:g}], got {v!r}")
    if not (np.isfinite(noise_sd) and noise_sd >= 0):
        raise ParameterError(f"noise_sd must be zero or more grey levels, got {noise_sd!r}")
    if int(rotation_deg) % 90 or rotation_deg != int(rotation_deg):
        raise ParameterError(f"rotation_deg must be a multiple of 90, got {rotation_deg!r}")
    rotation_deg = int(rotation_deg) % 360
    if not (isinstance(extra_faces, (int, np.integer)) and 0 <= extra_faces <= 2):
        raise ParameterError(f"extra_faces must be 0, 1 or 2, got {extra_faces!r}")
    if not isinstance(trajectory, Trajectory):
        raise ParameterError("trajectory must be a Trajectory (see synth_trajectory)")
    for name, v, lo, hi in (("lighting_drift", lighting_drift, 0.0, 0.5),
                            ("lighting_gradient", lighting_gradient, 0.0, 1.0)):
        if not (isinstance(v, (int, float, np.integer, np.floating)) and np.isfinite(v) and lo <= v <= hi):
            raise ParameterError(f"{name} must be within {lo:g}-{hi:g}, got {v!r}")
    if isinstance(iris_colour, str):
        if iris_colour not in IRIS_COLOURS:
            raise ParameterError(f"iris_colour must be one of {', '.join(IRIS_COLOURS)} or three sRGB values, "
                                 f"got {iris_colour!r}")
        iris_rgb = IRIS_COLOURS[iris_colour]
    else:
        iris_rgb = iris_colour
    if not (isinstance(exposure_ms, (int, float, np.integer, np.floating)) and np.isfinite(exposure_ms)
            and exposure_ms >= 0):
        raise ParameterError(f"exposure_ms must be zero or more milliseconds, got {exposure_ms!r}")
    exposure_s = float(exposure_ms) / 1000.0

    if corneal_reflection is True:
        corneal_reflection = CornealReflection()
    elif corneal_reflection is False or corneal_reflection is None:
        corneal_reflection = None
    elif not isinstance(corneal_reflection, CornealReflection):
        raise ParameterError("corneal_reflection must be True, False or a CornealReflection, got "
                             f"{corneal_reflection!r}")

    duration = float(trajectory.samples["t_s"].iloc[-1])
    vfr = frame_times_s is not None
    if vfr:
        times = _check_frame_times(frame_times_s, duration)
    else:
        times = constant_frame_times(trajectory, fps)
        if len(times) < 1:
            raise ParameterError(f"the trajectory ({duration:.3g} s) is shorter than one frame at {fps:g} fps")
    n = len(times)
    interval = float(np.diff(times).min()) if n > 1 else (1.0 / fps if not vfr else np.inf)
    if exposure_s > interval + 1e-9:
        raise ParameterError(f"exposure_ms {exposure_ms:g} is longer than the frame interval ({1000 * interval:.4g} ms)",
                             hint="a frame's exposure cannot outlast the time to the next frame")
    visible = _per_frame_flags(face_visible, n, "face_visible", default=True)
    repeated = _per_frame_flags(repeated_frames, n, "repeated_frames", default=False)
    if n and repeated[0]:
        raise ParameterError("the first frame cannot repeat a frame before it", where="frame 0")

    track = trajectory.at(times)
    camera = Camera(w, h, float(fov_deg))
    rest = (float(track["head_x_mm"].median()), float(track["head_y_mm"].median()),
            float(track["head_z_mm"].median()))
    bg = _background(w, h)
    rig = FaceRig(load_face(face), camera, rest_head_mm=rest, background=bg, seed=seed,
                  lower_skin_follow=lower_skin_follow, lid_follow=lid_follow, glasses=glasses, iris_rgb=iris_rgb,
                  corneal_reflection=corneal_reflection, iris_sampling=iris_sampling)
    light = _light_level(times, seed=seed, drift=float(lighting_drift))
    ramp = _light_ramp(w)
    if extra_faces:
        other = FACES[1] if face == FACES[0] else FACES[0]
        main_iris = camera.focal_px * IRIS_DIAMETER_MM / (rest[2] - EYEBALL_RADIUS_MM)
        spots = [((0.87, 0.58), other, False), ((0.13, 0.58), other, True)]
        for (fx, fy), name, mirror in spots[:extra_faces]:
            _paste_face([rig.base, rig.background], name, centre_px=(fx * w, fy * h), iris_px=EXTRA_FACE_SCALE * main_iris,
                        mirror=mirror)

    sd = float(noise_sd) / np.sqrt(float(darkness))
    bank = _noise_bank(h, w, sd=sd, seed=seed) if sd > 0 else None
    pick = np.random.default_rng([int(seed), 7])
    stored_w, stored_h = (h, w) if rotation_deg in (90, 270) else (w, h)
    def iris_at(sub: pd.DataFrame):
        uv = np.empty((len(sub), 2, 2))
        for j, q in enumerate(sub.itertuples()):
            mm = rig.iris_centres_mm(head_rotation(q.head_yaw_deg, q.head_pitch_deg, q.head_roll_deg),
                                     (q.head_x_mm, q.head_y_mm, q.head_z_mm), gaze_vector(q.yaw_deg, q.pitch_deg))
            uv[j] = [camera.project(mm[e][None])[0] for e in EYES]
        z = float(np.linalg.norm(mm[EYES[0]]))
        return uv, camera.focal_px * IRIS_DIAMETER_MM / z

    def exposed(t_mid: float) -> tuple[np.ndarray, int]:
        """The picture exposed over ``t_mid +- exposure_s / 2`` and its number of sub-frames."""
        sub_t = _subframe_times(trajectory.at, iris_at, t_mid, exposure_s, duration)
        acc = None
        for q in trajectory.at(sub_t).itertuples():
            Rq = head_rotation(q.head_yaw_deg, q.head_pitch_deg, q.head_roll_deg)
            im, _ = rig.render(R=Rq, T_mm=(q.head_x_mm, q.head_y_mm, q.head_z_mm),
                               gaze=gaze_vector(q.yaw_deg, q.pitch_deg), closure=q.lid_closure)
            acc = im.astype(np.float32) if acc is None else acc + im
        return np.clip(acc / len(sub_t) + 0.5, 0, 255).astype(np.uint8), len(sub_t)

    rows = []
    subframes = []
    with atomic_path(path) as tmp:
        writer = ClipWriter(path, tmp, width_px=stored_w, height_px=stored_h, fps=float(fps), codec=codec,
                            crf=crf, bitrate_kbps=bitrate_kbps, rotation_deg=rotation_deg, vfr=vfr)
        try:
            for i in range(n):
                if cancel is not None and cancel.is_set():
                    raise Cancelled(f"rendering {path.name} cancelled at frame {i}")
                r = track.iloc[i]
                R = head_rotation(r.head_yaw_deg, r.head_pitch_deg, r.head_roll_deg)
                T = (r.head_x_mm, r.head_y_mm, r.head_z_mm)
                g = gaze_vector(r.yaw_deg, r.pitch_deg)
                eih_yaw, eih_pitch = _angles(R.T @ g)
                iris_mm = rig.iris_centres_mm(R, T, g)
                iris_uv = {e: camera.project(iris_mm[e][None])[0] for e in EYES}
                if repeated[i]:
                    pass  # ``frame`` is still the picture stored for the frame before
                elif visible[i] and exposure_s > 0:
                    img, k_sub = exposed(float(times[i]))
                    subframes.append(k_sub)
                elif visible[i]:
                    img, _info = rig.render(R=R, T_mm=T, gaze=g, closure=r.lid_closure)
                else:
                    img = rig.background.copy()
                if mirror:
                    iris_uv = {e: (w - iris_uv[e][0], iris_uv[e][1]) for e in EYES}
                draw = (pick.integers(0, len(bank)), pick.integers(0, _NOISE_PAD),
                        pick.integers(0, _NOISE_PAD)) if bank is not None else None  # drawn for repeats too: a
                # clip with repeats holds the very pictures of the clip without them in its other frames
                if not repeated[i]:
                    if mirror:
                        img = np.ascontiguousarray(img[:, ::-1])
                    if lighting_drift or lighting_gradient:
                        gain = _light_gain(light[i], lighting_gradient, ramp)
                        img = np.clip(img * gain + 0.5, 0, 255).astype(np.uint8)
                    if darkness < 1.0:
                        img = cv2.convertScaleAbs(img, alpha=float(darkness))
                    if draw is not None:
                        k, dy, dx = draw
                        img = cv2.add(img, bank[k][dy:dy + h, dx:dx + w], dtype=cv2.CV_8U)
                    frame = img
                pts_s = writer.write(rotate_for_storage(frame, rotation_deg), float(times[i]))
                dist = [float(np.linalg.norm(iris_mm[e])) for e in EYES]
                if not visible[i]:  # no face drawn: no iris in the picture
                    iris_uv = {e: (np.nan, np.nan) for e in EYES}
                rows.append({
                    "frame_index": i, "t_s": float(times[i]), "pts_s": pts_s,
                    "yaw_deg": float(r.yaw_deg), "pitch_deg": float(r.pitch_deg), "blink": bool(r.blink),
                    "lid_closure": float(r.lid_closure), "face_visible": bool(visible[i]),
                    "repeated_frame": bool(repeated[i]),
                    "head_yaw_deg": float(r.head_yaw_deg), "head_pitch_deg": float(r.head_pitch_deg),
                    "head_roll_deg": float(r.head_roll_deg), "head_x_mm": float(r.head_x_mm),
                    "head_y_mm": float(r.head_y_mm), "head_z_mm": float(r.head_z_mm),
                    "eye_in_head_yaw_deg": eih_yaw, "eye_in_head_pitch_deg": eih_pitch,
                    "right_iris_x_px": float(iris_uv["right"][0]), "right_iris_y_px": float(iris_uv["right"][1]),
                    "left_iris_x_px": float(iris_uv["left"][0]), "left_iris_y_px": float(iris_uv["left"][1]),
                    "iris_diameter_px": float(np.mean([camera.focal_px * IRIS_DIAMETER_MM / d for d in dist])),
                    "distance_mm": float(np.mean(dist)),
                    "exposure_start_s": float(times[i]) - 0.5 * exposure_s,
                    "exposure_end_s": float(times[i]) + 0.5 * exposure_s,
                })
                if progress is not None and (i % 10 == 0 or i == n - 1):
                    progress((i + 1) / n, f"rendering {path.name}: frame {i + 1} of {n}")
            writer.close()
        except BaseException:
            writer.abort()
            raise
    elapsed = time.perf_counter() - t_start

    truth = pd.DataFrame(rows, columns=list(TRUTH_COLUMNS))
    stem = path.with_suffix("")
    truth_path = Path(f"{stem}_truth.csv")
    hi_path = Path(f"{stem}_truth_hi.csv")
    ev_path = Path(f"{stem}_truth_events.csv")
    json_path = Path(f"{stem}_truth.json")
    write_csv(truth_path, truth, float_format="%.6f")
    write_csv(hi_path, trajectory.samples, float_format="%.6f")
    ev_cols = ["type", "onset_s", "offset_s", "duration_ms", "yaw_deg", "pitch_deg", "amplitude_deg"]
    parts = [tab.assign(type=kind).reindex(columns=ev_cols).astype({c: float for c in ev_cols[1:]})
             for tab, kind in ((trajectory.fixations, "fixation"), (trajectory.saccades, "saccade"),
                               (trajectory.blinks, "blink")) if len(tab)]
    ev = pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(columns=ev_cols)
    write_csv(ev_path, ev.sort_values("onset_s", kind="stable"), float_format="%.6f")
    import av

    params = {
        "clip": path.name, "clip_sha256": sha256_file(path), "face": face, "size_px": [w, h],
        "stored_size_px": [stored_w, stored_h], "fps": float(fps), "variable_frame_rate": vfr, "frames": n,
        "duration_s": float(times[-1] - times[0]) + (1.0 / fps if not vfr else 0.0),
        "fov_deg": float(fov_deg), "focal_px": camera.focal_px, "principal_point_px": list(camera.centre_px),
        "rest_head_mm": list(rest), "noise_sd": float(noise_sd), "darkness": float(darkness), "codec": codec,
        "crf": int(crf) if codec == "libx264" and not bitrate_kbps else None, "bitrate_kbps": bitrate_kbps,
        "rotation_deg": rotation_deg, "extra_faces": int(extra_faces), "seed": int(seed),
        "lower_skin_follow": float(lower_skin_follow), "lid_follow": float(lid_follow), "glasses": bool(glasses),
        "lighting_drift": float(lighting_drift), "lighting_gradient": float(lighting_gradient),
        "mirror": bool(mirror),
        "iris_colour": iris_colour if isinstance(iris_colour, str) or iris_colour is None else list(iris_rgb),
        "iris_rgb": {e: list(rig.iris_rgb[e]) for e in EYES},
        "exposure_ms": float(exposure_ms), "iris_sampling": iris_sampling,
        "truth_time": "middle of each frame's exposure (t_s)",
        "exposure_subframes": {"mean": float(np.mean(subframes)), "max": int(max(subframes))} if subframes else None,
        "corneal_reflection": (None if corneal_reflection is None else
                               {"source_mm": [float(v) for v in corneal_reflection.source_mm],
                                "size_mm": [float(v) for v in corneal_reflection.size_mm],
                                "brightness": float(corneal_reflection.brightness)}),
        "face_hidden_frames": int((~visible).sum()), "repeated_frames": int(repeated.sum()),
        "geometry": {"iris_diameter_mm": IRIS_DIAMETER_MM, "eyeball_radius_mm": EYEBALL_RADIUS_MM,
                     "frame": "aspectus.schema (yaw>0 subject's right, pitch>0 up)",
                     "picture_coordinates": "x = x_norm * width (pixel i spans [i, i+1)), upright picture"},
        "trajectory": trajectory.params, "truth_columns": TRUTH_COLUMNS,
        "software": {"aspectus": __version__, "av": av.__version__, "numpy": np.__version__},
    }
    write_json(json_path, params)
    return RenderResult(path=path, truth_path=truth_path, truth_hi_path=hi_path, truth_events_path=ev_path,
                        truth_json_path=json_path, truth=truth, frames=n, focal_px=camera.focal_px, size_px=(w, h),
                        render_ms_per_frame=1000.0 * elapsed / n, params=params)


def read_truth(path) -> pd.DataFrame:
    """Read a ``<stem>_truth.csv`` written by :func:`render_clip` (its flags as bool)."""
    df = pd.read_csv(path)
    for c in ("blink", "face_visible", "repeated_frame"):
        if c in df:
            df[c] = df[c].astype(str).str.lower().isin(("true", "1"))
    return df
