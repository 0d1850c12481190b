"""Linearity (RESET, spline F) and variance (Breusch-Pagan,
White) checks: agreement with statsmodels, calibration under the null,
power under curved and heteroscedastic alternatives, input validation."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats
from statsmodels.stats.diagnostic import (
    het_breuschpagan,
    het_white,
    linear_reset,
)

from preflight.checks import linearity as lin
from preflight.checks import variance as var
from preflight.errors import InputError
from preflight.fit import bspline_basis, spline_df

ALPHA = 0.05


def _pairs():
    """Seeded (x, y) pairs: linear, curved, heteroscedastic, skewed x, and shifted scales."""
    out = []
    for seed, n in [(0, 60), (1, 300), (2, 1500)]:
        rng = np.random.default_rng(seed)
        x = rng.normal(size=n)
        e = rng.normal(size=n)
        out.append((f"linear-{n}", x, 1.0 + 2.0 * x + e))
        out.append((f"quadratic-{n}", x, 1.0 + x + 0.4 * x**2 + e))
        out.append((f"heteroscedastic-{n}", x, x + (0.5 + np.abs(x)) * e))
        g = rng.gamma(2.0, size=n)
        out.append((f"skewed-x-{n}", g, np.log1p(g) + 0.2 * e))
        out.append((f"shifted-{n}", 50.0 + 3.0 * x, 200.0 - 4.0 * x + 0.5 * x**3 + 2.0 * e))
    return out


PAIRS = _pairs()
PAIR_IDS = [name for name, _, _ in PAIRS]


def _interval_rate(replicates: int, alpha: float = ALPHA) -> tuple[float, float]:
    low, high = stats.binom.interval(0.99, replicates, alpha)
    return low / replicates, high / replicates


def _ols(x, y):
    return sm.OLS(y, sm.add_constant(x)).fit()


# ---------------------------------------------------------------- RESET

@pytest.mark.parametrize("name,x,y", PAIRS, ids=PAIR_IDS)
def test_reset_matches_statsmodels(name, x, y):
    reference = linear_reset(_ols(x, y), power=3, test_type="fitted", use_f=True)
    result = lin.ramsey_reset(x, y)
    assert result.statistic == pytest.approx(float(reference.fvalue), rel=1e-8)
    assert result.p_value == pytest.approx(float(reference.pvalue), rel=1e-8, abs=1e-300)
    assert "F(2, " in result.note


@pytest.mark.parametrize("powers,sm_power", [((2,), [2]), ((2, 3, 4), 4), ((3,), [3]), ((2, 4), [2, 4])])
def test_reset_other_powers_match_statsmodels(powers, sm_power):
    rng = np.random.default_rng(12)
    x = rng.normal(size=400)
    y = x + 0.2 * np.sin(2 * x) + rng.normal(size=400)
    reference = linear_reset(_ols(x, y), power=sm_power, test_type="fitted", use_f=True)
    result = lin.ramsey_reset(x, y, powers=powers)
    assert result.statistic == pytest.approx(float(reference.fvalue), rel=1e-8)
    assert result.p_value == pytest.approx(float(reference.pvalue), rel=1e-8)


def test_reset_effect_is_r_squared_gain_of_direct_fit():
    rng = np.random.default_rng(13)
    x = rng.normal(size=500)
    y = np.exp(0.5 * x) + 0.5 * rng.normal(size=500)
    linear = sm.OLS(y, sm.add_constant(x)).fit()
    fitted = linear.fittedvalues
    augmented = sm.OLS(y, np.column_stack([np.ones(500), x, fitted**2, fitted**3])).fit()
    assert lin.ramsey_reset(x, y).effect == pytest.approx(augmented.rsquared - linear.rsquared, rel=1e-8)


@pytest.mark.parametrize("scale,shift", [(1e3, 0.0), (1e-3, 5.0), (-7.0, 1e4)])
def test_reset_is_invariant_to_affine_changes_of_x_and_y(scale, shift):
    rng = np.random.default_rng(14)
    x = rng.normal(size=300)
    y = x + 0.3 * x**2 + rng.normal(size=300)
    base = lin.ramsey_reset(x, y)
    moved = lin.ramsey_reset(scale * x + shift, 2.0 * y - shift)
    assert moved.statistic == pytest.approx(base.statistic, rel=1e-8)
    assert moved.effect == pytest.approx(base.effect, rel=1e-7)


# ---------------------------------------------------------------- spline F-test

def _spline_reference(x, y, df):
    linear = _ols(x, y)
    spline = sm.OLS(y, sm.add_constant(bspline_basis(x, df)[:, 1:])).fit()
    f_value, p_value, df_diff = spline.compare_f_test(linear)
    return linear, spline, f_value, p_value, df_diff


@pytest.mark.parametrize("name,x,y", PAIRS, ids=PAIR_IDS)
def test_spline_f_matches_statsmodels_compare_f_test(name, x, y):
    comparison = lin.spline_comparison(x, y)
    assert comparison.df == spline_df(x.shape[0], 10)
    linear, spline, f_value, p_value, df_diff = _spline_reference(x, y, comparison.df)
    assert comparison.f_statistic == pytest.approx(f_value, rel=1e-8)
    assert comparison.p_value == pytest.approx(p_value, rel=1e-8, abs=1e-300)
    assert comparison.df_num == df_diff
    # statsmodels' BIC is -2 llf + k log n with the Gaussian likelihood.
    assert comparison.delta_bic == pytest.approx(spline.bic - linear.bic, rel=1e-8, abs=1e-8)
    assert comparison.r_squared_gain == pytest.approx(spline.rsquared - linear.rsquared, rel=1e-7, abs=1e-12)
    result = lin.spline_f_test(x, y)
    assert result.statistic == comparison.f_statistic and result.p_value == comparison.p_value
    assert f"df={comparison.df}" in result.note
    assert f"delta BIC (spline - linear) = {comparison.delta_bic:.6g}" in result.note


@pytest.mark.parametrize("df", [4, 7, 10])
def test_spline_explicit_df(df):
    rng = np.random.default_rng(15)
    x = rng.uniform(-2, 2, size=250)
    y = np.sin(x) + 0.3 * rng.normal(size=250)
    _, _, f_value, p_value, df_diff = _spline_reference(x, y, df)
    result = lin.spline_f_test(x, y, df=df)
    assert result.statistic == pytest.approx(f_value, rel=1e-8)
    assert result.p_value == pytest.approx(p_value, rel=1e-8)
    assert f"F({df - 2}, {250 - df})" in result.note and df_diff == df - 2


def test_spline_df_respects_max_df():
    x = np.random.default_rng(16).normal(size=30_000)  # spline_df(30000) = round(7.87) + 2 = 10
    y = x + np.random.default_rng(17).normal(size=30_000)
    assert lin.spline_comparison(x, y, max_df=6).df == 6
    assert lin.spline_comparison(x, y).df == 10


@pytest.mark.parametrize("levels", [2, 3])
def test_spline_on_few_distinct_x_reports_no_test_or_the_saturated_fit(levels):
    x = np.repeat(np.arange(levels, dtype=float), 40)
    y = x + 0.5 * x**2 + np.random.default_rng(18).normal(size=x.shape[0])
    result = lin.spline_f_test(x, y)
    if levels == 2:
        # Two points are always on a line: nothing to test.
        assert result.p_value is None and "no test" in result.note
    else:
        # Three levels: the spline is the saturated model (group means), one numerator df.
        groups = sm.OLS(y, np.column_stack([x == v for v in range(levels)]).astype(float)).fit()
        f_value, p_value, df_diff = groups.compare_f_test(_ols(x, y))
        assert df_diff == 1
        assert result.statistic == pytest.approx(f_value, rel=1e-8)
        assert result.p_value == pytest.approx(p_value, rel=1e-8, abs=1e-300)


def test_full_rank_columns_drops_repeated_directions():
    rng = np.random.default_rng(24)
    b = rng.integers(0, 2, size=200).astype(float)
    z = rng.normal(size=200)
    X = np.column_stack([b, z, b * b, 2 * b - 3 * z, np.ones(200), z**2])
    kept = lin.full_rank_columns(X)
    assert kept.shape[1] == 3
    assert np.linalg.matrix_rank(np.column_stack([np.ones(200), kept])) == 4


def _full_rank_columns_with_q(X, tolerance=1e-10):
    """The selection as first written: pivoted QR in "economic" mode, which also forms Q."""
    from scipy.linalg import qr

    # The norms summed as full_rank_columns sums them (column-major): a near-tie such as z and z + 1e-12 noise
    # is then broken the same way, and the comparison is of the two factorisation modes alone.
    centred = np.asfortranarray(X - X.mean(axis=0))
    norms = np.sqrt(np.einsum("ij,ij->j", centred, centred))
    candidates = np.flatnonzero(norms > tolerance * max(norms.max(), np.finfo(float).tiny))
    if candidates.size == 0:
        return X[:, :0]
    _, r, pivots = qr(centred[:, candidates] / norms[candidates], mode="economic", pivoting=True)
    diagonal = np.abs(np.diag(r))
    return X[:, np.sort(candidates[pivots[: int(np.sum(diagonal > tolerance * diagonal[0]))]])]


def test_full_rank_columns_select_as_with_the_economic_factorisation():
    rng = np.random.default_rng(25)
    z = rng.normal(size=300)
    b = rng.integers(0, 2, size=300).astype(float)
    designs = [z[:, None], np.column_stack([z, z * z]), np.column_stack([b, b * b]),
               np.column_stack([b, z, b * b, 2 * b - 3 * z, np.ones(300), z**2]),
               bspline_basis(np.round(z, 1), 8)[:, 1:], bspline_basis(z, 10)[:, 1:],
               np.column_stack([z, z + 1e-12 * rng.normal(size=300)]), rng.normal(size=(6, 9))]
    for X in designs:
        kept, expected = lin.full_rank_columns(X), _full_rank_columns_with_q(X)
        assert kept.shape == expected.shape and np.array_equal(kept, expected)


# ---------------------------------------------------------------- variance

@pytest.mark.parametrize("name,x,y", PAIRS, ids=PAIR_IDS)
def test_breusch_pagan_and_white_match_statsmodels(name, x, y):
    fit = _ols(x, y)
    exog = sm.add_constant(x)
    bp = var.breusch_pagan(fit.resid, x)
    lm, lm_p, _, _ = het_breuschpagan(fit.resid, exog, robust=True)
    assert bp.statistic == pytest.approx(lm, rel=1e-8)
    assert bp.p_value == pytest.approx(lm_p, rel=1e-8, abs=1e-300)
    white = var.white_test(fit.resid, x)
    lm, lm_p, _, _ = het_white(fit.resid, exog)
    assert white.statistic == pytest.approx(lm, rel=1e-8)
    assert white.p_value == pytest.approx(lm_p, rel=1e-8, abs=1e-300)
    assert white.effect == pytest.approx(lm / x.shape[0], rel=1e-8)


def test_several_regressors_match_statsmodels():
    rng = np.random.default_rng(20)
    Z = rng.normal(size=(800, 3))
    e = rng.normal(size=800) * np.exp(0.3 * Z[:, 0] - 0.2 * Z[:, 1] * Z[:, 2])
    exog = sm.add_constant(Z)
    bp = var.breusch_pagan(e, Z)
    assert bp.statistic == pytest.approx(het_breuschpagan(e, exog, robust=True)[0], rel=1e-8)
    assert "chi-squared(3)" in bp.note
    white = var.white_test(e, Z)
    lm, lm_p, _, _ = het_white(e, exog)
    assert white.statistic == pytest.approx(lm, rel=1e-8)
    assert white.p_value == pytest.approx(lm_p, rel=1e-8)
    assert "chi-squared(9)" in white.note


def test_white_with_binary_regressor_counts_rank():
    rng = np.random.default_rng(21)
    Z = np.column_stack([rng.integers(0, 2, size=300).astype(float), rng.normal(size=300)])
    e = rng.normal(size=300) * (1 + Z[:, 0])
    white = var.white_test(e, Z)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # statsmodels warns that its design repeats a column, as it does
        lm, lm_p, _, _ = het_white(e, sm.add_constant(Z))  # its df is the model rank as well
    assert white.statistic == pytest.approx(lm, rel=1e-8)
    assert white.p_value == pytest.approx(lm_p, rel=1e-8)
    assert "chi-squared(4)" in white.note  # levels 2 + squares 2 + product 1, minus the repeated binary square


def test_constant_squared_residuals_give_no_evidence():
    x = np.random.default_rng(22).normal(size=100)
    e = np.where(np.arange(100) % 2 == 0, 1.0, -1.0)
    for result in var.variance_checks(e, x):
        assert result.statistic == 0.0 and result.p_value == 1.0


def test_variance_checks_order():
    rng = np.random.default_rng(23)
    x = rng.normal(size=200)
    results = var.variance_checks(rng.normal(size=200), x)
    assert [r.name for r in results] == ["breusch-pagan", "white"]
    assert all(r.effect_name == "auxiliary R-squared" and r.n == 200 for r in results)


# ---------------------------------------------------------------- calibration

def test_false_alarm_rates_under_linear_homoscedastic_gaussian_null():
    replicates, n = 300, 200
    rng = np.random.default_rng(20240602)
    names = ["reset", "spline", "breusch-pagan", "white"]
    rejections = np.zeros(len(names))
    for _ in range(replicates):
        x = rng.normal(size=n)
        y = 0.5 + 1.5 * x + rng.normal(size=n)
        residuals = y - np.polyval(np.polyfit(x, y, 1), x)
        results = lin.linearity_checks(x, y) + var.variance_checks(residuals, x)
        rejections += np.array([r.p_value <= ALPHA for r in results])
    rates = rejections / replicates
    low, high = _interval_rate(replicates)
    assert np.all((rates >= low) & (rates <= high)), dict(zip(names, rates))


# ---------------------------------------------------------------- power

def test_tanh_curve_flagged_by_reset_and_spline():
    replicates, n = 60, 1000
    rng = np.random.default_rng(33)
    flagged = np.zeros(2)
    for _ in range(replicates):
        x = rng.normal(size=n)
        y = np.tanh(2.0 * x) + 0.3 * rng.normal(size=n)
        for j, result in enumerate(lin.linearity_checks(x, y)):
            flagged[j] += result.p_value <= ALPHA and result.effect >= 0.01
    assert np.all(flagged / replicates >= 0.9), flagged


def test_noise_scaled_by_abs_x_caught_by_white():
    replicates, n = 60, 1000
    rng = np.random.default_rng(34)
    white_hits = bp_hits = 0
    for _ in range(replicates):
        x = rng.normal(size=n)
        y = x + np.abs(x) * rng.normal(size=n)
        residuals = y - np.polyval(np.polyfit(x, y, 1), x)
        bp, white = var.variance_checks(residuals, x)
        white_hits += white.p_value <= ALPHA
        bp_hits += bp.p_value <= ALPHA
    assert white_hits / replicates >= 0.9
    # Variance symmetric in x is nearly uncorrelated with x itself: the linear
    # Breusch-Pagan design misses it most of the time.
    assert bp_hits / replicates <= 0.6


# ---------------------------------------------------------------- input validation

PAIR_CHECKS = [lin.ramsey_reset, lin.spline_f_test, lin.linearity_checks,
               var.breusch_pagan, var.white_test, var.variance_checks]


@pytest.mark.parametrize("check", PAIR_CHECKS, ids=lambda f: f.__name__)
def test_nan_raises(check):
    x = np.random.default_rng(0).normal(size=50)
    y = x.copy()
    y[7] = np.nan
    with pytest.raises(InputError):
        check(x, y) if check.__module__.endswith("linearity") else check(y, x)
    with pytest.raises(InputError):
        check(y, x) if check.__module__.endswith("linearity") else check(x, y)


@pytest.mark.parametrize("check", PAIR_CHECKS, ids=lambda f: f.__name__)
def test_length_mismatch_and_too_short_raise(check):
    rng = np.random.default_rng(1)
    with pytest.raises(InputError):
        check(rng.normal(size=50), rng.normal(size=49))
    with pytest.raises(InputError):
        check(rng.normal(size=2), rng.normal(size=2))


@pytest.mark.parametrize("check", [lin.ramsey_reset, lin.spline_f_test, var.variance_checks],
                         ids=lambda f: f.__name__)
def test_matrix_where_vector_expected_raises(check):
    rng = np.random.default_rng(2)
    with pytest.raises(InputError, match="one-dimensional"):
        check(rng.normal(size=(50, 2)), rng.normal(size=50))


@pytest.mark.parametrize("check", [lin.ramsey_reset, lin.spline_f_test])
def test_constant_inputs_raise(check):
    x = np.random.default_rng(3).normal(size=40)
    with pytest.raises(InputError, match="constant"):
        check(np.ones(40), x)
    with pytest.raises(InputError, match="constant"):
        check(x, np.ones(40))


@pytest.mark.parametrize("powers", [(), (1, 2), (2, 2), (0,)])
def test_reset_bad_powers(powers):
    x = np.random.default_rng(4).normal(size=40)
    with pytest.raises(InputError, match="powers"):
        lin.ramsey_reset(x, x**2, powers=powers)


def test_spline_bad_df_and_too_few_rows():
    rng = np.random.default_rng(5)
    x, y = rng.normal(size=30), rng.normal(size=30)
    with pytest.raises(InputError, match="at least 4"):
        lin.spline_f_test(x, y, df=3)
    with pytest.raises(InputError, match="needs at least"):
        lin.spline_f_test(x[:9], y[:9], df=8)


def test_white_too_many_columns_for_rows():
    rng = np.random.default_rng(6)
    with pytest.raises(InputError, match="auxiliary regression"):
        var.white_test(rng.normal(size=10), rng.normal(size=(10, 3)))


def test_inputs_not_mutated_and_no_warnings():
    rng = np.random.default_rng(7)
    x = rng.normal(size=150)
    y = x + rng.normal(size=150)
    x0, y0 = x.copy(), y.copy()
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        lin.linearity_checks(x, y)
        var.variance_checks(y - x, x)
    assert np.array_equal(x, x0) and np.array_equal(y, y0)
