"""BIDS eye-tracking recordings: read into the samples table, and write.

BIDS (version 1.10 and later) stores an eye tracker's recording as a
physiological recording with ``PhysioType`` ``eyetrack``: one
``*_recording-<label>_physio.tsv.gz`` per eye, tab-separated and without a
header row, its columns named by ``Columns`` in the JSON sidecar
(``timestamp``, ``x_coordinate``, ``y_coordinate``, ``pupil_size``, ...);
missing values are ``n/a``. The sidecar gives ``SamplingFrequency``,
``StartTime``, ``RecordedEye``, ``SampleCoordinateSystem`` and the units of
each column. Events the tracker detected go into
``*_recording-<label>_physioevents.tsv.gz`` (``onset``, ``duration``,
``trial_type``, ``blink``, ``message``); the screen geometry is in the task's
``*_events.json`` under ``StimulusPresentation`` (``ScreenDistance`` and
``ScreenSize`` in metres, ``ScreenResolution`` in pixels, ``ScreenOrigin``).
Sidecars are looked up beside the data file and, by the BIDS inheritance
principle, in parent folders (less specific first, the nearest wins).

Reference: BIDS specification, "Physiological recordings" and the
eye-tracking appendix (bids-specification.readthedocs.io), from memory.
"""
from __future__ import annotations

import gzip
import io
import json
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from aspectus.atomic import write_bytes, write_json
from aspectus.errors import ParameterError, ReferenceFormatError
from aspectus.reference.screen import ScreenGeometry
from aspectus.schema import EVENT_COLUMNS
from aspectus.reference.table import (MISSING_TOKENS, TIME_UNITS, RawTable, check_median_on_screen,
                                      check_position_range, check_times, numeric_column, positions_to_deg,
                                      read_raw_table)

#: BIDS unit strings for time columns -> seconds per unit
BIDS_TIME_UNITS = {"s": 1.0, "sec": 1.0, "seconds": 1.0, "ms": 1e-3, "msec": 1e-3, "us": 1e-6, "µs": 1e-6,
                   "μs": 1e-6, "microseconds": 1e-6, "ns": 1e-9}
#: BIDS unit strings for gaze position columns -> aspectus position unit
BIDS_POSITION_UNITS = {"pixel": "px", "pixels": "px", "px": "px", "deg": "deg", "degree": "deg",
                       "degrees": "deg", "mm": "mm", "m": "m", "cm": "cm", "a.u.": "norm", "norm": "norm",
                       "normalized": "norm", "normalised": "norm"}
#: how far the timestamps' median rate may stray from SamplingFrequency before it is an error
RATE_TOLERANCE = 0.05


@dataclass
class ReferenceRecording:
    """A reference tracker recording read into aspectus's tables.

    Attributes
    ----------
    samples : pandas.DataFrame
        Samples table (:mod:`aspectus.schema`), ``t_s`` in seconds from the
        first sample.
    events : pandas.DataFrame or None
        The tracker's own events (type, onset_s, offset_s, duration_ms) on the
        same time axis as ``samples``, if the recording has any.
    messages : pandas.DataFrame
        Labelled time points (``label``, ``t_s``) usable as shared markers.
    screen : ScreenGeometry or None
        Screen geometry, if known.
    clock_start_s : float
        Raw clock time of the first sample, in seconds.
    rate_hz : float
        Sampling rate in Hz (measured from the timestamps).
    path : Path
        The data file.
    meta : dict
        Sidecar content and what was read from where.
    """

    samples: pd.DataFrame
    events: pd.DataFrame | None
    messages: pd.DataFrame
    screen: ScreenGeometry | None
    clock_start_s: float
    rate_hz: float
    path: Path
    meta: dict = field(default_factory=dict)


_ENTITY_RE = re.compile(r"([a-zA-Z0-9]+)-([a-zA-Z0-9]+)")


def _entities(name: str) -> dict[str, str]:
    stem = name.split(".")[0]
    parts = stem.split("_")
    return {m.group(1): m.group(2) for p in parts[:-1] if (m := _ENTITY_RE.fullmatch(p))}


def _suffix(name: str) -> str:
    return name.split(".")[0].split("_")[-1]


