"""Agreement statistics that respect windows nested in participants.

Repeated-measures correlation (Bakdash & Marusich 2017), Bland & Altman's
(2007) limits of agreement for repeated measurements, and agreement of the
participants' means, one row per (scope, feature)."""
from __future__ import annotations

import warnings

import numpy as np
import pandas as pd

from aspectus.validation.pair import _paired_features
from aspectus.validation.agreement import DEFAULT_ICC_FORM, AgreementWarning



#: columns of :func:`repeated_agreement_table` after scope and feature
REPEATED_COLUMNS = (
    "participants", "rmcorr", "rmcorr_ci_low", "rmcorr_ci_high", "rmcorr_df", "rmcorr_p", "rmcorr_slope",
    "ba_rm_bias", "ba_rm_bias_ci_low", "ba_rm_bias_ci_high", "ba_rm_sd", "ba_rm_sd_within", "ba_rm_sd_between",
    "ba_rm_loa_low", "ba_rm_loa_high", "means_n", "means_pearson_r", "means_pearson_ci_low",
    "means_pearson_ci_high", "means_icc", "means_icc_ci_low", "means_icc_ci_high", "means_ba_bias",
    "means_ba_loa_low", "means_ba_loa_high", "repeated_notes")


def repeated_agreement_table(pairs: pd.DataFrame, features, *, subject: str = "participant",
                             icc_form: str = DEFAULT_ICC_FORM, confidence: float = 0.95
                             ) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Agreement that respects windows nested in participants, one row per (scope, feature).

    Returns
    -------
    table : DataFrame
        Per (scope, feature): ``participants``; the repeated-measures
        correlation ``rmcorr`` with its interval, ``rmcorr_df`` (N - k - 1),
        p value and common slope (Bakdash & Marusich 2017); the Bland-Altman
        bias (interval allowing for the clustering) and limits for a single
        window when each participant has several and their true value varies,
        ``ba_rm_*`` (Bland & Altman 2007); and the comparison of the
        participants' mean values, one point per participant, ``means_*``
        (Pearson r, ICC, Bland-Altman on the means - limits for a
        participant's mean, not for a single window).
    means : DataFrame
        One row per (scope, feature, participant): windows, mean webcam, mean
        reference, mean and SD of the differences.
    """
    from aspectus.validation.agreement import bland_altman, bland_altman_repeated, icc, pearson, rmcorr, subject_means

    rows, mrows = [], []
    for scope, f, p in _paired_features(pairs, features):
        a, b, s = p[f"{f}_webcam"].to_numpy(float), p[f"{f}_reference"].to_numpy(float), p[subject].to_numpy()
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", AgreementWarning)
            rc = rmcorr(a, b, s, confidence=confidence)
            ba = bland_altman_repeated(a, b, s, confidence=confidence)
            means = subject_means(a, b, s)
            ma, mb = means["mean_a"].to_numpy(float), means["mean_b"].to_numpy(float)
            mp = pearson(ma, mb, confidence=confidence)
            mi = icc(np.column_stack([ma, mb]) if len(means) else np.empty((0, 2)), form=icc_form,
                     confidence=confidence)
            mba = bland_altman(ma, mb, confidence=confidence)
        notes = list(dict.fromkeys(str(w.message) for w in caught if issubclass(w.category, AgreementWarning)))
        rows.append({
            "scope": scope, "feature": f, "participants": rc.n_subjects,
            "rmcorr": rc.estimate, "rmcorr_ci_low": rc.ci_low, "rmcorr_ci_high": rc.ci_high, "rmcorr_df": rc.df,
            "rmcorr_p": rc.p_value, "rmcorr_slope": rc.slope,
            "ba_rm_bias": ba.bias, "ba_rm_bias_ci_low": ba.bias_ci_low, "ba_rm_bias_ci_high": ba.bias_ci_high,
            "ba_rm_sd": ba.sd, "ba_rm_sd_within": ba.sd_within, "ba_rm_sd_between": ba.sd_between,
            "ba_rm_loa_low": ba.loa_low, "ba_rm_loa_high": ba.loa_high,
            "means_n": int(len(means)), "means_pearson_r": mp.estimate, "means_pearson_ci_low": mp.ci_low,
            "means_pearson_ci_high": mp.ci_high, "means_icc": mi.estimate, "means_icc_ci_low": mi.ci_low,
            "means_icc_ci_high": mi.ci_high, "means_ba_bias": mba.bias, "means_ba_loa_low": mba.loa_low,
            "means_ba_loa_high": mba.loa_high, "repeated_notes": "; ".join(notes)})
        for _, m in means.iterrows():
            mrows.append({"scope": scope, "feature": f, "participant": m["subject"], "windows": int(m["n"]),
                          "mean_webcam": m["mean_a"], "mean_reference": m["mean_b"],
                          "mean_difference": m["mean_difference"], "sd_difference": m["sd_difference"]})
    table = pd.DataFrame(rows, columns=["scope", "feature", *REPEATED_COLUMNS])
    means = pd.DataFrame(mrows, columns=["scope", "feature", "participant", "windows", "mean_webcam",
                                         "mean_reference", "mean_difference", "sd_difference"])
    return table, means


