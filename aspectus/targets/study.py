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


def _labels(name: str) -> dict:
    """participant / session of a clip output folder's name (the project's one rule, :mod:`aspectus.labels`)."""
    from aspectus.labels import guess_labels

    lab = guess_labels(name)
    return {"participant": lab.get("participant") or name, "session": lab.get("session", "")}


def _figure_columns():
    from aspectus.schema import TARGET_QUALITY_COLUMNS

    return [c.name for c in TARGET_QUALITY_COLUMNS if c.name not in _VERDICT]


#: the columns :meth:`ExclusionRule.apply` adds (the rest are the check's figures)
_VERDICT = ("target_excluded", "target_exclusion_reasons")
_TEXT = ("target_align_method", "target_stale", "target_flags", *_VERDICT)


def check_row(doc: dict | None) -> dict:
    """The quality figures of one check (``target_check.json`` as :func:`~aspectus.targets.check.read_check`
    returns it), named as in :data:`aspectus.schema.TARGET_QUALITY_COLUMNS`; every figure NaN (text None) when
    ``doc`` is None (a clip without a check)."""
    row = {}
    s, m, a = ((doc or {}).get(k) or {} for k in ("summary", "mapping", "alignment"))
    for name in _figure_columns():
        key = name[len("target_"):]
        if doc is None:
            row[name] = None if name in _TEXT else float("nan")
        elif key == "align_method":
            row[name] = a.get("method")
        elif key == "stale":
            row[name] = bool(doc.get("stale"))
        elif key == "flags":
            row[name] = " | ".join(doc.get("flags", []))
        else:
            v = m[key] if key in m else s.get(key)
            row[name] = float("nan") if v is None else v
    return row


def collect_checks(results_dir) -> pd.DataFrame:
    """One row per clip output folder under ``results_dir`` (any depth) that holds a ``target_check.json``:
    ``participant``, ``session``, ``clip`` and the figures of :data:`aspectus.schema.TARGET_QUALITY_COLUMNS`."""
    results_dir = Path(results_dir)
    rows = []
    for p in sorted(results_dir.rglob(CHECK_JSON)):
        d = read_check(p.parent)
        if d is None:
            continue
        rows.append({**_labels(p.parent.name), "clip": p.parent.name, **check_row(d)})
    cols = ["participant", "session", "clip", *_figure_columns()]
    tab = pd.DataFrame(rows, columns=cols)
    for c in cols[3:]:
        if c not in _TEXT:
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
        """``table`` (columns of :data:`aspectus.schema.TARGET_QUALITY_COLUMNS`) with ``target_excluded`` (bool)
        and ``target_exclusion_reasons`` added. A row without a check (every figure NaN) is excluded: "no usable
        target sequence"."""
        out = table.copy()
        reasons = []

        def num(r, k):
            v = r.get(f"target_{k}")
            try:
                v = float(v)
            except (TypeError, ValueError):
                return float("nan")
            return v

        for _, r in out.iterrows():
            why = []
            n_used = num(r, "n_targets_used")
            if not np.isfinite(n_used):
                reasons.append("no usable target sequence")
                continue
            if n_used < self.min_targets_used:
                why.append(f"usable targets {n_used:.0f} < {self.min_targets_used}")
            acc = num(r, "accuracy_offset_gain_deg")
            if not np.isfinite(acc) or acc > self.max_accuracy_deg:
                why.append(f"accuracy {acc:.2f} deg > {self.max_accuracy_deg:g}")
            prec = num(r, "precision_rms_s2s_deg")
            if not np.isfinite(prec) or prec > self.max_precision_rms_s2s_deg:
                why.append(f"precision RMS-S2S {prec:.2f} deg > {self.max_precision_rms_s2s_deg:g}")
            loss = num(r, "loss_frac")
            if not np.isfinite(loss) or loss > self.max_loss_frac:
                why.append(f"data loss {loss:.2f} > {self.max_loss_frac:g}")
            for axis in ("yaw", "pitch"):
                g = num(r, f"gain_{axis}")
                if not np.isfinite(g) or not self.gain_min <= g <= self.gain_max:
                    why.append(f"{axis} gain {g:.2f} outside {self.gain_min:g}-{self.gain_max:g}")
            reasons.append("; ".join(why))
        out["target_excluded"] = [bool(x) for x in reasons]
        out["target_exclusion_reasons"] = reasons
        return out

    def to_dict(self) -> dict:
        """The thresholds and the rule in words (for sidecars)."""
        return {**asdict(self), "text": self.text()}


