"""Agreement statistics between two measurement methods (webcam vs reference tracker).

Every function takes paired measurements, drops pairs where either value is
missing, and returns a small frozen dataclass with the estimate, its
confidence interval and the number of pairs used. Degenerate input (fewer
than 3 pairs, no variation) gives NaN and an :class:`AgreementWarning`, never
an exception.

References
----------
.. [1] Bland, J. M., & Altman, D. G. (1986). Statistical methods for assessing
   agreement between two methods of clinical measurement. Lancet, i, 307-310.
.. [2] Bland, J. M., & Altman, D. G. (1999). Measuring agreement in method
   comparison studies. Statistical Methods in Medical Research, 8, 135-160.
.. [3] Shrout, P. E., & Fleiss, J. L. (1979). Intraclass correlations: uses in
   assessing rater reliability. Psychological Bulletin, 86(2), 420-428.
.. [4] McGraw, K. O., & Wong, S. P. (1996). Forming inferences about some
   intraclass correlation coefficients. Psychological Methods, 1(1), 30-46.
.. [5] Lin, L. I. (1989). A concordance correlation coefficient to evaluate
   reproducibility. Biometrics, 45(1), 255-268.
.. [6] Fisher, R. A. (1921). On the "probable error" of a coefficient of
   correlation deduced from a small sample. Metron, 1, 3-32.
.. [7] Bonett, D. G., & Wright, T. A. (2000). Sample size requirements for
   estimating Pearson, Kendall and Spearman correlations. Psychometrika,
   65(1), 23-28.
.. [8] Linnet, K. (1990). Estimation of the linear relationship between the
   measurements of two methods with proportional errors. Statistics in
   Medicine, 9, 1463-1473 (jackknife standard errors for Deming regression).
"""
from __future__ import annotations

import warnings
from dataclasses import asdict, dataclass

import numpy as np
from scipy import stats

from .errors import ParameterError

#: ICC forms of Shrout & Fleiss (1979), in their notation
ICC_FORMS = ("1,1", "2,1", "3,1", "1,k", "2,k", "3,k")
#: the form reported by default: two-way random effects, absolute agreement, single measurement
DEFAULT_ICC_FORM = "2,1"
ICC_FORM_TEXT = {
    "1,1": "ICC(1,1): one-way random effects, single measurement",
    "2,1": "ICC(2,1): two-way random effects, absolute agreement, single measurement",
    "3,1": "ICC(3,1): two-way mixed effects, consistency, single measurement",
    "1,k": "ICC(1,k): one-way random effects, mean of k measurements",
    "2,k": "ICC(2,k): two-way random effects, absolute agreement, mean of k measurements",
    "3,k": "ICC(3,k): two-way mixed effects, consistency, mean of k measurements",
}


class AgreementWarning(UserWarning):
    """A statistic could not be computed meaningfully (too few pairs, no variation); it is NaN."""


@dataclass(frozen=True)
class Estimate:
    """A statistic with its confidence interval.

    Attributes
    ----------
    estimate : float
        The statistic.
    ci_low, ci_high : float
        Bounds of the two-sided confidence interval (NaN when not available).
    n : int
        Number of complete pairs (or targets) used.
    confidence : float
        Confidence level of the interval, e.g. 0.95.
    method : str
        How the estimate and its interval were obtained.
    """

    estimate: float
    ci_low: float
    ci_high: float
    n: int
    confidence: float = 0.95
    method: str = ""

    def to_dict(self) -> dict:
        return asdict(self)


@dataclass(frozen=True)
class BlandAltman:
    """Bland-Altman bias and limits of agreement of ``a - b``, all with confidence intervals.

    Attributes
    ----------
    bias, bias_ci_low, bias_ci_high : float
        Mean difference and its t-based interval.
    sd : float
        Standard deviation of the differences (n - 1 in the denominator).
    loa_low, loa_low_ci_low, loa_low_ci_high : float
        Lower limit of agreement ``bias - z * sd`` and its interval.
    loa_high, loa_high_ci_low, loa_high_ci_high : float
        Upper limit of agreement and its interval.
    n : int
    loa_sd : float
        Multiple of ``sd`` used for the limits (1.96 by default).
    confidence : float
    """

    bias: float
    bias_ci_low: float
    bias_ci_high: float
    sd: float
    loa_low: float
    loa_low_ci_low: float
    loa_low_ci_high: float
    loa_high: float
    loa_high_ci_low: float
    loa_high_ci_high: float
    n: int
    loa_sd: float = 1.96
    confidence: float = 0.95

    def to_dict(self) -> dict:
        return asdict(self)


