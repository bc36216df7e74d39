"""A study: the clips of one project, their reference and segment files, the
parameters, and where each clip's results are.

The study file is plain JSON, written atomically
(:func:`aspectus.atomic.write_json`). JSON rather than SQLite because a study
is small (tens to hundreds of clips), researchers keep it under version
control or send it to a colleague, and a diff of two versions should read like
the change that was made. Every path inside is stored relative to the study
file (with forward slashes), so a study folder can be moved or copied to
another machine and still open. The results themselves are the per-clip output
folders (``<output_dir>/<clip file stem>/``) that :func:`aspectus.webcam.pipeline.process_clip`
writes; the study records only each clip's status and summary figures, and
:meth:`Study.refresh_status` re-reads them from the folders.

This module is Qt-free: the desktop app (``ui/``) and scripts share it.
"""
from __future__ import annotations

import json
import os
from dataclasses import asdict, dataclass, field
from pathlib import Path, PurePosixPath
from typing import Any
from collections.abc import Iterable

from aspectus.atomic import write_json
from aspectus.labels import guess_labels, safe_label
from aspectus.reference import is_bids_physio
from aspectus.run_record import read_run_json
from aspectus.webcam.video import VIDEO_EXTENSIONS
from aspectus.errors import AspectusInputError

#: value of the ``format`` key that marks a aspectus study file
STUDY_FORMAT = "aspectus-study"
#: version of the study file layout this module writes
STUDY_VERSION = 1
#: file name suffix for study files (a convention; any name opens)
STUDY_SUFFIX = ".aspectus-study.json"

#: container extensions picked up when a whole folder is added

#: clip status values
STATUS_NEW = "not processed"
STATUS_DONE = "done"
STATUS_FAILED = "failed"
STATUS_CANCELLED = "cancelled"
STATUS_STALE = "outdated"  # processed, but with other processing parameters
STATUSES = (STATUS_NEW, STATUS_DONE, STATUS_FAILED, STATUS_CANCELLED, STATUS_STALE)

#: summary keys shown per clip (from the pipeline's ClipResult.summary / run.json)
SUMMARY_KEYS = ("frames", "duration_s", "face_found_frac", "blink_count", "fixation_count", "median_distance_mm",
                "noise_rms_s2s_33ms_deg", "noise_rms_s2s_deg", "noise_sd_deg", "valid_frac", "precision_tier", "usable",
                "verdict")


@dataclass
class ReferenceFile:
    """A lab eye-tracker recording of the same session as a clip.

    Attributes
    ----------
    path : str
        Path relative to the study file (POSIX separators).
    kind : str
        ``"bids"`` (BIDS eye-tracking physio file) or ``"table"`` (a plain
        delimited table read with a column mapping).
    mapping : dict or None
        :meth:`aspectus.reference.table.TableMapping.to_dict` for ``"table"``.
    """

    path: str
    kind: str = "table"
    mapping: dict | None = None

    def to_dict(self) -> dict:
        return asdict(self)


@dataclass
class StudyClip:
    """One clip of a study.

    Attributes
    ----------
    path : str
        Clip path relative to the study file (POSIX separators).
    reference : ReferenceFile or None
        Optional reference recording.
    segments : str or None
        Optional task-segment table (label, onset_s, offset_s), relative path.
    status : str
        One of :data:`STATUSES`.
    error : str or None
        The last processing error, in words for the researcher.
    summary : dict
        Quality summary of the last successful run (keys :data:`SUMMARY_KEYS`).
    validation : dict
        Summary of the last validation (alignment offset, agreement figures).
    """

    path: str
    reference: ReferenceFile | None = None
    segments: str | None = None
    status: str = STATUS_NEW
    error: str | None = None
    summary: dict = field(default_factory=dict)
    validation: dict = field(default_factory=dict)

    @property
    def stem(self) -> str:
        """Clip file name without its extension; names the output folder."""
        return PurePosixPath(self.path).stem

    @property
    def name(self) -> str:
        return PurePosixPath(self.path).name

    def to_dict(self) -> dict:
        d = asdict(self)
        d["reference"] = self.reference.to_dict() if self.reference else None
        return d


