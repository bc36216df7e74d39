"""Reference tracker recordings read into aspectus's samples (and events) tables.

* :func:`read_bids_physio` - BIDS eye-tracking recordings (``*_physio.tsv.gz``).
* :func:`read_gaze_table` with a :class:`TableMapping` - any delimited table.
* :func:`read_reference` - either of the two, chosen by the file name.
"""
from __future__ import annotations

import re
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from aspectus.errors import ReferenceFormatError
from aspectus.reference.screen import ScreenGeometry
from aspectus.reference.bids import ReferenceRecording, read_bids_physio, write_bids_physio
from aspectus.reference.table import TableMapping, events_from_labels, read_gaze_table

__all__ = ["ReferenceRecording", "TableMapping", "events_from_labels", "read_bids_physio", "read_gaze_table",
           "read_reference", "write_bids_physio", "is_bids_physio", "READERS", "ReferenceFormat"]


def is_bids_physio(path) -> bool:
    """True when ``path`` is named like a BIDS physiological recording."""
    return bool(re.search(r"_physio\.tsv(\.gz)?$", Path(path).name))


@dataclass(frozen=True)
class ReferenceFormat:
    """A reference file type: how it is recognised by its name, and its reader.

    ``read(path, mapping=..., screen=...)`` returns a :class:`ReferenceRecording`.
    """

    name: str
    matches: Callable[[Path], bool]
    read: Callable[..., ReferenceRecording]


#: file type -> reader, tried in order; a file no entry matches is read as a delimited table through a
#: :class:`TableMapping`. A new format adds one entry here (DEVELOPERS.md, "A new reference file format").
READERS: list[ReferenceFormat] = []


def read_reference(path, mapping: TableMapping | None = None, *,
                   screen: ScreenGeometry | None = None) -> ReferenceRecording:
    """Read a reference recording: BIDS by its name, otherwise a table through ``mapping``.

    Parameters
    ----------
    path : path-like
        ``*_physio.tsv.gz`` or any delimited gaze table.
    mapping : TableMapping, optional
        Required for tables; ignored for BIDS files.
    screen : ScreenGeometry, optional
        Screen geometry for BIDS files whose dataset does not give it.

    Returns
    -------
    ReferenceRecording
        For a table, ``events`` comes from its event column (runs of equal
        labels), ``messages`` from event-column values that are not event
        types (e.g. a logged marker).

    Examples
    --------
    >>> rec = read_reference(sample_clips / "lab_tracker" /
    ...                      "sub-p01_ses-s01_task-reading_recording-eye1_physio.tsv.gz")
    >>> round(rec.rate_hz, 3), len(rec.samples)
    (250.0, 5313)
    >>> rec.screen.width_mm, rec.screen.distance_mm, rec.screen.width_px
    (531.0, 650.0, 1920)
    >>> rec.samples[["t_s", "valid", "yaw_deg", "pitch_deg"]].head(3).round(3)
         t_s  valid  yaw_deg  pitch_deg
    0  0.000   True   -8.158      3.852
    1  0.004   True   -8.407      3.939
    2  0.008   True   -7.879      3.706
    """
    path = Path(path)
    for fmt in READERS:
        if fmt.matches(path):
            return fmt.read(path, mapping=mapping, screen=screen)
    if mapping is None:
        raise ReferenceFormatError("not a BIDS *_physio.tsv.gz file, and no column mapping was given", path=path,
                                   hint="give --time-col, --time-unit, --x-col, --y-col, --units (or --mapping FILE)")
    return _read_table(path, mapping=mapping, screen=screen)


def _read_bids(path: Path, *, mapping=None, screen=None) -> ReferenceRecording:
    return read_bids_physio(path, screen=screen)


def _read_table(path: Path, *, mapping: TableMapping, screen=None) -> ReferenceRecording:
    samples = read_gaze_table(path, mapping)
    events = None
    messages = pd.DataFrame({"label": pd.Series(dtype=str), "t_s": pd.Series(dtype=float)})
    if "event_label" in samples.columns:
        events = events_from_labels(samples["t_s"], samples["event_label"])
        if not len(events):
            events = None
        if "event_raw" in samples.columns:
            raw = samples["event_raw"].astype(str)
            other = (samples["event_label"] == "other").to_numpy()
            first = other & np.r_[True, raw.to_numpy()[1:] != raw.to_numpy()[:-1]]
            messages = pd.DataFrame({"label": raw[first].to_numpy(dtype=str),
                                     "t_s": samples["t_s"].to_numpy()[first]})
    t = samples["t_s"].to_numpy()
    rate = 1.0 / float(np.median(np.diff(t))) if len(t) > 1 else float("nan")
    return ReferenceRecording(samples=samples, events=events, messages=messages, screen=mapping.screen,
                              clock_start_s=float(samples.attrs.get("clock_start_s", 0.0)), rate_hz=rate,
                              path=path, meta={"format": "table", "mapping": mapping.to_dict()})


READERS.append(ReferenceFormat("bids", is_bids_physio, _read_bids))