@dataclass(frozen=True)
class IccResult:
    """One intraclass correlation of Shrout & Fleiss (1979).

    Attributes
    ----------
    form : str
        ``"1,1"``, ``"2,1"``, ``"3,1"``, ``"1,k"``, ``"2,k"`` or ``"3,k"``.
    description : str
        The form in words.
    estimate, ci_low, ci_high : float
    n : int
        Number of targets (rows) with complete ratings.
    k : int
        Number of judges (columns).
    f_value, df1, df2, p_value : float
        F test of ICC = 0 for this form.
    confidence : float
    """

    form: str
    description: str
    estimate: float
    ci_low: float
    ci_high: float
    n: int
    k: int
    f_value: float
    df1: float
    df2: float
    p_value: float
    confidence: float = 0.95

    def to_dict(self) -> dict:
        return asdict(self)


NAN = float("nan")


def _check_confidence(confidence: float) -> float:
    if not (0.0 < confidence < 1.0):
        raise ParameterError(f"confidence must be between 0 and 1 (e.g. 0.95), got {confidence!r}")
    return float(confidence)


def paired(a, b) -> tuple[np.ndarray, np.ndarray]:
    """Two equally long vectors with the pairs where either value is missing dropped."""
    a = np.asarray(a, dtype=float).ravel()
    b = np.asarray(b, dtype=float).ravel()
    if a.shape != b.shape:
        raise ParameterError(f"paired measurements must have the same length, got {a.size} and {b.size}")
    ok = np.isfinite(a) & np.isfinite(b)
    return a[ok], b[ok]


def _degenerate(what: str, n: int, reason: str, *, confidence: float, method: str) -> Estimate:
    warnings.warn(f"{what}: {reason} (n={n}); reported as NaN", AgreementWarning, stacklevel=3)
    return Estimate(NAN, NAN, NAN, n, confidence, method)


def _fisher_ci(r: float, se: float, confidence: float) -> tuple[float, float]:
    if abs(r) >= 1.0:  # a perfect correlation: the interval collapses onto it
        return float(r), float(r)
    z = np.arctanh(r)
    q = stats.norm.ppf(0.5 + confidence / 2.0)
    return float(np.tanh(z - q * se)), float(np.tanh(z + q * se))


def pearson(a, b, *, confidence: float = 0.95) -> Estimate:
    """Pearson correlation with a Fisher-z confidence interval.

    Parameters
    ----------
    a, b : array_like
        Paired measurements (same units); pairs with a missing value are dropped.
    confidence : float
        Confidence level of the interval (0-1).

    Returns
    -------
    Estimate
        ``r`` with interval ``tanh(atanh(r) -+ z_q / sqrt(n - 3))`` [6]_.
    """
    confidence = _check_confidence(confidence)
    a, b = paired(a, b)
    n = a.size
    method = "Pearson r, Fisher z interval"
    if n < 3:
        return _degenerate("Pearson r", n, "fewer than 3 pairs", confidence=confidence, method=method)
    if np.ptp(a) == 0 or np.ptp(b) == 0:
        return _degenerate("Pearson r", n, "one side does not vary", confidence=confidence, method=method)
    r = float(np.clip(np.corrcoef(a, b)[0, 1], -1.0, 1.0))
    if n < 4:
        warnings.warn(f"Pearson r: n={n} is too few for a confidence interval", AgreementWarning, stacklevel=2)
        return Estimate(r, NAN, NAN, n, confidence, method)
    lo, hi = _fisher_ci(r, 1.0 / np.sqrt(n - 3), confidence)
    return Estimate(r, lo, hi, n, confidence, method)