@dataclass
class Study:
    """A study in memory. Create with :func:`new_study` or :func:`load_study`.

    Attributes
    ----------
    path : Path or None
        The study file; ``None`` until first saved.
    name : str
        A title for the study.
    output_dir : str
        Folder for the per-clip results, relative to the study file.
    process : dict
        Processing parameters (:meth:`aspectus.webcam.pipeline.ProcessParams.to_dict`
        without ``analysis``).
    analysis : dict
        Event-detection and feature parameters
        (:meth:`aspectus.events.analysis.AnalysisParams.to_dict`); empty = defaults.
    clips : list of StudyClip
    mappings : dict
        Column mappings remembered for plain reference tables, keyed by
        the table's relative path; a new table with the same columns can
        reuse the last one (``mappings["last"]``).
    view : dict
        Where the user left off: ``selected`` (clip stem), ``tab``,
        ``position_s``.
    notes : list of str
        What :func:`load_study` could not take over from the file (a
        gaze setting outside its choices, left at its default), one
        sentence each; not saved.
    """

    path: Path | None = None
    name: str = "Untitled study"
    output_dir: str = "results"
    process: dict = field(default_factory=dict)
    analysis: dict = field(default_factory=dict)
    clips: list[StudyClip] = field(default_factory=list)
    mappings: dict = field(default_factory=dict)
    view: dict = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)

    # ----------------------------------------------------------------- paths
    @property
    def base_dir(self) -> Path:
        """Folder that relative paths are relative to (the study file's folder, else the working folder)."""
        return self.path.parent if self.path is not None else Path.cwd()

    def resolve(self, rel: str | os.PathLike | None) -> Path | None:
        """Absolute path of a path stored in the study."""
        if rel is None:
            return None
        p = Path(rel)
        return p if p.is_absolute() else (self.base_dir / p).resolve()

    def relative(self, path: str | os.PathLike) -> str:
        """Path as stored in the study: relative to the study folder when possible, POSIX separators."""
        p = Path(path).absolute()
        try:
            rel = Path(os.path.relpath(p, self.base_dir.absolute()))
        except ValueError:  # another drive on Windows
            return p.as_posix()
        return rel.as_posix()

    def output_root(self) -> Path:
        return self.resolve(self.output_dir)

    def clip_out_dir(self, clip: StudyClip) -> Path:
        """The clip's result folder: ``<output_dir>/<clip stem>/``."""
        return self.output_root() / clip.stem

    def clip_path(self, clip: StudyClip) -> Path:
        return self.resolve(clip.path)

    # ----------------------------------------------------------------- clips
    def find(self, stem: str) -> StudyClip | None:
        for c in self.clips:
            if c.stem == stem:
                return c
        return None

    def add_clip(self, path: str | os.PathLike, *, segments: str | os.PathLike | None = None) -> StudyClip:
        """Add one clip file; returns the new (or already present) entry.

        Raises
        ------
        AspectusInputError
            If the file does not exist, is not a video by its extension, or
            another clip of the study has the same file name stem (both would
            write to the same result folder).
        """
        p = Path(path)
        if not p.is_file():
            raise AspectusInputError("no such clip file", path=p, hint="pick an existing video file")
        if p.suffix.lower() not in VIDEO_EXTENSIONS:
            raise AspectusInputError(f"not a video file by its extension {p.suffix or '(none)'}", path=p,
                                    hint=f"aspectus reads {', '.join(VIDEO_EXTENSIONS)}")
        rel = self.relative(p)
        for c in self.clips:
            if self.resolve(c.path) == p.resolve():
                return c
            if c.stem == p.stem:
                raise AspectusInputError(
                    f"another clip of this study is also called '{p.stem}' ({c.path}); results are kept per clip name",
                    path=p, hint="rename one of the files so that every clip name is unique")
        clip = StudyClip(path=rel)
        if segments is not None:
            clip.segments = self.relative(segments)
        elif p.with_name(p.stem + "_segments.csv").is_file():
            clip.segments = self.relative(p.with_name(p.stem + "_segments.csv"))
        self.clips.append(clip)
        self.refresh_status(clip)
        return clip

    def add_paths(self, paths: Iterable[str | os.PathLike]) -> tuple[list[StudyClip], list[str]]:
        """Add files and folders (folders: every video inside, not recursive).

        Returns the clips added and a list of problems (one sentence each)
        for the paths that could not be added; never raises for one bad path.
        """
        added: list[StudyClip] = []
        problems: list[str] = []
        for raw in paths:
            p = Path(raw)
            files = sorted(q for q in p.iterdir() if q.is_file() and q.suffix.lower() in VIDEO_EXTENSIONS) \
                if p.is_dir() else [p]
            if p.is_dir() and not files:
                problems.append(f"{p}: no video files in this folder")
            for f in files:
                try:
                    before = len(self.clips)
                    c = self.add_clip(f)
                    if len(self.clips) > before:
                        added.append(c)
                except AspectusInputError as exc:
                    problems.append(str(exc))
        return added, problems

    def remove_clip(self, stem: str) -> None:
        """Drop a clip from the study (its result folder stays on disk)."""
        self.clips = [c for c in self.clips if c.stem != stem]

    def set_segments(self, clip: StudyClip, path: str | os.PathLike | None) -> None:
        if path is not None and not Path(path).is_file():
            raise AspectusInputError("no such segments file", path=path)
        clip.segments = self.relative(path) if path is not None else None

    def set_reference(self, clip: StudyClip, path: str | os.PathLike | None, *, kind: str | None = None,
                      mapping: dict | None = None) -> None:
        """Attach (or with ``None`` detach) a reference recording; remembers a table's mapping."""
        if path is None:
            clip.reference = None
            clip.validation = {}
            return
        p = Path(path)
        if not p.is_file():
            raise AspectusInputError("no such reference file", path=p)
        kind = kind or guess_reference_kind(p)
        if kind not in ("bids", "table"):
            raise AspectusInputError(f"unknown reference kind {kind!r}", path=p, hint="use 'bids' or 'table'")
        rel = self.relative(p)
        if kind == "table" and mapping is None:
            mapping = self.mappings.get(rel) or self.mappings.get("last")
        new_ref = ReferenceFile(path=rel, kind=kind, mapping=mapping)
        if clip.reference != new_ref:
            clip.validation = {}  # its figures and any offset the user gave belong to the old recording
        clip.reference = new_ref
        if kind == "table" and mapping is not None:
            self.mappings[rel] = mapping
            self.mappings["last"] = mapping

    # ---------------------------------------------------------------- status
    def refresh_status(self, clip: StudyClip) -> str:
        """Update ``clip.status``/``summary`` from its result folder's ``run.json``.

        ``run.json`` is written last by the pipeline, so its presence means the
        clip finished. If it was made with other processing parameters than
        the study's, the clip is marked :data:`STATUS_STALE`.
        """
        run = read_run_json(self.clip_out_dir(clip))
        if run is None:
            if clip.status in (STATUS_DONE, STATUS_STALE):
                clip.status = STATUS_NEW
                clip.summary = {}
            return clip.status
        summary = run.get("quality") or run.get("summary") or {}
        clip.summary = {k: summary.get(k) for k in SUMMARY_KEYS if k in summary}
        clip.error = None
        clip.status = STATUS_DONE
        if self.process and not _process_params_match(run.get("params") or {}, self.process):
            clip.status = STATUS_STALE
        return clip.status

    def refresh_all(self) -> None:
        for c in self.clips:
            self.refresh_status(c)

    def clips_to_process(self) -> list[StudyClip]:
        """Clips without a current result (new, failed, cancelled or outdated)."""
        return [c for c in self.clips if c.status != STATUS_DONE]

    # ------------------------------------------------------------------ save
    def to_dict(self) -> dict:
        return {
            "format": STUDY_FORMAT,
            "version": STUDY_VERSION,
            "name": self.name,
            "output_dir": self.output_dir,
            "process": self.process,
            "analysis": self.analysis,
            "clips": [c.to_dict() for c in self.clips],
            "mappings": self.mappings,
            "view": self.view,
        }

    def save(self, path: str | os.PathLike | None = None) -> Path:
        """Write the study file atomically. A new location re-bases the relative paths."""
        if path is not None:
            new = Path(path).absolute()
            if self.path is None or new != self.path:
                self._rebase(new)
        if self.path is None:
            raise AspectusInputError("the study has no file yet", hint="choose where to save it")
        write_json(self.path, self.to_dict())
        return self.path

    def _rebase(self, new_path: Path) -> None:
        old = self.resolve
        abs_clips = [(c, old(c.path), old(c.segments), old(c.reference.path) if c.reference else None)
                     for c in self.clips]
        abs_out = old(self.output_dir)
        abs_maps = {(k if k == "last" else old(k)): v for k, v in self.mappings.items()}
        self.path = new_path
        self.output_dir = self.relative(abs_out)
        for c, p, s, r in abs_clips:
            c.path = self.relative(p)
            c.segments = self.relative(s) if s is not None else None
            if c.reference is not None:
                c.reference.path = self.relative(r)
        self.mappings = {(k if k == "last" else self.relative(k)): v for k, v in abs_maps.items()}


