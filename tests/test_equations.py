"""Structural equations, calibrated residual independence and edge judgement (preflight.equations)."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats

from preflight.checks.independence import hsic_rff
from preflight.equations import (
    EarlyStop,
    _departure_checks,
    _tail_p_value,
    equation_checks,
    extreme_rows,
    fit_equations,
    judge_edge,
    judge_edge_with_splines,
    residual_independence,
)
from preflight.errors import InputError
from preflight.fit import leverage, ols


@pytest.fixture(autouse=True)
def _single_threaded_blas():
    # As inside preflight.check (api.py): threaded BLAS spins on these many small products.
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=1, user_api="blas"):
        yield


def _skewed(rng, n):
    return stats.gamma(a=0.5).rvs(size=n, random_state=rng) - 0.5


def _arcsine(rng, n):
    return stats.arcsine.rvs(size=n, random_state=rng) - 0.5


def test_fit_equations_matches_statsmodels_ols():
    rng = np.random.default_rng(0)
    n = 400
    a = _skewed(rng, n)
    b = 0.7 * a + _arcsine(rng, n)
    c = -1.2 * a + 0.4 * b + _skewed(rng, n)
    X = np.column_stack([a, b, c])
    equations = fit_equations(X, [(), (0,), (0, 1)])
    reference = sm.OLS(c, sm.add_constant(np.column_stack([a, b]))).fit()
    np.testing.assert_allclose(equations[2].coef, reference.params, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(equations[2].residuals, reference.resid, rtol=1e-8, atol=1e-10)
    assert equations[2].r_squared == pytest.approx(reference.rsquared, rel=1e-10)
    np.testing.assert_allclose(equations[0].residuals, a - a.mean(), atol=1e-12)
    assert equations[1].parents == (0,) and equations[2].n == n


@pytest.mark.parametrize("parents", [[(), (1,), ()], [(), (0,)], [(), (0, 0), ()], [(), (5,), ()]])
def test_fit_equations_refuses_invalid_parent_sets(parents):
    X = np.random.default_rng(1).normal(size=(20, 3))
    with pytest.raises(InputError):
        fit_equations(X, parents)


def test_bootstrap_statistic_is_the_random_feature_hsic():
    rng = np.random.default_rng(2)
    n = 1500
    x = _skewed(rng, n)
    y = 0.8 * x + _skewed(rng, n)
    result = residual_independence(y, x, replicates=20, seed=5)
    reference = hsic_rff(x, ols(x, y).residuals, seed=5)
    assert result.column_statistics[0] == pytest.approx(reference.statistic, rel=1e-4)
    assert result.effect == pytest.approx(reference.effect, rel=1e-4)
    assert result.n == n and result.replicates == 20 and result.calibration == "bootstrap"


def test_bootstrap_is_reproducible_and_a_valid_p_value():
    rng = np.random.default_rng(3)
    X = rng.standard_exponential(size=(600, 2))
    y = X @ [0.5, -1.0] + _arcsine(rng, 600)
    first = residual_independence(y, X, replicates=49, seed=11)
    again = residual_independence(y, X, replicates=49, seed=11)
    assert first == again or (first.p_value == again.p_value and first.statistic == again.statistic)
    assert len(first.column_p_values) == 2
    for p in (first.p_value, *first.column_p_values):
        assert 1 / 50 <= p <= 1.0 and (p * 50) == pytest.approx(round(p * 50))


def test_bootstrap_false_alarms_are_nominal_with_skewed_noise_and_correlated_parents():
    # Sen and Sen (2014): with skewed noise the plain HSIC null is too liberal
    # for a fitted residual; the bootstrap must hold alpha.
    replicates, rejections = 100, 0
    for r in range(replicates):
        rng = np.random.default_rng([7, r])
        a = _skewed(rng, 250)
        b = 0.8 * a + _skewed(rng, 250)
        y = 1.0 * a - 0.7 * b + 2.0 * _skewed(rng, 250)
        rejections += residual_independence(y, np.column_stack([a, b]), replicates=59, seed=r).p_value < 0.05
    low, high = stats.binom.ppf([0.005, 0.995], replicates, 0.05)
    assert low <= rejections <= high


def test_bootstrap_detects_noise_whose_spread_follows_the_regressor():
    rng = np.random.default_rng(4)
    x = _skewed(rng, 1500)
    y = x + (0.3 + np.abs(x)) * _arcsine(rng, 1500)
    result = residual_independence(y, x, replicates=99, seed=0)
    assert result.p_value < 0.05
    # Beyond every refit, the log-normal tail reaches below the 1 / (1 + B) floor of the counted p-value.
    assert result.tail_p_value is not None and result.tail_p_value < 1 / 100


def test_reduced_features_leave_every_column_statistic_unchanged():
    # The bootstrap products use each column's features rotated onto their numerical column space;
    # m * ||phi^T psi / m||^2 must be the same number as with the full features, column by column.
    from preflight.checks.independence import _features_and_derivative_mean
    from preflight.equations import _column_statistics, _raw_features, _reduced_features

    rng = np.random.default_rng(12)
    m = 3000
    columns = [_skewed(rng, m), _arcsine(rng, m), rng.standard_normal(m)]
    columns = [(c - c.mean()) / c.std() for c in columns]
    phis = [_features_and_derivative_mean(c, rng.standard_normal(40))[0] for c in columns]
    residuals = np.column_stack([columns[0] ** 2 + rng.standard_normal(m), rng.standard_normal(m)])
    features = _raw_features(residuals, rng.standard_normal(40))
    full = _column_statistics(np.concatenate(phis, axis=1), features, 3, m)
    reduced_phi = _reduced_features(phis)
    assert reduced_phi.shape[1] < 3 * 80
    np.testing.assert_allclose(_column_statistics(reduced_phi, features, 3, m), full, rtol=1e-4)
    assert full[0, 0] > 10 * full[0, 1]  # the dependent residual is seen through the reduced features too


def test_early_stop_keeps_the_decision_and_runs_fewer_refits():
    rng = np.random.default_rng(13)
    n = 2000
    x = _skewed(rng, n)
    independent = 0.8 * x + _skewed(rng, n)
    stop = EarlyStop(hsic_floor=0.002, spread_floor=0.005)
    # The causal direction: no material effect, so only the refits for the reported p-value run.
    forward = residual_independence(independent, x, replicates=200, seed=1, early_stop=stop)
    assert forward.effect < 0.002 and forward.replicates == stop.negligible
    assert "settled" in forward.note
    # The anti-causal direction: a clear dependence, settled at the early look.
    backward = residual_independence(x, independent, replicates=200, seed=1, early_stop=stop)
    full = residual_independence(x, independent, replicates=200, seed=1)
    assert backward.replicates == stop.early < stop.first and full.replicates == 200
    assert backward.tail_p_value < stop.clear_below and full.tail_p_value < 1e-6
    assert backward.column_statistics == full.column_statistics  # the observed statistic does not depend on B


def test_early_look_settles_only_a_clear_dependence():
    # With no floors, an independent residual can only be settled by a p-value above clear_above, which the
    # early look does not trust: read from 20 draws, a p-value of 0.05 shows above 0.25 in 0.26 % of tests.
    stop = EarlyStop(hsic_floor=0.0, spread_floor=0.0)
    rng = np.random.default_rng(15)
    x = _skewed(rng, 1500)
    looks = []
    for seed in range(6):
        result = residual_independence(0.8 * x + _skewed(rng, 1500), x, replicates=200, seed=seed, early_stop=stop)
        looks.append(result.replicates)
        assert result.replicates >= stop.first
    assert stop.first in looks  # most are settled at the look of 50 (p above clear_above)


@pytest.mark.parametrize("n", [800, 3000])
def test_the_early_look_leaves_every_later_draw_as_it_was(n):
    # A look inside a block of refits uses its first columns, so a test that goes past the look at 20
    # reports the very numbers it reported when the first look was at 50.
    never = {"hsic_floor": 0.0, "spread_floor": 0.0, "clear_below": 0.0, "early_clear_below": 0.0,
             "clear_above": 1.0}
    rng = np.random.default_rng(16)
    x = _skewed(rng, n)
    y = 0.5 * x + _arcsine(rng, n)
    looked = residual_independence(y, x, replicates=120, seed=4, early_stop=EarlyStop(early=20, **never))
    before = residual_independence(y, x, replicates=120, seed=4, early_stop=EarlyStop(early=50, **never))
    assert looked.replicates == before.replicates == 120
    assert (looked.p_value, looked.tail_p_value, looked.spread.p_value) == (
        before.p_value, before.tail_p_value, before.spread.p_value)


def test_early_stop_runs_every_refit_when_the_answer_is_close():
    # An effect above its floor with a p-value in the undecided band cannot stop early.
    stop = EarlyStop(first=50, hsic_floor=0.0, spread_floor=0.0, clear_below=0.0, clear_above=1.0)
    rng = np.random.default_rng(14)
    x = _skewed(rng, 800)
    y = 0.5 * x + _arcsine(rng, 800)
    result = residual_independence(y, x, replicates=120, seed=2, early_stop=stop)
    assert result.replicates == 120


@pytest.mark.parametrize("calibration", ["none", "first-order"])
def test_gamma_calibrations_combine_columns_by_bonferroni(calibration):
    rng = np.random.default_rng(5)
    X = rng.standard_exponential(size=(500, 3))
    y = X @ [1.0, 0.5, -0.5] + _arcsine(rng, 500)
    result = residual_independence(y, X, calibration=calibration)
    assert result.p_value == pytest.approx(min(1.0, 3 * min(result.column_p_values)))
    assert result.calibration == calibration and len(result.column_effects) == 3
    assert result.tail_p_value is None


def test_residual_independence_refuses_bad_input():
    rng = np.random.default_rng(6)
    x, y = rng.normal(size=50), rng.normal(size=50)
    with pytest.raises(InputError):
        residual_independence(y, x, calibration="permutation")
    with pytest.raises(InputError):
        residual_independence(y, x, replicates=0)
    with pytest.raises(InputError):
        residual_independence(y[:40], x)
    with pytest.raises(InputError):
        residual_independence(y, np.column_stack([x, x * np.nan]))


def _three_variable_table(seed: int, n: int = 1500):
    # a -> b, a -> c, b -> c: the edge b - c has a as the other parent of both.
    rng = np.random.default_rng(seed)
    a = _arcsine(rng, n) / 0.35
    b = 0.9 * a + _skewed(rng, n) / 0.7
    c = 0.6 * a - 0.8 * b + _arcsine(rng, n) / 0.35
    return np.column_stack([a, b, c]), [(), (0,), (0, 1)]


def test_judge_edge_orients_a_non_gaussian_edge_inside_its_equations():
    X, parents = _three_variable_table(8)
    forward = judge_edge(X, 1, 2, parents, replicates=59)
    assert forward.orientation == "i->j" and forward.conditioning == (0,)
    assert forward.forward.p_value >= 0.05 > forward.backward.p_value and forward.likelihood_ratio > 0
    swapped = judge_edge(X, 2, 1, parents, replicates=59)
    assert swapped.orientation == "j->i" and swapped.likelihood_ratio < 0


def test_judge_edge_leaves_a_gaussian_edge_undetermined():
    rng = np.random.default_rng(9)
    a = rng.normal(size=2000)
    b = 0.8 * a + rng.normal(size=2000)
    judgement = judge_edge(np.column_stack([a, b]), 0, 1, [(), (0,)], replicates=59)
    assert judgement.orientation == "undetermined"


def test_judge_edge_needs_a_material_effect_when_asked():
    X, parents = _three_variable_table(10)
    judgement = judge_edge(X, 1, 2, parents, replicates=49, min_effect=0.99)
    assert judgement.orientation == "undetermined"
    with pytest.raises(InputError):
        judge_edge(X, 1, 1, parents)
    with pytest.raises(InputError):
        judge_edge(X, 1, 2, parents, alpha=1.5)


def test_equation_checks_match_statsmodels_on_a_two_parent_equation():
    from statsmodels.stats.diagnostic import het_breuschpagan, het_white, linear_reset
    from statsmodels.stats.outliers_influence import OLSInfluence

    rng = np.random.default_rng(12)
    n = 500
    a = _skewed(rng, n)
    b = 0.5 * a + _arcsine(rng, n)
    c = 0.8 * a - 0.6 * b + 0.3 * a**2 + (0.5 + np.abs(b)) * _arcsine(rng, n)
    X = np.column_stack([a, b, c])
    design = sm.add_constant(np.column_stack([a, b]))

    def reference(rows):
        fit = sm.OLS(c[rows], design[rows]).fit()
        reset = linear_reset(fit, power=3, use_f=True)
        bp = het_breuschpagan(fit.resid, design[rows])
        white = het_white(fit.resid, design[rows])
        return fit, {"ramsey reset (equation)": (float(reset.fvalue), float(reset.pvalue)),
                     "breusch-pagan": bp[:2], "white": white[:2]}

    fit, on_all = reference(np.arange(n))
    own = {r.name: r for r in _departure_checks(X[:, :2], c, max_df=10)}
    for name, (statistic, p_value) in on_all.items():
        assert own[name].statistic == pytest.approx(statistic, rel=1e-7)
        assert own[name].p_value == pytest.approx(p_value, rel=1e-6)
    # Each reported check is the weaker of all rows and all rows but the most extreme parent values,
    # ranked by statsmodels' hat values.
    hat = OLSInfluence(fit).hat_matrix_diag
    _, trimmed = reference(np.sort(np.argsort(-hat)[extreme_rows(n):]))
    checks = {r.name: r for r in equation_checks(X, 2, (0, 1))}
    for name in on_all:
        assert checks[name].p_value == pytest.approx(max(on_all[name][1], trimmed[name][1]), rel=1e-6)
    # The curvature in a and the spread in b are there to be found.
    assert checks["additive spline f-test (equation)"].p_value < 0.01
    assert checks["breusch-pagan"].p_value < 0.01
    assert len(equation_checks(X, 0, ())) == 5


def test_leverage_matches_statsmodels_hat_values():
    from statsmodels.stats.outliers_influence import OLSInfluence

    rng = np.random.default_rng(21)
    Z = np.column_stack([rng.standard_exponential(300), rng.normal(size=300)])
    Z = np.column_stack([Z, Z[:, 0] - Z[:, 1]])  # a repeated direction adds nothing
    fit = sm.OLS(rng.normal(size=300), sm.add_constant(Z[:, :2])).fit()
    assert np.allclose(leverage(Z), OLSInfluence(fit).hat_matrix_diag, atol=1e-12)
    assert extreme_rows(200) == 2 and extreme_rows(2000) == 5 and extreme_rows(100_000) == 32


def test_one_outlying_row_makes_no_departure_in_an_equation():
    rng = np.random.default_rng(22)
    n = 2000
    a = rng.normal(size=n)
    noise = rng.normal(size=n)
    a[0], noise[0] = 9.0, 12.0  # one row far out in the parent, with a large noise draw
    X = np.column_stack([a, 0.7 * a + noise])
    on_all = {r.name: r for r in _departure_checks(X[:, :1], X[:, 1], max_df=10)}
    assert all(on_all[name].p_value < 1e-4 for name in ("ramsey reset (equation)", "white"))
    checks = {r.name: r for r in equation_checks(X, 1, (0,))}
    assert all(checks[name].p_value > 0.01 for name in on_all)
    assert "all but the 5 rows of highest leverage" in checks["white"].note


def test_residual_independence_does_not_depend_on_units():
    rng = np.random.default_rng(13)
    X = rng.standard_exponential(size=(400, 2))
    y = X @ [0.7, 0.4] + _skewed(rng, 400)
    base = residual_independence(y, X, replicates=39, seed=2)
    scaled = residual_independence(1e6 * y - 3.0, X * [1e-3, 250.0] + 7.0, replicates=39, seed=2)
    assert scaled.p_value == base.p_value and scaled.column_p_values == base.column_p_values
    assert scaled.statistic == pytest.approx(base.statistic, rel=1e-6)


def test_the_edge_judgement_carries_the_partial_correlation_of_the_partial_residuals():
    # Reference: the partial correlation as the correlation of the statsmodels OLS residuals on the other
    # parents (its definition); Fisher (1924) z = atanh(r) sqrt(n - 3 - |Z|), two-sided normal p.
    import math

    rng = np.random.default_rng(3)
    n = 800
    a = rng.exponential(size=n)
    b = 0.5 * a + rng.laplace(size=n)
    c = 0.8 * a - 0.6 * b + rng.uniform(-1, 1, n)
    X = np.column_stack([a, b, c])
    judgement = judge_edge(X, 1, 2, parents=[(), (0,), (0, 1)], replicates=20)
    others = sm.add_constant(a)
    r = float(np.corrcoef(sm.OLS(b, others).fit().resid, sm.OLS(c, others).fit().resid)[0, 1])
    z = math.atanh(r) * math.sqrt(n - 3 - 1)
    result = judgement.partial_correlation
    assert judgement.conditioning == (0,)
    assert result.effect == pytest.approx(r, rel=1e-9)
    assert result.statistic == pytest.approx(z, rel=1e-9)
    assert result.p_value == pytest.approx(2 * stats.norm.sf(abs(z)), rel=1e-7, abs=1e-300)


def test_spline_design_bootstrap_holds_alpha_for_a_curved_equation_with_two_parents():
    # The residual bootstrap treats the spline columns as a fixed design (Sen and Sen 2014 for least
    # squares): with the true additive model and independent skewed noise, the forward test holds alpha.
    replicates, rejections = 60, 0
    for r in range(replicates):
        rng = np.random.default_rng([11, r])
        a, b = _arcsine(rng, 300), _skewed(rng, 300)
        y = np.tanh(3 * a) + 0.5 * b * b + 0.5 * _skewed(rng, 300)
        X = np.column_stack([a, b, y])
        judged = judge_edge_with_splines(X, 0, 2, [(), (), (0, 1)], replicates=59, seed=r)
        rejections += judged.forward.p_value < 0.05
    low, high = stats.binom.ppf([0.005, 0.995], replicates, 0.05)
    assert low <= rejections <= high


def test_judge_edge_with_splines_finds_the_additive_noise_direction_of_a_curve():
    # a -> y through a saturating curve, b a second parent of y: y's spline residual is independent of a,
    # and a's regression on splines of y (the anti-causal one) is not.
    rng = np.random.default_rng(12)
    a, b = _arcsine(rng, 2000), _skewed(rng, 2000)
    y = np.tanh(3 * a) + 0.6 * b + 0.3 * _skewed(rng, 2000)
    judged = judge_edge_with_splines(np.column_stack([a, b, y]), 0, 2, [(), (), (0, 1)], seed=1)
    assert judged.forward.p_value > 0.05
    assert judged.backward.tail_p_value < 1e-4


def test_judge_edge_with_splines_finds_no_model_either_way_under_a_hidden_common_cause():
    # x and y share a skewed hidden cause and nothing else; a linear order made x a parent of y.  Neither
    # direction leaves an independent residual even with splines (each side's HSIC or spread rejects).
    rng = np.random.default_rng(13)
    hidden = rng.exponential(size=3000)
    x = hidden + 0.6 * _arcsine(rng, 3000)
    y = 0.9 * hidden + 0.6 * _arcsine(rng, 3000)
    judged = judge_edge_with_splines(np.column_stack([x, y]), 0, 1, [(), (0,)], seed=2)
    for test, spread in ((judged.forward, judged.forward_spread), (judged.backward, judged.backward_spread)):
        assert min(test.tail_p_value, *(s.p_value for s in spread)) < 1e-3


def test_judge_edge_with_splines_refuses_a_link_that_is_not_a_parent():
    X = np.random.default_rng(0).normal(size=(100, 3))
    with pytest.raises(InputError):
        judge_edge_with_splines(X, 0, 2, [(), (), (1,)])


# --------------------------------------------------------------------------- the bootstrap p-value's tail


def test_tail_p_value_counts_while_a_draw_reaches_the_observed_value():
    draws = np.arange(1.0, 201.0)
    assert _tail_p_value(150.5, draws) == pytest.approx(51 / 201)
    assert _tail_p_value(200.0, draws) == pytest.approx(2 / 201)  # ties count as reaching it


def test_tail_p_value_falls_back_to_counting_without_positive_draws():
    assert _tail_p_value(5.0, np.array([0.0, 1.0, 2.0])) == pytest.approx(1 / 4)
    assert _tail_p_value(5.0, np.full(9, 2.0)) == pytest.approx(1 / 10)


def test_tail_p_value_holds_its_level_where_a_holm_correction_decides():
    # Exchangeable draws: the observed statistic and 200 bootstrap-like draws from one weighted sum of
    # chi-squares (the shape of an HSIC null).  Rejections at the small levels a correction over tens of
    # tests uses stay at or below nominal (binomial 99.9 % bound).  The test can tell: a gamma matched to the
    # draws' mean and variance (the rule before) rejects 0.37 % at 0.002 here and exceeds the bound.
    rng = np.random.default_rng(11)
    weights = np.array([1.0, 0.6, 0.3, 0.15, 0.08])
    samples = (rng.chisquare(1, size=(20000, 201, weights.size)) * weights).sum(axis=2)
    p = np.array([_tail_p_value(row[0], row[1:]) for row in samples])
    means, variances = samples[:, 1:].mean(axis=1), samples[:, 1:].var(axis=1)
    gamma_p = stats.gamma.sf(samples[:, 0], means**2 / variances, scale=variances / means)
    for level in (0.005, 0.002, 0.001):
        bound = stats.binom.ppf(0.999, p.size, level) / p.size
        assert np.mean(p < level) <= bound, level
    assert np.mean(gamma_p < 0.002) > stats.binom.ppf(0.999, p.size, 0.002) / p.size
