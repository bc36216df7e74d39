"""Folder mode of the study validation: pair processed clips with reference recordings by their names.

``aspectus validate WEBCAM_FOLDER REFERENCE_FOLDER -o OUT`` (and
:func:`aspectus.validation.study.validate_study` given two folders) calls
:func:`pair_folders`, which

1. finds the processed clips: the sub-folders of ``WEBCAM_FOLDER`` that hold
   a ``samples.parquet`` (the output folder of ``aspectus batch`` or
   ``aspectus process``); clips that ``status.csv`` lists as failed or pending
   are reported as not processed;
2. finds the references under ``REFERENCE_FOLDER`` (searched recursively, so
   a BIDS tree ``sub-XX/ses-YY/...`` works; hidden folders and BIDS
   ``derivatives``/``sourcedata`` are skipped): BIDS ``*_physio.tsv[.gz]``
   files, and plain tables (``.csv``/``.tsv``/``.txt``) when a column mapping
   is given; ``reference_glob`` narrows them;
3. gives each side labels - ``participant``, ``session``, ``task``, ``run``:

   * a clip: from the user's ``label_pattern`` (named groups, as ``aspectus
     batch --labels``) searched in its folder name, else the ``participant``,
     ``session`` (and ``task``/``run`` label) columns of the batch's
     ``status.csv``, else BIDS entities ``sub-``/``ses-``/``task-``/``run-``
     in its folder name or in the original clip's path (from ``run.json``);
   * a reference: from ``label_pattern`` searched in its path relative to
     ``REFERENCE_FOLDER``, else the BIDS entities of its file name and
     folders;

4. pairs a clip with the reference whose participant is the same and whose
   session, task and run agree wherever both sides have them; when several
   do, the one that agrees on the most entities wins, and a tie is an error.
   Clips or references without a participant label fall back to identical
   stems (clip folder name = reference file name without its extensions).

Nothing is dropped silently: clips without a reference, references without
a clip, files that were not used and why, are all listed
(:meth:`FolderPairing.table`), written to the study folder and printed. A
reference claimed by two clips, or a clip with two equally good references,
stops the run with an error naming both and asking for a manifest;
:meth:`FolderPairing.write_manifest` writes the pairs found (ambiguous
choices as commented-out lines) as a manifest CSV to check, edit and run with
``--manifest``.
"""
from __future__ import annotations

import fnmatch
import os
import re
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from aspectus.labels import LABEL_KEYS, bids_labels, pattern_labels
from aspectus.reference import is_bids_physio
from aspectus.errors import AspectusInputError
from aspectus.run_record import read_run_json
from aspectus.validation.manifest import StudyRow

#: labels used for pairing, in order of importance
#: BIDS folders that do not hold raw recordings
SKIP_DIRS = ("derivatives", "sourcedata")
#: suffixes of plain tables that can be references (with a column mapping)
TABLE_SUFFIXES = (".csv", ".tsv", ".txt", ".csv.gz", ".tsv.gz", ".txt.gz")
#: BIDS tables that are never gaze recordings
_BIDS_OTHER = re.compile(r"(_physioevents|_events|_channels|_scans|_sessions|_beh)\.tsv(\.gz)?$|^participants\.tsv$")
_MANIFEST_HINT = ("write a manifest CSV (columns webcam, reference, participant, session) and run "
                  "`aspectus validate --manifest CSV -o OUT`; --save-manifest CSV writes the pairs found here as a "
                  "start, or narrow the references with --reference-glob")


def _pattern(text: str, pattern: str | None) -> dict:
    return {k: v for k, v in pattern_labels(text, pattern).items() if k in LABEL_KEYS and v}


def _stem(name: str) -> str:
    low = name.lower()
    for suf in sorted(TABLE_SUFFIXES + (".json", ".parquet"), key=len, reverse=True):
        if low.endswith(suf):
            return name[: -len(suf)]
    return Path(name).stem