def _process_params_match(run_params: dict, study_process: dict) -> bool:
    """Whether a run's processing parameters equal the study's (analysis ones do not count).

    The study's ``gaze`` entry holds only the settings it sets; the others are at
    :class:`aspectus.webcam.gaze.GazeParams`' defaults, which is what they are compared with. A gaze setting
    the run's record lacks (a run from before the setting existed) counts as its default: the settings added
    later default to the earlier behaviour, so such a run is outdated only for a study that chose another value.
    """
    rp = {k: v for k, v in (run_params or {}).items() if k != "analysis"}
    sp = {k: v for k, v in study_process.items() if k not in ("analysis", "gaze")}
    if not all(rp.get(k) == v for k, v in sp.items() if k in rp):
        return False
    if "gaze" in study_process and isinstance(rp.get("gaze"), dict):
        from aspectus.webcam.gaze import GazeParams, renamed_settings_read

        try:
            want = GazeParams.from_dict(study_process.get("gaze")).to_dict()
        except (AspectusInputError, TypeError):  # a setting the study cannot use: no run matches it
            return False
        ran = renamed_settings_read(rp["gaze"])  # a run from before a setting's new name: read under it
        default = GazeParams().to_dict()
        return all(ran.get(k, default[k]) == v for k, v in want.items())
    return True


