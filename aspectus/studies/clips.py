"""Study manifests and folder discovery: which clips a batch run covers.

A *manifest* is a CSV file with one row per clip::

    clip,participant,session,reference,segments,site
    p01/s01.mp4,p01,s01,reference/p01_s01.csv,segments/reading.csv,north
    p02/s01.mp4,p02,s01,,,north

Only ``clip`` is required. ``reference`` (a lab-tracker recording of the same
session) and ``segments`` (task segments: ``label, onset_s, offset_s``) are
optional paths. ``participant`` and ``session`` are optional labels; any other
column (``site``, ``group`` ...) is carried as a label into the study table.
A ``mapping`` column (the saved column mapping of a plain-table reference)
is resolved like a path, and with ``offset_s`` passed on to the validation
manifest the batch writes.
Relative paths are relative to the manifest's own folder. Blank lines and
lines starting with ``#`` are ignored.

A *folder* is searched for clips by file extension (recursively by default).
Labels are taken from BIDS-style entities in the path (``sub-p01``,
``ses-s01``) or from a regular expression with named groups.

Each clip gets an output key - the name of its folder under the batch output
folder. The key is the clip's file stem; when two clips share a stem the key
is their path relative to the folder they have in common, with ``/`` replaced
by ``__`` (``classA/p01.mp4`` -> ``classA__p01``); if that still collides
(``p01.mp4`` and ``p01.mov`` side by side) the extension is kept
(``p01_mp4``). The rule depends only on the set of clips, so the same study
always maps to the same folders.

A command that works on one clip of a study (``aspectus targets check``) names
its folder through :func:`clip_output_dir`: the key a batch run into the same
output folder gave the clip (its ``status.csv``), or :func:`assign_keys` applied
to the study the user names, else the file stem (as ``aspectus process`` and
the app, whose clips have unique stems, name it) - so a clip's check lands
beside the results the batch made for it.
"""
from __future__ import annotations

import csv
import os
import re
from dataclasses import dataclass, field
from pathlib import Path

from aspectus.labels import labels_from_path  # noqa: F401 (re-exported)
from aspectus.webcam.video import VIDEO_EXTENSIONS
from aspectus.errors import AspectusInputError

#: file extensions searched for when a batch is given a folder

#: manifest columns with a fixed meaning; all others become labels
MANIFEST_PATH_COLUMNS = ("clip", "reference", "segments")
MANIFEST_LABEL_COLUMNS = ("participant", "session")

_UNSAFE = re.compile(r"[^A-Za-z0-9._+-]+")


@dataclass(frozen=True)
class ClipJob:
    """One clip of a study, before any processing.

    Attributes
    ----------
    clip : Path
        Absolute path of the clip file.
    rel : str
        The clip's path as the user gave it (relative to the searched folder
        or as written in the manifest) - used in tables and messages.
    key : str
        Name of the clip's output folder (see module docs); set by
        :func:`assign_keys`.
    reference : Path or None
        Absolute path of a reference recording, if the manifest gives one.
    segments : Path or None
        Absolute path of a task-segments table, if the manifest gives one.
    participant, session : str or None
        Labels.
    labels : dict
        Further labels (manifest columns other than the known ones).
    row : int or None
        1-based line of the manifest this clip came from (header = line 1).
    """

    clip: Path
    rel: str
    key: str = ""
    reference: Path | None = None
    segments: Path | None = None
    participant: str | None = None
    session: str | None = None
    labels: dict = field(default_factory=dict)
    row: int | None = None

    def label_dict(self) -> dict:
        """All labels as one flat dict (participant, session, then extras)."""
        out = {"participant": self.participant, "session": self.session}
        out.update(self.labels)
        return out

    def with_key(self, key: str) -> ClipJob:
        return ClipJob(self.clip, self.rel, key, self.reference, self.segments, self.participant,
                       self.session, dict(self.labels), self.row)


def _safe(name: str) -> str:
    s = _UNSAFE.sub("_", name).strip("_")
    s = s.lstrip(".")
    return s or "clip"


