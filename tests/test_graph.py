"""Tests of preflight.graph: Meek rules, v-structures, CPDAGs by exhaustive
enumeration, PC-stable by seeded simulation and population oracles, and the
graph-file reader."""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from scipy import stats

from preflight.errors import InputError
from preflight.graph import (
    Skeleton,
    apply_meek_rules,
    correlation_matrix,
    cpdag_from_skeleton,
    dag_to_cpdag,
    edge_status,
    find_cycle,
    is_acyclic,
    orient_v_structures,
    partial_correlation,
    partial_correlation_test,
    pc_stable_skeleton,
    pc_stable_skeleton_from_correlation,
    topological_order,
    v_structure_conflicts,
    v_structures,
)
from preflight.io import read_graph_file

# ---------------------------------------------------------------------------
# helpers


def pdag(p, directed=(), undirected=()):
    G = np.zeros((p, p), dtype=np.int8)
    for i, j in directed:
        G[i, j] = 1
    for i, j in undirected:
        G[i, j] = G[j, i] = 1
    return G


def all_dags(p):
    """Every labelled DAG on p nodes, without duplicates: each of the 3^(p choose 2)
    ways to give each pair no edge or one direction, kept when the adjacency
    matrix is nilpotent (A^p = 0 exactly when no directed cycle exists)."""
    pairs = list(itertools.combinations(range(p), 2))
    if not pairs:
        return np.zeros((1, p, p), dtype=np.int8)
    codes = np.array(list(itertools.product(range(3), repeat=len(pairs))), dtype=np.int8)
    A = np.zeros((codes.shape[0], p, p), dtype=np.int64)
    for e, (i, j) in enumerate(pairs):
        A[:, i, j] = codes[:, e] == 1
        A[:, j, i] = codes[:, e] == 2
    walks = A.copy()
    for _ in range(p - 1):
        walks = np.minimum(walks @ A, 1)
    return A[walks.sum(axis=(1, 2)) == 0].astype(np.int8)


def robinson_dag_count(p):
    """Labelled DAGs on p nodes by Robinson's (1973) recurrence
    a(n) = sum_k (-1)^(k+1) C(n, k) 2^(k(n-k)) a(n-k), a(0) = 1."""
    a = [1]
    for n in range(1, p + 1):
        a.append(sum((-1) ** (k + 1) * math.comb(n, k) * 2 ** (k * (n - k)) * a[n - k] for k in range(1, n + 1)))
    return a[p]


def direct_v_structures(dag):
    """Verma and Pearl's (1990) definition written out: i -> k <- j, i < j, i and j not adjacent."""
    p = dag.shape[0]
    out = set()
    for k in range(p):
        parents = [i for i in range(p) if dag[i, k] and not dag[k, i]]
        for i, j in itertools.combinations(parents, 2):
            if not (dag[i, j] or dag[j, i]):
                out.add((i, k, j))
    return out


def skeleton_of(G):
    return (G | G.T).astype(bool)


def random_dag(rng, p, edge_prob):
    order = rng.permutation(p)
    upper = np.triu(rng.random((p, p)) < edge_prob, 1)
    dag = np.zeros((p, p), dtype=np.int8)
    dag[np.ix_(order, order)] = upper
    return dag


def random_weights(rng, dag):
    signs = rng.choice([-1.0, 1.0], size=dag.shape)
    return dag * signs * rng.uniform(0.5, 1.2, size=dag.shape)


def sem_covariance(B):
    """Covariance of x = B^T x + e with unit noise: (I - B)^-T (I - B)^-1."""
    inv = np.linalg.inv(np.eye(B.shape[0]) - B)
    return inv.T @ inv


def simulate_sem(B, n, rng):
    """Rows of x_j = sum_i B[i, j] x_i + e_j, standard normal noise."""
    E = rng.standard_normal((n, B.shape[0]))
    return E @ np.linalg.inv(np.eye(B.shape[0]) - B)


