"""Processed clips as a BIDS eye-tracking derivatives dataset.

:func:`export_bids` takes a batch output folder (``aspectus batch``), a study
file (the app's ``*.aspectus-study.json``) or any folder of clip result
folders (``aspectus process``) and writes every finished clip as a BIDS
eye-tracking recording (BIDS 1.10 and later, "Physiological recordings" with
``PhysioType`` ``eyetrack``)::

    BIDS_ROOT/dataset_description.json   DatasetType "derivative", GeneratedBy: aspectus, version, parameters
    BIDS_ROOT/README.md                  what the dataset holds and how it was made
    BIDS_ROOT/participants.tsv (+ .json) one row per participant, with the batch's labels
    BIDS_ROOT/sub-<p>/sub-<p>_sessions.tsv (+ .json)            when clips carry session labels
    BIDS_ROOT/sub-<p>/[ses-<s>/]beh/sub-<p>[_ses-<s>]_task-<t>[_run-<n>]_recording-cyclopean_physio.tsv.gz
                                                         ..._physio.json
                                                         ..._physioevents.tsv.gz
                                                         ..._physioevents.json

How the webcam recording is described
-------------------------------------
* One recording per clip, ``RecordedEye`` ``cyclopean``: aspectus's gaze is
  the binocular (mean of both eyes) direction. The per-eye angles travel as
  additional columns of the same file.
* ``SampleCoordinateSystem`` ``gaze-in-world``: the gaze angles are
  head-compensated directions in the camera's frame, which is fixed in the
  room (:mod:`aspectus.schema`); ``x_coordinate`` is yaw and ``y_coordinate``
  pitch, both in degrees (``Units`` ``deg``), yaw > 0 towards the subject's
  right, pitch > 0 up, zero straight back at the camera. Without calibration
  they carry an unknown constant offset per person (the angle between the
  eye's optical and visual axes); the column descriptions say so.
* ``EyeTrackingMethod`` describes the webcam method (face-mesh and iris
  landmarks, head pose from a face model, no corneal reflection, no
  calibration); ``SoftwareVersions`` the software and face model versions.
* Samples that are not valid (face not found, eyes closed, head turned too
  far) have ``n/a`` gaze; ``blink`` is an additional 0/1 column.
* Events (``*_physioevents.tsv.gz``, ``OnsetSource`` ``timestamp``): one row
  per fixation, saccade, blink and data-loss period, ``trial_type`` naming
  the kind, ``onset`` on the ``timestamp`` clock and ``duration`` in seconds,
  plus the event table's other columns (mean position, amplitude ...).

Variable frame rate
-------------------
The BIDS eye-tracking recording has a ``timestamp`` column (required), and
each row holds the clip frame's own presentation time (``t_s``, seconds from
the first frame, as measured from the container). Frames are **not
resampled** and no sample is invented or dropped. ``SamplingFrequency``
(required, one number) is the clip's *nominal* rate: the reciprocal of the
median frame interval. For a variable-frame-rate clip the ``timestamp``
column's description states the range of frame intervals, and readers must
take time from ``timestamp``, not from row number / ``SamplingFrequency``.

Round trip: :func:`aspectus.reference.bids.read_bids_physio` reads an export
back to the same ``t_s``, ``valid``, ``yaw_deg``, ``pitch_deg`` and ``blink``
(bit for bit: numbers are written with the shortest representation that reads
back to the same double) and the same events (type, onset exactly; offset and
duration to the last bit of ``onset + duration``).
"""
from __future__ import annotations

import csv
import gzip
import io
import json
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from aspectus import __version__
from aspectus.atomic import sha256_file, write_bytes, write_json, write_text
from aspectus.errors import AspectusInputError
from aspectus.labels import guess_labels
from aspectus.schema import EVENT_COLUMNS, SAMPLE_COLUMN_BY_NAME

#: BIDS version the export follows (eye-tracking recordings entered BIDS in 1.10.0)
BIDS_VERSION = "1.10.0"
#: recording label of the binocular gaze recording
RECORDING_LABEL = "cyclopean"
#: datatype folder of the recordings: a behavioural task recorded by a webcam
DATATYPE = "beh"
#: task label used when neither the clip's labels nor the caller give one
DEFAULT_TASK = "webcam"

