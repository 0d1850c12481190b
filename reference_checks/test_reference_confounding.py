"""Reference checks for the third-moment slope bracket (``checks.confounding.third_moment_slope_bracket``).

Sources beside each test: the least-squares slopes from statsmodels' OLS on
the same arrays; Geary's (1942) third-moment slope written out from its
formula; Reiersøl (1950) and the bounds of Frisch (1934) for where a
measurement-error slope sits (a simulated errors-in-variables model with a
known slope is the ground truth); the delta-method standard errors against
a pairs bootstrap of the same statistics (a large simulation, common
practice for checking a delta-method variance).  The cross-skewness check
(``checks.confounding.cross_skewness``) against scipy's one-sample t test
and normal tail, and a population value worked out by hand.
"""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm

from preflight.checks.confounding import _bracket_moments, third_moment_slope_bracket


def _errors_in_variables(rng: np.random.Generator, n: int, a: float, b: float):
    """x = a h + u, y = b h + v: h exponential (skewed), u and v uniform; the structural slope is b / a."""
    h = rng.exponential(1.0, n) - 1.0
    return a * h + rng.uniform(-1.5, 1.5, n), b * h + rng.uniform(-1.5, 1.5, n)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_position_from_statsmodels_ols_slopes_and_gearys_formula(seed):
    # Ends of the bracket: statsmodels OLS slope of y on x, and the reciprocal of the slope of x on y.
    # Geary (1942): slope = sum (x - xbar)(y - ybar)^2 / sum (x - xbar)^2 (y - ybar).
    rng = np.random.default_rng(seed)
    x, y = _errors_in_variables(rng, 3000, 1.2, 0.9)
    x, y = 3.0 * x + 10.0, 0.5 * y - 4.0  # units and offsets of their own
    low = sm.OLS(y, sm.add_constant(x)).fit().params[1]
    high = 1.0 / sm.OLS(x, sm.add_constant(y)).fit().params[1]
    xc, yc = x - x.mean(), y - y.mean()
    geary = np.sum(xc * yc**2) / np.sum(xc**2 * yc)
    result = third_moment_slope_bracket(x, y)
    assert result.statistic == pytest.approx(np.log(geary / low) / np.log(high / low), rel=1e-9)
    assert result.effect == pytest.approx(min(result.statistic, 1 - result.statistic), rel=1e-9)


def test_geary_slope_recovers_the_structural_slope_inside_the_frisch_bounds():
    # Reiersøl (1950): with a non-Gaussian h the slope b / a is identified; Frisch (1934): it lies between the
    # slope of y on x and the reciprocal slope of x on y.  Ground truth b / a = 0.75 on 400,000 rows.
    rng = np.random.default_rng(7)
    x, y = _errors_in_variables(rng, 400_000, 1.2, 0.9)
    xc, yc = x - x.mean(), y - y.mean()
    low, high = np.mean(xc * yc) / np.mean(xc**2), np.mean(yc**2) / np.mean(xc * yc)
    geary = np.mean(xc * yc**2) / np.mean(xc**2 * yc)
    assert geary == pytest.approx(0.75, abs=0.02)
    assert low + 0.05 < geary < high - 0.05
    result = third_moment_slope_bracket(x, y)
    assert result.statistic == pytest.approx(np.log(0.75 / low) / np.log(high / low), abs=0.03)
    assert result.p_value < 1e-10


@pytest.mark.parametrize("model", ["hidden cause", "straight line"])
def test_delta_method_standard_errors_match_a_pairs_bootstrap(model):
    # The delta-method standard error of each moment condition against the spread of the same condition over
    # 2,000 pairs-bootstrap resamples (each resample standardised again, as the check does).
    rng = np.random.default_rng(3)
    n = 2000
    if model == "hidden cause":
        x, y = _errors_in_variables(rng, n, 1.0, 1.0)
    else:
        x = rng.exponential(1.0, n)
        y = 0.8 * x + rng.laplace(0.0, 1.0, n)

    def standardised(u, v):
        u, v = (u - u.mean()) / u.std(), (v - v.mean()) / v.std()
        return u, v if np.mean(u * v) > 0 else -v

    xs, ys = standardised(x, y)
    _, _, variances = _bracket_moments(xs, ys)
    draws = []
    for _ in range(2000):
        rows = rng.integers(0, n, n)
        draws.append(_bracket_moments(*standardised(x[rows], y[rows]))[1][:2])
    bootstrap_sd = np.std(draws, axis=0)
    np.testing.assert_allclose(np.sqrt(variances), bootstrap_sd, rtol=0.12)


def test_cross_skewness_is_two_one_sample_t_tests_in_scipy():
    # Source: scipy.stats.ttest_1samp and scipy.stats.norm.  Each of the check's two z values is the one-sample
    # t statistic of w = (x^2 - 1) y (then of x (y^2 - 1)) on standardised columns, with the standard deviation
    # taken over n rather than n - 1; the p-value is Bonferroni's over the two two-sided normal p-values.
    from scipy import stats

    from preflight.checks.confounding import cross_skewness

    rng = np.random.default_rng(8)
    n = 1500
    h = rng.gamma(2.0, 1.0, n)
    x, y = h + rng.normal(size=n), 0.5 * h + rng.uniform(-2, 2, n)
    xs, ys = (x - x.mean()) / x.std(), (y - y.mean()) / y.std()
    t_values = [stats.ttest_1samp((a * a - 1.0) * b, 0.0).statistic for a, b in ((xs, ys), (ys, xs))]
    z = max(abs(t) for t in t_values) * np.sqrt(n / (n - 1))
    result = cross_skewness(x, y)
    assert result.statistic == pytest.approx(z, rel=1e-10)
    assert result.p_value == pytest.approx(min(1.0, 4 * stats.norm.sf(z)), rel=1e-8, abs=1e-300)
    # The population value, worked out by hand from the model (gamma(2, 1): variance 2, third central moment 4):
    # E[x^2 y] about the means = 0.5 * 4 = 2, over var(x) sd(y) = 3 * sqrt(0.5 + 16 / 12), is 0.492 (and
    # E[x y^2] gives 0.315); the effect is the larger.
    assert result.effect == pytest.approx(0.492, abs=0.12)
