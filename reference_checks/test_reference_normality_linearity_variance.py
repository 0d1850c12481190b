"""Normality, linearity and variance checks against published values and
datasets shipped with statsmodels.  Each test names its source in a comment
and in its name."""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats
from statsmodels.stats.diagnostic import (
    het_breuschpagan,
    het_white,
    linear_reset,
    normal_ad,
)

from preflight.checks import linearity as lin
from preflight.checks import normality as nm
from preflight.checks import variance as var
from preflight.fit import bspline_basis

SIGNIFICANCE = np.array([0.15, 0.10, 0.05, 0.025, 0.01])


# ---------------------------------------------------------------- Anderson-Darling critical values

def test_anderson_darling_dagostino_stephens_1986_table_4_7_critical_values():
    # D'Agostino & Stephens (eds., 1986), Goodness-of-Fit Techniques, p. 123,
    # Table 4.7: upper-tail points of A*^2 = A^2 (1 + 0.75/n + 2.25/n^2), normal
    # with mean and variance estimated.  Values as adopted by scipy 1.17
    # (_Avals_norm, scipy PR #23974).
    critical = [0.561, 0.631, 0.752, 0.873, 1.035]
    p = np.array([nm.anderson_darling_pvalue(c) for c in critical])
    assert np.allclose(p / SIGNIFICANCE, 1.0, atol=0.025), p


@pytest.mark.parametrize("n", [10, 20, 50, 100])
def test_anderson_darling_stephens_1974_critical_values_at_finite_n(n):
    # Stephens (1974), JASA 69, 730-737: points 0.576, 0.656, 0.787, 0.918,
    # 1.092 (15, 10, 5, 2.5, 1 %) for his modification A^2 (1 + 4/n - 25/n^2),
    # not for A*^2.  Converted to A^2 at this n and then to A*^2 they land
    # within 25 % of the nominal level (from +22 % at n = 20 to -13 % at n = 100).
    critical = np.array([0.576, 0.656, 0.787, 0.918, 1.092])
    a2 = critical / (1.0 + 4.0 / n - 25.0 / n**2)
    modified = a2 * (1.0 + 0.75 / n + 2.25 / n**2)
    p = np.array([nm.anderson_darling_pvalue(m) for m in modified])
    assert np.all(np.abs(p / SIGNIFICANCE - 1.0) < 0.25), p


def test_anderson_darling_stephens_1974_points_are_conservative_asymptotically():
    # scipy issue #23950: the Stephens (1974) points reject less often than
    # their nominal levels in large samples; read as A*^2 at n -> infinity the
    # D'Agostino-Stephens formulas give p between 73 % and 90 % of nominal.
    critical = [0.576, 0.656, 0.787, 0.918, 1.092]
    ratio = np.array([nm.anderson_darling_pvalue(c) for c in critical]) / SIGNIFICANCE
    assert np.all((ratio > 0.7) & (ratio < 0.92)), ratio


# ---------------------------------------------------------------- Shapiro-Wilk worked example

def test_shapiro_wilk_1965_weights_example():
    # Shapiro & Wilk (1965), Biometrika 52, worked example: weights in pounds
    # of 11 men; W = 0.79, significant at the 1 % level (from memory).
    weights = [148, 154, 158, 160, 161, 162, 166, 170, 182, 195, 236]
    result = nm.shapiro_wilk(weights)
    assert result.statistic == pytest.approx(0.79, abs=0.005)
    assert result.p_value < 0.01


# ---------------------------------------------------------------- exact rational RESET

def _exact_rss(columns: list[list[Fraction]], y: list[Fraction]) -> Fraction:
    """RSS of least squares with intercept, by exact Gaussian elimination on the normal equations."""
    design = [[Fraction(1)] * len(y)] + columns
    k = len(design)
    a = [[sum(u * v for u, v in zip(design[i], design[j])) for j in range(k)] for i in range(k)]
    b = [sum(u * v for u, v in zip(design[i], y)) for i in range(k)]
    for col in range(k):
        pivot = next(r for r in range(col, k) if a[r][col] != 0)
        a[col], a[pivot] = a[pivot], a[col]
        b[col], b[pivot] = b[pivot], b[col]
        for r in range(k):
            if r != col and a[r][col] != 0:
                factor = a[r][col] / a[col][col]
                a[r] = [u - factor * v for u, v in zip(a[r], a[col])]
                b[r] -= factor * b[col]
    beta = [b[i] / a[i][i] for i in range(k)]
    fitted = [sum(beta[i] * design[i][t] for i in range(k)) for t in range(len(y))]
    return sum((u - v) ** 2 for u, v in zip(y, fitted))


def _exact_reset_f(x: np.ndarray, y: np.ndarray) -> float:
    # With a non-zero slope, [1, x, yhat^2, yhat^3] spans the cubics in x, so
    # RESET with powers 2 and 3 is the F-test of the straight line against the
    # cubic; here both fits are exact rational arithmetic on the float data.
    xs = [Fraction(float(v)) for v in x]
    ys = [Fraction(float(v)) for v in y]
    rss_line = _exact_rss([xs], ys)
    rss_cubic = _exact_rss([xs, [v * v for v in xs], [v * v * v for v in xs]], ys)
    n = len(ys)
    return float(((rss_line - rss_cubic) / 2) / (rss_cubic / (n - 4)))


