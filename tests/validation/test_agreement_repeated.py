"""Repeated-measures statistics of a study against outside references.

* rmcorr (Bakdash & Marusich 2017) against the partial correlation of an
  ordinary-least-squares ANCOVA with participant dummies, solved here
  independently with numpy's lstsq, and against scipy.stats.pearsonr for one
  participant.
* Bland-Altman with several observations per participant (Bland & Altman
  2007, "true value varies") against the paper's formula worked by hand, and
  against the ordinary Bland-Altman analysis (itself checked against the
  Bland & Altman 1986 peak-flow data in test_agreement.py) when each
  participant has one observation.

No published worked example of either method is used: none is in the field
notes, and the data of the papers' examples were not to hand.
"""
from __future__ import annotations

import warnings

import numpy as np
import pytest
from scipy import stats

from aspectus.validation.agreement import AgreementWarning, bland_altman, bland_altman_repeated, rmcorr, subject_means

# Bland & Altman (1986) peak-flow readings (l/min) - field notes, data from memory (as in test_agreement.py)
LARGE = [494, 395, 516, 434, 476, 557, 413, 442, 650, 433, 417, 656, 267, 478, 178, 423, 427]
MINI = [512, 430, 520, 428, 500, 600, 364, 380, 658, 445, 432, 626, 260, 477, 259, 350, 451]


def _study(seed=0, sizes=(7, 4, 9, 1, 5), slope=0.6):
    """Windows of several participants: own levels, one common within-participant slope, noise."""
    rng = np.random.default_rng(seed)
    subj = np.repeat([f"p{i:02d}" for i in range(len(sizes))], sizes)
    level = np.repeat(rng.normal(0, 4, len(sizes)), sizes)
    x = level + rng.normal(0, 1, subj.size)
    y = 2.0 * level + slope * (x - level) + rng.normal(0, 0.7, subj.size)
    return x, y, subj


def _ancova(x, y, subj):
    """OLS of y on participant dummies (+ x): partial r of x, residual df, F-test p. Independent of aspectus."""
    levels = sorted(set(subj))
    dummies = np.column_stack([(subj == s).astype(float) for s in levels])
    full = np.column_stack([dummies, x])
    res_red = y - dummies @ np.linalg.lstsq(dummies, y, rcond=None)[0]
    coef = np.linalg.lstsq(full, y, rcond=None)[0]
    res_full = y - full @ coef
    sse_red, sse_full = res_red @ res_red, res_full @ res_full
    df = y.size - np.linalg.matrix_rank(full)
    partial_r = np.sign(coef[-1]) * np.sqrt((sse_red - sse_full) / sse_red)
    f = (sse_red - sse_full) / (sse_full / df)
    return partial_r, df, stats.f.sf(f, 1, df), coef[-1]


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_rmcorr_equals_ancova_partial_correlation(seed):
    x, y, subj = _study(seed)
    r = rmcorr(x, y, subj)
    pr, df, p, slope = _ancova(x, y, subj)
    # Bakdash & Marusich (2017): r_rm is the partial correlation from the ANCOVA y ~ participant + x
    assert r.estimate == pytest.approx(pr, abs=1e-9)
    # ... with df = N - k - 1 (26 windows, 5 participants)
    assert r.df == df == subj.size - 5 - 1 == 20
    assert r.p_value == pytest.approx(p, abs=1e-9)  # the ANCOVA's F test of x
    assert r.slope == pytest.approx(slope, abs=1e-9)
    assert (r.n, r.n_subjects) == (26, 5)
    # Fisher z with n = df + 2, se = 1 / sqrt(df - 1): the corrected convention of the authors' R package
    # (rmcorr >= 0.5.4) and of pingouin's rm_corr (checked against pingouin below)
    q = stats.norm.ppf(0.975)
    assert r.ci_low == pytest.approx(np.tanh(np.arctanh(pr) - q / np.sqrt(df - 1)), abs=1e-12)
    assert r.ci_high == pytest.approx(np.tanh(np.arctanh(pr) + q / np.sqrt(df - 1)), abs=1e-12)
    # the pooled Pearson r is dominated by the participants' levels, rmcorr is not
    assert abs(r.estimate - stats.pearsonr(x, y)[0]) > 0.1


