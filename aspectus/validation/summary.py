"""The study summary table: one row per feature, written to paste into a paper."""
from __future__ import annotations


import numpy as np
import pandas as pd

from aspectus.validation.agreement import DEFAULT_ICC_FORM



def _finite_at_least(v, lo) -> bool:
    try:
        return bool(np.isfinite(float(v)) and float(v) >= lo)
    except (TypeError, ValueError):
        return False


def _fmt(v, nd=2):
    try:
        v = float(v)
    except (TypeError, ValueError):
        return "n/a"
    if not np.isfinite(v):
        return "n/a"
    s = f"{v:.{nd}f}"
    return s[1:] if s.startswith("-") and float(s) == 0 else s  # "-0.00" reads as a negative number: "0.00"


def _est(v, lo, hi) -> str:
    """"estimate [low, high]"; "n/a" alone where there is no estimate (not "n/a [n/a, n/a]")."""
    return "n/a" if _fmt(v) == "n/a" else f"{_fmt(v)} [{_fmt(lo)}, {_fmt(hi)}]"


def _span(lo, hi) -> str:
    """"low to high"; "n/a" alone where neither end could be computed."""
    a, b = _fmt(lo), _fmt(hi)
    return "n/a" if a == b == "n/a" else f"{a} to {b}"


def study_summary(pooled: pd.DataFrame, per: pd.DataFrame, *, icc_form: str = DEFAULT_ICC_FORM) -> pd.DataFrame:
    """The table to paste: one row per feature (window scope), estimates with 95 % intervals as text.

    ``pearson_r``, the ICC, ``ccc``, ``ba_bias`` and ``ba_loa`` take all
    windows as independent; ``rmcorr`` (with ``rmcorr_df``), ``ba_bias_repeated``
    and ``ba_loa_repeated`` allow for several windows per participant;
    ``participant_means_r`` correlates the participants' means (one point per
    participant).
    """
    rows = []
    ok = per[per.get("status", pd.Series(dtype=str)) == "ok"] if len(per) else per
    n_part = int(ok["participant"].nunique()) if len(ok) else 0
    for _, r in pooled[pooled["scope"] == "window"].iterrows() if len(pooled) else []:
        g = lambda c: r.get(c, np.nan)  # noqa: E731, B023 - used within the iteration - repeated-measures columns may be absent
        rows.append({
            "feature": r["feature"], "participants": n_part, "windows": int(r["n"]),
            "mean_webcam": _fmt(r["mean_webcam"]), "mean_reference": _fmt(r["mean_reference"]),
            "pearson_r": _est(r["pearson_r"], r["pearson_ci_low"], r["pearson_ci_high"]),
            f"icc_{icc_form.replace(',', '_')}": _est(r["icc"], r["icc_ci_low"], r["icc_ci_high"]),
            "ccc": _est(r["ccc"], r["ccc_ci_low"], r["ccc_ci_high"]),
            "ba_bias": _est(r["ba_bias"], r["ba_bias_ci_low"], r["ba_bias_ci_high"]),
            "ba_loa": _span(r["ba_loa_low"], r["ba_loa_high"]),
            "rmcorr": _est(g("rmcorr"), g("rmcorr_ci_low"), g("rmcorr_ci_high")),
            # N - k - 1 below 1 (one window per participant) means there is no estimate, not a negative df
            "rmcorr_df": _fmt(g("rmcorr_df") if _finite_at_least(g("rmcorr_df"), 1) else np.nan, 0),
            "ba_bias_repeated": _est(g("ba_rm_bias"), g("ba_rm_bias_ci_low"), g("ba_rm_bias_ci_high")),
            "ba_loa_repeated": _span(g("ba_rm_loa_low"), g("ba_rm_loa_high")),
            "participant_means_r": _est(g("means_pearson_r"), g("means_pearson_ci_low"),
                                        g("means_pearson_ci_high")),
        })
    return pd.DataFrame(rows)
