"""Known-target checks of a whole study: one row per participant and session, and an exclusion rule.

:func:`collect_checks` reads the ``target_check.json`` of every clip output
folder under a results folder (as ``aspectus batch`` or the app write them)
into a table; :class:`ExclusionRule` is a rule a team can fix before it
collects data (pre-register) and apply afterwards; :func:`write_quality_report`
writes the table, the rule's text and the per-session verdicts.
"""
from __future__ import annotations

import math
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from aspectus.errors import ParameterError
from aspectus.targets.check import CHECK_JSON, read_check

#: columns of the quality table (besides the labels), with their meaning
QUALITY_COLUMNS = {
    "clip": "clip output folder name",
    "start_s": "clip time of the sequence's flash, s",
    "align_method": "flash, xcorr or given",
    "offset_yaw_deg": "fitted gaze yaw at the screen's centre, deg",
    "offset_pitch_deg": "fitted gaze pitch at the screen's centre, deg",
    "gain_yaw": "fitted measured yaw per degree of target x",
    "gain_pitch": "fitted measured pitch per degree of target y",
    "accuracy_offset_deg": "mean angle between dot and gaze after the offset fit, deg",
    "accuracy_offset_gain_deg": "the same after the offset+gain fit, deg",
    "accuracy_offset_gain_loo_deg": "the same, each dot left out of its own fit, deg",
    "accuracy_noise_floor_deg": "the accuracy the measured noise alone would give (the rest is systematic), deg",
    "precision_rms_s2s_deg": "median over still dots of the RMS sample-to-sample step of the mapped gaze, deg",
    "precision_sd_deg": "median over still dots of the SD of the mapped gaze, deg",
    "loss_frac": "share of the sequence's frames without valid gaze",
    "n_targets_used": "still dots with enough valid samples",
    "n_fixation_targets": "still dots shown",
    "n_fixations_on_targets": "detected fixations on the dots",
    "n_targets_fixated": "still dots with a detected fixation on them",
    "pursuit_gain": "median smooth-pursuit gain over the moving sweeps",
    "stale": "the clip's samples changed since the check",
}


def _labels(name: str) -> dict:
    """participant / session of a clip output folder's name (the project's one rule, :mod:`aspectus.labels`)."""
    from aspectus.labels import guess_labels

    lab = guess_labels(name)
    return {"participant": lab.get("participant") or name, "session": lab.get("session", "")}


def collect_checks(results_dir) -> pd.DataFrame:
    """One row per clip output folder under ``results_dir`` (any depth) that holds a ``target_check.json``."""
    results_dir = Path(results_dir)
    rows = []
    for p in sorted(results_dir.rglob(CHECK_JSON)):
        d = read_check(p.parent)
        if d is None:
            continue
        s, m, a = d.get("summary", {}), d.get("mapping", {}), d.get("alignment", {})
        row = {"clip": p.parent.name, **_labels(p.parent.name)}
        for k in QUALITY_COLUMNS:
            if k in ("clip",):
                continue
            if k == "align_method":
                row[k] = a.get("method")
            elif k == "stale":
                row[k] = bool(d.get("stale"))
            elif k in m:
                row[k] = m[k]
            else:
                row[k] = s.get(k)
        row["flags"] = " | ".join(d.get("flags", []))
        rows.append(row)
    cols = ["participant", "session", *QUALITY_COLUMNS, "flags"]
    tab = pd.DataFrame(rows, columns=cols)
    for c in cols:
        if c not in ("participant", "session", "clip", "align_method", "stale", "flags"):
            tab[c] = pd.to_numeric(tab[c], errors="coerce")
    return tab