def guess_reference_kind(path: Path) -> str:
    """``"bids"`` for a BIDS physio file or its sidecar, else ``"table"``."""
    p = Path(path)
    if is_bids_physio(p) or is_bids_physio(p.with_name(p.name[:-len(".json")] + ".tsv.gz")
                                           if p.name.lower().endswith(".json") else p):
        return "bids"
    return "table"


def new_study(*, path: str | os.PathLike | None = None, name: str = "Untitled study",
              output_dir: str = "results") -> Study:
    """A new empty study; with ``path`` it is saved there at once."""
    s = Study(name=name, output_dir=output_dir)
    if path is not None:
        s.path = Path(path).absolute()
        s.save()
    return s


def _need(d: dict, key: str, typ, path: Path, default: Any = ...):
    if key not in d:
        if default is not ...:
            return default
        raise AspectusInputError(f"key '{key}' is missing", path=path, hint="the study file is incomplete")
    v = d[key]
    if v is None and default is not ...:
        return default
    if not isinstance(v, typ):
        want = typ.__name__ if isinstance(typ, type) else " or ".join(t.__name__ for t in typ)
        raise AspectusInputError(f"key '{key}' should be {want}, found {type(v).__name__}", path=path)
    return v


def load_study(path: str | os.PathLike) -> Study:
    """Open a study file.

    Raises
    ------
    AspectusInputError
        Naming the file and the broken key if it is missing, not JSON, not a
        aspectus study, from a newer aspectus, or malformed.
    """
    path = Path(path).absolute()
    if not path.is_file():
        raise AspectusInputError("no such study file", path=path, hint="check the path or create a new study")
    try:
        with open(path, encoding="utf-8-sig") as fh:
            raw = json.load(fh)
    except UnicodeDecodeError:
        raise AspectusInputError("not a text file", path=path, hint="a study file is JSON text") from None
    except json.JSONDecodeError as exc:
        raise AspectusInputError(f"not valid JSON ({exc.msg})", path=path, where=f"line {exc.lineno}",
                                hint="repair the file or open an older copy") from None
    if not isinstance(raw, dict) or raw.get("format") != STUDY_FORMAT:
        raise AspectusInputError("not an aspectus study file", path=path,
                                hint=f"a study file is JSON with \"format\": \"{STUDY_FORMAT}\"")
    version = raw.get("version")
    if not isinstance(version, int) or version > STUDY_VERSION:
        raise AspectusInputError(f"study file version {version!r} is newer than this aspectus understands ({STUDY_VERSION})",
                                path=path, hint="update aspectus")
    s = Study(path=path)
    s.name = _need(raw, "name", str, path, "Untitled study")
    s.output_dir = _need(raw, "output_dir", str, path, "results")
    s.process = _need(raw, "process", dict, path, {})
    if "gaze" in s.process:  # a study saved before the gaze settings existed has none: their defaults hold
        from aspectus.webcam.gaze import gaze_settings_from_stored

        s.process["gaze"], notes = gaze_settings_from_stored(s.process["gaze"])
        s.notes.extend(f"{path.name}: {n}" for n in notes)
    s.analysis = _need(raw, "analysis", dict, path, {})
    s.mappings = _need(raw, "mappings", dict, path, {})
    s.view = _need(raw, "view", dict, path, {})
    seen = set()
    for i, c in enumerate(_need(raw, "clips", list, path, [])):
        where = f"clips[{i}]"
        if not isinstance(c, dict) or not isinstance(c.get("path"), str) or not c["path"]:
            raise AspectusInputError("a clip entry needs a 'path' string", path=path, where=where)
        ref = c.get("reference")
        if ref is not None:
            if not isinstance(ref, dict) or not isinstance(ref.get("path"), str):
                raise AspectusInputError("a reference needs a 'path' string", path=path, where=where)
            ref = ReferenceFile(path=ref["path"], kind=str(ref.get("kind") or "table"), mapping=ref.get("mapping"))
        status = c.get("status") if c.get("status") in STATUSES else STATUS_NEW
        clip = StudyClip(path=c["path"], reference=ref, segments=c.get("segments") or None, status=status,
                         error=c.get("error"), summary=dict(c.get("summary") or {}),
                         validation=dict(c.get("validation") or {}))
        if clip.stem in seen:
            raise AspectusInputError(f"two clips are called '{clip.stem}'", path=path, where=where,
                                    hint="every clip name must be unique within a study")
        seen.add(clip.stem)
        s.clips.append(clip)
    s.refresh_all()
    return s


