"""Entropy approximations and the pairwise likelihood-ratio measure of causal direction.

Negentropy of standardised variables by Hyvärinen's (1998) log-cosh
maximum-entropy approximation or by cumulants, and from them every pairwise
likelihood ratio of Hyvärinen & Smith (2013) at once
(:func:`pairwise_likelihood_ratios`), which the causal order search scores.
"""

from __future__ import annotations

import math

import numpy as np

from preflight.checks._validate import as_matrix, unit_scaled
from preflight.errors import InputError

# Hyvärinen (1998) maximum-entropy approximation of differential entropy of a
# standardised variable u, in the form Hyvärinen & Smith (2013) use for their
# general likelihood ratio (from memory, checked: gamma = E[log cosh(nu)] for
# nu ~ N(0, 1) is 0.374567 by numerical integration, and 7.4129 equals
# 36 / (8 sqrt 3 - 9), the constant of the odd term):
#   H(u) ~ H(nu) - K_EVEN (E[log cosh u] - GAMMA)^2 - K_ODD (E[u exp(-u^2/2)])^2
LOGCOSH_K_EVEN = 79.047
LOGCOSH_K_ODD = 7.4129
LOGCOSH_GAMMA = 0.37457

LOGCOSH_MAX_EVALUATIONS = 30_000_000
"""Largest n * k * (k - 1) for which a search step uses the log-cosh entropy (about a second of work)."""

_TENSOR_MAX_ELEMENTS = 131_072
"""Rows x pairs evaluated at once in the log-cosh measure (1 MB of float64).

Small enough for the chain of elementwise steps to stay in cache (at
n = 5000, p = 10 the search ran 1.5 times faster than with 32 MB blocks).
The block size does not change any value: every entry is the mean over
rows of its own residuals, added row by row whatever the block."""

MEASURES = ("auto", "logcosh", "cumulant")


