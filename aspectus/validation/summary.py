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
    return "n/a" if not np.isfinite(v) else f"{v:.{nd}f}"


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
            "pearson_r": f"{_fmt(r['pearson_r'])} [{_fmt(r['pearson_ci_low'])}, {_fmt(r['pearson_ci_high'])}]",
            f"icc_{icc_form.replace(',', '_')}": f"{_fmt(r['icc'])} [{_fmt(r['icc_ci_low'])}, {_fmt(r['icc_ci_high'])}]",
            "ccc": f"{_fmt(r['ccc'])} [{_fmt(r['ccc_ci_low'])}, {_fmt(r['ccc_ci_high'])}]",
            "ba_bias": f"{_fmt(r['ba_bias'])} [{_fmt(r['ba_bias_ci_low'])}, {_fmt(r['ba_bias_ci_high'])}]",
            "ba_loa": f"{_fmt(r['ba_loa_low'])} to {_fmt(r['ba_loa_high'])}",
            "rmcorr": f"{_fmt(g('rmcorr'))} [{_fmt(g('rmcorr_ci_low'))}, {_fmt(g('rmcorr_ci_high'))}]",
            # N - k - 1 below 1 (one window per participant) means there is no estimate, not a negative df
            "rmcorr_df": _fmt(g("rmcorr_df") if _finite_at_least(g("rmcorr_df"), 1) else np.nan, 0),
            "ba_bias_repeated": f"{_fmt(g('ba_rm_bias'))} [{_fmt(g('ba_rm_bias_ci_low'))}, "
                                f"{_fmt(g('ba_rm_bias_ci_high'))}]",
            "ba_loa_repeated": f"{_fmt(g('ba_rm_loa_low'))} to {_fmt(g('ba_rm_loa_high'))}",
            "participant_means_r": f"{_fmt(g('means_pearson_r'))} [{_fmt(g('means_pearson_ci_low'))}, "
                                   f"{_fmt(g('means_pearson_ci_high'))}]",
        })
    return pd.DataFrame(rows)