def test_rmcorr_is_symmetric_and_label_free():
    x, y, subj = _study(4)
    r = rmcorr(x, y, subj)
    assert rmcorr(y, x, subj).estimate == pytest.approx(r.estimate, abs=1e-12)
    relabel = np.array([{"p00": 9, "p01": 3, "p02": 7, "p03": 1, "p04": 5}[s] for s in subj])
    perm = np.random.default_rng(0).permutation(subj.size)
    assert rmcorr(x[perm], y[perm], relabel[perm]).estimate == pytest.approx(r.estimate, abs=1e-12)


def test_rmcorr_one_participant_is_pearson():
    x, y, _ = _study(5, sizes=(12,))
    r = rmcorr(x, y, ["p01"] * 12)
    ref = stats.pearsonr(x, y)  # scipy.stats as a reference library
    assert r.estimate == pytest.approx(ref[0], abs=1e-12)
    assert r.p_value == pytest.approx(ref[1], abs=1e-12)
    assert r.df == 12 - 1 - 1


def test_rmcorr_edge_cases():
    x, y, subj = _study(6)
    # NaN pairs are dropped before anything else; a participant whose pairs are all missing does not count
    xn, yn = x.copy(), y.copy()
    xn[[0, 3]] = np.nan
    yn[subj == "p03"] = np.nan
    keep = np.isfinite(xn) & np.isfinite(yn)
    r = rmcorr(xn, yn, subj)
    pr, df, _, _ = _ancova(x[keep], y[keep], subj[keep])
    assert r.estimate == pytest.approx(pr, abs=1e-9)
    assert (r.n, r.n_subjects, r.df) == (23, 4, 23 - 4 - 1) and r.df == df
    # a participant with a single window adds a pair and an intercept: df and estimate unchanged
    one = subj != "p03"
    r_without = rmcorr(x[one], y[one], subj[one])
    r_with = rmcorr(x, y, subj)
    assert r_with.estimate == pytest.approx(r_without.estimate, abs=1e-12)
    assert r_with.df == r_without.df
    # every participant with one window: no within-participant df -> NaN with a warning
    with pytest.warns(AgreementWarning, match="no within-participant degrees of freedom"):
        r = rmcorr([1, 2, 3, 4], [2, 1, 4, 3], ["a", "b", "c", "d"])
    assert np.isnan(r.estimate) and r.df == -1
    # constant differences (webcam = reference + 2): perfect within-participant association
    r = rmcorr(x + 2.0, x, subj)
    assert r.estimate == pytest.approx(1.0, abs=1e-12) and r.ci_low == r.ci_high == pytest.approx(1.0)
    # one side constant within every participant (it follows the level only): NaN with a warning
    lvl = np.repeat(np.arange(5.0), (7, 4, 9, 1, 5))
    with pytest.warns(AgreementWarning, match="does not vary within participants"):
        assert np.isnan(rmcorr(lvl, y, subj).estimate)
    # df = 3 now has an interval (the old sqrt(df - 3) gave NaN there); df = 1 is too few: estimate kept, NaN interval
    r = rmcorr([1, 2, 3, 5, 4, 6], [1, 3, 2, 4, 6, 5], ["a", "a", "a", "b", "b", "b"])
    assert r.df == 3 and np.isfinite(r.estimate) and -1 < r.ci_low < r.estimate < r.ci_high < 1
    with pytest.warns(AgreementWarning, match="too few for a confidence interval"):
        r = rmcorr([1, 2, 3, 5], [1, 3, 2, 4], ["a", "a", "b", "b"])
    assert r.df == 1 and np.isfinite(r.estimate) and np.isnan(r.ci_low)


