"""Normality of one array: Shapiro-Wilk, Anderson-Darling, Jarque-Bera,
D'Agostino-Pearson and Hyvärinen's negentropy approximation.

The battery calls these on noise estimates (residuals after partialling out
the conditioning set), so every function takes a plain 1-D array.  Moments
are the bias-uncorrected (maximum-likelihood) estimates throughout:

    skewness        g1 = m3 / m2 ** 1.5
    excess kurtosis g2 = m4 / m2 ** 2 - 3

with m_k the k-th central sample moment using divisor n, which is what
``scipy.stats.skew`` and ``scipy.stats.kurtosis`` return by default.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from preflight.checks._distributions import chi2_sf
from preflight.checks._validate import as_vector
from preflight.errors import InputError
from preflight.results import CheckResult

SHAPIRO_WILK = "shapiro-wilk"
ANDERSON_DARLING = "anderson-darling"
JARQUE_BERA = "jarque-bera"
DAGOSTINO_PEARSON = "d'agostino-pearson"
NEGENTROPY = "negentropy"
NORMALITY_TESTS = (SHAPIRO_WILK, ANDERSON_DARLING, JARQUE_BERA, DAGOSTINO_PEARSON, NEGENTROPY)
"""The names of :func:`normality_checks`' results, in its order."""

SKEWNESS = "skewness"
EXCESS_KURTOSIS = "excess kurtosis"

# Hyvärinen (1998), "New approximations of differential entropy for
# independent component analysis and projection pursuit", the version with
# G1(y) = y exp(-y^2/2) and G2(y) = exp(-y^2/2).  The constants follow from
# orthonormalising G1 against y and G2 against {1, y^2} under the standard
# normal density; tests/test_checks_normality.py re-derives both by
# numerical integration.  Note that 1 / (2 - 6/pi) is the constant of the
# other version, with G2(y) = |y| compared with sqrt(2/pi), not of this one.
NEGENTROPY_K1 = 36.0 / (8.0 * math.sqrt(3.0) - 9.0)
NEGENTROPY_K2 = 24.0 / (16.0 * math.sqrt(3.0) - 27.0)
_GAUSSIAN_MEAN_OF_G2 = math.sqrt(0.5)

# D'Agostino & Stephens (1986) give the modified statistic and its p-value
# formulas for n >= 8; statsmodels' normal_ad refuses fewer, too.
_ANDERSON_MIN_N = 8
# The kurtosis part of D'Agostino-Pearson (Anscombe & Glynn 1983) is not
# trusted below 20 observations (scipy warns there as well).
_DAGOSTINO_MIN_N = 20
# Beyond this A*^2 the quadratic in the exponent of the last piece turns and
# the formula is no longer a tail probability; the value there is ~5e-31.
_ANDERSON_MAX_MODIFIED = 13.0


@dataclass(frozen=True)
class DistributionShape:
    """Bias-uncorrected moment shape of one sample and its negentropy."""

    skewness: float
    """g1 = m3 / m2^1.5 (divisor n in every central moment)."""
    excess_kurtosis: float
    """g2 = m4 / m2^2 - 3 (divisor n in every central moment)."""
    negentropy: float
    """Hyvärinen's (1998) approximation on the standardised values; 0 for a Gaussian."""


def _vector(x, min_n: int = 3) -> np.ndarray:
    values = as_vector(x, name="x", min_n=min_n)
    if np.ptp(values) == 0:
        raise InputError("x is constant; the shape of its distribution is undefined")
    return values


def _central_moments(values: np.ndarray) -> tuple[float, float, float]:
    deviations = values - values.mean()
    squared = deviations * deviations
    return float(squared.mean()), float((squared * deviations).mean()), float((squared * squared).mean())


def _skew_and_excess_kurtosis(values: np.ndarray) -> tuple[float, float]:
    m2, m3, m4 = _central_moments(values)
    return m3 / m2**1.5, m4 / (m2 * m2) - 3.0


def _negentropy_value(values: np.ndarray) -> float:
    # Population standard deviation (divisor n) so that the standardised
    # values have exactly unit second moment, as the approximation assumes.
    standardised = (values - values.mean()) / values.std()
    bell = np.exp(-0.5 * standardised * standardised)
    odd_term = float((standardised * bell).mean())
    even_term = float(bell.mean()) - _GAUSSIAN_MEAN_OF_G2
    return NEGENTROPY_K1 * odd_term**2 + NEGENTROPY_K2 * even_term**2


def shape(x) -> DistributionShape:
    """Skewness, excess kurtosis and negentropy of ``x`` (descriptive, no test).

    Reference: moment estimates are the standard biased ones (common
    practice); negentropy after Hyvärinen (1998).
    """
    values = _vector(x)
    skewness, excess_kurtosis = _skew_and_excess_kurtosis(values)
    return DistributionShape(skewness=skewness, excess_kurtosis=excess_kurtosis,
                             negentropy=_negentropy_value(values))


