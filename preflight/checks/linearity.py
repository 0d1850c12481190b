"""Linearity of y in x: Ramsey RESET and a regression-spline F-test.

Each check compares the straight-line least-squares fit of y on [1, x] with
a richer alternative.  The caller has already partialled out any
conditioning set, so x and y are plain 1-D arrays.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from preflight.checks._distributions import f_sf
from preflight.checks._validate import as_vector, same_length
from preflight.errors import InputError
from preflight.fit import LinearFit, RegressorDesigns, full_rank_columns, ols, spline_df
from preflight.results import CheckResult

RAMSEY_RESET = "ramsey reset"
SPLINE_F_TEST = "spline f-test"

_R2_GAIN = "R-squared gain"


def _pair(x, y, min_n: int) -> tuple[np.ndarray, np.ndarray]:
    xv = as_vector(x, name="x", min_n=min_n)
    yv = as_vector(y, name="y", min_n=min_n)
    same_length(xv, yv, names=("x", "y"))
    if np.ptp(xv) == 0:
        raise InputError("x is constant; a regression on it is undefined")
    if np.ptp(yv) == 0:
        raise InputError("y is constant; there is nothing to explain")
    return xv, yv


def _nested_f(
    rss_small: float, rank_small: int, rss_large: float, rank_large: int, n: int
) -> tuple[float, float | None, int, int]:
    """F statistic and p-value of a nested least-squares comparison."""
    df_num = rank_large - rank_small
    df_den = n - rank_large
    if df_num <= 0 or df_den <= 0:
        return math.nan, None, df_num, df_den
    if rss_large <= 0.0:
        # An exact fit of the larger model: any improvement is infinitely significant.
        return (math.inf, 0.0, df_num, df_den) if rss_small > 0.0 else (math.nan, None, df_num, df_den)
    # Round-off can make the larger model's RSS exceed the smaller one's by an ulp.
    gain = max(rss_small - rss_large, 0.0)
    f_stat = (gain / df_num) / (rss_large / df_den)
    return f_stat, float(f_sf(f_stat, df_num, df_den)), df_num, df_den


def ramsey_reset(x, y, powers: tuple[int, ...] = (2, 3)) -> CheckResult:
    """Ramsey's RESET: do powers of the fitted values improve the straight-line fit?

    Null hypothesis: E[y | x] is linear in x (with homoscedastic Gaussian
    errors the F statistic is then exactly F-distributed).  y is regressed on
    [1, x] and on [1, x, yhat^p for p in powers].  The powers are not formed
    raw: with s the fitted values standardised to mean 0 and sd 1 and
    r = mean / sd of the fitted values, yhat^p / sd^p = sum_k C(p, k) r^(p-k) s^k,
    and the k = 0, 1 terms lie in the span of [1, x] already, so the column
    sum_{k>=2} C(p, k) r^(p-k) s^k spans the same model.  F is unchanged but
    the columns stay well scaled however large the fitted values are.  For
    powers (2, ..., p) the span is that of s^2, ..., s^p, which are used.  Reference:
    Ramsey (1969).  Effect: the gain in R-squared.
    """
    powers = _reset_powers(powers)
    xv, yv = _pair(x, y, min_n=len(powers) + 3)
    return _ramsey_reset(xv, yv, powers, ols(xv, yv))


def _reset_powers(powers) -> tuple[int, ...]:
    powers = tuple(int(p) for p in powers)
    if not powers or len(set(powers)) != len(powers) or min(powers) < 2:
        raise InputError(f"powers must be distinct whole numbers of at least 2, got {powers}")
    return powers


def _ramsey_reset(xv: np.ndarray, yv: np.ndarray, powers: tuple[int, ...], linear: LinearFit) -> CheckResult:
    """:func:`ramsey_reset` on validated input, given the straight-line fit ``linear = ols(xv, yv)``."""
    n = xv.shape[0]
    fitted = yv - linear.residuals
    spread = fitted.std()
    if spread <= 1e-12 * yv.std():
        return CheckResult(name=RAMSEY_RESET, statistic=math.nan, p_value=None, effect=0.0, effect_name=_R2_GAIN,
                           n=n, note="fitted values constant (zero slope): RESET has no alternative to test")
    standardised = (fitted - fitted.mean()) / spread
    if set(powers) == set(range(2, max(powers) + 1)):
        columns = [standardised**p for p in powers]
    else:
        # A gap in the powers ties the span to the mean of the fitted values.
        ratio = float(fitted.mean()) / spread
        columns = [sum(math.comb(p, k) * ratio ** (p - k) * standardised**k for k in range(2, p + 1))
                   for p in powers]
    augmented = ols(full_rank_columns(np.column_stack([xv] + columns)), yv)
    f_stat, p_value, df_num, df_den = _nested_f(linear.rss, linear.rank, augmented.rss, augmented.rank, n)
    return CheckResult(name=RAMSEY_RESET, statistic=f_stat, p_value=p_value,
                       effect=augmented.r_squared - linear.r_squared, effect_name=_R2_GAIN, n=n,
                       note=(f"powers {', '.join(map(str, powers))} of the fitted values; "
                             f"F({df_num}, {df_den})"))


@dataclass(frozen=True)
class SplineComparison:
    """Least-squares fits of y on [1, x] and on a cubic regression spline in x."""

    df: int
    """Columns of the spline basis asked for (the spline model's parameters, intercept included)."""
    n: int
    rss_linear: float
    rss_spline: float
    rank_linear: int
    rank_spline: int
    tss: float
    f_statistic: float
    p_value: float | None
    df_num: int
    df_den: int
    usable: bool
    """False when x is too tied for the quantile-knot basis (it no longer sums to one)."""

    @property
    def r_squared_gain(self) -> float:
        return (self.rss_linear - self.rss_spline) / self.tss if self.tss > 0 else 0.0

    @property
    def delta_bic(self) -> float:
        """BIC(spline) - BIC(linear) with Gaussian likelihoods; negative favours the spline."""
        if self.rss_spline <= 0 or self.rss_linear <= 0:
            return -math.inf if self.rss_spline < self.rss_linear else math.nan
        extra_parameters = self.rank_spline - self.rank_linear
        return self.n * math.log(self.rss_spline / self.rss_linear) + extra_parameters * math.log(self.n)


def spline_comparison(x, y, df: int | None = None, max_df: int = 10) -> SplineComparison:
    """Fit the straight line and the regression spline that ``spline_f_test`` compares.

    The spline basis is :func:`preflight.fit.bspline_basis` with its first
    column dropped (the intercept stands in for it); it spans every cubic,
    so the straight line is nested in it.
    """
    xv, yv = _pair(x, y, min_n=6)
    return _spline_comparison(xv, yv, df, max_df, None, RegressorDesigns(xv))


def _spline_comparison(xv: np.ndarray, yv: np.ndarray, df: int | None, max_df: int,
                       linear: LinearFit | None, designs: RegressorDesigns) -> SplineComparison:
    """:func:`spline_comparison` on validated input; ``linear`` is ``ols(xv, yv)`` when already at hand.

    ``designs`` are those of ``xv``.
    """
    n = xv.shape[0]
    chosen = spline_df(n, max_df) if df is None else int(df)
    if chosen < 4:
        raise InputError(f"spline df must be at least 4 (a cubic), got {chosen}")
    if n < chosen + 2:
        raise InputError(f"the spline F-test with df={chosen} needs at least {chosen + 2} observations, got {n}")
    if linear is None:
        linear = ols(xv, yv)
    basis = designs.spline_basis(chosen)
    usable = bool(np.allclose(basis.sum(axis=1), 1.0, rtol=0.0, atol=1e-8))
    if not usable:
        return SplineComparison(df=chosen, n=n, rss_linear=linear.rss, rss_spline=linear.rss, rank_linear=linear.rank,
                                rank_spline=linear.rank, tss=linear.tss, f_statistic=math.nan, p_value=None,
                                df_num=0, df_den=n - linear.rank, usable=False)
    spline = designs.spline_fit(chosen, yv)
    f_stat, p_value, df_num, df_den = _nested_f(linear.rss, linear.rank, spline.rss, spline.rank, n)
    return SplineComparison(df=chosen, n=n, rss_linear=linear.rss, rss_spline=min(spline.rss, linear.rss),
                            rank_linear=linear.rank, rank_spline=spline.rank, tss=linear.tss, f_statistic=f_stat,
                            p_value=p_value, df_num=df_num, df_den=df_den, usable=True)


def spline_f_test(x, y, df: int | None = None, max_df: int = 10) -> CheckResult:
    """Nested F-test of the straight line against a cubic regression spline.

    Null hypothesis: E[y | x] is linear in x (exact F under homoscedastic
    Gaussian errors).  The spline has ``df`` columns (default
    :func:`preflight.fit.spline_df`, at most ``max_df``) with interior knots
    at quantiles of x.  Reference: the extra-sum-of-squares F-test of nested
    linear models (common practice), with regression splines after de Boor
    (1978).  Effect: gain in R-squared.  The note records df and the change
    in BIC (spline minus linear; negative favours the spline).
    """
    return _spline_f_result(spline_comparison(x, y, df=df, max_df=max_df))


def _spline_f_result(comparison: SplineComparison) -> CheckResult:
    if not comparison.usable:
        return CheckResult(name=SPLINE_F_TEST, statistic=math.nan, p_value=None, effect=0.0, effect_name=_R2_GAIN,
                           n=comparison.n, note=f"df={comparison.df}; x is too tied for quantile knots, no test")
    if comparison.p_value is None:
        return CheckResult(name=SPLINE_F_TEST, statistic=math.nan, p_value=None, effect=0.0, effect_name=_R2_GAIN,
                           n=comparison.n,
                           note=(f"df={comparison.df}; the spline adds nothing to the line "
                                 "(too few distinct x), no test"))
    return CheckResult(name=SPLINE_F_TEST, statistic=comparison.f_statistic, p_value=comparison.p_value,
                       effect=comparison.r_squared_gain, effect_name=_R2_GAIN, n=comparison.n,
                       note=(f"df={comparison.df}; F({comparison.df_num}, {comparison.df_den}); "
                             f"delta BIC (spline - linear) = {comparison.delta_bic:.6g}"))


def linearity_checks(x, y, max_df: int = 10, designs: RegressorDesigns | None = None) -> tuple[CheckResult, ...]:
    """Ramsey RESET and the spline F-test, in that order.

    Null hypothesis of both: E[y | x] is linear in x.  References: see the
    individual functions.  ``designs``, the :class:`preflight.fit.RegressorDesigns`
    of x, lets later checks on the same regressor reuse the spline it fits.
    """
    # Both tests start from the same straight-line fit of y on x; it is
    # computed once.  Validation runs as in the two functions, in their order,
    # so the same input raises the same error.
    powers = _reset_powers((2, 3))
    xv, yv = _pair(x, y, min_n=len(powers) + 3)
    linear = ols(xv, yv)
    reset = _ramsey_reset(xv, yv, powers, linear)
    xv, yv = _pair(xv, yv, min_n=6)
    designs = RegressorDesigns.of(xv, designs)
    return (reset, _spline_f_result(_spline_comparison(xv, yv, None, max_df, linear, designs)))

