"""Global structure: a causal order, pruned parents, noise estimates and cross-checks.

* :func:`causal_order` -- the DirectLiNGAM search (Shimizu et al. 2011) with
  the pairwise likelihood-ratio measure of Hyvärinen & Smith (2013).
* :func:`prune_parents` -- t-tests of each variable on its predecessors,
  corrected for multiplicity across all coefficients.
* :func:`noise_estimates` -- residuals of the structural equations.
* :func:`fastica_gaussian_components` -- FastICA cross-check: how many
  independent components look Gaussian, and whether they are in fact
  independent.
* :func:`henze_zirkler` -- multivariate normality of the whole table.
* :func:`rows_needed` -- rows for Jarque-Bera to see a given noise shape.
* :func:`varsortability` -- Reisach et al. (2021): would sorting by
  marginal variance already give the order?
* :func:`spectral_confounding` -- re-exported from
  :mod:`preflight.checks.confounding`.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass
from typing import cast

import numpy as np

from preflight.checks._validate import as_matrix, unit_scaled
from preflight.checks.confounding import spectral_confounding
from preflight.errors import InputError
from preflight.fit import coefficient_standard_errors, ols, residualize
from preflight.policy import Policy
from preflight.results import CheckResult

__all__ = [
    "ComponentScreen",
    "causal_order",
    "fastica_gaussian_components",
    "henze_zirkler",
    "noise_estimates",
    "pairwise_likelihood_ratios",
    "prune_parents",
    "rows_needed",
    "spectral_confounding",
    "varsortability",
]

# ------------------------------------------------------------------ entropy approximations

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
        chosen = active[:, best].copy()
        slopes = np.where(degenerate[:k], 0.0, np.clip(rho[best], -1.0, 1.0))
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
        pairs_done += (k + 1) * k // 2
        if on_step is not None:
            on_step(pairs_done, pairs_total)
    order.extend(labels[:1])
    return tuple(order)


# ------------------------------------------------------------------ parents and noise


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


# ------------------------------------------------------------------ ICA cross-check


@dataclass(frozen=True)
class ComponentScreen:
    """FastICA components of the standardised table and what they look like.

    ``normality`` and ``dependence`` carry ``p_adjusted`` filled in here
    (Holm or BH within each of the two families), because the verdicts
    ``gaussian_like`` and ``dependent_pairs`` depend on them.
    """

    n_components: int
    gaussian_like: tuple[int, ...]
    """Components whose normality tests do not declare a material departure."""
    dependent_pairs: tuple[tuple[int, int], ...]
    """Component pairs whose adjusted HSIC p-value is below alpha with a material effect."""
    normality: tuple[tuple[CheckResult, ...], ...]
    pairs: tuple[tuple[int, int], ...]
    dependence: tuple[CheckResult, ...]
    checks: tuple[CheckResult, ...]
    """Two summary results for the report's global section."""
    converged: bool
    note: str = ""
    stable: bool = True
    """Whether FastICA's seeded starts agree on the components (see fastica_gaussian_components)."""

    @property
    def n_gaussian(self) -> int:
        return len(self.gaussian_like)

    @property
    def dependent(self) -> bool:
        return bool(self.dependent_pairs)



ICA_FIT_MAX_N = 20000
"""Rows FastICA is fitted on (a seeded subsample above); the unmixing is then applied to every row.

Not a policy key: a cost cap, not a threshold.  The unmixing of 20,000 rows
is estimated to within sampling error far below what the component tests
resolve, and every row is then transformed and tested."""

COMPONENT_DEPENDENCE_MAX_N = 5000
"""Rows on which the pairs of ICA components are tested for dependence (seeded subsample above).

Not a policy key: a cost cap (k components make k (k - 1) / 2 pairs).  The
materiality floor scales with the rows tested
(``Policy.ica_dependence_min_effect_rows`` / m), so the verdict does not
hinge on it; ``hsic_max_n`` lowers it further when smaller."""


def _pair_seed(seed: int, a: int, b: int) -> int:
    return int(np.random.SeedSequence([seed & 0xFFFFFFFF, a & 0xFFFFFFFF, b & 0xFFFFFFFF]).generate_state(1)[0])


def _same_components(S: np.ndarray, others: list[np.ndarray], min_correlation: float = 0.95) -> bool:
    """Whether every other unmixing recovers each component of S up to sign, scale and order.

    A component is recovered when some component of the other unmixing has
    |correlation| of at least ``min_correlation`` with it
    (``Policy.ica_stable_min_correlation``).
    """
    Zs = _standardise_columns(S)[0]
    for other in others:
        Zo = _standardise_columns(other)[0]
        matches = np.abs(Zs.T @ Zo / Zs.shape[0]).max(axis=1)
        if matches.min() < min_correlation:
            return False
    return True


