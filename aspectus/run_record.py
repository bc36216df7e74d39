"""A clip's output folder and its ``run.json``: the one reader.

``run.json`` is written last, after every output it lists (with checksums),
so its presence means the clip's processing finished. Every part of aspectus
that asks "is this clip done, with which parameters?" reads it here.
"""
from __future__ import annotations

import json
import os
from pathlib import Path

__all__ = ["RUN_JSON", "run_json_path", "read_run_json", "missing_output", "foreign_files", "refuse_foreign_files"]

#: the sidecar's file name in a clip's output folder
RUN_JSON = "run.json"


def run_json_path(out_dir) -> Path:
    """Where a clip output folder's ``run.json`` lives."""
    return Path(out_dir) / RUN_JSON


def read_run_json(out_dir) -> dict | None:
    """The folder's ``run.json`` as a dict, or None if absent, unreadable or not a JSON object."""
    try:
        with open(run_json_path(out_dir), encoding="utf-8") as fh:
            d = json.load(fh)
    except (OSError, ValueError):
        return None
    return d if isinstance(d, dict) else None


def missing_output(out_dir, name: str) -> tuple[str, str]:
    """Why a clip output folder lacks the output ``name``, and what to do: ``(problem, hint)``.

    ``aspectus purge`` deletes the per-frame data and notes it in ``run.json`` (``purged``); the clip then
    still counts as done for ``aspectus batch``, so only processing that clip again rebuilds them.

    Examples
    --------
    >>> missing_output("no/such/folder", "samples.parquet")[0]
    'no samples.parquet (the clip has not been processed into this folder)'
    """
    out_dir = Path(out_dir)
    run = read_run_json(out_dir)
    if run is None:
        return (f"no {name} (the clip has not been processed into this folder)",
                "process the clip first (aspectus process CLIP -o OUTDIR, or aspectus batch)")
    purged = run.get("purged") if isinstance(run.get("purged"), dict) else {}
    if name in (purged.get("files") or []):
        when = str(purged.get("utc") or "")[:10]
        clip = run.get("clip")
        clip = os.path.relpath(out_dir / clip) if isinstance(clip, str) and clip else "CLIP"
        return (f"{name} was deleted by `aspectus purge`" + (f" on {when}" if when else ""),
                f"process the clip again to rebuild it: aspectus process {clip} -o {os.path.relpath(out_dir.parent)} "
                "(aspectus batch counts a purged clip as done and skips it)")
    return (f"{name} is missing, though run.json says the clip was processed",
            "process the clip again to rebuild it (aspectus process CLIP -o OUTDIR)")


def foreign_files(out_dir, names) -> list[str]:
    """Which of the files ``names`` (the ones a run is about to write) already sit in ``out_dir`` although
    aspectus did not write them there: all present ones when the folder has no ``run.json`` of aspectus,
    else those its ``run.json`` does not list among its outputs.

    Examples
    --------
    >>> foreign_files("no/such/folder", ["samples.csv"])
    []
    """
    out_dir = Path(out_dir)
    present = [n for n in names if (out_dir / n).exists() or (out_dir / n).is_symlink()]
    if not present:
        return []
    run = read_run_json(out_dir)
    if run is None or "aspectus" not in run:  # no run.json, or someone else's: nothing here is known to be ours
        return present
    own = {RUN_JSON} | set((run.get("outputs") or {}) if isinstance(run.get("outputs"), dict) else ())
    return [n for n in present if n not in own]


def refuse_foreign_files(out_dir, names) -> None:
    """Raise :class:`aspectus.errors.AspectusInputError` naming the folder when writing ``names`` into it would
    overwrite files aspectus did not write (:func:`foreign_files`); a user's own files are never replaced."""
    foreign = foreign_files(out_dir, names)
    if not foreign:
        return
    from aspectus.errors import AspectusInputError

    run = read_run_json(out_dir)
    why = ("its run.json does not list them" if run is not None and "aspectus" in run
           else "the folder has no run.json of aspectus")
    listed = ", ".join(foreign)
    raise AspectusInputError(
        f"holds {listed}, which aspectus did not write ({why}); processing would overwrite "
        f"{'it' if len(foreign) == 1 else 'them'}, so nothing was written", path=out_dir,
        hint="choose another output folder (-o OUTDIR), or move those files out of this folder and run again")