def oracle_separating_sets(dag):
    """For non-adjacent i, j with j later in a topological order, pa(j) separates them
    (local Markov property: j is independent of its non-descendants given its parents)."""
    position = {k: r for r, k in enumerate(topological_order(dag))}
    sepsets = {}
    for i, j in itertools.combinations(range(dag.shape[0]), 2):
        if dag[i, j] or dag[j, i]:
            continue
        later = j if position[j] > position[i] else i
        sepsets[(i, j)] = tuple(int(k) for k in np.flatnonzero(dag[:, later]))
    return sepsets


# ---------------------------------------------------------------------------
# Meek rules, each on a textbook graph where only that rule fires (Meek 1995, figure 1)

A, B, C, D = 0, 1, 2, 3
MEEK_CASES = {
    # R1: a -> b - c, a and c not adjacent: b -> c.
    1: (pdag(3, directed=[(A, B)], undirected=[(B, C)]), (B, C)),
    # R2: a -> b -> c with a - c: a -> c.
    2: (pdag(3, directed=[(A, B), (B, C)], undirected=[(A, C)]), (A, C)),
    # R3: a - c -> b, a - d -> b, c and d not adjacent, a - b: a -> b.
    3: (pdag(4, directed=[(C, B), (D, B)], undirected=[(A, B), (A, C), (A, D)]), (A, B)),
    # R4: a - d -> c -> b, a - c, b and d not adjacent, a - b: a -> b.
    4: (pdag(4, directed=[(D, C), (C, B)], undirected=[(A, B), (A, C), (A, D)]), (A, B)),
}


@pytest.mark.parametrize("rule", [1, 2, 3, 4])
def test_each_meek_rule_fires_alone_on_its_textbook_graph(rule):
    G, (tail, head) = MEEK_CASES[rule]
    expected = G.copy()
    expected[head, tail] = 0
    others = [r for r in (1, 2, 3, 4) if r != rule]
    assert np.array_equal(apply_meek_rules(G, rules=others), G), "another rule fired"
    assert np.array_equal(apply_meek_rules(G, rules=[rule]), expected)
    assert np.array_equal(apply_meek_rules(G), expected)
    assert np.array_equal(G, MEEK_CASES[rule][0]), "the input was modified"


def test_meek_rules_never_reorient_and_reject_bad_input():
    G = pdag(3, directed=[(A, B), (C, B)])
    assert np.array_equal(apply_meek_rules(G), G)
    with pytest.raises(InputError, match="numbered 1 to 4"):
        apply_meek_rules(G, rules=[5])
    with pytest.raises(InputError, match="self-loop"):
        apply_meek_rules(np.eye(3, dtype=np.int8))
    with pytest.raises(InputError, match="only 0 and 1"):
        apply_meek_rules(np.full((2, 2), 2))


# ---------------------------------------------------------------------------
# v-structures


def test_collider_is_detected_and_kept_but_chain_and_fork_are_not():
    collider = pdag(3, directed=[(A, C), (B, C)])
    chain = pdag(3, directed=[(A, B), (B, C)])
    fork = pdag(3, directed=[(B, A), (B, C)])
    assert v_structures(collider) == {(A, C, B)}
    assert v_structures(chain) == set() and v_structures(fork) == set()
    assert np.array_equal(dag_to_cpdag(collider), collider)
    undirected_path = pdag(3, undirected=[(A, B), (B, C)])
    assert np.array_equal(dag_to_cpdag(chain), undirected_path)
    assert np.array_equal(dag_to_cpdag(fork), undirected_path)

    skeleton = skeleton_of(undirected_path)
    assert np.array_equal(orient_v_structures(skeleton, {(A, C): ()}), pdag(3, directed=[(A, B), (C, B)]))
    assert np.array_equal(orient_v_structures(skeleton, {(A, C): (B,)}), undirected_path)
    # Keys in either order are accepted.
    assert np.array_equal(orient_v_structures(skeleton, {(C, A): (B,)}), undirected_path)
    with pytest.raises(InputError, match=r"no separating set for the non-adjacent pair \(0, 2\)"):
        orient_v_structures(skeleton, {})