def fastica_gaussian_components(
    X,
    policy: Policy | None = None,
    *,
    restarts: int = 8,
    max_iter: int = 1000,
    tol: float = 1e-4) -> ComponentScreen:
    """FastICA cross-check of the noise shape and of hidden common causes.

    The non-constant columns are standardised and unmixed with
    ``sklearn.decomposition.FastICA`` (``whiten="unit-variance"``, as many
    components as the covariance has rank; fitted on at most
    ``ICA_FIT_MAX_N`` rows), from ``restarts`` seeded
    starts (the first with ``random_state=policy.seed``); the unmixing with the
    largest summed log-cosh negentropy is kept.  When the starts disagree
    (some component of the kept unmixing has |correlation| below
    ``policy.ica_stable_min_correlation`` with every component of another start)
    the components are not identified, which happens when the data are
    close to Gaussian; the note says so and no pair is called dependent.

    1. Each component gets the normality battery
       (:func:`preflight.checks.normality.normality_checks`, Shapiro-Wilk on
       at most ``policy.shapiro_max_n`` values); p-values are adjusted with
       ``policy.correction`` across all components' tests together; a component is
       Gaussian-like unless :func:`~preflight.checks.normality.is_nongaussian`
       declares a material departure at ``policy.alpha`` with the shape
       floors ``policy.nongaussian_min_abs_skew`` and
       ``policy.nongaussian_min_abs_excess_kurtosis``.  Null hypothesis per test: the
       component is normal.  ICA cannot unmix more than one Gaussian source
       (Comon 1994), so two or more Gaussian-like components mean the
       linear non-Gaussian model is not identified.
    2. Every pair of components gets HSIC
       (:func:`preflight.checks.independence.hsic` under the policy's
       ``hsic_*`` settings), adjusted within that family.  Null hypothesis: the two components are independent.  A
       hidden common cause adds a source without adding an observed
       variable; the square unmixing then cannot recover independent
       components (Hoyer et al. 2008), so significant dependence points to
       a latent confounder, or to nonlinear mechanisms.  The estimated
       unmixing is only sqrt(n)-consistent, so even for a true linear
       non-Gaussian model the components keep a small real dependence,
       which HSIC detects on skewed sources (normalised HSIC up to about
       25 / n in our simulations, 3-5 variables, n = 1000-5000).  A pair
       therefore counts as dependent only when its adjusted p-value is below
       ``alpha`` AND its normalised HSIC is at least
       ``policy.ica_dependence_min_effect_rows / m``
       with m the rows HSIC runs on: at most ``COMPONENT_DEPENDENCE_MAX_N``
       (a seeded subsample shared by all pairs; k components make
       k (k - 1) / 2 pairs, so this screen would otherwise dominate the run
       time of a wide table).

    ``policy`` defaults to ``Policy()``; ``restarts``, ``max_iter`` and
    ``tol`` control the optimiser only.  Reference: Hyvärinen & Oja (2000)
    for FastICA.
    """
    import warnings

    from sklearn.decomposition import FastICA
    from sklearn.exceptions import ConvergenceWarning

    from preflight.checks.independence import hsic_pairs
    from preflight.checks.normality import is_nongaussian, normality_checks
    from preflight.evidence import rejects, with_adjusted

    policy = Policy() if policy is None else policy
    seed, alpha, correction = policy.seed, policy.alpha, policy.correction
    X = as_matrix(X, name="X", min_n=8)
    n = X.shape[0]
    Z, degenerate = _standardise_columns(X)
    Z = Z[:, ~degenerate]
    notes = []
    if degenerate.any():
        notes.append(f"{int(degenerate.sum())} constant column(s) left out")
    if Z.shape[1] == 0:
        return ComponentScreen(0, (), (), (), (), (), (), True, "; ".join(notes + ["no non-constant column"]))
    singular = np.linalg.svd(Z / math.sqrt(n), compute_uv=False)
    rank = int(np.sum(singular > 1e-10 * singular[0]))
    if rank < Z.shape[1]:
        notes.append(f"covariance rank {rank} < {Z.shape[1]} columns: {rank} components")
    # C order whatever the caller's layout: FastICA's result on weakly
    # identified data otherwise depended on the memory layout of the input.
    Z = np.ascontiguousarray(Z)
    Z_fit = Z
    if n > ICA_FIT_MAX_N:
        Z_fit = Z[np.sort(np.random.default_rng(_pair_seed(seed, -1, -1)).choice(n, ICA_FIT_MAX_N, replace=False))]
        notes.append(f"unmixing fitted on a seeded subsample of {ICA_FIT_MAX_N} rows and applied to all {n}")
    runs = []
    for restart in range(max(1, int(restarts))):
        state = seed if restart == 0 else _pair_seed(seed, -1 - restart, restart)
        ica = FastICA(n_components=rank, whiten="unit-variance", random_state=state, max_iter=max_iter, tol=tol)
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", ConvergenceWarning)
            S_run = ica.fit_transform(Z_fit)
        runs.append((_logcosh_negentropy(_standardise_columns(S_run)[0]).sum(), restart,
                     not any(issubclass(w.category, ConvergenceWarning) for w in caught), S_run, ica))
    # The most non-Gaussian unmixing is the ICA estimate (ties: earliest run).
    _, best_run, converged, S, best_ica = max(runs, key=lambda r: (r[0], -r[1]))
    if not converged:
        notes.append(f"FastICA did not converge in {max_iter} iterations (seed {seed})")
    stable = _same_components(S, [r[3] for r in runs if r[1] != best_run], policy.ica_stable_min_correlation)
    if Z_fit is not Z:
        S = best_ica.transform(Z)
    if not stable:
        notes.append(f"the unmixing differs between {len(runs)} FastICA starts: components are not identified "
                     "(too little non-Gaussianity), so their dependence is not interpreted")
    k = S.shape[1]

    # --- normality of each component, one family across all components
    normality = [normality_checks(S[:, c], max_n=policy.shapiro_max_n, seed=_pair_seed(seed, c, c))
                 for c in range(k)]
    adjusted = iter(with_adjusted([r for tests in normality for r in tests], correction))
    named = [tuple(next(adjusted).with_name(f"{r.name} (ica component {c + 1})") for r in normality[c])
             for c in range(k)]
    gaussian_like = tuple(c for c in range(k) if not is_nongaussian(
        named[c], alpha, min_abs_skew=policy.nongaussian_min_abs_skew,
        min_abs_excess_kurtosis=policy.nongaussian_min_abs_excess_kurtosis, p_key="p_adjusted"))

    # --- independence of every pair of components
    pairs = tuple((a, b) for a in range(k) for b in range(a + 1, k))
    dependence = [result.with_name(f"hsic (ica components {a + 1}, {b + 1})") for (a, b), result in zip(
        pairs, hsic_pairs(S, pairs, [_pair_seed(seed, a + 1, b + 1) for a, b in pairs],
                          exact_max_n=policy.hsic_exact_max_n,
                          max_n=min(policy.hsic_max_n, COMPONENT_DEPENDENCE_MAX_N),
                          n_features=policy.hsic_features,
                          permutations=policy.hsic_permutations, seed=_pair_seed(seed, 0, 0)))]
    dependence = with_adjusted(dependence, correction)
    tested = [m for m, r in enumerate(dependence) if r.p_adjusted is not None]
    rows_tested = min(n, policy.hsic_max_n, COMPONENT_DEPENDENCE_MAX_N)
    material = policy.ica_dependence_min_effect_rows / rows_tested
    dependent_pairs = [pairs[m] for m in tested if stable and rejects(dependence[m].p_adjusted, alpha)
                       and dependence[m].effect is not None and dependence[m].effect >= material]

    checks = [CheckResult(
        name="gaussian-like ica components", statistic=float(len(gaussian_like)), p_value=None,
        effect=len(gaussian_like) / k, effect_name="share of components", n=n,
        note=(("no material departure from normality in component(s) " + ", ".join(str(c + 1) for c in gaussian_like)
               if gaussian_like else "every component departs materially from normality")
              + f" ({correction} across {k} components' tests, alpha {alpha:g}); at most one Gaussian source "
              "is identifiable"),
    )]
    if tested:
        # tested keeps only finite p-values, each adjusted above.
        raw = [cast(float, dependence[m].p_value) for m in tested]
        adj = [cast(float, dependence[m].p_adjusted) for m in tested]
        effects = [effect for m in tested if (effect := dependence[m].effect) is not None]
        checks.append(CheckResult(
            name="ica component dependence (hsic)", statistic=float(len(dependent_pairs)),
            p_value=float(min(raw)), p_adjusted=float(min(adj)),
            effect=float(max(effects)) if effects else None, effect_name="largest normalised HSIC", n=n,
            note=(f"{len(dependent_pairs)} of {len(tested)} component pairs dependent ({correction}, alpha {alpha:g}, "
                  f"normalised HSIC at least {material:.3g}); "
                  "p-values are the smallest over pairs; dependent components suggest a hidden common cause "
                  "or nonlinear mechanisms"
                  + ("" if stable else "; not interpreted: the FastICA starts disagree on the components")),
        ))
    return ComponentScreen(
        n_components=k, gaussian_like=gaussian_like, dependent_pairs=tuple(dependent_pairs),
        normality=tuple(named), pairs=pairs, dependence=tuple(dependence), checks=tuple(checks),
        converged=converged, note="; ".join(notes), stable=stable,
    )


