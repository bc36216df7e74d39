"""From a clip file to its samples, events, features and sidecar.

This is the one place where the steps are strung together; the CLI, the
batch runner and the desktop app all call :func:`process_clip` (and
:func:`reanalyse` for new detection parameters on cached samples).

Per-clip output folder (all files written atomically; a new result is built
in ``.next/`` beside the earlier one and moved over it only when complete,
``run.json`` last - so a run that fails or is killed leaves the earlier
complete result valid, and a run.json with a matching input hash and
parameter hash means the clip is complete; see :func:`recover_output_dir`):

=====================  =========================================================
samples.parquet        the gaze samples table (aspectus.schema), the cache
samples.csv            the same, for spreadsheets and statistics packages
events.csv/.parquet    fixations, saccades, blinks, data loss
features.csv/.parquet  per clip, per window, per segment
run.json               sidecar: parameters, versions, input hash, quality, output checksums
=====================  =========================================================

Decoding runs in a background thread (:class:`aspectus.webcam.video.FramePrefetcher`)
so it overlaps the face mesh; the per-frame head pose and iris refinement run
beside both (:mod:`aspectus.webcam.frame_geometry`: a child process for clips of more
than a few seconds, a thread otherwise). Everything else is vectorised over
the clip once landmarking is done. Memory grows only by the samples
table (about 300 bytes per frame), never by frames.
"""
from __future__ import annotations

import datetime as _dt
import os
import platform
import shutil
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path
from collections.abc import Callable

import numpy as np
import pandas as pd

from aspectus import __version__
from aspectus.atomic import (full_paths_wanted, recorded_path, sha256_file, sha256_json, write_csv, write_json,
                             write_parquet)
from aspectus._env import background_cpus, lower_process_priority, pin_to_cpus
from aspectus.run_record import missing_output, read_run_json, refuse_foreign_files, run_json_path
from aspectus.errors import AspectusInputError, Cancelled, NoFaceError
from aspectus.webcam.gaze import (SHORT_CLIP_ADVICE, SMALL_FACE_BELOW_PX, GazeParams, estimate_gaze, frame_measurements,
                                  learnt_briefly_s, unmirror_record)
from aspectus.webcam.eye_anchors import AUTO_SMALL_FACE_SET, DEFAULT_ANCHOR_SET
from aspectus.webcam.frame_geometry import (APPEARANCE_COLUMNS, LABEL_DIAM, LABEL_IRIS, LIMBUS_CONTRAST, LIMBUS_DIAM,
                                            RECORD_WIDTH, SMALL_FACE_T_COLUMNS, decision_limbus_diam,
                                            frame_item, start_geometry)
from aspectus.webcam.iris_appearance import DECIDE_FRAMES, MIN_TRAIN_FRAMES, PATCH_BYTES, small_iris
from aspectus.webcam.landmarks import FaceChoiceError, FaceTracker, mediapipe_version, parse_face_choice
from aspectus.webcam.limbus import MIN_IRIS_CONTRAST_PCT, fill_iris_reflections
from aspectus.events.detect.noise import SD_PER_RMS_S2S_WHITE
from aspectus.schema import EVENT_COLUMNS, FEATURE_COLUMNS, SAMPLE_COLUMNS, column_table
from aspectus.webcam.video import DecodeReport, FramePrefetcher, iter_frames, probe

ProgressFn = Callable[[float, str], None]

#: below either, a clip is reported not usable: a few frames hold no fixation to measure (common practice)
MIN_USABLE_FRAMES = 10
MIN_USABLE_DURATION_S = 0.5
#: raised whenever the samples table a clip gives changes for the same parameters, so cached samples of an
#: earlier method are rebuilt, not reused (2: a face far from the followed one is no longer taken for it;
#: 3: the eyeball centres' coupling to the eyes is measured on local-quadratic residuals, not 2-s high-passed
#: series; 4: everything the gaze chain changed from 2026-12-04 to 2026-12-05 without raising it - the limbus
#: fit's picture convention and gap filling, the eye anchors, the iris scale, the appearance estimate as the
#: default at every face size, among others: results of those days are redone, not mixed into a study;
#: 5: the ``repeated_picture`` column, and a repeated picture's sample no longer valid)
EXTRACTION_REVISION = 5
#: nice steps by which the decoder thread and the geometry process yield to the face mesh (see
#: :func:`extract_samples`)
DECODE_NICE = 5
GEOMETRY_NICE = 10


def _analysis_params_default():
    from aspectus.events.analysis import AnalysisParams

    return AnalysisParams()


@dataclass
class ProcessParams:
    """Everything that decides a clip's outputs.

    Attributes
    ----------
    fov_deg : float
        Assumed horizontal field of view of the webcam, degrees (20-120;
        default 60, typical of laptop webcams). Changes distance and head
        translation; gaze angles depend on it only weakly.
    face : str
        Which face to follow: ``"largest"`` (default) or ``"index:N"`` (the
        N-th face from the picture's left edge, 0-based, on the first frame).
    max_faces : int
        Faces the face mesh looks for in each frame (1-10; default 2).
    gaze : GazeParams
        Blink threshold, iris refinement, head-turn limit.
    analysis : AnalysisParams
        Clean-up, detector and feature parameters (aspectus.events.analysis).
    """

    fov_deg: float = 60.0
    face: str = "largest"
    max_faces: int = 2
    gaze: GazeParams = field(default_factory=GazeParams)
    analysis: object = field(default_factory=_analysis_params_default)

    def __post_init__(self):
        from aspectus.errors import ParameterError

        mode, index = parse_face_choice(self.face)
        if mode == "index" and index >= int(self.max_faces):
            raise ParameterError(f"face choice {self.face!r}: only {int(self.max_faces)} face(s) are looked for per "
                                 f"frame (max_faces), so face {index} from the left can never be found",
                                 hint=f"raise --max-faces to {index + 1} (at most 10) or choose a lower index")
        if not (20.0 <= float(self.fov_deg) <= 120.0):
            raise ParameterError(f"field of view {self.fov_deg:g} deg is outside 20-120 deg",
                                 hint="give the webcam's horizontal field of view between 20 and 120 deg (--fov-deg; "
                                      "60 when left out)")
        if not (1 <= int(self.max_faces) <= 10):
            raise ParameterError(f"max_faces must be 1-10, got {self.max_faces}")

    def extraction_dict(self) -> dict:
        """The parameters that change the samples table (landmarking and gaze)."""
        return {"fov_deg": float(self.fov_deg), "face": self.face, "max_faces": int(self.max_faces),
                "gaze": self.gaze.to_dict()}

    def to_dict(self) -> dict:
        d = self.extraction_dict()
        d["analysis"] = self.analysis.to_dict()
        return d

    def fingerprint(self) -> str:
        """SHA-256 of every parameter and of the method's revision (:data:`EXTRACTION_REVISION`): what
        run.json's ``params_sha256`` holds and what decides whether a clip's results are current."""
        return params_fingerprint(self.to_dict())

    @classmethod
    def from_dict(cls, d: dict) -> ProcessParams:
        from aspectus.events.analysis import AnalysisParams

        d = dict(d or {})
        gaze = GazeParams.from_dict(d.pop("gaze", {}))
        analysis = AnalysisParams.from_dict(d.pop("analysis", {}) or {})
        return cls(gaze=gaze, analysis=analysis, **d)


def params_fingerprint(params_dict: dict) -> str:
    """:meth:`ProcessParams.fingerprint` of a parameter dict as run.json stores it."""
    return sha256_json(dict(params_dict) | {"method_revision": EXTRACTION_REVISION})


@dataclass
class ClipResult:
    clip: Path
    out_dir: Path
    samples: pd.DataFrame
    analysis: object
    summary: dict
    reused_samples: bool = False


class _Grow:
    """A matrix (float64 unless ``dtype`` says otherwise) that grows by doubling (rows = frames)."""

    def __init__(self, width: int, cap: int = 1024, dtype=np.float64):
        self.fill = np.nan if np.dtype(dtype).kind == "f" else 0
        self.a = np.full((cap, width), self.fill, dtype=dtype)
        self.n = 0

    def append(self, row):
        if self.n == len(self.a):
            self.a = np.concatenate([self.a, np.full_like(self.a, self.fill)])
        self.a[self.n] = row
        self.n += 1

    def view(self) -> np.ndarray:
        return self.a[: self.n]


class _PatchFile:
    """The eye patches (one row of bytes a frame) kept in an unnamed temporary file, not in memory.

    Rows are gathered in a small buffer and written in chunks; ``self[a:b]`` reads rows ``a``-``b`` back as a
    (b - a, 2, H, W) uint8 array (:func:`aspectus.webcam.iris_appearance.appearance_iris` reads one block of
    frames at a time), so an hour of patches (some 80 MB at 30 fps) costs disk, not memory.
    """

    CHUNK = 1024

    def __init__(self, width: int):
        import tempfile

        self.width = int(width)
        self.n = 0
        self._buf: list = []
        self._f = tempfile.TemporaryFile(prefix="aspectus_patches_")

    def append(self, row) -> None:
        self._buf.append(np.asarray(row, np.uint8).tobytes())
        self.n += 1
        if len(self._buf) >= self.CHUNK:
            self._flush()

    def _flush(self) -> None:
        if self._buf:
            self._f.seek(0, 2)
            self._f.write(b"".join(self._buf))
            self._buf = []

    def __len__(self) -> int:
        return self.n

    def __getitem__(self, key) -> np.ndarray:
        from aspectus.webcam.iris_appearance import PATCH_SIZE

        a, b, step = key.indices(self.n)
        if step != 1:
            raise IndexError("patch rows are read in contiguous blocks")
        self._flush()
        self._f.seek(a * self.width)
        out = np.fromfile(self._f, dtype=np.uint8, count=max(b - a, 0) * self.width)
        W, H = PATCH_SIZE
        return out.reshape(-1, 2, H, W)

    def close(self) -> None:
        self._buf = []
        self._f.close()