def test_conflicting_colliders_leave_the_edge_and_both_colliders_undirected_in_any_labelling():
    # Path 0 - 1 - 2 - 3 with empty separating sets asks for 0 -> 1 <- 2 and 1 -> 2 <- 3.
    path = skeleton_of(pdag(4, undirected=[(0, 1), (1, 2), (2, 3)]))
    sepsets = {(0, 2): (), (1, 3): (), (0, 3): ()}
    assert v_structure_conflicts(path, sepsets) == {(1, 2)}
    G = orient_v_structures(path, sepsets)
    assert np.array_equal(G, path.astype(np.int8))
    # A collider elsewhere is still oriented: add 4 with 3 -> 4 <- 5.
    wider = np.zeros((6, 6), dtype=bool)
    wider[:4, :4] = path
    wider[3, 4] = wider[4, 3] = wider[5, 4] = wider[4, 5] = True
    more = {(i, j): () for i, j in itertools.combinations(range(6), 2) if not wider[i, j]}
    more[(3, 5)] = ()
    more[(2, 4)] = (3,)
    G = orient_v_structures(wider, more)
    assert G[3, 4] == 1 and G[4, 3] == 0 and G[5, 4] == 1 and G[4, 5] == 0
    assert G[1, 2] == 1 and G[2, 1] == 1
    # Relabelling the nodes relabels the result (the rule does not depend on index order).
    perm = np.array([4, 2, 5, 0, 1, 3])
    relabel = {(int(perm[i]), int(perm[j])): tuple(int(perm[k]) for k in s) for (i, j), s in more.items()}
    W = np.zeros_like(wider)
    W[np.ix_(perm, perm)] = wider
    G2 = orient_v_structures(W, relabel)
    assert np.array_equal(G2[np.ix_(perm, perm)], G)


# ---------------------------------------------------------------------------
# exhaustive enumeration

# Labelled DAGs on 1..5 nodes: 1, 3, 25, 543, 29281 (OEIS A003024; Robinson 1973).
PUBLISHED_DAG_COUNTS = {1: 1, 2: 3, 3: 25, 4: 543, 5: 29281}
# Markov equivalence classes (essential graphs) of labelled DAGs on 1..5 nodes:
# 1, 2, 11, 185, 8782 (OEIS A007984; Gillispie and Perlman 2001, checked on the OEIS page).
PUBLISHED_CLASS_COUNTS = {1: 1, 2: 2, 3: 11, 4: 185, 5: 8782}


@pytest.mark.parametrize("p", [1, 2, 3, 4])
def test_dag_enumeration_matches_published_counts_and_robinson_recurrence(p):
    dags = all_dags(p)
    assert dags.shape[0] == PUBLISHED_DAG_COUNTS[p] == robinson_dag_count(p)
    assert len({d.tobytes() for d in dags}) == dags.shape[0]


@pytest.mark.parametrize("p", [3, 4, 5])
def test_cpdag_of_every_dag_is_the_essential_graph_of_its_class(p):
    dags = all_dags(p)
    assert dags.shape[0] == PUBLISHED_DAG_COUNTS[p] == robinson_dag_count(p)
    classes: dict[tuple, dict] = {}
    for dag in dags:
        cpdag = dag_to_cpdag(dag)
        own = frozenset(direct_v_structures(dag))
        key = (skeleton_of(dag).tobytes(), own)  # Markov equivalence: Verma and Pearl (1990)
        entry = classes.get(key)
        if entry is None:
            classes[key] = {"cpdag": cpdag, "union": dag.copy(), "member": dag, "v": own}
        else:
            assert np.array_equal(entry["cpdag"], cpdag), "two Markov-equivalent DAGs gave different CPDAGs"
            entry["union"] |= dag
    assert len(classes) == PUBLISHED_CLASS_COUNTS[p]
    assert len({e["cpdag"].tobytes() for e in classes.values()}) == len(classes)
    for entry in classes.values():
        cpdag = entry["cpdag"]
        # Essential graph by definition: i -> j where every member has i -> j, i - j where members differ
        # (Andersson, Madigan and Perlman 1997); the union of the members' matrices is that encoding.
        # It implies the same skeleton, and every directed CPDAG edge oriented as in each member.
        assert np.array_equal(cpdag, entry["union"])
        assert v_structures(entry["member"]) == entry["v"] == v_structures(cpdag)


