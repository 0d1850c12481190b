"""Parents and noise: each variable's significant predecessors in a causal order, and its structural residual."""

from __future__ import annotations

from collections.abc import Sequence
from typing import cast

import numpy as np

from preflight.checks._validate import as_matrix
from preflight.errors import InputError
from preflight.fit import coefficient_standard_errors, ols, residualize


def _validate_order(order: Sequence[int], p: int) -> tuple[int, ...]:
    order = tuple(int(i) for i in order)
    if sorted(order) != list(range(p)):
        raise InputError(f"order must be a permutation of the {p} column indices, got {order}")
    return order


def prune_parents(X, order: Sequence[int], alpha: float = 0.05,
                  correction: str = "holm") -> tuple[tuple[int, ...], ...]:
    """Parents of each variable: its significant predecessors in ``order``.

    Each variable is regressed by OLS (with intercept) on all variables
    before it in ``order``.  Null hypothesis of each coefficient's t-test:
    its partial slope is 0 (t with n - k - 1 degrees of freedom, classical
    standard errors).  All coefficients of all equations form one family,
    corrected with ``correction`` (``"holm"``, Holm 1979, or ``"fdr_bh"``,
    Benjamini & Hochberg 1995) through
    ``preflight.evidence.adjust_p_values``; a predecessor is kept
    when its adjusted p-value is below ``alpha``.  This is the pruning by
    regression of Shimizu et al. (2011) with a multiplicity-corrected test
    instead of a penalty.

    The p - 1 nested regressions share one QR factorisation of the centred,
    unit-scaled design in causal order: the equation of the j-th variable
    uses the leading j x j block of R (coefficients R_jj^-1 r_j, residual
    sum of squares R[j, j]^2, covariance sigma^2 (R_jj' R_jj)^-1).  That is
    the least squares of :func:`preflight.fit.ols` and
    :func:`preflight.fit.coefficient_standard_errors` (the tests compare
    them) at the cost of one regression instead of p.  When the design is
    rank-deficient, or has no more rows than columns, each equation is
    fitted with those two functions instead.

    Constant columns neither have nor are parents.  An equation without
    residual degrees of freedom, or with exactly collinear predecessors,
    keeps no parents from its untestable coefficients.  Returns a tuple
    indexed by column; each entry lists parent indices in ascending order.
    """
    from preflight.evidence import adjust_p_values, rejects

    if not 0.0 < alpha < 1.0:
        raise InputError(f"alpha must lie in (0, 1), got {alpha}")
    if correction not in ("holm", "fdr_bh"):
        raise InputError(f"correction must be 'holm' or 'fdr_bh', got {correction!r}")
    X = as_matrix(X, name="X", min_n=3)
    n, p = X.shape
    order = _validate_order(order, p)
    active = [j for j in order if np.ptp(X[:, j]) > 0]
    candidates, p_values = _nested_t_tests(X, active)
    if candidates is None:
        candidates, p_values = _per_equation_t_tests(X, active)
    parents: list[list[int]] = [[] for _ in range(p)]
    if p_values:
        reject = rejects(adjust_p_values(p_values, correction), alpha)
        for (child, parent), keep in zip(candidates, reject):
            if keep:
                parents[child].append(parent)
    return tuple(tuple(sorted(ps)) for ps in parents)


def _two_sided_t(t: np.ndarray, df: int) -> np.ndarray:
    from preflight.checks._distributions import t_sf

    return 2.0 * t_sf(np.abs(t), df)


def _nested_t_tests(X: np.ndarray, active: list[int]):
    """t-test p-values of every equation from one QR; (None, None) when it does not apply."""
    from scipy.linalg import solve_triangular

    n, m = X.shape[0], len(active)
    if m < 2:
        return [], []
    if n <= m + 1:
        return None, None
    design = X[:, active] - X[:, active].mean(axis=0)
    design /= np.sqrt((design * design).sum(axis=0))
    # numpy's stubs type mode="r" as the (Q, R) pair; it returns R alone.
    r = cast(np.ndarray, np.linalg.qr(design, mode="r"))
    diagonal = np.abs(np.diag(r))
    if diagonal.min() <= 1e-10 * diagonal.max():
        return None, None
    r_inv = solve_triangular(r, np.eye(m), lower=False)
    candidates: list[tuple[int, int]] = []
    p_values: list[float] = []
    for j in range(1, m):
        block_inv = r_inv[:j, :j]
        coef = block_inv @ r[:j, j]
        df = n - j - 1
        sigma2 = r[j, j] ** 2 / df
        se = np.sqrt(sigma2 * (block_inv * block_inv).sum(axis=1))
        pv = _two_sided_t(coef / se, df)
        for parent, value in zip(active[:j], pv):
            candidates.append((active[j], parent))
            p_values.append(float(value))
    return candidates, p_values


def _per_equation_t_tests(X: np.ndarray, active: list[int]):
    candidates: list[tuple[int, int]] = []
    p_values: list[float] = []
    for position in range(1, len(active)):
        child, predecessors = active[position], active[:position]
        design = X[:, predecessors]
        fit = ols(design, X[:, child])
        pv = np.ones(len(predecessors))
        if fit.df_resid > 0 and fit.rank == len(predecessors) + 1:
            try:
                se = coefficient_standard_errors(design, fit)[1:]
            except np.linalg.LinAlgError:
                se = None
            if se is not None:
                with np.errstate(divide="ignore", invalid="ignore"):
                    pv = _two_sided_t(fit.coef[1:] / se, fit.df_resid)
                pv = np.where(np.isfinite(pv), pv, 1.0)
        for parent, value in zip(predecessors, pv):
            candidates.append((child, parent))
            p_values.append(float(value))
    return candidates, p_values


def noise_estimates(X, parents: Sequence[Sequence[int]]) -> np.ndarray:
    """Residual of each structural equation x_j = b'x_parents(j) + e_j (OLS with intercept).

    A variable without parents gets its centred values.  Returns an (n, p)
    array whose column j estimates the noise e_j.  Descriptive; reference:
    the structural equation model of Shimizu et al. (2006).
    """
    X = as_matrix(X, name="X", min_n=3)
    n, p = X.shape
    if len(parents) != p:
        raise InputError(f"parents must list one parent set per column ({p}), got {len(parents)}")
    out = np.empty((n, p))
    for j, ps in enumerate(parents):
        ps = [int(i) for i in ps]
        if any(i == j or not 0 <= i < p for i in ps):
            raise InputError(f"parent set of column {j} is invalid: {ps}")
        out[:, j] = residualize(X[:, j], X[:, ps] if ps else None)
    return out