#: samples columns written after timestamp, x_coordinate, y_coordinate (when the clip has them)
EXTRA_SAMPLE_COLUMNS = ("blink", "face_found", "frame_index", "left_yaw_deg", "left_pitch_deg", "right_yaw_deg",
                        "right_pitch_deg", "eye_in_head_yaw_deg", "eye_in_head_pitch_deg", "head_yaw_deg",
                        "head_pitch_deg", "head_roll_deg", "head_x_mm", "head_y_mm", "head_z_mm", "distance_mm",
                        "aperture_rel")
#: boolean sample columns, written as 0/1
_BOOL_COLUMNS = ("blink", "face_found")
#: events columns written after onset, duration, trial_type
EXTRA_EVENT_COLUMNS = ("yaw_deg", "pitch_deg", "amplitude_deg", "dispersion_deg", "n_samples")

EYE_TRACKING_METHOD = (
    "webcam video, no corneal reflection and no calibration: face-mesh and iris landmarks per frame "
    "(MediaPipe face mesh with iris refinement), head pose from a 3-D face model fitted to the landmarks, "
    "each eye's gaze direction from the iris centre relative to the eyeball centre (12 mm eyeball, 11.7 mm "
    "iris), combined with the head pose (head-compensated) and averaged over both eyes; computed offline by "
    "aspectus from the recorded clip")

_LABEL_BAD = re.compile(r"[^A-Za-z0-9]+")


@dataclass
class ExportedRecording:
    """One clip written into the BIDS dataset.

    Attributes
    ----------
    key : str
        The clip's result folder name.
    source : Path
        The clip's result folder.
    subject, session, task, run : str or None
        BIDS labels of the recording (``session`` and ``run`` may be None).
    physio : Path
        The ``*_physio.tsv.gz`` written.
    n_samples, n_events : int
        Rows written.
    sampling_frequency_hz : float
        Nominal rate written to the sidecar (reciprocal of the median frame interval).
    variable_frame_rate : bool
        Whether frame intervals vary by more than 1 % of the median.
    """

    key: str
    source: Path
    subject: str
    session: str | None
    task: str
    run: str | None
    physio: Path
    n_samples: int
    n_events: int
    sampling_frequency_hz: float
    variable_frame_rate: bool


@dataclass
class BidsExport:
    """What :func:`export_bids` did.

    Attributes
    ----------
    root : Path
        The BIDS dataset folder.
    recordings : list of ExportedRecording
        Clips written.
    skipped : list of (str, str)
        Clip keys not written, with the reason (not finished, damaged ...).
    notes : list of str
        Things the user should know (labels guessed from file names ...).
    """

    root: Path
    recordings: list[ExportedRecording] = field(default_factory=list)
    skipped: list[tuple[str, str]] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)


@dataclass
class _Clip:
    key: str
    folder: Path
    labels: dict


# ------------------------------------------------------------------------------------------------ inputs


def bids_label(value, *, what: str) -> str:
    """A label as BIDS entities need it: letters and digits only.

    Parameters
    ----------
    value : str
        The label as the study gives it (``p-01``, ``class A``).
    what : str
        Which label it is, for the error message.

    Returns
    -------
    str
        ``value`` without any character other than ASCII letters and digits.

    Raises
    ------
    aspectus.errors.AspectusInputError
        When nothing is left.

    Examples
    --------
    >>> bids_label("p-01", what="participant")
    'p01'
    >>> bids_label("Class A/2", what="session")
    'ClassA2'
    """
    out = _LABEL_BAD.sub("", str(value))
    if not out:
        raise AspectusInputError(f"the {what} label {value!r} has no letter or digit, which BIDS labels need",
                                 hint=f"give the clip a {what} label made of letters and digits")
    return out


def _finished(folder: Path) -> tuple[bool, str]:
    run_json = folder / "run.json"
    if not run_json.is_file():
        return False, "not processed (no run.json)"
    for name in ("samples.parquet",):
        if not (folder / name).is_file():
            from aspectus.run_record import missing_output

            problem, hint = missing_output(folder, name)
            return False, f"{problem} - {hint}"
    if not ((folder / "events.parquet").is_file() or (folder / "events.csv").is_file()):
        return False, "events table missing"
    return True, ""