def test_cpdag_from_oracle_separating_sets_equals_dag_to_cpdag():
    rng = np.random.default_rng(11)
    dags = list(all_dags(4))
    five = all_dags(5)
    dags += list(five[rng.choice(five.shape[0], size=1500, replace=False)])
    for dag in dags:
        sepsets = oracle_separating_sets(dag)
        assert np.array_equal(cpdag_from_skeleton(skeleton_of(dag), sepsets), dag_to_cpdag(dag))
        assert v_structure_conflicts(skeleton_of(dag), sepsets) == set()


# ---------------------------------------------------------------------------
# small graph utilities


def test_edge_status_acyclicity_and_topological_order():
    G = pdag(4, directed=[(0, 1), (3, 2)], undirected=[(1, 2)])
    assert edge_status(G) == {(0, 1): "i->j", (1, 2): "undirected", (2, 3): "j->i"}
    dag = pdag(5, directed=[(3, 1), (1, 0), (4, 0), (2, 4)])
    order = topological_order(dag)
    assert sorted(order) == list(range(5))
    position = {k: r for r, k in enumerate(order)}
    assert all(position[i] < position[j] for i, j in np.argwhere(dag))
    assert order == [2, 3, 1, 4, 0]  # smallest index first among the ready nodes
    assert is_acyclic(dag) and find_cycle(dag) is None
    cyclic = pdag(4, directed=[(0, 1), (1, 2), (2, 3), (3, 1)])
    assert not is_acyclic(cyclic)
    assert find_cycle(cyclic) == [1, 2, 3]
    with pytest.raises(InputError, match=r"cycle: 1 -> 2 -> 3 -> 1"):
        topological_order(cyclic)
    with pytest.raises(InputError, match="cycle"):
        dag_to_cpdag(cyclic)
    with pytest.raises(InputError, match="undirected edge"):
        dag_to_cpdag(pdag(2, undirected=[(0, 1)]))


# ---------------------------------------------------------------------------
# Fisher z test


def residual_partial_correlation(X, i, j, cond):
    """Correlation of the least-squares residuals of columns i and j on [1, X_cond]."""
    Z = np.column_stack([np.ones(X.shape[0]), X[:, list(cond)]])
    ri = X[:, i] - Z @ np.linalg.lstsq(Z, X[:, i], rcond=None)[0]
    rj = X[:, j] - Z @ np.linalg.lstsq(Z, X[:, j], rcond=None)[0]
    return float(ri @ rj / np.sqrt((ri @ ri) * (rj @ rj)))


def test_fisher_z_matches_residual_formula():
    rng = np.random.default_rng(3)
    B = random_weights(rng, pdag(5, directed=[(0, 1), (1, 2), (0, 3), (3, 2), (2, 4)]))
    X = simulate_sem(B, 400, rng) * np.array([1.0, 3.0, 0.2, 7.0, 1.5])
    cov = np.cov(X, rowvar=False)
    corr = np.corrcoef(X, rowvar=False)
    for i, j, cond in [(0, 2, ()), (0, 2, (1,)), (0, 2, (1, 3)), (1, 3, (0,)), (4, 0, (2, 3, 1))]:
        r = residual_partial_correlation(X, i, j, cond)
        z = math.sqrt(400 - len(cond) - 3) * math.atanh(r)
        p = 2 * stats.norm.sf(abs(z))
        for matrix in (cov, corr):
            stat, pv = partial_correlation_test(matrix, 400, i, j, cond)
            assert stat == pytest.approx(z, rel=1e-9, abs=1e-12)
            assert pv == pytest.approx(p, rel=1e-8, abs=1e-15)
            assert partial_correlation(matrix, i, j, cond) == pytest.approx(r, rel=1e-9, abs=1e-12)


