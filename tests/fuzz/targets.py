"""What the fuzzers feed: one function per parser, and the rule every outcome must follow.

Each target writes the fuzzed bytes to a file (the readers take paths, as in
real use) and calls one parser. The rule (:func:`check_outcome`): the parser
either returns a well-formed result, or raises
:class:`aspectus.errors.AspectusInputError` whose message names the file. Any
other exception - a ``KeyError``, ``IndexError``, ``UnicodeDecodeError``,
``ValueError`` from deep inside pandas - is a bug: the user would see a
traceback instead of a message.

Used by ``tests/cli/test_fuzz_parsers.py`` (hypothesis, in the normal suite) and
by ``tests/fuzz/fuzz_readers.py`` (atheris, coverage-guided, run by hand).
"""
from __future__ import annotations

import gzip
import json
import math
import sys
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd

REPO = Path(__file__).resolve().parents[2]
if str(REPO) not in sys.path:
    sys.path.insert(0, str(REPO))

from aspectus.errors import AspectusInputError  # noqa: E402

#: the column names a fuzzed gaze table is read with
TABLE_MAPPING = {"time_col": "t", "time_unit": "ms", "x_col": "x", "y_col": "y", "units": "deg",
                 "validity_col": None}

BIDS_SIDECAR = {"SamplingFrequency": 250, "StartTime": 0, "Columns": ["timestamp", "x_coordinate", "y_coordinate"],
                "PhysioType": "eyetrack", "RecordedEye": "right", "SampleCoordinateSystem": "gaze-on-screen",
                "timestamp": {"Units": "ms"}, "x_coordinate": {"Units": "deg"}, "y_coordinate": {"Units": "deg"}}


class FuzzFailure(AssertionError):
    """A parser broke the rule: it raised something other than AspectusInputError, or returned nonsense."""


def check_samples_result(df: pd.DataFrame) -> None:
    """A samples table from a reader: required columns, finite increasing times, valid means finite angles."""
    for col in ("t_s", "valid", "yaw_deg", "pitch_deg"):
        if col not in df.columns:
            raise FuzzFailure(f"result lacks column {col}")
    t = df["t_s"].to_numpy(dtype=float)
    if len(t) and (not np.isfinite(t).all() or (np.diff(t) <= 0).any()):
        raise FuzzFailure("result times are not finite and increasing")
    ok = df["valid"].to_numpy(dtype=bool)
    ang = df[["yaw_deg", "pitch_deg"]].to_numpy(dtype=float)[ok]
    if not np.isfinite(ang).all():
        raise FuzzFailure("a valid sample has a non-finite angle")
    if len(ang) and np.abs(ang).max() > 360.0:
        raise FuzzFailure(f"a valid sample has an angle of {np.abs(ang).max():.3g} deg")


def check_segments_result(df: pd.DataFrame) -> None:
    if list(df.columns) != ["label", "onset_s", "offset_s"]:
        raise FuzzFailure(f"segments have columns {list(df.columns)}")
    on, off = df["onset_s"].to_numpy(float), df["offset_s"].to_numpy(float)
    if not (np.isfinite(on).all() and np.isfinite(off).all() and (off > on).all()):
        raise FuzzFailure("segments with non-finite or reversed times")
    if (df["label"].astype(str).str.len() == 0).any():
        raise FuzzFailure("a segment without a label")


def check_manifest_result(jobs) -> None:
    if not jobs:
        raise FuzzFailure("a manifest read with no clips")
    keys = [j.key for j in jobs]
    if len(set(keys)) != len(keys):
        raise FuzzFailure(f"two clips got the same output key: {keys}")
    for k in keys:
        parts = Path(k).parts
        if not k or k.startswith(".") or ".." in parts or Path(k).is_absolute():
            raise FuzzFailure(f"output key {k!r} is empty, hidden or leaves the output folder")


def _write(folder: Path, name: str, data: bytes) -> Path:
    p = folder / name
    p.write_bytes(data)
    return p


def read_table_target(data: bytes, folder: Path):
    from aspectus.reference import TableMapping, read_gaze_table

    p = _write(folder, "gaze_table.csv", data)
    df = read_gaze_table(p, TableMapping(**TABLE_MAPPING))
    check_samples_result(df)
    return p


