"""Separation given a spline: a chain through a curve is separated, a collider is not, the kiln tells the truth."""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

import preflight
from preflight.battery import SEPARATION_FAMILY, separation_given_spline
from preflight.demo import HIDDEN_COMMON_CAUSES, TRUE_EDGES, kiln_data
from preflight.policy import Policy
from preflight.results import GIVEN_A_SPLINE

POLICY = Policy()


def _chain(rng, n):
    """a -> k -> b, with k -> b a saturating curve: a and b are independent given k, not given k linearly."""
    a = rng.uniform(-np.sqrt(3), np.sqrt(3), n)
    k = 1.5 * a + rng.laplace(size=n)
    b = np.tanh(1.5 * k) + 0.3 * rng.normal(size=n)
    return a, k, b


def _p_values(tagged):
    return {t.result.identity.test: t.result.p_value for t in tagged}


def test_a_chain_through_a_curve_is_separated_and_a_linear_partial_correlation_is_not():
    from preflight.checks.association import pearson_fisher_z
    from preflight.fit import residualize

    a, k, b = _chain(np.random.default_rng(1), 2000)
    linear = pearson_fisher_z(residualize(a, k[:, None]), residualize(b, k[:, None]), n_conditioning=1)
    assert linear.p_value < 1e-6  # why the skeleton keeps the edge
    tagged = separation_given_spline(a, b, "a", "b", k, "k", None, POLICY, seed=1)
    assert {t.family for t in tagged} == {SEPARATION_FAMILY}
    assert [t.result.identity.variant for t in tagged] == [GIVEN_A_SPLINE] * 3
    assert [t.result.name for t in tagged] == [f"{test} (a, b) given a spline of k" for test in
                                               ("pearson", "spearman", "hsic")]
    assert min(_p_values(tagged).values()) > 0.01


def test_a_collider_is_not_separated_by_its_common_child():
    rng = np.random.default_rng(2)
    a, b = rng.uniform(-1, 1, 2000), rng.exponential(size=2000)
    k = np.tanh(2 * a) + b + 0.2 * rng.normal(size=2000)
    assert max(_p_values(separation_given_spline(a, b, "a", "b", k, "k", None, POLICY, seed=2)).values()) < 1e-6


def test_pearson_given_a_spline_rejects_at_the_nominal_rate_when_the_ends_are_independent_given_the_neighbour():
    # False alarm of the Fisher-z test on the spline residuals, 400 chains of 500 rows (binomial 99 % interval
    # for 5 %: scipy.stats.binom.interval).
    rng = np.random.default_rng(3)
    rejected = 0
    for _ in range(400):
        a, k, b = _chain(rng, 500)
        tagged = separation_given_spline(a, b, "a", "b", k, "k", None, POLICY, seed=0)
        rejected += _p_values(tagged)["pearson"] < 0.05
    low, high = stats.binom.interval(0.99, 400, 0.05)
    assert low <= rejected <= high, rejected


def test_the_kiln_report_matches_its_documented_structure_edge_by_edge():
    data = kiln_data()
    report = preflight.check(pd.DataFrame(data), seed=7, jobs=1, keep_samples=False)
    hidden = {frozenset(pair) for _, pair in HIDDEN_COMMON_CAUSES}
    truth = {frozenset(edge) for edge in TRUE_EDGES}
    adjacent = {frozenset((p["x"], p["y"])): p for p in report.data["pairs"] if p["adjacent"]}
    assert set(adjacent) == truth | hidden
    for cause, effect in TRUE_EDGES:
        pair = adjacent[frozenset((cause, effect))]
        if pair["orientation"] != "undetermined":
            assert pair["orientation"] == ("x->y" if pair["x"] == cause else "y->x"), pair
    for key in hidden:
        assert adjacent[key]["orientation"] == "undetermined"
        assert "confounding-suspected" in adjacent[key]["flags"]
    apart = [p for p in report.data["pairs"] if {p["x"], p["y"]} == {"flame_temp", "glaze_gloss"}][0]
    assert not apart["adjacent"] and apart["flags"] == ["no-association"]
    assert any(c["name"].endswith("given a spline of wall_temp") and c["passed"] is False for c in apart["checks"])
