"""Agreement statistics against published worked examples and a reference library."""
from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from aspectus.validation.agreement import (ICC_FORMS, AgreementWarning, bland_altman, deming_slope, feature_agreement, icc,
                               icc_all, lin_ccc, pearson, spearman)
from aspectus.errors import ParameterError

# Bland & Altman (1986) peak-flow readings (l/min), first reading per meter - field notes, data from memory
LARGE = [494, 395, 516, 434, 476, 557, 413, 442, 650, 433, 417, 656, 267, 478, 178, 423, 427]
MINI = [512, 430, 520, 428, 500, 600, 364, 380, 658, 445, 432, 626, 260, 477, 259, 350, 451]

# Shrout & Fleiss (1979) Table 2: 6 targets x 4 judges - field notes
SF = np.array([[9, 2, 5, 8], [6, 1, 3, 2], [8, 4, 6, 8], [7, 1, 2, 6], [10, 5, 6, 9], [6, 2, 4, 7]], float)
# Shrout & Fleiss (1979) Table 4 values - field notes, from memory
SF_ICC = {"1,1": 0.17, "2,1": 0.29, "3,1": 0.71, "1,k": 0.44, "2,k": 0.62, "3,k": 0.91}


def test_bland_altman_peak_flow_example():
    ba = bland_altman(LARGE, MINI, loa_sd=2.0)
    # Bland & Altman (1986): mean difference -2.1, SD 38.8, limits -79.7 to 75.5 (mean +- 2 SD) - field notes
    assert round(ba.bias, 1) == -2.1
    assert round(ba.sd, 1) == 38.8
    # the paper computed its limits from the rounded mean and SD: -2.1 -+ 2 x 38.8
    assert round(round(ba.bias, 1) - 2 * round(ba.sd, 1), 1) == -79.7
    assert round(round(ba.bias, 1) + 2 * round(ba.sd, 1), 1) == 75.5
    assert ba.loa_low == pytest.approx(-79.7, abs=0.1) and ba.loa_high == pytest.approx(75.5, abs=0.1)
    ba196 = bland_altman(LARGE, MINI)
    # with 1.96 SD: -78.1 to 73.9 - field notes
    assert (round(ba196.loa_low, 1), round(ba196.loa_high, 1)) == (-78.1, 73.9)
    # intervals: bias +- t(16) SD/sqrt(n); limits +- t(16) sqrt(3 SD^2 / n) - Bland & Altman (1999)
    t = stats.t.ppf(0.975, 16)
    assert ba196.bias_ci_high - ba196.bias == pytest.approx(t * ba196.sd / np.sqrt(17), rel=1e-12)
    assert ba196.loa_high_ci_high - ba196.loa_high == pytest.approx(t * np.sqrt(3 * ba196.sd ** 2 / 17), rel=1e-12)
    assert ba196.loa_low_ci_low < ba196.loa_low < ba196.loa_low_ci_high
    assert ba196.n == 17


def test_icc_shrout_fleiss_all_six_forms():
    res = icc_all(SF)
    for form in ICC_FORMS:
        assert round(res[form].estimate, 2) == SF_ICC[form], form  # Shrout & Fleiss (1979) - field notes
        assert res[form].ci_low < res[form].estimate < res[form].ci_high
        assert res[form].n == 6 and res[form].k == 4


def test_icc_intervals_against_mcgraw_wong_f_formulas():
    # ICC(3,1) interval from the F distribution, written out independently (McGraw & Wong 1996, Table 7)
    r = icc(SF, form="3,1")
    n, k = SF.shape
    grand = SF.mean()
    bms = k * ((SF.mean(1) - grand) ** 2).sum() / (n - 1)
    ss_e = ((SF - SF.mean(1, keepdims=True) - SF.mean(0, keepdims=True) + grand) ** 2).sum()
    ems = ss_e / ((n - 1) * (k - 1))
    f0 = bms / ems
    fl = f0 / stats.f.ppf(0.975, n - 1, (n - 1) * (k - 1))
    fu = f0 * stats.f.ppf(0.975, (n - 1) * (k - 1), n - 1)
    assert r.ci_low == pytest.approx((fl - 1) / (fl + k - 1), rel=1e-12)
    assert r.ci_high == pytest.approx((fu - 1) / (fu + k - 1), rel=1e-12)
    assert r.f_value == pytest.approx(f0, rel=1e-12)
    # a perfect two-method agreement is ICC 1 whatever the form
    x = np.arange(10.0)
    assert icc(np.column_stack([x, x]), form="2,1").estimate == pytest.approx(1.0)
    # a constant offset lowers absolute agreement ICC(2,1) but not consistency ICC(3,1)
    y = x + 3.0
    assert icc(np.column_stack([x, y]), form="3,1").estimate == pytest.approx(1.0)
    assert icc(np.column_stack([x, y]), form="2,1").estimate < 0.8