#: with ``eye_anchor_set="auto"``: the face counts as small only if the first this many frames with a face (5 s
#: at 30 fps) show an iris below :data:`aspectus.webcam.gaze.SMALL_FACE_BELOW_PX` (the limbus fit's median
#: diameter over their open-eye frames, :func:`aspectus.webcam.frame_geometry.first_frames_small_iris`), and the
#: whole clip does too
AUTO_DECIDE_FRAMES = DECIDE_FRAMES


class _SplitSink:
    """Hands the record's columns of a geometry row to one store and its patch bytes to another."""

    def __init__(self, rec: _Grow, patches: _PatchFile, width: int):
        self.rec, self.patches, self.width = rec, patches, width

    def __call__(self, row) -> None:
        self.rec.append(row[:self.width])
        self.patches.append(np.ascontiguousarray(row[self.width:]).view(np.uint8))


def _iris_size_fields(size: dict | None, prefix: str = "") -> dict:
    """run.json's fields of an iris size the ``"auto"`` settings chose on (:func:`aspectus.webcam.gaze.switch_iris_px`):
    ``iris_px`` (the figure read against the threshold), ``iris_px_source`` ("limbus fit", or "face mesh" with
    fewer than 30 open-eye fits), ``limbus_fits`` and ``mesh_median_iris_px`` (the face mesh's median, which the
    choice read before it read the limbus fit's); each name after ``prefix``."""
    size = size or {}
    return {f"{prefix}iris_px": _round(size.get("iris_px")), f"{prefix}iris_px_source": size.get("iris_px_source"),
            f"{prefix}limbus_fits": size.get("limbus_fits"),
            f"{prefix}mesh_median_iris_px": _round(size.get("mesh_iris_px"))}


def _anchor_set_choice(gaze, refine: bool, small_first: bool | None, small_clip: bool, clip_size: dict) -> dict:
    """run.json's ``gaze_model.eye_anchor_set``: the setting, the set used (None: no anchors, the face mesh's PnP
    translation) and, with ``"auto"``, why.

    ``"auto"`` takes :data:`aspectus.webcam.eye_anchors.AUTO_SMALL_FACE_SET` when both the per-frame geometry's
    first frames (``small_first``: its decision, :func:`aspectus.webcam.frame_geometry.first_frames_small_iris`) and
    the whole clip (``small_clip``, on ``clip_size``: :func:`aspectus.webcam.iris_appearance.small_iris`) show an
    iris below :data:`aspectus.webcam.gaze.SMALL_FACE_BELOW_PX`
    and :data:`aspectus.webcam.eye_anchors.DEFAULT_ANCHOR_SET` otherwise.
    """
    setting = gaze.eye_anchor_set
    if not (refine and gaze.eye_anchors):
        off = " and ".join(n for n, on in (("refine_iris", refine), ("eye_anchors", gaze.eye_anchors)) if not on)
        return {"setting": setting, "used": None, "reason": f"no eye anchors ({off} off): the face mesh's head "
                                                            "translation is used"}
    if setting != "auto":
        return {"setting": setting, "used": setting}
    out = {"setting": "auto", "threshold_px": SMALL_FACE_BELOW_PX, **_iris_size_fields(clip_size),
           "first_frames": AUTO_DECIDE_FRAMES}
    px = f"{out['iris_px']} px ({out['iris_px_source']})"
    if not small_first:
        out["used"] = DEFAULT_ANCHOR_SET
        out["reason"] = (f"the first frames' iris diameter is not below {SMALL_FACE_BELOW_PX} px"
                         if small_first is False else "no face frames to decide on")
    elif not small_clip:
        out["used"] = DEFAULT_ANCHOR_SET
        out["reason"] = f"the clip's iris diameter {px} is not below {SMALL_FACE_BELOW_PX} px"
    else:
        out["used"] = AUTO_SMALL_FACE_SET
        out["reason"] = f"the clip's iris diameter {px} is below {SMALL_FACE_BELOW_PX} px"
    return out


def _appearance_iris(a: np.ndarray, patches: np.ndarray, found: np.ndarray) -> tuple[np.ndarray, dict]:
    """The iris centres with their height from the eyes' appearance (``iris_combine="appearance"``).

    ``a``: the record with the appearance columns (limbus-fit flags, patch frames); ``patches``: (N, 2, H, W)
    uint8 or a :class:`_PatchFile` of N rows. Where no prediction is made (too few labelled frames, no patch)
    the limbus fit's height stays.
    """
    from aspectus.webcam.gaze import OPEN_EYE_REL, relative_aperture
    from aspectus.webcam.iris_appearance import PATCH_SIZE, appearance_iris

    n = len(a)
    w = RECORD_WIDTH
    iris = _label_columns(a, a[:, 15:19], LABEL_IRIS).reshape(n, 2, 2).copy()
    limbus = iris.copy()
    limbus[~(a[:, w:w + 2] > 0.5)] = np.nan
    rel, _ = relative_aperture(found, a[:, 29:31])
    usable = found & (rel >= OPEN_EYE_REL)
    if isinstance(patches, np.ndarray):
        W, H = PATCH_SIZE
        patches = patches.reshape(n, 2, H, W)
    pred, info = appearance_iris(patches, a[:, w + 2:w + 14].reshape(n, 2, 2, 3), limbus,
                                 usable)  # the columns: APPEARANCE_COLUMNS
    y = pred[..., 1]
    iris[..., 1] = np.where(np.isfinite(y), y, iris[..., 1])
    info["frames_predicted"] = [int(np.isfinite(y[:, e]).sum()) for e in range(2)]
    info["appearance_share"] = appearance_share(info)
    return iris, info


def _learnt_from_s(info: dict, t_s: np.ndarray) -> float | None:
    """Seconds of open-eye frames the appearance estimate learnt from, on the eye that had fewer (its blocks'
    ``train_frames`` over the clip's median frame interval); None where that cannot be told."""
    dt = np.diff(np.asarray(t_s, float))
    dt = dt[np.isfinite(dt) & (dt > 0)]
    if not dt.size:
        return None
    frames = [sum(int((blk.get(e) or {}).get("train_frames") or 0) for blk in info.get("blocks", []))
              for e in ("right", "left")]
    return round(min(frames) * float(np.median(dt)), 1)


def appearance_share(info: dict) -> float:
    """The share of the iris height that came from the appearance estimate: its blend weight (``w`` of
    :func:`aspectus.webcam.iris_appearance.blend_weights`; 1 where an eye had too few frames to choose one, 0
    where the eye's regression was not fitted) averaged over both eyes and the blocks' frames. 0 means that the
    limbus fit alone was used, whatever was chosen.

    >>> appearance_share({"blocks": [{"frames": [0, 300], "right": {"fitted": True}, "left": {"fitted": False},
    ...                               "appearance_weight": {"right": 0.5}}]})
    0.25
    """
    total = weight = 0.0
    for blk in info.get("blocks") or []:
        a, b = blk["frames"]
        for eye in ("right", "left"):
            w = float((blk.get("appearance_weight") or {}).get(eye, 1.0)) if (blk.get(eye) or {}).get("fitted") else 0.0
            weight += w * (b - a)
            total += b - a
    return round(weight / total, 3) if total else 0.0


def _label_columns(a: np.ndarray, own: np.ndarray, label: slice) -> np.ndarray:
    """``own`` (columns of ``a``) with the appearance estimate's label fits (``label``, offsets from
    :data:`RECORD_WIDTH`) in the frames that have them: the fits without the side-arc rule
    (``GazeParams.side_arcs``; :data:`aspectus.webcam.frame_geometry.APPEARANCE_COLUMNS`)."""
    w = RECORD_WIDTH
    has = np.isfinite(a[:, w + LABEL_IRIS.start:w + LABEL_IRIS.stop]).all(axis=1)
    out = np.array(own, float)
    out[has] = a[has, w + label.start:w + label.stop]
    return out


#: the share of a clip's progress given to the iris registration at its end (``iris_registration``: some 3 ms a
#: frame, after the frames' own work)
REGISTRATION_PROGRESS_SHARE = 0.1


def _registered_iris(a: np.ndarray, patches, found: np.ndarray, iris: np.ndarray, *, progress=None, cancel=None,
                     name: str = "") -> tuple[np.ndarray, dict]:
    """The iris centres ``iris`` (N, 2, 2) fused with the iris disc's registered motion between frames
    (``iris_registration``; :func:`aspectus.webcam.iris_registration.registered_iris`). ``a``: the record with the
    appearance columns; ``patches``: (N, 2, H, W) uint8 or a :class:`_PatchFile` of N rows. ``progress`` (the
    extraction's) runs over the last :data:`REGISTRATION_PROGRESS_SHARE` of the clip's bar; ``cancel`` set raises
    :class:`~aspectus.errors.Cancelled` (clip ``name`` in its message)."""
    from aspectus.webcam.gaze import OPEN_EYE_REL, relative_aperture
    from aspectus.webcam.iris_appearance import PATCH_SIZE
    from aspectus.webcam.iris_registration import registered_iris

    n = len(a)
    rel, _ = relative_aperture(found, a[:, 29:31])
    usable = found & (rel >= OPEN_EYE_REL)
    if isinstance(patches, np.ndarray):
        W, H = PATCH_SIZE
        patches = patches.reshape(n, 2, H, W)
    start = 0.99 * (1.0 - REGISTRATION_PROGRESS_SHARE)

    def on_frames(k: int) -> None:
        if cancel is not None and cancel.is_set():
            raise Cancelled(f"cancelled while processing {name}")
        if progress is not None:
            progress(start + (0.99 - start) * k / max(n, 1), f"{name}: following the iris between frames, "
                                                                f"frame {k} of {n}")

    t0 = time.process_time()
    out, info = registered_iris(patches, a[:, RECORD_WIDTH + 2:RECORD_WIDTH + 14].reshape(n, 2, 2, 3), iris,
                                a[:, 19:21], usable, on_frames=on_frames)
    info["cpu_ms_per_frame"] = round((time.process_time() - t0) * 1e3 / max(n, 1), 3)
    return out, info


