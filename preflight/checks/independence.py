"""Kernel and distance tests of independence between two variables.

HSIC (Gretton et al. 2005, 2008) with Gaussian kernels, in three flavours:
exact with the gamma approximation to the null, exact with a permutation
null, and a linear-time version with random Fourier features (Zhang et al.
2018).  :func:`hsic` picks one from the sample size.  The bias-corrected
distance correlation with its t-test (Székely and Rizzo 2013) is the second
opinion.

Conventions shared by every HSIC function here:

* x and y are standardised first (mean 0, population standard deviation 1),
  so shifting or positively rescaling either changes nothing.
* Kernel k(a, b) = exp(-(a - b)^2 / (2 sigma^2)) with sigma the median of
  the pairwise absolute differences |a_i - a_j|, i < j (the median
  heuristic, Gretton et al. 2008), computed on all points when n <= 1000
  and otherwise on a seeded subsample of 1000 points.  When more than half
  of the differences are zero (heavy ties) the median of the non-zero
  differences is used and the note says so.
* ``statistic`` is n * HSIC_b, where HSIC_b = tr(K H L H) / n^2 is the
  biased estimator and H = I - 11'/n.  The random-feature version reports
  n * ||C_xy||_F^2, the same quantity for the approximate kernel, so the
  statistic means the same thing whichever method :func:`hsic` ran.
* ``effect`` is the normalised HSIC, HSIC(x, y) / sqrt(HSIC(x, x) HSIC(y, y)),
  in [0, 1] and free of n.
* A constant input has no defined kernel scale: the result then carries a
  NaN statistic, ``p_value=None`` and a note, rather than a made-up p-value.
"""

from __future__ import annotations

import hashlib
import math
import threading
from collections import OrderedDict
from collections.abc import Callable
from dataclasses import replace
from typing import NamedTuple

import numpy as np

from preflight.checks._validate import as_vector, same_length, unit_scaled
from preflight.errors import InputError
from preflight.results import CheckIdentity, CheckResult

BANDWIDTH_MAX_POINTS = 1000
"""Points used for the median heuristic; the median of ~5e5 differences is stable enough."""

DCOR_MAX_N = 2000
"""Rows of the O(n^2) distance correlation; above, a seeded subsample."""

_NORMALISED_HSIC = "normalised HSIC"


# --------------------------------------------------------------------------- helpers


def _pair(x, y, min_n: int) -> tuple[np.ndarray, np.ndarray, int]:
    xv = as_vector(x, "x", min_n=min_n)
    yv = as_vector(y, "y", min_n=min_n)
    n = same_length(xv, yv, names=("x", "y"))
    return xv, yv, n


def _standardise(v: np.ndarray) -> np.ndarray | None:
    """(v - mean) / sd, or None when v is constant (to round-off, relative to its magnitude)."""
    v = unit_scaled(v)  # exact: the same digits in any units, no overflow or underflow
    centred = v - v.mean()
    sd = float(np.sqrt(centred @ centred / v.shape[0]))
    scale = float(np.abs(v).max())
    if sd <= 1e-12 * scale:
        return None
    return centred / sd


def _constant_result(name: str, n: int, which: str, effect_name: str) -> CheckResult:
    return CheckResult(
        name=name, statistic=math.nan, p_value=None, effect=None, effect_name=effect_name, n=n,
        note=f"{which} is constant: dependence is undefined, no test run",
    )


def _ends_at_most(s: np.ndarray, t: float) -> np.ndarray:
    """For each i, the first j with s_j - s_i > t as computed in floating point, for sorted s.

    ``searchsorted(s, s + t)`` alone compares s_j with the rounded sum
    s_i + t, which can disagree with the rounded difference s_j - s_i that
    the differences are made of: for a standardised two-valued column
    a + (b - a) falls one ulp short of b, so every cross pair was counted
    as above t while its difference equals t, and the selection ran off the
    end of its candidates.  Rounded subtraction is monotone in s_j, so the
    pairs with s_j - s_i <= t still form a prefix of s; the guess is moved
    over whole blocks of tied values until it agrees with the differences.
    """
    m = s.shape[0]
    ends = np.searchsorted(s, s + t, side="right")
    for _ in range(m + 1):
        ahead = np.flatnonzero(ends < m)
        ahead = ahead[s[ends[ahead]] - s[ahead] <= t]
        behind = np.flatnonzero(ends > 0)
        behind = behind[s[ends[behind] - 1] - s[behind] > t]
        if not ahead.size and not behind.size:
            return ends
        ends[ahead] = np.searchsorted(s, s[ends[ahead]], side="right")
        ends[behind] = np.searchsorted(s, s[ends[behind] - 1], side="left")
    raise AssertionError("rounded differences are not monotone")  # unreachable in IEEE arithmetic


def _count_differences_at_most(s: np.ndarray, t: float) -> int:
    """#{(i, j): i < j, s_j - s_i <= t} for sorted s, in O(m log m)."""
    return int(np.maximum(_ends_at_most(s, t) - np.arange(1, s.shape[0] + 1), 0).sum())


def _smallest_difference_above(s: np.ndarray, t: float) -> float:
    """min{s_j - s_i : i < j, s_j - s_i > t} for sorted s (exactly one of the observed differences)."""
    m = s.shape[0]
    nxt = np.maximum(_ends_at_most(s, t), np.arange(1, m + 1))
    valid = nxt < m
    return float((s[nxt[valid]] - s[valid]).min())


def _kth_difference(s: np.ndarray, k: int) -> float:
    """The k-th smallest (1-based) of the m(m-1)/2 differences s_j - s_i, i < j, of sorted s.

    Bisection on the value with a counting step (searchsorted) until at most
    ``_ENUMERATE_AT`` differences lie in the bracket, which are then listed
    and sorted; the result is one of the observed differences, bit-identical
    to sorting all of them, without forming them: O(m log m) per step
    instead of O(m^2) memory.
    """
    return _kth_differences(s, k, 1)[0]