def test_pearson_spearman_match_scipy():
    rng = np.random.default_rng(7)
    a = rng.normal(size=40)
    b = 0.6 * a + rng.normal(size=40)
    p = pearson(a, b)
    ref = stats.pearsonr(a, b)  # scipy.stats as reference library; its interval is Fisher z
    ci = ref.confidence_interval(confidence_level=0.95)
    assert p.estimate == pytest.approx(ref.statistic, abs=1e-9)
    assert p.ci_low == pytest.approx(ci.low, abs=1e-9)
    assert p.ci_high == pytest.approx(ci.high, abs=1e-9)
    ci90 = ref.confidence_interval(confidence_level=0.90)
    p90 = pearson(a, b, confidence=0.90)
    assert (p90.ci_low, p90.ci_high) == pytest.approx((ci90.low, ci90.high), abs=1e-9)
    b[3] = b[5]  # a tie
    s = spearman(a, b)
    assert s.estimate == pytest.approx(stats.spearmanr(a, b).statistic, abs=1e-9)
    # Bonett & Wright (2000) variance: (1 + rho^2/2) / (n - 3)
    se = np.sqrt((1 + s.estimate ** 2 / 2) / 37)
    assert s.ci_high == pytest.approx(np.tanh(np.arctanh(s.estimate) + stats.norm.ppf(0.975) * se), abs=1e-12)


def test_lin_ccc_values():
    rng = np.random.default_rng(3)
    a = rng.normal(10, 2, 60)
    b = a + rng.normal(0.5, 0.5, 60)
    c = lin_ccc(a, b)
    # Lin (1989) definition written out directly: 2 s_ab / (s_a^2 + s_b^2 + (m_a - m_b)^2), moments over n
    direct = 2 * np.cov(a, b, ddof=0)[0, 1] / (a.var() + b.var() + (a.mean() - b.mean()) ** 2)
    assert c.estimate == pytest.approx(direct, rel=1e-12)
    assert c.ci_low < c.estimate < c.ci_high < 1
    assert c.estimate < pearson(a, b).estimate  # the bias lowers concordance below correlation
    assert lin_ccc(a, a + 0.0).estimate == pytest.approx(1.0)
    # the interval narrows with more data
    a2 = rng.normal(10, 2, 600)
    c2 = lin_ccc(a2, a2 + rng.normal(0.5, 0.5, 600))
    assert (c2.ci_high - c2.ci_low) < (c.ci_high - c.ci_low)


def test_deming_gain_recovers_known_slope():
    rng = np.random.default_rng(11)
    truth = rng.uniform(1, 15, 200)
    ref = truth + rng.normal(0, 0.5, 200)
    cam = 0.8 * truth + 4.0 + rng.normal(0, 0.5, 200)  # gain 0.8, offset 4 deg
    g = deming_slope(ref, cam)
    assert g.ci_low < 0.8 < g.ci_high
    assert g.estimate == pytest.approx(0.8, abs=0.05)
    ols = stats.linregress(ref, cam).slope
    assert abs(g.estimate - 0.8) <= abs(ols - 0.8) + 1e-3  # OLS is attenuated by the reference's noise


