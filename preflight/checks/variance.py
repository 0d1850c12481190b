"""Constant noise variance: Koenker's studentized Breusch-Pagan test and White's test.

Both regress the squared residuals on functions of the regressors and refer
n R-squared of that auxiliary regression to a chi-squared distribution.
"""

from __future__ import annotations

import numpy as np

from preflight.checks._distributions import chi2_sf
from preflight.checks._validate import as_matrix, as_vector, same_length
from preflight.errors import InputError
from preflight.fit import RegressorDesigns, full_rank_columns, ols, white_design
from preflight.results import CheckResult

BREUSCH_PAGAN = "breusch-pagan"
WHITE = "white"

_AUX_R2 = "auxiliary R-squared"


def _inputs(residuals, regressors) -> tuple[np.ndarray, np.ndarray]:
    e = as_vector(residuals, name="residuals", min_n=3)
    Z = as_matrix(regressors, name="regressors", min_n=3, allow_empty_columns=False)
    same_length(e, Z, names=("residuals", "regressors"))
    return e, Z


def auxiliary_rows_needed(columns: int) -> int:
    """Rows an auxiliary regression on ``columns`` columns needs: one residual degree of freedom beyond the
    intercept and the columns."""
    return columns + 2


def white_auxiliary_columns(k: int) -> int:
    """Columns of White's auxiliary design on k regressors before rank reduction: levels, squares, cross-products."""
    return k + k * (k + 1) // 2


def _require_rows(n: int, columns: int) -> None:
    if n < auxiliary_rows_needed(columns):
        raise InputError(f"the auxiliary regression on {columns} columns needs at least "
                         f"{auxiliary_rows_needed(columns)} observations, got {n}")


def _lagrange_multiplier(squared: np.ndarray, design: np.ndarray) -> tuple[float, float, float, int]:
    """n R^2 of the auxiliary regression on [1, design], its chi-squared p-value, R^2 and df."""
    return _lagrange_multiplier_on(squared, full_rank_columns(design))


def _lagrange_multiplier_on(squared: np.ndarray, columns: np.ndarray) -> tuple[float, float, float, int]:
    """:func:`_lagrange_multiplier` given the full-rank columns of the design."""
    aux = ols(columns, squared)
    n = squared.shape[0]
    df = aux.rank - 1
    r2 = aux.r_squared
    lm = n * r2
    p_value = float(chi2_sf(lm, df)) if df > 0 else 1.0
    return lm, p_value, r2, df


def breusch_pagan(residuals, regressors) -> CheckResult:
    """Koenker's studentized Breusch-Pagan test for heteroscedasticity.

    Null hypothesis: the error variance does not depend (linearly) on the
    regressors.  LM = n R^2 of e^2 on [1, regressors], chi-squared with as
    many df as the regressors have independent columns; studentizing by the
    sample variance of e^2 makes it valid without Gaussian errors.
    References: Breusch & Pagan (1979); Koenker (1981).  Effect: auxiliary
    R-squared.  Squared residuals without variation give LM = 0, p = 1.
    """
    e, Z = _inputs(residuals, regressors)
    _require_rows(e.shape[0], Z.shape[1])
    lm, p_value, r2, df = _lagrange_multiplier(e * e, Z)
    return CheckResult(name=BREUSCH_PAGAN, statistic=lm, p_value=p_value, effect=r2, effect_name=_AUX_R2,
                       n=int(e.shape[0]),
                       note=f"Koenker's studentized n R^2 on {Z.shape[1]} regressor(s); chi-squared({df})")


def white_test(residuals, regressors) -> CheckResult:
    """White's general test for heteroscedasticity.

    Null hypothesis: the error variance is constant, against any dependence
    on the regressors up to second order.  LM = n R^2 of e^2 on [1, levels,
    squares, cross-products], chi-squared with the auxiliary design's rank
    minus one df (a binary regressor's square repeats its level and adds
    nothing).  Reference: White (1980).  Effect: auxiliary R-squared.
    """
    return _white_test(residuals, regressors, None)


def _white_test(residuals, regressors, designs: RegressorDesigns | None) -> CheckResult:
    """:func:`white_test`; with one regressor, ``designs`` (its :class:`RegressorDesigns`) supply the design."""
    e, Z = _inputs(residuals, regressors)
    k = Z.shape[1]
    _require_rows(e.shape[0], white_auxiliary_columns(k))
    if designs is not None and k == 1:
        columns = RegressorDesigns.of(Z[:, 0], designs).white_design()
    else:
        columns = full_rank_columns(white_design(Z))
    lm, p_value, r2, df = _lagrange_multiplier_on(e * e, columns)
    return CheckResult(name=WHITE, statistic=lm, p_value=p_value, effect=r2, effect_name=_AUX_R2,
                       n=int(e.shape[0]),
                       note=(f"n R^2 on levels, squares and cross-products of {Z.shape[1]} regressor(s); "
                             f"chi-squared({df})"))


def variance_checks(residuals, regressor, designs: RegressorDesigns | None = None) -> tuple[CheckResult, ...]:
    """Breusch-Pagan (Koenker) and White for one regressor, in that order.

    With a single regressor White's auxiliary design is [1, x, x^2], so it
    also sees variance that grows with |x| symmetrically, which the linear
    Breusch-Pagan design [1, x] cannot.  Null hypothesis of both: constant
    error variance.  References: see the individual functions.  ``designs``,
    the :class:`preflight.fit.RegressorDesigns` of the regressor, let several
    residuals of one regressor share White's design.
    """
    x = as_vector(regressor, name="regressor", min_n=3)
    return (breusch_pagan(residuals, x), _white_test(residuals, x, designs))
