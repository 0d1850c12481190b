"""The causal order: the DirectLiNGAM search with the pairwise likelihood-ratio measure."""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from preflight.checks._validate import as_matrix
from preflight.errors import InputError
from preflight.structure.entropy import MEASURES, _likelihood_ratios, _standardise_columns

EXPLAINED_SHARE = 1e-12
"""A column whose variance left after the residualising steps is below this share of its own is treated as explained."""


def causal_order(X, seed: int = 0, measure: str = "auto", max_n: int | None = None,
                 on_step: Callable[[int, int], None] | None = None) -> tuple[int, ...]:
    """A causal order of the columns by the DirectLiNGAM search.

    Descriptive (no test): under a linear acyclic model with independent
    non-Gaussian noise, an exogenous variable is found at each step and the
    order is consistent.  Reference: Shimizu et al. (2011), "DirectLiNGAM",
    JMLR 12, with the pairwise measure of Hyvärinen & Smith (2013), JMLR 14.

    Each step scores every remaining candidate i by

        M_i = sum_j min(0, R[i, j])^2,

    the penalty for every pair whose likelihood ratio says x_j -> x_i
    (the likelihood-ratio variant of DirectLiNGAM proposed by HS2013 in
    place of its kernel independence measure), and takes the smallest; exact ties go to the
    lower column index.  R comes from :func:`pairwise_likelihood_ratios`
    with ``measure`` (``"auto"``: the log-cosh entropy approximation
    whenever a step is small enough, the cumulant one otherwise).

    The remaining columns are then residualised on the chosen one and
    re-standardised.  All columns being standardised, the least-squares
    slope of z_j on the chosen z_i is their correlation rho_ij and the
    residual variance 1 - rho_ij^2, so that regression is done in closed
    form and in place, (z_j - rho_ij z_i) / sqrt(1 - rho_ij^2), for all j at
    once.  A column with less than ``EXPLAINED_SHARE`` of its variance left
    (an exact linear function of the columns already ordered) gets R = 0
    with everything and so comes next.

    ``max_n``: when given and n is larger, the search runs on a seeded
    subsample of ``max_n`` rows drawn with ``seed``; otherwise ``seed`` is unused.
    ``on_step(done, total)``, when given, is called after each step with
    the candidate pairs scored so far and in all (a step over k columns
    scores k (k - 1) / 2 pairs, so the count follows the work); it cannot
    change the result.
    Returns the column indices, most exogenous first.
    """
    if measure not in MEASURES:
        raise InputError(f"measure must be one of {', '.join(MEASURES)}, got {measure!r}")
    X = as_matrix(X, name="X", min_n=3)
    n, p = X.shape
    if max_n is not None and n > int(max_n):
        rows = np.sort(np.random.default_rng(seed).choice(n, int(max_n), replace=False))
        X = X[rows]
        n = X.shape[0]
    Z, degenerate = _standardise_columns(X)
    # Fortran order keeps the active block Z[:, :k] contiguous while chosen
    # columns are swapped out of it.
    Z = np.asfortranarray(Z)
    degenerate = degenerate.copy()
    labels = list(range(p))
    left = np.ones(p)
    order: list[int] = []
    k = p
    pairs_total = (p + 1) * p * (p - 1) // 6  # sum of k (k - 1) / 2 for k = 2..p
    pairs_done = 0
    while k > 1:
        active = Z[:, :k]
        rho = active.T @ active / n
        R = _likelihood_ratios(active, degenerate[:k], measure, rho=rho)
        penalty = (np.minimum(R, 0.0) ** 2).sum(axis=1)
        tied = np.flatnonzero(penalty == penalty.min())
        best = min(tied, key=lambda c: labels[c])
        order.append(labels[best])
        k = _take_out(Z, k, int(best), np.clip(rho[best], -1.0, 1.0), degenerate, left, labels)
        pairs_done += (k + 1) * k // 2
        if on_step is not None:
            on_step(pairs_done, pairs_total)
    order.extend(labels[:1])
    return tuple(order)


def _take_out(Z: np.ndarray, k: int, best: int, correlations: np.ndarray, degenerate: np.ndarray,
              left: np.ndarray, labels: list[int]) -> int:
    """Remove column ``best`` from the active block ``Z[:, :k]`` and residualise the others on it; returns k - 1.

    Works in place on the search's state: the chosen column's slot is
    filled by the last active one (in ``Z``, ``degenerate``, ``left`` and
    ``labels``), then every remaining column z_j becomes
    (z_j - rho_j z_best) / sqrt(1 - rho_j^2), with rho_j its
    ``correlations`` with the chosen column, and ``left`` keeps the share of
    each column's own variance still unexplained.
    """
    chosen = Z[:, best].copy()
    slopes = np.where(degenerate[:k], 0.0, correlations)
    last = k - 1
    if best != last:
        Z[:, best] = Z[:, last]
        slopes[best] = slopes[last]
        degenerate[best] = degenerate[last]
        left[best] = left[last]
        labels[best] = labels[last]
    k = last
    labels.pop()
    slopes = slopes[:k]
    remaining_share = np.maximum(1.0 - slopes * slopes, 0.0)
    left[:k] *= remaining_share
    degenerate[:k] |= left[:k] <= EXPLAINED_SHARE
    block = Z[:, :k]
    block -= chosen[:, None] * slopes[None, :]
    block /= np.sqrt(np.where(degenerate[:k], 1.0, remaining_share))[None, :]
    block[:, degenerate[:k]] = 0.0
    return k