def _clean_label(v) -> str | None:
    if v is None or (isinstance(v, float) and not np.isfinite(v)):
        return None
    s = str(v).strip()
    return s or None


def _clips_from_batch(folder: Path) -> tuple[list[_Clip], list[tuple[str, str]], str]:
    from aspectus.studies.batch import STATUS_COLUMNS, STATUS_TAIL_COLUMNS

    status = pd.read_csv(folder / "status.csv", dtype=str, keep_default_na=False)
    if "key" not in status.columns:
        raise AspectusInputError("status.csv has no 'key' column", path=folder / "status.csv",
                                 hint="is this a batch output folder written by `aspectus batch`?")
    label_cols = [c for c in status.columns if c not in STATUS_COLUMNS and c not in STATUS_TAIL_COLUMNS]
    clips, skipped = [], []
    for _, row in status.iterrows():
        key = row["key"]
        if row.get("status") not in ("done", "skipped"):
            skipped.append((key, f"batch status {row.get('status')!r}: {row.get('reason') or 'not finished'}"))
            continue
        labels = {"participant": _clean_label(row.get("participant")), "session": _clean_label(row.get("session"))}
        for c in label_cols:
            labels[c] = _clean_label(row.get(c))
        clips.append(_Clip(key, folder / key, labels))
    name = folder.resolve().name
    try:
        meta = json.loads((folder / "study.json").read_text(encoding="utf-8"))
        name = str(meta.get("name") or name)
    except (OSError, ValueError):
        pass
    return clips, skipped, name


def _clips_from_study(path: Path) -> tuple[list[_Clip], list[tuple[str, str]], str]:
    from aspectus.studies.project import load_study

    study = load_study(path)
    clips = []
    for c in study.clips:
        labels = {"participant": None, "session": None, **guess_labels(c.stem)}
        clips.append(_Clip(c.stem, study.clip_out_dir(c), labels))
    return clips, [], study.name


def _clips_from_folders(folder: Path) -> tuple[list[_Clip], list[tuple[str, str]], str]:
    subs = sorted(p for p in folder.iterdir() if p.is_dir() and not p.name.startswith("."))
    clips = [_Clip(p.name, p, {"participant": None, "session": None}) for p in subs if (p / "run.json").is_file()]
    if not clips:
        raise AspectusInputError("no processed clip here (no sub-folder holds a run.json)", path=folder,
                                 hint="give a batch output folder, a study file, or the -o folder of "
                                 "`aspectus process`")
    return clips, [], folder.resolve().name


def find_results(results) -> tuple[list[_Clip], list[tuple[str, str]], str]:
    """The clip result folders of a batch folder, a study file or a folder of ``aspectus process`` outputs."""
    p = Path(results)
    if not p.exists():
        raise AspectusInputError("not found", path=p, hint="give a batch output folder or a study file")
    if p.is_file():
        return _clips_from_study(p)
    if (p / "status.csv").is_file():
        return _clips_from_batch(p)
    return _clips_from_folders(p)


# ------------------------------------------------------------------------------------------------ tables


def _tsv_gz(df: pd.DataFrame) -> bytes:
    buf = io.StringIO()
    df.to_csv(buf, sep="\t", header=False, index=False, na_rep="n/a", lineterminator="\n",
              quoting=csv.QUOTE_MINIMAL)
    return gzip.compress(buf.getvalue().encode("utf-8"), mtime=0)


def _tsv(df: pd.DataFrame) -> str:
    buf = io.StringIO()
    df.to_csv(buf, sep="\t", index=False, na_rep="n/a", lineterminator="\n")
    return buf.getvalue()


def _read_checked(folder: Path, name: str, run: dict) -> Path:
    p = folder / name
    want = ((run.get("outputs") or {}).get(name) or {}).get("sha256")
    if want and sha256_file(p) != want:
        raise AspectusInputError(f"{name} does not match the checksum in run.json (damaged or edited)", path=p,
                                 hint="process the clip again to rebuild it")
    return p


