"""Multivariate normality of the whole table: the Henze-Zirkler test."""

from __future__ import annotations

import math

import numpy as np

from preflight.checks._validate import as_matrix
from preflight.results import CheckResult

HENZE_ZIRKLER_MAX_N = 2000
"""Above this many rows the test runs on a seeded subsample (its cost grows with n^2).

A whole-table screen: at 2,000 rows it already detects departures far smaller
than those that matter for the noise-shape checks, which use every row."""

_HZ_BLOCK = 512
"""Rows per block of the pairwise sum, so memory stays O(block * n)."""


def henze_zirkler(X, seed: int = 0, max_n: int = HENZE_ZIRKLER_MAX_N) -> CheckResult:
    """Henze-Zirkler test of multivariate normality of the whole table.

    Null hypothesis: the rows are iid draws from a multivariate normal
    distribution.  With S the covariance (divisor n), D_j the squared
    Mahalanobis distance of row j from the mean and D_jk that between rows
    j and k, and b = ((2p + 1)/4)^(1/(p+4)) n^(1/(p+4)) / sqrt(2),

        HZ = 1/n sum_jk exp(-b^2 D_jk / 2)
             - 2 (1 + b^2)^(-p/2) sum_j exp(-b^2 D_j / (2 (1 + b^2)))
             + n (1 + 2 b^2)^(-p/2),

    a weighted L2 distance between the empirical characteristic function of
    the scaled residuals and the normal one.  The p-value is from the
    lognormal with the null mean and variance of Henze and Zirkler (1990).
    The double sum runs in row blocks on whitened rows, so memory is
    O(block x n) rather than several n x n matrices; values agree with
    ``pingouin.multivariate_normality`` to round-off (tests/test_structure.py).
    Above ``max_n`` rows the test runs on a seeded subsample (the note says
    so).  Constant columns, and columns constant on the subsample, are left
    out; with fewer than two varying columns, or a singular covariance, no
    test is run (NaN statistic, p-value None).  Reference: Henze & Zirkler (1990), "A class of invariant
    consistent tests for multivariate normality", Commun. Statist. Theory
    Meth. 19(10).
    """
    X = as_matrix(X, name="X", min_n=3)
    n_total = X.shape[0]
    notes = []
    varying = [j for j in range(X.shape[1]) if np.ptp(X[:, j]) > 0]
    if len(varying) < X.shape[1]:
        notes.append(f"{X.shape[1] - len(varying)} constant column(s) left out")
    X = X[:, varying]
    if n_total > max_n:
        rows = np.sort(np.random.default_rng(seed).choice(n_total, int(max_n), replace=False))
        X = X[rows]
        notes.append(f"seeded subsample of {int(max_n)} of {n_total} rows (seed {seed})")
        # A nearly constant column (one differing value in thousands) can be constant on the subsample.
        varying = [j for j in range(X.shape[1]) if np.ptp(X[:, j]) > 0]
        if len(varying) < X.shape[1]:
            notes.append(f"{X.shape[1] - len(varying)} column(s) constant on the subsample left out")
            X = X[:, varying]
    n, p = X.shape
    if p < 2:
        return CheckResult(name="henze-zirkler", statistic=math.nan, p_value=None, n=n,
                           note="; ".join(notes + ["fewer than two varying columns: no multivariate test"]))
    centred = X - X.mean(axis=0)
    singular = np.linalg.svd(centred / np.sqrt((centred * centred).sum(axis=0)), compute_uv=False)
    if singular[-1] <= 1e-10 * singular[0]:
        return CheckResult(name="henze-zirkler", statistic=math.nan, p_value=None, n=n,
                           note="; ".join(notes + ["singular covariance (exactly collinear columns): no test"]))
    from scipy.linalg import solve_triangular

    cholesky = np.linalg.cholesky(centred.T @ centred / n)
    whitened = solve_triangular(cholesky, centred.T, lower=True).T
    b2 = (((2 * p + 1) / 4) ** (1 / (p + 4)) * n ** (1 / (p + 4)) / math.sqrt(2)) ** 2
    hz = _hz_statistic(whitened, b2)
    p_value = _hz_p_value(hz, b2, p)
    notes.append("lognormal approximation of the null distribution (Henze and Zirkler 1990)")
    return CheckResult(name="henze-zirkler", statistic=float(hz), p_value=p_value, n=n, note="; ".join(notes))


def _hz_statistic(whitened: np.ndarray, b2: float) -> float:
    """HZ of whitened rows with smoothing b^2 = ``b2``; the double sum over rows runs in blocks of ``_HZ_BLOCK``."""
    n, p = whitened.shape
    d_j = np.einsum("ij,ij->i", whitened, whitened)
    pair_sum = 0.0
    for start in range(0, n, _HZ_BLOCK):
        block = whitened[start:start + _HZ_BLOCK]
        # d_jk = d_j + d_k - 2 <w_j, w_k>, then exp(-b^2 d_jk / 2), each step
        # in place: the arithmetic of the plain expression without its four
        # block-sized temporaries.
        cross = block @ whitened.T
        cross *= 2.0
        d_jk = np.add(d_j[start:start + _HZ_BLOCK, None], d_j[None, :])
        d_jk -= cross
        np.maximum(d_jk, 0.0, out=d_jk)  # round-off can leave -1e-16 on the diagonal
        d_jk *= -0.5 * b2
        np.exp(d_jk, out=d_jk)
        pair_sum += float(d_jk.sum())
    return (pair_sum / n - 2.0 * (1 + b2) ** (-p / 2) * float(np.exp(-b2 / (2 * (1 + b2)) * d_j).sum())
            + n * (1 + 2 * b2) ** (-p / 2))


def _hz_p_value(hz: float, b2: float, p: int) -> float:
    """Upper tail of HZ under the lognormal with the null mean and variance of Henze and Zirkler (1990)."""
    from scipy import stats

    a = 1 + 2 * b2
    wb = (1 + b2) * (1 + 3 * b2)
    b4, b8 = b2 * b2, b2 ** 4
    mean = 1 - a ** (-p / 2) * (1 + p * b2 / a + p * (p + 2) * b4 / (2 * a * a))
    variance = (2 * (1 + 4 * b2) ** (-p / 2)
                + 2 * a ** (-p) * (1 + 2 * p * b4 / a ** 2 + 3 * p * (p + 2) * b8 / (4 * a ** 4))
                - 4 * wb ** (-p / 2) * (1 + 3 * p * b4 / (2 * wb) + p * (p + 2) * b8 / (2 * wb ** 2)))
    log_mean = math.log(math.sqrt(mean ** 4 / (variance + mean ** 2)))
    log_sd = math.sqrt(math.log1p(variance / mean ** 2))
    return float(stats.lognorm.sf(hz, log_sd, scale=math.exp(log_mean)))