def assign_keys(jobs: list[ClipJob]) -> list[ClipJob]:
    """Give every job a unique, deterministic output key (see module docs).

    Parameters
    ----------
    jobs : list of ClipJob
        The study's clips; their ``clip`` paths must be distinct.

    Returns
    -------
    list of ClipJob
        The same jobs, in the same order, with ``key`` set.
    """
    if not jobs:
        return []
    paths = [j.clip for j in jobs]
    try:
        common = Path(os.path.commonpath([str(p.parent) for p in paths]))
    except ValueError:  # different drives
        common = None

    def rel_parts(p: Path) -> tuple[str, ...]:
        if common is not None:
            try:
                return p.relative_to(common).parts
            except ValueError:
                pass
        return p.parts[1:]

    keys = [_safe(p.stem) for p in paths]
    for level in (1, 2):
        counts: dict[str, int] = {}
        for k in keys:
            counts[k.lower()] = counts.get(k.lower(), 0) + 1
        clash = [i for i, k in enumerate(keys) if counts[k.lower()] > 1]
        if not clash:
            break
        for i in clash:
            parts = list(rel_parts(paths[i]))
            if level == 1:
                parts[-1] = Path(parts[-1]).stem
            else:
                parts[-1] = parts[-1].replace(".", "_")
            keys[i] = "__".join(_safe(x) for x in parts)
    else:
        counts = {}
        for k in keys:
            counts[k.lower()] = counts.get(k.lower(), 0) + 1
        dup = sorted(k for k, n in counts.items() if n > 1)
        if dup:
            raise AspectusInputError(f"clips map to the same output folder name(s) {', '.join(dup)}",
                                    hint="rename one of the clips")
    return [j.with_key(k) for j, k in zip(jobs, keys)]


def discover_clips(folder, *, extensions=VIDEO_EXTENSIONS, recursive: bool = True,
                   exclude=(), label_pattern: str | None = None) -> list[ClipJob]:
    """Find the clips of a study in a folder.

    Parameters
    ----------
    folder : path-like
        Folder to search.
    extensions : sequence of str, default :data:`VIDEO_EXTENSIONS`
        File extensions (case-insensitive, with the dot) that count as clips.
    recursive : bool, default True
        Search sub-folders too. Hidden files and folders (name starting with
        ``.``) are skipped.
    exclude : sequence of path-like, default ()
        Folders not to search (the batch's own output folder when it lies
        inside the clip folder).
    label_pattern : str, optional
        See :func:`labels_from_path`.

    Returns
    -------
    list of ClipJob
        Sorted by relative path, with output keys assigned.

    Raises
    ------
    AspectusInputError
        If the folder does not exist or holds no clip.
    """
    root = Path(folder).resolve()
    if not root.is_dir():
        raise AspectusInputError("folder not found", path=folder, hint="give an existing folder of clips or a manifest CSV")
    exts = {e.lower() if e.startswith(".") else "." + e.lower() for e in extensions}
    skip = {Path(e).resolve() for e in exclude}
    found: list[Path] = []
    for dirpath, dirnames, filenames in os.walk(root):
        d = Path(dirpath)
        dirnames[:] = sorted(n for n in dirnames if not n.startswith(".") and (d / n).resolve() not in skip)
        if not recursive:
            dirnames[:] = []
        for n in filenames:
            if not n.startswith(".") and Path(n).suffix.lower() in exts:
                found.append(d / n)
    if not found:
        raise AspectusInputError(f"no clips found (looked for {', '.join(sorted(exts))}"
                                f"{' in sub-folders too' if recursive else ''})", path=root,
                                hint="check the folder or pass --ext")
    jobs = []
    for p in sorted(found, key=lambda q: q.relative_to(root).as_posix()):
        rel = p.relative_to(root).as_posix()
        lab = labels_from_path(rel, pattern=label_pattern)
        jobs.append(ClipJob(clip=p, rel=rel, participant=lab.pop("participant", None),
                            session=lab.pop("session", None), labels=lab))
    return assign_keys(jobs)


