"""The one samples schema, the events schema, and the coordinate frame.

Coordinate frame (used for gaze *and* head pose, everywhere in aspectus)
------------------------------------------------------------------------
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
``tests/webcam/test_frame_signs.py`` pins these signs.

"Left" and "right" eye mean the subject's own left and right eye, in the samples' columns and in run.json's
per-eye records alike, mirrored clip or not (``aspectus.webcam.gaze.unmirror`` and ``unmirror_record``:
the face mesh's right eye is the subject's left in a mirrored picture).

Picture coordinates (every 2-D position on a picture, in px): ``x`` right,
``y`` down, origin at the top-left *corner* of the top-left pixel, so pixel
``i`` spans ``[i, i + 1)`` and its centre lies at ``i + 0.5``: the face mesh's
landmarks (normalised coordinates times width and height) and the renderer's
truth use it, and so does every position aspectus passes on. OpenCV's
sampling and drawing (``remap``, ``warpAffine``, ``matchTemplate``'s indices,
``circle``, ``polylines``) put pixel ``i``'s centre at ``i``: a position
crosses between the two only through :func:`aspectus.geometry.to_opencv_px`
and :func:`aspectus.geometry.from_opencv_px`.

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
    """One column of a table aspectus writes: name (with its unit), dtype, unit, definition, human label."""

    name: str
    dtype: str
    unit: str
    doc: str
    required: bool = False
    label: str = ""

    @property
    def human(self) -> str:
        """The label people read (reports, the app), with the unit: ``"Fixation duration, mean (ms)"``."""
        text = self.label or _label_from_name(self.name, self.unit)
        return f"{text} ({self.unit})" if self.unit and self.unit not in ("", "1") else text


_UNIT_SUFFIXES = ("_per_min", "_per_s", "_deg_s", "_deg", "_ms", "_mm", "_px", "_s", "_frac", "_hz")


def _label_from_name(name: str, unit: str) -> str:
    base = name
    for suf in _UNIT_SUFFIXES:
        if base.endswith(suf) and len(base) > len(suf):
            base = base[: -len(suf)]
            break
    text = base.replace("_", " ")
    return text[:1].upper() + text[1:]


#: Columns of a gaze samples table, one row per frame (webcam) or per sample
#: (reference tracker). Only the ``required`` ones must be present; the rest are
#: filled by the webcam pipeline and may be absent in reference data.
SAMPLE_COLUMNS: tuple[Column, ...] = (
    Column("t_s", "float64", "s", "time of the sample; for clips seconds from the first frame's presentation timestamp", True),
    Column("valid", "bool", "", "gaze angles usable: face found, eyes open, head turned no further than the limit (default 45 deg), a new picture (not repeated_picture), estimate finite", True),
    Column("yaw_deg", "float64", "deg", "binocular gaze yaw (subject's right positive), NaN when not valid", True),
    Column("pitch_deg", "float64", "deg", "binocular gaze pitch (up positive), NaN when not valid", True),
    Column("frame_index", "int64", "", "0-based index of the decoded frame"),
    Column("pts_s", "float64", "s", "presentation timestamp from the container, on the container's own clock"),
    Column("face_found", "bool", "", "the followed face was tracked in this frame (false while only other faces are in view)"),
    Column("face_count", "int64", "", "number of faces found in this frame, the followed one or not"),
    Column("repeated_picture", "bool", "", "the frame's picture is the frame before's again, pixel for pixel: the camera "
           "delivered no new picture and the recorder repeated its last (the sample is not valid)"),
    Column("blink", "bool", "", "eyelids closed: the two eyes' mean aperture, or either eye's own, below "
           "blink_rel_threshold (default 0.6) of this person's open-eye level, widened by blink_pad_ms on each side"),
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
    Column("ear_left", "float64", "", "eye aspect ratio of the subject's own left eye (Soukupova & Cech 2016)"),
    Column("ear_right", "float64", "", "eye aspect ratio of the subject's own right eye"),
    Column("aperture_rel", "float64", "", "mean eye aspect ratio relative to this clip's open-eye level (1 = typical open)"),
    Column("pupil", "float64", "a.u.", "pupil size of a reference tracker (arbitrary units), NaN for webcam"),
)

SAMPLE_COLUMN_BY_NAME = {c.name: c for c in SAMPLE_COLUMNS}
REQUIRED_SAMPLE_COLUMNS = tuple(c.name for c in SAMPLE_COLUMNS if c.required)

#: Event types written to ``events.csv``.
EVENT_TYPES = ("fixation", "saccade", "blink", "loss")

#: Columns of an events table. Times are on the input's own time axis. Each
#: sample stands for the time from half an interval before it to half an
#: interval after it (half-way to each neighbour), so fixations, blinks and
#: loss tile the time axis and a fixation's duration estimates its true
#: duration at any sampling rate.
EVENT_COLUMNS: tuple[Column, ...] = (
    Column("type", "str", "", "fixation, saccade, blink or loss", True),
    Column("onset_s", "float64", "s", "start: half an interval before the event's first sample (saccades: the time of the last sample of the fixation before)", True),
    Column("offset_s", "float64", "s", "end: half an interval after the event's last sample (saccades: the time of the first sample of the fixation after); a loss that is a hole in the time axis runs from half an interval after the sample before it to half an interval before the sample after it", True),
    Column("duration_ms", "float64", "ms", "offset_s - onset_s, in ms; saccades last at least one sample interval, and below some 200 Hz their duration is only an upper bound", True),
    Column("yaw_deg", "float64", "deg", "fixations: mean yaw; others: NaN"),
    Column("pitch_deg", "float64", "deg", "fixations: mean pitch; others: NaN"),
    Column("amplitude_deg", "float64", "deg", "saccades: angular distance between the centres of the fixations before and after"),
    Column("dispersion_deg", "float64", "deg", "fixations: (max-min yaw) + (max-min pitch) over the fixation's usable samples. A fixation joined from neighbours (merge_gap_ms with merge_distance_deg, merge_noise_factor or merge_alpha) spans both and the samples between, so it can exceed dispersion_threshold_deg: the threshold tests each part as detected, the merge only their mean positions"),
    Column("n_samples", "int64", "", "samples of the input in the event (saccades: strictly between the two fixations)"),
    Column("dispersion_threshold_deg", "float64", "deg", "fixations found by I-DT: the dispersion threshold for a window of this fixation's sample count; NaN for other detectors (a merged fixation may exceed it: see dispersion_deg)"),
    Column("dispersion_noise_deg", "float64", "deg", "fixations found by I-DT: the dispersion that the recording's noise alone is expected to reach over this many samples (compare with dispersion_deg)"),
    Column("peak_velocity_deg_s", "float64", "deg/s", "saccades: peak gaze speed (Savitzky-Golay, 20 ms); NaN where the rate cannot resolve it (see peak_velocity_note)"),
    Column("peak_velocity_note", "str", "", "saccades: why peak_velocity_deg_s is NaN; empty where measured"),
)


_EVENT_COLUMN_BY_NAME = {c.name: c for c in EVENT_COLUMNS}

#: unit of a column aspectus does not define, from the end of its name (names carry units), longest first
UNIT_SUFFIXES: tuple[tuple[str, str], ...] = (
    ("_per_min", "1/min"), ("_per_s", "1/s"), ("_ms", "ms"), ("_s", "s"), ("_deg", "deg"), ("_mm", "mm"),
    ("_px", "px"), ("_hz", "Hz"), ("_frac", "1"), ("_rel", "1"),
)


def column_unit(name: str) -> str:
    """Unit of an aspectus table column: its definition (:func:`column`), else the end of its name.

    Parameters
    ----------
    name : str
        Column name of a samples, events, features or study table.

    Returns
    -------
    str
        The unit (``"s"``, ``"ms"``, ``"deg"``, ``"mm"``, ``"px"``,
        ``"1/s"``, ``"1/min"``, ``"Hz"``, ``"a.u."``, ``"1"`` for fractions),
        or ``""`` for columns without one (labels, flags, counts).

    Examples
    --------
    >>> column_unit("fixation_duration_mean_ms")
    'ms'
    >>> column_unit("blink_rate_per_min")
    '1/min'
    >>> column_unit("pupil")
    'a.u.'
    >>> column_unit("participant")
    ''
    """
    c = column(name)
    if c is not None:
        return c.unit
    for suffix, unit in UNIT_SUFFIXES:
        if name.endswith(suffix) and len(name) > len(suffix):
            return unit
    return ""


def column_table(columns) -> dict:
    """``{name: {"unit": ..., "doc": ...}}`` of a column table, for run.json and the events sidecar."""
    return {c.name: {"unit": c.unit, "doc": c.doc} for c in columns}


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


#: Columns of the features table besides the scope columns (``scope``, ``label``, ``start_s``, ``end_s``)
#: and ``n_samples``: one row per clip, fixed window and task segment (:mod:`aspectus.events.features`).
#: Counting rule: a fixation, saccade, blink or loss belongs to the scope its onset falls in; fractions of
#: time are clipped at the scope's edges. "Recorded time" is the part of the scope the recording covers,
#: holes in its time axis included (they count as missing). Rates are per minute of recorded time
#: (``fixation_rate_per_s`` is kept for files written before the per-minute rates existed). Counts are
#: NaN, not 0, in a scope without a valid sample.
FEATURE_COLUMNS: tuple[Column, ...] = (
    Column("fixation_count", "int64", "", "fixations whose onset lies in the scope", label="Fixations"),
    Column("fixation_rate_per_s", "float64", "1/s", "fixation_count per second of recorded time",
           label="Fixation rate"),
    Column("fixation_rate_per_min", "float64", "1/min", "fixation_count per minute of recorded time",
           label="Fixation rate"),
    Column("fixation_duration_mean_ms", "float64", "ms", "mean duration of those fixations",
           label="Fixation duration, mean"),
    Column("fixation_duration_median_ms", "float64", "ms", "median duration of those fixations",
           label="Fixation duration, median"),
    Column("fixation_duration_sd_ms", "float64", "ms", "SD (n - 1) of their durations; NaN below 2 fixations",
           label="Fixation duration, SD"),
    Column("fixation_time_frac", "float64", "1", "time inside fixations (clipped at the scope's edges) over recorded "
           "time", label="Time in fixations (share)"),
    Column("fixation_dispersion_mean_deg", "float64", "deg", "mean of the fixations' dispersion_deg ((max-min yaw) + "
           "(max-min pitch))", label="Fixation dispersion, mean"),
    Column("fixation_dispersion_median_deg", "float64", "deg", "median of the fixations' dispersion_deg",
           label="Fixation dispersion, median"),
    Column("saccade_count", "int64", "", "saccades (between two fixations at most saccade_max_ms apart) whose onset "
           "lies in the scope", label="Saccades"),
    Column("saccade_rate_per_min", "float64", "1/min", "saccade_count per minute of recorded time",
           label="Saccade rate"),
    Column("saccade_amplitude_mean_deg", "float64", "deg", "mean amplitude (fixation centre to fixation centre)",
           label="Saccade amplitude, mean"),
    Column("saccade_amplitude_median_deg", "float64", "deg", "median amplitude", label="Saccade amplitude, median"),
    Column("saccade_amplitude_sd_deg", "float64", "deg", "SD (n - 1) of the amplitudes; NaN below 2 saccades",
           label="Saccade amplitude, SD"),
    Column("saccade_duration_mean_ms", "float64", "ms", "mean saccade duration where the rate resolves it "
           "(>= 200 Hz); NaN below, where a saccade spans one or two samples", label="Saccade duration, mean"),
    Column("saccade_peak_velocity_mean_deg_s", "float64", "deg/s", "mean of the measured peak velocities; NaN where "
           "none is measurable", label="Saccade peak velocity, mean"),
    Column("blink_count", "int64", "", "blinks whose onset lies in the scope", label="Blinks"),
    Column("blink_rate_per_min", "float64", "1/min", "blink_count per minute of recorded time", label="Blink rate"),
    Column("blink_duration_mean_ms", "float64", "ms", "mean blink duration", label="Blink duration, mean"),
    Column("loss_count", "int64", "", "data-loss periods (not blinks; gaps longer than the fill limit, holes in the "
           "time axis included) whose onset lies in the scope", label="Data-loss periods"),
    Column("loss_frac", "float64", "1", "time in data loss (clipped at the scope's edges) over recorded time",
           label="Data loss (share)"),
    Column("valid_frac", "float64", "1", "time covered by samples the input marked valid over recorded time (holes "
           "in the time axis count as not valid)", label="Usable gaze (share)"),
    Column("noise_rms_s2s_deg", "float64", "deg", "precision: RMS of the sample-to-sample distances between "
           "consecutive valid samples (before any smoothing) of the same fixation (Holmqvist, Nystrom & Mulvey 2012); the same figure as the "
           "clip's noise_rms_s2s_deg in the sidecar and summary", label="Noise, RMS sample to sample"),
    Column("noise_rms_s2s_33ms_deg", "float64", "deg", "precision at a 33 ms step: RMS of the distances between "
           "valid samples of the same fixation 33 ms apart (the nearest whole number of sample intervals, at least "
           "one); noise_rms_s2s_deg at 30 fps and comparable with it at any frame rate (the per-sample figure reads "
           "lower at higher rates where the error changes over tens of ms); the clip's value sets the precision "
           "tier, together with noise_sd_deg", label="Noise, RMS over 33 ms steps"),
    Column("noise_sd_deg", "float64", "deg", "precision as SD: sqrt(sd_yaw^2 + sd_pitch^2) of the valid samples "
           "(before any smoothing) about their fixation's mean, pooled over the fixations (n - 1 each; Holmqvist, Nystrom & Mulvey 2012); "
           "noise_rms_s2s_deg / sqrt(2) for white noise, higher where the error wanders slowly within a fixation; "
           "filtering lowers it far less than the sample-to-sample figures (a k-sample average of white noise: SD / "
           "sqrt(k), RMS-S2S / k); the clip's value sets the precision tier together with noise_rms_s2s_33ms_deg", label="Noise, SD within fixations"),
)
#: feature column names, in order
FEATURE_COLUMN_NAMES: tuple[str, ...] = tuple(c.name for c in FEATURE_COLUMNS)
FEATURE_COLUMN_BY_NAME = {c.name: c for c in FEATURE_COLUMNS}


#: Gaze-quality columns of the known-target check (:mod:`aspectus.targets`), one value per clip: the same names
#: in ``target_quality.csv`` (``aspectus targets table``), in the study table ``study_features.csv`` (``aspectus
#: batch``; empty where the clip has no check) and in the validation study's ``participants.csv``. Accuracy and
#: precision follow Holmqvist, Nystroem & Mulvey (2012, ETRA; from memory); the figures are computed in
#: :func:`aspectus.targets.analysis.check_samples`, the verdict by :class:`aspectus.targets.study.ExclusionRule`.
TARGET_QUALITY_COLUMNS: tuple[Column, ...] = (
    Column("target_start_s", "float64", "s", "clip time of the sequence's start (the flash's first frame)",
           label="Target sequence start"),
    Column("target_align_method", "object", "", "how the start was found: flash, xcorr or given",
           label="Target sequence found by"),
    Column("target_offset_yaw_deg", "float64", "deg", "fitted gaze yaw at the screen's centre (offset of the "
           "offset+gain fit)", label="Target check offset, yaw"),
    Column("target_offset_pitch_deg", "float64", "deg", "fitted gaze pitch at the screen's centre",
           label="Target check offset, pitch"),
    Column("target_gain_yaw", "float64", "deg/deg", "fitted measured yaw per degree of target x",
           label="Target check gain, yaw"),
    Column("target_gain_pitch", "float64", "deg/deg", "fitted measured pitch per degree of target y",
           label="Target check gain, pitch"),
    *(Column(f"target_gain_{axis}_ci_{end}", "float64", "deg/deg", f"{which} end of the {axis} gain's 95 % "
             "confidence interval (least-squares slope, t distribution with n - 2 degrees of freedom)",
             label=f"Target check gain, {axis}, 95 % interval {which}")
      for axis in ("yaw", "pitch") for end, which in (("low", "lower"), ("high", "upper"))),
    Column("target_accuracy_offset_deg", "float64", "deg", "mean angle between each still dot and the median gaze "
           "on it after the offset-only fit", label="Accuracy after offset"),
    Column("target_accuracy_offset_gain_deg", "float64", "deg", "the same after the offset+gain fit",
           label="Accuracy after offset and gain"),
    Column("target_accuracy_offset_gain_loo_deg", "float64", "deg", "the same with each dot left out of its own "
           "fit (leave-one-out)", label="Accuracy after offset and gain, leave-one-out"),
    Column("target_accuracy_noise_floor_deg", "float64", "deg", "the accuracy the measured noise alone would give; "
           "what is above it is systematic error", label="Accuracy noise floor"),
    Column("target_precision_rms_s2s_deg", "float64", "deg", "median over still dots of the RMS sample-to-sample "
           "angular step of the mapped gaze", label="Precision, RMS sample to sample"),
    Column("target_precision_sd_deg", "float64", "deg", "median over still dots of the SD of the mapped gaze "
           "(sqrt(sd_x^2 + sd_y^2))", label="Precision, SD"),
    Column("target_loss_frac", "float64", "1", "share of the sequence's frames without valid gaze",
           label="Data loss on the target sequence (share)"),
    Column("target_n_targets_used", "float64", "", "still dots with enough valid samples for the fit",
           label="Still dots used"),
    Column("target_n_fixation_targets", "float64", "", "still dots shown", label="Still dots shown"),
    Column("target_n_fixations_on_targets", "float64", "", "detected fixations on the dots",
           label="Fixations on the dots"),
    Column("target_n_targets_fixated", "float64", "", "still dots with a detected fixation on them",
           label="Dots fixated"),
    Column("target_pursuit_gain", "float64", "deg/deg", "median smooth-pursuit gain over the moving sweeps (gaze "
           "speed along the sweep over the dot's speed)", label="Pursuit gain"),
    Column("target_stale", "object", "", "True when the clip's samples changed since the check was made",
           label="Target check out of date"),
    Column("target_excluded", "object", "", "True when the session breaks the exclusion rule (rule text in the "
           "table's sidecar or report); empty where the clip has no check", label="Excluded by the quality rule"),
    Column("target_exclusion_reasons", "object", "", "which thresholds the session broke", label="Exclusion reasons"),
    Column("target_flags", "object", "", "the check's warnings, separated by ' | '", label="Target check notes"),
)
TARGET_QUALITY_COLUMN_NAMES: tuple[str, ...] = tuple(c.name for c in TARGET_QUALITY_COLUMNS)
TARGET_QUALITY_COLUMN_BY_NAME = {c.name: c for c in TARGET_QUALITY_COLUMNS}


def column(name: str) -> Column | None:
    """The definition of a samples, events, features or target-quality column by name (None if aspectus does not
    define it)."""
    return (FEATURE_COLUMN_BY_NAME.get(name) or SAMPLE_COLUMN_BY_NAME.get(name) or _EVENT_COLUMN_BY_NAME.get(name)
            or TARGET_QUALITY_COLUMN_BY_NAME.get(name))


def human_label(name: str) -> str:
    """What people read for a column name: its label with the unit, or a readable form of the name."""
    c = column(name)
    return c.human if c is not None else _label_from_name(name, "")