#: how the stages of one clip run: "overlapped" (decoding in a thread, the geometry in a child process or
#: thread, beside the face mesh: fastest for one clip on a machine of its own) or "serial" (all in the
#: calling thread, one after the other: the least CPU per frame, for batch workers that each have a core)
STAGES = ("overlapped", "serial")
#: environment variable that sets the stages where the caller does not (batch workers set it)
STAGES_ENV = "ASPECTUS_STAGES"


def resolve_stages(stages: str | None = None) -> str:
    """``stages`` if given, else :data:`STAGES_ENV` from the environment, else ``"overlapped"``."""
    from aspectus.errors import ParameterError

    s = (stages or os.environ.get(STAGES_ENV) or "overlapped").strip().lower()
    if s not in STAGES:
        raise ParameterError(f"stages must be one of {', '.join(STAGES)}, not {s!r}",
                             hint=f"check {STAGES_ENV} in the environment" if not stages else None)
    return s


def extract_samples(clip_path, *, params: ProcessParams | None = None, progress: ProgressFn | None = None,
                    cancel=None, geometry_mode: str = "auto", stages: str | None = None,
                    source=None) -> tuple[pd.DataFrame, dict]:
    """Decode, landmark and estimate gaze for every frame of a clip.

    ``geometry_mode`` says where the per-frame head pose and iris refinement
    run: ``"auto"`` (a child process for clips of 450 frames or more, else a
    thread), ``"thread"``, ``"process"`` or ``"inline"``; the results are the
    same. ``stages`` (:func:`resolve_stages`): with ``"serial"`` decoding,
    mesh and geometry run one after the other in the calling thread (and
    ``geometry_mode`` is ``"inline"``), with the same results. ``source``: a
    file object the decoder reads the clip's bytes from (an
    :class:`aspectus.atomic.HashingReader` hashes the clip in the same pass).

    Returns
    -------
    samples : DataFrame in the aspectus samples schema (one row per frame).
    meta : dict with the video properties, decode report, gaze-model figures
        and timing.
    """
    params = params or ProcessParams()
    clip = Path(clip_path)
    info = probe(clip)
    n_hint = max(int(info.frame_count_hint or 0), 1)
    report = DecodeReport()
    refine = bool(params.gaze.refine_iris)
    # the iris height from the eyes' appearance (aspectus.webcam.iris_appearance) needs each frame's eye patches:
    # kept as uint8 beside the record, the limbus-fit flags and patch frames in more record columns
    combine = params.gaze.iris_combine
    appearance = refine and combine in ("appearance", "auto") and bool(params.gaze.eye_anchors)
    # the iris's registered motion between frames (aspectus.webcam.iris_registration) reads the same patches
    registration = refine and bool(params.gaze.iris_registration) and bool(params.gaze.eye_anchors)
    sample_patches = appearance or registration
    cap = min(max(n_hint + 16, 64), 1 << 20)
    n_meta = sum(k for name, k in APPEARANCE_COLUMNS if name != "patches")
    rec = _Grow(RECORD_WIDTH + (n_meta if sample_patches else 0), cap=cap)
    sink = rec.append
    patches = None
    if sample_patches:
        patches = _PatchFile(PATCH_BYTES)  # on disk: an hour of them is some 80 MB
        sink = _SplitSink(rec, patches, RECORD_WIDTH + n_meta)
    t0 = time.perf_counter()
    skin = refine and params.gaze.head_rotation == "skin"
    serial = resolve_stages(stages) == "serial"
    tracker = FaceTracker(max_faces=params.max_faces, face=params.face)
    if serial:  # one thread, one core: no hand-over between stages at all
        background = None
        geometry_mode = "inline"
        prefetch = iter_frames(clip, report=report, cancel=cancel, source=source)
    else:
        background = background_cpus()  # the decoder and the geometry keep off the CPUs the mesh may need
        prefetch = FramePrefetcher(clip, report=report, cancel=cancel, lower_priority=DECODE_NICE, cpus=background,
                                   source=source)
    # Three stages overlap: decoding (its own thread), the face mesh (here), and the per-frame
    # geometry - head pose, iris refinement - in a child process for clips of more than a few
    # seconds (aspectus.webcam.frame_geometry). The mesh and OpenCV release the GIL while they compute;
    # a short switch interval hands it over promptly. The mesh sets the pace; the other two can run
    # ahead (decoding) or lag and catch up (geometry) through their queues, so they run at lower
    # priority (DECODE_NICE, GEOMETRY_NICE): on two cores the three together need nearly both, and
    # at equal priority the scheduler often parks a mesh thread behind one of them (measured with
    # bench/bench_pipeline.py: DEVELOPERS.md, performance).
    old_switch = sys.getswitchinterval()
    sys.setswitchinterval(0.0005)
    geometry = start_geometry(fov_deg=params.fov_deg, refine_iris=refine, sink=sink, frames_hint=n_hint,
                              mode=geometry_mode, eye_anchors=bool(params.gaze.eye_anchors),
                              anchor_set=params.gaze.eye_anchor_set, skin_pose=skin, appearance=sample_patches,
                              iris_shape=params.gaze.iris_shape == "ellipse",
                              side_arcs=refine and bool(params.gaze.side_arcs) and not appearance)
    if geometry.kind == "process":
        lower_process_priority(geometry.pid, GEOMETRY_NICE)
        pin_to_cpus(background, geometry.pid)
    n_in = 0
    repeats = []  # frames whose picture is the frame before's again (Frame.repeat): no new measurement
    state = None
    fill = bool(params.gaze.fill_reflections)
    last_iris = None  # with ``fill``: the face mesh's iris centres and diameters in the frame before
    # the iris registration at the clip's end takes the last part of the progress (_registered_iris)
    loop_share = 1.0 - REGISTRATION_PROGRESS_SHARE if registration else 1.0
    try:
        for fr in prefetch:
            if cancel is not None and cancel.is_set():
                raise Cancelled(f"cancelled while processing {clip.name}")
            geometry.check()
            try:
                # with GazeParams.fill_reflections the face mesh sees the picture with the corneal reflections near
                # the last frame's irises filled (aspectus.webcam.limbus.fill_iris_reflections); the stages after it
                # read the picture as it is
                mesh_image = fr.image if last_iris is None else fill_iris_reflections(fr.image, *last_iris)[0]
                obs = tracker.process(mesh_image)
            except FaceChoiceError as exc:
                raise FaceChoiceError(exc.problem, path=clip, hint=exc.hint) from None
            if fill:
                m_obs = None if obs is None else frame_measurements(obs.points_px)
                last_iris = None if m_obs is None else (m_obs["iris_px"], m_obs["iris_diam_px"])
            geometry.submit(frame_item(fr.pts_s, fr.image, obs, refine_iris=refine, faces_in_view=tracker.faces_in_view,
                                       skin_pose=skin, anchor_set=params.gaze.eye_anchor_set))
            if fr.repeat:
                repeats.append(n_in)
            n_in += 1
            if progress is not None and (n_in % 10 == 0):
                progress(min(n_in / n_hint, 0.99) * loop_share, f"{clip.name}: frame {n_in} of about {n_hint}")
        state = geometry.finish()
    finally:
        if state is None:
            geometry.abort()
            if patches is not None:
                patches.close()  # a failed or cancelled run: the eye patches go at once, not when collected
        sys.setswitchinterval(old_switch)
        prefetch.close()
        tracker.close()
    size, size_changes = state["size"], state["size_changes"]
    t_land = time.perf_counter() - t0
    a = rec.view()
    n = len(a)
    found = a[:, 1] > 0.5
    # rotations and translations are cleaned in place, in the record buffer itself (no copies of an hour of them)
    Rm = np.nan_to_num(a[:, 3:12], copy=False).reshape(n, 3, 3)
    Rm[~found] = np.eye(3)
    # the clip's iris size for the "auto" settings (the limbus fit's median over open-eye frames; the mesh's with
    # fewer than 30 fits): one rule, iris_appearance.small_iris
    small_clip, clip_size = small_iris(found, a[:, 19:21], decision_limbus_diam(a), a[:, 29:31],
                                       SMALL_FACE_BELOW_PX)
    anchors_choice = _anchor_set_choice(params.gaze, refine, state.get("small_face"), small_clip, clip_size)
    if params.gaze.eye_anchor_set == "auto" and anchors_choice["used"] == AUTO_SMALL_FACE_SET:
        a[:, 12:15] = a[:, SMALL_FACE_T_COLUMNS]  # the small-face set's translation (NaN where no face, as t_mm)
    tm = np.nan_to_num(a[:, 12:15], nan=1.0, copy=False)
    K = np.asarray(state["K"]) if state["K"] is not None else np.eye(3)
    iris = a[:, 15:19].reshape(n, 2, 2)
    app_info = None
    # "auto": the appearance estimate wherever it can run (the clip's iris size is recorded, not decided on)
    choice = {"setting": combine, **_iris_size_fields(clip_size)} if combine == "auto" else None
    if combine == "auto" and not appearance:
        off = [name for name, on in (("refine_iris", refine), ("eye_anchors", bool(params.gaze.eye_anchors))) if not on]
        choice["reason"] = (f"the appearance estimate needs {' and '.join(off)} (off): the "
                            + ("limbus fit" if refine else "face mesh's iris point") + " is used")
    fitted = False  # whether the appearance estimate is the iris source (else the limbus fit, with refine)
    weightless = False  # fitted, but blended away on every eye (the limbus fit alone agreed better)
    repeated = np.zeros(n, bool)  # pictures the recording repeated (Frame.repeat): no new observation
    repeated[[i for i in repeats if i < n]] = True
    if appearance:
        # a repeated picture is no new label either: its copy would count twice in the regression's fit
        iris, app_info = _appearance_iris(a, patches, found & ~repeated)
        fitted = any(blk[e].get("fitted") for blk in app_info["blocks"] for e in ("right", "left"))
        weightless = fitted and app_info["appearance_share"] == 0.0
        if choice is not None:
            choice["appearance_share"] = app_info["appearance_share"]
            if weightless:
                choice["reason"] = ("the appearance estimate carried no weight (on every eye the limbus fit alone "
                                    "agreed better with the other eye): the limbus fit is used")
            elif fitted:
                choice["reason"] = "the appearance estimate was fitted on the clip's own eyes"
                choice["learnt_from_s"] = _learnt_from_s(app_info, a[:, 0])
            else:
                choice["reason"] = ("the appearance regression was not fitted (too few open-eye frames with a limbus "
                                    f"fit: at least {MIN_TRAIN_FRAMES} per eye are needed): the limbus fit is used")
        if not fitted:
            iris = a[:, 15:19].reshape(n, 2, 2)
            if choice is not None:
                app_info = None
    if choice is not None:
        choice["used"] = ("appearance" if app_info is not None and not weightless
                          else ("limbus" if refine else "face mesh"))
    # the limbus fits' diameters (the iris scale): with the appearance estimate those it learnt from
    limbus_diam = _label_columns(a, a[:, LIMBUS_DIAM], LABEL_DIAM) if fitted else a[:, LIMBUS_DIAM]
    if refine and not fitted:
        # where the limbus fit failed the record holds the face mesh's iris point: marked missing, so that the
        # gaze estimate bridges it from the neighbouring fits (gaze.fill_iris_gaps; the raw mesh point only past
        # 0.3 s), or with fuse / rescale takes the mesh point mapped onto the fit's scale (the raw point is biased
        # by 1-3 px vertically, and the gaze stepped each time the source changed)
        iris = np.array(iris, float)
        iris[~np.isfinite(a[:, LIMBUS_DIAM])] = np.nan
    reg_info = None
    if params.gaze.iris_registration:
        reg_info = {"applied": False, "reason": "needs refine_iris and eye_anchors"}
    try:
        if registration and patches is not None:
            iris, reg_info = _registered_iris(a, patches, found, iris, progress=progress, cancel=cancel,
                                              name=clip.name)
    finally:
        if patches is not None:
            patches.close()  # the patches are not needed any more (the temporary file goes with it)
    contrast = iris_contrast(a[:, LIMBUS_CONTRAST], mirrored=params.gaze.mirrored) if refine else None
    if contrast is not None:
        contrast["pupil_eye_frames"] = state.get("pupil_eye_frames")  # eyes located by the pupil (a light iris)
    cols, ginfo = estimate_gaze(
        K=K, found=found, R=Rm, t=tm, iris_px=iris, iris_diam_px=a[:, 19:21], repeated=repeated,
        corners_px=a[:, 21:29].reshape(n, 2, 2, 2), ear=a[:, 29:31], t_s=a[:, 0],
        iris_mesh_px=a[:, 31:35].reshape(n, 2, 2) if params.gaze.refine_iris else None,
        limbus_diam_px=limbus_diam if params.gaze.refine_iris else None, params=params.gaze)
    # measured per eye of the face mesh: in a mirrored clip named for the subject's eyes, as estimate_gaze's own
    # records are (gaze.unmirror_record)
    more = {k: v for k, v in (("iris_appearance", app_info), ("iris_registration", reg_info)) if v is not None}
    ginfo |= unmirror_record(more) if params.gaze.mirrored else more
    if choice is None:
        # an explicit setting: appearance that could not be learnt falls back to the limbus fit
        used = combine if refine else "face mesh"
        if refine and combine == "appearance" and (not fitted or weightless):
            used = "limbus"
        choice = {"setting": combine, "used": used}
    ginfo["iris_estimate"] = choice
    ginfo["eye_anchor_set"] = anchors_choice
    pts = a[:, 0].copy()
    counts = a[:, 2].astype(np.int64)
    del a, rec, Rm, tm, iris  # the per-frame records are in ``cols`` now; an hour of them is some 30 MB
    t_clip = pts - pts[0] if n else pts
    cols |= {"t_s": t_clip, "frame_index": np.arange(n, dtype=np.int64), "pts_s": pts, "face_found": found,
             "face_count": counts, "pupil": np.full(n, np.nan)}
    order = [c.name for c in SAMPLE_COLUMNS if c.name in cols]
    df = pd.DataFrame({name: cols.pop(name) for name in order + [c for c in list(cols) if c not in order]})
    del cols
    meta = {
        "video": info.to_dict() | {"decoded_size_px": list(size) if size else None, "size_changes": size_changes},
        "decode": report.to_dict(),
        "gaze_model": ginfo,
        "camera_matrix": K.tolist(),
        "face_tracking": {"multi_face_from_frame": tracker.multi_face_from_frame,
                          "check_every_frames": tracker.check_every,
                          "other_faces_only_frames": tracker.other_faces_only_frames,
                          "reacquired_at_frames": list(tracker.reacquired_frames),
                          "reacquire_after_frames": tracker.reacquire_after},
        "stages": "serial" if serial else "overlapped",
        "geometry_ran_in": geometry.kind,
        "background_cpus": sorted(background) if background else None,
        "eye_anchor_frames": state.get("anchored_frames"),
        "eye_anchor_fallback_frames": state.get("unanchored_frames"),
        "eye_anchor_match_frac": _fraction(state.get("anchor_matches"), state.get("anchor_misses")),
        "eye_anchor_region_frac": _fraction(state.get("region_registered"), state.get("region_failed")),
        "skin_pose_frames": state.get("skin_pose_frames"),
        "skin_pose_fallback_frames": state.get("skin_pose_fallback_frames"),
        "geometry_process_peak_rss_mb": state.get("peak_rss_mb"),
        "iris_contrast": contrast,
        "landmarking_s": round(t_land, 3),
        "landmarking_fps": round(n / t_land, 1) if t_land > 0 else None,
    }
    if n and n > 1:
        d = np.diff(pts)
        meta["frame_interval_ms"] = {"median": float(np.median(d) * 1e3), "min": float(d.min() * 1e3),
                                     "max": float(d.max() * 1e3)}
    return df, meta


