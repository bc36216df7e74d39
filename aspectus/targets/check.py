"""A clip's known-target check, written beside the clip's other outputs.

:func:`run_check` processes the clip (or reuses its cached samples, as
``aspectus process`` does), finds the sequence, computes the figures of
:mod:`aspectus.targets.analysis` and writes into the clip's output folder:

=========================  ======================================================
target_check.json          the sidecar: figures, fitted offset and gain, how the
                           start was found, flags, parameters, the schedule, the
                           SHA-256 of the clip, the schedule and the samples
target_check_targets.csv   one row per target: place, window, valid samples,
                           median gaze, errors, precision, pursuit gain
screen_gaze.parquet/.csv   only with ``apply_mapping=True``: every sample of the
                           session mapped to the screen (degrees and pixels)
=========================  ======================================================

The clip's ``run.json`` gets a ``target_check`` block (:func:`record_in_run_json`):
the fitted offset and gain, how the start was found, the headline figures,
the flags, the parameters and the SHA-256 of ``target_check.json`` and of the
schedule. Nothing else in ``run.json`` changes, so a batch still sees the
clip as done; processing the clip again rewrites ``run.json`` without the
block. The check's sidecar names the samples' checksum it was computed
from, so a stale check can be told from a current one (:func:`read_check`).
"""
from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pandas as pd

from aspectus import __version__
from aspectus.errors import AspectusInputError
from aspectus.targets.analysis import CheckParams, Mapping, TargetCheck, check_samples, find_start
from aspectus.targets.schedule import Schedule, deg_to_px, read_schedule

CHECK_JSON = "target_check.json"
CHECK_TARGETS_CSV = "target_check_targets.csv"
SCREEN_GAZE = "screen_gaze"
#: version of target_check.json's layout
CHECK_VERSION = 1


def map_samples(samples: pd.DataFrame, mapping: Mapping, schedule: Schedule) -> pd.DataFrame:
    """Gaze on the screen for every sample: ``t_s``, ``valid``, ``screen_x_deg``, ``screen_y_deg``,
    ``screen_x_px``, ``screen_y_px`` (offset and gain of ``mapping``; NaN where the gaze is not valid).

    The mapping holds while the head stays about where it was during the
    sequence; it is an angle mapping, so head turns are already compensated
    by the gaze estimate, but a student who moves much nearer or farther
    changes the screen's angles.
    """
    x, y = mapping.to_screen_deg(samples["yaw_deg"], samples["pitch_deg"])
    valid = samples["valid"].to_numpy(bool)
    x = np.where(valid, x, np.nan)
    y = np.where(valid, y, np.nan)
    xp, yp = deg_to_px(schedule.screen, x, y)
    return pd.DataFrame({"t_s": samples["t_s"].to_numpy(float), "valid": valid, "screen_x_deg": x,
                         "screen_y_deg": y, "screen_x_px": xp, "screen_y_px": yp})