def _load_clip(folder: Path) -> tuple[pd.DataFrame, pd.DataFrame, dict]:
    try:
        run = json.loads((folder / "run.json").read_text(encoding="utf-8"))
    except (OSError, ValueError) as exc:
        raise AspectusInputError(f"run.json cannot be read ({exc})", path=folder / "run.json") from None
    try:
        samples = pd.read_parquet(_read_checked(folder, "samples.parquet", run))
        if (folder / "events.parquet").is_file():
            events = pd.read_parquet(_read_checked(folder, "events.parquet", run))
        else:
            events = pd.read_csv(_read_checked(folder, "events.csv", run))
    except AspectusInputError:
        raise
    except Exception as exc:  # noqa: BLE001 - pyarrow and pandas raise many kinds
        raise AspectusInputError(f"results cannot be read ({exc})", path=folder,
                                 hint="process the clip again to rebuild them") from None
    for need in ("t_s", "valid", "yaw_deg", "pitch_deg"):
        if need not in samples.columns:
            raise AspectusInputError(f"samples.parquet has no {need!r} column", path=folder / "samples.parquet")
    for need in ("type", "onset_s", "offset_s"):
        if need not in events.columns:
            raise AspectusInputError(f"the events table has no {need!r} column", path=folder)
    if len(samples) < 2:
        raise AspectusInputError(f"only {len(samples)} sample(s); a recording needs at least two to have a rate",
                                 path=folder / "samples.parquet")
    t = samples["t_s"].to_numpy(dtype=float)
    if not np.isfinite(t).all() or (np.diff(t) <= 0).any():
        raise AspectusInputError("sample times are not finite and increasing", path=folder / "samples.parquet",
                                 hint="process the clip again")
    return samples, events, run


def _physio_table(samples: pd.DataFrame) -> pd.DataFrame:
    valid = samples["valid"].astype(bool).to_numpy()
    out = pd.DataFrame({
        "timestamp": samples["t_s"].to_numpy(dtype=float),
        "x_coordinate": np.where(valid, samples["yaw_deg"].to_numpy(dtype=float), np.nan),
        "y_coordinate": np.where(valid, samples["pitch_deg"].to_numpy(dtype=float), np.nan),
    })
    for c in EXTRA_SAMPLE_COLUMNS:
        if c not in samples.columns:
            continue
        v = samples[c]
        if c in _BOOL_COLUMNS:
            out[c] = v.fillna(False).astype(bool).astype(np.int8)
        elif c == "frame_index":
            out[c] = v.astype("Int64")
        else:
            out[c] = v.to_numpy(dtype=float)
    return out


def _events_table(events: pd.DataFrame) -> pd.DataFrame:
    onset = events["onset_s"].to_numpy(dtype=float)
    out = pd.DataFrame({"onset": onset, "duration": events["offset_s"].to_numpy(dtype=float) - onset,
                        "trial_type": events["type"].astype(str).to_numpy()})
    for c in EXTRA_EVENT_COLUMNS:
        if c in events.columns:
            out[c] = events[c].astype("Int64") if c == "n_samples" else events[c].to_numpy(dtype=float)
    return out


def _column_doc(name: str) -> dict:
    col = SAMPLE_COLUMN_BY_NAME.get(name)
    d = {"Description": col.doc if col else name}
    if col is not None and col.unit:
        d["Units"] = col.unit
    if name in _BOOL_COLUMNS:
        d["Levels"] = {"0": "no", "1": "yes"}
    return d