def _kth_differences(s: np.ndarray, k: int, count: int,
                     bracket: tuple[float, float, int, int] | None = None) -> tuple[float, ...]:
    """The k-th to (k + count - 1)-th smallest differences of sorted s, from one bisection (see
    :func:`_kth_difference`): the bracket is narrowed only while it holds all of them; where a midpoint
    splits them, each side goes on from its half.  ``bracket`` = (lo, hi, count(<= lo), count(<= hi))."""
    m = s.shape[0]
    last = k + count - 1
    lo, hi, below, above = bracket or (-1.0, float(s[-1] - s[0]), 0, m * (m - 1) // 2)
    # invariant: count(<= lo) = below < k and last <= above = count(<= hi)
    for _ in range(200):
        if above - below <= _ENUMERATE_AT:
            return _enumerate_ranks(s, lo, hi, range(k - below, last - below + 1))
        mid = 0.5 * (lo + hi)
        if not lo < mid < hi:
            break
        at_most = _count_differences_at_most(s, mid)
        if at_most >= last:
            hi, above = mid, at_most
        elif at_most < k:
            lo, below = mid, at_most
        else:  # ranks k..at_most lie in (lo, mid], the rest in (mid, hi]
            return (_kth_differences(s, k, at_most - k + 1, (lo, mid, below, at_most))
                    + _kth_differences(s, at_most + 1, last - at_most, (mid, hi, at_most, above)))
    # lo and hi are adjacent floats: every difference in (lo, hi] is the same number.
    return (_smallest_difference_above(s, lo),) * count


def _enumerate_ranks(s: np.ndarray, lo: float, hi: float, ranks) -> tuple[float, ...]:
    """The rank-th smallest (1-based) differences s_j - s_i, i < j, lying in (lo, hi], for each rank."""
    m = s.shape[0]
    first = np.maximum(_ends_at_most(s, lo), np.arange(1, m + 1))
    widths = np.maximum(_ends_at_most(s, hi) - first, 0)
    rows = np.repeat(np.arange(m), widths)
    offsets = np.arange(int(widths.sum())) - np.repeat(np.cumsum(widths) - widths, widths)
    candidates = np.sort(s[np.repeat(first, widths) + offsets] - s[rows])
    return tuple(float(candidates[rank - 1]) for rank in ranks)


_ENUMERATE_AT = 4096
"""Differences left in the bisection bracket at which they are listed and sorted directly."""


def _median_difference(s: np.ndarray, skip: int = 0) -> float:
    """Median of the pairwise differences of sorted s after dropping the ``skip`` smallest."""
    total = s.shape[0] * (s.shape[0] - 1) // 2 - skip
    if total % 2:
        return _kth_difference(s, skip + total // 2 + 1)
    lower, upper = _kth_differences(s, skip + total // 2, 2)
    return 0.5 * (lower + upper)


_TIE_BELOW = 1e-154
"""Differences of standardised values at or below this count as ties for the bandwidth: a smaller bandwidth
overflows 1 / (2 sigma^2).  Only a column with values at the float limit among ordinary ones gets there (its
other values, standardised, differ by about 1e-308)."""


def _median_bandwidth(v: np.ndarray, rng: np.random.Generator) -> tuple[float, bool]:
    """Median of |v_i - v_j| (i < j) on at most BANDWIDTH_MAX_POINTS points.

    Returns (sigma, used_nonzero_fallback).  The median is exact (the same
    number ``np.median`` gives on all the differences) but found by
    selection on the sorted points, without the O(m^2) array.  When it is
    0 (or below ``_TIE_BELOW``) the ties are left out of the median.
    """
    n = v.shape[0]
    if n > BANDWIDTH_MAX_POINTS:
        v = v[rng.choice(n, BANDWIDTH_MAX_POINTS, replace=False)]
    s = np.sort(v)
    sigma = _median_difference(s)
    if sigma > _TIE_BELOW:
        return sigma, False
    ties = _count_differences_at_most(s, _TIE_BELOW)
    if ties == s.shape[0] * (s.shape[0] - 1) // 2:
        # _standardise has already rejected constant inputs, but a subsample of a
        # nearly constant column can still be all ties.
        return 1.0, True
    return _median_difference(s, skip=ties), True


def _centred_gram(v: np.ndarray, sigma: float, fitted_residual: bool = False):
    """Centred Gaussian Gram matrix H K H (built in place), the mean off-diagonal of K, and residual terms.

    The residual terms are those of the correction for estimated
    coefficients (:func:`_residual_terms_exact`), computed from K before it
    is centred, when ``fitted_residual`` asks for them; None otherwise.
    """
    n = v.shape[0]
    gram = np.subtract.outer(v, v)
    np.square(gram, out=gram)
    gram *= -1.0 / (2.0 * sigma * sigma)
    np.exp(gram, out=gram)
    residual_terms = _residual_terms_exact(v, sigma, gram) if fitted_residual else None
    # Gretton et al. (2008) need the uncentred off-diagonal mean for the null mean;
    # the diagonal of a Gaussian Gram matrix is exactly 1.
    off_diagonal_mean = (float(gram.sum()) - n) / (n * (n - 1))
    # H K H without forming H: subtract row and column means, add the grand mean
    # (K is symmetric, so row means equal column means).
    means = gram.mean(axis=0)
    gram -= means[None, :]
    gram -= means[:, None]
    gram += means.mean()
    return gram, off_diagonal_mean, residual_terms


def _bandwidth_note(fallback_x: bool, fallback_y: bool) -> str:
    which = [w for w, flag in (("x", fallback_x), ("y", fallback_y)) if flag]
    if not which:
        return ""
    return (f"; more than half of the pairwise differences of {' and '.join(which)} are ties, "
            "bandwidth from the median of the non-zero differences")


def _bandwidth_rows_note(n: int) -> str:
    if n > BANDWIDTH_MAX_POINTS:
        return f"median-heuristic bandwidths on a seeded subsample of {BANDWIDTH_MAX_POINTS} rows"
    return "median-heuristic bandwidths on all rows"


# --------------------------------------------------------------------------- residuals of a fitted regression
#
# When y is the least-squares residual of a regression whose design contains
# x, the fitted coefficients were estimated from the same rows, and HSIC's
# usual null (for the true, unobserved noise) no longer holds: the effect is
# of the same order as the statistic itself (Sen and Sen 2014).  With skewed
# noise the test then rejects too often.  The correction below is derived
# from the first-order expansion psi(e_hat) = psi(e) - psi'(e) W~(theta_hat -
# theta): under H0, sqrt(n) vec(C_xy) tends to N(0, C_xx kron C_yy + P kron Q)
# with, for the standardised residual u (variance 1),
#   P = A S_W^-1 A',  A = E[phi~(x) W~'],  S_W = Cov(W),
#   Q = b b' - c b' - b c',  b = E[psi'(u)],  c = E[psi~(u) u].
# The gamma null then matches tr(M) and 2 ||M||_F^2 of M = C_xx kron C_yy +
# P kron Q, which need only traces:
#   tr(M) = tr C_xx tr C_yy + tr P tr Q,
#   ||M||^2 = ||C_xx||^2 ||C_yy||^2 + 2 tr(C_xx P) tr(C_yy Q) + ||P||^2 ||Q||^2.
# P is invariant to any invertible change of the design's columns, so it is
# computed from an orthonormal basis B of the centred design: P = phi~' B B'
# phi~ / n.  With Gaussian noise, c = b (Stein's lemma) and tr Q < 0: the
# uncorrected test is then conservative, as is known; skewed noise can make
# tr Q > 0.  When the test runs on a subsample of m of the n rows the
# coefficients came from, both P terms shrink by m / n.

RESIDUAL_ORTHOGONALITY_TOLERANCE = 1e-6
"""Largest |correlation| of y with a design column for y to count as that design's least-squares residual."""


class _ResidualFit(NamedTuple):
    """Orthonormal basis of the centred design on the rows tested, and rows tested / rows fitted."""

    basis: np.ndarray
    share: float


def _fit_note(fit: _ResidualFit | None) -> str:
    if fit is None:
        return ""
    return (f"; y is a least-squares residual of a design of rank {fit.basis.shape[1]}, null corrected "
            "for the estimated coefficients (first-order expansion; the effect: Sen and Sen 2014)")


def _orthonormal_basis(design: np.ndarray) -> np.ndarray:
    """Orthonormal basis of the column space of the centred design (columns scaled first, rank by SVD)."""
    design = unit_scaled(design)
    centred = design - design.mean(axis=0)
    norms = np.sqrt(np.einsum("ij,ij->j", centred, centred))
    scale = float(np.abs(design).max(initial=0.0))
    keep = norms > 1e-12 * scale * math.sqrt(design.shape[0])
    if not keep.any():
        return np.zeros((design.shape[0], 0))
    u, singular, _ = np.linalg.svd(centred[:, keep] / norms[keep], full_matrices=False)
    return u[:, singular > singular[0] * max(u.shape) * np.finfo(float).eps]


def _residual_fit(design, y: np.ndarray, rows: np.ndarray) -> _ResidualFit | None:
    if design is None:
        return None
    design = _check_residual_design(design, y)
    return _ResidualFit(_orthonormal_basis(design[rows]), rows.shape[0] / y.shape[0])


def _check_residual_design(design, y: np.ndarray) -> np.ndarray:
    from preflight.checks._validate import as_matrix

    design = as_matrix(design, name="residual_design", min_n=1)
    if design.shape[0] != y.shape[0]:
        raise InputError(f"residual_design has {design.shape[0]} rows for {y.shape[0]} observations")
    centred = design - design.mean(axis=0)
    y_centred = y - y.mean()
    norms = np.sqrt(np.einsum("ij,ij->j", centred, centred)) * math.sqrt(float(y_centred @ y_centred))
    live = norms > 0
    worst = float((np.abs(centred.T @ y_centred)[live] / norms[live]).max(initial=0.0))
    if worst > RESIDUAL_ORTHOGONALITY_TOLERANCE:
        raise InputError("y is not the least-squares residual of residual_design "
                         f"(its correlation with a design column is {worst:.3g})")
    return design


def _regressor_terms_rff(phi: np.ndarray, fit: _ResidualFit) -> tuple[float, float, float]:
    """tr P, ||P||_F^2 and tr(C_xx P) from the centred features of x."""
    m = phi.shape[0]
    g = (phi.T @ fit.basis.astype(np.float32)).astype(np.float64) / math.sqrt(m)
    gram = g.T @ g
    projected = (phi @ g.astype(np.float32)).astype(np.float64)
    return (fit.share * float(np.trace(gram)), fit.share**2 * float(np.einsum("ij,ij->", gram, gram)),
            fit.share * float(np.einsum("ij,ij->", projected, projected)) / m)


def _regressor_terms_exact(kc: np.ndarray, fit: _ResidualFit) -> tuple[float, float, float]:
    """tr P, ||P||_F^2 and tr(C_xx P) from the centred Gram matrix of x (kernel form of the above)."""
    m = kc.shape[0]
    kb = kc @ fit.basis
    gram = fit.basis.T @ kb / m
    return (fit.share * float(np.trace(gram)), fit.share**2 * float(np.einsum("ij,ij->", gram, gram)),
            fit.share * float(np.einsum("ij,ij->", kb, kb)) / (m * m))


def _q_terms(b_b: float, b_c: float, c_c: float, b_cyy_b: float, c_cyy_b: float) -> tuple[float, float, float]:
    """tr Q, ||Q||_F^2 and tr(C_yy Q) for Q = b b' - c b' - b c', from the inner products that define them."""
    return (b_b - 2.0 * b_c,
            b_b * b_b - 4.0 * b_b * b_c + 2.0 * b_c * b_c + 2.0 * b_b * c_c,
            b_cyy_b - 2.0 * c_cyy_b)


def _residual_terms_rff(psi: np.ndarray, derivative_mean: np.ndarray, u: np.ndarray) -> tuple[float, float, float]:
    m = psi.shape[0]
    b = derivative_mean
    c = (psi.T @ u.astype(np.float32)).astype(np.float64) / m
    psi_b = (psi @ b.astype(np.float32)).astype(np.float64)
    psi_c = (psi @ c.astype(np.float32)).astype(np.float64)
    return _q_terms(float(b @ b), float(b @ c), float(c @ c), float(psi_b @ psi_b) / m, float(psi_c @ psi_b) / m)


def _residual_terms_exact(u: np.ndarray, sigma: float, gram: np.ndarray) -> tuple[float, float, float]:
    """Kernel form of the residual-side terms, from the uncentred Gram matrix l(u_i, u_j).

    <psi(s), psi'(t)> = (s - t) l(s, t) / sigma^2 and
    <psi'(s), psi'(t)> = (1/sigma^2 - (s - t)^2/sigma^4) l(s, t).
    """
    m = u.shape[0]
    inv = 1.0 / (sigma * sigma)
    diff = np.subtract.outer(u, u)
    weighted = diff * gram
    b_b = (inv * float(gram.sum()) - inv * inv * float(np.einsum("ij,ij->", diff, weighted))) / (m * m)
    del diff
    psi_b = weighted.mean(axis=1) * inv
    psi_b -= psi_b.mean()
    del weighted
    gram_u = gram @ u
    psi_c = (gram_u - gram_u.mean()) / m
    return _q_terms(b_b, float(u @ psi_b) / m, float(u @ gram_u) / (m * m),
                    float(psi_b @ psi_b) / m, float(psi_c @ psi_b) / m)


def _fitted_coefficient_shift(regressor_terms: tuple[float, float, float],
                              residual_terms: tuple[float, float, float]) -> tuple[float, float]:
    """Additions to the null mean and variance of the statistic.

    They are tr P tr Q and 2 (2 tr(C_xx P) tr(C_yy Q) + ||P||^2 ||Q||^2).
    """
    trace_p, norm_p, trace_cp = regressor_terms
    trace_q, norm_q, trace_cq = residual_terms
    return trace_p * trace_q, 2.0 * (2.0 * trace_cp * trace_cq + norm_p * norm_q)


# --------------------------------------------------------------------------- exact HSIC


def _exact_parts(xs: np.ndarray, ys: np.ndarray, rng: np.random.Generator, fitted_residual: bool = False):
    """Centred Gram matrices, their off-diagonal means, the tie note, and (or None) the residual-side terms."""
    sigma_x, fallback_x = _median_bandwidth(xs, rng)
    sigma_y, fallback_y = _median_bandwidth(ys, rng)
    kc, mu_x, _ = _centred_gram(xs, sigma_x)
    lc, mu_y, residual_terms = _centred_gram(ys, sigma_y, fitted_residual)
    return kc, lc, mu_x, mu_y, _bandwidth_note(fallback_x, fallback_y), residual_terms


def _normalised(cross: float, self_x: float, self_y: float) -> float | None:
    denom = math.sqrt(self_x * self_y)
    return cross / denom if denom > 0 else None


def _hsic_gamma(xs: np.ndarray, ys: np.ndarray, rng: np.random.Generator,
                fit: _ResidualFit | None = None) -> CheckResult:
    from scipy import stats

    n = xs.shape[0]
    kc, lc, mu_x, mu_y, tie_note, residual_terms = _exact_parts(xs, ys, rng, fitted_residual=fit is not None)
    product = kc * lc
    cross = float(product.sum())
    effect = _normalised(cross, float(np.einsum("ij,ij->", kc, kc)), float(np.einsum("ij,ij->", lc, lc)))
    shift_mean = shift_var = 0.0
    if fit is not None:
        shift_mean, shift_var = _fitted_coefficient_shift(_regressor_terms_exact(kc, fit), residual_terms)
    del kc, lc
    statistic = cross / n  # n * HSIC_b, HSIC_b = tr(KHLH) / n^2
    # Null mean and variance of n * HSIC_b from those of HSIC_b given by
    # Gretton et al. (2008); the mean formula assumes k(a, a) = 1, true for
    # Gaussian kernels.
    np.square(product, out=product)
    off_diagonal = float(product.sum()) - float(np.trace(product))
    null_mean = (1.0 + mu_x * mu_y - mu_x - mu_y) + shift_mean
    null_var = (n * n * 2.0 * (n - 4) * (n - 5) / (n * (n - 1) * (n - 2) * (n - 3))
                * off_diagonal / (n * (n - 1))) + shift_var
    if null_mean <= 0 or null_var <= 0:
        p_value = None
        null_note = "; degenerate null moments, no p-value"
    else:
        p_value = float(stats.gamma.sf(statistic, null_mean**2 / null_var, scale=null_var / null_mean))
        null_note = ""
    return CheckResult(
        name="hsic gamma", statistic=statistic, p_value=p_value,
        effect=effect, effect_name=_NORMALISED_HSIC, n=n, identity=CheckIdentity("hsic", null="gamma"),
        note=(f"exact HSIC on {n} rows, statistic n*HSIC_b, gamma approximation to the null "
              f"(Gretton et al. 2008){_fit_note(fit)}; {_bandwidth_rows_note(n)}{tie_note}{null_note}"),
    )


def hsic_gamma(x, y, seed: int = 0, residual_design=None) -> CheckResult:
    """Exact HSIC test of independence with the gamma approximation to its null.

    H0: x and y are independent (with ``residual_design``: x is independent
    of the noise whose least-squares estimate y is).  Gaussian kernels with
    median-heuristic bandwidths on the standardised variables (see the
    module docstring); statistic n * HSIC_b with HSIC_b = tr(K H L H) / n^2.
    The null of n * HSIC_b is approximated by a gamma distribution whose
    mean and variance are estimated from the kernel matrices.  O(n^2) time
    and memory.  ``seed`` only matters above 1000 rows, where it picks the
    bandwidth subsample.

    ``residual_design`` (n x q, no intercept column needed): the regressors
    of the least-squares fit, with intercept, whose residual y is; x is
    usually one of them.  The null then accounts for the coefficients having
    been estimated from the same rows, which otherwise makes the test too
    liberal with skewed noise (Sen and Sen 2014); the correction is the
    first-order one described in this module's source.  y must be
    orthogonal to the design (it is checked).

    References: Gretton, Bousquet, Smola and Schölkopf (2005), "Measuring
    statistical dependence with Hilbert-Schmidt norms"; Gretton, Fukumizu,
    Teo, Song, Schölkopf and Smola (2008), "A kernel statistical test of
    independence", NIPS 20; Sen and Sen (2014), "Testing independence and
    goodness-of-fit in linear models", Biometrika 101.
    """
    xv, yv, n = _pair(x, y, min_n=6)
    fit = _residual_fit(residual_design, yv, np.arange(n))
    xs, ys = _standardise(xv), _standardise(yv)
    if xs is None or ys is None:
        return _constant_result("hsic gamma", n, "x" if xs is None else "y", _NORMALISED_HSIC)
    return _hsic_gamma(xs, ys, np.random.default_rng(seed), fit)


def _hsic_permutation(xs: np.ndarray, ys: np.ndarray, n_permutations: int,
                      rng: np.random.Generator) -> CheckResult:
    n = xs.shape[0]
    kc, lc, _, _, tie_note, _ = _exact_parts(xs, ys, rng)
    cross = float(np.einsum("ij,ij->", kc, lc))
    effect = _normalised(cross, float(np.einsum("ij,ij->", kc, kc)), float(np.einsum("ij,ij->", lc, lc)))
    # tr(HKH P L P') is invariant to centring L again, so permuting the centred
    # matrix gives the permuted statistic directly.
    exceed = 0
    tolerance = 1e-12 * max(abs(cross), 1.0)
    for _ in range(n_permutations):
        order = rng.permutation(n)
        permuted = float(np.einsum("ij,ij->", kc, lc[np.ix_(order, order)]))
        exceed += permuted >= cross - tolerance
    p_value = (1 + exceed) / (1 + n_permutations)
    return CheckResult(
        name="hsic permutation", statistic=cross / n, p_value=p_value,
        effect=effect, effect_name=_NORMALISED_HSIC, n=n, identity=CheckIdentity("hsic", null="permutation"),
        note=(f"exact HSIC on {n} rows, statistic n*HSIC_b, seeded permutation null with "
              f"{n_permutations} permutations, p = (1 + #exceed) / (1 + B); "
              f"{_bandwidth_rows_note(n)}{tie_note}"),
    )


def hsic_permutation(x, y, n_permutations: int = 500, seed: int = 0) -> CheckResult:
    """Exact HSIC test of independence with a seeded permutation null.

    H0: x and y are independent.  Same statistic as :func:`hsic_gamma`;
    the p-value is (1 + #{permuted >= observed}) / (1 + B) over B random
    permutations of y (Phipson and Smyth 2010 for the +1; Gretton et al.
    2008 for the test).  O(B n^2) time, O(n^2) memory.
    """
    if isinstance(n_permutations, bool) or int(n_permutations) != n_permutations or n_permutations < 1:
        raise InputError(f"n_permutations must be a positive whole number, got {n_permutations!r}")
    xv, yv, n = _pair(x, y, min_n=6)
    xs, ys = _standardise(xv), _standardise(yv)
    if xs is None or ys is None:
        return _constant_result("hsic permutation", n, "x" if xs is None else "y", _NORMALISED_HSIC)
    return _hsic_permutation(xs, ys, int(n_permutations), np.random.default_rng(seed))


# --------------------------------------------------------------------------- random Fourier features


def _fourier_features(v: np.ndarray, sigma: float, n_frequencies: int, rng: np.random.Generator) -> np.ndarray:
    """Column-centred features with phi(a)'phi(b) -> exp(-(a - b)^2 / (2 sigma^2)).

    Bochner: frequencies w ~ N(0, 1/sigma^2); the cosine-sine pair per
    frequency has lower variance than a cosine with a random phase
    (Sutherland and Schneider 2015).  The features are single precision:
    they are bounded by 1/sqrt(n_frequencies), the Monte Carlo error of the
    kernel approximation (order 1/sqrt(n_frequencies)) dwarfs round-off of
    order 1e-7, and cosines, sines and the products below run several
    times faster.  Sums that make the statistic are accumulated in double.
    """
    return _features_from(v, rng.standard_normal(n_frequencies) / sigma)


def _features_from(v: np.ndarray, omega: np.ndarray) -> np.ndarray:
    return _features_and_derivative_mean(v, omega)[0]


def _features_and_derivative_mean(v: np.ndarray, omega: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Centred features of v, and the mean over rows of their derivative in v (uncentred).

    For a feature cos(w v) / sqrt(m) the derivative is -w sin(w v) / sqrt(m),
    for sin(w v) / sqrt(m) it is w cos(w v) / sqrt(m), so the derivative's
    mean comes free from the column means removed by the centring.
    """
    n_frequencies = omega.shape[0]
    angles = np.multiply.outer(v.astype(np.float32), omega.astype(np.float32))
    features = np.empty((v.shape[0], 2 * n_frequencies), dtype=np.float32)
    np.cos(angles, out=features[:, :n_frequencies])
    np.sin(angles, out=features[:, n_frequencies:])
    features *= np.float32(1.0 / math.sqrt(n_frequencies))
    means = features.mean(axis=0, dtype=np.float64)
    features -= means.astype(np.float32)
    w = omega.astype(np.float32).astype(np.float64)
    derivative_mean = np.concatenate([-w * means[n_frequencies:], w * means[:n_frequencies]])
    return features, derivative_mean


_FEATURE_CACHE: OrderedDict = OrderedDict()
_FEATURE_CACHE_SIZE = 6
_FEATURE_CACHE_LOCK = threading.Lock()


def _features_and_covariance(v: np.ndarray, sigma: float, n_frequencies: int,
                             rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """:func:`_fourier_features` of v, their covariance and derivative mean.

    They are remembered for the last few (v, frequencies).

    Within one pair the same seed draws the same frequencies for the
    regressor in every HSIC it enters (association, residual, spline
    residual), so its features are computed once.  The frequencies are
    always drawn, so the generator's stream, and every result, is the same
    with or without a hit.  The memo is keyed by the content of v and of the
    frequencies, so a hit returns exactly what the computation would; the
    arrays it hands out are read-only, and a lock keeps threads that run
    checks at once from evicting each other's entries mid-lookup.
    """
    omega = rng.standard_normal(n_frequencies) / sigma
    key = (v.shape[0], hashlib.blake2b(v.tobytes(), digest_size=16).digest(), omega.tobytes())
    with _FEATURE_CACHE_LOCK:
        hit = _FEATURE_CACHE.get(key)
        if hit is not None:
            _FEATURE_CACHE.move_to_end(key)
            return hit
    features, derivative_mean = _features_and_derivative_mean(v, omega)
    covariance = (features.T @ features).astype(np.float64) / v.shape[0]
    for array in (features, covariance, derivative_mean):
        array.flags.writeable = False
    with _FEATURE_CACHE_LOCK:
        _FEATURE_CACHE[key] = (features, covariance, derivative_mean)
        while len(_FEATURE_CACHE) > _FEATURE_CACHE_SIZE:
            _FEATURE_CACHE.popitem(last=False)
    return features, covariance, derivative_mean


def _rff_gamma_p_value(statistic: float, n: int, trace_xx: float, trace_yy: float,
                       norm_xx: float, norm_yy: float,
                       shift: tuple[float, float] | None = None) -> tuple[float | None, str]:
    """p-value of n ||C_xy||_F^2 and a note, from the traces and squared norms of C_xx and C_yy.

    Under H0, sqrt(n) vec(C_xy) -> N(0, C_xx kron C_yy), so n ||C_xy||^2 tends to
    sum_ij lambda_i eta_j chi2_1 over the eigenvalues of C_xx and C_yy.  The
    gamma matches that mixture's mean (with the exact permutation factor
    n/(n-1)) and its variance 2 ||C_xx||_F^2 ||C_yy||_F^2, plus ``shift``
    (mean, variance) when y is a fitted residual.
    """
    from scipy import stats

    null_mean = n / (n - 1) * trace_xx * trace_yy
    null_var = 2.0 * norm_xx * norm_yy
    if shift is not None:
        null_mean += shift[0]
        null_var += shift[1]
    if null_mean <= 0 or null_var <= 0:
        return None, "; degenerate null moments, no p-value"
    return float(stats.gamma.sf(statistic, null_mean**2 / null_var, scale=null_var / null_mean)), ""


def _hsic_rff(xs: np.ndarray, ys: np.ndarray, n_features: int, rng: np.random.Generator,
              fit: _ResidualFit | None = None) -> CheckResult:
    n = xs.shape[0]
    sigma_x, fallback_x = _median_bandwidth(xs, rng)
    sigma_y, fallback_y = _median_bandwidth(ys, rng)
    if 2 * n_features <= n:
        phi, c_xx, _ = _features_and_covariance(xs, sigma_x, n_features, rng)
        psi, c_yy, derivative_mean = _features_and_covariance(ys, sigma_y, n_features, rng)
        c_xy = (phi.T @ psi).astype(np.float64) / n
    else:
        phi = _fourier_features(xs, sigma_x, n_features, rng)
        psi, derivative_mean = _features_and_derivative_mean(ys, rng.standard_normal(n_features) / sigma_y)
        # More features than rows: tr(A'B B'A) = tr(AA' BB') gives the same norms
        # and traces from the smaller n x n Gram matrices.
        c_xx = (phi @ phi.T).astype(np.float64) / n
        c_yy = (psi @ psi.T).astype(np.float64) / n
        c_xy = None
    norm_xx = float(np.einsum("ij,ij->", c_xx, c_xx))
    norm_yy = float(np.einsum("ij,ij->", c_yy, c_yy))
    cross = float(np.einsum("ij,ij->", c_xx, c_yy)) if c_xy is None else float(np.einsum("ij,ij->", c_xy, c_xy))
    statistic = n * cross
    effect = _normalised(cross, norm_xx, norm_yy)
    shift = None
    if fit is not None:
        shift = _fitted_coefficient_shift(_regressor_terms_rff(phi, fit),
                                          _residual_terms_rff(psi, derivative_mean, ys))
    p_value, null_note = _rff_gamma_p_value(statistic, n, float(np.trace(c_xx)), float(np.trace(c_yy)),
                                            norm_xx, norm_yy, shift)
    return CheckResult(
        name="hsic random fourier features", statistic=statistic, p_value=p_value,
        effect=effect, effect_name=_NORMALISED_HSIC, n=n, identity=CheckIdentity("hsic", null="random features"),
        note=(f"random-Fourier-feature HSIC on {n} rows with {n_features} seeded frequencies "
              f"(cosine and sine, {2 * n_features} features) per variable, statistic n*||C_xy||_F^2, "
              "gamma matched to the mean and variance of its asymptotic chi-square mixture null "
              f"(Zhang et al. 2018){_fit_note(fit)}; {_bandwidth_rows_note(n)}"
              f"{_bandwidth_note(fallback_x, fallback_y)}{null_note}"),
    )


def _check_features(n_features) -> int:
    if isinstance(n_features, bool) or int(n_features) != n_features or n_features < 1:
        raise InputError(f"n_features must be a positive whole number, got {n_features!r}")
    return int(n_features)


def hsic_rff(x, y, n_features: int = 40, seed: int = 0, residual_design=None) -> CheckResult:
    """Linear-time HSIC test of independence with random Fourier features.

    H0: x and y are independent.  The Gaussian kernels of :func:`hsic_gamma`
    are replaced by ``n_features`` seeded random frequencies per variable,
    each giving a cosine and a sine feature; the statistic is
    n * ||C_xy||_F^2 with C_xy the cross-covariance of the centred features,
    which equals n * HSIC_b for the approximate kernel.  Null: under H0 the
    statistic tends to a mixture sum_ij lambda_i eta_j chi2_1 over the
    eigenvalues of the feature covariances C_xx and C_yy; we use the gamma
    with that mixture's mean tr(C_xx) tr(C_yy) and variance
    2 ||C_xx||_F^2 ||C_yy||_F^2, which needs no eigendecomposition (the
    same two-moment idea as Gretton et al. 2008).  O(n * n_features^2) time,
    O(n * n_features + n_features^2) memory (with more features than rows
    the n x n Gram matrices are used instead, which are then smaller).

    ``residual_design``: as in :func:`hsic_gamma`; the correction of the
    null for estimated coefficients in its feature form.

    Reference: Zhang, Filippi, Gretton and Sejdinovic (2018), "Large-scale
    kernel methods for independence testing", Statistics and Computing 28;
    Rahimi and Recht (2007) for the features; Sen and Sen (2014) for the
    effect of fitted residuals.
    """
    n_features = _check_features(n_features)
    xv, yv, n = _pair(x, y, min_n=6)
    fit = _residual_fit(residual_design, yv, np.arange(n))
    xs, ys = _standardise(xv), _standardise(yv)
    if xs is None or ys is None:
        return _constant_result("hsic random fourier features", n, "x" if xs is None else "y", _NORMALISED_HSIC)
    return _hsic_rff(xs, ys, n_features, np.random.default_rng(seed), fit)


def hsic(x, y, exact_max_n: int = 2000, max_n: int = 20000, n_features: int = 40,
         permutations: int = 0, seed: int = 0, residual_design=None) -> CheckResult:
    """HSIC test of independence, choosing the method from the sample size.

    H0: x and y are independent.  With more than ``max_n`` rows, a seeded
    subsample of ``max_n`` rows is drawn first.  On the m rows that remain:
    m <= ``exact_max_n`` runs the exact test (:func:`hsic_gamma`, or
    :func:`hsic_permutation` when ``permutations`` > 0); otherwise the
    random-Fourier-feature test :func:`hsic_rff` (permutations are not
    offered there and are ignored, as the note says).  The defaults mirror
    the policy keys ``hsic_exact_max_n``, ``hsic_max_n``, ``hsic_features``
    and ``hsic_permutations``.

    ``residual_design``: y is the least-squares residual of these regressors
    (see :func:`hsic_gamma`); the gamma nulls are corrected for the
    estimated coefficients, scaled by the share of the fitted rows tested
    when a subsample is drawn.  The permutation null has no such correction
    (its note says so).

    References: Gretton et al. (2005, 2008); Zhang et al. (2018); Sen and
    Sen (2014).
    """
    for label, value, least in (("exact_max_n", exact_max_n, 1), ("max_n", max_n, 6)):
        if isinstance(value, bool) or int(value) != value or value < least:
            raise InputError(f"{label} must be a whole number of at least {least}, got {value!r}")
    if isinstance(permutations, bool) or int(permutations) != permutations or permutations < 0:
        raise InputError(f"permutations must be a non-negative whole number, got {permutations!r}")
    n_features = _check_features(n_features)
    xv, yv, n = _pair(x, y, min_n=6)
    rng = np.random.default_rng(seed)
    subsample_note = ""
    rows = np.arange(n)
    if n > max_n:
        rows = np.sort(rng.choice(n, int(max_n), replace=False))
        subsample_note = f"seeded subsample of {int(max_n)} of {n} rows; "
    fit = _residual_fit(residual_design, yv, rows)
    xv, yv = xv[rows], yv[rows]
    m = xv.shape[0]
    xs, ys = _standardise(xv), _standardise(yv)
    if xs is None or ys is None:
        result = _constant_result("hsic", m, "x" if xs is None else "y", _NORMALISED_HSIC)
        return replace(result, note=subsample_note + result.note)
    ignored_note = ""
    if m <= exact_max_n:
        if permutations > 0:
            result = _hsic_permutation(xs, ys, int(permutations), rng)
            if fit is not None:
                ignored_note = "; y is a fitted residual, and the permutation null ignores the estimated coefficients"
        else:
            result = _hsic_gamma(xs, ys, rng, fit)
    else:
        result = _hsic_rff(xs, ys, n_features, rng, fit)
        if permutations > 0:
            ignored_note = f"; {int(permutations)} permutations requested but not run above {int(exact_max_n)} rows"
    return CheckResult(
        name="hsic", statistic=result.statistic, p_value=result.p_value, effect=result.effect,
        effect_name=result.effect_name, n=result.n, identity=result.identity,
        note=subsample_note + result.note + ignored_note,
    )


def hsic_pairs(X, pairs, pair_seeds, exact_max_n: int = 2000, max_n: int = 20000, n_features: int = 40,
               permutations: int = 0, seed: int = 0, column_seeds=None,
               on_pair: Callable[[int, int], None] | None = None) -> list[CheckResult]:
    """:func:`hsic` for many pairs of columns of one table, sharing the work between pairs.

    H0 for each pair (a, b): column a and column b are independent.  Up to
    ``exact_max_n`` rows (after the ``max_n`` subsample) each pair runs
    exactly as ``hsic(X[:, a], X[:, b], seed=pair_seeds[k])``.  Above it,
    every column's bandwidth and random Fourier features are drawn once
    (seeded by ``column_seeds[c]``, by default ``seed`` and the column
    index, on one row subsample seeded by ``seed`` and shared by all pairs)
    and each pair costs one feature cross-product;
    the statistic and gamma null are those of :func:`hsic_rff`.  With k
    columns in many pairs this is about three times fewer products and k
    instead of 2 * #pairs feature evaluations.  References: Gretton et al.
    (2008); Zhang et al. (2018).

    ``on_pair(done, total)``, when given, is called as each pair is
    finished (for a progress display); it cannot change a result.
    """
    from preflight.checks._validate import as_matrix

    X = as_matrix(X, name="X", min_n=6)
    pairs = [(int(a), int(b)) for a, b in pairs]
    seeds = list(pair_seeds)
    if len(seeds) != len(pairs):
        raise InputError(f"pair_seeds has {len(seeds)} entries for {len(pairs)} pairs")
    n_features = _check_features(n_features)
    n = X.shape[0]
    m = min(n, int(max_n))
    def finished(results: list[CheckResult]) -> None:
        if on_pair is not None:
            on_pair(len(results), len(pairs))

    if m <= exact_max_n or not pairs:
        exact: list[CheckResult] = []
        for (a, b), s in zip(pairs, seeds):
            exact.append(hsic(X[:, a], X[:, b], exact_max_n=exact_max_n, max_n=max_n, n_features=n_features,
                              permutations=permutations, seed=s))
            finished(exact)
        return exact
    subsample_note = ""
    if n > max_n:
        rows = np.sort(np.random.default_rng(seed).choice(n, int(max_n), replace=False))
        X = X[rows]
        subsample_note = f"seeded subsample of {int(max_n)} of {n} rows, shared by every pair; "
    ignored_note = (f"; {int(permutations)} permutations requested but not run above {int(exact_max_n)} rows"
                    if permutations > 0 else "")
    features = _shared_column_features(X, sorted({c for pair in pairs for c in pair}), n_features, seed,
                                       column_seeds)
    out = []
    for a, b in pairs:
        features_a, features_b = features[a], features[b]
        if features_a is None or features_b is None:
            result = _constant_result("hsic", m, "x" if features_a is None else "y", _NORMALISED_HSIC)
            out.append(replace(result, note=subsample_note + result.note))
        else:
            out.append(_shared_feature_hsic(features_a, features_b, m, n_features,
                                            subsample_note, ignored_note))
        finished(out)
    return out


def _shared_column_features(X: np.ndarray, columns: list[int], n_features: int, seed: int,
                            column_seeds) -> dict[int, tuple | None]:
    """Column -> (features, trace and squared norm of their covariance, bandwidth fallback), None if constant."""
    m = X.shape[0]
    features: dict[int, tuple | None] = {}
    for c in columns:
        column = _standardise(X[:, c])
        if column is None:
            features[c] = None
            continue
        rng = np.random.default_rng([seed & 0xFFFFFFFF, c] if column_seeds is None else column_seeds[c])
        sigma, fallback = _median_bandwidth(column, rng)
        phi = _fourier_features(column, sigma, n_features, rng)
        c_self = (phi.T @ phi).astype(np.float64) / m
        features[c] = (phi, float(np.trace(c_self)), float(np.einsum("ij,ij->", c_self, c_self)), fallback)
    return features


def _shared_feature_hsic(features_a: tuple, features_b: tuple, m: int, n_features: int, subsample_note: str,
                         ignored_note: str) -> CheckResult:
    """Random-feature HSIC of one pair from the two columns' shared features (see :func:`hsic_pairs`)."""
    phi, trace_x, norm_xx, fallback_x = features_a
    psi, trace_y, norm_yy, fallback_y = features_b
    c_xy = (phi.T @ psi).astype(np.float64) / m
    cross = float(np.einsum("ij,ij->", c_xy, c_xy))
    p_value, null_note = _rff_gamma_p_value(m * cross, m, trace_x, trace_y, norm_xx, norm_yy)
    return CheckResult(
        name="hsic", statistic=m * cross, p_value=p_value, effect=_normalised(cross, norm_xx, norm_yy),
        effect_name=_NORMALISED_HSIC, n=m, identity=CheckIdentity("hsic", null="random features"),
        note=(f"{subsample_note}random-Fourier-feature HSIC on {m} rows with {n_features} seeded frequencies "
              "per column, drawn once and shared by every pair of this table, statistic n*||C_xy||_F^2, "
              "gamma matched to the mean and variance of its asymptotic chi-square mixture null "
              f"(Zhang et al. 2018); {_bandwidth_rows_note(m)}{_bandwidth_note(fallback_x, fallback_y)}"
              f"{null_note}{ignored_note}"),
    )


# --------------------------------------------------------------------------- distance correlation


def _u_centred_distances(v: np.ndarray) -> np.ndarray:
    """U-centred |v_i - v_j| (Székely and Rizzo 2014, eq. 3); zero diagonal."""
    n = v.shape[0]
    dist = np.abs(np.subtract.outer(v, v))
    sums = dist.sum(axis=0)
    total = float(sums.sum())
    dist -= sums[None, :] / (n - 2)
    dist -= sums[:, None] / (n - 2)
    dist += total / ((n - 1) * (n - 2))
    np.fill_diagonal(dist, 0.0)
    return dist


def distance_correlation(x, y, max_n: int = DCOR_MAX_N, permutations: int = 0, seed: int = 0) -> CheckResult:
    """Bias-corrected distance correlation with its t-test of independence.

    H0: x and y are independent.  R* is the bias-corrected squared distance
    correlation (U-centred distance matrices; it can be negative); with
    nu = n(n - 3)/2, T = sqrt(nu - 1) R* / sqrt(1 - R*^2) is referred to
    Student's t with nu - 1 degrees of freedom, one-sided (large T rejects).

    The t limit is derived for high dimension.  For two scalar variables
    the null of n R* is a centred chi-square mixture dominated by a few
    terms, so its right tail is heavier than the t: in our simulations
    (tests/test_checks_independence.py) the t-test rejects about 6-7 % of
    independent pairs at alpha = 0.05 and about 3-4 % at 0.01.  With
    ``permutations`` > 0 the p-value comes instead from that many seeded
    permutations of y, p = (1 + #{R*_perm >= R*}) / (1 + B), which is exact.

    O(n^2) memory, so above ``max_n`` rows a seeded subsample of ``max_n``
    rows is used and the note says so.

    Reference: Székely and Rizzo (2013), "The distance correlation t-test of
    independence in high dimension", Journal of Multivariate Analysis 117;
    Székely and Rizzo (2014), "Partial distance correlation with methods for
    dissimilarities", Annals of Statistics 42, for U-centring.
    """
    if isinstance(max_n, bool) or int(max_n) != max_n or max_n < 4:
        raise InputError(f"max_n must be a whole number of at least 4, got {max_n!r}")
    if isinstance(permutations, bool) or int(permutations) != permutations or permutations < 0:
        raise InputError(f"permutations must be a non-negative whole number, got {permutations!r}")
    xv, yv, n = _pair(x, y, min_n=4)
    rng = np.random.default_rng(seed)
    note = ""
    if n > max_n:
        rows = np.sort(rng.choice(n, int(max_n), replace=False))
        xv, yv = xv[rows], yv[rows]
        note = f"seeded subsample of {int(max_n)} of {n} rows; "
    m = xv.shape[0]
    name = "distance correlation"
    effect_name = "bias-corrected squared distance correlation"
    xs, ys = _standardise(xv), _standardise(yv)
    if xs is None or ys is None:
        result = _constant_result(name, m, "x" if xs is None else "y", effect_name)
        return replace(result, note=note + result.note)
    from scipy import stats

    a = _u_centred_distances(xs)
    b = _u_centred_distances(ys)
    cross = float(np.einsum("ij,ij->", a, b))
    denom = math.sqrt(float(np.einsum("ij,ij->", a, a)) * float(np.einsum("ij,ij->", b, b)))
    r_star = cross / denom if denom > 0 else 0.0
    r_star = min(max(r_star, -1.0), 1.0)
    dof = m * (m - 3) / 2.0 - 1.0
    if abs(r_star) >= 1.0:
        t_stat = math.copysign(math.inf, r_star)
    else:
        t_stat = math.sqrt(dof) * r_star / math.sqrt(1.0 - r_star * r_star)
    if permutations:
        # U-centring commutes with relabelling the rows, so permuting the
        # U-centred matrix of y gives the permuted statistic directly.
        tolerance = 1e-12 * max(abs(cross), 1.0)
        exceed = 0
        for _ in range(int(permutations)):
            order = rng.permutation(m)
            exceed += float(np.einsum("ij,ij->", a, b[np.ix_(order, order)])) >= cross - tolerance
        p_value = (1 + exceed) / (1 + int(permutations))
        method = (f"seeded permutation null with {int(permutations)} permutations, "
                  "p = (1 + #exceed) / (1 + B)")
    else:
        p_value = float(stats.t.sf(t_stat, dof))
        method = (f"t-test of Székely and Rizzo (2013) with {dof:g} degrees of freedom, one-sided "
                  "(a high-dimension approximation, liberal for two scalar variables)")
    return CheckResult(
        name=name, statistic=t_stat, p_value=p_value, effect=r_star, effect_name=effect_name, n=m,
        note=note + method,
    )