def iris_contrast(steps: np.ndarray, *, mirrored: bool = False) -> dict:
    """The clip's iris contrast against the whites of the eyes from the frames' per-eye contrasts (N, 2), % (NaN
    where not measured; :func:`aspectus.webcam.limbus.limbus_contrast`): each eye's median over its frames, the
    clip's the lower of the two (the gaze reads both eyes), and how many frames each was measured in.

    ``steps`` are the face mesh's [right, left] eyes; ``mirrored`` (a mirrored clip, ``GazeParams.mirrored``): the
    mesh's right eye is the subject's left, and ``right_pct`` / ``left_pct`` / ``frames`` name the subject's eyes,
    as run.json's other per-eye records do (:func:`aspectus.webcam.gaze.unmirror_record`)."""
    steps = np.asarray(steps, float).reshape(-1, 2)
    if mirrored:
        steps = steps[:, ::-1]
    out = {"frames": [int(np.isfinite(steps[:, e]).sum()) for e in (0, 1)]}
    med = [float(np.median(steps[np.isfinite(steps[:, e]), e])) if out["frames"][e] else float("nan") for e in (0, 1)]
    out["right_pct"], out["left_pct"] = _round(med[0], 1), _round(med[1], 1)
    both = [m for m in med if np.isfinite(m)]
    out["clip_pct"] = _round(min(both), 1) if both else None
    out["min_pct"] = MIN_IRIS_CONTRAST_PCT
    return out


def _round(x, nd: int = 2) -> float | None:
    return round(float(x), nd) if x is not None and np.isfinite(x) else None


def _fraction(hits, misses) -> float | None:
    """hits / (hits + misses), or None when there were none."""
    if hits is None or misses is None or hits + misses == 0:
        return None
    return round(hits / (hits + misses), 4)


def software_versions() -> dict:
    from importlib.metadata import PackageNotFoundError, version

    out = {"aspectus": __version__, "python": platform.python_version(), "mediapipe": mediapipe_version()}
    for pkg in ("numpy", "pandas", "scipy", "pyarrow", "av", "opencv-contrib-python"):
        try:
            out[pkg] = version(pkg)
        except PackageNotFoundError:
            out[pkg] = None
    out["face_model"] = "MediaPipe face mesh with attention (iris refinement), 478 landmarks, bundled in mediapipe " + out["mediapipe"]
    return out