def spearman(a, b, *, confidence: float = 0.95) -> Estimate:
    """Spearman rank correlation with a Fisher-z interval using the Bonett & Wright (2000) variance.

    The interval is ``tanh(atanh(rho) -+ z_q * sqrt((1 + rho^2 / 2) / (n - 3)))`` [7]_.
    Ties get average ranks.
    """
    confidence = _check_confidence(confidence)
    a, b = paired(a, b)
    n = a.size
    method = "Spearman rho, Fisher z interval (Bonett & Wright 2000 variance)"
    if n < 3:
        return _degenerate("Spearman rho", n, "fewer than 3 pairs", confidence=confidence, method=method)
    if np.ptp(a) == 0 or np.ptp(b) == 0:
        return _degenerate("Spearman rho", n, "one side does not vary", confidence=confidence, method=method)
    ra, rb = stats.rankdata(a), stats.rankdata(b)
    rho = float(np.clip(np.corrcoef(ra, rb)[0, 1], -1.0, 1.0))
    if n < 4:
        warnings.warn(f"Spearman rho: n={n} is too few for a confidence interval", AgreementWarning, stacklevel=2)
        return Estimate(rho, NAN, NAN, n, confidence, method)
    lo, hi = _fisher_ci(rho, np.sqrt((1.0 + rho * rho / 2.0) / (n - 3)), confidence)
    return Estimate(rho, lo, hi, n, confidence, method)


def lin_ccc(a, b, *, confidence: float = 0.95) -> Estimate:
    """Lin's concordance correlation coefficient with its Fisher-z interval (Lin 1989).

    ``rho_c = 2 s_ab / (s_a^2 + s_b^2 + (mean_a - mean_b)^2)`` with moments
    over ``n`` (not ``n - 1``) as in [5]_; the interval transforms ``rho_c``
    with ``atanh`` and uses the asymptotic variance of [5]_, eq. (8)/(9).
    """
    confidence = _check_confidence(confidence)
    a, b = paired(a, b)
    n = a.size
    method = "Lin's CCC, Fisher z interval (Lin 1989)"
    if n < 3:
        return _degenerate("Lin's CCC", n, "fewer than 3 pairs", confidence=confidence, method=method)
    ma, mb = a.mean(), b.mean()
    va, vb = a.var(), b.var()
    sab = np.mean((a - ma) * (b - mb))
    if va == 0 or vb == 0:
        return _degenerate("Lin's CCC", n, "one side does not vary", confidence=confidence, method=method)
    rc = float(2.0 * sab / (va + vb + (ma - mb) ** 2))
    r = sab / np.sqrt(va * vb)
    if abs(rc) >= 1.0 or r == 0:
        return Estimate(float(np.clip(rc, -1, 1)), NAN, NAN, n, confidence, method)
    u2 = (ma - mb) ** 2 / np.sqrt(va * vb)
    var_z = (1.0 / (n - 2)) * ((1 - r * r) * rc * rc / ((1 - rc * rc) * r * r)
                               + 2 * rc ** 3 * (1 - rc) * u2 / (r * (1 - rc * rc) ** 2)
                               - rc ** 4 * u2 * u2 / (2 * r * r * (1 - rc * rc) ** 2))
    if not (var_z > 0):
        return Estimate(rc, NAN, NAN, n, confidence, method)
    lo, hi = _fisher_ci(rc, np.sqrt(var_z), confidence)
    return Estimate(rc, lo, hi, n, confidence, method)


def bland_altman(a, b, *, confidence: float = 0.95, loa_sd: float = 1.96) -> BlandAltman:
    """Bland-Altman bias and 95 % limits of agreement of ``a - b`` with confidence intervals.

    Parameters
    ----------
    a, b : array_like
        Paired measurements in the same unit (``a`` the method under test,
        e.g. webcam; ``b`` the reference). Differences are ``a - b``.
    confidence : float
        Confidence level of the intervals.
    loa_sd : float
        Multiple of the SD of the differences for the limits (1.96 for 95 %
        limits; the 1986 paper used 2).

    Notes
    -----
    Bias interval: ``bias -+ t_{n-1} * sd / sqrt(n)``. Interval of each limit:
    ``limit -+ t_{n-1} * sqrt(3 sd^2 / n)``, the approximate standard error of
    Bland & Altman (1986, 1999) [1]_ [2]_.
    """
    confidence = _check_confidence(confidence)
    a, b = paired(a, b)
    n = a.size
    if n < 3:
        warnings.warn(f"Bland-Altman: fewer than 3 pairs (n={n}); reported as NaN", AgreementWarning, stacklevel=2)
        return BlandAltman(*([NAN] * 10), n=n, loa_sd=loa_sd, confidence=confidence)
    d = a - b
    bias = float(d.mean())
    sd = float(d.std(ddof=1))
    t = float(stats.t.ppf(0.5 + confidence / 2.0, n - 1))
    se_bias = sd / np.sqrt(n)
    se_loa = np.sqrt(3.0 * sd * sd / n)
    lo, hi = bias - loa_sd * sd, bias + loa_sd * sd
    return BlandAltman(bias=bias, bias_ci_low=bias - t * se_bias, bias_ci_high=bias + t * se_bias, sd=sd,
                       loa_low=lo, loa_low_ci_low=lo - t * se_loa, loa_low_ci_high=lo + t * se_loa,
                       loa_high=hi, loa_high_ci_low=hi - t * se_loa, loa_high_ci_high=hi + t * se_loa,
                       n=n, loa_sd=float(loa_sd), confidence=confidence)


