"""The one samples schema, the events schema, and the coordinate frame.

Coordinate frame (used for gaze *and* head pose, everywhere in aspectus)
-----------------------------------------------------------------------
3-D vectors are in the camera frame of OpenCV: origin at the camera's optical
centre, ``x`` towards the right edge of the (unmirrored) picture, ``y`` towards
its bottom edge, ``z`` forward, from the camera into the scene. Distances in
millimetres.

Angles are reported from the *subject's* point of view, so that they line up
with a screen in front of the subject (the reference tracker's screen):

* ``yaw_deg > 0``   - the subject looks (or turns the head) to **their own
  right**. In an unmirrored webcam picture that is towards the picture's left
  edge (camera ``-x``). On a screen behind the camera it is towards larger
  screen x.
* ``pitch_deg > 0`` - the subject looks (or tilts the head) **up** (camera
  ``-y``; on a screen, towards smaller screen y).
* ``roll_deg > 0``  - the head tilts towards the subject's right shoulder
  (counter-clockwise in the unmirrored picture).
* ``yaw = pitch = 0`` is the direction straight back at the camera, parallel
  to its optical axis (gaze vector ``(0, 0, -1)``).

A gaze direction ``g = (gx, gy, gz)`` (unit vector, camera frame) maps to
``yaw = atan2(-gx, -gz)`` and ``pitch = atan2(-gy, hypot(gx, gz))``.
``tests/test_frame_signs.py`` pins these signs.

"Left" and "right" eye mean the subject's own left and right eye.

Webcam angles carry an unknown per-person constant offset (angle kappa, about
4-8 deg) and an uncertain gain; aspectus's detectors work on changes of angle,
never on the absolute value.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from aspectus.errors import AspectusInputError


@dataclass(frozen=True)
class Column:
    name: str
    dtype: str
    unit: str
    doc: str
    required: bool = False


#: Columns of a gaze samples table, one row per frame (webcam) or per sample
#: (reference tracker). Only the ``required`` ones must be present; the rest are
#: filled by the webcam pipeline and may be absent in reference data.
SAMPLE_COLUMNS: tuple[Column, ...] = (
    Column("t_s", "float64", "s", "time of the sample; for clips seconds from the first frame's presentation timestamp", True),
    Column("valid", "bool", "", "gaze angles usable: face found, eyes open, head turned no further than the limit (default 45 deg), estimate finite", True),
    Column("yaw_deg", "float64", "deg", "binocular gaze yaw (subject's right positive), NaN when not valid", True),
    Column("pitch_deg", "float64", "deg", "binocular gaze pitch (up positive), NaN when not valid", True),
    Column("frame_index", "int64", "", "0-based index of the decoded frame"),
    Column("pts_s", "float64", "s", "presentation timestamp from the container, on the container's own clock"),
    Column("face_found", "bool", "", "the followed face was tracked in this frame (false while only other faces are in view)"),
    Column("face_count", "int64", "", "number of faces found in this frame, the followed one or not"),
    Column("blink", "bool", "", "eyelids closed (eyelid aperture well below this person's open-eye level)"),
    Column("left_yaw_deg", "float64", "deg", "subject's left eye gaze yaw"),
    Column("left_pitch_deg", "float64", "deg", "subject's left eye gaze pitch"),
    Column("right_yaw_deg", "float64", "deg", "subject's right eye gaze yaw"),
    Column("right_pitch_deg", "float64", "deg", "subject's right eye gaze pitch"),
    Column("eye_in_head_yaw_deg", "float64", "deg", "binocular gaze yaw relative to the head (before head compensation)"),
    Column("eye_in_head_pitch_deg", "float64", "deg", "binocular gaze pitch relative to the head"),
    Column("head_yaw_deg", "float64", "deg", "head yaw (face turned to the subject's right positive)"),
    Column("head_pitch_deg", "float64", "deg", "head pitch (face tilted up positive)"),
    Column("head_roll_deg", "float64", "deg", "head roll (towards the subject's right shoulder positive)"),
    Column("head_x_mm", "float64", "mm", "head origin (midpoint between the eyeball centres) in camera frame, x"),
    Column("head_y_mm", "float64", "mm", "head origin in camera frame, y"),
    Column("head_z_mm", "float64", "mm", "head origin in camera frame, z"),
    Column("distance_mm", "float64", "mm", "eye-to-camera distance from the iris scale (11.7 mm iris)"),
    Column("iris_diameter_px", "float64", "px", "mean iris diameter of both eyes in the picture"),
    Column("ear_left", "float64", "", "eye aspect ratio of the left eye (Soukupova & Cech 2016)"),
    Column("ear_right", "float64", "", "eye aspect ratio of the right eye"),
    Column("aperture_rel", "float64", "", "mean eye aspect ratio relative to this clip's open-eye level (1 = typical open)"),
    Column("pupil", "float64", "a.u.", "pupil size of a reference tracker (arbitrary units), NaN for webcam"),
)

SAMPLE_COLUMN_BY_NAME = {c.name: c for c in SAMPLE_COLUMNS}
REQUIRED_SAMPLE_COLUMNS = tuple(c.name for c in SAMPLE_COLUMNS if c.required)

#: Event types written to ``events.csv``.
EVENT_TYPES = ("fixation", "saccade", "blink", "loss")

#: Columns of an events table. Times are on the input's own time axis.
EVENT_COLUMNS: tuple[Column, ...] = (
    Column("type", "str", "", "fixation, saccade, blink or loss", True),
    Column("onset_s", "float64", "s", "time of the first sample of the event", True),
    Column("offset_s", "float64", "s", "end of the event: the time of the first sample after it (at the end of the data: its last sample plus the median sample interval)", True),
    Column("duration_ms", "float64", "ms", "offset_s - onset_s, in ms", True),
    Column("yaw_deg", "float64", "deg", "fixations: mean yaw; saccades: NaN"),
    Column("pitch_deg", "float64", "deg", "fixations: mean pitch; saccades: NaN"),
    Column("amplitude_deg", "float64", "deg", "saccades: angular distance between the centres of the fixations before and after"),
    Column("dispersion_deg", "float64", "deg", "fixations: (max-min yaw) + (max-min pitch)"),
    Column("n_samples", "int64", "", "samples in the event"),
)


def empty_samples() -> pd.DataFrame:
    """A samples table with every column and no rows."""
    return pd.DataFrame({c.name: pd.Series(dtype=c.dtype) for c in SAMPLE_COLUMNS})


def check_samples(df: pd.DataFrame, source: str = "samples table") -> pd.DataFrame:
    """Validate a samples table; return it with canonical dtypes.

    Raises :class:`AspectusInputError` naming the first broken rule: a required
    column missing, timestamps not finite, not increasing, or duplicated.
    """
    missing = [c for c in REQUIRED_SAMPLE_COLUMNS if c not in df.columns]
    if missing:
        raise AspectusInputError(
            f"missing column(s) {', '.join(missing)}; a samples table needs {', '.join(REQUIRED_SAMPLE_COLUMNS)}",
            path=source,
        )
    out = df.copy()
    t = pd.to_numeric(out["t_s"], errors="coerce").to_numpy(dtype=float)
    if len(t):
        bad = ~np.isfinite(t)
        if bad.any():
            raise AspectusInputError("time is missing or not a number", path=source,
                                    where=f"row {int(np.argmax(bad)) + 1}", hint="every sample needs a time")
        d = np.diff(t)
        if (d < 0).any():
            i = int(np.argmax(d < 0)) + 1
            raise AspectusInputError(f"time goes backwards ({t[i - 1]:.6g} s then {t[i]:.6g} s)", path=source,
                                    where=f"row {i + 1}", hint="sort the table by time or fix the clock column")
        if (d == 0).any():
            i = int(np.argmax(d == 0)) + 1
            raise AspectusInputError(f"duplicate timestamp {t[i]:.6g} s", path=source, where=f"row {i + 1}",
                                    hint="remove repeated samples")
    out["t_s"] = t
    for name in ("yaw_deg", "pitch_deg"):
        out[name] = pd.to_numeric(out[name], errors="coerce").astype(float)
    valid = out["valid"]
    if valid.dtype != bool:
        valid = valid.map(lambda v: str(v).strip().lower() in ("1", "true", "yes", "1.0"))
    out["valid"] = valid.astype(bool) & np.isfinite(out["yaw_deg"]) & np.isfinite(out["pitch_deg"])
    return out
