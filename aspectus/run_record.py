"""A clip's output folder and its ``run.json``: the one reader.

``run.json`` is written last, after every output it lists (with checksums),
so its presence means the clip's processing finished. Every part of aspectus
that asks "is this clip done, with which parameters?" reads it here.
"""
from __future__ import annotations

import json
import os
from pathlib import Path

__all__ = ["RUN_JSON", "run_json_path", "read_run_json", "missing_output"]

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