def _no_checks(results_dir) -> None:
    """Raise the one-line error for a results folder without any known-target check, saying what it holds."""
    from aspectus.errors import AspectusInputError
    from aspectus.run_record import RUN_JSON

    results_dir = Path(results_dir)
    if not results_dir.is_dir():
        raise AspectusInputError("no such folder", path=results_dir,
                                 hint="give the output folder of `aspectus process`/`batch` the checks were run into")
    n = sum(1 for _ in results_dir.rglob(RUN_JSON))
    held = (f"it holds {n} processed clip folder{'s' if n != 1 else ''}, none with a {CHECK_JSON}" if n
            else "it holds no processed clips")
    raise AspectusInputError(f"no known-target checks found ({held}), so there is no session to tabulate",
                             path=results_dir,
                             hint="run `aspectus targets check CLIP --schedule schedule.json -o OUTDIR` on the "
                             "clips that recorded the sequence, then tabulate OUTDIR")


def _unit_word(c) -> str:
    """What a quality column without a unit holds, after its name in the report's list (the label carries the
    unit of the others): ", yes/no" for a flag, "" for a count or a word."""
    return ", yes/no" if not c.unit and c.doc.startswith("True when") else ""


def _heading(name: str) -> str:
    """A column of the report's session table as a reader reads it (the schema's label with its unit)."""
    from aspectus.schema import TARGET_QUALITY_COLUMN_BY_NAME

    c = TARGET_QUALITY_COLUMN_BY_NAME.get(name)
    return c.human if c is not None else name.replace("_", " ").capitalize()


def write_quality_report(results_dir, out_dir, *, rule: ExclusionRule | None = None) -> dict:
    """Write ``target_quality.csv`` (one row per clip, with the verdict) and ``target_quality.md`` (the rule,
    how each figure was computed, the table) into ``out_dir``; returns their paths and counts. A folder without
    any check is an error that says what it holds (nothing is written)."""
    from aspectus.atomic import write_csv, write_text

    rule = rule or ExclusionRule()
    checks = collect_checks(results_dir)
    if not len(checks):
        _no_checks(results_dir)
    tab = rule.apply(checks)
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    csv = write_csv(out_dir / "target_quality.csv", tab, float_format="%.4f")
    from aspectus.schema import TARGET_QUALITY_COLUMNS

    shown = ["participant", "session", "target_accuracy_offset_gain_deg", "target_precision_rms_s2s_deg",
             "target_precision_sd_deg", "target_loss_frac", "target_gain_yaw", "target_gain_pitch",
             "target_pursuit_gain", "target_excluded"]
    n_ex = int(tab["target_excluded"].sum()) if len(tab) else 0
    lines = ["# Gaze quality on the known-target sequence", "",
             f"{len(tab)} session(s); {n_ex} excluded by the rule below.", "",
             "## Exclusion rule", "", rule.text(), "", "## How the figures were computed", ""]
    lines += [f"- {c.human} (`{c.name}`{_unit_word(c)}): {c.doc}" for c in TARGET_QUALITY_COLUMNS]
    lines += ["", "Offset and gain are fitted per session (gaze = offset + gain x target, per axis, least squares "
              "on the still targets' median gaze); precision is measured on the gaze mapped by that fit, in degrees "
              "of visual angle on the screen.", "", "## Sessions", "",
              "| " + " | ".join(_heading(c) for c in shown) + " | Reasons |", "|" + "---|" * (len(shown) + 1)]
    for r in tab.itertuples(index=False):
        vals = []
        for c in shown:
            v = getattr(r, c)
            vals.append(f"{v:.2f}" if isinstance(v, float) else ({True: "yes", False: "no"}.get(v, str(v))
                                                                  if isinstance(v, (bool, np.bool_)) else str(v)))
        lines.append("| " + " | ".join(vals) + f" | {r.target_exclusion_reasons} |")
    md = write_text(out_dir / "target_quality.md", "\n".join(lines) + "\n")
    return {"csv": csv, "md": md, "sessions": len(tab), "excluded": n_ex}
