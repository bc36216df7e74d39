"""A simulated lab eye-tracker recording of a rendered demo session.

For the demo of the validation mode: given the gaze truth of a rendered clip,
write what a screen-based lab tracker sitting beside the webcam would have
recorded in the same session of the (fictional) Linden Brook Primary School
reading pilot - on its own clock, at its own rate, with its own noise, in
screen pixels of an invented lab screen - once as a BIDS eye-tracking
recording and once as a plain CSV export with a saved column mapping.

Clock convention (the same as ``alignment.json``'s ``offset_s``): the
tracker's first sample is taken at clip time ``offset_s``; a negative value
means the tracker started recording before the webcam.
"""
from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pandas as pd

from aspectus.atomic import write_text
from aspectus.errors import ParameterError
from aspectus.reference.screen import ScreenGeometry
from aspectus.reference.bids import write_bids_physio
from aspectus.reference.table import TableMapping

#: invented lab screen: 24-inch 16:9 monitor at 65 cm
DEMO_SCREEN = ScreenGeometry(width_mm=531.0, height_mm=299.0, distance_mm=650.0, width_px=1920, height_px=1080)
#: the tracker clock reads this many ms when the recording starts (time since the tracker booted)
DEMO_CLOCK_START_MS = 5_183_250.0
#: a sample is part of a fixation when the true gaze moves slower than this (deg/s)
FIXATION_SPEED_DEG_S = 30.0
#: shortest fixation the simulated tracker reports (ms)
MIN_FIXATION_MS = 60.0


def _ids(stem: str) -> tuple[str, str | None]:
    m = re.fullmatch(r"(p\d+)[_-](s\d+)", stem)
    if m:
        return m.group(1), m.group(2)
    return re.sub(r"[^a-zA-Z0-9]", "", stem) or "p01", None


def _runs(mask: np.ndarray) -> list[tuple[int, int]]:
    d = np.diff(np.r_[0, mask.astype(np.int8), 0])
    return list(zip(np.flatnonzero(d == 1), np.flatnonzero(d == -1)))


def _tracker_events(t_ms: np.ndarray, speed: np.ndarray, blink: np.ndarray) -> pd.DataFrame:
    """The simulated tracker's own events: fixations, saccades and blinks from the noise-free truth."""
    dt = float(np.median(np.diff(t_ms)))
    rows = []
    fix = (speed < FIXATION_SPEED_DEG_S) & ~blink
    for a, b in _runs(fix):
        if (b - a) * dt >= MIN_FIXATION_MS:
            rows.append((t_ms[a], (b - a) * dt, "fixation", 0))
    for a, b in _runs(~fix & ~blink):
        if b - a >= 2:
            rows.append((t_ms[a], (b - a) * dt, "saccade", 0))
    for a, b in _runs(blink):
        rows.append((t_ms[a], (b - a) * dt, "n/a", 1))
    ev = pd.DataFrame(rows, columns=["onset", "duration", "trial_type", "blink"])
    ev["message"] = "n/a"
    return ev