def run_check(clip_path, schedule_path, out_dir, *, params: CheckParams | None = None, process_params=None,
              apply_mapping: bool = False, progress=None, cancel=None) -> TargetCheck:
    """Check the clip at ``clip_path`` against the schedule and write the sidecar into ``out_dir``.

    Parameters
    ----------
    clip_path : path-like
        The recorded clip with the sequence in it.
    schedule_path : path-like
        ``schedule.json`` of the sequence that was shown.
    out_dir : path-like
        The clip's output folder (as ``aspectus process`` makes it; processed here if needed).
    params : CheckParams, optional
    process_params : aspectus.webcam.pipeline.ProcessParams, optional
    apply_mapping : bool, default False
        Also write ``screen_gaze.parquet/.csv`` (the whole session on the screen).
    progress : callable(fraction, message), optional
    cancel : object with ``is_set()``, optional

    Returns
    -------
    TargetCheck
    """
    from aspectus.atomic import sha256_file, write_csv, write_json, write_parquet
    from aspectus.targets.analysis import frame_brightness
    from aspectus.webcam.pipeline import process_clip

    params = params or CheckParams()
    clip = Path(clip_path)
    out_dir = Path(out_dir)
    schedule = read_schedule(schedule_path)
    prog = progress or (lambda f, m: None)
    res = process_clip(clip, out_dir, params=process_params, progress=lambda f, m: prog(0.9 * f, m), cancel=cancel)
    samples = res.samples
    prog(0.9, f"{clip.name}: finding the target sequence")
    brightness = None
    if params.align in ("auto", "flash"):
        brightness = frame_brightness(clip, cancel=cancel)
    try:
        alignment = find_start(schedule, samples, clip_path=clip, params=params, brightness=brightness)
    except AspectusInputError as exc:
        raise AspectusInputError(exc.problem, path=clip, where=exc.where, hint=exc.hint) from None
    try:
        check = check_samples(samples, schedule, start_s=alignment["start_s"], alignment=alignment, params=params)
    except AspectusInputError as exc:  # the clip is the file the user can act on
        raise AspectusInputError(exc.problem, path=exc.path or clip, where=exc.where, hint=exc.hint) from None
    prog(0.97, f"{clip.name}: writing the check")
    doc = check.to_dict()
    doc.update({
        "format": "aspectus.target_check", "format_version": CHECK_VERSION, "aspectus": __version__,
        "clip": clip.name, "clip_sha256": sha256_file(clip), "schedule_file": Path(schedule_path).name,
        "schedule_sha256": sha256_file(schedule_path), "schedule": schedule.to_dict(),
        "samples_sha256": _samples_sha(out_dir),
        "method": "see aspectus.targets.analysis (module docstring): mapping gaze = offset + gain * target per "
                  "axis fitted on the still dots' median gaze; accuracy = mean angle between dot and mapped "
                  "median gaze; precision RMS-S2S and SD on the mapped gaze of each still dot's window",
    })
    write_csv(out_dir / CHECK_TARGETS_CSV, check.targets, float_format="%.6f")
    if apply_mapping:
        if not check.mapping.usable:
            raise AspectusInputError("the mapping could not be fitted, so it cannot be applied", path=clip)
        mapped = map_samples(samples, check.mapping, schedule)
        write_parquet(out_dir / f"{SCREEN_GAZE}.parquet", mapped)
        write_csv(out_dir / f"{SCREEN_GAZE}.csv", mapped, float_format="%.6f")
        doc["screen_gaze"] = {"files": [f"{SCREEN_GAZE}.parquet", f"{SCREEN_GAZE}.csv"],
                              "note": "offset and gain of this check applied to every sample of the clip"}
    write_json(out_dir / CHECK_JSON, doc)
    record_in_run_json(out_dir, doc)
    prog(1.0, f"{clip.name}: check done")
    return check


#: the headline figures copied into run.json's target_check block
RUN_JSON_FIGURES = ("accuracy_offset_deg", "accuracy_offset_gain_deg", "accuracy_offset_gain_loo_deg",
                    "accuracy_noise_floor_deg", "precision_rms_s2s_deg", "precision_sd_deg", "loss_frac",
                    "n_targets_used", "n_targets_precision", "n_fixation_targets", "pursuit_gain", "gain_in_range")


def record_in_run_json(out_dir, doc: dict) -> dict | None:
    """Add the check's fitted parameters to the clip's ``run.json`` (key ``target_check``); returns the block,
    or None when the folder has no readable ``run.json`` (then nothing is written)."""
    from aspectus.atomic import sha256_file, write_json
    from aspectus.run_record import read_run_json, run_json_path

    out_dir = Path(out_dir)
    run = read_run_json(out_dir)
    if run is None:
        return None
    s, a = doc.get("summary") or {}, doc.get("alignment") or {}
    block = {
        "file": CHECK_JSON,
        "sha256": sha256_file(out_dir / CHECK_JSON) if (out_dir / CHECK_JSON).is_file() else None,
        "format_version": doc.get("format_version"),
        "schedule_file": doc.get("schedule_file"), "schedule_sha256": doc.get("schedule_sha256"),
        "mapping": doc.get("mapping"),
        "alignment": {k: a.get(k) for k in ("method", "start_s", "frame_index", "xcorr_r") if k in a},
        "figures": {k: s.get(k) for k in RUN_JSON_FIGURES},
        "flags": list(doc.get("flags") or []),
        "params": doc.get("params"),
        "samples_sha256": doc.get("samples_sha256"),
    }
    run["target_check"] = block
    write_json(run_json_path(out_dir), run)
    return block