def _norm(key: str, v) -> str:
    s = str(v).strip().lower()
    if key == "run" and s.isdigit():
        return str(int(s))
    return s


def _describe(labels: dict) -> str:
    return ", ".join(f"{k} {labels[k]}" for k in LABEL_KEYS if labels.get(k)) or "no labels"


@dataclass
class ClipFolder:
    """A processed clip: its output folder and the labels it was paired by."""

    key: str
    path: Path
    labels: dict = field(default_factory=dict)
    label_source: str = ""
    clip: str | None = None


@dataclass
class ReferenceFile:
    """A reference recording found under the reference folder."""

    path: Path
    rel: str
    kind: str
    labels: dict = field(default_factory=dict)
    label_source: str = ""

    @property
    def stem(self) -> str:
        return _stem(self.path.name)


@dataclass
class Pair:
    clip: ClipFolder
    reference: ReferenceFile
    matched_on: str


@dataclass
class FolderPairing:
    """What :func:`pair_folders` found: the pairs and everything that was left over."""

    webcam_folder: Path
    reference_folder: Path
    pairs: list[Pair]
    clips_without_reference: list[tuple[ClipFolder, str]]
    references_without_clip: list[ReferenceFile]
    not_processed: list[tuple[str, str]]
    ignored: list[tuple[Path, str]]
    ambiguous: list[dict] = field(default_factory=list)

    # ------------------------------------------------------------------ rows for the study

    def rows(self) -> list:
        """The pairs as :class:`aspectus.validation.manifest.StudyRow` (participant, session, task, run from the labels)."""


        rows, seen = [], {}
        for p in self.pairs:
            lab = _merged(p)
            row = StudyRow(webcam=p.clip.path, reference=p.reference.path,
                           participant=lab.get("participant") or _safe_key(p.clip.key),
                           session=lab.get("session"), task=lab.get("task"), run=lab.get("run"))
            if row.key in seen:
                raise AspectusInputError(
                    f"clip folders {seen[row.key]} and {p.clip.path} both pair as {row.key}",
                    path=self.webcam_folder, hint="give them labels that tell them apart (--labels), or " + _MANIFEST_HINT)
            seen[row.key] = p.clip.path
            rows.append(row)
        return rows

    def raise_if_ambiguous(self, manifest_written: Path | None = None) -> None:
        """Stop with an error naming both candidates of the first ambiguous pairing."""
        if not self.ambiguous:
            return
        a = self.ambiguous[0]
        more = "".join(f"; also {b['problem']}: {b['first']} and {b['second']}" for b in self.ambiguous[1:3])
        if len(self.ambiguous) > 3:
            more += f"; and {len(self.ambiguous) - 3} more"
        hint = _MANIFEST_HINT
        if manifest_written is not None:
            hint = (f"a draft manifest with the choices as commented-out lines was written to {manifest_written}: "
                    "remove the '#' before the right line, and run `aspectus validate --manifest` with it")
        raise AspectusInputError(f"ambiguous pairing: {a['problem']}: {a['first']} and {a['second']}{more}",
                                path=a["path"], hint=hint)

    # ------------------------------------------------------------------ tables

    def table(self) -> pd.DataFrame:
        """Every clip and reference with what happened to it (``status``: paired, no reference, no clip,
        not processed, ambiguous, not used)."""
        recs = []
        for p in self.pairs:
            lab = _merged(p)
            recs.append({"status": "paired", "webcam": str(p.clip.path), "reference": str(p.reference.path),
                         **{k: lab.get(k) for k in LABEL_KEYS}, "matched_on": p.matched_on, "why": ""})
        for a in self.ambiguous:
            recs.append({"status": "ambiguous", "webcam": a.get("webcam", ""), "reference": a.get("reference", ""),
                         "matched_on": "", "why": f"{a['problem']}: {a['first']} and {a['second']}"})
        for c, why in self.clips_without_reference:
            recs.append({"status": "no reference", "webcam": str(c.path), "reference": "",
                         **{k: c.labels.get(k) for k in LABEL_KEYS}, "matched_on": "", "why": why})
        for r in self.references_without_clip:
            recs.append({"status": "no clip", "webcam": "", "reference": str(r.path),
                         **{k: r.labels.get(k) for k in LABEL_KEYS}, "matched_on": "",
                         "why": f"no processed clip with {_describe(r.labels)}" if r.labels.get("participant")
                         else f"no processed clip named {r.stem}"})
        for key, why in self.not_processed:
            recs.append({"status": "not processed", "webcam": str(self.webcam_folder / key), "reference": "",
                         "matched_on": "", "why": why})
        for path, why in self.ignored:
            recs.append({"status": "not used", "webcam": "", "reference": str(path), "matched_on": "", "why": why})
        cols = ["status", "webcam", "reference", *LABEL_KEYS, "matched_on", "why"]
        return pd.DataFrame(recs, columns=cols)

    def messages(self) -> list[str]:
        """One line per clip or reference that was not paired (for the console and the report)."""
        out = []
        for c, why in self.clips_without_reference:
            out.append(f"clip {c.key}: no reference ({why})")
        for r in self.references_without_clip:
            out.append(f"reference {r.rel}: no clip ("
                       + (f"no processed clip with {_describe(r.labels)}" if r.labels.get("participant")
                          else f"no processed clip named {r.stem}") + ")")
        for key, why in self.not_processed:
            out.append(f"clip {key}: not processed ({why})")
        for path, why in self.ignored:
            out.append(f"{self._shown(path)}: not used ({why})")
        return out

    def _shown(self, path) -> str:
        """A left-over file as the console and the report name it: relative to the reference or webcam folder it
        lies in ("reference ..." / "clip folder ..."), so no absolute path (with user names) reaches the report."""
        for base, what in ((self.reference_folder, "reference"), (self.webcam_folder, "clip folder")):
            try:
                return f"{what} {Path(path).resolve().relative_to(Path(base).resolve()).as_posix()}"
            except (ValueError, OSError, TypeError):
                continue
        return Path(path).name

    def manifest(self, base: Path | None = None) -> pd.DataFrame:
        """The pairs as a validation manifest (paths relative to ``base`` when given)."""
        def rel(p: Path) -> str:
            return _rel_or_abs(p, base)

        recs = []
        for p, row in zip(self.pairs, self.rows()):
            recs.append({"webcam": rel(p.clip.path), "reference": rel(p.reference.path),
                         "participant": row.participant, "session": row.session or "", "task": row.task or "",
                         "run": row.run or "", "mapping": "", "segments": "", "offset_s": "",
                         "matched_on": p.matched_on})
        return pd.DataFrame(recs, columns=["webcam", "reference", "participant", "session", "task", "run", "mapping",
                                           "segments", "offset_s", "matched_on"])

    def write_manifest(self, path) -> Path:
        """Write the pairs as a manifest CSV for ``aspectus validate --manifest`` (atomically).

        Paths are relative to the manifest's folder. Ambiguous choices follow
        as commented-out lines (``#``), which the manifest reader skips, so
        the user keeps the right one by removing its ``#``.
        """
        from aspectus.atomic import write_text

        path = Path(path)
        path.parent.mkdir(parents=True, exist_ok=True)
        text = self.manifest(base=path.parent).to_csv(index=False)
        if self.ambiguous:
            text += "# ambiguous pairings - keep one line of each (remove its '#'), then run --manifest:\n"
            for a in self.ambiguous:
                text += f"# {a['problem']}\n"
                for line in a.get("choices", []):
                    p, r = _rel_or_abs(line[0], path.parent), _rel_or_abs(line[1], path.parent)
                    text += f"#{p},{r},{line[2]},{line[3]},{line[4]},{line[5]},,,,\n"
        return write_text(path, text)