def missing_files(study: Study) -> list[str]:
    """Sentences naming clip, segment and reference files the study points to that are not there."""
    out = []
    for c in study.clips:
        for label, rel in (("clip", c.path), ("segments", c.segments),
                           ("reference", c.reference.path if c.reference else None)):
            if rel is not None and not study.resolve(rel).exists():
                out.append(f"{c.stem}: {label} file {rel} not found (looked in {study.resolve(rel)})")
    return out


def write_validation_manifest(study: Study, path: str | os.PathLike) -> tuple[Path, list[str]]:
    """Write a validation manifest for every processed clip of ``study`` that has a reference recording.

    The manifest (read by :func:`aspectus.validation.manifest.read_validation_manifest`,
    so ``aspectus validate --manifest`` can re-run the same comparison) pairs
    each clip's result folder with its reference; a plain reference table's
    column mapping is written beside it as ``mappings/<clip stem>.json``.
    Participant and session labels come from the clip name (BIDS ``sub-`` /
    ``ses-`` entities, else parts such as ``p01`` / ``s01``); two clips of one
    participant without a session label get the clip name as session, so
    their windows still count for the same participant.

    A clock offset the user gave for a clip (``validation["offset_given"]``,
    set by the app's validation tab) goes into the ``offset_s`` column; the
    other clips are aligned automatically.

    Returns the manifest path and one line per clip that was left out (and why).
    """
    import numpy as np
    import pandas as pd

    from aspectus.atomic import write_csv
    from aspectus.reference.table import TableMapping

    path = Path(path)
    rows, skipped = [], []
    for clip in study.clips:
        if clip.reference is None:
            skipped.append(f"{clip.name}: no reference recording chosen")
            continue
        if clip.status not in (STATUS_DONE, STATUS_STALE):
            skipped.append(f"{clip.name}: not processed ({clip.status})")
            continue
        out = study.clip_out_dir(clip)
        if read_run_json(out) is None:
            skipped.append(f"{clip.name}: its results folder {out} holds no finished run")
            continue
        ref = study.resolve(clip.reference.path)
        if ref is None or not ref.exists():
            skipped.append(f"{clip.name}: reference {clip.reference.path} not found")
            continue
        mapping = ""
        if clip.reference.kind == "table":
            if not clip.reference.mapping:
                skipped.append(f"{clip.name}: reference table {clip.reference.path} has no column mapping")
                continue
            TableMapping.from_dict(clip.reference.mapping).save(path.parent / "mappings" / f"{clip.stem}.json")
            mapping = f"mappings/{clip.stem}.json"  # relative to the manifest, so the folder can move
        labels = guess_labels(clip.stem)
        rows.append({"webcam": str(out), "reference": str(ref), "participant": labels["participant"],
                     "session": labels.get("session", ""), "task": labels.get("task", ""),
                     "run": labels.get("run", ""), "mapping": mapping,
                     "segments": str(study.resolve(clip.segments)) if clip.segments else "",
                     "offset_s": repr(float(clip.validation["offset_s"])) if (clip.validation or {}).get("offset_given")
                     else ""})
    if not rows:
        raise AspectusInputError("no clip of the study has both finished results and a reference recording: "
                                + "; ".join(skipped[:6]) + (" ..." if len(skipped) > 6 else ""),
                                path=study.path, hint="process the clips and choose a reference for each")
    df = pd.DataFrame(rows)
    empty = df["participant"] == ""
    df.loc[empty, "participant"] = [f"clip{k + 1}" for k in np.flatnonzero(empty.to_numpy())]
    # the labels are clean already (_clip_labels); now make every pair's key unique: clips of one participant
    # that share a session label get their clip name as session, and any that still collide a number
    labels = ["participant", "session", "task", "run"]
    key = df[labels].agg("_".join, axis=1)
    dup = key.duplicated(keep=False)
    df.loc[dup, "session"] = [safe_label(Path(w).name) for w in df.loc[dup, "webcam"]]
    key = df[labels].agg("_".join, axis=1)
    seen: dict[str, int] = {}
    for i, k in enumerate(key):
        seen[k] = seen.get(k, 0) + 1
        if seen[k] > 1:
            df.loc[df.index[i], "session"] = f"{df['session'].iloc[i]}-{seen[k]}".lstrip("-")
    write_csv(path, df)
    return path, skipped