def write_demo_reference(truth: pd.DataFrame, out_dir, *, stem: str = "p01_s01", offset_s: float = -1.25,
                         rate_hz: float = 250.0, seed: int = 0, noise_sd_deg: float = 0.2,
                         task: str = "reading", screen: ScreenGeometry = DEMO_SCREEN) -> dict[str, Path]:
    """Write a simulated lab-tracker recording of a rendered session (BIDS + plain CSV).

    Parameters
    ----------
    truth : pandas.DataFrame
        High-rate gaze truth of the clip: ``t_s`` (s, clip clock), ``yaw_deg``,
        ``pitch_deg`` (deg, :mod:`aspectus.schema` frame) and ``blink`` (bool).
    out_dir : path-like
        Folder to write into.
    stem : str
        Participant and session, e.g. ``"p01_s01"``; gives the BIDS entities
        ``sub-p01_ses-s01`` and the CSV name ``p01_s01_labtracker.csv``.
    offset_s : float
        Clip time (s) of the tracker's first sample; negative when the tracker
        started before the webcam. Before the truth starts the gaze holds its
        first value.
    rate_hz : float
        Tracker sampling rate, Hz.
    seed : int
        Seed of the measurement noise.
    noise_sd_deg : float
        Standard deviation of the tracker's white noise per axis, deg (lab
        trackers: about 0.1-0.3 deg; common practice).
    task : str
        BIDS task label.
    screen : ScreenGeometry
        The lab screen the positions are reported on.

    Returns
    -------
    dict of str to Path
        ``physio``, ``physio_json``, ``physioevents``, ``physioevents_json``,
        ``events_json`` (BIDS), ``table`` (CSV) and ``mapping`` (its saved
        :class:`TableMapping`).
    """
    for col in ("t_s", "yaw_deg", "pitch_deg"):
        if col not in truth.columns:
            raise ParameterError(f"gaze truth needs a {col!r} column")
    if not (rate_hz > 0 and np.isfinite(offset_s)):
        raise ParameterError("rate_hz must be positive and offset_s finite")
    out_dir = Path(out_dir)
    tt = truth["t_s"].to_numpy(float)
    yaw_t = truth["yaw_deg"].to_numpy(float)
    pitch_t = truth["pitch_deg"].to_numpy(float)
    blink_t = truth["blink"].to_numpy(bool) if "blink" in truth.columns else np.zeros(len(tt), bool)
    n = int(np.floor((tt[-1] - offset_s) * rate_hz)) + 1
    clip_t = offset_s + np.arange(n) / rate_hz
    yaw = np.interp(clip_t, tt, yaw_t)
    pitch = np.interp(clip_t, tt, pitch_t)
    idx = np.clip(np.searchsorted(tt, clip_t), 0, len(tt) - 1)
    blink = blink_t[idx] & (clip_t >= tt[0])
    speed = np.hypot(np.gradient(yaw, clip_t), np.gradient(pitch, clip_t))
    rng = np.random.default_rng(seed)
    yaw_m = yaw + rng.normal(0.0, noise_sd_deg, n)
    pitch_m = pitch + rng.normal(0.0, noise_sd_deg, n)
    x_px, y_px = screen.deg_to_px(yaw_m, pitch_m)
    pupil = 1050.0 + 40.0 * np.sin(2 * np.pi * clip_t / 7.0) + rng.normal(0, 5.0, n)
    off = ~np.isfinite(x_px) | ~np.isfinite(y_px) | (x_px < 0) | (x_px > screen.width_px) | (y_px < 0) | \
        (y_px > screen.height_px)
    lost = blink | off
    x_px, y_px, pupil = (np.where(lost, np.nan, v) for v in (x_px, y_px, pupil))
    t_ms = DEMO_CLOCK_START_MS + np.arange(n) * (1e3 / rate_hz)
    participant, session = _ids(stem)
    base = f"sub-{participant}" + (f"_ses-{session}" if session else "") + f"_task-{task}"

    table = pd.DataFrame({"timestamp": np.round(t_ms, 3), "x_coordinate": np.round(x_px, 2),
                          "y_coordinate": np.round(y_px, 2), "pupil_size": np.round(pupil, 1)})
    events = _tracker_events(t_ms, speed, blink)
    i0 = int(np.argmin(np.abs(clip_t)))  # the webcam's first frame, logged as a message by the lab software
    marker = pd.DataFrame({"onset": [t_ms[i0]], "duration": [0.0], "trial_type": ["n/a"], "blink": [0],
                           "message": ["webcam_start"]})
    events = pd.concat([events, marker], ignore_index=True).sort_values("onset", kind="stable")
    events["onset"] = events["onset"].round(3)
    events["duration"] = events["duration"].round(3)
    paths = write_bids_physio(out_dir, table, base=base, recording="eye1", sampling_frequency_hz=rate_hz,
                              screen=screen, timestamp_unit="ms", coordinate_units="pixel", recorded_eye="right",
                              start_time_s=0.0, events=events, manufacturer="simulated lab tracker",
                              description="Linden Brook Primary School reading pilot (fictional): simulated "
                              "screen-based lab tracker recorded beside the webcam")

    # plain CSV export of the same recording, with the tracker software's own column names
    label = np.full(n, "", dtype=object)
    for on, dur, kind in zip(events["onset"], events["duration"], events["trial_type"]):
        if kind in ("fixation", "saccade"):
            label[(t_ms >= on) & (t_ms < on + dur)] = "FIX" if kind == "fixation" else "SAC"
    label[blink] = "BLK"
    csv = pd.DataFrame({
        "time_ms": np.round(t_ms, 3), "gaze_x_px": np.round(x_px, 2), "gaze_y_px": np.round(y_px, 2),
        "pupil_au": np.round(pupil, 1), "status": np.where(lost, "lost", "ok"), "event": label})
    head = (f"# Linden Brook Primary School reading pilot (fictional) - lab tracker export, participant "
            f"{participant}, session {session or '-'}, {rate_hz:g} Hz, screen {screen.width_px}x{screen.height_px}"
            f" px, {screen.width_mm:g}x{screen.height_mm:g} mm at {screen.distance_mm:g} mm\n")
    paths["table"] = write_text(out_dir / f"{stem}_labtracker.csv", head + csv.to_csv(index=False, na_rep=""))
    mapping = TableMapping(time_col="time_ms", time_unit="ms", x_col="gaze_x_px", y_col="gaze_y_px", units="px",
                           screen=screen, validity_col="status", validity_values=["ok"], pupil_col="pupil_au",
                           event_col="event", event_values={"FIX": "fixation", "SAC": "saccade", "BLK": "blink"},
                           delimiter=",")
    paths["mapping"] = mapping.save(out_dir / f"{stem}_labtracker_mapping.json")
    return paths