def _samples_sha(out_dir: Path) -> str | None:
    from aspectus.run_record import read_run_json

    d = read_run_json(out_dir) or {}
    try:
        return ((d.get("outputs") or {}).get("samples.parquet") or {}).get("sha256")
    except AttributeError:
        return None


def read_check(out_dir) -> dict | None:
    """The ``target_check.json`` of a clip's output folder, or None when there is none or it is unreadable.

    ``"stale"`` is added: True when the clip's samples changed since the check was made.
    """
    out_dir = Path(out_dir)
    p = out_dir / CHECK_JSON
    try:
        d = json.loads(p.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if not isinstance(d, dict) or d.get("format") != "aspectus.target_check":
        return None
    now = _samples_sha(out_dir)
    d["stale"] = bool(now and d.get("samples_sha256") and now != d.get("samples_sha256"))
    return d


def _of(n, total) -> str:
    """'n of total', or 'n/a of total' for a check written before the count was kept."""
    return f"{'n/a' if n is None else int(n)} of {total}"


def _ci(mapping: dict, axis: str, f) -> str:
    """' (95 % interval lo to hi)' of one axis's gain, or '' for a check written before the interval was kept."""
    lo, hi = mapping.get(f"gain_{axis}_ci_low"), mapping.get(f"gain_{axis}_ci_high")
    return "" if f(lo) == "n/a" or f(hi) == "n/a" else f" (95 % interval {f(lo)} to {f(hi)})"


def summary_lines(doc: dict) -> list[str]:
    """A few plain lines of a check's figures (for the terminal and the app's clip view)."""
    s, m, a = doc.get("summary", {}), doc.get("mapping", {}), doc.get("alignment", {})

    def f(v, fmt="{:.2f}"):
        try:
            return fmt.format(v) if v is not None and math.isfinite(float(v)) else "n/a"
        except (TypeError, ValueError):
            return "n/a"

    found_by = {"flash": "by its flash", "xcorr": "by the gaze's match with the dots", "given": "as given"}
    how = found_by.get(a.get("method"), f"by {a['method']}" if a.get("method") else "")
    lines = [
        f"sequence starts at {f(s.get('start_s'), '{:.3f}')} s{f' ({how})' if how else ''}; "
        f"{s.get('n_targets_used', 0)} of {s.get('n_fixation_targets', 0)} still dots usable",
        f"offset yaw {f(m.get('offset_yaw_deg'), '{:+.2f}')} deg, pitch {f(m.get('offset_pitch_deg'), '{:+.2f}')} deg "
        f"(the constant error); gain yaw {f(m.get('gain_yaw'))}{_ci(m, 'yaw', f)}, pitch {f(m.get('gain_pitch'))}"
        f"{_ci(m, 'pitch', f)} (1: the true scale)",
        f"accuracy (mean angle between dot and gaze) {f(s.get('accuracy_offset_deg'))} deg after offset, "
        f"{f(s.get('accuracy_offset_gain_deg'))} deg after offset+gain ({f(s.get('accuracy_offset_gain_loo_deg'))} "
        f"with each dot left out of its own fit; noise alone would give {f(s.get('accuracy_noise_floor_deg'))} deg)",
        f"precision {f(s.get('precision_rms_s2s_deg'))} deg sample to sample (RMS), SD "
        f"{f(s.get('precision_sd_deg'))} deg "
        f"({_of(s.get('n_targets_precision'), s.get('n_fixation_targets', 0))} still dots); "
        f"data loss {f(None if s.get('loss_frac') is None else 100 * s['loss_frac'], '{:.1f}')} %",
        f"fixations on dots {f(s.get('n_fixations_on_targets'), '{:.0f}')} (dots fixated "
        f"{f(s.get('n_targets_fixated'), '{:.0f}')} of {s.get('n_fixation_targets', 0)}); "
        f"pursuit gain {f(s.get('pursuit_gain'))} (gaze speed / speed of the moving dot; 1: keeps pace)",
    ]
    lines += [f"note: {x}" for x in doc.get("flags", [])]
    if doc.get("stale"):
        lines.append("note: the clip's samples changed since this check; run it again")
    return lines