def test_deming_with_measured_error_variances_is_unbiased_for_a_noisier_webcam():
    # true gain 1.0; the webcam errs by SD 2.0 deg, the reference by 0.1 deg (issue: ratio 1 read 1.25)
    rng = np.random.default_rng(3)
    truth = rng.uniform(-10, 10, 4000)
    ref = truth + rng.normal(0, 0.1, truth.size)
    cam = truth + rng.normal(0, 2.0, truth.size)
    with_ratio_1 = deming_slope(ref, cam).estimate
    g = deming_slope(ref, cam, error_sd_reference=0.1, error_sd_test=2.0)
    assert with_ratio_1 > 1.04  # biased: orthogonal regression leans towards the noisier side
    assert g.estimate == pytest.approx(1.0, abs=0.02) and g.ci_low < 1.0 < g.ci_high
    assert "error SDs" in g.method
    # limits (any regression text): a very large ratio gives least squares of test on reference, a very small one
    # least squares of reference on test, inverted - scipy.stats.linregress as the reference
    assert deming_slope(ref, cam, variance_ratio=1e9).estimate == pytest.approx(stats.linregress(ref, cam).slope,
                                                                                  rel=1e-6)
    assert deming_slope(ref, cam, variance_ratio=1e-9).estimate == pytest.approx(
        1.0 / stats.linregress(cam, ref).slope, rel=1e-6)


def test_deming_degenerate_cases_are_nan_with_a_warning():
    with pytest.warns(AgreementWarning, match="test method does not vary"):
        g = deming_slope([1.0, 2.0, 3.0, 4.0], [5.0, 5.0, 5.0, 5.0])
    assert np.isnan(g.estimate) and np.isnan(g.ci_low) and np.isnan(g.ci_high)
    # s_xy = 0 exactly: both vary but do not covary
    with pytest.warns(AgreementWarning, match="do not covary"):
        g = deming_slope([1.0, 2.0, 3.0, 4.0, 5.0], [1.0, 3.0, 5.0, 3.0, 1.0])
    assert np.isnan(g.estimate)


def test_icc_of_two_constant_columns_is_nan_with_a_warning():
    # the case: two constant but different columns gave -1 with CI (-1, -1)
    for form in ICC_FORMS:
        with pytest.warns(AgreementWarning, match="targets do not differ"):
            r = icc(np.column_stack([np.full(6, 2.0), np.full(6, 5.0)]), form=form)
        assert np.isnan(r.estimate) and np.isnan(r.ci_low) and np.isnan(r.ci_high)


@pytest.mark.parametrize("fn", [pearson, spearman, lin_ccc, deming_slope])
def test_degenerate_input_gives_nan_and_a_warning(fn):
    with pytest.warns(AgreementWarning, match="fewer than 3"):
        r = fn([1.0, 2.0], [1.0, 3.0])
    assert np.isnan(r.estimate) and r.n == 2
    with pytest.warns(AgreementWarning, match="vary"):
        r = fn([1.0, 2.0, 3.0, 4.0], [5.0, 5.0, 5.0, 5.0]) if fn is not deming_slope else \
            fn([5.0, 5.0, 5.0, 5.0], [1.0, 2.0, 3.0, 4.0])
    assert np.isnan(r.estimate)
    with pytest.warns(AgreementWarning):
        r = fn([np.nan, 1.0, np.nan], [1.0, np.nan, 2.0])
    assert r.n == 0


def test_degenerate_bland_altman_and_icc():
    with pytest.warns(AgreementWarning):
        ba = bland_altman([1.0], [2.0])
    assert np.isnan(ba.bias) and ba.n == 1
    with pytest.warns(AgreementWarning, match="do not vary"):
        r = icc(np.ones((5, 2)))
    assert np.isnan(r.estimate)
    with pytest.raises(ParameterError, match="ICC form"):
        icc(SF, form="4,1")
    with pytest.raises(ParameterError, match="same length"):
        pearson([1, 2, 3], [1, 2])
    with pytest.raises(ParameterError, match="confidence"):
        pearson([1, 2, 3, 4], [1, 2, 3, 5], confidence=95)


def test_feature_agreement_collects_notes_instead_of_raising():
    fa = feature_agreement([1.0, 2.0], [1.0, 2.5], feature="fixation_count")
    assert fa.n == 2 and np.isnan(fa.pearson.estimate)
    assert any("fewer than 3" in n for n in fa.notes)
    row = fa.to_row()
    for key in ("feature", "n", "pearson_r", "icc", "ccc", "ba_bias", "ba_loa_low", "ba_loa_high", "icc_form"):
        assert key in row
    assert row["icc_form"] == "ICC(2,1)"
    fa = feature_agreement(LARGE, MINI, feature="peak_flow")
    assert fa.notes == () and fa.to_row()["ba_bias"] == pytest.approx(np.mean(np.subtract(LARGE, MINI)))