def _engel():
    # Engel food-expenditure data (Koenker & Bassett 1982), statsmodels.datasets.engel.
    data = sm.datasets.engel.load_pandas().data
    return data["income"].to_numpy(dtype=float), data["foodexp"].to_numpy(dtype=float)


def _longley():
    # Longley (1967) macro data, statsmodels.datasets.longley: total employment on GNP.
    data = sm.datasets.longley.load_pandas().data
    return data["GNP"].to_numpy(dtype=float), data["TOTEMP"].to_numpy(dtype=float)


DATASETS = {"engel-statsmodels": _engel, "longley-statsmodels": _longley}


@pytest.mark.parametrize("dataset", list(DATASETS))
def test_reset_exact_rational_reference(dataset):
    # Source: the shipped dataset named in the id; reference value computed by
    # exact rational least squares (Python fractions).
    x, y = DATASETS[dataset]()
    assert lin.ramsey_reset(x, y).statistic == pytest.approx(_exact_reset_f(x, y), rel=1e-9)


def test_reset_engel_statsmodels_linear_reset():
    # statsmodels' linear_reset cubes raw fitted values (~1e9 here) and so
    # keeps fewer digits: F agrees to 1e-8, its p-value to 1e-7.
    x, y = _engel()
    reference = linear_reset(sm.OLS(y, sm.add_constant(x)).fit(), power=3, test_type="fitted", use_f=True)
    result = lin.ramsey_reset(x, y)
    assert result.statistic == pytest.approx(float(reference.fvalue), rel=1e-8)
    assert result.p_value == pytest.approx(float(reference.pvalue), rel=1e-7)
    assert result.p_value < 1e-10  # the Engel curve is concave in income


def test_reset_longley_p_value_from_exact_rational_f():
    # On Longley, fitted TOTEMP cubed is ~2e14 and statsmodels' linear_reset
    # (raw powers) finds its augmented design rank-deficient (statsmodels 0.15
    # warns and returns F ~ 2962), so the exact rational F is the reference here.
    x, y = _longley()
    exact = _exact_reset_f(x, y)
    result = lin.ramsey_reset(x, y)
    assert result.statistic == pytest.approx(exact, rel=1e-9)
    assert result.p_value == pytest.approx(stats.f.sf(exact, 2, x.shape[0] - 4), rel=1e-8)


# ---------------------------------------------------------------- shipped datasets vs statsmodels

@pytest.mark.parametrize("dataset", list(DATASETS))
def test_spline_f_statsmodels_compare_f_test(dataset):
    x, y = DATASETS[dataset]()
    comparison = lin.spline_comparison(x, y)
    linear = sm.OLS(y, sm.add_constant(x)).fit()
    spline = sm.OLS(y, sm.add_constant(bspline_basis(x, comparison.df)[:, 1:])).fit()
    f_value, p_value, _ = spline.compare_f_test(linear)
    assert comparison.f_statistic == pytest.approx(f_value, rel=1e-8)
    assert comparison.p_value == pytest.approx(p_value, rel=1e-8)
    assert comparison.delta_bic == pytest.approx(spline.bic - linear.bic, rel=1e-8, abs=1e-8)


@pytest.mark.parametrize("dataset", list(DATASETS))
def test_breusch_pagan_and_white_statsmodels(dataset):
    x, y = DATASETS[dataset]()
    fit = sm.OLS(y, sm.add_constant(x)).fit()
    bp, white = var.variance_checks(fit.resid, x)
    lm, lm_p, _, _ = het_breuschpagan(fit.resid, sm.add_constant(x), robust=True)
    assert bp.statistic == pytest.approx(lm, rel=1e-8)
    assert bp.p_value == pytest.approx(lm_p, rel=1e-8)
    lm, lm_p, _, _ = het_white(fit.resid, sm.add_constant(x))
    assert white.statistic == pytest.approx(lm, rel=1e-8)
    assert white.p_value == pytest.approx(lm_p, rel=1e-8)


def test_engel_heteroscedasticity_detected():
    # Koenker & Bassett (1982) use the Engel data as their example of error
    # spread growing with income; both tests reject at 1 %.
    x, y = _engel()
    residuals = sm.OLS(y, sm.add_constant(x)).fit().resid
    bp, white = var.variance_checks(residuals, x)
    assert bp.p_value < 0.01 and white.p_value < 0.01


@pytest.mark.parametrize("dataset", list(DATASETS))
def test_normality_of_residuals_scipy_and_statsmodels(dataset):
    x, y = DATASETS[dataset]()
    residuals = np.asarray(sm.OLS(y, sm.add_constant(x)).fit().resid)
    sw, ad, jb, dp, _ = nm.normality_checks(residuals)
    assert sw.statistic == pytest.approx(stats.shapiro(residuals).statistic, rel=1e-12)
    a2, p = normal_ad(residuals)
    assert ad.statistic == pytest.approx(a2, rel=1e-6)  # statsmodels' log(1 - Phi) in the tails, see tests/
    assert ad.p_value == pytest.approx(p, rel=1e-6)
    assert jb.statistic == pytest.approx(stats.jarque_bera(residuals).statistic, rel=1e-10)
    if residuals.shape[0] >= 20:
        assert dp.statistic == pytest.approx(stats.normaltest(residuals).statistic, rel=1e-10)
    else:
        assert dp.p_value is None