def run_study_validation(study: Study, out_dir: str | os.PathLike, *, params=None, progress=None, cancel=None):
    """Validate every processed clip of ``study`` that has a reference; results replace ``out_dir`` only when complete.

    Writes the manifest (:func:`write_validation_manifest`) and the study
    validation (:func:`aspectus.validation.study.validate_study`) into a sibling
    folder ``.<name>.partial`` and only when everything is written swaps it
    for ``out_dir``; a run that fails or is cancelled (``cancel`` set, or
    ``progress`` raising :class:`aspectus.errors.Cancelled`) removes its partial folder and leaves
    an earlier complete ``out_dir`` as it was - never a new manifest beside
    an old report.

    Returns ``(StudyResult, skipped)``, ``skipped`` as from
    :func:`write_validation_manifest`.
    """
    import shutil

    from aspectus.validation.pair import ValidateParams

    from aspectus.validation.study import validate_study

    out = Path(out_dir)
    part = out.parent / f".{out.name}.partial"
    old = out.parent / f".{out.name}.previous"
    for leftover in (part, old):
        if leftover.exists():
            shutil.rmtree(leftover)
    try:
        manifest, skipped = write_validation_manifest(study, part / "validation_manifest.csv")
        res = validate_study(manifest, part, params=params or ValidateParams(), progress=progress, cancel=cancel)
    except BaseException:
        shutil.rmtree(part, ignore_errors=True)
        raise
    if out.exists():
        out.rename(old)
    part.rename(out)
    shutil.rmtree(old, ignore_errors=True)
    res.paths = {k: out / Path(v).relative_to(part) for k, v in res.paths.items()}
    return res, skipped