def _load_json(path: Path) -> dict:
    try:
        d = json.loads(path.read_text(encoding="utf-8-sig"))
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise ReferenceFormatError(f"sidecar is not valid JSON ({exc})", path=path) from None
    if not isinstance(d, dict):
        raise ReferenceFormatError("sidecar must hold a JSON object", path=path)
    return d


def find_sidecars(data_path: Path, suffix: str, *, levels: int = 4) -> list[Path]:
    """JSON sidecars with ``suffix`` that apply to ``data_path``, least specific first.

    A sidecar applies when its entities are a subset of the data file's
    entities (BIDS inheritance principle); it may sit beside the file or in a
    parent folder up to ``levels`` above.
    """
    ents = _entities(data_path.name)
    found = []
    folder = data_path.parent
    for depth in range(levels + 1):
        if folder.is_dir():
            for cand in folder.glob(f"*{suffix}.json"):
                if _suffix(cand.name) != suffix:
                    continue
                ce = _entities(cand.name) if "_" in cand.name else {}
                if all(ents.get(k) == v for k, v in ce.items()):
                    found.append((depth, len(ce), cand))
        if folder.parent == folder:
            break
        folder = folder.parent
    found.sort(key=lambda x: (-x[0], x[1]))
    return [p for _, _, p in found]


def _merged_sidecar(data_path: Path, suffix: str) -> tuple[dict, list[Path]]:
    paths = find_sidecars(data_path, suffix)
    merged: dict = {}
    for p in paths:
        merged.update(_load_json(p))
    return merged, paths


def screen_from_stimulus(stim: dict, *, path: Path) -> tuple[ScreenGeometry | None, str]:
    """``StimulusPresentation`` (metres, pixels) to a ScreenGeometry and the origin (``top-left`` ...)."""
    if not stim:
        return None, "top-left"

    def pair(key, kind):
        v = stim.get(key)
        if v is None:
            return None
        if not (isinstance(v, (list, tuple)) and len(v) == 2 and all(isinstance(a, (int, float)) for a in v)):
            raise ReferenceFormatError(f"StimulusPresentation.{key} must be two numbers ({kind}), got {v!r}",
                                       path=path)
        return float(v[0]), float(v[1])

    size_m = pair("ScreenSize", "width and height in metres")
    res = pair("ScreenResolution", "width and height in pixels")
    dist = stim.get("ScreenDistance")
    origin = stim.get("ScreenOrigin", ["top", "left"])
    if isinstance(origin, str):
        origin = re.split(r"[-_ ,]+", origin)
    origin = "-".join(sorted(str(o).lower() for o in origin)) if origin else "left-top"
    origin = {"left-top": "top-left", "bottom-left": "bottom-left", "center": "center", "centre": "center"}.get(
        origin, origin)
    if origin not in ("top-left", "bottom-left", "center"):
        raise ReferenceFormatError(f"StimulusPresentation.ScreenOrigin {stim.get('ScreenOrigin')!r} is not "
                                   "supported", path=path, hint="use [\"top\", \"left\"], [\"bottom\", \"left\"] "
                                   "or \"center\"")
    if size_m is None or dist is None:
        return None, origin
    if not isinstance(dist, (int, float)):
        raise ReferenceFormatError(f"StimulusPresentation.ScreenDistance must be a number of metres, got {dist!r}",
                                   path=path)
    if size_m[0] > 10 or dist > 10:
        raise ReferenceFormatError(
            f"StimulusPresentation gives ScreenSize {size_m} and ScreenDistance {dist}; BIDS wants metres",
            path=path, hint="write e.g. 0.531 and 0.65, not millimetres")
    try:
        screen = ScreenGeometry(width_mm=size_m[0] * 1e3, height_mm=size_m[1] * 1e3, distance_mm=float(dist) * 1e3,
                                width_px=int(res[0]) if res else None, height_px=int(res[1]) if res else None)
    except ParameterError as exc:
        raise ReferenceFormatError(f"StimulusPresentation: {exc.problem}", path=path) from None
    return screen, origin


def _column_unit(sidecar: dict, col: str, default=None):
    spec = sidecar.get(col)
    if isinstance(spec, dict) and spec.get("Units") is not None:
        return str(spec["Units"])
    return default


