"""Reference checks for the variable screen and the structural cross-checks.

Each test names its source: a dataset shipped with statsmodels or pingouin,
a published worked example, a general-purpose library run on the same
arrays, or a formula from the paper written out here.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from preflight.policy import Policy
from preflight.screen import collinearity_check, ljung_box_check, screen_variables, variance_inflation_factors
from preflight.structure import henze_zirkler


def test_sunspots_ljung_box_statsmodels_dataset():
    # Source: statsmodels.datasets.sunspots (yearly sunspot activity,
    # 1700-2008), checked against statsmodels.stats.diagnostic.acorr_ljungbox
    # and statsmodels.tsa.stattools.acf on the same array.
    import statsmodels.datasets
    from statsmodels.stats.diagnostic import acorr_ljungbox
    from statsmodels.tsa.stattools import acf

    x = statsmodels.datasets.sunspots.load_pandas().data["SUNACTIVITY"].to_numpy(dtype=float)
    policy = Policy()
    mine = ljung_box_check(x, policy.autocorrelation_lags)
    table = acorr_ljungbox(x, lags=[policy.autocorrelation_lags])
    assert mine.statistic == pytest.approx(float(table["lb_stat"].iloc[0]), rel=1e-10)
    assert mine.p_value == pytest.approx(float(table["lb_pvalue"].iloc[0]), rel=1e-6, abs=1e-300)
    assert mine.effect == pytest.approx(float(np.max(np.abs(acf(x, nlags=10, fft=False)[1:]))), rel=1e-10)
    screen = screen_variables(x[:, None], ["SUNACTIVITY"], policy)[0]
    assert "autocorrelated" in screen.flags


def test_longley_vif_statsmodels_dataset():
    # Source: statsmodels.datasets.longley (Longley 1967), VIFs checked
    # against statsmodels.stats.outliers_influence.variance_inflation_factor
    # on the design with a constant added.  Every regressor but ARMED has a
    # VIF above 10 (ARMED about 3.6), the textbook example of collinearity.
    import statsmodels.api as sm
    from statsmodels.stats.outliers_influence import variance_inflation_factor

    data = sm.datasets.longley.load_pandas()
    exog = data.exog.to_numpy(dtype=float)
    names = list(data.exog.columns)
    exog_const = sm.add_constant(exog)
    expected = [variance_inflation_factor(exog_const, k) for k in range(1, exog_const.shape[1])]
    np.testing.assert_allclose(variance_inflation_factors(exog), expected, rtol=1e-8)
    policy = Policy()
    flags = {s.name: s.flags for s in screen_variables(exog, names, replace_unordered(policy))}
    for name, vif in zip(names, expected):
        assert ("collinear" in flags[name]) == (vif > policy.vif_max)
    assert "collinear" not in flags["ARMED"]
    assert sum("collinear" in f for f in flags.values()) == 5
    condition = collinearity_check(exog, names, policy)
    centred = exog - exog.mean(axis=0)
    assert condition.statistic == pytest.approx(np.linalg.cond(centred / np.linalg.norm(centred, axis=0)), rel=1e-8)
    assert condition.statistic > policy.condition_number_max


def replace_unordered(policy: Policy) -> Policy:
    from dataclasses import replace

    # Longley is a 16-year series; the collinearity check is the point here.
    return replace(policy, rows_unordered=True)


def _henze_zirkler_1990_statistic(X: np.ndarray) -> float:
    """Henze & Zirkler (1990), Commun. Statist. Theory Meth. 19(10), the statistic written out:

    HZ = 1/n sum_jk exp(-b^2/2 D_jk) - 2 (1 + b^2)^(-p/2) sum_j exp(-b^2 / (2 (1 + b^2)) D_j)
         + n (1 + 2 b^2)^(-p/2),
    b = ((2p + 1)/4)^(1/(p+4)) n^(1/(p+4)) / sqrt 2, D Mahalanobis distances
    under the covariance with divisor n.
    """
    n, p = X.shape
    centred = X - X.mean(axis=0)
    S_inv = np.linalg.inv(centred.T @ centred / n)
    D_j = np.einsum("ij,jk,ik->i", centred, S_inv, centred)
    diff = centred[:, None, :] - centred[None, :, :]
    D_jk = np.einsum("abi,ij,abj->ab", diff, S_inv, diff)
    b = ((2 * p + 1) / 4) ** (1 / (p + 4)) * n ** (1 / (p + 4)) / math.sqrt(2)
    return float(np.exp(-b * b / 2 * D_jk).sum() / n
                 - 2 * (1 + b * b) ** (-p / 2) * np.exp(-b * b / (2 * (1 + b * b)) * D_j).sum()
                 + n * (1 + 2 * b * b) ** (-p / 2))


def test_henze_zirkler_pingouin_worked_example():
    # Source: the worked example of pingouin.multivariate_normality's
    # documentation, on pingouin's shipped "multivariate" dataset (Fever,
    # Pressure, Aches): HZ = 0.540, p = 0.717.  The statistic is also checked
    # against the formula of Henze & Zirkler (1990) written out above.
    import pingouin

    data = pingouin.read_dataset("multivariate")[["Fever", "Pressure", "Aches"]].to_numpy(dtype=float)
    result = henze_zirkler(data)
    assert round(result.statistic, 3) == 0.540
    assert round(result.p_value, 3) == 0.717
    assert result.statistic == pytest.approx(_henze_zirkler_1990_statistic(data), rel=1e-10)


def test_henze_zirkler_null_rate_matches_nominal():
    # Source: seeded simulation; multivariate normal samples (n = 100, p = 3),
    # 300 replicates: the 5% rejection rate lies in the binomial 99% interval.
    from scipy import stats

    rng = np.random.default_rng(20)
    rejections = sum(henze_zirkler(rng.normal(size=(100, 3))).p_value < 0.05 for _ in range(300))
    low, high = stats.binom.interval(0.99, 300, 0.05)
    assert low <= rejections <= high