#: gaze precision tiers of the verdict: (tier, largest noise in deg - the clip's RMS-S2S over 33 ms steps,
#: ``noise_rms_s2s_33ms_deg``, which at 30 fps is its RMS-S2S and at other rates compares with it -, smallest
#: median iris diameter in px, the features that can be trusted there). Measured at 30 fps on the rendered grid (bench/bench_gaze_grid.py, README
#: "Gaze precision"; 2026-12-04, commit 66a999a, seed 0, default settings): at 1.5 deg and irises of 12 px or
#: more (9 of 13 cells, noise 0.51-1.28 deg) the default detector's fixations agree with two expert coders at
#: sample kappa 0.12-0.40 (the detector on the noise-free truth at 30 Hz: 0.54-0.63; kappa 0.5 needs about
#: 0.7 deg RMS-S2S, docs/notes/lund-30hz-limits.md); in the coarse tier (4 cells: 8.5 px at 1.36 deg, 12-25 px
#: at 1.74-2.18 deg) it is 0.17-0.41, no lower: it varies more from clip to clip than with the noise, while gaze
#: r against the truth stays 0.32-0.995 (0.87-0.995 at CRF 28 or better), so direction shifts averaged over
#: seconds survive but fixation counts and durations do not.
PRECISION_TIERS = (
    ("events", 1.5, 12.0, ["fixation count and durations", "saccades", "where the gaze rests (dwell)",
                           "blink rate", "head movement", "data quality"]),
    ("coarse", 3.0, 8.0, ["gaze direction averaged over a second or more (e.g. looking down vs ahead)",
                          "blink rate", "head movement", "data quality"]),
    ("minimal", float("inf"), 0.0, ["blink rate", "face presence", "head movement", "data quality"]),
)


#: Each tier in a few words for tables people read (the app's quality summary); run.json keeps the tier's name
TIER_WORDS = {"events": "fixations and saccades", "coarse": "coarse gaze direction",
              "minimal": "blinks and head movement only"}


#: The SD limit of each tier, per degree of its RMS-S2S limit. The tiers were set on the RMS-S2S alone; a clip is
#: now in a tier only if its SD of samples about their fixation's mean (``noise_sd_deg``) is within the tier's
#: limit too. For white noise of per-axis SD ``s`` the RMS-S2S is ``2 s`` and that SD ``sqrt(2) s``
#: (:data:`aspectus.events.detect.noise.SD_PER_RMS_S2S_WHITE`), so a limit of ``L / sqrt(2)`` on the SD is met
#: exactly where ``L`` on the RMS-S2S is: unfiltered white noise gets the tier it got from the RMS-S2S alone (1.5 ->
#: 1.06 deg, 3.0 -> 2.12 deg). A filter (a smoother of the gaze, or of the iris positions it is read from) lowers the
#: RMS-S2S far more than the SD, and an error that wanders slowly reads a higher SD than its RMS-S2S / sqrt(2); there
#: the SD decides, so smoothing alone cannot earn a better tier.
TIER_SD_PER_NOISE = SD_PER_RMS_S2S_WHITE


def tier_sd_limit_deg(max_noise_deg: float) -> float:
    """The largest ``noise_sd_deg`` of the tier whose largest RMS-S2S is ``max_noise_deg`` (:data:`TIER_SD_PER_NOISE`)."""
    return float(max_noise_deg) * TIER_SD_PER_NOISE


def precision_tier(noise_deg, iris_px, noise_sd_deg) -> tuple[str, list[str]]:
    """Which features a clip's gaze supports, from its own noise (deg; the RMS-S2S over 33 ms steps,
    ``noise_rms_s2s_33ms_deg``, so that a tier means the same at any frame rate), its SD of samples about their
    fixation's mean (deg, ``noise_sd_deg``) and median iris diameter (px).

    A tier needs both figures within its limits (the SD's: :func:`tier_sd_limit_deg`). NaN noise, SD or iris size
    (too few valid samples, no fixation, no face) gives the lowest tier.
    """
    def _num(v):
        return float(v) if v is not None else float("nan")

    noise, sd, iris = _num(noise_deg), _num(noise_sd_deg), _num(iris_px)
    for tier, max_noise, min_iris, features in PRECISION_TIERS:
        if (np.isfinite(noise) and np.isfinite(sd) and np.isfinite(iris) and noise <= max_noise
                and sd <= tier_sd_limit_deg(max_noise) and iris >= min_iris):
            return tier, list(features)
    return PRECISION_TIERS[-1][0], list(PRECISION_TIERS[-1][3])


def very_noisy_deg() -> float:
    """The noise (deg, RMS-S2S over 33 ms steps) above which the verdict calls a clip not usable, as it does a clip
    whose SD within fixations is above :func:`tier_sd_limit_deg` of it: the coarse tier's limit
    (:data:`PRECISION_TIERS`)."""
    return float(next(t[1] for t in PRECISION_TIERS if t[0] == "coarse"))


def tier_needs(tier: str) -> str:
    """What ``tier`` needs of a clip, in plain words with the limits of :data:`PRECISION_TIERS` (for help texts):
    e.g. "a noise of at most 1.5 deg between samples 33 ms apart, an SD within fixations of at most 1.06 deg and irises
    at least 12 px across"."""
    _, max_noise, min_iris, _ = next(t for t in PRECISION_TIERS if t[0] == tier)
    return (f"a noise of at most {max_noise:g} deg between samples 33 ms apart, an SD within fixations of at most "
            f"{tier_sd_limit_deg(max_noise):.2f} deg and irises at least {min_iris:g} px across")


def precision_limits_text() -> str:
    """The precision tiers' limits in one sentence for help texts (the guide, the quality panel's tooltips)."""
    return ("Fixation counts and durations need " + tier_needs("events") + "; gaze direction averaged over a "
            "second or more needs " + tier_needs("coarse") + ".")


def _tier_shortfall(summary: dict, tier: str) -> list[str]:
    """In plain words, which of the clip's figures miss ``tier``'s limits (:data:`PRECISION_TIERS`,
    :func:`tier_sd_limit_deg`): what the verdict gives as the reason a better tier was not reached."""
    _, max_noise, min_iris, _ = next(t for t in PRECISION_TIERS if t[0] == tier)
    noise, sd, iris = (summary.get(k) for k in ("noise_rms_s2s_33ms_deg", "noise_sd_deg", "median_iris_px"))
    sd_limit = tier_sd_limit_deg(max_noise)
    out = []
    noise_ok, sd_ok = (v is not None and np.isfinite(v) for v in (noise, sd))
    if not (noise_ok or sd_ok):
        out.append("the gaze noise could not be measured (too few steady stretches of usable gaze)")
    else:
        if not noise_ok:
            out.append("the gaze's noise between samples 33 ms apart could not be measured (too few steady stretches of "
                       "usable gaze)")
        elif noise > max_noise:
            out.append(f"the gaze moves {noise:.2f} deg between samples 33 ms apart (RMS-S2S; at most "
                       f"{max_noise:g} deg needed)")
        if not sd_ok:
            out.append("the gaze's spread within fixations could not be measured (no fixation holds two usable "
                       "samples)")
        elif sd > sd_limit:
            out.append(f"the samples spread {sd:.2f} deg about each fixation's centre (SD; at most {sd_limit:.2f} deg "
                       "needed)")
    if _low_iris_contrast(summary):
        out.append(_low_contrast_text(summary) if _pupil_located(summary) else
                   "the iris could not be located (too little contrast against the whites of the eyes)")
    if iris is None or not np.isfinite(iris):
        out.append("no iris was measured")
    elif iris < min_iris:
        shown = f"{iris:.0f}" if round(iris) < min_iris else f"{iris:.1f}"
        out.append(f"irises about {shown} px across (at least {min_iris:g} px needed; the face is small in the "
                   "picture)")
    return out


#: The clip's own noise figure (``noise_rms_s2s_33ms_deg``) as a share of the true error's RMS-S2S within the expert
#: coders' fixations: the median over the rendered grid's 108 draws with dark irises at 30 fps (``bench/bench_gaze_grid.py
#: --seed N`` for N = 0-5, 2026-12-05; range 0.34-1.03). The figure counts only the steps inside the fixations the
#: detector found, and the steps it leaves out carry the larger errors (docs/notes/gaze-measurement.md, "What the clip's
#: own noise figure leaves out"). A clip whose figures lie within this share of its tier's limits may well be beyond them.
NOISE_FIGURE_SHARE = 0.86


def near_tier_limit(summary: dict) -> bool:
    """Whether a clip in the ``events`` or ``coarse`` tier has its noise or SD above :data:`NOISE_FIGURE_SHARE` of that
    tier's limit: its true error may exceed the limit although its own figures meet it."""
    tier = summary.get("precision_tier")
    if tier not in (PRECISION_TIERS[0][0], PRECISION_TIERS[1][0]):
        return False
    limit = next(t[1] for t in PRECISION_TIERS if t[0] == tier)
    noise, sd = summary.get("noise_rms_s2s_33ms_deg"), summary.get("noise_sd_deg")
    return bool((noise is not None and np.isfinite(noise) and noise > NOISE_FIGURE_SHARE * limit)
                or (sd is not None and np.isfinite(sd) and sd > NOISE_FIGURE_SHARE * tier_sd_limit_deg(limit)))


def _near_limit_sentence(summary: dict) -> str:
    """The verdict's caution for a clip near its tier's limits (:func:`near_tier_limit`); '' otherwise."""
    if not near_tier_limit(summary):
        return ""
    events = summary["precision_tier"] == PRECISION_TIERS[0][0]
    limit, what = (("fixation measures", "fixation counts and durations") if events
                   else ("gaze direction", "the gaze direction"))
    return (f" Its precision is close to the limit for {limit}, and on rendered clips a clip's own noise figure read "
            f"a median {NOISE_FIGURE_SHARE:.2f} of the true error, so treat {what} with care.")