def shapiro_wilk(x, max_n: int = 5000, seed: int = 0) -> CheckResult:
    """Shapiro-Wilk test of normality, on a seeded subsample above ``max_n``.

    Null hypothesis: the values are an iid sample from some normal
    distribution.  Reference: Shapiro & Wilk (1965); the W statistic and
    p-value come from ``scipy.stats.shapiro`` (Royston 1995, algorithm AS R94,
    valid up to n = 5000).  Effect: 1 - W, which shrinks to 0 under the null.
    """
    return _shapiro_wilk(_vector(x), max_n, seed)


def _shapiro_wilk(values: np.ndarray, max_n: int, seed: int) -> CheckResult:
    from scipy import stats

    if not 3 <= int(max_n) <= 5000:
        raise InputError(f"max_n must lie between 3 and 5000 (the range of Royston's approximation), got {max_n}")
    n_total = values.shape[0]
    note = ""
    if n_total > max_n:
        rng = np.random.default_rng(seed)
        values = values[rng.choice(n_total, size=int(max_n), replace=False)]
        note = f"seeded subsample of {int(max_n)} of {n_total} values without replacement (seed {seed})"
        if np.ptp(values) == 0:
            raise InputError("x is constant on the subsample; the shape of its distribution is undefined")
    w, p = stats.shapiro(values)
    return CheckResult(name=SHAPIRO_WILK, statistic=float(w), p_value=float(p), effect=1.0 - float(w),
                       effect_name="1 - W", n=int(values.shape[0]), note=note)


def _anderson_darling_statistic(values: np.ndarray) -> float:
    """A^2 of ``values`` against the normal with the sample mean and sd (ddof=1).

    Computed on the log scale (log Phi and log(1 - Phi) directly) so that
    values far in a tail do not round to log(0).
    """
    from scipy.special import log_ndtr

    values = np.sort(values)
    n = values.shape[0]
    standardised = (values - values.mean()) / values.std(ddof=1)
    log_cdf = log_ndtr(standardised)
    log_sf = log_ndtr(-standardised)
    weights = (2.0 * np.arange(1, n + 1) - 1.0) / n
    return float(-n - np.sum(weights * (log_cdf + log_sf[::-1])))


def anderson_darling_pvalue(modified_statistic: float) -> float:
    """p-value of the modified statistic A*^2 = A^2 (1 + 0.75/n + 2.25/n^2).

    Piecewise exponential formulas of D'Agostino & Stephens (1986), for the
    normal case with mean and variance estimated.  Returns 0.0 beyond
    A*^2 = 13, where the true value is below 5e-31.
    """
    a = float(modified_statistic)
    if a < 0.2:
        return 1.0 - math.exp(-13.436 + 101.14 * a - 223.73 * a * a)
    if a < 0.34:
        return 1.0 - math.exp(-8.318 + 42.796 * a - 59.938 * a * a)
    if a < 0.6:
        return math.exp(0.9177 - 4.279 * a - 1.38 * a * a)
    if a <= _ANDERSON_MAX_MODIFIED:
        return math.exp(1.2937 - 5.709 * a + 0.0186 * a * a)
    return 0.0


def anderson_darling(x) -> CheckResult:
    """Anderson-Darling test of normality with estimated mean and variance.

    Null hypothesis: the values are an iid sample from some normal
    distribution.  Reference: Anderson & Darling (1954); the modified
    statistic and p-value formulas of D'Agostino & Stephens (1986).  The
    reported statistic is the unmodified A^2 (as ``scipy.stats.anderson``
    reports it); the p-value is read from A*^2.  Effect: A^2 / n, the
    sample's tail-weighted squared distance between its empirical and the
    fitted normal distribution function, which settles to a population value
    instead of growing with n.  Below 8 values the p-value is None.
    """
    return _anderson_darling(_vector(x))


def _anderson_darling(values: np.ndarray) -> CheckResult:
    n = values.shape[0]
    a2 = _anderson_darling_statistic(values)
    modified = a2 * (1.0 + 0.75 / n + 2.25 / (n * n))
    if n < _ANDERSON_MIN_N:
        p_value = None
        note = f"fewer than {_ANDERSON_MIN_N} values: the p-value formulas do not apply"
    else:
        p_value = anderson_darling_pvalue(modified)
        note = f"p from D'Agostino & Stephens (1986) on A*^2 = {modified:.6g}"
        if modified > _ANDERSON_MAX_MODIFIED:
            note += "; beyond the formulas' range, p < 5e-31 reported as 0"
    return CheckResult(name=ANDERSON_DARLING, statistic=a2, p_value=p_value, effect=a2 / n,
                       effect_name="A^2 / n", n=n, note=note)


