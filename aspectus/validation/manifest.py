"""Validation manifests: which webcam output goes with which reference recording (one row per pair)."""
from __future__ import annotations

import io
import re
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from aspectus.labels import guess_labels
from aspectus.errors import AspectusInputError



@dataclass
class StudyRow:
    """One line of a validation manifest (or one pair found in folder mode)."""

    webcam: Path
    reference: Path
    participant: str
    session: str | None = None
    mapping: Path | None = None
    segments: Path | None = None
    offset_s: float | None = None
    line: int = 0
    task: str | None = None
    run: str | None = None

    @property
    def key(self) -> str:
        """``participant[_session][_task][_run]``: the name of the pair's output folder."""
        return "_".join(v for v in (self.participant, self.session, self.task, self.run) if v)


def read_validation_manifest(path) -> list[StudyRow]:
    """Read a manifest CSV: webcam, reference, optional participant, session, task, run, mapping, segments, offset_s.

    Relative paths are relative to the manifest's folder. ``webcam`` is a
    clip's output folder (or the clip, processed on the way). Lines starting
    with ``#`` are comments; other columns are ignored.
    """
    path = Path(path)
    if not path.is_file():
        raise AspectusInputError("manifest not found", path=path)
    # only whole lines starting with "#" are comments: a "#" inside a path ("Class #3/") is part of it
    try:
        lines = path.read_text(encoding="utf-8-sig").splitlines()
    except (OSError, UnicodeDecodeError) as exc:
        raise AspectusInputError(f"cannot read the manifest ({exc})", path=path) from None
    kept = [(k + 1, ln) for k, ln in enumerate(lines) if ln.strip() and not ln.lstrip().startswith("#")]
    if not kept:
        raise AspectusInputError("the manifest is empty", path=path, hint="columns: webcam, reference, participant, "
                                "session, mapping")
    file_line = [k for k, _ in kept]  # file line number of each table row (header first)
    try:
        df = pd.read_csv(io.StringIO("\n".join(ln for _, ln in kept)), sep=None, engine="python", dtype=str,
                         keep_default_na=False)
    except Exception as exc:  # noqa: BLE001 - pandas raises several parser errors
        raise AspectusInputError(f"cannot read the manifest as a table ({exc})", path=path) from None
    df.columns = [c.strip().lower() for c in df.columns]
    for need in ("webcam", "reference"):
        if need not in df.columns:
            raise AspectusInputError(f"the manifest has no {need!r} column (it has {', '.join(df.columns)})",
                                    path=path, where="header",
                                    hint="columns: webcam, reference, participant, session, mapping")
    if not len(df):
        raise AspectusInputError("the manifest lists no pairs", path=path)
    base = path.parent
    rows, seen = [], set()
    for i, r in df.iterrows():
        line = file_line[int(i) + 1] if int(i) + 1 < len(file_line) else int(i) + 2

        def p(col):
            v = str(r.get(col, "")).strip()  # noqa: B023 - used within the iteration
            if not v:
                return None
            q = Path(v)
            return q if q.is_absolute() else base / q

        cam, ref = p("webcam"), p("reference")
        if cam is None or ref is None:
            raise AspectusInputError("webcam and reference must both be given", path=path, where=f"row {line}")
        for what, q in (("webcam", cam), ("reference", ref)):
            if not q.exists():
                raise AspectusInputError(f"{what} {q} does not exist", path=path, where=f"row {line}",
                                        hint="paths are relative to the manifest's folder")
        participant = str(r.get("participant", "")).strip() or _guess_participant(cam, ref) or f"row{line}"
        label = lambda col: str(r.get(col, "")).strip() or None  # noqa: E731, B023 - used within the iteration
        off = str(r.get("offset_s", "")).strip()
        try:
            offset = float(off) if off else None
        except ValueError:
            raise AspectusInputError(f"offset_s {off!r} is not a number of seconds", path=path,
                                    where=f"row {line}") from None
        row = StudyRow(webcam=cam, reference=ref, participant=participant, session=label("session"),
                       mapping=p("mapping"), segments=p("segments"), offset_s=offset, line=line, task=label("task"),
                       run=label("run"))
        if row.key in seen:
            raise AspectusInputError(f"participant/session {row.key} appears twice", path=path, where=f"row {line}",
                                    hint="give the rows different session, task or run labels")
        seen.add(row.key)
        if not re.fullmatch(r"[A-Za-z0-9_.-]+", row.key):
            raise AspectusInputError(f"participant/session {row.key!r} must be letters, digits, _ . -",
                                    path=path, where=f"row {line}")
        rows.append(row)
    return rows


def _guess_participant(*paths) -> str | None:
    for q in paths:
        p = guess_labels(Path(q).name.split(".")[0]).get("participant")
        if p and re.fullmatch(r"p\d+", p):
            return p
    return None