def test_fisher_z_size_under_the_null_and_power_under_an_alternative():
    rng = np.random.default_rng(2024)
    reps, n, alpha = 2000, 200, 0.05
    S = rng.standard_normal((reps, n, 2))
    noise = rng.standard_normal((reps, n, 2))
    xi = S @ np.array([0.8, -0.5]) + noise[:, :, 0]
    xj = S @ np.array([-0.3, 0.9]) + noise[:, :, 1]
    null_p, alt_p = [], []
    for k in range(reps):
        X0 = np.column_stack([xi[k], xj[k], S[k]])
        null_p.append(partial_correlation_test(np.corrcoef(X0, rowvar=False), n, 0, 1, (2, 3)).p_value)
        # Alternative: partial correlation about 0.2 given S.
        X1 = np.column_stack([xi[k], xj[k] + 0.2 * noise[k, :, 0], S[k]])
        alt_p.append(partial_correlation_test(np.corrcoef(X1, rowvar=False), n, 0, 1, (2, 3)).p_value)
    rejections = int(np.sum(np.array(null_p) < alpha))
    low, high = stats.binom.interval(0.99, reps, alpha)
    assert low <= rejections <= high
    assert np.mean(np.array(alt_p) < alpha) > 0.75  # Fisher z power at rho = 0.2, n = 200 is about 0.81


def test_fisher_z_input_errors():
    corr = np.eye(3)
    with pytest.raises(InputError, match="n - \\|cond\\| - 3 >= 1"):
        partial_correlation_test(corr, 4, 0, 1, (2,))
    with pytest.raises(InputError, match="must differ"):
        partial_correlation_test(corr, 50, 1, 1)
    with pytest.raises(InputError, match="must not contain i or j"):
        partial_correlation_test(corr, 50, 0, 1, (1,))
    with pytest.raises(InputError, match="out of range"):
        partial_correlation_test(corr, 50, 0, 3)
    with pytest.raises(InputError, match="symmetric"):
        partial_correlation_test(np.array([[1, 0.5, 0], [0.1, 1, 0], [0, 0, 1]]), 50, 0, 1)


# ---------------------------------------------------------------------------
# PC-stable skeleton


CHAIN = pdag(4, directed=[(0, 1), (1, 2), (2, 3)])
COLLIDER = pdag(4, directed=[(0, 2), (1, 2), (2, 3)])


def _cpdag_of(skeleton: Skeleton):
    return cpdag_from_skeleton(skeleton.adjacency, skeleton.separating_sets)


@pytest.mark.parametrize("truth", [CHAIN, COLLIDER], ids=["chain", "collider"])
def test_pc_stable_recovers_simulated_graph_and_ignores_column_order(truth):
    rng = np.random.default_rng(20261202)
    B = truth * 0.8
    expected = dag_to_cpdag(truth)
    hits = 0
    for _ in range(50):
        X = simulate_sem(B, 2000, rng)
        # alpha = 0.01: each of the three absent edges survives with probability about alpha.
        skeleton = pc_stable_skeleton(X, alpha=0.01)
        cpdag = _cpdag_of(skeleton)
        hits += np.array_equal(skeleton.adjacency, skeleton_of(truth)) and np.array_equal(cpdag, expected)
        perm = rng.permutation(4)
        permuted = pc_stable_skeleton(X[:, perm], alpha=0.01)
        back = np.zeros_like(permuted.adjacency)
        back[np.ix_(perm, perm)] = permuted.adjacency
        assert np.array_equal(back, skeleton.adjacency)
        cp_back = np.zeros_like(cpdag)
        cp_back[np.ix_(perm, perm)] = _cpdag_of(permuted)
        assert np.array_equal(cp_back, cpdag)
    assert hits >= 45