def jarque_bera(x) -> CheckResult:
    """Jarque-Bera test of normality from sample skewness and kurtosis.

    Null hypothesis: the values come from a distribution with the skewness
    and kurtosis of a normal (iid sampling).  JB = n/6 (g1^2 + g2^2/4), with
    the asymptotic chi-squared(2) p-value, which is conservative in small
    samples.  Reference: Jarque & Bera (1980).  Effect: sample skewness g1.
    """
    values = _vector(x)
    return _jarque_bera(values.shape[0], *_skew_and_excess_kurtosis(values))


def _jarque_bera(n: int, skewness: float, excess_kurtosis: float) -> CheckResult:
    statistic = n / 6.0 * (skewness**2 + 0.25 * excess_kurtosis**2)
    return CheckResult(name=JARQUE_BERA, statistic=statistic, p_value=float(chi2_sf(statistic, 2)),
                       effect=skewness, effect_name=SKEWNESS, n=n, note="asymptotic chi-squared(2) p-value")


def _skewness_z(skewness: float, n: int) -> float:
    # D'Agostino (1970) transformation of g1 to an approximate standard normal.
    y = skewness * math.sqrt((n + 1.0) * (n + 3.0) / (6.0 * (n - 2.0)))
    beta2 = 3.0 * (n * n + 27.0 * n - 70.0) * (n + 1.0) * (n + 3.0) / ((n - 2.0) * (n + 5.0) * (n + 7.0) * (n + 9.0))
    w2 = -1.0 + math.sqrt(2.0 * (beta2 - 1.0))
    delta = 1.0 / math.sqrt(0.5 * math.log(w2))
    alpha = math.sqrt(2.0 / (w2 - 1.0))
    ratio = y / alpha
    return delta * math.log(ratio + math.sqrt(ratio * ratio + 1.0))


def _kurtosis_z(excess_kurtosis: float, n: int) -> float:
    # Anscombe & Glynn (1983) transformation of b2 = g2 + 3.
    b2 = excess_kurtosis + 3.0
    expected = 3.0 * (n - 1.0) / (n + 1.0)
    variance = 24.0 * n * (n - 2.0) * (n - 3.0) / ((n + 1.0) ** 2 * (n + 3.0) * (n + 5.0))
    standardised = (b2 - expected) / math.sqrt(variance)
    root_beta1 = (6.0 * (n * n - 5.0 * n + 2.0) / ((n + 7.0) * (n + 9.0))
                  * math.sqrt(6.0 * (n + 3.0) * (n + 5.0) / (n * (n - 2.0) * (n - 3.0))))
    a = 6.0 + 8.0 / root_beta1 * (2.0 / root_beta1 + math.sqrt(1.0 + 4.0 / root_beta1**2))
    denominator = 1.0 + standardised * math.sqrt(2.0 / (a - 4.0))
    if denominator == 0.0:
        return math.inf
    cube_root = math.copysign(((1.0 - 2.0 / a) / abs(denominator)) ** (1.0 / 3.0), denominator)
    return ((1.0 - 2.0 / (9.0 * a)) - cube_root) / math.sqrt(2.0 / (9.0 * a))


def dagostino_pearson(x) -> CheckResult:
    """D'Agostino-Pearson omnibus K^2 test of normality.

    Null hypothesis: the values come from a normal distribution (iid).
    K^2 = Z(g1)^2 + Z(b2)^2 with the skewness transformation of D'Agostino
    (1970) and the kurtosis transformation of Anscombe & Glynn (1983),
    referred to chi-squared(2).  Reference: D'Agostino & Pearson (1973).
    Effect: sample excess kurtosis g2.  Below 20 values the p-value is None
    (the kurtosis approximation is unreliable there) and the statistic NaN.
    """
    values = _vector(x)
    return _dagostino_pearson(values.shape[0], *_skew_and_excess_kurtosis(values))


def _dagostino_pearson(n: int, skewness: float, excess_kurtosis: float) -> CheckResult:
    if n < _DAGOSTINO_MIN_N:
        return CheckResult(name=DAGOSTINO_PEARSON, statistic=math.nan, p_value=None, effect=excess_kurtosis,
                           effect_name=EXCESS_KURTOSIS, n=n,
                           note=(f"fewer than {_DAGOSTINO_MIN_N} values: the kurtosis approximation is "
                                 "unreliable, no test"))
    statistic = _skewness_z(skewness, n) ** 2 + _kurtosis_z(excess_kurtosis, n) ** 2
    return CheckResult(name=DAGOSTINO_PEARSON, statistic=statistic, p_value=float(chi2_sf(statistic, 2)),
                       effect=excess_kurtosis, effect_name=EXCESS_KURTOSIS, n=n,
                       note="chi-squared(2) p-value of Z(skewness)^2 + Z(kurtosis)^2")


