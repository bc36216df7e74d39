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
.. [9] Bakdash, J. Z., & Marusich, L. R. (2017). Repeated measures correlation.
   Frontiers in Psychology, 8, 456.
.. [10] Bland, J. M., & Altman, D. G. (2007). Agreement between methods of
   measurement with multiple observations per individual. Journal of
   Biopharmaceutical Statistics, 17(4), 571-582.
"""
from __future__ import annotations

import warnings
from dataclasses import asdict, dataclass

import numpy as np
from scipy import stats

from aspectus.errors import AspectusWarning, ParameterError

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


class AgreementWarning(AspectusWarning):
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

    Examples
    --------
    >>> large = [494, 395, 516, 434, 476, 557, 413, 442, 650, 433, 417, 656, 267, 478, 178, 423, 427]
    >>> mini = [512, 430, 520, 428, 500, 600, 364, 380, 658, 445, 432, 626, 260, 477, 259, 350, 451]
    >>> r = pearson(large, mini)
    >>> round(r.estimate, 3), round(r.ci_low, 3), round(r.ci_high, 3), r.n
    (0.943, 0.846, 0.98, 17)
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

    Examples
    --------
    The peak-flow readings of Bland & Altman (1986), large against mini
    meter (l/min; the paper gives bias -2.1 and SD 38.8, limits as bias
    +- 2 SD):

    >>> large = [494, 395, 516, 434, 476, 557, 413, 442, 650, 433, 417, 656, 267, 478, 178, 423, 427]
    >>> mini = [512, 430, 520, 428, 500, 600, 364, 380, 658, 445, 432, 626, 260, 477, 259, 350, 451]
    >>> ba = bland_altman(large, mini, loa_sd=2.0)
    >>> round(ba.bias, 1), round(ba.sd, 1), ba.n
    (-2.1, 38.8, 17)
    >>> round(ba.loa_low, 1), round(ba.loa_high, 1)
    (-79.6, 75.4)
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

    Examples
    --------
    The 6 targets x 4 judges of Shrout & Fleiss (1979), who give ICC(1,1) =
    .17, ICC(2,1) = .29 and ICC(3,1) = .71:

    >>> ratings = [[9, 2, 5, 8], [6, 1, 3, 2], [8, 4, 6, 8], [7, 1, 2, 6], [10, 5, 6, 9], [6, 2, 4, 7]]
    >>> [round(icc(ratings, form=f).estimate, 2) for f in ("1,1", "2,1", "3,1")]
    [0.17, 0.29, 0.71]
    >>> res = icc(ratings)
    >>> res.form, round(res.ci_low, 2), round(res.ci_high, 2)
    ('2,1', 0.02, 0.76)
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
    scale = max(1.0, float(np.max(np.abs(x))))
    if bms <= (1e-12 * scale) ** 2:
        # every target got the same mean rating (e.g. two constant columns): there is no between-target
        # variance to attribute, and every form is 0/0 or a meaningless -1
        warnings.warn(f"{desc}: the targets do not differ (each judge's ratings are constant or the targets' means "
                      f"are all equal; n={n}); reported as NaN", AgreementWarning, stacklevel=2)
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


def deming_slope(reference, test, *, variance_ratio: float = 1.0, confidence: float = 0.95,
                 error_sd_reference: float | None = None, error_sd_test: float | None = None) -> Estimate:
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
        Ratio of the test's to the reference's error variance (dimensionless);
        used when the two error SDs are not given.
    confidence : float
        Confidence level of the interval.
    error_sd_reference, error_sd_test : float, optional
        Measured error SD of each method in the unit of the values (e.g. each
        side's RMS-S2S noise, deg). When both are given (finite, > 0) the
        ratio is ``(error_sd_test / error_sd_reference) ** 2``: a noisier
        webcam against a precise lab tracker is then not read as a gain
        above 1 (with ratio 1 and a true gain of 1: 1.06, 1.13 and 1.25 at
        webcam errors of 1.0, 1.5 and 2.0 deg against 0.1 deg).

    Notes
    -----
    Slope ``(s_yy - l s_xx + sqrt((s_yy - l s_xx)^2 + 4 l s_xy^2)) / (2 s_xy)``
    with ``l`` the error-variance ratio (Linnet 1990 [8]_; Cornbleet &
    Gochman 1979, Clinical Chemistry 25(3), 432-438 - from memory). As
    ``l`` grows it tends to the least-squares slope of test on reference,
    as ``l`` falls to zero to that of reference on test, inverted. NaN with
    an :class:`AgreementWarning` when a side does not vary or the two do not
    covary (``s_xy = 0``: no slope is defined).
    """
    confidence = _check_confidence(confidence)
    x, y = paired(reference, test)
    n = x.size
    lam = float(variance_ratio)
    given = [v for v in (error_sd_reference, error_sd_test) if v is not None]
    if len(given) == 2 and all(np.isfinite(v) and v > 0 for v in given):
        lam = (float(error_sd_test) / float(error_sd_reference)) ** 2
        method = (f"Deming regression slope (error SDs {float(error_sd_test):.3g} test, "
                  f"{float(error_sd_reference):.3g} reference: variance ratio {lam:.3g}), jackknife interval")
    else:
        method = f"Deming regression slope (variance ratio {lam:g}), jackknife interval"
    if not (np.isfinite(lam) and lam > 0):
        raise ParameterError(f"Deming variance ratio must be > 0, got {lam!r}")
    if n < 3:
        return _degenerate("gain", n, "fewer than 3 pairs", confidence=confidence, method=method)
    if np.ptp(x) == 0:
        return _degenerate("gain", n, "the reference does not vary", confidence=confidence, method=method)
    if np.ptp(y) == 0:
        return _degenerate("gain", n, "the test method does not vary", confidence=confidence, method=method)

    def slope(xx, yy):
        mx, my = xx.mean(), yy.mean()
        sxx = np.mean((xx - mx) ** 2)
        syy = np.mean((yy - my) ** 2)
        sxy = np.mean((xx - mx) * (yy - my))
        if abs(sxy) <= 1e-12 * np.sqrt(sxx * syy):
            return NAN
        return (syy - lam * sxx + np.sqrt((syy - lam * sxx) ** 2 + 4 * lam * sxy * sxy)) / (2 * sxy)

    b = float(slope(x, y))
    if not np.isfinite(b):
        return _degenerate("gain", n, "the two methods do not covary (s_xy = 0): no slope is defined",
                           confidence=confidence, method=method)
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