def _physio_sidecar(samples: pd.DataFrame, table: pd.DataFrame, run: dict, *, task: str) -> tuple[dict, float, bool]:
    t = samples["t_s"].to_numpy(dtype=float)
    d = np.diff(t)
    med = float(np.median(d))
    fs = 1.0 / med
    vfr = bool((np.abs(d - med) > 0.01 * med).any())
    t_doc = ("Presentation time of the video frame, in seconds from the clip's first frame, as read from the "
             "container's timestamps. Frames are not resampled: one row per decoded frame. ")
    if vfr:
        t_doc += (f"The clip has a variable frame rate: frame intervals range from {d.min() * 1e3:.3f} ms to "
                  f"{d.max() * 1e3:.3f} ms (median {med * 1e3:.3f} ms), so SamplingFrequency is the nominal "
                  "rate (1 / median interval) and the time of each sample must be taken from this column.")
    else:
        t_doc += f"Constant frame interval {med * 1e3:.3f} ms (SamplingFrequency = 1 / interval)."
    frame_doc = ("Head-compensated gaze direction of both eyes (mean), in degrees, in the camera frame "
                 "(fixed in the room): zero is the direction straight back at the camera; ")
    offset_doc = (" Without a calibration the angle carries an unknown constant offset per person (the angle "
                  "between the eye's optical and visual axes, about 4-8 deg) and an uncertain gain: use "
                  "changes of angle. n/a when the sample is not valid (face not found, eyes closed, head turned "
                  "too far).")
    sw = run.get("software") or {}
    versions = ", ".join(f"{k} {v}" for k, v in sw.items() if k not in ("face_model",) and v)
    side = {
        "PhysioType": "eyetrack",
        "TaskName": task,
        "SamplingFrequency": fs,
        "StartTime": 0.0,
        "Columns": list(table.columns),
        "RecordedEye": "cyclopean",
        "SampleCoordinateSystem": "gaze-in-world",
        "EyeTrackingMethod": EYE_TRACKING_METHOD,
        "CalibrationCount": 0,
        "RawDataFilters": "none: the gaze angles are written as estimated per frame, without smoothing or "
                          "gap filling (the event detection fills short gaps internally).",
        "SoftwareVersions": versions or f"aspectus {__version__}",
        "Description": "Webcam gaze estimated offline by aspectus from a recorded video clip. Research "
                       "estimates with known error, not a diagnostic instrument.",
        "timestamp": {"LongName": "Frame time", "Description": t_doc, "Units": "s"},
        "x_coordinate": {"LongName": "Gaze yaw",
                         "Description": frame_doc + "positive towards the subject's own right." + offset_doc,
                         "Units": "deg"},
        "y_coordinate": {"LongName": "Gaze pitch", "Description": frame_doc + "positive upwards." + offset_doc,
                         "Units": "deg"},
    }
    dist = samples["distance_mm"].to_numpy(dtype=float) if "distance_mm" in samples.columns else np.array([])
    if np.isfinite(dist).any():
        side["EyeTrackerDistance"] = round(float(np.nanmedian(dist)) / 1000.0, 3)  # metres (BIDS)
    for c in table.columns[3:]:
        side[c] = _column_doc(c)
    return side, fs, vfr


def _events_sidecar(table: pd.DataFrame, *, task: str) -> dict:
    docs = {c.name: c for c in EVENT_COLUMNS}
    side = {
        "TaskName": task,
        "Columns": list(table.columns),
        "OnsetSource": "timestamp",
        "Description": "Fixations, saccades, blinks and data-loss periods detected by aspectus in the webcam "
                       "gaze (detector and parameters in dataset_description.json, GeneratedBy).",
        "onset": {"Description": "Start of the event: the time of its first sample, on the clock of the "
                                 "recording's timestamp column", "Units": "s"},
        "duration": {"Description": "Length of the event: from its first sample to the first sample after it",
                     "Units": "s"},
        "trial_type": {"Description": "Kind of event",
                       "Levels": {"fixation": "fixation", "saccade": "saccade (derived between two fixations)",
                                  "blink": "eyes closed", "loss": "data loss: no valid gaze (face not found, "
                                  "head turned away) for longer than the gap-filling limit"}},
    }
    for c in table.columns[3:]:
        col = docs.get(c)
        entry = {"Description": col.doc if col else c}
        if col is not None and col.unit:
            entry["Units"] = col.unit
        side[c] = entry
    return side


# ------------------------------------------------------------------------------------------------ labels