def negentropy(x) -> CheckResult:
    """Hyvärinen's negentropy approximation (descriptive, no test).

    J(y) ~ k1 (E[y exp(-y^2/2)])^2 + k2 (E[exp(-y^2/2)] - sqrt(1/2))^2 on the
    standardised values, k1 = 36 / (8 sqrt 3 - 9), k2 = 24 / (16 sqrt 3 - 27).
    It is 0 for a Gaussian and positive otherwise, up to sampling noise.
    No null hypothesis is tested (p-value None).  Reference: Hyvärinen (1998).
    """
    return _negentropy(_vector(x))


def _negentropy(values: np.ndarray) -> CheckResult:
    value = _negentropy_value(values)
    return CheckResult(name=NEGENTROPY, statistic=value, p_value=None, effect=value, effect_name="negentropy",
                       n=int(values.shape[0]),
                       note="Hyvärinen (1998) approximation with G1 = y exp(-y^2/2), G2 = exp(-y^2/2)")


def normality_checks(x, max_n: int = 5000, seed: int = 0) -> tuple[CheckResult, ...]:
    """Shapiro-Wilk, Anderson-Darling, Jarque-Bera, D'Agostino-Pearson and negentropy, in that order.

    Null hypothesis of every test among them: ``x`` is an iid normal sample.
    References: see the individual functions.
    """
    # Validated once, and the moments shared by Jarque-Bera and
    # D'Agostino-Pearson computed once: the same values the five public
    # functions compute each for themselves.
    values = _vector(x)
    n = values.shape[0]
    moments = _skew_and_excess_kurtosis(values)
    return (
        _shapiro_wilk(values, max_n, seed),
        _anderson_darling(values),
        _jarque_bera(n, *moments),
        _dagostino_pearson(n, *moments),
        _negentropy(values),
    )


def is_nongaussian(
    results: Sequence[CheckResult],
    alpha: float,
    min_abs_skew: float = 0.1,
    min_abs_excess_kurtosis: float = 0.2,
    p_key: str = "p_adjusted",
) -> bool:
    """Whether a set of normality results declares a material departure from normality.

    A departure is declared when at least one test among ``results`` (a
    result with a raw p-value) has its ``p_key`` value below ``alpha``
    (:func:`preflight.evidence.rejects`, the one significance rule)
    AND the shape is material: |skewness| >= ``min_abs_skew`` or
    |excess kurtosis| >= ``min_abs_excess_kurtosis``.

    The shape is read from the results themselves, by effect name rather
    than test name so that renamed results (``with_name``) still count: the
    skewness from the result whose ``effect_name`` is "skewness"
    (Jarque-Bera) and the excess kurtosis from the one whose ``effect_name``
    is "excess kurtosis" (D'Agostino-Pearson).  Both are the
    bias-uncorrected moment estimates.  A missing effect is treated as not
    material; if neither is present a ValueError is raised, since the
    materiality half of the rule cannot be judged.

    ``p_key`` is "p_adjusted" (after the evidence layer's multiplicity
    correction) or "p_value" (raw).  A test whose p-value is set but whose
    ``p_key`` field is None raises ValueError: that is a caller's bug, not a
    verdict.  The thresholds' defaults are Policy.nongaussian_min_abs_skew
    and Policy.nongaussian_min_abs_excess_kurtosis.
    """
    from preflight.evidence import rejects as significant_p

    if p_key not in ("p_adjusted", "p_value"):
        raise ValueError(f"p_key must be 'p_adjusted' or 'p_value', got {p_key!r}")
    rejects = False
    skewness = excess_kurtosis = None
    for result in results:
        if result.effect_name == SKEWNESS and skewness is None and result.effect is not None:
            skewness = float(result.effect)
        if result.effect_name == EXCESS_KURTOSIS and excess_kurtosis is None and result.effect is not None:
            excess_kurtosis = float(result.effect)
        if result.p_value is None:
            continue
        p = getattr(result, p_key)
        if p is None:
            raise ValueError(f"{result.name} has a p-value but no {p_key}; run the multiplicity correction first "
                             "or pass p_key='p_value'")
        if significant_p(p, alpha):
            rejects = True
    if skewness is None and excess_kurtosis is None:
        raise ValueError("no result carries a skewness or excess kurtosis effect (jarque_bera, dagostino_pearson)")
    material = ((skewness is not None and abs(skewness) >= min_abs_skew)
                or (excess_kurtosis is not None and abs(excess_kurtosis) >= min_abs_excess_kurtosis))
    return bool(rejects and material)