def _anova_two_way(x: np.ndarray) -> dict:
    n, k = x.shape
    grand = x.mean()
    ss_total = ((x - grand) ** 2).sum()
    ss_rows = k * ((x.mean(axis=1) - grand) ** 2).sum()
    ss_cols = n * ((x.mean(axis=0) - grand) ** 2).sum()
    ss_err = ss_total - ss_rows - ss_cols
    ss_within = ss_total - ss_rows
    return {"BMS": ss_rows / (n - 1), "JMS": ss_cols / (k - 1), "EMS": ss_err / ((n - 1) * (k - 1)),
            "WMS": ss_within / (n * (k - 1))}


def icc(ratings, *, form: str = DEFAULT_ICC_FORM, confidence: float = 0.95) -> IccResult:
    """Intraclass correlation of Shrout & Fleiss (1979), any of the six forms, with its interval.

    Parameters
    ----------
    ratings : array_like, shape (n_targets, k_judges)
        Ratings; rows (targets) with any missing value are dropped. For a
        method comparison the columns are the two methods (k = 2).
    form : {"1,1", "2,1", "3,1", "1,k", "2,k", "3,k"}
        Shrout & Fleiss form [3]_. Default ``"2,1"``: two-way random effects,
        absolute agreement, single measurement (McGraw & Wong's ICC(A,1) [4]_).
    confidence : float
        Confidence level of the interval.

    Returns
    -------
    IccResult

    Notes
    -----
    Intervals: F-based for forms 1 and 3; for form 2 the Satterthwaite
    approximation of [3]_ (their eq. for ICC(2,1)), and the Spearman-Brown
    step-up of those bounds for ICC(2,k).
    """
    confidence = _check_confidence(confidence)
    key = form.replace(" ", "").replace("ICC(", "").replace(")", "").lower()
    if key not in ICC_FORMS:
        raise ParameterError(f"ICC form {form!r} is not one of {', '.join(ICC_FORMS)}")
    x = np.asarray(ratings, dtype=float)
    if x.ndim != 2 or x.shape[1] < 2:
        raise ParameterError(f"ICC needs a targets x judges table with at least 2 judges, got shape {x.shape}")
    x = x[np.isfinite(x).all(axis=1)]
    n, k = x.shape
    desc = ICC_FORM_TEXT[key]
    nan_result = IccResult(key, desc, NAN, NAN, NAN, n, k, NAN, NAN, NAN, NAN, confidence)
    if n < 3:
        warnings.warn(f"{desc}: fewer than 3 targets (n={n}); reported as NaN", AgreementWarning, stacklevel=2)
        return nan_result
    ms = _anova_two_way(x)
    bms, jms, ems, wms = ms["BMS"], ms["JMS"], ms["EMS"], ms["WMS"]
    if bms == 0 and ems == 0 and wms == 0:
        warnings.warn(f"{desc}: the ratings do not vary (n={n}); reported as NaN", AgreementWarning, stacklevel=2)
        return nan_result
    alpha = 1.0 - confidence
    fq = lambda d1, d2: float(stats.f.ppf(1.0 - alpha / 2.0, d1, d2))  # noqa: E731
    single = key.endswith(",1")
    with np.errstate(divide="ignore", invalid="ignore"):
        if key.startswith("1"):
            est = (bms - wms) / (bms + (k - 1) * wms) if single else (bms - wms) / bms
            f0, df1, df2 = bms / wms, n - 1, n * (k - 1)
        elif key.startswith("3"):
            est = (bms - ems) / (bms + (k - 1) * ems) if single else (bms - ems) / bms
            f0, df1, df2 = bms / ems, n - 1, (n - 1) * (k - 1)
        else:
            est1 = (bms - ems) / (bms + (k - 1) * ems + k * (jms - ems) / n)
            est = est1 if single else (bms - ems) / (bms + (jms - ems) / n)
            f0, df1, df2 = bms / ems, n - 1, (n - 1) * (k - 1)
        p = float(stats.f.sf(f0, df1, df2)) if np.isfinite(f0) else NAN
        if key[0] in "13":
            fl = f0 / fq(df1, df2)
            fu = f0 * fq(df2, df1)
            if single:
                lo, hi = (fl - 1) / (fl + k - 1), (fu - 1) / (fu + k - 1)
            else:
                lo, hi = 1 - 1 / fl, 1 - 1 / fu
        else:
            fj = jms / ems
            r = est1
            vn = (k - 1) * (n - 1) * (k * r * fj + n * (1 + (k - 1) * r) - k * r) ** 2
            vd = (n - 1) * k * k * r * r * fj * fj + (n * (1 + (k - 1) * r) - k * r) ** 2
            v = vn / vd
            f_star, f_2star = fq(n - 1, v), fq(v, n - 1)
            lo = n * (bms - f_star * ems) / (f_star * (k * jms + (k * n - k - n) * ems) + n * bms)
            hi = n * (f_2star * bms - ems) / (k * jms + (k * n - k - n) * ems + n * f_2star * bms)
            if not single:
                lo, hi = lo * k / (1 + lo * (k - 1)), hi * k / (1 + hi * (k - 1))
    return IccResult(key, desc, float(est), float(lo), float(hi), n, k, float(f0), float(df1), float(df2), p,
                     confidence)


