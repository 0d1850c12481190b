"""Reference checks of preflight.graph against published results and
general-purpose libraries (statsmodels, pingouin), each naming its source."""

from __future__ import annotations

import itertools
import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from preflight.graph import dag_to_cpdag, edge_status, partial_correlation_test, v_structures


def _dag(p, edges):
    G = np.zeros((p, p), dtype=np.int8)
    for i, j in edges:
        G[i, j] = 1
    return G


def _all_dags(p):
    """Every labelled DAG on p nodes once: each pair gets no edge or one direction, kept when
    the adjacency matrix is nilpotent (no directed cycle)."""
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


def test_v_structure_and_its_consequence_are_compelled():
    # Source: Meek (1995), "Causal inference and causal explanation with background knowledge",
    # and Verma and Pearl (1990): an unshielded collider a -> c <- b is shared by every DAG of the
    # class, and so is c -> d (rule R1: reversing it would create the v-structure a -> c <- d).
    a, b, c, d = range(4)
    dag = _dag(4, [(a, c), (b, c), (c, d)])
    assert v_structures(dag) == {(a, c, b)}
    cpdag = dag_to_cpdag(dag)
    assert np.array_equal(cpdag, dag)
    assert edge_status(cpdag) == {(a, c): "i->j", (b, c): "i->j", (c, d): "i->j"}


def test_cpdag_of_a_chain_is_fully_undirected():
    # Source: Verma and Pearl (1990): a chain has no v-structure, so it is Markov equivalent to its
    # reversal and to every fork on the same skeleton; the CPDAG has no directed edge (Meek 1995).
    dag = _dag(5, [(0, 1), (1, 2), (2, 3), (3, 4)])
    assert edge_status(dag_to_cpdag(dag)) == {(k, k + 1): "undirected" for k in range(4)}


# Source: OEIS A007984, "Number of essential graphs with n nodes (in 1-1 correspondence with Markov
# equivalence classes of acyclic digraphs)": 1, 2, 11, 185, 8782; Gillispie and Perlman (2001),
# "Enumerating Markov equivalence classes of acyclic digraph models", UAI.
PUBLISHED_CLASSES = [1, 2, 11, 185, 8782]
# Source: OEIS A003024, labelled acyclic digraphs: 1, 3, 25, 543, 29281 (Robinson 1973).
PUBLISHED_DAGS = [1, 3, 25, 543, 29281]


@pytest.mark.parametrize("p", [1, 2, 3, 4, 5])
def test_number_of_equivalence_classes_matches_the_published_sequence(p):
    dags = _all_dags(p)
    assert dags.shape[0] == PUBLISHED_DAGS[p - 1]
    distinct_cpdags = {dag_to_cpdag(dag).tobytes() for dag in dags}
    assert len(distinct_cpdags) == PUBLISHED_CLASSES[p - 1]


def _statsmodels_partial_correlation(df, x, y, covar):
    """Correlation of the OLS residuals of x and y on [1, covar] (statsmodels)."""
    import statsmodels.api as sm

    Z = sm.add_constant(df[covar].to_numpy(), has_constant="add")
    rx = sm.OLS(df[x].to_numpy(), Z).fit().resid
    ry = sm.OLS(df[y].to_numpy(), Z).fit().resid
    return float(np.corrcoef(rx, ry)[0, 1])


def test_fisher_z_matches_statsmodels_residuals_and_pingouin():
    # Sources: statsmodels OLS residuals (the definition of partial correlation as the correlation
    # of residuals); pingouin.partial_corr (inverse-covariance method, checked by its authors
    # against R's ppcor).  Fisher (1924) for z = sqrt(n - |S| - 3) atanh(r), two-sided normal p.
    pingouin = pytest.importorskip("pingouin")
    rng = np.random.default_rng(1924)
    n = 500
    e = rng.standard_normal((n, 5))
    x0 = e[:, 0]
    x1 = 0.7 * x0 + e[:, 1]
    x2 = -0.5 * x1 + 0.4 * x0 + e[:, 2]
    x3 = 0.6 * x2 + e[:, 3] * 2.0
    x4 = 0.3 * x0 - 0.8 * x3 + e[:, 4]
    df = pd.DataFrame({"a": x0, "b": x1, "c": x2, "d": x3, "e": x4})
    names = list(df.columns)
    corr = np.corrcoef(df.to_numpy(), rowvar=False)
    for x, y, covar in [("a", "c", ["b"]), ("a", "d", ["b", "c"]), ("b", "e", ["a", "c", "d"]), ("c", "e", ["d"])]:
        r = _statsmodels_partial_correlation(df, x, y, covar)
        expected_z = math.sqrt(n - len(covar) - 3) * math.atanh(r)
        expected_p = 2 * stats.norm.sf(abs(expected_z))
        z, p = partial_correlation_test(corr, n, names.index(x), names.index(y), [names.index(c) for c in covar])
        assert z == pytest.approx(expected_z, rel=1e-9)
        assert p == pytest.approx(expected_p, rel=1e-7, abs=1e-300)
        r_pingouin = float(pingouin.partial_corr(data=df, x=x, y=y, covar=covar)["r"].iloc[0])
        assert math.atanh(r_pingouin) * math.sqrt(n - len(covar) - 3) == pytest.approx(z, rel=1e-8)