@dataclass
class ExclusionRule:
    """A session is excluded when any of these is broken (thresholds set by the team before data collection).

    The defaults are this project's suggestion for webcam gaze at a laptop,
    not a published standard; choose and pre-register your own.
    """

    max_accuracy_deg: float = 3.0
    max_precision_rms_s2s_deg: float = 1.0
    max_loss_frac: float = 0.25
    gain_min: float = 0.8
    gain_max: float = 1.25
    min_targets_used: int = 5

    def __post_init__(self):
        for k, v in asdict(self).items():
            if not (isinstance(v, (int, float)) and math.isfinite(v) and v >= 0):
                raise ParameterError(f"exclusion rule {k} must be a number >= 0, got {v!r}")
        if not self.gain_min < self.gain_max:
            raise ParameterError(f"exclusion rule gain_min ({self.gain_min}) must be below gain_max ({self.gain_max})")

    @classmethod
    def parse(cls, text: str) -> ExclusionRule:
        """From ``"max_accuracy_deg=2.5,max_loss_frac=0.2"`` (unnamed fields keep their defaults)."""
        kw = {}
        known = set(asdict(cls()))
        for part in filter(None, (x.strip() for x in (text or "").split(","))):
            if "=" not in part:
                raise ParameterError(f"exclusion rule part {part!r} is not NAME=VALUE",
                                     hint=f"names: {', '.join(sorted(known))}")
            k, v = (x.strip() for x in part.split("=", 1))
            if k not in known:
                raise ParameterError(f"unknown exclusion rule name {k!r}", hint=f"names: {', '.join(sorted(known))}")
            try:
                kw[k] = int(v) if k == "min_targets_used" else float(v)
            except ValueError:
                raise ParameterError(f"exclusion rule {k}={v!r} is not a number") from None
        return cls(**kw)

    def text(self) -> str:
        """The rule in words, ready for a pre-registration."""
        return (
            "A session's gaze data are excluded from analysis when, on the known-target sequence recorded in "
            f"that session, any of the following holds: fewer than {self.min_targets_used} still targets have "
            "usable gaze; the accuracy after fitting the per-person offset and gain (mean angle between each "
            f"still target and the median gaze on it) is worse than {self.max_accuracy_deg:g} deg; the "
            "precision (median over still targets of the RMS sample-to-sample angular step) is worse than "
            f"{self.max_precision_rms_s2s_deg:g} deg; more than {100 * self.max_loss_frac:g} % of the sequence's "
            f"frames have no valid gaze; or the fitted gain on either axis is outside {self.gain_min:g}-"
            f"{self.gain_max:g}. A session without a usable target sequence is excluded.")

    def apply(self, table: pd.DataFrame) -> pd.DataFrame:
        """``table`` with ``excluded`` (bool) and ``exclusion_reasons`` added."""
        out = table.copy()
        reasons = []
        for r in out.itertuples(index=False):
            why = []

            def bad(v):
                return v is None or not np.isfinite(v)

            if bad(r.n_targets_used) or r.n_targets_used < self.min_targets_used:
                why.append(f"usable targets {r.n_targets_used} < {self.min_targets_used}")
            if bad(r.accuracy_offset_gain_deg) or r.accuracy_offset_gain_deg > self.max_accuracy_deg:
                why.append(f"accuracy {r.accuracy_offset_gain_deg:.2f} deg > {self.max_accuracy_deg:g}")
            if bad(r.precision_rms_s2s_deg) or r.precision_rms_s2s_deg > self.max_precision_rms_s2s_deg:
                why.append(f"precision RMS-S2S {r.precision_rms_s2s_deg:.2f} deg > {self.max_precision_rms_s2s_deg:g}")
            if bad(r.loss_frac) or r.loss_frac > self.max_loss_frac:
                why.append(f"data loss {r.loss_frac:.2f} > {self.max_loss_frac:g}")
            for axis in ("yaw", "pitch"):
                g = getattr(r, f"gain_{axis}")
                if bad(g) or not self.gain_min <= g <= self.gain_max:
                    why.append(f"{axis} gain {g:.2f} outside {self.gain_min:g}-{self.gain_max:g}")
            reasons.append("; ".join(why))
        out["excluded"] = [bool(x) for x in reasons]
        out["exclusion_reasons"] = reasons
        return out


def write_quality_report(results_dir, out_dir, *, rule: ExclusionRule | None = None) -> dict:
    """Write ``target_quality.csv`` (one row per clip, with the verdict) and ``target_quality.md`` (the rule,
    how each figure was computed, the table) into ``out_dir``; returns their paths and counts."""
    from aspectus.atomic import write_csv, write_text

    rule = rule or ExclusionRule()
    tab = rule.apply(collect_checks(results_dir))
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    csv = write_csv(out_dir / "target_quality.csv", tab, float_format="%.4f")
    shown = ["participant", "session", "accuracy_offset_gain_deg", "precision_rms_s2s_deg", "precision_sd_deg",
             "loss_frac", "gain_yaw", "gain_pitch", "pursuit_gain", "excluded"]
    lines = ["# Gaze quality on the known-target sequence", "",
             f"{len(tab)} session(s); {int(tab['excluded'].sum()) if len(tab) else 0} excluded by the rule below.", "",
             "## Exclusion rule", "", rule.text(), "", "## How the figures were computed", ""]
    lines += [f"- `{k}`: {v}" for k, v in QUALITY_COLUMNS.items()]
    lines += ["", "Offset and gain are fitted per session (gaze = offset + gain x target, per axis, least squares "
              "on the still targets' median gaze); precision is measured on the gaze mapped by that fit, in degrees "
              "of visual angle on the screen.", "", "## Sessions", "",
              "| " + " | ".join(shown) + " | reasons |", "|" + "---|" * (len(shown) + 1)]
    for r in tab.itertuples(index=False):
        vals = []
        for c in shown:
            v = getattr(r, c)
            vals.append(f"{v:.2f}" if isinstance(v, float) else str(v))
        lines.append("| " + " | ".join(vals) + f" | {r.exclusion_reasons} |")
    md = write_text(out_dir / "target_quality.md", "\n".join(lines) + "\n")
    return {"csv": csv, "md": md, "sessions": len(tab), "excluded": int(tab["excluded"].sum()) if len(tab) else 0}