def read_bids_target(data: bytes, folder: Path, *, compress: bool = True):
    from aspectus.reference.bids import read_bids_physio

    base = "sub-p01_ses-s01_task-reading_recording-eye1_physio"
    p = _write(folder, f"{base}.tsv.gz", gzip.compress(data, mtime=0) if compress else data)
    (folder / f"{base}.json").write_text(json.dumps(BIDS_SIDECAR))
    rec = read_bids_physio(p)
    check_samples_result(rec.samples)
    return p


def read_sidecar_target(data: bytes, folder: Path):
    """Fuzz the JSON sidecar of a well-formed BIDS recording."""
    from aspectus.reference.bids import read_bids_physio

    base = "sub-p01_ses-s01_task-reading_recording-eye1_physio"
    rows = "\n".join(f"{i * 4.0}\t{math.sin(i / 9):.3f}\t{math.cos(i / 7):.3f}" for i in range(50)) + "\n"
    p = _write(folder, f"{base}.tsv.gz", gzip.compress(rows.encode(), mtime=0))
    (folder / f"{base}.json").write_bytes(data)
    rec = read_bids_physio(p)
    check_samples_result(rec.samples)
    return folder / f"{base}.json"


def read_mapping_target(data: bytes, folder: Path):
    from aspectus.reference import TableMapping

    p = _write(folder, "mapping.json", data)
    TableMapping.load(p)
    return p


def read_segments_target(data: bytes, folder: Path):
    from aspectus.events.segments import read_segments

    p = _write(folder, "segments.csv", data)
    check_segments_result(read_segments(p))
    return p


def read_manifest_target(data: bytes, folder: Path):
    from aspectus.studies.clips import read_manifest

    p = _write(folder, "manifest.csv", data)
    check_manifest_result(read_manifest(p))
    return p


def read_validation_manifest_target(data: bytes, folder: Path):
    from aspectus.validation.manifest import read_validation_manifest

    p = _write(folder, "validation_manifest.csv", data)
    read_validation_manifest(p)
    return p


def read_gzip_table_target(data: bytes, folder: Path):
    """The raw bytes as a ``.csv.gz`` table: damaged, truncated or inflating gzip streams (issue 17.10)."""
    from aspectus.reference import TableMapping, read_gaze_table

    p = _write(folder, "gaze_table.csv.gz", b"\x1f\x8b" + data if not data.startswith(b"\x1f\x8b") else data)
    df = read_gaze_table(p, TableMapping(**TABLE_MAPPING))
    check_samples_result(df)
    return p


def read_study_target(data: bytes, folder: Path):
    from aspectus.studies.project import load_study

    p = _write(folder, "study.json", data)
    load_study(p)
    return p


TARGETS = {
    "table": read_table_target,
    "gzip_table": read_gzip_table_target,
    "study": read_study_target,
    "bids": read_bids_target,
    "sidecar": read_sidecar_target,
    "mapping": read_mapping_target,
    "segments": read_segments_target,
    "manifest": read_manifest_target,
    "validation_manifest": read_validation_manifest_target,
}

#: file name each target writes (the error must name it)
TARGET_FILES = {"table": "gaze_table.csv", "gzip_table": "gaze_table.csv.gz", "study": "study.json",
                "bids": "_physio.", "sidecar": "_physio.", "mapping": "mapping.json",
                "segments": "segments.csv", "manifest": "manifest.csv",
                "validation_manifest": "validation_manifest.csv"}


def check_outcome(target: str, data: bytes, folder: Path | None = None) -> str:
    """Run one target on ``data``; return ``"ok"`` or ``"input error"``; raise :class:`FuzzFailure` on a bug."""
    import warnings

    own = folder is None
    tmp = tempfile.TemporaryDirectory(prefix="aspectus-fuzz-") if own else None
    folder = Path(tmp.name) if own else Path(folder)
    try:
        with warnings.catch_warnings():
            # project warnings about degenerate data are allowed; they are not crashes
            warnings.simplefilter("ignore")
            TARGETS[target](data, folder)
        return "ok"
    except AspectusInputError as exc:
        msg = str(exc)
        if TARGET_FILES[target] not in msg:
            raise FuzzFailure(f"{target}: error does not name the file: {msg!r}") from exc
        return "input error"
    except FuzzFailure:
        raise
    except Exception as exc:  # noqa: BLE001 - this is what the fuzzer looks for
        raise FuzzFailure(f"{target}: {type(exc).__name__}: {exc}") from exc
    finally:
        if tmp is not None:
            tmp.cleanup()
