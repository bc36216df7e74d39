"""A clip's output folder and its ``run.json``: the one reader.

``run.json`` is written last, after every output it lists (with checksums),
so its presence means the clip's processing finished. Every part of aspectus
that asks "is this clip done, with which parameters?" reads it here.
"""
from __future__ import annotations

import json
from pathlib import Path

__all__ = ["RUN_JSON", "run_json_path", "read_run_json"]

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