# ------------------------------------------------------------------ multivariate normality

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
    so).  Constant columns are left out; with fewer than two varying
    columns, or a singular covariance, no test is run (NaN statistic,
    p-value None).  Reference: Henze & Zirkler (1990), "A class of invariant
    consistent tests for multivariate normality", Commun. Statist. Theory
    Meth. 19(10).
    """
    from scipy import stats

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
    d_j = np.einsum("ij,ij->i", whitened, whitened)
    b2 = (((2 * p + 1) / 4) ** (1 / (p + 4)) * n ** (1 / (p + 4)) / math.sqrt(2)) ** 2
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
    hz = (pair_sum / n - 2.0 * (1 + b2) ** (-p / 2) * float(np.exp(-b2 / (2 * (1 + b2)) * d_j).sum())
          + n * (1 + 2 * b2) ** (-p / 2))
    a = 1 + 2 * b2
    wb = (1 + b2) * (1 + 3 * b2)
    b4, b8 = b2 * b2, b2 ** 4
    mean = 1 - a ** (-p / 2) * (1 + p * b2 / a + p * (p + 2) * b4 / (2 * a * a))
    variance = (2 * (1 + 4 * b2) ** (-p / 2)
                + 2 * a ** (-p) * (1 + 2 * p * b4 / a ** 2 + 3 * p * (p + 2) * b8 / (4 * a ** 4))
                - 4 * wb ** (-p / 2) * (1 + 3 * p * b4 / (2 * wb) + p * (p + 2) * b8 / (2 * wb ** 2)))
    log_mean = math.log(math.sqrt(mean ** 4 / (variance + mean ** 2)))
    log_sd = math.sqrt(math.log1p(variance / mean ** 2))
    p_value = float(stats.lognorm.sf(hz, log_sd, scale=math.exp(log_mean)))
    notes.append("lognormal approximation of the null distribution (Henze and Zirkler 1990)")
    return CheckResult(name="henze-zirkler", statistic=float(hz), p_value=p_value, n=n, note="; ".join(notes))


# ------------------------------------------------------------------ rows needed


def rows_needed(skewness: float, excess_kurtosis: float, alpha: float = 0.05, power: float = 0.8) -> int | None:
    """Rows the Jarque-Bera test needs to detect this skewness and excess kurtosis.

    Under a fixed alternative, JB = n (g1^2/6 + g2^2/24) is approximately
    noncentral chi-squared with 2 degrees of freedom and noncentrality
    lambda = n (skew^2/6 + exkurt^2/24) (the local-alternative
    approximation; Jarque & Bera 1987).  The function finds the lambda at
    which ``scipy.stats.ncx2`` gives ``power`` beyond the chi-squared(2)
    critical value at ``alpha`` and returns ceil(lambda / (skew^2/6 +
    exkurt^2/24)), at least 3.  None when both effects are 0 (no finite n).
    The approximation ignores that the moments' variance also changes under
    the alternative, so treat it as an order of magnitude.
    """
    for label, value in (("skewness", skewness), ("excess_kurtosis", excess_kurtosis)):
        if value is None or not math.isfinite(float(value)):
            raise InputError(f"{label} must be a finite number, got {value!r}")
    if not 0.0 < alpha < 1.0:
        raise InputError(f"alpha must lie in (0, 1), got {alpha}")
    if not alpha < power < 1.0:
        raise InputError(f"power must lie in (alpha, 1), got {power}")
    per_row = float(skewness) ** 2 / 6.0 + float(excess_kurtosis) ** 2 / 24.0
    if per_row == 0.0:
        return None
    rows = math.ceil(_noncentrality_for_power(float(alpha), float(power)) / per_row)
    return int(max(rows, 3))


@functools.lru_cache(maxsize=16)
def _noncentrality_for_power(alpha: float, power: float) -> float:
    """The lambda at which chi-squared(2, lambda) exceeds its null alpha critical value with probability ``power``.

    It depends on alpha and power only, and a report asks for it once per
    variable with the same two, so the root search (some 16 noncentral
    chi-squared evaluations) runs once per process.
    """
    from scipy import optimize, stats

    critical = stats.chi2.isf(alpha, 2)

    def shortfall(lam: float) -> float:
        return float(stats.ncx2.sf(critical, 2, lam)) - power

    upper = 1.0
    while shortfall(upper) < 0:
        upper *= 2.0
    return optimize.brentq(shortfall, 0.0, upper, xtol=1e-10)


# ------------------------------------------------------------------ sortability


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