def _standardise_columns(X: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Columns centred and scaled to population sd 1; degenerate columns become 0.

    Returns (Z, degenerate) where degenerate flags columns with no variance
    left (constant, or already explained exactly by earlier variables).
    """
    X = unit_scaled(X)  # exact per column: the same digits in any units, no overflow or underflow
    centred = X - X.mean(axis=0)
    sd = np.sqrt((centred * centred).mean(axis=0))
    scale = np.abs(X).max(axis=0) if X.size else np.ones(X.shape[1])
    degenerate = sd <= 1e-12 * scale
    Z = centred / np.where(degenerate, 1.0, sd)
    Z[:, degenerate] = 0.0
    return Z, degenerate


def _logcosh_negentropy_of_residuals(Z: np.ndarray, rho: np.ndarray, s: np.ndarray) -> np.ndarray:
    """J[i, j]: log-cosh negentropy of the standardised residual of z_j on z_i."""
    n, k = Z.shape
    J = np.zeros((k, k))
    block = max(1, _TENSOR_MAX_ELEMENTS // max(n * k, 1))
    log2 = math.log(2.0)
    for start in range(0, k, block):
        rows = slice(start, min(start + block, k))
        # residuals[t, b, j] = (z_j - rho[i_b, j] z_{i_b}) / s[i_b, j]
        residuals = Z[:, rows, None] * rho[None, rows, :]
        np.subtract(Z[:, None, :], residuals, out=residuals)
        residuals /= s[None, rows, :]
        magnitude = np.abs(residuals)
        # The two means below, E[|r| + log1p(exp(-2|r|))] and
        # E[r exp(-r^2 / 2)], are formed in one reused buffer: the same
        # operations in the same order as with temporaries (so the same
        # bits), without allocating a fresh tensor for every step.
        work = np.multiply(magnitude, -2.0)
        np.exp(work, out=work)
        np.log1p(work, out=work)
        work += magnitude
        even = work.mean(axis=0) - log2 - LOGCOSH_GAMMA
        np.multiply(residuals, -0.5, out=work)
        work *= residuals
        np.exp(work, out=work)
        work *= residuals
        odd = work.mean(axis=0)
        J[rows] = LOGCOSH_K_EVEN * even * even + LOGCOSH_K_ODD * odd * odd
    return J


def _logcosh_negentropy(Z: np.ndarray) -> np.ndarray:
    magnitude = np.abs(Z)
    log2 = math.log(2.0)
    even = (magnitude + np.log1p(np.exp(-2.0 * magnitude))).mean(axis=0) - log2 - LOGCOSH_GAMMA
    odd = (Z * np.exp(-0.5 * Z * Z)).mean(axis=0)
    return LOGCOSH_K_EVEN * even * even + LOGCOSH_K_ODD * odd * odd


def _cumulant_negentropy(skewness: np.ndarray, excess_kurtosis: np.ndarray) -> np.ndarray:
    # J ~ kappa3^2 / 12 + kappa4^2 / 48 (Jones & Sibson 1987; Comon 1994).
    return skewness * skewness / 12.0 + excess_kurtosis * excess_kurtosis / 48.0


def _cumulant_negentropies(Z: np.ndarray, rho: np.ndarray, s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Cumulant negentropy of every z_j and of every standardised residual of z_j on z_i.

    The third and fourth moments of (z_j - rho z_i) / s expand into the
    cross moments E[z_i^a z_j^b], a + b <= 4, and each of those matrices is
    one matrix product, so all pairs cost O(n k^2).
    """
    n = Z.shape[0]
    Z2 = Z * Z
    Z3 = Z2 * Z
    m3 = Z3.mean(axis=0)
    m4 = (Z2 * Z2).mean(axis=0)
    M12 = Z.T @ Z2 / n  # [i, j] = E[z_i z_j^2]
    M13 = Z.T @ Z3 / n  # [i, j] = E[z_i z_j^3]
    M22 = Z2.T @ Z2 / n
    r2, r3 = rho * rho, rho * rho * rho
    third = (m3[None, :] - 3.0 * rho * M12 + 3.0 * r2 * M12.T - r3 * m3[:, None]) / s**3
    fourth = (m4[None, :] - 4.0 * rho * M13 + 6.0 * r2 * M22 - 4.0 * r3 * M13.T
              + r2 * r2 * m4[:, None]) / s**4
    return _cumulant_negentropy(m3, m4 - 3.0), _cumulant_negentropy(third, fourth - 3.0)


def pairwise_likelihood_ratios(X, measure: str = "auto") -> np.ndarray:
    """All Hyvärinen-Smith likelihood ratios R[i, j] of x_i -> x_j against x_j -> x_i.

    Descriptive (no test).  With every column standardised and r_{j|i} the
    standardised residual of x_j on x_i,

        R[i, j] = H(x_j) + H(r_{i|j}) - H(x_i) - H(r_{j|i})
                = J(x_i) + J(r_{j|i}) - J(x_j) - J(r_{i|j}),

    the general likelihood ratio of Hyvärinen & Smith (2013) with
    differential entropies H replaced by an approximation (J is negentropy,
    H = H(gaussian) - J at unit variance).  R > 0 favours x_i -> x_j;
    R = -R.T.

    ``measure``:
    ``"logcosh"``  Hyvärinen's (1998) maximum-entropy approximation with
                   log cosh and u exp(-u^2/2), the one HS2013 use for the
                   general ratio; it needs every residual, O(n p^2)
                   transcendental functions.
    ``"cumulant"`` the cumulant approximation J = skew^2/12 + kurt^2/48 of
                   the same residuals, computed exactly from cross moments
                   by matrix products; much faster, less robust to heavy tails.
    ``"auto"``     log-cosh when n p (p - 1) <= LOGCOSH_MAX_EVALUATIONS, else cumulant.

    The simpler first-order form rho * E[x g(y) - g(x) y] (HS2013's tanh
    approximation, :mod:`preflight.checks.direction`) is not used here: it
    depends on the sign of the kurtosis and, in our simulations, misorders
    chains with skewed (exponential) noise that both entropy versions order
    correctly.

    Pairs with an exactly collinear partner (|rho| = 1) or a constant column get R = 0.
    """
    if measure not in MEASURES:
        raise InputError(f"measure must be one of {', '.join(MEASURES)}, got {measure!r}")
    X = as_matrix(X, name="X", min_n=3)
    Z, degenerate = _standardise_columns(X)
    return _likelihood_ratios(Z, degenerate, measure)


def _likelihood_ratios(Z: np.ndarray, degenerate: np.ndarray, measure: str,
                       rho: np.ndarray | None = None) -> np.ndarray:
    n, k = Z.shape
    if k < 2:
        return np.zeros((k, k))
    if rho is None:
        rho = Z.T @ Z / n
    rho = np.clip(rho, -1.0, 1.0)
    invalid = (np.abs(rho) >= 1.0 - 1e-10) | degenerate[:, None] | degenerate[None, :]
    np.fill_diagonal(invalid, True)
    s = np.sqrt(np.where(invalid, 1.0, 1.0 - rho * rho))
    rho_safe = np.where(invalid, 0.0, rho)
    if measure == "auto":
        measure = "logcosh" if n * k * (k - 1) <= LOGCOSH_MAX_EVALUATIONS else "cumulant"
    if measure == "logcosh":
        J_marginal = _logcosh_negentropy(Z)
        J_residual = _logcosh_negentropy_of_residuals(Z, rho_safe, s)
    else:
        J_marginal, J_residual = _cumulant_negentropies(Z, rho_safe, s)
    R = J_marginal[:, None] + J_residual - J_marginal[None, :] - J_residual.T
    R[invalid] = 0.0
    return R