def _check_columns_field(sidecar: dict, sidecar_paths: list[Path], data_path: Path, *, what: str) -> list[str]:
    where = sidecar_paths[-1] if sidecar_paths else data_path
    cols = sidecar.get("Columns")
    if cols is None:
        raise ReferenceFormatError(f"the {what} sidecar has no \"Columns\" field", path=where,
                                   hint="BIDS files have no header row; the sidecar must name the columns")
    if not (isinstance(cols, list) and cols and all(isinstance(c, str) for c in cols)):
        raise ReferenceFormatError(f"\"Columns\" must be a list of column names, got {cols!r}", path=where)
    return cols


def _read_headerless(path: Path, cols: list[str], sidecar_path: Path | None) -> RawTable:
    raw = read_raw_table(path, delimiter="\t", comment="", header=False)
    if raw.frame.shape[1] != len(cols):
        raise ReferenceFormatError(
            f"the data have {raw.frame.shape[1]} columns but the sidecar's \"Columns\" names {len(cols)} "
            f"({', '.join(cols)})", path=path, where="row 1",
            hint=f"fix \"Columns\" in {sidecar_path.name if sidecar_path else 'the sidecar'} or the data file")
    raw.frame.columns = cols
    first = raw.frame.iloc[0].tolist()
    if [str(v) for v in first] == cols:  # a header row the standard does not allow: tolerate it
        raw = RawTable(frame=raw.frame.iloc[1:].reset_index(drop=True), line_no=raw.line_no[1:], path=path)
        if raw.frame.empty:
            raise ReferenceFormatError("the recording has no data rows", path=path)
    return raw