@pytest.mark.parametrize("seed", [0, 3])
def test_rmcorr_matches_pingouin(seed):
    # pingouin (a general-purpose statistics library; dev dependency) as the outside reference: r, dof, p and the
    # 95 % interval, which pingouin rounds to 2 decimals
    pg = pytest.importorskip("pingouin")
    import pandas as pd

    x, y, subj = _study(seed, sizes=(5, 4, 6, 3))
    ref = pg.rm_corr(data=pd.DataFrame({"x": x, "y": y, "s": subj}), x="x", y="y", subject="s")
    r = rmcorr(x, y, subj)
    assert r.estimate == pytest.approx(float(ref["r"].iloc[0]), abs=1e-9)
    assert r.df == int(ref["dof"].iloc[0]) == 18 - 4 - 1
    assert r.p_value == pytest.approx(float(ref["pval"].iloc[0]), rel=1e-6)
    lo, hi = ref["CI95" if "CI95" in ref.columns else "CI95%"].iloc[0]
    assert (r.ci_low, r.ci_high) == pytest.approx((lo, hi), abs=0.005 + 1e-9)


def test_bland_altman_repeated_by_hand():
    # differences (webcam - reference) of three participants with 2, 3 and 1 windows
    a = np.array([1, 3, 4, 6, 5, 8], float)
    b = np.zeros(6)
    subj = ["A", "A", "B", "B", "B", "C"]
    ba = bland_altman_repeated(a + 10, b + 10, subj)
    # Bland & Altman (2007), true value varies, worked by hand:
    # N = 6, k = 3, m = (2, 3, 1), participant means 2, 5, 8, grand mean 27/6 = 4.5
    # SS_within = (1 + 1) + (1 + 1 + 0) + 0 = 4 on N - k = 3 df -> MS_w = 4/3
    # SS_between = 2 (2 - 4.5)^2 + 3 (5 - 4.5)^2 + 1 (8 - 4.5)^2 = 25.5 on 2 df -> MS_b = 12.75
    # divisor (N^2 - sum m^2) / ((k - 1) N) = (36 - 14) / 12 = 11/6
    # s_b^2 = (12.75 - 4/3) / (11/6) = 137/22; s^2 = 137/22 + 4/3 = 499/66
    assert ba.bias == pytest.approx(4.5, abs=1e-12)
    assert ba.ms_within == pytest.approx(4 / 3, abs=1e-12) and ba.ms_between == pytest.approx(12.75, abs=1e-12)
    assert ba.divisor == pytest.approx(11 / 6, abs=1e-12)
    assert ba.sd_between ** 2 == pytest.approx(137 / 22, abs=1e-12)
    assert ba.sd_within ** 2 == pytest.approx(4 / 3, abs=1e-12)
    assert ba.sd ** 2 == pytest.approx(499 / 66, abs=1e-12)
    assert ba.loa_low == pytest.approx(4.5 - 1.96 * np.sqrt(499 / 66), abs=1e-12)
    assert ba.loa_high == pytest.approx(4.5 + 1.96 * np.sqrt(499 / 66), abs=1e-12)
    # bias interval from the same variance components: (s_b^2 sum m^2 + s_w^2 N) / N^2, t on k - 1 = 2 df
    se = np.sqrt((137 / 22 * 14 + 4 / 3 * 6) / 36)
    assert ba.bias_ci_high == pytest.approx(4.5 + stats.t.ppf(0.975, 2) * se, abs=1e-12)
    assert (ba.n, ba.n_subjects) == (6, 3)
    # the limits are wider than the ordinary ones that take the six windows as independent
    assert ba.sd > bland_altman(a, b).sd


