"""Privacy by default: faces blurred in every picture aspectus writes, per-frame data deletable.

Classroom clips show minors. aspectus's exports hold features and gaze
samples, never video frames; the only pictures it writes that can show a face
are previews (screenshots of the app, an overlay frame saved for a report).
Every such picture goes through :func:`save_preview_image`, which blurs the
faces unless the caller turns that off explicitly with ``blur_faces=False``.
When no face position is known and the face detector finds none, the whole
picture is blurred rather than risk showing one.

:func:`plan_purge` and :func:`purge` delete a study's cached per-frame data
(the gaze samples tables and any frame caches) and keep the per-clip events,
features and ``run.json``; ``aspectus purge`` is their command.
"""
from __future__ import annotations

import contextlib
import datetime as _dt
import json
import shutil
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from aspectus.errors import AspectusInputError
from aspectus.webcam.face_boxes import FaceBoxFinder, _grow, find_face_boxes  # noqa: F401 - re-exported

#: file names (in a clip's output folder) that hold one row or one picture per frame
PER_FRAME_FILES = ("samples.parquet", "samples.csv")
#: glob patterns of other per-frame caches and previews a clip folder may hold; deleted only when the
#: folder's run.json lists them (temporary ``.<name>.<random>.part`` files of a killed write of a listed
#: or per-frame name go too: they may hold half a samples table)
PER_FRAME_GLOBS = ("landmarks*.npz", "landmarks*.parquet", "*.frames.npz", "preview*.png", "preview*.jpg")
#: folders of cached frames inside a clip folder
PER_FRAME_DIRS = ("frames", "frame_cache", "previews")


# --------------------------------------------------------------------------------------------
# blurring faces in pictures

def blur_faces(image: np.ndarray, *, boxes=None, landmarks_px=None, detect: bool = True) -> np.ndarray:
    """Return a copy of an RGB picture with every face made unrecognisable.

    Parameters
    ----------
    image : ndarray
        ``(H, W, 3)`` uint8 RGB picture (not changed).
    boxes : list of (x0, y0, x1, y1), optional
        Face boxes in px known to the caller.
    landmarks_px : array, optional
        ``(478, 2+)`` face-mesh landmarks (px) of a tracked face; its box is
        blurred.
    detect : bool, default True
        Also run the face detector and blur whatever it finds.

    Returns
    -------
    ndarray
        The blurred copy. When no face is known or found, the whole picture is
        blurred.
    """
    from aspectus.webcam.overlay import blur_region, face_box_from_landmarks

    img = np.ascontiguousarray(np.asarray(image)[..., :3], dtype=np.uint8)
    found = [tuple(int(v) for v in b) for b in (boxes or [])]
    if landmarks_px is not None:
        box = face_box_from_landmarks(np.asarray(landmarks_px, float)[:, :2], shape=img.shape[:2])
        if box is not None:
            found.append(tuple(int(v) for v in box))
    if detect:
        found += find_face_boxes(img)
    if not found:
        return blur_region(img, None)
    out = img
    for b in found:
        out = blur_region(out, b)
    return out


_blur_faces = blur_faces  # the name save_preview_image's keyword shadows


def save_preview_image(path, image: np.ndarray, *, blur_faces: bool = True, boxes=None, landmarks_px=None) -> Path:
    """Write a picture that may show video frames (PNG or JPEG by extension), faces blurred, atomically.

    Parameters
    ----------
    path : path-like
        ``.png``, ``.jpg`` or ``.jpeg`` file to write.
    image : ndarray
        ``(H, W, 3)`` uint8 RGB picture.
    blur_faces : bool, default True
        Blur every face (see :func:`blur_faces`). Only an explicit ``False``
        writes faces as they are - for a protocol that allows it.
    boxes, landmarks_px
        Face positions the caller already knows (passed to :func:`blur_faces`).

    Returns
    -------
    Path
    """
    from aspectus._env import import_cv2
    from aspectus.atomic import write_bytes

    cv2 = import_cv2()
    path = Path(path)
    ext = path.suffix.lower()
    if ext not in (".png", ".jpg", ".jpeg"):
        raise AspectusInputError(f"cannot write a picture with extension {ext!r}", path=path,
                                hint="use .png or .jpg")
    img = np.ascontiguousarray(np.asarray(image)[..., :3], dtype=np.uint8)
    if blur_faces is not False:
        img = _blur_faces(img, boxes=boxes, landmarks_px=landmarks_px)
    ok, buf = cv2.imencode(ext, cv2.cvtColor(img, cv2.COLOR_RGB2BGR))
    if not ok:
        raise AspectusInputError("the picture could not be encoded", path=path)
    return write_bytes(path, buf.tobytes())


# --------------------------------------------------------------------------------------------
# deleting per-frame data

@dataclass
class PurgePlan:
    """What :func:`purge` would delete.

    Attributes
    ----------
    target : Path
        The folder or study file given.
    clip_dirs : list of Path
        Clip output folders found (each holds a ``run.json`` written by aspectus; a folder that merely
        holds a file called ``samples.csv`` is not one).
    files : list of Path
        Per-frame files to delete.
    dirs : list of Path
        Per-frame cache folders to delete.
    bytes : int
        Their total size.
    """

    target: Path
    clip_dirs: list[Path] = field(default_factory=list)
    files: list[Path] = field(default_factory=list)
    dirs: list[Path] = field(default_factory=list)
    bytes: int = 0