def _trust_sentence(summary: dict) -> str:
    """Which features the clip's precision tier supports, and why not more, in a sentence a reader without the
    measures' definitions can follow (the figures' limits: :data:`PRECISION_TIERS`)."""
    tier, features = summary["precision_tier"], summary["trusted_features"]
    iris = summary.get("median_iris_px")
    size = f"irises about {iris:.0f} px across" if iris is not None and np.isfinite(iris) else "iris size unknown"
    if tier == "events":
        rate = summary.get("frame_rate_hz")
        at = f"at {rate:.0f} frames a second" if rate is not None and np.isfinite(rate) else "at webcam frame rates"
        return (f" Gaze precision ({size}) supports fixation and saccade measures ({at} their "
                "counts and durations are approximate)." + _near_limit_sentence(summary))
    better, what = (("events", "fixation counts and durations") if tier == "coarse"
                    else ("coarse", "fixation measures, and even for gaze direction averaged over seconds"))
    lead = ("Not trusted for" if tier == "coarse" and _low_iris_contrast(summary) and _pupil_located(summary)
            else "Gaze precision is too low for")
    return (f" {lead} {what}: " + "; ".join(_tier_shortfall(summary, better))
            + ". Trust only: " + "; ".join(features) + "." + _near_limit_sentence(summary))


#: What the pupil location gave on the rendered grid (``bench/bench_gaze_grid.py``, the light and hazel iris cells,
#: error against the renderer's truth, RMS-S2S; docs/notes/gaze-measurement.md, "Irises of middling contrast"): the
#: reason a clip located by its pupils is held at the ``coarse`` tier whatever its own noise reads.
PUPIL_MEASURED_TEXT = ("light irises 1.1-1.2 deg sample to sample at 16.6 px but 2.5-3.2 deg at 12 px, more than "
                       "their own noise figures showed")


def usable_word(summary: dict) -> str:
    """The verdict in one word, for lists of clips: "yes" (usable, and precise enough for fixation and saccade
    measures), "partly" (usable, but its precision tier supports only the coarser features its verdict names),
    "no" (not usable), "" (no verdict yet). A summary without a precision tier (from before tiers) reads "yes"
    when usable."""
    usable = summary.get("usable")
    if usable is None:
        return ""
    if not usable:
        return "no"
    return "yes" if summary.get("precision_tier") in (None, PRECISION_TIERS[0][0]) else "partly"


def _low_iris_contrast(summary: dict) -> bool:
    """Whether the clip's irises stand out too little from the whites of the eyes for the limbus fit
    (``iris_contrast_pct`` below :data:`MIN_IRIS_CONTRAST_PCT`; unknown is not low)."""
    v = summary.get("iris_contrast_pct")
    return v is not None and bool(np.isfinite(v)) and v < MIN_IRIS_CONTRAST_PCT


def _pupil_located(summary: dict) -> bool:
    """Whether a low-contrast clip's eyes were located by their pupils (``pupil_located_frac`` above 0)."""
    return (summary.get("pupil_located_frac") or 0) > 0


def _low_contrast_text(summary: dict) -> str:
    """Why the iris edge was not used, and what took its place: the reason a low-contrast clip is not usable, or
    (located by the pupils) the note that caps its tier at ``coarse``."""
    why = (f"the irises show too little contrast against the whites of the eyes for their edge to be found (they "
           f"are {summary['iris_contrast_pct']:.0f} % darker than the whites; at least {MIN_IRIS_CONTRAST_PCT:g} % "
           "needed): light irises, dim light or overexposure - ")
    if _pupil_located(summary):
        return (why + "the eyes were located by their pupils instead, which has been measured on rendered clips only "
                f"({PUPIL_MEASURED_TEXT}), so at most gaze direction averaged over seconds is trusted")
    return why + "the gaze follows other edges and its direction is not measured"


def _verdict(summary: dict) -> tuple[bool, str]:
    ff, vf, noise = summary["face_found_frac"], summary["valid_frac"], summary.get("noise_rms_s2s_33ms_deg")
    sd = summary.get("noise_sd_deg")
    sd_ok = sd is not None and np.isfinite(sd)
    reasons = []
    n, dur = int(summary.get("frames") or 0), float(summary.get("duration_s") or 0.0)
    if n > 1:
        dur += dur / (n - 1)  # first to last frame, plus the last frame's own interval: the length recorded
    if n < MIN_USABLE_FRAMES or dur < MIN_USABLE_DURATION_S - 1e-9:
        reasons.append(f"the clip is too short to measure ({n} frame(s) over {dur:.2f} s; fixations and noise need "
                       f"at least {MIN_USABLE_FRAMES} frames over {MIN_USABLE_DURATION_S:g} s) - it may be a still "
                       "picture or a cut-off recording")
    if ff < 0.8:
        reasons.append(f"the face was tracked in only {ff:.0%} of frames (the student may have left the picture or the room is too dark)")
    if vf < 0.6:
        reasons.append(f"usable gaze in only {vf:.0%} of the recorded time (blinks, closed eyes, turned head, no "
                       "face, or frames missing from the recording)")
    limit = very_noisy_deg()
    noise_ok = noise is not None and np.isfinite(noise)
    if noise_ok and noise > limit:
        reasons.append(f"the gaze signal is very noisy ({noise:.1f} deg sample to sample over 33 ms steps)")
    elif sd_ok and sd > tier_sd_limit_deg(limit):
        why = (f", although its sample-to-sample noise reads {noise:.1f} deg: an error that changes slowly, or a "
               "filtered signal" if noise_ok else "")
        reasons.append(f"the gaze signal is very noisy (it wanders {sd:.1f} deg (SD) about each fixation's mean, "
                       f"above {tier_sd_limit_deg(limit):.2f} deg{why})")
    if _low_iris_contrast(summary) and not _pupil_located(summary):
        reasons.append(_low_contrast_text(summary))
    if reasons:
        return False, "Not usable: " + "; ".join(reasons) + "."
    noise_text = (f"noise {noise:.2f} deg sample to sample (over 33 ms steps)" if noise is not None and np.isfinite(noise)
                  else "noise not measurable (too few consecutive valid samples)")
    if sd_ok:
        noise_text += f", SD {sd:.2f} deg within fixations"
    return True, f"Usable: face tracked in {ff:.0%} of frames, {vf:.0%} usable gaze, {noise_text}."


def short_learning_sentence(iris_estimate: dict, precision_tier: str) -> str:
    """The verdict's advice for a clip too short for the appearance estimate to learn well from (run.json's
    ``iris_estimate.learnt_from_s`` below :data:`~aspectus.webcam.gaze.WELL_LEARNT_S`) whose precision
    falls short of the finest tier: a whole recording may measure better. '' otherwise.

    >>> short_learning_sentence({"used": "appearance", "learnt_from_s": 60.0}, "coarse")
    ''
    >>> short_learning_sentence({"used": "appearance", "learnt_from_s": 9.5}, "events")
    ''
    >>> short_learning_sentence({"used": "appearance", "learnt_from_s": 9.5}, "coarse")[:60]
    ' The iris height was learnt from only 9.5 s of open eyes: on'
    """
    learnt = learnt_briefly_s(iris_estimate)
    if learnt is None or precision_tier == PRECISION_TIERS[0][0]:
        return ""
    return f" The iris height was learnt from only {learnt:g} s of open eyes: {SHORT_CLIP_ADVICE}"