def _sniff_delimiter(text: str) -> str:
    first = next((ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")), "")
    counts = {d: first.count(d) for d in (",", ";", "\t")}
    best = max(counts, key=counts.get)
    return best if counts[best] else ","


def read_manifest(path) -> list[ClipJob]:
    """Read a study manifest CSV (see module docs).

    Parameters
    ----------
    path : path-like
        The manifest. Comma, semicolon or tab separated, UTF-8 (a BOM is
        accepted), with a header row.

    Returns
    -------
    list of ClipJob
        In manifest order, with output keys assigned. Clips whose file does
        not exist are still returned (the batch reports them as failed, so a
        single missing file does not stop a night's run).

    Raises
    ------
    AspectusInputError
        The file is missing or empty, has no ``clip`` column, a row has an
        empty ``clip`` cell or more cells than the header, or the same clip
        is listed twice. The message names the file and line.
    """
    path = Path(path)
    if not path.is_file():
        raise AspectusInputError("manifest not found", path=path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError as exc:
        raise AspectusInputError(f"not a UTF-8 text file ({exc.reason} at byte {exc.start})", path=path,
                                hint="save the manifest as UTF-8 CSV") from None
    base = path.resolve().parent
    delim = _sniff_delimiter(text)
    lines = [(i + 1, ln) for i, ln in enumerate(text.splitlines())
             if ln.strip() and not ln.lstrip().startswith("#")]
    if not lines:
        raise AspectusInputError("manifest is empty", path=path, hint="add a header row with a 'clip' column")
    rows = list(csv.reader([ln for _, ln in lines], delimiter=delim))
    header = [h.strip() for h in rows[0]]
    norm = [h.lower() for h in header]
    if "clip" not in norm:
        raise AspectusInputError(f"no 'clip' column (header: {', '.join(header)})", path=path,
                                where=f"line {lines[0][0]}",
                                hint="the first row must name the columns; 'clip' holds each clip's path")
    seen_cols: dict[str, int] = {}
    for i, h in enumerate(norm):
        if not h:
            raise AspectusInputError(f"column {i + 1} has no name", path=path, where=f"line {lines[0][0]}")
        if h in seen_cols:
            raise AspectusInputError(f"column '{header[i]}' appears twice", path=path, where=f"line {lines[0][0]}")
        seen_cols[h] = i
    jobs: list[ClipJob] = []
    seen: dict[Path, int] = {}
    for (lineno, _), cells in zip(lines[1:], rows[1:]):
        if len(cells) > len(header):
            raise AspectusInputError(f"{len(cells)} cells but the header has {len(header)} columns", path=path,
                                    where=f"line {lineno}", hint="quote cells that contain the delimiter")
        cells = [c.strip() for c in cells] + [""] * (len(header) - len(cells))
        rec = dict(zip(norm, cells))
        orig = dict(zip(header, cells))
        if not rec["clip"]:
            raise AspectusInputError("empty 'clip' cell", path=path, where=f"line {lineno}",
                                    hint="every row needs the clip's path")

        def resolve(v: str) -> Path | None:
            if not v:
                return None
            p = Path(os.path.expanduser(v))
            return (p if p.is_absolute() else base / p).resolve()

        clip = resolve(rec["clip"])
        if clip in seen:
            raise AspectusInputError(f"clip '{rec['clip']}' is listed twice (first at line {seen[clip]})",
                                    path=path, where=f"line {lineno}", hint="list each clip once")
        seen[clip] = lineno
        labels = {h: orig[h] or None for h, n in zip(header, norm)
                  if n not in MANIFEST_PATH_COLUMNS + MANIFEST_LABEL_COLUMNS}
        if labels.get("mapping"):  # the reference table's saved column mapping: a path like the others
            labels["mapping"] = str(resolve(labels["mapping"]))
        jobs.append(ClipJob(clip=clip, rel=rec["clip"], reference=resolve(rec.get("reference", "")),
                            segments=resolve(rec.get("segments", "")),
                            participant=rec.get("participant") or None, session=rec.get("session") or None,
                            labels=labels, row=lineno))
    if not jobs:
        raise AspectusInputError("manifest lists no clips", path=path, hint="add one row per clip below the header")
    try:
        return assign_keys(jobs)
    except AspectusInputError as exc:
        if exc.path is not None:
            raise
        raise AspectusInputError(exc.problem, path=path, where=exc.where, hint=exc.hint) from None


def load_jobs(source, *, extensions=VIDEO_EXTENSIONS, recursive: bool = True, exclude=(),
              label_pattern: str | None = None) -> list[ClipJob]:
    """Jobs from a folder (searched) or a manifest file (``.csv``/``.tsv``/``.txt``)."""
    p = Path(source)
    if p.is_dir():
        return discover_clips(p, extensions=extensions, recursive=recursive, exclude=exclude,
                              label_pattern=label_pattern)
    if p.is_file():
        if p.suffix.lower() in {e.lower() for e in extensions}:
            raise AspectusInputError("is a single clip, not a folder or manifest", path=p,
                                    hint="use 'aspectus process' for one clip, or give its folder")
        return read_manifest(p)
    raise AspectusInputError("not found", path=p, hint="give a folder of clips or a manifest CSV")


#: the batch's per-clip record in its output folder (clip as given, key) and its sidecar (the study's source)
BATCH_STATUS = "status.csv"
BATCH_SIDECAR = "study.json"


def _same_file(a: Path, b: Path) -> bool:
    try:
        return a.resolve() == b.resolve() or (a.exists() and b.exists() and os.path.samefile(a, b))
    except OSError:
        return False


def _key_from_batch_record(out_root: Path, clip: Path) -> str | None:
    """The key a batch run into ``out_root`` gave ``clip`` (from its ``status.csv`` and the source named in
    ``study.json``), or None when ``out_root`` holds no batch record naming this clip."""
    import json

    try:
        side = json.loads((out_root / BATCH_SIDECAR).read_text(encoding="utf-8"))
        with open(out_root / BATCH_STATUS, newline="", encoding="utf-8") as fh:
            recs = list(csv.DictReader(fh))
    except (OSError, ValueError, csv.Error):
        return None
    source = side.get("source") if isinstance(side, dict) else None
    if not source:
        return None
    src = Path(source) if Path(source).is_absolute() else out_root / source
    base = src if src.is_dir() else src.parent
    for r in recs:
        rel, key = (r.get("clip") or "").strip(), (r.get("key") or "").strip()
        if rel and key and _same_file(Path(rel) if Path(rel).is_absolute() else base / rel, clip):
            return key
    return None


def clip_output_key(clip, out_root=None, *, study=None) -> str:
    """The name of ``clip``'s output folder under ``out_root``: the batch's key for it (:func:`assign_keys`).

    Parameters
    ----------
    clip : path-like
        The clip.
    out_root : path-like, optional
        The output root. When a batch ran into it (its ``status.csv`` and
        ``study.json``) and that batch covered ``clip``, its key is used.
    study : path-like or list of path-like, optional
        The study the clip belongs to: the folder or manifest given to
        ``aspectus batch``, or the study's clip paths. The keys are assigned
        to the whole study, as the batch does; this wins over the batch
        record.

    Returns
    -------
    str
        Without a study and without a batch record naming the clip: the
        clip's file stem, as ``aspectus process`` and the app name a
        clip's folder (their clips have unique stems).

    Raises
    ------
    AspectusInputError
        ``study`` is given but does not contain ``clip``.
    """
    clip = Path(clip)
    if study is not None:
        if isinstance(study, (str, os.PathLike)):
            jobs = load_jobs(study, exclude=[out_root] if out_root is not None else ())
        else:
            jobs = assign_keys([ClipJob(clip=Path(p), rel=Path(p).name) for p in study])
        for j in jobs:
            if _same_file(j.clip, clip):
                return j.key
        raise AspectusInputError("the clip is not one of the study's clips", path=clip,
                                 hint=f"give the folder or manifest the clip belongs to (looked in {study})"
                                 if isinstance(study, (str, os.PathLike)) else "add the clip to the study first")
    if out_root is not None:
        key = _key_from_batch_record(Path(out_root), clip)
        if key:
            return key
    from aspectus.webcam.pipeline import clip_output_dir as one_clip_dir

    return one_clip_dir("", clip).name  # what ``aspectus process`` names a lone clip's folder


def clip_output_dir(out_root, clip, *, study=None) -> Path:
    """``out_root / clip_output_key(clip, out_root, study=study)``: where ``clip``'s outputs are (see
    :func:`clip_output_key`)."""
    return Path(out_root) / clip_output_key(clip, out_root, study=study)


def output_folder_holds_another_clip(out_dir, clip) -> str | None:
    """A sentence when ``out_dir`` holds the results of a clip other than ``clip`` (its ``run.json`` names
    another file and another SHA-256), else None - so that a command never overwrites another clip's results."""
    from aspectus.atomic import sha256_file
    from aspectus.run_record import read_run_json

    run = read_run_json(out_dir)
    if not run or not run.get("input_sha256"):
        return None
    rec = run.get("clip")
    if isinstance(rec, str) and rec and _same_file(Path(out_dir) / rec, Path(clip)):
        return None
    try:
        if sha256_file(clip) == run["input_sha256"]:
            return None
    except OSError:
        return None
    return (f"{out_dir} holds the results of another clip ({run.get('clip_name') or rec or 'unknown'}, "
            "another SHA-256)")
