"""Direction of effect between two variables under the linear non-Gaussian model.

Hyvärinen and Smith (2013), "Pairwise likelihood ratios for estimation of
non-Gaussian structural equation models", JMLR 14: 111-152.
"""

from __future__ import annotations

import math

import numpy as np

from preflight.checks._validate import as_vector, same_length, unit_scaled
from preflight.errors import InputError
from preflight.results import CheckResult

DENSITIES = ("entropy", "auto", "super-gaussian", "sub-gaussian")

_NAME = "pairwise likelihood ratio"


def pairwise_likelihood_ratio(x, y, density: str = "entropy") -> CheckResult:
    """Hyvärinen-Smith pairwise likelihood ratio of x -> y against y -> x.

    H0 (descriptive, no p-value): neither direction is favoured; R = 0.

    With x and y standardised (mean 0, population sd 1) and rho their
    correlation, the first-order approximation of the average
    log-likelihood ratio log L(x -> y) - log L(y -> x) is

        R = rho * mean(x * g(y) - g(x) * y),

    where g = -d/du log p(u) is the score of a model density for the
    standardised independent components.  The paper's robust choice models
    sparse (super-Gaussian) components with log p(u) = -log cosh(u) + const,
    so g(u) = tanh(u).  For sub-Gaussian components that model has the
    wrong shape and the sign of R comes out reversed; with the score
    g(u) = u - tanh(u) of a sub-Gaussian model (as in extended infomax, Lee,
    Girolami and Sejnowski 1999) the linear parts cancel and R is exactly
    the tanh version with the opposite sign.  This mirrors the paper's
    cumulant version, rho * mean(x^3 y - x y^3) multiplied by the sign of
    the kurtosis, to which the tanh version reduces for small values
    (tanh(u) ~ u - u^3/3).

    ``density``: ``"entropy"`` (the default) uses instead the general
    likelihood ratio of the paper's section 2, a difference of
    differential entropies of the variables and the two residuals, each
    entropy by Hyvärinen's (1998) log-cosh approximation
    (:func:`preflight.structure.pairwise_likelihood_ratios`); it needs no
    assumption on the sign of the kurtosis and stays right when a
    sub-Gaussian cause has super-Gaussian noise, where the first-order forms
    below can point the wrong way.  ``"super-gaussian"`` (tanh score, the
    paper's), ``"sub-gaussian"`` (flipped sign) or ``"auto"``, which takes the sign of the
    sum of the sample excess kurtoses of x and y.  Using the sum keeps
    R(x, y) = -R(y, x) exactly; it assumes both independent components have
    kurtosis of the same sign, which the note reports.

    Sign convention: R > 0 favours x -> y (x causes y); R < 0 favours
    y -> x.  statistic = effect = R; p_value is None because the paper
    gives no sampling distribution for R.
    """
    if density not in DENSITIES:
        raise InputError(f"density must be one of {', '.join(DENSITIES)}, got {density!r}")
    xv = as_vector(x, "x", min_n=3)
    yv = as_vector(y, "y", min_n=3)
    n = same_length(xv, yv, names=("x", "y"))
    xs = _standardise(xv)
    ys = _standardise(yv)
    if xs is None or ys is None:
        return CheckResult(
            name=_NAME, statistic=math.nan, p_value=None, effect=None, effect_name=_R_EFFECT, n=n,
            note=f"{'x' if xs is None else 'y'} is constant: direction undefined",
        )
    rho = float(xs @ ys) / n
    if density == "entropy":
        return _entropy_ratio(xs, ys, rho)
    return _first_order_ratio(xs, ys, rho, density)


_R_EFFECT = "likelihood ratio (R > 0: x -> y)"


def _entropy_ratio(xs: np.ndarray, ys: np.ndarray, rho: float) -> CheckResult:
    """The general likelihood ratio of standardised x and y, entropies by the log-cosh approximation."""
    from preflight.structure import pairwise_likelihood_ratios

    # Averaging both orders makes R(x, y) = -R(y, x) hold to the last bit.
    # The order (y, x) is read from the same matrix: with the columns
    # swapped every entropy term is the same number (column-wise means,
    # elementwise residuals, a symmetric correlation), so its R[0, 1] is
    # this R[1, 0], summed in the same order
    # (tests/test_checks_direction_association.py compares both).
    ratios = pairwise_likelihood_ratios(np.column_stack([xs, ys]), measure="logcosh")
    forward, backward = float(ratios[0, 1]), float(ratios[1, 0])
    ratio = (forward - backward) / 2.0
    return CheckResult(
        name=_NAME, statistic=ratio, p_value=None, effect=ratio, effect_name=_R_EFFECT, n=xs.shape[0],
        note=(f"R = H(y) + H(r_x|y) - H(x) - H(r_y|x), entropies by the log-cosh approximation; "
              f"R > 0 favours x -> y; rho = {rho:.3f}"),
    )


def _first_order_ratio(xs: np.ndarray, ys: np.ndarray, rho: float, density: str) -> CheckResult:
    """The first-order form rho * mean(x g(y) - g(x) y) with the score g of ``density``."""
    tanh_measure = rho * float(np.mean(xs * np.tanh(ys) - np.tanh(xs) * ys))
    kurtosis_x = float(np.mean(xs**4)) - 3.0
    kurtosis_y = float(np.mean(ys**4)) - 3.0
    if density == "auto":
        chosen = "sub-gaussian" if kurtosis_x + kurtosis_y < 0 else "super-gaussian"
    else:
        chosen = density
    ratio = -tanh_measure if chosen == "sub-gaussian" else tanh_measure
    score = "u - tanh(u)" if chosen == "sub-gaussian" else "tanh(u)"
    note = (f"R = rho * mean(x g(y) - g(x) y) with g(u) = {score} ({chosen} model"
            f"{', chosen from the summed excess kurtosis' if density == 'auto' else ''}); "
            f"R > 0 favours x -> y; rho = {rho:.3f}, excess kurtosis x {kurtosis_x:.2f}, y {kurtosis_y:.2f}")
    if density == "auto" and kurtosis_x * kurtosis_y < 0:
        note += "; x and y have kurtosis of opposite sign, so the density model may not fit both"
    return CheckResult(name=_NAME, statistic=ratio, p_value=None, effect=ratio, effect_name=_R_EFFECT,
                       n=xs.shape[0], note=note)


def _standardise(v: np.ndarray) -> np.ndarray | None:
    v = unit_scaled(v)  # exact: the same digits in any units, no overflow or underflow
    centred = v - v.mean()
    sd = float(np.sqrt(centred @ centred / v.shape[0]))
    if sd <= 1e-12 * float(np.abs(v).max()):
        return None
    return centred / sd