def summarise(samples: pd.DataFrame, analysis, meta: dict) -> dict:
    n = len(samples)
    ev = analysis.events
    q = dict(analysis.quality or {})
    s = {
        "frames": int(n),
        "duration_s": float(samples["t_s"].iloc[-1]) if n else 0.0,
        "face_found_frac": float(samples["face_found"].mean()) if n else 0.0,
        "multi_face_frac": float((samples["face_count"] > 1).mean()) if n else 0.0,
        # of the recorded time, from the analysis: holes in the time axis (dropped frames, a paused
        # recording) count as not valid
        "valid_frac": float(q["valid_frac"]) if n and np.isfinite(q.get("valid_frac", np.nan))
        else (float(samples["valid"].mean()) if n else 0.0),
        "blink_count": int((ev["type"] == "blink").sum()) if len(ev) else 0,
        "fixation_count": int((ev["type"] == "fixation").sum()) if len(ev) else 0,
        "median_distance_mm": float(np.nanmedian(samples["distance_mm"])) if samples["face_found"].any() else float("nan"),
        "noise_rms_s2s_deg": float(q.get("noise_rms_s2s_deg", np.nan)),
        "noise_rms_s2s_33ms_deg": float(q.get("noise_rms_s2s_33ms_deg", np.nan)),
        "noise_sd_deg": float(q.get("noise_sd_deg", np.nan)),
        "decode_problems": {k: v for k, v in meta.get("decode", {}).items() if k != "frames" and v},
    }
    steps = np.diff(samples["t_s"].to_numpy(float)) if n > 1 else np.array([])
    steps = steps[np.isfinite(steps) & (steps > 0)]
    s["frame_rate_hz"] = float(1.0 / np.median(steps)) if len(steps) else float("nan")
    iris = samples["iris_diameter_px"].to_numpy(float) if "iris_diameter_px" in samples else np.full(n, np.nan)
    s["median_iris_px"] = float(np.nanmedian(iris)) if np.isfinite(iris).any() else float("nan")
    s["precision_tier"], s["trusted_features"] = precision_tier(s["noise_rms_s2s_33ms_deg"], s["median_iris_px"],
                                                                s["noise_sd_deg"])
    ic = meta.get("iris_contrast") or {}
    s["iris_contrast_pct"] = float(ic["clip_pct"]) if ic.get("clip_pct") is not None else float("nan")
    eye_frames = sum(ic.get("frames") or [0])
    s["pupil_located_frac"] = (float(ic["pupil_eye_frames"]) / eye_frames
                               if ic.get("pupil_eye_frames") is not None and eye_frames else 0.0)
    if _low_iris_contrast(s):
        if not _pupil_located(s):  # the iris was not located: no gaze feature can be trusted, however steady
            s["precision_tier"], s["trusted_features"] = PRECISION_TIERS[-1][0], list(PRECISION_TIERS[-1][3])
        elif s["precision_tier"] == PRECISION_TIERS[0][0]:  # located by the pupils: coarse at best
            s["precision_tier"], s["trusted_features"] = PRECISION_TIERS[1][0], list(PRECISION_TIERS[1][3])
    s["precision_near_limit"] = near_tier_limit(s)
    s["usable"], s["verdict"] = _verdict(s)
    if usable_word(s) == "partly":  # usable, but not for fixation measures: the verdict's first word says so
        s["verdict"] = "Partly usable:" + s["verdict"].removeprefix("Usable:")
    s["verdict"] += _trust_sentence(s)
    est = (meta.get("gaze_model") or {}).get("iris_estimate") or {}
    if est.get("setting") == "auto" and est.get("used") == "limbus":  # the default's fallback, said in words
        s["verdict"] += (" The iris height was read from a circle fitted to the iris edge, noisier up and down than "
                         "the eyes' own appearance, which could not be learnt on this clip (run.json records why).")
    s["verdict"] += short_learning_sentence(est, s["precision_tier"])
    dp = s["decode_problems"]
    if dp.get("stopped_early"):
        s["verdict"] += f" Note: the file is damaged - {dp['stopped_early']}; only the part before that was analysed."
    elif dp.get("corrupt_packets"):
        s["verdict"] += f" Note: {dp['corrupt_packets']} damaged packet(s) in the file were skipped."
    rep = int(dp.get("repeated_pictures") or 0)
    if rep:
        s["verdict"] += (f" Note: {rep} frame(s) ({rep / max(n, 1):.1%}) repeat the picture before them pixel for pixel:"
                         " the camera delivered no new picture and the recording repeated its last; those samples "
                         "count as missing (short gaps are bridged).")
    bad_times = int(dp.get("pts_missing") or 0) + int(dp.get("pts_non_increasing") or 0)
    if bad_times:
        s["verdict"] += (f" Note: {bad_times} frame(s) had a missing or out-of-order timestamp; they were placed "
                         "just after the frame before (run.json, decode), so intervals there are not measured ones.")
    ft = meta.get("face_tracking") or {}
    others, again = int(ft.get("other_faces_only_frames") or 0), list(ft.get("reacquired_at_frames") or [])
    if s["multi_face_frac"] > 0.05 or others or again:
        s["verdict"] += f" Several faces were in view in {s['multi_face_frac']:.0%} of frames"
        if again:
            s["verdict"] += (f"; the followed face was lost and a face was taken up again at frame(s) "
                             f"{', '.join(str(f) for f in again[:5])}{' ...' if len(again) > 5 else ''}: "
                             "check that it is the same person (--face chooses one).")
        else:
            s["verdict"] += "; one face was followed throughout (the largest, or the one chosen with --face)."
        if others:
            s["verdict"] += (f" In {others} frame(s) the followed face was not found while other faces were in "
                             "view; those frames are marked invalid rather than measured on another face.")
    s["other_faces_only_frames"] = others
    s["face_reacquisitions"] = len(again)
    return s


def _segments_frame(segments):
    if segments is None:
        return None
    if isinstance(segments, pd.DataFrame):
        return segments
    from aspectus.events.analysis import read_segments

    return read_segments(segments)


_run_json_path = run_json_path


#: the files :func:`process_clip` writes into a clip's output folder (the staged swap replaces these)
CLIP_OUTPUT_FILES = ("samples.parquet", "samples.csv", "events.csv", "events.parquet", "features.csv",
                     "features.parquet", "run.json")

#: folder inside a clip's output folder where a new result is built before it replaces the old one
STAGING_DIR = ".next"