def read_bids_physio(path, *, screen: ScreenGeometry | None = None) -> ReferenceRecording:
    """Read a BIDS eye-tracking recording (``*_physio.tsv.gz`` and its sidecars).

    Parameters
    ----------
    path : path-like
        The ``*_physio.tsv.gz`` (or ``.tsv``) file. Its ``*_physio.json``,
        ``*_physioevents.tsv.gz`` (+ ``.json``) and the task's
        ``*_events.json`` are found beside it or by inheritance.
    screen : ScreenGeometry, optional
        Screen geometry overriding ``StimulusPresentation`` (needed for pixel
        coordinates when the dataset does not give it).

    Returns
    -------
    ReferenceRecording

    Raises
    ------
    aspectus.errors.ReferenceFormatError
        Missing sidecar or field, a sidecar that disagrees with the data
        (number of columns, sampling frequency), unknown units, bad cells,
        timestamps going backwards, no valid sample; the message names the
        file and the row or the sidecar field.

    Examples
    --------
    The demo's lab recording (250 Hz, screen pixels turned into degrees with
    the ``StimulusPresentation`` geometry):

    >>> rec = read_bids_physio(sample_clips / "lab_tracker" /
    ...                        "sub-p01_ses-s01_task-reading_recording-eye1_physio.tsv.gz")
    >>> rec.meta["RecordedEye"], rec.meta["units"], round(rec.rate_hz, 3)
    ('right', 'pixel', 250.0)
    >>> rec.events["type"].value_counts().to_dict()  # the tracker's own events, from *_physioevents.tsv.gz
    {'fixation': 79, 'saccade': 73, 'blink': 4}
    """
    path = Path(path)
    if not path.exists():
        raise ReferenceFormatError("file not found", path=path)
    if not re.search(r"_physio\.tsv(\.gz)?$", path.name):
        raise ReferenceFormatError("a BIDS eye-tracking recording is named *_physio.tsv.gz", path=path,
                                   hint="for another table give the column mapping (--time-col ... or --mapping)")
    sidecar, sc_paths = _merged_sidecar(path, "physio")
    if not sc_paths:
        raise ReferenceFormatError("no JSON sidecar (*_physio.json) found beside the recording", path=path,
                                   hint="BIDS recordings need their sidecar; copy it next to the .tsv.gz")
    sc_path = sc_paths[-1]
    cols = _check_columns_field(sidecar, sc_paths, path, what="physio")
    ptype = sidecar.get("PhysioType")
    if ptype is not None and str(ptype).lower() != "eyetrack":
        raise ReferenceFormatError(f"PhysioType is {ptype!r}, expected \"eyetrack\"", path=sc_path)
    fs = sidecar.get("SamplingFrequency")
    if not isinstance(fs, (int, float)) or not np.isfinite(fs) or fs <= 0:
        raise ReferenceFormatError(f"\"SamplingFrequency\" must be a positive number of Hz, got {fs!r}",
                                   path=sc_path)
    fs = float(fs)
    for need in ("x_coordinate", "y_coordinate"):
        if need not in cols:
            raise ReferenceFormatError(f"\"Columns\" has no {need!r} ({', '.join(cols)})", path=sc_path,
                                       hint="aspectus needs the gaze position columns x_coordinate, y_coordinate")
    raw = _read_headerless(path, cols, sc_path)

    # --- time
    start_time = sidecar.get("StartTime", 0.0)
    if start_time is not None and not isinstance(start_time, (int, float)):
        raise ReferenceFormatError(f"\"StartTime\" must be a number of seconds, got {start_time!r}", path=sc_path)
    if "timestamp" in cols:
        tu = _column_unit(sidecar, "timestamp", "s")
        if tu.lower() not in BIDS_TIME_UNITS and tu not in BIDS_TIME_UNITS:
            raise ReferenceFormatError(f"timestamp Units {tu!r} is not a time unit", path=sc_path,
                                       hint="use s, ms or us")
        scale = BIDS_TIME_UNITS.get(tu, BIDS_TIME_UNITS.get(tu.lower()))
        t_raw = numeric_column(raw, "timestamp", "timestamp") * scale
        check_times(t_raw, raw_line=raw.line_no, path=path, column="timestamp")
    else:
        t_raw = float(start_time or 0.0) + np.arange(len(raw.frame)) / fs
    if len(t_raw) > 2:
        measured = 1.0 / float(np.median(np.diff(t_raw)))
        if abs(measured - fs) > RATE_TOLERANCE * fs:
            raise ReferenceFormatError(
                f"\"SamplingFrequency\" says {fs:g} Hz but the timestamps run at {measured:.4g} Hz", path=sc_path,
                hint="correct SamplingFrequency (or the timestamp Units) so that sidecar and data agree")
    else:
        measured = fs

    # --- positions
    unit_raw = _column_unit(sidecar, "x_coordinate") or sidecar.get("SampleCoordinateUnits")
    unit_y = _column_unit(sidecar, "y_coordinate") or sidecar.get("SampleCoordinateUnits")
    if unit_raw is None:
        raise ReferenceFormatError("the sidecar gives no Units for x_coordinate", path=sc_path,
                                   hint="add \"x_coordinate\": {\"Units\": \"pixel\"} (or deg, mm, m)")
    if unit_y is not None and str(unit_y).lower() != str(unit_raw).lower():
        raise ReferenceFormatError(f"x_coordinate is in {unit_raw!r} but y_coordinate in {unit_y!r}",
                                   path=sc_path, hint="both gaze columns must share one unit")
    unit = BIDS_POSITION_UNITS.get(str(unit_raw).lower())
    if unit is None:
        raise ReferenceFormatError(f"x_coordinate Units {unit_raw!r} is not understood", path=sc_path,
                                   hint="use pixel, deg, mm, cm or m")
    coord_sys = str(sidecar.get("SampleCoordinateSystem", "gaze-on-screen"))
    ev_sidecar, ev_paths = _merged_sidecar(path, "events")
    stim = ev_sidecar.get("StimulusPresentation") or sidecar.get("StimulusPresentation") or {}
    stim_path = ev_paths[-1] if ev_paths else sc_path
    geo, origin = screen_from_stimulus(stim, path=stim_path)
    env = sidecar.get("EnvironmentCoordinates")
    if isinstance(env, str) and env.lower() in ("top-left", "bottom-left", "center"):
        origin = env.lower()
    if screen is not None:
        geo = screen
    x = numeric_column(raw, "x_coordinate", "gaze x")
    y = numeric_column(raw, "y_coordinate", "gaze y")
    if unit in ("m", "cm"):
        x, y = x * (1e3 if unit == "m" else 10.0), y * (1e3 if unit == "m" else 10.0)
        unit = "mm"
    if unit != "deg":
        if geo is None or (unit == "px" and geo.width_px is None):
            raise ReferenceFormatError(
                f"gaze positions in {unit_raw} need the screen geometry, and no StimulusPresentation "
                "(ScreenSize, ScreenDistance" + (", ScreenResolution" if unit == "px" else "") + ") was found",
                path=path, hint="add it to the task's *_events.json, or give --screen-size-mm, --screen-res-px "
                "and --distance-mm")
    y_up = None
    tl_origin = origin
    if origin == "bottom-left":
        y_up, tl_origin = True, "top-left"
    check_position_range(x, y, units=unit, screen=geo, path=path, line_no=raw.line_no, x_name="x_coordinate",
                         y_name="y_coordinate")
    check_median_on_screen(x, y, units=unit, screen=geo, origin=tl_origin, path=path, x_name="x_coordinate",
                           y_name="y_coordinate")
    yaw, pitch = positions_to_deg(x, y, units=unit, screen=geo, origin=tl_origin, y_up=y_up)
    valid = np.isfinite(yaw) & np.isfinite(pitch)
    t0 = float(t_raw[0])
    samples = pd.DataFrame({"t_s": t_raw - t0, "valid": valid, "yaw_deg": np.where(valid, yaw, np.nan),
                            "pitch_deg": np.where(valid, pitch, np.nan), "blink": np.zeros(len(t_raw), bool)})
    if "pupil_size" in cols:
        samples["pupil"] = numeric_column(raw, "pupil_size", "pupil size")
    if not valid.any():
        raise ReferenceFormatError(f"no valid gaze sample in {len(samples)} rows (all x/y are n/a)", path=path,
                                   hint="check that this is the right recording")

    blink_col = None
    if "blink" in cols:  # an additional 0/1 column (aspectus's own exports write one)
        b = numeric_column(raw, "blink", "blink")
        blink_col = np.isfinite(b) & (b != 0)
        samples["blink"] = blink_col

    # --- events
    events, messages, ev_meta = _read_physioevents(path, t0=t0, ts_scale=(
        BIDS_TIME_UNITS.get(_column_unit(sidecar, "timestamp", "s"), 1.0) if "timestamp" in cols else 1.0))
    if events is not None and blink_col is None:
        blinks = events[events["type"] == "blink"]
        if len(blinks):
            t = samples["t_s"].to_numpy()
            b = np.zeros(len(t), bool)
            for on, off in zip(blinks["onset_s"], blinks["offset_s"]):
                b |= (t >= on) & (t < off)
            samples["blink"] = b
    meta = {"format": "BIDS eyetrack", "sidecars": [str(p) for p in sc_paths], "events_sidecars":
            [str(p) for p in ev_paths], "SamplingFrequency": fs, "StartTime": start_time,
            "RecordedEye": sidecar.get("RecordedEye"), "SampleCoordinateSystem": coord_sys, "units": unit_raw,
            "screen_origin": origin, **ev_meta}
    samples.attrs.update(source=str(path), clock_start_s=t0)
    return ReferenceRecording(samples=samples, events=events, messages=messages, screen=geo, clock_start_s=t0,
                              rate_hz=measured, path=path, meta=meta)