# ----------------------------------------------------------------------------- repeated measures
#
# Windows of one participant are not independent of each other: they share the
# participant's face, glasses, seat, lighting and reading speed. The two
# statistics below allow for that.
# (References [9] and [10] of the module docstring.)


def _missing(v) -> bool:
    if v is None:
        return True
    try:
        return bool(v != v)  # NaN
    except TypeError:  # pandas.NA
        return True


def _grouped(a, b, subject) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Complete pairs with their subject codes (0..k-1, in order of first appearance) and the subject labels."""
    a = np.asarray(a, dtype=float).ravel()
    b = np.asarray(b, dtype=float).ravel()
    s = np.asarray(subject, dtype=object).ravel()
    if not (a.shape == b.shape == s.shape):
        raise ParameterError(f"paired measurements and subjects must have the same length, got {a.size}, {b.size} "
                             f"and {s.size}")
    ok = np.isfinite(a) & np.isfinite(b) & np.array([not _missing(v) for v in s], dtype=bool)
    a, b, s = a[ok], b[ok], s[ok]
    labels, first, codes = np.unique(s.astype(str), return_index=True, return_inverse=True)
    order = np.argsort(first)  # codes in order of first appearance
    remap = np.empty_like(order)
    remap[order] = np.arange(order.size)
    return a, b, remap[codes.ravel()], labels[order]


@dataclass(frozen=True)
class RepeatedMeasuresCorrelation:
    """Repeated-measures correlation of Bakdash & Marusich (2017).

    The common within-participant association of two measures: each
    participant may have their own level (intercept), all share one slope.

    Attributes
    ----------
    estimate, ci_low, ci_high : float
        ``r_rm`` and its Fisher-z interval.
    df : int
        Error degrees of freedom ``N - k - 1`` (``N`` complete pairs, ``k``
        participants).
    n : int
        Complete pairs used.
    n_subjects : int
        Participants with at least one complete pair.
    slope : float
        Common within-participant slope of ``b`` on ``a`` (the ANCOVA
        coefficient), in units of ``b`` per unit of ``a``.
    p_value : float
        Two-sided test of ``r_rm = 0`` (t with ``df`` degrees of freedom; the
        same as the F test of the measure in the ANCOVA).
    confidence : float
    method : str
    """

    estimate: float
    ci_low: float
    ci_high: float
    df: int
    n: int
    n_subjects: int
    slope: float
    p_value: float
    confidence: float = 0.95
    method: str = ""

    def to_dict(self) -> dict:
        return asdict(self)


def rmcorr(a, b, subject, *, confidence: float = 0.95) -> RepeatedMeasuresCorrelation:
    """Repeated-measures correlation (Bakdash & Marusich 2017) with its interval and degrees of freedom.

    Parameters
    ----------
    a, b : array_like
        Paired measurements, several per participant (e.g. one per window).
        Pairs with a missing value are dropped.
    subject : array_like
        Participant of each pair (any labels).
    confidence : float
        Confidence level of the interval.

    Returns
    -------
    RepeatedMeasuresCorrelation

    Notes
    -----
    ``r_rm`` is the partial correlation of ``a`` and ``b`` after removing the
    participants' means, i.e. from the ANCOVA ``b ~ participant + a``:
    ``r_rm = sign(slope) * sqrt(SS_a / (SS_a + SS_error))`` [9]_, which equals
    ``sum(a_c b_c) / sqrt(sum(a_c^2) sum(b_c^2))`` with ``a_c``, ``b_c``
    centred on each participant's mean. Degrees of freedom
    ``df = N - k - 1``. A participant with a single pair adds nothing to the
    estimate and nothing to ``df`` (its pair and its intercept cancel).
    Interval: Fisher z with ``n = df + 2``, i.e.
    ``tanh(atanh(r_rm) -+ z_q / sqrt(df - 1))`` - the convention of the
    authors' corrected R package (rmcorr 0.5.4 and later) and of pingouin's
    ``rm_corr`` (checked against pingouin in the tests); the earlier
    ``sqrt(df - 3)`` made the interval too wide at small ``df``.
    """
    confidence = _check_confidence(confidence)
    a, b, codes, labels = _grouped(a, b, subject)
    n, k = int(a.size), int(labels.size)
    df = n - k - 1
    method = "repeated-measures correlation (Bakdash & Marusich 2017), Fisher z interval with df"

    def nan(reason: str) -> RepeatedMeasuresCorrelation:
        warnings.warn(f"repeated-measures correlation: {reason} (n={n}, participants={k}); reported as NaN",
                      AgreementWarning, stacklevel=3)
        return RepeatedMeasuresCorrelation(NAN, NAN, NAN, df, n, k, NAN, NAN, confidence, method)

    if df < 1:
        return nan("no within-participant degrees of freedom (every participant needs several pairs)")
    cnt = np.bincount(codes, minlength=k).astype(float)
    ac = a - (np.bincount(codes, a, minlength=k) / cnt)[codes]
    bc = b - (np.bincount(codes, b, minlength=k) / cnt)[codes]
    saa, sbb, sab = float(ac @ ac), float(bc @ bc), float(ac @ bc)
    # a spread below rounding noise of the values counts as none
    tiny = lambda ss, v: ss <= (1e-12 * max(1.0, float(np.max(np.abs(v))))) ** 2 * n  # noqa: E731
    if tiny(saa, a) or tiny(sbb, b):
        return nan("one side does not vary within participants")
    r = float(np.clip(sab / np.sqrt(saa * sbb), -1.0, 1.0))
    slope = sab / saa
    if abs(r) >= 1.0:
        p = 0.0
    else:
        t = r * np.sqrt(df / (1.0 - r * r))
        p = float(2.0 * stats.t.sf(abs(t), df))
    if df <= 1:
        warnings.warn(f"repeated-measures correlation: df={df} is too few for a confidence interval",
                      AgreementWarning, stacklevel=2)
        lo = hi = NAN
    else:
        lo, hi = _fisher_ci(r, 1.0 / np.sqrt(df - 1), confidence)
    return RepeatedMeasuresCorrelation(r, lo, hi, int(df), n, k, float(slope), p, confidence, method)


@dataclass(frozen=True)
class BlandAltmanRepeated:
    """Bland-Altman limits for several observations per participant whose true value varies (Bland & Altman 2007).

    Attributes
    ----------
    bias : float
        Mean of all differences ``a - b``.
    bias_ci_low, bias_ci_high : float
        Interval of the bias allowing for the clustering (see
        :func:`bland_altman_repeated`).
    sd : float
        SD of a single difference: ``sqrt(sd_between^2 + sd_within^2)``.
    sd_within : float
        Within-participant SD of the differences (root of the residual mean
        square of the one-way ANOVA).
    sd_between : float
        Between-participant SD of the mean difference (variance component;
        0 when its estimate is negative).
    loa_low, loa_high : float
        ``bias -+ loa_sd * sd``: where the difference of a single observation
        of a new participant is expected to lie.
    n : int
        Complete pairs.
    n_subjects : int
        Participants with at least one complete pair.
    loa_sd, confidence : float
    ms_between, ms_within : float
        Mean squares of the one-way ANOVA of the differences by participant
        (``ms_within`` is 0 when no participant has two observations).
    divisor : float
        ``(N^2 - sum m_i^2) / ((k - 1) N)``, the coefficient of the
        between-participant variance in ``ms_between``.
    method : str
    """

    bias: float
    bias_ci_low: float
    bias_ci_high: float
    sd: float
    sd_within: float
    sd_between: float
    loa_low: float
    loa_high: float
    n: int
    n_subjects: int
    loa_sd: float = 1.96
    confidence: float = 0.95
    ms_between: float = NAN
    ms_within: float = NAN
    divisor: float = NAN
    method: str = ""

    def to_dict(self) -> dict:
        return asdict(self)


def bland_altman_repeated(a, b, subject, *, confidence: float = 0.95, loa_sd: float = 1.96) -> BlandAltmanRepeated:
    """Bland-Altman bias and limits of agreement with several observations per participant (Bland & Altman 2007).

    The case "where the true value varies" [10]_: each participant has
    ``m_i`` paired observations (windows) and the quantity measured changes
    from one to the next, so differences are analysed, not the replicates.

    Parameters
    ----------
    a, b : array_like
        Paired measurements (``a`` the method under test, e.g. webcam; ``b``
        the reference); differences are ``a - b``. Pairs with a missing value
        are dropped.
    subject : array_like
        Participant of each pair.
    confidence : float
        Confidence level of the bias interval.
    loa_sd : float
        Multiple of the SD for the limits (1.96 for 95 % limits).

    Returns
    -------
    BlandAltmanRepeated

    Notes
    -----
    One-way ANOVA of the differences by participant, ``k`` participants,
    ``N = sum m_i`` pairs: within mean square ``MS_w`` (``N - k`` df; 0 when
    every ``m_i = 1``), between mean square ``MS_b`` (``k - 1`` df). The
    between-participant variance is
    ``s_b^2 = (MS_b - MS_w) / ((N^2 - sum m_i^2) / ((k - 1) N))`` (set to 0
    when negative), the within variance ``s_w^2 = MS_w``, and the variance of
    a single difference ``s^2 = s_b^2 + s_w^2``; the limits are
    ``bias -+ 1.96 s`` with the bias the mean of all differences [10]_. With
    one observation per participant this is exactly the ordinary
    Bland-Altman analysis.

    Bias interval (not in [10]_; the variance of the mean under the same
    one-way random-effects model): ``var = (s_b^2 sum m_i^2 + s_w^2 N) / N^2``
    with a t quantile on ``k - 1`` df; with one observation per participant it
    is the ordinary ``t_{n-1} sd / sqrt(n)``. No interval is given for the
    limits here.
    """
    confidence = _check_confidence(confidence)
    a, b, codes, labels = _grouped(a, b, subject)
    n, k = int(a.size), int(labels.size)
    method = "Bland & Altman (2007), true value varies: one-way ANOVA of the differences by participant"
    if n < 3 or k < 2:
        why = "fewer than 3 pairs" if n < 3 else "fewer than 2 participants"
        warnings.warn(f"Bland-Altman (repeated measures): {why} (n={n}, participants={k}); reported as NaN",
                      AgreementWarning, stacklevel=2)
        return BlandAltmanRepeated(*([NAN] * 8), n=n, n_subjects=k, loa_sd=float(loa_sd), confidence=confidence,
                                   method=method)
    d = a - b
    m = np.bincount(codes, minlength=k).astype(float)
    means = np.bincount(codes, d, minlength=k) / m
    bias = float(d.mean())
    ss_w = float(((d - means[codes]) ** 2).sum())
    ss_b = float((m * (means - bias) ** 2).sum())
    df_w = n - k
    ms_w = ss_w / df_w if df_w > 0 else 0.0
    ms_b = ss_b / (k - 1)
    divisor = float((n * n - (m * m).sum()) / ((k - 1) * n))
    var_b = max((ms_b - ms_w) / divisor, 0.0)
    var = var_b + ms_w
    sd = float(np.sqrt(var))
    t = float(stats.t.ppf(0.5 + confidence / 2.0, k - 1))
    se_bias = float(np.sqrt((var_b * (m * m).sum() + ms_w * n) / (n * n)))
    return BlandAltmanRepeated(bias=bias, bias_ci_low=bias - t * se_bias, bias_ci_high=bias + t * se_bias, sd=sd,
                               sd_within=float(np.sqrt(ms_w)), sd_between=float(np.sqrt(var_b)),
                               loa_low=bias - loa_sd * sd, loa_high=bias + loa_sd * sd, n=n, n_subjects=k,
                               loa_sd=float(loa_sd), confidence=confidence, ms_between=float(ms_b),
                               ms_within=float(ms_w), divisor=divisor, method=method)


def subject_means(a, b, subject):
    """One row per participant: complete pairs, mean of ``a``, mean of ``b``, mean and SD of ``a - b``.

    Returns a :class:`pandas.DataFrame` with columns ``subject``, ``n``,
    ``mean_a``, ``mean_b``, ``mean_difference``, ``sd_difference`` (NaN for a
    participant with one pair), in order of first appearance.
    """
    import pandas as pd

    a, b, codes, labels = _grouped(a, b, subject)
    k = labels.size
    m = np.bincount(codes, minlength=k).astype(float)
    d = a - b
    with np.errstate(invalid="ignore", divide="ignore"):
        md = np.bincount(codes, d, minlength=k) / m
        ss = np.bincount(codes, (d - md[codes]) ** 2, minlength=k)
        sdd = np.where(m > 1, np.sqrt(ss / np.maximum(m - 1, 1)), NAN)
    return pd.DataFrame({"subject": labels, "n": m.astype(int), "mean_a": np.bincount(codes, a, minlength=k) / m,
                         "mean_b": np.bincount(codes, b, minlength=k) / m, "mean_difference": md,
                         "sd_difference": sdd})