def test_bland_altman_repeated_one_observation_each_is_ordinary():
    subj = [f"s{i}" for i in range(17)]
    ba = bland_altman_repeated(LARGE, MINI, subj)
    ref = bland_altman(LARGE, MINI)  # Bland & Altman (1986) peak-flow data: bias -2.1, SD 38.8 (field notes)
    assert ba.bias == pytest.approx(ref.bias, abs=1e-12) and round(ba.bias, 1) == -2.1
    assert ba.sd == pytest.approx(ref.sd, abs=1e-9) and round(ba.sd, 1) == 38.8
    assert ba.loa_low == pytest.approx(ref.loa_low, abs=1e-9) and ba.loa_high == pytest.approx(ref.loa_high, abs=1e-9)
    assert (round(ba.loa_low, 1), round(ba.loa_high, 1)) == (-78.1, 73.9)  # field notes, 1.96 SD
    assert ba.bias_ci_low == pytest.approx(ref.bias_ci_low, abs=1e-9)
    assert ba.bias_ci_high == pytest.approx(ref.bias_ci_high, abs=1e-9)
    assert ba.sd_within == 0.0 and ba.divisor == pytest.approx(1.0)


def test_bland_altman_repeated_edge_cases():
    # balanced: the divisor is the number of observations per participant
    rng = np.random.default_rng(3)
    d = rng.normal(0, 1, 12) + np.repeat(rng.normal(0, 2, 4), 3)
    subj = np.repeat(list("abcd"), 3)
    ba = bland_altman_repeated(d, np.zeros(12), subj)
    assert ba.divisor == pytest.approx(3.0, abs=1e-12)
    # constant differences: no spread, the limits collapse onto the bias
    ba = bland_altman_repeated(np.arange(9.0) + 2.5, np.arange(9.0), np.repeat(list("abc"), 3))
    assert ba.bias == pytest.approx(2.5) and ba.sd == pytest.approx(0.0, abs=1e-12)
    assert ba.loa_low == pytest.approx(2.5) and ba.loa_high == pytest.approx(2.5)
    # participant means agree better than single windows: between variance estimated negative -> 0
    ba = bland_altman_repeated([0, 2, 1, 1, 0.5, 1.5], np.zeros(6), list("aabbcc"))
    assert ba.sd_between == 0.0 and ba.sd == pytest.approx(ba.sd_within)
    # NaN pairs dropped; a participant left with one window still counts
    a = np.array([1, 3, np.nan, 4, 6, 5, 8, 2.0])
    b = np.array([0, 0, 0, 0, 0, 0, 0, np.nan])
    ref = bland_altman_repeated([1, 3, 4, 6, 5, 8], np.zeros(6), list("AABBBC"))
    got = bland_altman_repeated(a, b, list("AAABBBCD"))
    assert got.sd == pytest.approx(ref.sd, abs=1e-12) and (got.n, got.n_subjects) == (6, 3)
    # one participant only: the between-participant variance cannot be estimated
    with pytest.warns(AgreementWarning, match="fewer than 2 participants"):
        assert np.isnan(bland_altman_repeated([1, 2, 3, 4], [0, 0, 0, 0], list("aaaa")).loa_low)
    with pytest.warns(AgreementWarning, match="fewer than 3 pairs"):
        assert np.isnan(bland_altman_repeated([1, 2], [0, 0], list("ab")).bias)


def test_subject_means_one_row_per_participant():
    a = np.array([1, 3, 4, 6, 5, 8, np.nan])
    b = np.array([0, 1, 1, 2, 3, 4, 0])
    t = subject_means(a, b, list("AABBBCC"))
    assert list(t["subject"]) == ["A", "B", "C"] and list(t["n"]) == [2, 3, 1]
    assert t["mean_a"].tolist() == [2, 5, 8] and t["mean_b"].tolist() == [0.5, 2, 4]
    assert t["mean_difference"].tolist() == [1.5, 3, 4]
    assert t["sd_difference"].iloc[0] == pytest.approx(np.std([1, 2], ddof=1))
    assert np.isnan(t["sd_difference"].iloc[2])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        subject_means([], [], [])