def _physioevents_path(physio: Path) -> Path | None:
    name = re.sub(r"_physio\.tsv(\.gz)?$", "", physio.name)
    for ext in (".tsv.gz", ".tsv"):
        p = physio.with_name(name + "_physioevents" + ext)
        if p.exists():
            return p
    return None


def _read_physioevents(physio: Path, *, t0: float, ts_scale: float):
    empty_msgs = pd.DataFrame({"label": pd.Series(dtype=str), "t_s": pd.Series(dtype=float)})
    p = _physioevents_path(physio)
    if p is None:
        return None, empty_msgs, {}
    sidecar, sc_paths = _merged_sidecar(p, "physioevents")
    if not sc_paths:
        raise ReferenceFormatError("no JSON sidecar (*_physioevents.json) found beside the events file", path=p)
    cols = _check_columns_field(sidecar, sc_paths, p, what="physioevents")
    for need in ("onset", "duration"):
        if need not in cols:
            raise ReferenceFormatError(f"\"Columns\" has no {need!r}", path=sc_paths[-1])
    raw = _read_headerless(p, cols, sc_paths[-1])
    on_src = str(sidecar.get("OnsetSource", "")).lower()
    on_scale = BIDS_TIME_UNITS.get(_column_unit(sidecar, "onset", "ms" if on_src == "timestamp" else "s"))
    du_scale = BIDS_TIME_UNITS.get(_column_unit(sidecar, "duration", "ms" if on_src == "timestamp" else "s"))
    if on_scale is None or du_scale is None:
        raise ReferenceFormatError("onset/duration Units are not time units", path=sc_paths[-1],
                                   hint="use s or ms")
    if on_src == "timestamp":
        on_scale = ts_scale if _column_unit(sidecar, "onset") is None else on_scale
    onset = numeric_column(raw, "onset", "onset") * on_scale
    bad = ~np.isfinite(onset)
    if bad.any():
        i = int(np.argmax(bad))
        raise ReferenceFormatError("event onset is n/a", path=p, where=f"row {raw.line_no[i]}",
                                   hint="every event needs an onset")
    if on_src == "timestamp":
        onset = onset - t0
    dur = numeric_column(raw, "duration", "duration") * du_scale
    bad = np.isfinite(dur) & (dur < 0)
    if bad.any():
        i = int(np.argmax(bad))
        raise ReferenceFormatError(f"negative event duration {dur[i]:g} s", path=p, where=f"row {raw.line_no[i]}")
    tt = raw.frame["trial_type"].str.lower() if "trial_type" in cols else pd.Series([""] * len(onset))
    blink = raw.frame["blink"].str.lower().isin(["1", "1.0", "true"]) if "blink" in cols else \
        pd.Series([False] * len(onset))
    msg = raw.frame["message"] if "message" in cols else pd.Series(["n/a"] * len(onset))
    kinds = [("blink" if blink.iloc[i] else {"fixation": "fixation", "saccade": "saccade", "blink": "blink",
                                             "loss": "loss"}.get(tt.iloc[i])) for i in range(len(onset))]
    keep = np.array([bool(k) for k in kinds], bool) & np.isfinite(dur)
    events = pd.DataFrame({"type": pd.Series([k for k, ok in zip(kinds, keep) if ok], dtype=object),
                           "onset_s": onset[keep], "offset_s": onset[keep] + dur[keep],
                           "duration_ms": dur[keep] * 1e3})
    # further columns of the events schema (aspectus's own exports carry them), in their units
    for col in EVENT_COLUMNS:
        if col.name in cols and col.name not in events.columns:
            v = numeric_column(raw, col.name, col.name)[keep]
            events[col.name] = (pd.array([int(x) if np.isfinite(x) else pd.NA for x in v], dtype="Int64")
                                if col.dtype == "int64" else v)
    events = events.sort_values("onset_s", kind="stable").reset_index(drop=True)
    m = ~msg.str.lower().isin(MISSING_TOKENS).to_numpy()
    messages = pd.DataFrame({"label": msg[m].to_numpy(dtype=str), "t_s": onset[m]})
    return (events if len(events) else None), messages, {"physioevents": str(p), "OnsetSource": on_src or None}


