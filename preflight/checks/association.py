"""Linear and monotone association between two variables: Pearson and Spearman."""

from __future__ import annotations

import math

import numpy as np

from preflight.checks._distributions import norm_sf, t_sf
from preflight.checks._validate import as_vector, same_length, unit_scaled
from preflight.errors import InputError
from preflight.results import CheckResult


def _pair(x, y, min_n: int) -> tuple[np.ndarray, np.ndarray, int]:
    xv = as_vector(x, "x", min_n=min_n)
    yv = as_vector(y, "y", min_n=min_n)
    return xv, yv, same_length(xv, yv, names=("x", "y"))


def _is_constant(v: np.ndarray, centred: np.ndarray) -> bool:
    # The mean of a constant column carries round-off, so "constant" means a
    # spread below 1e-12 of the data's magnitude rather than exactly zero
    # (v comes scaled to a largest magnitude in [0.5, 1), so this is relative).
    sd = math.sqrt(float(centred @ centred) / v.shape[0])
    return sd <= 1e-12 * float(np.abs(v).max())


def _correlation(xv: np.ndarray, yv: np.ndarray) -> float | None:
    """Pearson r from centred vectors; None when either is constant."""
    xv, yv = unit_scaled(xv), unit_scaled(yv)
    xc = xv - xv.mean()
    yc = yv - yv.mean()
    if _is_constant(xv, xc) or _is_constant(yv, yc):
        return None
    r = float(xc @ yc) / math.sqrt(float(xc @ xc) * float(yc @ yc))
    return min(max(r, -1.0), 1.0)


def _mid_ranks(values: np.ndarray) -> np.ndarray:
    """Ranks 1..n of a finite 1-D array, ties sharing the mean of their positions.

    The values of ``scipy.stats.rankdata(values)`` (method "average"): every
    rank is an integer or half-integer, exact in float64, so any correct
    computation gives the same bits; this one skips rankdata's generic
    axis, NaN and array-namespace handling.
    """
    n = values.shape[0]
    order = np.argsort(values, kind="stable")
    ordered = values[order]
    starts_group = np.empty(n, dtype=bool)
    starts_group[:1] = True
    np.not_equal(ordered[1:], ordered[:-1], out=starts_group[1:])
    ranks = np.empty(n)
    if starts_group.all():
        ranks[order] = np.arange(1.0, n + 1.0)
        return ranks
    starts = np.flatnonzero(starts_group)
    sizes = np.diff(starts, append=n)
    ranks[order] = np.repeat(starts + 1 + (sizes - 1) / 2.0, sizes)
    return ranks


def _undefined(name: str, n: int, effect_name: str, xv: np.ndarray) -> CheckResult:
    xv = unit_scaled(xv)
    which = "x" if _is_constant(xv, xv - xv.mean()) else "y"
    return CheckResult(name=name, statistic=math.nan, p_value=None, effect=None, effect_name=effect_name,
                       n=n, note=f"{which} is constant: correlation undefined")


def pearson_fisher_z(x, y, n_conditioning: int = 0) -> CheckResult:
    """Pearson correlation with the two-sided Fisher z test.

    H0: the (partial) correlation is zero.  z = atanh(r) * sqrt(n - 3 - k),
    referred to the standard normal, where k = ``n_conditioning`` is the
    number of variables already partialled out of x and y (for a partial
    correlation computed from residuals).  statistic = z, effect = r.
    Unlike ``scipy.stats.pearsonr`` (exact t-distribution under normality)
    this is the large-sample normal approximation used in constraint-based
    structure search.

    Reference: Fisher (1915), "Frequency distribution of the values of the
    correlation coefficient in samples from an indefinitely large
    population", Biometrika 10, for the transform; Fisher (1924), "The
    distribution of the partial correlation coefficient", Metron 3, for
    losing one degree of freedom per conditioning variable.
    """
    if isinstance(n_conditioning, bool) or int(n_conditioning) != n_conditioning or n_conditioning < 0:
        raise InputError(f"n_conditioning must be a non-negative whole number, got {n_conditioning!r}")
    k = int(n_conditioning)
    xv, yv, n = _pair(x, y, min_n=3)
    if n - 3 - k < 1:
        raise InputError(f"the Fisher z test needs n - 3 - n_conditioning >= 1, got n={n}, n_conditioning={k}")
    r = _correlation(xv, yv)
    if r is None:
        return _undefined("pearson fisher z", n, "Pearson r", xv)
    return _pearson_result(r, n, k)


