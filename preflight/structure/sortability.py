"""Varsortability (Reisach et al. 2021): would sorting by marginal variance already give the order?"""

from __future__ import annotations

import math
from collections.abc import Iterable

import numpy as np

from preflight.checks._validate import as_matrix
from preflight.errors import InputError


def _pairs_to_score(edges: Iterable[tuple[int, int]], p: int, paths: bool) -> list[tuple[int, int]]:
    edge_list = []
    for edge in edges:
        i, j = (int(v) for v in edge)
        if not (0 <= i < p and 0 <= j < p) or i == j:
            raise InputError(f"edge {edge} is not a pair of distinct column indices below {p}")
        edge_list.append((i, j))
    if not paths:
        return edge_list
    # Every (i, j, k) with a directed path of length k from i to j counts
    # once, k = 1..p-1 (Reisach et al. 2021, definition of varsortability).
    adjacency = np.zeros((p, p), dtype=np.int64)
    for i, j in edge_list:
        adjacency[i, j] = 1
    out = []
    reach = adjacency.copy()
    for _ in range(p - 1):
        for i, j in zip(*np.nonzero(reach)):
            out.append((int(i), int(j)))
        reach = ((reach @ adjacency) > 0).astype(np.int64)
        if not reach.any():
            break
    return out


def _sortability(scores: np.ndarray, pairs: list[tuple[int, int]], exponents=None) -> float:
    if not pairs:
        return math.nan
    total = 0.0
    for i, j in pairs:
        a, b = float(scores[i]), float(scores[j])
        if exponents is not None:
            # scores[k] is in units of 2**exponents[k]: bring a into b's units
            # (exact for powers of two) instead of both into the user's, which
            # can overflow or underflow.
            try:
                a = math.ldexp(a, int(exponents[i]) - int(exponents[j]))
            except OverflowError:
                a = math.inf
        if math.isclose(a, b, rel_tol=1e-9, abs_tol=1e-300):
            total += 0.5
        elif a < b:
            total += 1.0
    return total / len(pairs)


def varsortability(X, edges: Iterable[tuple[int, int]], paths: bool = False, exponents=None) -> float:
    """Share of edges i -> j along which the marginal variance increases (ties, within 1e-9 relative, count half).

    Descriptive.  Near 1, sorting the columns by variance alone already
    recovers the order, which happens in simulated data with unit-scale
    noise and is destroyed by rescaling the columns; a result that relies on
    it is an artefact of scale.  ``paths=True`` gives the original
    definition, over every directed path (each path length counted), not
    only the edges.  NaN when there is nothing to score.  Reference:
    Reisach, Seiler & Weichwald (2021), "Beware of the simulated DAG!".

    Unlike every other result, it depends on the units, by design: it asks
    whether the units the data came in happen to order the variances.
    ``exponents`` says the columns were scaled by ``2**-exponents`` (as the
    pipeline does), so the variances are compared in the original units.
    """
    X = as_matrix(X, name="X", min_n=2)
    twice = None if exponents is None else 2 * np.asarray(exponents, dtype=np.int64)
    return _sortability(X.var(axis=0, ddof=1), _pairs_to_score(edges, X.shape[1], paths), twice)