def _assign_entities(clips: list[_Clip], *, task: str | None, notes: list[str]) -> list[dict]:
    """BIDS entities per clip: sub, ses, task, run (run only where several clips share the rest)."""
    raw_to_label: dict[tuple[str, str], str] = {}
    label_to_raw: dict[tuple[str, str], str] = {}
    guessed = []
    ents = []
    for c in clips:
        lab = dict(c.labels)
        if not lab.get("participant"):
            g = guess_labels(c.key)
            lab["participant"] = g.get("participant") or c.key
            if not lab.get("session") and g.get("session"):
                lab["session"] = g["session"]
            guessed.append(c.key)
        e = {}
        for what, ent in (("participant", "sub"), ("session", "ses")):
            raw = lab.get(what)
            if raw is None:
                continue
            lbl = bids_label(raw, what=what)
            other = label_to_raw.get((ent, lbl))
            if other is not None and other != raw:
                raise AspectusInputError(
                    f"the {what} labels {other!r} and {raw!r} both become {ent}-{lbl} in BIDS, which allows "
                    "letters and digits only", path=c.folder,
                    hint=f"give the clips {what} labels that differ in their letters or digits")
            label_to_raw[(ent, lbl)] = raw
            raw_to_label[(ent, raw)] = lbl
            e[ent] = lbl
        e["task"] = bids_label(lab.get("task") or task or DEFAULT_TASK, what="task")
        run = lab.get("run")
        if run is not None:
            if not str(run).isdigit():
                raise AspectusInputError(f"the run label {run!r} is not a number, which BIDS run labels must be",
                                         path=c.folder, hint="give runs as 1, 2, ... or leave the label out")
            e["run"] = str(int(run))
        e["labels"] = {k: v for k, v in lab.items() if k not in ("participant", "session", "task", "run")
                       and v is not None}
        ents.append(e)
    if guessed:
        notes.append(f"{len(guessed)} clip(s) had no participant label; participant and session were taken from "
                     f"the file name ({', '.join(guessed[:5])}{' ...' if len(guessed) > 5 else ''})")
    groups: dict[tuple, list[int]] = {}
    for i, e in enumerate(ents):
        groups.setdefault((e["sub"], e.get("ses"), e["task"]), []).append(i)
    for (sub, ses, tsk), idx in groups.items():
        if len(idx) < 2:
            continue
        given = [ents[i].get("run") for i in idx]
        if all(r is not None for r in given) and len(set(given)) == len(given):
            continue
        if any(r is not None for r in given):
            keys = ", ".join(clips[i].key for i in idx)
            raise AspectusInputError(f"clips {keys} are all sub-{sub}{f' ses-{ses}' if ses else ''} task-{tsk}, "
                                     "and their run labels do not tell them apart",
                                     hint="give each of them its own run label (1, 2, ...), or none of them")
        for n, i in enumerate(sorted(idx, key=lambda i: clips[i].key), start=1):
            ents[i]["run"] = str(n)
    return ents


def _stem(e: dict) -> str:
    parts = [f"sub-{e['sub']}"]
    if e.get("ses"):
        parts.append(f"ses-{e['ses']}")
    parts.append(f"task-{e['task']}")
    if e.get("run"):
        parts.append(f"run-{e['run']}")
    parts.append(f"recording-{RECORDING_LABEL}")
    return "_".join(parts)


def _folder(root: Path, e: dict) -> Path:
    f = root / f"sub-{e['sub']}"
    if e.get("ses"):
        f = f / f"ses-{e['ses']}"
    return f / DATATYPE


def _constant_labels(ents: list[dict], key_fn) -> dict:
    """Labels whose value is the same for every clip of a group: group -> {label: value}."""
    seen: dict = {}
    for e in ents:
        g = key_fn(e)
        for k, v in e["labels"].items():
            seen.setdefault(g, {}).setdefault(k, set()).add(v)
    return {g: {k: next(iter(vs)) for k, vs in d.items() if len(vs) == 1} for g, d in seen.items()}


