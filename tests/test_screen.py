"""Tests of the per-variable screen (preflight.screen).

References: scipy (kurtosis, median absolute deviation, binomial), statsmodels
(acorr_ljungbox, variance_inflation_factor), numpy (condition number), and
seeded simulation.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from scipy import stats

from preflight.errors import InputError
from preflight.policy import Policy
from preflight.screen import (
    collinearity_check,
    ljung_box_check,
    outlier_check,
    robust_z,
    screen_variables,
    variance_inflation_factors,
)

VOCABULARY = {"constant", "discrete", "heavy-tailed", "outliers", "autocorrelated", "collinear"}
POLICY = Policy()


def flags_of(X, names, policy=POLICY) -> dict[str, tuple[str, ...]]:
    return {s.name: s.flags for s in screen_variables(X, names, policy)}


def check_named(screen, prefix):
    return next(c for c in screen.checks if c.name.startswith(prefix))


def ar1(rng: np.random.Generator, n: int, phi: float) -> np.ndarray:
    e = rng.standard_normal(n)
    x = np.empty(n)
    x[0] = e[0] / np.sqrt(1 - phi**2)
    for t in range(1, n):
        x[t] = phi * x[t - 1] + e[t]
    return x


# --------------------------------------------------------------------------- discrete and constant


def test_four_level_count_column_is_discrete():
    rng = np.random.default_rng(1)
    counts = np.minimum(rng.poisson(1.2, 1000), 3).astype(float)
    assert len(np.unique(counts)) == 4
    flags = flags_of(np.column_stack([counts, rng.normal(size=1000)]), ["count", "z"])
    assert "discrete" in flags["count"]
    assert flags["z"] == ()


def test_constant_column_does_not_break_other_screens():
    import statsmodels.api as sm
    from statsmodels.stats.outliers_influence import variance_inflation_factor

    rng = np.random.default_rng(2)
    a, b = rng.normal(size=300), rng.normal(size=300)
    X = np.column_stack([a, np.full(300, 4.2), b, a + 0.5 * b + 0.1 * rng.normal(size=300)])
    screens = screen_variables(X, ["a", "k", "b", "c"], POLICY)
    assert screens[1].flags == ("constant",)
    assert [c.name for c in screens[1].checks] == ["distinct values"]
    exog = sm.add_constant(X[:, [0, 2, 3]])
    for screen, k in zip((screens[0], screens[2], screens[3]), (1, 2, 3)):
        assert check_named(screen, "variance inflation").statistic == pytest.approx(
            variance_inflation_factor(exog, k), rel=1e-9)
    assert np.isnan(variance_inflation_factors(X)[1])
    assert "constant column" in collinearity_check(X, ["a", "k", "b", "c"], POLICY).note


# --------------------------------------------------------------------------- autocorrelation


def test_ar1_is_autocorrelated_and_shuffled_copy_is_not():
    rng = np.random.default_rng(3)
    x = ar1(rng, 1000, 0.8)
    shuffled = rng.permutation(x)
    flags = flags_of(np.column_stack([x, shuffled]), ["ar", "shuffled"])
    assert "autocorrelated" in flags["ar"]
    assert "autocorrelated" not in flags["shuffled"]


def test_ljung_box_matches_statsmodels():
    from statsmodels.stats.diagnostic import acorr_ljungbox

    x = ar1(np.random.default_rng(4), 500, 0.3)
    for lags in (1, 5, 10):
        mine = ljung_box_check(x, lags)
        table = acorr_ljungbox(x, lags=[lags])
        assert mine.statistic == pytest.approx(float(table["lb_stat"].iloc[0]), rel=1e-10)
        assert mine.p_value == pytest.approx(float(table["lb_pvalue"].iloc[0]), rel=1e-8, abs=1e-300)
    assert ljung_box_check(x[:2], 10) is None
    assert "fewer than" in ljung_box_check(x[:6], 10).note


def test_ljung_box_false_alarm_rate_on_iid_columns():
    # 400 iid normal columns (n = 1000) screened together.  The raw Ljung-Box
    # rejection rate at 5% lies in the binomial 99% interval; after Holm
    # across the 400 variables and the materiality rule nothing is flagged.
    rng = np.random.default_rng(5)
    replicates = 400
    X = rng.standard_normal((1000, replicates))
    screens = screen_variables(X, [f"x{j}" for j in range(replicates)], POLICY)
    raw = np.array([check_named(s, "ljung-box").p_value for s in screens])
    low, high = stats.binom.interval(0.99, replicates, 0.05)
    assert low <= np.sum(raw < 0.05) <= high
    assert not any("autocorrelated" in s.flags for s in screens)
    adjusted = [check_named(s, "ljung-box").p_adjusted for s in screens]
    from statsmodels.stats.multitest import multipletests

    np.testing.assert_allclose(adjusted, multipletests(raw, method="holm")[1])


def test_ljung_box_power_on_weak_ar1():
    # phi = 0.3, n = 1000: |r_1| ~ 0.3 >= 0.1 and the test rejects; 20 of 20.
    rng = np.random.default_rng(6)
    X = np.column_stack([ar1(rng, 1000, 0.3) for _ in range(20)])
    screens = screen_variables(X, [f"x{j}" for j in range(20)], POLICY)
    assert sum("autocorrelated" in s.flags for s in screens) == 20


def test_autocorrelation_needs_material_effect():
    # phi = 0.05 on 200000 rows: Ljung-Box rejects, but max |r_k| < 0.1.
    x = ar1(np.random.default_rng(7), 200_000, 0.05)
    screen = screen_variables(x[:, None], ["x"], POLICY)[0]
    lb = check_named(screen, "ljung-box")
    assert lb.p_value < 1e-10 and lb.effect < POLICY.autocorrelation_min_effect
    assert "autocorrelated" not in screen.flags


def test_rows_unordered_skips_autocorrelation():
    x = ar1(np.random.default_rng(8), 500, 0.9)
    screen = screen_variables(x[:, None], ["x"], replace(POLICY, rows_unordered=True))[0]
    assert "autocorrelated" not in screen.flags
    assert not any(c.name.startswith("ljung-box") for c in screen.checks)


# --------------------------------------------------------------------------- tails and outliers


def test_laplace_is_not_heavy_tailed_but_t2_is():
    rng = np.random.default_rng(9)
    laplace = rng.laplace(size=5000)
    t2 = rng.standard_t(2, size=5000)
    screens = screen_variables(np.column_stack([laplace, t2]), ["laplace", "t2"], POLICY)
    assert "heavy-tailed" not in screens[0].flags
    assert "heavy-tailed" in screens[1].flags
    for screen, column in zip(screens, (laplace, t2)):
        # scipy.stats.kurtosis: Fisher, biased (divisor n) by default.
        assert check_named(screen, "excess kurtosis").statistic == pytest.approx(stats.kurtosis(column), rel=1e-10)


def test_heavy_tail_rule_over_replicates():
    # Laplace (population excess kurtosis 3) is never flagged in 50 samples
    # of 5000; t(2) (infinite kurtosis) always is.
    rng = np.random.default_rng(10)
    X = np.column_stack([rng.laplace(size=(5000, 50)), rng.standard_t(2, size=(5000, 50))])
    screens = screen_variables(X, [f"c{j}" for j in range(100)], replace(POLICY, rows_unordered=True))
    assert not any("heavy-tailed" in s.flags for s in screens[:50])
    assert all("heavy-tailed" in s.flags for s in screens[50:])


def test_outliers_counted_with_robust_z():
    rng = np.random.default_rng(11)
    x = rng.standard_normal(2000)
    x[[5, 50, 500]] = [25.0, -30.0, 40.0]
    result = outlier_check(x, POLICY)
    assert result.statistic == 3 and result.effect == pytest.approx(3 / 2000)
    # scipy's scale="normal" divides the MAD by Phi^-1(3/4), i.e. multiplies by 1.4826.
    reference = np.abs(x - np.median(x)) / stats.median_abs_deviation(x, scale="normal")
    np.testing.assert_allclose(robust_z(x)[0], reference, rtol=1e-4)
    assert "outliers" in flags_of(x[:, None], ["x"])["x"]
    assert "outliers" not in flags_of(rng.standard_normal(2000)[:, None], ["x"])["x"]


def test_outlier_scale_falls_back_when_mad_is_zero():
    x = np.zeros(100)
    x[:10] = 1.0
    x[0] = 50.0
    z, scale = robust_z(x)
    assert "mean absolute deviation" in scale
    assert z[0] == pytest.approx(50.0 / (1.2533 * np.mean(np.abs(x))))
    assert outlier_check(x, POLICY).statistic == 1


# --------------------------------------------------------------------------- collinearity


def test_sum_with_tiny_noise_is_collinear():
    from statsmodels.stats.outliers_influence import variance_inflation_factor

    rng = np.random.default_rng(12)
    a, b, d = rng.normal(size=(3, 500))
    c = a + b + 1e-3 * rng.normal(size=500)
    X = np.column_stack([a, b, c, d])
    names = ["a", "b", "c", "d"]
    flags = flags_of(X, names)
    assert all("collinear" in flags[k] for k in "abc")
    assert "collinear" not in flags["d"]
    exog = np.column_stack([np.ones(500), X])
    np.testing.assert_allclose(variance_inflation_factors(X), [variance_inflation_factor(exog, k) for k in range(1, 5)],
                               rtol=1e-7)
    result = collinearity_check(X, names, POLICY)
    standardised = (X - X.mean(axis=0)) / np.sqrt(((X - X.mean(axis=0)) ** 2).sum(axis=0))
    assert result.statistic == pytest.approx(np.linalg.cond(standardised), rel=1e-6)
    assert result.statistic > POLICY.condition_number_max
    assert "a, b, c" in result.note and "d" not in result.note.split("among:")[1]


def test_exact_collinearity_gives_infinite_vif():
    rng = np.random.default_rng(13)
    a, b = rng.normal(size=(2, 100))
    X = np.column_stack([a, b, 2 * a - b, rng.normal(size=100)])
    vif = variance_inflation_factors(X)
    assert np.all(np.isinf(vif[:3])) and np.isfinite(vif[3])
    assert np.isinf(collinearity_check(X, list("abcd"), POLICY).statistic)


def test_independent_columns_are_not_collinear():
    X = np.random.default_rng(14).normal(size=(1000, 5))
    result = collinearity_check(X, list("abcde"), POLICY)
    assert result.statistic < 2
    assert not any("collinear" in f for f in flags_of(X, list("abcde")).values())


# --------------------------------------------------------------------------- contract


def test_flags_come_from_the_vocabulary_in_order():
    rng = np.random.default_rng(15)
    n = 1000
    X = np.column_stack([
        np.ones(n), np.minimum(rng.poisson(1.0, n), 3), rng.standard_t(1.5, n), ar1(rng, n, 0.9),
        rng.normal(size=n),
    ])
    X = np.column_stack([X, X[:, 4] + 1e-4 * rng.normal(size=n)])
    order = ["constant", "discrete", "heavy-tailed", "outliers", "autocorrelated", "collinear"]
    for screen in screen_variables(X, [f"c{j}" for j in range(X.shape[1])], POLICY):
        assert set(screen.flags) <= VOCABULARY
        assert list(screen.flags) == sorted(screen.flags, key=order.index)
        for check in screen.checks:
            assert check.passed is None


def test_names_must_match_columns():
    with pytest.raises(InputError):
        screen_variables(np.zeros((10, 2)), ["only one"], POLICY)
