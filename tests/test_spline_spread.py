"""Spread of the spline residual: how `heteroscedastic` is judged where the mechanism is nonlinear.

References: statsmodels ``het_breuschpagan(robust=True)`` and ``het_white``
on the same residual; seeded simulation (false alarms within the binomial
99 % interval of alpha; power under a changing spread).
"""

import numpy as np
import pytest
from scipy import stats

from preflight.battery import _spline_variance_checks
from preflight.checks.linearity import full_rank_columns
from preflight.fit import bspline_basis, ols, spline_df
from preflight.policy import Policy
from preflight.results import SPLINE_RESIDUAL

from conftest import judged_pair, pool_map


def _tanh_pair(seed: int, spread: str):
    rng = np.random.default_rng(seed)
    n = 1000
    x = rng.uniform(-np.sqrt(3), np.sqrt(3), n)
    scale = 0.3 if spread == "constant" else 0.1 + 0.3 * np.abs(x)
    return x, np.tanh(2 * x) + scale * rng.normal(size=n)


def _flags(args):
    seed, spread = args
    return judged_pair(*_tanh_pair(seed, spread)).flags


_pool_map = pool_map


def test_spline_residual_checks_match_statsmodels():
    # Source: statsmodels.stats.diagnostic.het_breuschpagan (robust=True is
    # Koenker's studentized form) and het_white, on the residual of the same
    # spline fit, with the regressor (and a constant) as the auxiliary design.
    from statsmodels.stats.diagnostic import het_breuschpagan, het_white

    x, y = _tanh_pair(5, "changing")
    policy = Policy()
    bp, white = _spline_variance_checks(x, y, ("y", "x"), "forward", policy)
    basis = bspline_basis(x, spline_df(x.shape[0], policy.spline_max_df))
    residual = ols(full_rank_columns(basis[:, 1:]), y).residuals
    design = np.column_stack([np.ones_like(x), x])
    lm, p, _, _ = het_breuschpagan(residual, design, robust=True)
    assert bp.result.statistic == pytest.approx(lm, rel=1e-9)
    assert bp.result.p_value == pytest.approx(p, rel=1e-7, abs=1e-300)
    lm_w, p_w, _, _ = het_white(residual, design)
    assert white.result.statistic == pytest.approx(lm_w, rel=1e-9)
    assert white.result.p_value == pytest.approx(p_w, rel=1e-7, abs=1e-300)
    for t, test in ((bp, "breusch-pagan"), (white, "white")):
        identity = t.result.identity
        assert identity is not None and t.family == identity.family == "variance"
        assert (identity.test, identity.variant, identity.direction, identity.variables) == (
            test, SPLINE_RESIDUAL, ("y", "x"), ("x", "y"))
        assert t.result.name == f"{test} of spline residual (y on x)"


def test_homoscedastic_tanh_pair_rarely_raises_heteroscedastic():
    # The flag needs a Holm-adjusted rejection in the favoured direction, so
    # its rate is at most alpha; the count must stay inside the binomial 99 %
    # interval of alpha over the replicates.
    replicates = 100
    results = _pool_map(_flags, [(4000 + k, "constant") for k in range(replicates)])
    alarms = sum("heteroscedastic" in flags for flags in results)
    assert sum("nonlinear" in flags for flags in results) >= 0.90 * replicates  # the regime under test
    assert alarms <= stats.binom.ppf(0.995, replicates, Policy().alpha), (alarms, results)


def test_tanh_pair_with_changing_spread_raises_heteroscedastic():
    replicates = 40
    results = _pool_map(_flags, [(5000 + k, "changing") for k in range(replicates)])
    assert sum("nonlinear" in flags and "heteroscedastic" in flags for flags in results) >= 0.90 * replicates, results


def _hidden_cause_pair(seed: int, n: int = 2000):
    """Two variables linked only by a skewed hidden cause, each with its own Gaussian noise."""
    from preflight.scenarios import SKEWED_FAMILIES, _noise

    rng = np.random.default_rng(seed)
    hidden = _noise(rng, SKEWED_FAMILIES[seed % len(SKEWED_FAMILIES)], n)
    a, b = rng.uniform(0.8, 1.5, 2) * rng.choice([-1.0, 1.0], 2)
    return a * hidden + rng.standard_normal(n), b * hidden + rng.standard_normal(n)


@pytest.mark.parametrize("seed, spline_direction", [(2, "x on y"), (17, "y on x")])
def test_a_spline_residual_whose_spread_changes_does_not_orient_a_hidden_cause_pair(seed, spline_direction):
    # Ground truth: neither variable causes the other, so any orientation is
    # wrong.  In these draws the spline residual of one direction passes HSIC
    # but its spread changes materially (the hidden cause's conditional spread
    # given the regressor); counted as dependence, it leaves no additive-noise
    # model in either direction, which is the confounding signal.
    policy = Policy()
    findings = judged_pair(*_hidden_cause_pair(seed))
    spread = [r for r in findings.checks
              if r.identity is not None and r.identity.variant == SPLINE_RESIDUAL
              and r.identity.family == "variance" and r.name.endswith(f"({spline_direction})")]
    hsic = [r for r in findings.checks if r.name == f"hsic of spline residual ({spline_direction})"]
    assert hsic and all(r.p_adjusted >= policy.alpha for r in hsic), hsic
    assert any(r.p_adjusted < policy.alpha and r.effect >= policy.confounding_spread_min_r2 for r in spread), spread
    assert findings.anm_orientation == "undetermined"
    assert "confounding-suspected" in findings.flags


@pytest.mark.parametrize("seed", [7001, 7022, 7023, 7038])
def test_a_curve_with_constant_spread_keeps_its_additive_noise_orientation(seed):
    rng = np.random.default_rng(seed)
    x = rng.uniform(-np.sqrt(3), np.sqrt(3), 1000)
    findings = judged_pair(x, np.tanh(2 * x) + 0.3 * rng.normal(size=1000))
    assert findings.anm_orientation == "x->y"
    assert "confounding-suspected" not in findings.flags