def _rel_or_abs(p, base) -> str:
    """``p`` relative to ``base`` when it lies inside it, else absolute (POSIX separators)."""
    p = Path(p).resolve()
    if base is None:
        return p.as_posix()
    try:
        return p.relative_to(Path(base).resolve()).as_posix()
    except ValueError:
        return p.as_posix()


def _safe_key(key: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", key).strip("_") or "clip"


def _merged(p: Pair) -> dict:
    out = {k: v for k, v in p.reference.labels.items() if v}
    out.update({k: v for k, v in p.clip.labels.items() if v})
    return out


# ----------------------------------------------------------------------------- discovery


def _read_status(folder: Path) -> dict[str, dict]:
    p = folder / "status.csv"
    if not p.is_file():
        return {}
    try:
        df = pd.read_csv(p, dtype=str, keep_default_na=False)
    except Exception as exc:  # noqa: BLE001 - pandas raises several parser errors
        raise AspectusInputError(f"cannot read the batch's status table ({exc})", path=p,
                                hint="run `aspectus batch` again to rewrite it, or delete it") from None
    if "key" not in df.columns:
        raise AspectusInputError("status.csv has no 'key' column", path=p,
                                hint="is this the output folder of `aspectus batch`? delete the file otherwise")
    return {str(r["key"]): {c: str(r[c]).strip() for c in df.columns} for _, r in df.iterrows()}


def find_clip_folders(folder, *, label_pattern: str | None = None
                      ) -> tuple[list[ClipFolder], list[tuple[str, str]], list[tuple[Path, str]]]:
    """The processed clips in an output folder of ``aspectus batch`` / ``aspectus process``.

    Returns
    -------
    clips : list of ClipFolder
        Sub-folders with a ``samples.parquet``, sorted by name, with labels.
    not_processed : list of (key, reason)
        Clips that ``status.csv`` lists without outputs (failed, pending).
    ignored : list of (path, reason)
        Other sub-folders.
    """


    root = Path(folder)
    if not root.is_dir():
        raise AspectusInputError("webcam folder not found", path=root,
                                hint="give the output folder of `aspectus batch` or `aspectus process`")
    if (root / "samples.parquet").is_file():
        raise AspectusInputError("is the output folder of one clip, not of a study", path=root,
                                hint="validate it against one reference file (aspectus validate CLIP_FOLDER FILE), "
                                     "or give the folder above it")
    status = _read_status(root)
    clips, not_processed, ignored = [], [], []
    for d in sorted((p for p in root.iterdir() if p.is_dir() and not p.name.startswith(".")), key=lambda p: p.name):
        st = status.get(d.name)
        if not (d / "samples.parquet").is_file():
            if st is not None:
                not_processed.append((d.name, f"{st.get('status') or 'no outputs'}"
                                      + (f": {st['reason']}" if st.get("reason") else "") + " in status.csv"))
            elif (d / "run.json").is_file() or any(d.glob("*.parquet")):
                ignored.append((d, "no samples.parquet"))
            continue
        run = read_run_json(d) or {}
        clip = run.get("clip")
        labels, source = _pattern(d.name, label_pattern), "--labels"
        if not labels.get("participant") and st is not None:
            labels = {k: st.get(k) for k in LABEL_KEYS if st.get(k)}
            source = "status.csv"
        if not labels.get("participant"):
            labels = bids_labels(d.name, source=d)
            if not labels.get("participant") and clip:
                tail = "/".join(Path(clip).parts[-4:])
                try:
                    labels = bids_labels(tail)
                except AspectusInputError:
                    labels = {}
            source = "BIDS names" if labels else ""
        clips.append(ClipFolder(key=d.name, path=d, labels=labels, label_source=source, clip=clip))
    for key, st in status.items():
        if not (root / key).is_dir():
            not_processed.append((key, f"{st.get('status') or 'no outputs'}"
                                  + (f": {st['reason']}" if st.get("reason") else "") + " in status.csv"))
    if not clips:
        raise AspectusInputError("no processed clips here (no sub-folder holds a samples.parquet)", path=root,
                                hint="give the output folder of `aspectus batch` or `aspectus process` (the folder "
                                     "that holds one sub-folder per clip)")
    return clips, not_processed, ignored


def find_references(folder, *, tables: bool = False, label_pattern: str | None = None,
                    reference_glob: str | None = None) -> tuple[list[ReferenceFile], list[tuple[Path, str]]]:
    """Reference recordings under a folder (recursively): BIDS physio files, and plain tables when ``tables``.

    Returns the references (sorted by relative path, with labels) and the
    files that were not used, each with the reason.
    """
    root = Path(folder)
    if not root.is_dir():
        raise AspectusInputError("reference folder not found", path=root,
                                hint="give the folder that holds the lab tracker's recordings")
    refs, ignored = [], []
    for dirpath, dirnames, filenames in os.walk(root):
        dirnames[:] = sorted(n for n in dirnames if not n.startswith(".") and n not in SKIP_DIRS)
        for name in sorted(filenames):
            if name.startswith("."):
                continue
            p = Path(dirpath) / name
            rel = p.relative_to(root).as_posix()
            if is_bids_physio(name):
                kind = "bids"
            elif name.lower().endswith(TABLE_SUFFIXES) and not _BIDS_OTHER.search(name):
                kind = "table"
                if not tables:
                    ignored.append((p, "a plain table: give --mapping FILE (or the column options) to use plain "
                                       "tables as references"))
                    continue
            else:
                continue
            if reference_glob and not (fnmatch.fnmatch(name, reference_glob) or fnmatch.fnmatch(rel, reference_glob)):
                ignored.append((p, f"does not match --reference-glob {reference_glob}"))
                continue
            labels, source = _pattern(rel, label_pattern), "--labels"
            if not labels.get("participant"):
                labels, source = bids_labels(rel, source=p), "BIDS names"
            refs.append(ReferenceFile(path=p, rel=rel, kind=kind, labels=labels,
                                      label_source=source if labels else ""))
    if not refs:
        what = "BIDS *_physio.tsv.gz files" + (" or tables" if tables else "")
        raise AspectusInputError(f"no reference recordings here (looked for {what}"
                                f"{', matching ' + reference_glob if reference_glob else ''}, in sub-folders too)",
                                path=root, hint="give the folder of the lab tracker's recordings; plain tables "
                                                "need --mapping FILE")
    return refs, ignored


# ----------------------------------------------------------------------------- pairing


def _agreement(cl: dict, rl: dict) -> list[str] | None:
    """Entities on which clip and reference agree, or None when they contradict (participant required)."""
    if not (cl.get("participant") and rl.get("participant")):
        return None
    if _norm("participant", cl["participant"]) != _norm("participant", rl["participant"]):
        return None
    matched = ["participant"]
    for k in LABEL_KEYS[1:]:
        if cl.get(k) and rl.get(k):
            if _norm(k, cl[k]) != _norm(k, rl[k]):
                return None
            matched.append(k)
    return matched


def pair_folders(webcam_folder, reference_folder, *, label_pattern: str | None = None, tables: bool = False,
                 reference_glob: str | None = None) -> FolderPairing:
    """Pair the processed clips of ``webcam_folder`` with the references under ``reference_folder``.

    See the module docstring for the rules. Ambiguous pairings are collected
    in ``FolderPairing.ambiguous`` (call :meth:`FolderPairing.raise_if_ambiguous`);
    ambiguous clips and references are in no pair.

    Parameters
    ----------
    webcam_folder : path-like
        Output folder of ``aspectus batch`` or ``aspectus process``.
    reference_folder : path-like
        Folder (or BIDS tree) of reference recordings.
    label_pattern : str, optional
        Regular expression with named groups ``participant``, ``session``,
        ``task``, ``run``, searched in clip folder names and reference paths.
    tables : bool
        Also consider plain tables (``.csv``/``.tsv``/``.txt``) as references
        (they need a column mapping to be read).
    reference_glob : str, optional
        Only references whose file name or relative path matches this
        shell pattern (e.g. ``*recording-eye1_physio.tsv.gz``).
    """
    clips, not_processed, ignored_c = find_clip_folders(webcam_folder, label_pattern=label_pattern)
    refs, ignored_r = find_references(reference_folder, tables=tables, label_pattern=label_pattern,
                                      reference_glob=reference_glob)
    chosen: dict[int, tuple[int, str]] = {}
    ambiguous: list[dict] = []
    unmatched: list[tuple[ClipFolder, str]] = []
    ambiguous_clips: set[int] = set()
    for ci, c in enumerate(clips):
        cands = []
        for ri, r in enumerate(refs):
            m = _agreement(c.labels, r.labels)
            if m is not None:
                cands.append((len(m), ri, "labels: " + ", ".join(m)))
        if not cands:
            names = {c.key.lower()} | ({Path(c.clip).stem.lower()} if c.clip else set())
            cands = [(0, ri, "identical stem") for ri, r in enumerate(refs) if r.stem.lower() in names]
        if not cands:
            if c.labels.get("participant"):
                why = f"no reference with {_describe(c.labels)} ({c.label_source})"
            else:
                why = (f"its name carries no participant label and no reference is named {c.key}; take labels from "
                       "the names with --labels REGEX, e.g. '(?P<participant>p\\d+)_(?P<session>s\\d+)'")
            unmatched.append((c, why))
            continue
        best = max(s for s, _, _ in cands)
        top = [(ri, how) for s, ri, how in cands if s == best]
        if len(top) > 1:
            ambiguous_clips.add(ci)
            ambiguous.append({
                "problem": f"clip folder {c.key} ({_describe(c.labels)}) fits two references equally well",
                "first": refs[top[0][0]].path, "second": refs[top[1][0]].path, "path": c.path,
                "webcam": str(c.path), "reference": "; ".join(str(refs[ri].path) for ri, _ in top),
                "choices": [(c.path, refs[ri].path, *_row_labels(c, refs[ri])) for ri, _ in top]})
            continue
        chosen[ci] = top[0]
    # a reference claimed by two clips
    by_ref: dict[int, list[int]] = {}
    for ci, (ri, _) in chosen.items():
        by_ref.setdefault(ri, []).append(ci)
    pairs = []
    for ri, cis in by_ref.items():
        if len(cis) > 1:
            r = refs[ri]
            ambiguous.append({
                "problem": f"reference {r.rel} ({_describe(r.labels)}) fits two clip folders",
                "first": clips[cis[0]].path, "second": clips[cis[1]].path, "path": r.path,
                "webcam": "; ".join(str(clips[ci].path) for ci in cis), "reference": str(r.path),
                "choices": [(clips[ci].path, r.path, *_row_labels(clips[ci], r)) for ci in cis]})
            ambiguous_clips.update(cis)
            continue
        ci = cis[0]
        pairs.append(Pair(clip=clips[ci], reference=refs[ri], matched_on=chosen[ci][1]))
    pairs.sort(key=lambda p: p.clip.key)
    used = {id(p.reference) for p in pairs}
    claimed = {ri for ri, cis in by_ref.items()} | {
        ri for a in ambiguous for ri, r in enumerate(refs) if str(r.path) in str(a.get("reference", "")).split("; ")}
    lonely = [r for ri, r in enumerate(refs) if id(r) not in used and ri not in claimed]
    return FolderPairing(webcam_folder=Path(webcam_folder), reference_folder=Path(reference_folder), pairs=pairs,
                         clips_without_reference=unmatched, references_without_clip=lonely,
                         not_processed=not_processed, ignored=ignored_c + ignored_r, ambiguous=ambiguous)


def _row_labels(c: ClipFolder, r: ReferenceFile) -> tuple[str, str, str, str]:
    lab = _merged(Pair(c, r, ""))
    return (lab.get("participant") or _safe_key(c.key), lab.get("session") or "", lab.get("task") or "",
            lab.get("run") or "")
