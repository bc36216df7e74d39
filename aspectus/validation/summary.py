"""The study summary table: one row per feature, written to paste into a paper."""
from __future__ import annotations


import numpy as np
import pandas as pd

from aspectus.validation.agreement import DEFAULT_ICC_FORM
# the report's formatting, one rule for both: no "-0.00", "n/a" once where there is no estimate
from aspectus.validation.report import _ci, _fmt, _limits



def _finite_at_least(v, lo) -> bool:
    try:
        return bool(np.isfinite(float(v)) and float(v) >= lo)
    except (TypeError, ValueError):
        return False


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
            "pearson_r": _ci(r["pearson_r"], r["pearson_ci_low"], r["pearson_ci_high"], 2),
            f"icc_{icc_form.replace(',', '_')}": _ci(r["icc"], r["icc_ci_low"], r["icc_ci_high"], 2),
            "ccc": _ci(r["ccc"], r["ccc_ci_low"], r["ccc_ci_high"], 2),
            "ba_bias": _ci(r["ba_bias"], r["ba_bias_ci_low"], r["ba_bias_ci_high"], 2),
            "ba_loa": _limits(r["ba_loa_low"], r["ba_loa_high"], 2),
            "rmcorr": _ci(g("rmcorr"), g("rmcorr_ci_low"), g("rmcorr_ci_high"), 2),
            # N - k - 1 below 1 (one window per participant) means there is no estimate, not a negative df
            "rmcorr_df": _fmt(g("rmcorr_df") if _finite_at_least(g("rmcorr_df"), 1) else np.nan, 0),
            "ba_bias_repeated": _ci(g("ba_rm_bias"), g("ba_rm_bias_ci_low"), g("ba_rm_bias_ci_high"), 2),
            "ba_loa_repeated": _limits(g("ba_rm_loa_low"), g("ba_rm_loa_high"), 2),
            "participant_means_r": _ci(g("means_pearson_r"), g("means_pearson_ci_low"),
                                       g("means_pearson_ci_high"), 2),
        })
    return pd.DataFrame(rows)
