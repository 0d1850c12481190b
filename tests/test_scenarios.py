"""The simulation generator behind the tests and the validity study (preflight/scenarios.py).

The wide noise families, the several-parents shape and the hidden cause of two variables without a
directed path between them exist so the validity study does not only confirm the generator the code
was tuned on; these tests pin down that each one is what its name says, and that the families and
shapes the rest of the suite relies on still draw exactly the same tables.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from preflight import scenarios
from preflight.scenarios import (
    SKEWED_FAMILIES,
    WIDE_NOISE_FAMILIES,
    WIDE_PER_VARIABLE,
    path_free_pairs,
    reachable,
    simulate,
)

# Values recorded from the generator before the wide families, the several-parents shape and the
# new kind were added: same seed, same draws.
EXISTING_NOISE = {
    "uniform": ([-0.944535724961362, -0.6347677313719688, 1.0301041610325012], -28.532080629189196),
    "laplace": ([-0.557326645177792, -0.32277229034964416, 0.6386616903517846], -13.344963919293992),
    "exponential": ([-0.815867432646225, -0.3549729306126542, 3.6902186924613414], -69.16165295527395),
    "student-t5": ([-0.812184162931668, -0.22128423460931448, -0.9265221599376423], -5.652295629854793),
    "gaussian": ([-1.4238250364546312, 1.2637284581291104, -0.8706617379590857], 8.258392084277878),
}
EXISTING_TABLES = [
    (("linear-non-gaussian", "random", 6, 300, "laplace", 11),
     [-32.10184899905197, 51.32216882086734, 21.746829197978457, -37.98319705665847, -4.433999274520543,
      -49.00465249637218], -15136.206559861754, ()),
    (("hidden-confounder", "chain", 5, 300, "exponential", 3),
     [43.90185833554605, -15.032518417215163, 8.51205814053219, -0.332225836645474, 21.35951226765981],
     8889.367188599412, ((1, 4),)),
    (("mixed", "collider", 5, 300, "student-t5", 5),
     [-21.412799975083583, -28.17687158236147, 24.499758459406507, -38.24978978981513, -19.017881496654624],
     -26672.91744568478, ()),
    (("linear-non-gaussian", "pair", 2, 300, "uniform", 2), [26.9764403809781, 33.849638497946906],
     26230.768412147092, ()),
]


def _is_acyclic(dag: np.ndarray) -> bool:
    # A directed graph on p nodes is acyclic exactly when its adjacency matrix is nilpotent.
    a = np.asarray(dag, dtype=np.int64)
    return not np.linalg.matrix_power(a, a.shape[0]).any()


@pytest.mark.parametrize("family", sorted(EXISTING_NOISE))
def test_existing_families_draw_what_they_drew_before(family):
    first, total = EXISTING_NOISE[family]
    draws = scenarios._noise(np.random.default_rng(12345), family, 1000)
    np.testing.assert_allclose(draws[:3], first, rtol=1e-12)
    assert draws.sum() == pytest.approx(total, rel=1e-9)


@pytest.mark.parametrize("args, first_row, total, hidden", EXISTING_TABLES, ids=lambda v: str(v)[:40])
def test_existing_kinds_and_shapes_give_the_same_tables(args, first_row, total, hidden):
    kind, shape, p, n, noise, seed = args
    scenario = simulate(kind, shape, p, n, noise, seed=seed)
    np.testing.assert_allclose(scenario.data[0], first_row, rtol=1e-10)
    assert scenario.data.sum() == pytest.approx(total, rel=1e-9)
    assert scenario.hidden == hidden


@pytest.mark.parametrize("family", WIDE_NOISE_FAMILIES)
def test_wide_family_is_centred_unit_variance_and_not_gaussian(family):
    large = scenarios._noise(np.random.default_rng(7), family, 200_000)
    # mean within about six standard errors of zero, variance within a few per cent of one
    assert abs(large.mean()) < 0.015, large.mean()
    assert large.var() == pytest.approx(1.0, abs=0.05)
    sample = scenarios._noise(np.random.default_rng(8), family, 5000)
    assert stats.normaltest(sample).pvalue < 1e-6


def test_wide_families_are_new_and_the_hidden_cause_families_are_skewed():
    assert not set(WIDE_NOISE_FAMILIES) & set(scenarios.NOISE_FAMILIES)
    for family in SKEWED_FAMILIES:
        draws = scenarios._noise(np.random.default_rng(3), family, 50_000)
        assert stats.skew(draws) > 0.5, family


def test_unknown_family_is_refused():
    with pytest.raises(ValueError, match="unknown noise family"):
        scenarios._noise(np.random.default_rng(0), "cauchy", 10)


def test_several_parents_dags_are_acyclic_with_one_to_four_parents_per_child():
    children_with_several = children = 0
    for seed in range(40):
        p = 5 + seed % 11
        scenario = simulate("linear-non-gaussian", "several-parents", p, 200, WIDE_PER_VARIABLE, seed=seed)
        dag = scenario.dag
        assert dag.shape == (p, p) and _is_acyclic(dag)
        parents = dag.sum(axis=0)
        assert ((parents[parents > 0] >= 1) & (parents[parents > 0] <= 4)).all()
        assert 1 <= int((parents == 0).sum()) <= 2  # one exogenous variable, two from 8 variables on
        children += int((parents > 0).sum())
        children_with_several += int((parents >= 2).sum())
        # every edge identifiable (linear non-Gaussian noise everywhere), and the noise drawn per variable
        assert np.array_equal(scenario.identifiable, dag.astype(bool))
        assert len(scenario.families) == p and set(scenario.families) <= set(WIDE_NOISE_FAMILIES)
    assert children_with_several / children > 0.6


def test_several_parents_weights_are_wide_and_sometimes_weak():
    rng = np.random.default_rng(0)
    weights = scenarios._wide_weights(rng, 60).ravel()
    magnitude = np.abs(weights)
    assert magnitude.min() >= 0.1 and magnitude.max() <= 1.5
    weak = (magnitude < 0.3).mean()
    assert 0.15 < weak < 0.25
    assert 0.4 < (weights > 0).mean() < 0.6


def test_several_parents_noise_family_varies_across_variables():
    scenario = simulate("linear-non-gaussian", "several-parents", 15, 100, WIDE_PER_VARIABLE, seed=4)
    assert len(set(scenario.families)) >= 3


def test_columns_are_shuffled_so_their_order_does_not_reveal_the_causal_order():
    not_topological = 0
    for seed in range(20):
        shuffled = simulate("linear-non-gaussian", "several-parents", 8, 100, WIDE_PER_VARIABLE, seed=seed)
        plain = simulate("linear-non-gaussian", "several-parents", 8, 100, WIDE_PER_VARIABLE, seed=seed,
                         shuffle_columns=False)
        # the same columns, reordered: the unshuffled DAG is upper triangular (generation order)
        assert not np.tril(plain.dag).any()
        matched = [next(c for c in range(8) if np.array_equal(shuffled.data[:, k], plain.data[:, c])) for k in range(8)]
        assert sorted(matched) == list(range(8))
        assert np.array_equal(shuffled.dag, plain.dag[np.ix_(matched, matched)])
        not_topological += bool(np.tril(shuffled.dag).any())
    assert not_topological >= 15


def test_same_seed_same_table_other_seed_other_table():
    for kind, shape, noise in (("linear-non-gaussian", "several-parents", WIDE_PER_VARIABLE),
                               ("hidden-cause-non-adjacent", "several-parents", WIDE_PER_VARIABLE),
                               ("hidden-cause-non-adjacent", "pair", "laplace")):
        a = simulate(kind, shape, 9, 300, noise, seed=21)
        b = simulate(kind, shape, 9, 300, noise, seed=21)
        c = simulate(kind, shape, 9, 300, noise, seed=22)
        assert np.array_equal(a.data, b.data) and np.array_equal(a.dag, b.dag)
        assert a.hidden == b.hidden and a.families == b.families and a.latent_noise == b.latent_noise
        assert not np.array_equal(a.data, c.data)


@pytest.mark.parametrize("shape", ["fork", "collider", "random", "several-parents"])
def test_hidden_pair_has_no_edge_and_no_directed_path(shape):
    for seed in range(12):
        scenario = simulate("hidden-cause-non-adjacent", shape, 5 + seed % 6, 300, "laplace", seed=seed)
        assert len(scenario.hidden) == 1
        i, j = scenario.hidden[0]
        linked = reachable(scenario.dag)
        assert not scenario.dag[i, j] and not scenario.dag[j, i]
        assert not linked[i, j] and not linked[j, i]
        assert scenario.expected_level == "latent-equivalence-class"
        assert scenario.latent_noise in SKEWED_FAMILIES
        assert _is_acyclic(scenario.dag)


def test_hidden_cause_is_what_links_the_pair():
    # On the pair shape the two variables have no edge; the hidden cause alone makes them dependent.
    scenario = simulate("hidden-cause-non-adjacent", "pair", 2, 20_000, "uniform", seed=5)
    assert not scenario.dag.any() and scenario.hidden == ((0, 1),)
    assert not scenario.identifiable.any()
    r = np.corrcoef(scenario.data.T)[0, 1]
    assert abs(r) > 0.25  # loadings of 0.8 to 1.5 on unit-variance noise: |r| at least 0.64 / 1.64 ~ 0.39
    # ...and without it (the independent kind) they are not
    plain = simulate("independent", "pair", 2, 20_000, "uniform", seed=5)
    assert abs(np.corrcoef(plain.data.T)[0, 1]) < 0.05


def test_reachability_and_path_free_pairs_on_small_graphs():
    chain = np.array([[0, 1, 0], [0, 0, 1], [0, 0, 0]])
    assert reachable(chain)[0, 2] and not reachable(chain)[2, 0]
    assert path_free_pairs(chain) == []
    fork = np.array([[0, 1, 1], [0, 0, 0], [0, 0, 0]])
    assert path_free_pairs(fork) == [(1, 2)]


def test_chain_cannot_carry_a_hidden_cause_of_non_adjacent_variables():
    assert not scenarios.shape_allows("hidden-cause-non-adjacent", "chain")
    assert scenarios.shape_allows("hidden-confounder", "chain")
    with pytest.raises(ValueError, match="no two variables|needs two variables"):
        simulate("hidden-cause-non-adjacent", "chain", 5, 100, "laplace", seed=0)