def _our_run_json(d: Path) -> dict | None:
    """The folder's run.json if it is one aspectus wrote (a JSON object with its version, the input's
    hash and an ``outputs`` table), else None: a folder without it is not ours to delete from."""
    rj = d / "run.json"
    if not rj.is_file() or rj.is_symlink():
        return None
    try:
        run = json.loads(rj.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if not (isinstance(run, dict) and isinstance(run.get("outputs"), dict) and "aspectus" in run
            and isinstance(run.get("input_sha256"), str)):
        return None
    return run


def _is_clip_dir(d: Path) -> bool:
    return _our_run_json(d) is not None


def _listed_per_frame(d: Path, run: dict) -> tuple[list[Path], list[Path]]:
    """Per-frame files and folders in clip folder ``d`` that its run.json lists as written by aspectus,
    plus the temporary files aspectus's own writes of those names left (``.<name>.<random>.part``)."""
    import fnmatch

    files, dirs = [], []
    names = [str(n) for n in (run.get("outputs") or {})]
    for name in names:
        if "/" in name.rstrip("/") or "\\" in name or name.startswith("."):
            continue  # only plain names beside run.json
        bare = name.rstrip("/")
        p = d / bare
        if p.is_symlink():
            continue
        per_frame = bare in PER_FRAME_FILES or any(fnmatch.fnmatch(bare, g) for g in PER_FRAME_GLOBS)
        if per_frame and p.is_file():
            files.append(p)
        elif bare in PER_FRAME_DIRS and p.is_dir():
            dirs.append(p)
    for name in set(names) | set(PER_FRAME_FILES):
        files += sorted(p for p in d.glob(f".{name.rstrip('/')}.*.part") if p.is_file() and not p.is_symlink())
    return sorted(set(files)), sorted(set(dirs))


def _output_root(target: Path) -> Path:
    if target.is_file():
        if target.suffix.lower() != ".json":
            raise AspectusInputError("is neither an output folder nor a study file (.json)", path=target,
                                    hint="give the OUTDIR of `aspectus process`/`aspectus batch`, or a study file")
        from aspectus.studies.project import load_study

        return load_study(target).output_root()
    if not target.exists():
        raise AspectusInputError("no such folder or study file", path=target)
    return target


def _dir_bytes(d: Path) -> int:
    return sum(p.stat().st_size for p in d.rglob("*") if p.is_file())


def plan_purge(target, *, max_depth: int = 4) -> PurgePlan:
    """Find the per-frame data under an output folder (or a study file's output folder).

    Parameters
    ----------
    target : path-like
        A clip's output folder, an OUTDIR holding clip folders (nested up to
        ``max_depth`` levels, as ``aspectus batch`` lays them out), or a study
        file (``.json``) whose output folder is searched.
    max_depth : int, default 4
        How deep to look for clip folders below ``target``.

    Returns
    -------
    PurgePlan
    """
    target = Path(target)
    root = _output_root(target)
    plan = PurgePlan(target=target)
    if not root.is_dir():
        return plan
    level = [root]
    for _ in range(max_depth + 1):
        nxt = []
        for d in level:
            if _is_clip_dir(d):
                plan.clip_dirs.append(d)
            with contextlib.suppress(OSError):
                nxt += [c for c in sorted(d.iterdir()) if c.is_dir() and not c.is_symlink()
                        and c.name not in PER_FRAME_DIRS and not c.name.startswith(".")]
        level = nxt
    for d in plan.clip_dirs:  # only what a run.json of aspectus lists: never a file of the user's
        files, dirs = _listed_per_frame(d, _our_run_json(d) or {})
        plan.files += files
        plan.dirs += dirs
    plan.bytes = sum(p.stat().st_size for p in plan.files) + sum(_dir_bytes(d) for d in plan.dirs)
    return plan


def purge(plan: PurgePlan) -> PurgePlan:
    """Delete what ``plan`` lists and note the deletion in each clip's ``run.json``.

    The purged files are removed from ``run.json``'s ``outputs`` (so a finished
    clip still counts as finished for ``aspectus batch``) and listed under
    ``purged`` with the time. Processing the clip again rebuilds them.

    Returns
    -------
    PurgePlan
        What was deleted.
    """
    from aspectus.atomic import write_json

    done = PurgePlan(target=plan.target, clip_dirs=list(plan.clip_dirs))
    for p in plan.files:
        try:
            size = p.stat().st_size
            p.unlink()
        except FileNotFoundError:
            continue
        done.files.append(p)
        done.bytes += size
    for d in plan.dirs:
        size = _dir_bytes(d) if d.is_dir() else 0
        shutil.rmtree(d, ignore_errors=True)
        if not d.exists():
            done.dirs.append(d)
            done.bytes += size
    now = _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds")
    for d in done.clip_dirs:
        gone = [p.name for p in done.files if p.parent == d] + [p.name + "/" for p in done.dirs if p.parent == d]
        rj = d / "run.json"
        if not gone or not rj.is_file():
            continue
        try:
            run = json.loads(rj.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            continue
        if not isinstance(run, dict):
            continue
        outs = run.get("outputs")
        if isinstance(outs, dict):
            run["outputs"] = {k: v for k, v in outs.items() if k not in gone}
        prev = run.get("purged") if isinstance(run.get("purged"), dict) else {}
        run["purged"] = {"utc": now, "files": sorted(set(prev.get("files", [])) | set(gone)),
                         "note": "per-frame data deleted by `aspectus purge`; process the clip again to rebuild it"}
        write_json(rj, run)
    return done


__all__ = ["save_preview_image", "blur_faces", "find_face_boxes", "FaceBoxFinder", "plan_purge", "purge", "PurgePlan",
           "PER_FRAME_FILES", "PER_FRAME_GLOBS", "PER_FRAME_DIRS"]