# ----------------------------------------------------------------------------- writing


def _tsv_gz(df: pd.DataFrame) -> bytes:
    buf = io.StringIO()
    df.to_csv(buf, sep="\t", header=False, index=False, na_rep="n/a", lineterminator="\n")
    return gzip.compress(buf.getvalue().encode("utf-8"), mtime=0)


def write_bids_physio(out_dir, table: pd.DataFrame, *, base: str, recording: str = "eye1",
                      sampling_frequency_hz: float, screen: ScreenGeometry | None = None,
                      timestamp_unit: str = "ms", coordinate_units: str = "pixel", recorded_eye: str = "right",
                      start_time_s: float = 0.0, events: pd.DataFrame | None = None, manufacturer: str = "n/a",
                      description: str = "") -> dict[str, Path]:
    """Write an eye-tracking recording in BIDS form (atomically).

    Parameters
    ----------
    out_dir : path-like
        Folder to write into.
    table : pandas.DataFrame
        Columns ``timestamp`` (in ``timestamp_unit``, on the tracker's clock),
        ``x_coordinate``, ``y_coordinate`` (in ``coordinate_units``) and
        optionally ``pupil_size``; NaN is written as ``n/a``.
    base : str
        BIDS entities without recording and suffix, e.g.
        ``"sub-p01_ses-s01_task-reading"``.
    recording : str
        Recording label (``eye1``, ``eye2``).
    sampling_frequency_hz : float
        Nominal sampling rate, Hz.
    screen : ScreenGeometry, optional
        Written to ``<base>_events.json`` as ``StimulusPresentation``
        (metres and pixels).
    timestamp_unit : {"s", "ms", "us"}
        Unit of ``timestamp``.
    coordinate_units : str
        BIDS unit string of the gaze columns (``pixel``, ``deg``, ``mm``).
    recorded_eye : str
        ``left``, ``right`` or ``cyclopean``.
    start_time_s : float
        ``StartTime`` of the sidecar, s.
    events : pandas.DataFrame, optional
        Columns ``onset`` and ``duration`` (both in ``timestamp_unit``, onset on
        the timestamp clock), ``trial_type``, ``blink`` (0/1), ``message``;
        written as ``*_physioevents.tsv.gz`` with ``OnsetSource`` timestamp.

    Returns
    -------
    dict of str to Path
        ``physio``, ``physio_json``, ``events_json`` and, with ``events``,
        ``physioevents``, ``physioevents_json``.
    """
    if timestamp_unit not in TIME_UNITS:
        raise ParameterError(f"timestamp unit {timestamp_unit!r} is not one of {', '.join(TIME_UNITS)}")
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    stem = f"{base}_recording-{recording}"
    cols = [c for c in ("timestamp", "x_coordinate", "y_coordinate", "pupil_size") if c in table.columns]
    paths: dict[str, Path] = {}
    paths["physio"] = write_bytes(out_dir / f"{stem}_physio.tsv.gz", _tsv_gz(table[cols]))
    side = {
        "SamplingFrequency": float(sampling_frequency_hz), "StartTime": float(start_time_s), "Columns": cols,
        "PhysioType": "eyetrack", "RecordedEye": recorded_eye, "SampleCoordinateSystem": "gaze-on-screen",
        "SampleCoordinateUnits": coordinate_units, "EnvironmentCoordinates": "top-left",
        "Manufacturer": manufacturer,
        "timestamp": {"Description": "Timestamp of the eye tracker's clock", "Units": timestamp_unit},
        "x_coordinate": {"LongName": "Gaze position (x)", "Description": "Horizontal gaze position on the screen, "
                         "origin top left", "Units": coordinate_units},
        "y_coordinate": {"LongName": "Gaze position (y)", "Description": "Vertical gaze position on the screen, "
                         "origin top left, y down", "Units": coordinate_units},
    }
    if "pupil_size" in cols:
        side["pupil_size"] = {"Description": "Pupil area reported by the tracker", "Units": "a.u."}
    if description:
        side["Description"] = description
    paths["physio_json"] = write_json(out_dir / f"{stem}_physio.json", side)
    ev = {"TaskName": base.split("task-")[-1].split("_")[0] if "task-" in base else "task"}
    if screen is not None:
        stim = {"ScreenDistance": screen.distance_mm / 1e3, "ScreenOrigin": ["top", "left"],
                "ScreenSize": [screen.width_mm / 1e3, screen.height_mm / 1e3]}
        if screen.width_px is not None:
            stim["ScreenResolution"] = [int(screen.width_px), int(screen.height_px)]
        ev["StimulusPresentation"] = stim
    paths["events_json"] = write_json(out_dir / f"{base}_events.json", ev)
    if events is not None:
        ecols = [c for c in ("onset", "duration", "trial_type", "blink", "message") if c in events.columns]
        paths["physioevents"] = write_bytes(out_dir / f"{stem}_physioevents.tsv.gz", _tsv_gz(events[ecols]))
        es = {"Columns": ecols, "OnsetSource": "timestamp",
              "Description": "Events detected or logged by the eye tracker",
              "onset": {"Description": "Event onset on the timestamp clock", "Units": timestamp_unit},
              "duration": {"Description": "Event duration", "Units": timestamp_unit},
              "trial_type": {"Description": "Event type from the tracker's own detector (fixation or saccade)"},
              "blink": {"Description": "1 if the eye was closed, 0 if open"},
              "message": {"Description": "Messages logged by the tracker (shared markers)"}}
        paths["physioevents_json"] = write_json(out_dir / f"{stem}_physioevents.json",
                                                {k: v for k, v in es.items() if k not in
                                                 ("trial_type", "blink", "message") or k in ecols})
    return paths