def _fsync_dir(d: Path) -> None:
    try:
        fd = os.open(d, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def _finish_swap(out_dir: Path) -> None:
    """Move a complete staged result (its run.json is in the staging folder) over the old one; run.json last.

    The old run.json goes first: while the files are moved one by one, no
    run.json in ``out_dir`` vouches for a mix of old and new files. A kill in
    between leaves the folder without run.json and the staging folder with
    the new one, which :func:`recover_output_dir` finishes installing.
    """
    st = out_dir / STAGING_DIR
    _run_json_path(out_dir).unlink(missing_ok=True)
    _fsync_dir(out_dir)
    for p in sorted(st.iterdir()):
        if p.name != "run.json" and p.is_file() and not p.name.startswith("."):
            os.replace(p, out_dir / p.name)
    os.replace(st / "run.json", _run_json_path(out_dir))
    _fsync_dir(out_dir)
    shutil.rmtree(st, ignore_errors=True)


def recover_output_dir(out_dir) -> str | None:
    """Bring a clip folder left by a killed run back to one complete result; say what was done.

    A new result is built in ``STAGING_DIR`` beside the old one and its
    run.json is written there last; only then are the files moved over the old
    ones (run.json last). So after a kill either the staging folder lacks
    run.json (the new result was incomplete: it is discarded and the old
    result stands) or it has one (the new result was complete: the move is
    finished). Temporary ``.part`` files of killed writes are removed. Call it
    only from the one process writing into ``out_dir``.
    """
    from aspectus.atomic import remove_stale_parts

    out_dir = Path(out_dir)
    if not out_dir.is_dir():
        return None
    what = None
    st = out_dir / STAGING_DIR
    if st.is_dir() and not st.is_symlink():
        if (st / "run.json").is_file():
            _finish_swap(out_dir)
            what = "finished installing a complete result a killed run had built"
        else:
            shutil.rmtree(st, ignore_errors=True)
            what = "discarded the incomplete result of a killed run; the earlier result stands"
    if remove_stale_parts(out_dir):
        what = (what + "; " if what else "") + "removed temporary files of killed writes"
    return what


class _Staged:
    """Context: a staging folder to build the new result in; on success it replaces the old result.

    On any failure (a full disk, an error, an interrupt) the staging folder is
    removed and the earlier result in ``out_dir`` is untouched.
    """

    def __init__(self, out_dir: Path):
        self.out_dir = Path(out_dir)
        self.path = self.out_dir / STAGING_DIR

    def __enter__(self) -> Path:
        self.out_dir.mkdir(parents=True, exist_ok=True)
        shutil.rmtree(self.path, ignore_errors=True)
        self.path.mkdir()
        return self.path

    def commit(self, run: dict) -> None:
        write_json(self.path / "run.json", run)
        _fsync_dir(self.path)
        _finish_swap(self.out_dir)

    def __exit__(self, et, ev, tb):
        if et is not None and not (self.path / "run.json").is_file():
            shutil.rmtree(self.path, ignore_errors=True)
        return False


class CacheError(AspectusInputError):
    """A cached samples table is missing, unreadable or fails its checksum."""


def load_samples(out_dir, *, verify: bool = True) -> pd.DataFrame:
    """Read a clip's cached samples table, checking it against run.json's checksum.

    Examples
    --------
    >>> samples = load_samples(batch_folder / "linden_brook_p01_s01")
    >>> samples[["t_s", "valid", "yaw_deg", "pitch_deg"]].head(3).round(3)
         t_s  valid  yaw_deg  pitch_deg
    0  0.000   True    0.017     -0.070
    1  0.033   True    0.041     -0.011
    2  0.067   True    0.017     -0.044
    """
    out_dir = Path(out_dir)
    p = out_dir / "samples.parquet"
    if not p.exists():
        problem, hint = missing_output(out_dir, "samples.parquet")  # purged, never processed, or lost
        raise CacheError(problem, path=out_dir, hint=hint)
    run = read_run_json(out_dir)
    if verify and run is not None:
        want = (run.get("outputs") or {}).get("samples.parquet", {}).get("sha256")
        if want and sha256_file(p) != want:
            raise CacheError("samples.parquet does not match the checksum in run.json (damaged or edited)",
                             path=p, hint="process the clip again to rebuild it")
    try:
        return pd.read_parquet(p)
    except Exception as exc:  # noqa: BLE001 - pyarrow raises many kinds
        first = (str(exc).strip().splitlines() or [type(exc).__name__])[0]
        raise CacheError(f"samples.parquet cannot be read ({first})", path=p,
                         hint="process the clip again to rebuild it") from None


def _write_outputs(out_dir: Path, samples: pd.DataFrame, analysis, run: dict) -> dict:
    from aspectus.events.analysis import write_analysis

    out_dir.mkdir(parents=True, exist_ok=True)
    outputs = {}
    write_parquet(out_dir / "samples.parquet", samples, metadata={"input_sha256": run["input_sha256"]})
    write_csv(out_dir / "samples.csv", samples)
    written = write_analysis(analysis, out_dir, meta=run)
    names = ["samples.parquet", "samples.csv"] + [Path(p).name for p in written.values()]
    for name in names:
        fp = out_dir / name
        if fp.exists():
            outputs[name] = {"sha256": sha256_file(fp), "bytes": fp.stat().st_size}
    return outputs


def _paths_recorded(meta: dict, clip: Path, out_dir: Path, full_paths) -> dict:
    """The extraction record with the clip's path relative to ``out_dir`` (absolute only on request)."""
    meta = dict(meta or {})
    video = dict(meta.get("video") or {})
    if "path" in video:
        video["path"] = recorded_path(clip, out_dir)
        if full_paths_wanted(full_paths):
            video["path_resolved"] = str(clip.resolve())
        else:
            video.pop("path_resolved", None)
        meta["video"] = video
    return meta


def _read_or_fail(clip: Path, read):
    """``read()``, with an I/O error turned into a :class:`VideoError` that names the clip."""
    try:
        return read()
    except OSError as exc:
        from aspectus.errors import VideoError

        raise VideoError(f"cannot be read ({exc.strerror or exc})", path=clip,
                         hint="check the disk or network share it is on, or copy the file again") from None


def _clip_sha256(clip: Path) -> str:
    return _read_or_fail(clip, lambda: sha256_file(clip))


def _clip_reader(clip: Path):
    """The clip opened for decoding and hashing in one pass (:class:`aspectus.atomic.HashingReader`)."""
    from aspectus.atomic import HashingReader

    return _read_or_fail(clip, lambda: HashingReader(clip))


def process_clip(clip_path, out_dir, *, params: ProcessParams | None = None, segments=None,
                 progress: ProgressFn | None = None, cancel=None, reuse: bool = True,
                 full_paths: bool | None = None, stages: str | None = None) -> ClipResult:
    """Process one clip into ``out_dir`` (see the module docstring for the files).

    Parameters
    ----------
    clip_path : path-like
        The recorded clip (any container FFmpeg reads).
    out_dir : path-like
        The clip's output folder (created).
    params : ProcessParams
    segments : path-like or DataFrame, optional
        Task segments (label, onset_s, offset_s) for per-segment features.
    progress : callable(fraction, message), optional
    cancel : object with ``is_set()``, optional
        Raises :class:`~aspectus.errors.Cancelled` when set; outputs already
        complete are never touched.
    reuse : bool
        When ``out_dir`` already holds samples made from the same input file
        with the same landmarking parameters (and its checksum holds), skip
        landmarking and only re-run detection and features.
    full_paths : bool, optional
        Also record the clip's absolute path in run.json (``clip_resolved``).
        Default: no (``ASPECTUS_FULL_PATHS=1`` turns it on); run.json always
        holds the path relative to ``out_dir`` and the clip's SHA-256.
    stages : {"overlapped", "serial"}, optional
        How decoding, the face mesh and the geometry share the CPU (see
        :data:`STAGES`; default from the ``ASPECTUS_STAGES`` environment
        variable, else overlapped). The outputs are the same either way.

    Raises
    ------
    VideoError, NoFaceError, AspectusInputError

    Examples
    --------
    Process the shorter demo clip (12 s; about ten seconds on a laptop CPU):

    >>> res = process_clip(sample_clips / "linden_brook_p02_s01.mp4", tmp / "p02")
    >>> res.summary["usable"], res.summary["frames"]
    (True, 360)
    >>> sorted(p.name for p in (tmp / "p02").glob("*.*"))
    ['events.csv', 'events.parquet', 'features.csv', 'features.parquet', 'run.json', 'samples.csv', 'samples.parquet']
    >>> res.samples[["t_s", "valid", "yaw_deg", "pitch_deg"]].shape
    (360, 4)
    """
    from aspectus.events.analysis import run_analysis

    params = params or ProcessParams()
    clip = Path(clip_path)
    out_dir = Path(out_dir)
    progress = progress or (lambda f, m: None)
    progress(0.0, f"{clip.name}: reading")
    if not clip.exists():
        from aspectus.errors import VideoError

        raise VideoError("file not found", path=clip)
    if clip.is_dir():
        from aspectus.errors import VideoError

        raise VideoError("is a folder, not a video file", path=clip, hint="give the clip file inside it")
    if not clip.is_file():  # a FIFO named .mp4 would block the hash (and every clip after it) for good
        from aspectus.errors import VideoError

        raise VideoError("is not a regular file (a pipe, socket or device)", path=clip,
                         hint="give the recorded clip file itself")
    seg_df = _segments_frame(segments)
    extraction_sha = params_fingerprint(params.extraction_dict())
    samples = None
    meta = None
    reused = False
    input_sha = None
    recover_output_dir(out_dir)  # a run killed earlier: finish or discard its half-installed result
    refuse_foreign_files(out_dir, CLIP_OUTPUT_FILES)  # never over a user's own files (checked before the work)
    prev = read_run_json(out_dir) if reuse else None
    if prev and prev.get("extraction_sha256") == extraction_sha:  # the samples may be reusable: the hash decides
        input_sha = _clip_sha256(clip)
        if prev.get("input_sha256") == input_sha:
            try:
                samples = load_samples(out_dir)
                meta = prev.get("extraction") or {}
                reused = True
            except CacheError:
                samples = None  # damaged cache: rebuild it
    if samples is None:
        # otherwise the clip is hashed as it is decoded: one read of the file, not two
        reader = _clip_reader(clip) if input_sha is None else None
        try:
            samples, meta = extract_samples(clip, params=params, progress=lambda f, m: progress(0.95 * f, m),
                                            cancel=cancel, stages=stages, source=reader)
            if reader is not None:
                input_sha = _read_or_fail(clip, reader.hexdigest)
        finally:
            if reader is not None:
                reader.close()
    if not samples["face_found"].any():
        raise NoFaceError(f"no face found in any of its {len(samples)} frames", path=clip,
                          hint="check that the student's face is in the picture and lit")
    if cancel is not None and cancel.is_set():
        raise Cancelled(f"cancelled before writing {clip.name}")
    progress(0.96, f"{clip.name}: detecting events")
    analysis = run_analysis(samples, params.analysis, segments=seg_df, source=clip.name)
    summary = summarise(samples, analysis, meta)
    meta = _paths_recorded(meta, clip, out_dir, full_paths)
    run = {
        "aspectus": __version__,
        "created_utc": _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds"),
        "clip": recorded_path(clip, out_dir),  # relative to this folder: no user or student names from the path
        "clip_name": clip.name,
        "input_sha256": input_sha,
        "input_bytes": clip.stat().st_size,
        "params": params.to_dict(),
        "params_sha256": params.fingerprint(),
        "extraction_sha256": extraction_sha,
        "segments": recorded_path(segments, out_dir) if segments is not None
        and not isinstance(segments, pd.DataFrame) else None,
        "software": software_versions(),
        "extraction": meta,
        "quality": summary,
        "analysis_quality": analysis.quality,
        "columns": {c.name: {"unit": c.unit, "doc": c.doc} for c in SAMPLE_COLUMNS},
        "event_columns": column_table(EVENT_COLUMNS),
        "feature_columns": column_table(FEATURE_COLUMNS),
    }
    if full_paths_wanted(full_paths):  # only on request: absolute paths name users and often students
        run["clip_resolved"] = str(clip.resolve())
        if run["segments"] is not None:
            run["segments_resolved"] = str(Path(segments).resolve())
    if cancel is not None and cancel.is_set():
        raise Cancelled(f"cancelled before writing {clip.name}")
    progress(0.98, f"{clip.name}: writing")
    staged = _Staged(out_dir)
    with staged as stage:  # the new result is built beside the old one, which stays valid until the swap
        if reused:
            from aspectus.events.analysis import write_analysis

            written = write_analysis(analysis, stage, meta=run)
            outputs = dict(prev.get("outputs") or {})
            csv = out_dir / "samples.csv"
            want = (outputs.get("samples.csv") or {}).get("sha256")
            if not csv.exists() or (want and sha256_file(csv) != want):  # deleted or edited: write it again
                written = dict(written) | {"samples_csv": write_csv(stage / "samples.csv", samples)}
            for p in written.values():
                fp = Path(p)
                outputs[fp.name] = {"sha256": sha256_file(fp), "bytes": fp.stat().st_size}
        else:
            outputs = _write_outputs(stage, samples, analysis, run)
        run["outputs"] = outputs
        if cancel is not None and cancel.is_set():
            raise Cancelled(f"cancelled before writing {clip.name}")
        staged.commit(run)
    progress(1.0, f"{clip.name}: done")
    return ClipResult(clip=clip, out_dir=out_dir, samples=samples, analysis=analysis, summary=summary, reused_samples=reused)


def reanalyse(out_dir, analysis_params, *, segments=None, write: bool = True):
    """Re-run clean-up, detection and features on a clip's cached samples.

    No landmarking: this takes well under a second for a 10-minute clip. With
    ``write`` the clip's events/features files and run.json are updated
    (atomically).

    Examples
    --------
    Run another detector on a processed clip's samples, without landmarking again
    (``batch_folder`` holds clip results):

    >>> from aspectus.events.analysis import AnalysisParams
    >>> res = reanalyse(batch_folder / "linden_brook_p01_s01", AnalysisParams(detector="ivt"), write=False)
    >>> sorted(res.events["type"].unique())
    ['blink', 'fixation', 'loss', 'saccade']
    """
    from aspectus.events.analysis import run_analysis, write_analysis

    out_dir = Path(out_dir)
    samples = load_samples(out_dir)
    seg_df = _segments_frame(segments)
    result = run_analysis(samples, analysis_params, segments=seg_df, source="samples.parquet")
    if write:
        run = read_run_json(out_dir) or {}
        params = dict(run.get("params") or {})
        params["analysis"] = analysis_params.to_dict()
        run["params"] = params
        run["params_sha256"] = params_fingerprint(params)
        run["analysis_quality"] = result.quality
        run["quality"] = summarise(samples, result, run.get("extraction") or {})  # counts and verdict follow
        recover_output_dir(out_dir)
        staged = _Staged(out_dir)
        with staged as stage:
            written = write_analysis(result, stage, meta=run)
            outputs = dict(run.get("outputs") or {})
            for p in written.values():
                fp = Path(p)
                outputs[fp.name] = {"sha256": sha256_file(fp), "bytes": fp.stat().st_size}
            run["outputs"] = outputs
            staged.commit(run)
    return result


def clip_output_dir(out_root, clip_path) -> Path:
    """``OUTDIR/<clip file stem>``."""
    return Path(out_root) / Path(clip_path).stem


__all__ = ["ProcessParams", "ClipResult", "process_clip", "reanalyse", "load_samples", "extract_samples",
           "summarise", "clip_output_dir", "CacheError", "read_run_json", "recover_output_dir", "STAGING_DIR"]