def _write_participants(root: Path, ents: list[dict]) -> None:
    per_sub = _constant_labels(ents, lambda e: e["sub"])
    subs = sorted({e["sub"] for e in ents})
    cols = sorted({k for d in per_sub.values() for k in d
                   if all(k in per_sub.get(s, {}) for s in subs)})
    rows = [{"participant_id": f"sub-{s}", **{k: per_sub.get(s, {}).get(k) for k in cols}} for s in subs]
    write_text(root / "participants.tsv", _tsv(pd.DataFrame(rows, columns=["participant_id", *cols])))
    side = {"participant_id": {"Description": "Participant label from the study (letters and digits only)"}}
    for k in cols:
        side[k] = {"Description": f"Label '{k}' of the participant's clips in the study"}
    write_json(root / "participants.json", side)
    by_sub: dict[str, list[dict]] = {}
    for e in ents:
        if e.get("ses"):
            by_sub.setdefault(e["sub"], []).append(e)
    for s, es in by_sub.items():
        per_ses = _constant_labels(es, lambda e: e["ses"])
        sess = sorted({e["ses"] for e in es})
        scols = sorted({k for d in per_ses.values() for k in d if k not in cols
                        and all(k in per_ses.get(x, {}) for x in sess)})
        rows = [{"session_id": f"ses-{x}", **{k: per_ses.get(x, {}).get(k) for k in scols}} for x in sess]
        write_text(root / f"sub-{s}" / f"sub-{s}_sessions.tsv",
                   _tsv(pd.DataFrame(rows, columns=["session_id", *scols])))
        sside = {"session_id": {"Description": "Session label from the study (letters and digits only)"}}
        for k in scols:
            sside[k] = {"Description": f"Label '{k}' of the session's clips in the study"}
        write_json(root / f"sub-{s}" / f"sub-{s}_sessions.json", sside)


# ------------------------------------------------------------------------------------------------ export


def _check_target(root: Path) -> None:
    if root.exists() and not root.is_dir():
        raise AspectusInputError("exists and is not a folder", path=root, hint="choose another output folder")
    if root.is_dir() and any(root.iterdir()):
        dd = root / "dataset_description.json"
        mine = False
        try:
            gen = json.loads(dd.read_text(encoding="utf-8")).get("GeneratedBy") or []
            mine = any(isinstance(g, dict) and g.get("Name") == "aspectus" for g in gen)
        except (OSError, ValueError, AttributeError):
            mine = False
        if not mine:
            raise AspectusInputError("the folder is not empty and holds no earlier aspectus BIDS export",
                                     path=root, hint="choose an empty or new folder; nothing was written")