def test_pc_stable_skeleton_is_order_independent_even_when_it_errs():
    # Small n and a dense graph make test errors likely; the frozen adjacency sets keep the
    # skeleton the same under any column order anyway (Colombo and Maathuis 2014, theorem 5).
    rng = np.random.default_rng(8)
    for _ in range(10):
        dag = random_dag(rng, 8, 0.45)
        X = simulate_sem(random_weights(rng, dag) * 0.6, 120, rng)
        skeleton = pc_stable_skeleton(X, alpha=0.1)
        for _ in range(4):
            perm = rng.permutation(8)
            permuted = pc_stable_skeleton(X[:, perm], alpha=0.1)
            back = np.zeros_like(permuted.adjacency)
            back[np.ix_(perm, perm)] = permuted.adjacency
            assert np.array_equal(back, skeleton.adjacency)
            assert permuted.n_tests > 0


def test_pc_stable_with_population_correlations_finds_the_exact_cpdag():
    # A correlation matrix computed from the model itself and a huge nominal n is an
    # (almost) perfect independence oracle: PC is then correct (Spirtes et al. 2000).
    rng = np.random.default_rng(17)
    for _ in range(60):
        p = int(rng.integers(3, 9))
        dag = random_dag(rng, p, 0.4)
        cov = sem_covariance(random_weights(rng, dag))
        skeleton = pc_stable_skeleton_from_correlation(cov, n=10**10, alpha=0.01)
        assert np.array_equal(skeleton.adjacency, skeleton_of(dag))
        assert np.array_equal(_cpdag_of(skeleton), dag_to_cpdag(dag))
        assert not skeleton.stopped_by_limit
        for (i, j), sepset in skeleton.separating_sets.items():
            assert i < j and not skeleton.adjacency[i, j] and sepset == tuple(sorted(sepset))
            assert skeleton.max_p_values[i, j] >= 0.01
        kept = np.triu(skeleton.adjacency, 1)
        assert np.all(skeleton.max_p_values[kept] < 0.01)


def test_pc_stable_counts_tests_and_honours_the_size_limit():
    cov = sem_covariance(pdag(3, directed=[(0, 2), (1, 2)]) * 0.8)
    skeleton = pc_stable_skeleton_from_correlation(cov, n=10**10)
    # Level 0: three pairs, (0, 1) removed.  Level 1: 0 - 2 given {1} and 1 - 2 given {0}.
    assert skeleton.n_tests == 5
    assert skeleton.separating_sets == {(0, 1): ()}
    assert skeleton.max_condition_size_reached == 1 and not skeleton.stopped_by_limit

    chain_cov = sem_covariance(CHAIN * 0.8)
    limited = pc_stable_skeleton_from_correlation(chain_cov, n=10**10, max_condition_size=0)
    assert limited.adjacency.all(where=~np.eye(4, dtype=bool))
    assert limited.stopped_by_limit and limited.max_condition_size_reached == 0
    full = pc_stable_skeleton_from_correlation(chain_cov, n=10**10)
    assert np.array_equal(full.adjacency, skeleton_of(CHAIN))
    assert full.separating_sets[(0, 2)] == (1,) and full.separating_sets[(1, 3)] == (2,)


def test_correlation_matrix_matches_numpy_corrcoef_across_blocks():
    rng = np.random.default_rng(9)
    X = simulate_sem(random_weights(rng, random_dag(rng, 6, 0.5)), 1000, rng) * rng.uniform(0.1, 10, 6) + 1e4
    reference = np.corrcoef(X, rowvar=False)
    for block_rows in (7, 256, 5000):
        assert np.allclose(correlation_matrix(X, block_rows=block_rows), reference, rtol=0, atol=1e-12)


def test_pc_stable_input_errors():
    rng = np.random.default_rng(0)
    X = rng.standard_normal((50, 3))
    X[:, 1] = 0.1  # 50 * 0.1 is not exact in binary, so the centred column is round-off, not zero
    with pytest.raises(InputError, match="column 1 of X is constant"):
        pc_stable_skeleton(X)
    with pytest.raises(InputError, match="alpha"):
        pc_stable_skeleton(rng.standard_normal((50, 3)), alpha=1.5)
    with pytest.raises(InputError, match="max_condition_size"):
        pc_stable_skeleton(rng.standard_normal((50, 3)), max_condition_size=-1)
    with pytest.raises(InputError, match="NaN"):
        pc_stable_skeleton(np.full((10, 2), np.nan))
    single = pc_stable_skeleton(rng.standard_normal((50, 1)))
    assert single.adjacency.shape == (1, 1) and single.n_tests == 0 and single.max_condition_size_reached == -1


