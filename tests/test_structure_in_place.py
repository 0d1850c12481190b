"""In-place arithmetic in preflight.structure gives the bits of the plain expressions.

The log-cosh entropy of the residuals and the Henze-Zirkler double sum reuse
buffers instead of allocating temporaries.  Reports must not change by a
bit, so each is compared exactly with the expression it replaced.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.linalg import solve_triangular

from preflight.structure import entropy, joint_normality


def _plain_logcosh_negentropy_of_residuals(Z, rho, s):
    n, k = Z.shape
    J = np.zeros((k, k))
    block = max(1, entropy._TENSOR_MAX_ELEMENTS // max(n * k, 1))
    for start in range(0, k, block):
        rows = slice(start, min(start + block, k))
        residuals = (Z[:, None, :] - Z[:, rows, None] * rho[None, rows, :]) / s[None, rows, :]
        magnitude = np.abs(residuals)
        even = (magnitude + np.log1p(np.exp(-2.0 * magnitude))).mean(axis=0) - math.log(2.0) - entropy.LOGCOSH_GAMMA
        odd = (residuals * np.exp(-0.5 * residuals * residuals)).mean(axis=0)
        J[rows] = entropy.LOGCOSH_K_EVEN * even * even + entropy.LOGCOSH_K_ODD * odd * odd
    return J


def _tables():
    rng = np.random.default_rng(8)
    out = []
    for n, k in [(40, 2), (500, 3), (2000, 6), (3000, 10)]:
        draws = (rng.laplace, rng.uniform, rng.exponential, rng.normal, lambda size: rng.standard_t(3, size=size))
        sources = np.column_stack([draws[j % len(draws)](size=n) for j in range(k)])
        out.append(sources @ rng.normal(size=(k, k)))
    # Nearly collinear columns give residuals far out in the tails.
    x = rng.laplace(size=800)
    out.append(np.column_stack([x, x + 1e-6 * rng.normal(size=800), rng.uniform(size=800)]))
    return out


def _same_bits(a, b):
    return a.shape == b.shape and np.array_equal(np.asarray(a).view(np.int64), np.asarray(b).view(np.int64))


@pytest.mark.parametrize("table", range(len(_tables())))
def test_logcosh_negentropy_of_residuals_matches_plain_expression(table, monkeypatch):
    X = _tables()[table]
    Z, _ = entropy._standardise_columns(X)
    k = Z.shape[1]
    rho = np.clip(Z.T @ Z / Z.shape[0], -1.0, 1.0)
    invalid = (np.abs(rho) >= 1.0 - 1e-10) | np.eye(k, dtype=bool)
    s = np.sqrt(np.where(invalid, 1.0, 1.0 - rho * rho))
    rho = np.where(invalid, 0.0, rho)
    expected = _plain_logcosh_negentropy_of_residuals(Z, rho, s)
    assert _same_bits(entropy._logcosh_negentropy_of_residuals(Z, rho, s), expected)
    # Several row blocks, as on wide tables.
    monkeypatch.setattr(entropy, "_TENSOR_MAX_ELEMENTS", Z.shape[0] * k)
    assert _same_bits(entropy._logcosh_negentropy_of_residuals(Z, rho, s),
                      _plain_logcosh_negentropy_of_residuals(Z, rho, s))


def _plain_henze_zirkler_statistic(X):
    # The same column selection as henze_zirkler: it changes the memory
    # layout, and with it the round-off of the column means.
    X = X[:, [j for j in range(X.shape[1]) if np.ptp(X[:, j]) > 0]]
    n, p = X.shape
    centred = X - X.mean(axis=0)
    cholesky = np.linalg.cholesky(centred.T @ centred / n)
    whitened = solve_triangular(cholesky, centred.T, lower=True).T
    d_j = np.einsum("ij,ij->i", whitened, whitened)
    b2 = (((2 * p + 1) / 4) ** (1 / (p + 4)) * n ** (1 / (p + 4)) / math.sqrt(2)) ** 2
    pair_sum = 0.0
    for start in range(0, n, joint_normality._HZ_BLOCK):
        block = whitened[start:start + joint_normality._HZ_BLOCK]
        d_jk = d_j[start:start + joint_normality._HZ_BLOCK, None] + d_j[None, :] - 2.0 * (block @ whitened.T)
        np.maximum(d_jk, 0.0, out=d_jk)
        pair_sum += float(np.exp(-0.5 * b2 * d_jk).sum())
    return (pair_sum / n - 2.0 * (1 + b2) ** (-p / 2) * float(np.exp(-b2 / (2 * (1 + b2)) * d_j).sum())
            + n * (1 + 2 * b2) ** (-p / 2))


@pytest.mark.parametrize("table", range(len(_tables())))
def test_henze_zirkler_statistic_matches_plain_expression(table):
    X = _tables()[table]
    result = joint_normality.henze_zirkler(X, max_n=X.shape[0])
    expected = _plain_henze_zirkler_statistic(X)
    assert np.float64(result.statistic).view(np.int64) == np.float64(expected).view(np.int64)


@pytest.mark.parametrize("table", range(len(_tables())))
def test_logcosh_negentropy_of_residuals_does_not_depend_on_the_block_size(table, monkeypatch):
    # Each entry is a mean over the rows (axis 0) of its own residuals; the
    # block only decides how many entries share one tensor.
    X = _tables()[table]
    Z, _ = entropy._standardise_columns(X)
    n, k = Z.shape
    rho = np.clip(Z.T @ Z / n, -1.0, 1.0)
    invalid = (np.abs(rho) >= 1.0 - 1e-10) | np.eye(k, dtype=bool)
    s = np.sqrt(np.where(invalid, 1.0, 1.0 - rho * rho))
    rho = np.where(invalid, 0.0, rho)
    results = []
    for rows_per_block in sorted({1, 2, max(1, k // 2), k}):
        monkeypatch.setattr(entropy, "_TENSOR_MAX_ELEMENTS", n * k * rows_per_block)
        results.append(entropy._logcosh_negentropy_of_residuals(Z, rho, s))
    assert all(_same_bits(J, results[0]) for J in results[1:])