def _pearson_result(r: float, n: int, k: int) -> CheckResult:
    name = "pearson fisher z"
    scale = math.sqrt(n - 3 - k)
    if abs(r) >= 1.0:
        z = math.copysign(math.inf, r)
        p_value = 0.0
    else:
        z = math.atanh(r) * scale
        p_value = float(2.0 * norm_sf(abs(z)))
    conditioning = f", {k} conditioning variables" if k else ""
    return CheckResult(
        name=name, statistic=z, p_value=p_value, effect=r, effect_name="Pearson r", n=n,
        note=f"z = atanh(r) sqrt(n - 3 - k) with n = {n}{conditioning}, two-sided normal p-value",
    )


def spearman(x, y) -> CheckResult:
    """Spearman rank correlation with its t-approximation test.

    H0: no monotone association (rank correlation zero).  rho is Pearson's r
    of the mid-ranks (ties get average ranks); the two-sided p-value refers
    t = rho sqrt((n - 2) / (1 - rho^2)) to Student's t with n - 2 degrees of
    freedom, as ``scipy.stats.spearmanr`` does.  statistic = effect = rho.

    Reference: Spearman (1904); Zar (1972), "Significance testing of the
    Spearman rank correlation coefficient", JASA 67, for the t
    approximation.
    """
    xv, yv, n = _pair(x, y, min_n=3)
    rho = _correlation(_mid_ranks(xv), _mid_ranks(yv))
    if rho is None:
        return _undefined("spearman", n, "Spearman rho", xv)
    return _spearman_result(rho, n)


def _spearman_result(rho: float, n: int) -> CheckResult:
    name = "spearman"
    dof = n - 2
    if abs(rho) >= 1.0:
        p_value = 0.0
    else:
        t = rho * math.sqrt(dof / ((1.0 - rho) * (1.0 + rho)))
        p_value = float(2.0 * t_sf(abs(t), dof))
    return CheckResult(
        name=name, statistic=rho, p_value=p_value, effect=rho, effect_name="Spearman rho", n=n,
        note=f"mid-ranks for ties, t-approximation with {dof} degrees of freedom, two-sided",
    )


def pairwise_associations(X, pairs) -> list[tuple[CheckResult, CheckResult]]:
    """(:func:`pearson_fisher_z`, :func:`spearman`) of each pair of columns of X, without conditioning.

    The same tests as calling the two functions pair by pair, with the
    correlation matrices of the columns and of their mid-ranks computed once:
    O(n p^2 + p n log n) instead of O(#pairs n log n).  Values agree with the
    pair-by-pair functions to round-off (tests/test_checks_direction_association.py).
    """
    from preflight.checks._validate import as_matrix

    X = unit_scaled(as_matrix(X, name="X", min_n=4))
    n = X.shape[0]
    pairs = [(int(a), int(b)) for a, b in pairs]
    used = sorted({c for pair in pairs for c in pair})
    constant = {c: _is_constant(X[:, c], X[:, c] - X[:, c].mean()) for c in used}
    varying = [c for c in used if not constant[c]]

    def correlations(columns: np.ndarray) -> np.ndarray:
        centred = columns - columns.mean(axis=0)
        norms = np.sqrt((centred * centred).sum(axis=0))
        return np.clip((centred.T @ centred) / np.outer(norms, norms), -1.0, 1.0)

    where = {c: k for k, c in enumerate(varying)}
    if varying:
        pearson = correlations(X[:, varying])
        spearman_ = correlations(np.column_stack([_mid_ranks(X[:, c]) for c in varying]))
    out = []
    for a, b in pairs:
        if constant[a] or constant[b]:
            out.append((_undefined("pearson fisher z", n, "Pearson r", X[:, a]),
                        _undefined("spearman", n, "Spearman rho", X[:, a])))
            continue
        i, j = where[a], where[b]
        out.append((_pearson_result(float(pearson[i, j]), n, 0), _spearman_result(float(spearman_[i, j]), n)))
    return out