def icc_all(ratings, *, confidence: float = 0.95) -> dict[str, IccResult]:
    """All six Shrout & Fleiss forms, keyed by form (``"1,1"`` ... ``"3,k"``)."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", AgreementWarning)
        out = {f: icc(ratings, form=f, confidence=confidence) for f in ICC_FORMS}
    if caught:
        warnings.warn(str(caught[0].message), AgreementWarning, stacklevel=2)
    return out


def deming_slope(reference, test, *, variance_ratio: float = 1.0, confidence: float = 0.95) -> Estimate:
    """Calibration-free gain: Deming regression slope of ``test`` on ``reference``, jackknife interval.

    Both methods measure with error, so ordinary least squares would bias the
    slope towards 0; Deming regression with error-variance ratio
    ``variance_ratio`` (1 = orthogonal regression) does not. The slope is the
    gain of the test method (webcam) relative to the reference; the intercept
    absorbs a constant offset (such as the webcam's angle kappa). Interval:
    jackknife standard error with a t quantile, n - 2 degrees of freedom [8]_.

    Parameters
    ----------
    reference, test : array_like
        Paired values in the same unit (e.g. saccade amplitudes in deg).
    variance_ratio : float
        Ratio of the test's to the reference's error variance (dimensionless).
    confidence : float
        Confidence level of the interval.
    """
    confidence = _check_confidence(confidence)
    x, y = paired(reference, test)
    n = x.size
    method = f"Deming regression slope (variance ratio {variance_ratio:g}), jackknife interval"
    if n < 3:
        return _degenerate("gain", n, "fewer than 3 pairs", confidence=confidence, method=method)
    if np.ptp(x) == 0:
        return _degenerate("gain", n, "the reference does not vary", confidence=confidence, method=method)

    def slope(xx, yy):
        mx, my = xx.mean(), yy.mean()
        sxx = np.mean((xx - mx) ** 2)
        syy = np.mean((yy - my) ** 2)
        sxy = np.mean((xx - mx) * (yy - my))
        if sxy == 0:
            return 0.0
        lam = variance_ratio
        return (syy - lam * sxx + np.sqrt((syy - lam * sxx) ** 2 + 4 * lam * sxy * sxy)) / (2 * sxy)

    b = float(slope(x, y))
    idx = np.arange(n)
    jack = np.array([slope(x[idx != i], y[idx != i]) for i in range(n)])
    if not np.isfinite(jack).all():
        return Estimate(b, NAN, NAN, n, confidence, method)
    se = np.sqrt((n - 1) / n * np.sum((jack - jack.mean()) ** 2))
    t = float(stats.t.ppf(0.5 + confidence / 2.0, n - 2)) if n > 2 else NAN
    return Estimate(b, b - t * se, b + t * se, n, confidence, method)


@dataclass(frozen=True)
class FeatureAgreement:
    """Everything reported for one feature compared between webcam and reference.

    Attributes
    ----------
    feature : str
        Feature name (a column of the features table, unit in its name).
    n : int
        Number of complete pairs (windows or segments).
    mean_webcam, mean_reference, sd_webcam, sd_reference : float
    pearson, spearman, ccc : Estimate
    icc : IccResult
        The form asked for (default ICC(2,1), absolute agreement).
    bland_altman : BlandAltman
        Of webcam minus reference.
    notes : tuple of str
        Warnings raised while computing (too few pairs, no variation).
    """

    feature: str
    n: int
    mean_webcam: float
    mean_reference: float
    sd_webcam: float
    sd_reference: float
    pearson: Estimate
    spearman: Estimate
    ccc: Estimate
    icc: IccResult
    bland_altman: BlandAltman
    notes: tuple[str, ...] = ()

    def to_row(self) -> dict:
        """A flat row for ``agreement.csv``."""
        ba = self.bland_altman
        return {
            "feature": self.feature, "n": self.n,
            "mean_webcam": self.mean_webcam, "mean_reference": self.mean_reference,
            "sd_webcam": self.sd_webcam, "sd_reference": self.sd_reference,
            "pearson_r": self.pearson.estimate, "pearson_ci_low": self.pearson.ci_low,
            "pearson_ci_high": self.pearson.ci_high,
            "spearman_rho": self.spearman.estimate, "spearman_ci_low": self.spearman.ci_low,
            "spearman_ci_high": self.spearman.ci_high,
            "ccc": self.ccc.estimate, "ccc_ci_low": self.ccc.ci_low, "ccc_ci_high": self.ccc.ci_high,
            "icc": self.icc.estimate, "icc_ci_low": self.icc.ci_low, "icc_ci_high": self.icc.ci_high,
            "icc_form": f"ICC({self.icc.form})",
            "ba_bias": ba.bias, "ba_bias_ci_low": ba.bias_ci_low, "ba_bias_ci_high": ba.bias_ci_high,
            "ba_sd": ba.sd, "ba_loa_low": ba.loa_low, "ba_loa_low_ci_low": ba.loa_low_ci_low,
            "ba_loa_low_ci_high": ba.loa_low_ci_high, "ba_loa_high": ba.loa_high,
            "ba_loa_high_ci_low": ba.loa_high_ci_low, "ba_loa_high_ci_high": ba.loa_high_ci_high,
            "confidence": self.pearson.confidence,
            "notes": "; ".join(self.notes),
        }


def feature_agreement(webcam, reference, *, feature: str, icc_form: str = DEFAULT_ICC_FORM,
                      confidence: float = 0.95) -> FeatureAgreement:
    """All agreement statistics of one feature (webcam vs reference, paired by window or segment).

    Warnings about degenerate input are caught and kept in ``notes`` (the
    statistic concerned is NaN), so that one empty feature never stops a report.
    """
    a, b = paired(webcam, reference)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", AgreementWarning)
        p = pearson(a, b, confidence=confidence)
        s = spearman(a, b, confidence=confidence)
        c = lin_ccc(a, b, confidence=confidence)
        i = icc(np.column_stack([a, b]) if a.size else np.empty((0, 2)), form=icc_form, confidence=confidence)
        ba = bland_altman(a, b, confidence=confidence)
    notes = tuple(dict.fromkeys(str(w.message) for w in caught if issubclass(w.category, AgreementWarning)))
    sd = lambda v: float(v.std(ddof=1)) if v.size > 1 else NAN  # noqa: E731
    mean = lambda v: float(v.mean()) if v.size else NAN  # noqa: E731
    return FeatureAgreement(feature=feature, n=int(a.size), mean_webcam=mean(a), mean_reference=mean(b),
                            sd_webcam=sd(a), sd_reference=sd(b), pearson=p, spearman=s, ccc=c, icc=i,
                            bland_altman=ba, notes=notes)