def export_bids(results, out_root, *, task: str | None = None, name: str | None = None) -> BidsExport:
    """Write processed clips as a BIDS eye-tracking derivatives dataset.

    Parameters
    ----------
    results : path-like
        A batch output folder (``aspectus batch``), a study file, or a folder
        whose sub-folders are clip results of ``aspectus process``.
    out_root : path-like
        The BIDS dataset folder: new, empty, or an earlier export of aspectus
        (whose files are then replaced one by one, atomically).
    task : str, optional
        BIDS task label for clips without a ``task`` label (default
        ``"webcam"``).
    name : str, optional
        Dataset name for ``dataset_description.json`` (default: the study's
        name or the results folder's name).

    Returns
    -------
    BidsExport
        The recordings written and the clips skipped, with reasons.

    Raises
    ------
    aspectus.errors.AspectusInputError
        Results not found, an output folder that holds something else, labels
        that BIDS cannot tell apart, or no clip that could be exported.

    Examples
    --------
    Export a batch output folder (``batch_folder``: two processed clips,
    labelled p01/s01 and p02/s01) and read one recording back with the
    BIDS reader:

    >>> ex = export_bids(batch_folder, tmp / "bids", task="reading")
    >>> [str(r.physio.relative_to(ex.root)) for r in ex.recordings]  # doctest: +NORMALIZE_WHITESPACE
    ['sub-p01/ses-s01/beh/sub-p01_ses-s01_task-reading_recording-cyclopean_physio.tsv.gz',
     'sub-p02/ses-s01/beh/sub-p02_ses-s01_task-reading_recording-cyclopean_physio.tsv.gz']
    >>> from aspectus.reference.bids import read_bids_physio
    >>> rec = read_bids_physio(ex.recordings[0].physio)
    >>> rec.samples.columns.tolist(), rec.meta["SampleCoordinateSystem"]
    (['t_s', 'valid', 'yaw_deg', 'pitch_deg', 'blink'], 'gaze-in-world')
    >>> sorted(rec.events["type"].unique())
    ['blink', 'fixation', 'loss', 'saccade']
    """
    root = Path(out_root)
    clips, skipped, default_name = find_results(results)
    _check_target(root)
    result = BidsExport(root=root, skipped=list(skipped))
    ready = []
    for c in clips:
        ok, why = _finished(c.folder)
        if ok:
            ready.append(c)
        else:
            result.skipped.append((c.key, why))
    ents = _assign_entities(ready, task=task, notes=result.notes)
    params_seen: dict[str, dict] = {}
    detectors = set()
    written = []
    for c, e in zip(ready, ents):
        try:
            samples, events, run = _load_clip(c.folder)
        except AspectusInputError as exc:
            result.skipped.append((c.key, str(exc)))
            continue
        folder = _folder(root, e)
        stem = _stem(e)
        physio = _physio_table(samples)
        side, fs, vfr = _physio_sidecar(samples, physio, run, task=e["task"])
        ev = _events_table(events)
        p = write_bytes(folder / f"{stem}_physio.tsv.gz", _tsv_gz(physio))
        write_json(folder / f"{stem}_physio.json", side)
        write_bytes(folder / f"{stem}_physioevents.tsv.gz", _tsv_gz(ev))
        write_json(folder / f"{stem}_physioevents.json", _events_sidecar(ev, task=e["task"]))
        params = run.get("params") or {}
        params_seen.setdefault(json.dumps(params, sort_keys=True, default=str), params)
        det = (params.get("analysis") or {}).get("detector")
        if det:
            detectors.add(str(det))
        written.append(e)
        result.recordings.append(ExportedRecording(
            key=c.key, source=c.folder, subject=e["sub"], session=e.get("ses"), task=e["task"], run=e.get("run"),
            physio=p, n_samples=len(physio), n_events=len(ev), sampling_frequency_hz=fs,
            variable_frame_rate=vfr))
    if not result.recordings:
        why = "; ".join(f"{k}: {r}" for k, r in result.skipped[:5]) or "no clips"
        raise AspectusInputError(f"no clip could be exported ({why})", path=results,
                                 hint="each clip's reason says what to do")
    _write_participants(root, written)
    plist = list(params_seen.values())
    gen = {"Name": "aspectus", "Version": __version__,
           "Description": "Offline webcam gaze: face and iris landmarks, head-compensated gaze angles, "
                          f"fixations, saccades, blinks and data loss detected in angular space "
                          f"(detector: {', '.join(sorted(detectors)) or 'default'}). The processing "
                          "parameters are under Parameters (one entry per distinct parameter set).",
           "Parameters": plist[0] if len(plist) == 1 else plist}
    write_text(root / "README.md", _readme(name or default_name, result))
    write_json(root / "dataset_description.json", {
        "Name": name or f"{default_name} (webcam gaze, aspectus)",
        "BIDSVersion": BIDS_VERSION,
        "DatasetType": "derivative",
        "GeneratedBy": [gen],
    })
    return result


def _readme(name: str, ex: BidsExport) -> str:
    n = len(ex.recordings)
    vfr = sum(r.variable_frame_rate for r in ex.recordings)
    return (
        f"# {name}\n\n"
        f"Webcam gaze recordings of {n} clip(s), estimated offline by aspectus {__version__} and written as BIDS "
        f"eye-tracking recordings (BIDS {BIDS_VERSION}, physiological recordings with PhysioType \"eyetrack\").\n\n"
        "Each recording (`*_recording-cyclopean_physio.tsv.gz`) holds one row per video frame: `timestamp` "
        "(s from the first frame), `x_coordinate` / `y_coordinate` (head-compensated gaze yaw / pitch in degrees, "
        "camera frame, `SampleCoordinateSystem` \"gaze-in-world\"), then blink, head pose and per-eye columns "
        "described in the JSON sidecar. `*_physioevents.tsv.gz` lists the fixations, saccades, blinks and "
        "data-loss periods (`trial_type`), onsets on the `timestamp` clock.\n\n"
        "Frames are not resampled; `SamplingFrequency` is the nominal rate (1 / median frame interval) and the "
        f"time of every sample is in `timestamp` ({vfr} of the clips have a variable frame rate).\n\n"
        "These are research estimates with known error, not a diagnostic, disciplinary or surveillance "
        "instrument. The files hold numbers only, no video frames.\n")