# ---------------------------------------------------------------------------
# graph files

NAMES = ["temp", "flow rate", "pressure", "yield"]
TRUE = pdag(4, directed=[(0, 1), (1, 2), (0, 3)])


def test_both_graph_file_formats_parse_to_the_same_dag(tmp_path):
    arrows = tmp_path / "graph.txt"
    arrows.write_text("# kiln\n\ntemp -> flow rate\n  flow rate->pressure  \n\"temp\" -> 'yield'\n")
    table = tmp_path / "graph.csv"
    table.write_text("Weight,SOURCE,Target\n0.3,temp,flow rate\n1, flow rate ,pressure\n\n2,temp,yield\n")
    sniffed = tmp_path / "edges.list"
    sniffed.write_text("source,target\ntemp,flow rate\nflow rate,pressure\ntemp,yield\n")
    for path in (arrows, table, sniffed):
        dag = read_graph_file(path, NAMES)
        assert dag.dtype == np.int8 and np.array_equal(dag, TRUE)
    # A graph without edges would pass any gate vacuously: refused (issue 21, item 7).
    empty = tmp_path / "empty.txt"
    empty.write_text("# no edges yet\n")
    with pytest.raises(InputError, match="names no edge"):
        read_graph_file(empty, NAMES)


@pytest.mark.parametrize("name, content, fragments", [
    ("unknown.txt", "temp -> flow rate\ntemp -> humidity\n",
     ["line 2", "unknown variable 'humidity'", "known variables: temp, flow rate, pressure, yield"]),
    ("unknown.csv", "source,target\ntemp,humidity\n", ["line 2", "unknown variable 'humidity'"]),
    ("loop.txt", "# comment\ntemp -> temp\n", ["line 2", "self-loop temp -> temp"]),
    ("loop.csv", "source,target\nyield,yield\n", ["line 2", "self-loop yield -> yield"]),
    ("bad.txt", "temp -> flow rate\n\ntemp flow rate\n",
     ["line 3", "malformed line 'temp flow rate'", "source -> target"]),
    ("chain.txt", "temp -> flow rate -> yield\n", ["line 1", "malformed line"]),
    ("half.txt", "temp ->\n", ["line 1", "malformed line"]),
    ("short.csv", "source,weight,target\ntemp,1\n", ["line 2", "malformed row"]),
    ("blank.csv", "source,target\ntemp,\n", ["line 2", "source and target must both be given"]),
    ("header.csv", "from,to\ntemp,yield\n", ["line 1", "source and target", "found: from, to"]),
    ("cycle.txt", "temp -> flow rate\nflow rate -> pressure\npressure -> temp\nyield -> temp\n",
     ["has a cycle: temp -> flow rate -> pressure -> temp"]),
    ("two.csv", "source,target\nyield,pressure\npressure,yield\n", ["has a cycle: pressure -> yield -> pressure"]),
])
def test_graph_file_errors_name_the_problem(tmp_path, name, content, fragments):
    path = tmp_path / name
    path.write_text(content)
    with pytest.raises(InputError) as info:
        read_graph_file(path, NAMES)
    message = str(info.value)
    assert "\n" not in message and name in message
    for fragment in fragments:
        assert fragment in message


def test_graph_file_missing_and_long_name_lists(tmp_path):
    with pytest.raises(InputError, match="graph file not found: .*nowhere.txt"):
        read_graph_file(tmp_path / "nowhere.txt", NAMES)
    names = [f"x{k}" for k in range(30)]
    path = tmp_path / "g.txt"
    path.write_text("x1 -> nope\n")
    with pytest.raises(InputError, match=r"known variables: x0, x1, .*, x7, \.\.\. \(30 in all\)"):
        read_graph_file(path, names)
    with pytest.raises(InputError, match="unique"):
        read_graph_file(path, ["a", "a"])
