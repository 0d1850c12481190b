"""Structural equations as the unit of judgement (the equation stage, :mod:`preflight.equation_stage`).

Each variable is regressed on all its parents at once; its residual is its
noise estimate.  Three pure functions build on that:

* :func:`fit_equations` fits every equation (least squares with intercept,
  :func:`preflight.fit.ols`).
* :func:`residual_independence` tests a least-squares residual against the
  regressors it was fitted on, with the null calibrated for the estimated
  coefficients by the residual bootstrap of Sen and Sen (2014), or, for
  comparison, with the first-order corrected gamma null of
  :func:`preflight.checks.independence.hsic` or with no correction at all.
* :func:`judge_edge` judges one adjacent pair inside its equations: both
  variables are residualised on the other parents of either, then the edge is
  oriented when the calibrated residual independence holds in exactly one
  direction and the Hyvärinen-Smith likelihood ratio on the partial
  residuals agrees.

Results are small frozen records in the style of ``scipy.stats``: a
statistic, a p-value, an effect that does not grow with n, and n.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING

import numpy as np

from preflight.checks._validate import as_matrix, as_vector, same_length
from preflight.errors import InputError

if TYPE_CHECKING:
    from preflight.results import CheckResult

CALIBRATIONS = ("bootstrap", "first-order", "none")


# --------------------------------------------------------------------------- equations


@dataclass(frozen=True)
class StructuralEquation:
    """Least-squares fit of one variable on all its parents (with intercept)."""

    target: int
    parents: tuple[int, ...]
    coef: np.ndarray
    """Intercept first, then one coefficient per parent, in the order of ``parents``."""
    residuals: np.ndarray
    """The noise estimate: centred values when the variable has no parents."""
    r_squared: float
    n: int


def _parent_sets(parents: Sequence[Sequence[int]], p: int) -> tuple[tuple[int, ...], ...]:
    if len(parents) != p:
        raise InputError(f"parents must list one parent set per column ({p}), got {len(parents)}")
    out = []
    for j, ps in enumerate(parents):
        ps = tuple(int(i) for i in ps)
        if any(i == j or not 0 <= i < p for i in ps) or len(set(ps)) != len(ps):
            raise InputError(f"parent set of column {j} is invalid: {ps}")
        out.append(ps)
    return tuple(out)


def fit_equations(X, parents: Sequence[Sequence[int]]) -> tuple[StructuralEquation, ...]:
    """Fit x_j = c_j + b_j' x_parents(j) + e_j by least squares for every column j.

    Descriptive (no test).  ``parents[j]`` lists the column indices of j's
    parents.  A column with too few rows for its parents (n <= number of
    parents + 1) is an input error.  Reference: the linear structural
    equation model of Shimizu et al. (2006), JMLR 7.
    """
    from preflight.fit import ols

    X = as_matrix(X, name="X", min_n=3)
    n, p = X.shape
    sets = _parent_sets(parents, p)
    out = []
    for j, ps in enumerate(sets):
        if n <= len(ps) + 1:
            raise InputError(f"column {j} has {len(ps)} parents and only {n} rows")
        fit = ols(X[:, list(ps)], X[:, j])
        out.append(StructuralEquation(target=j, parents=ps, coef=fit.coef, residuals=fit.residuals,
                                      r_squared=fit.r_squared, n=n))
    return tuple(out)


_RESET, _SPLINE = "ramsey reset (equation)", "additive spline f-test (equation)"


def equation_checks(X, target: int, parents: Sequence[int], max_df: int = 10, seed: int = 0) -> tuple:
    """Checks of one structural equation x_target = c + b' x_parents + e, as ``CheckResult``s.

    In order: the five noise normality checks of
    :func:`preflight.checks.normality.normality_checks` on the residual
    (H0: Gaussian noise); Ramsey's RESET on the equation (H0: E[x_target |
    parents] is linear; powers 2 and 3 of the standardised fitted values,
    Ramsey 1969); the additive spline F-test (H0: every parent enters
    linearly, against a cubic B-spline in each parent with
    :func:`preflight.fit.spline_df` columns; effect: gain in R-squared);
    Koenker's Breusch-Pagan and White on all the parents (H0: the noise
    variance does not depend on them; Koenker 1981, White 1980).  Each of
    these four is run twice, on all rows and without the
    :func:`extreme_rows` rows of highest leverage in the parents, and
    reports the run with the larger p-value: a departure that a few
    outlying parent values carry does not count.  A variable without
    parents gets the normality checks only.  Nothing here is adjusted for
    multiplicity.
    """
    from preflight.checks.normality import NORMALITY_TESTS, normality_checks
    from preflight.checks.variance import BREUSCH_PAGAN, WHITE, auxiliary_rows_needed, white_auxiliary_columns
    from preflight.fit import exactly_fitted, leverage
    from preflight.results import not_computed

    X = as_matrix(X, name="X", min_n=8)
    target = int(target)
    sets: list[tuple[int, ...]] = [() for _ in range(X.shape[1])]
    sets[target] = tuple(int(i) for i in parents)

    def none_computed(why: str) -> tuple:
        return tuple(not_computed(name, X.shape[0], why)
                     for name in (*NORMALITY_TESTS, _RESET, _SPLINE, BREUSCH_PAGAN, WHITE))

    if sets[target] and X.shape[0] <= len(sets[target]) + 1:
        # A hypothesised graph can give a variable as many parents as it likes.
        return none_computed(f"{len(sets[target])} parents on {X.shape[0]} rows leave no residual degrees of freedom")
    equation = fit_equations(X, sets)[target]
    if equation.parents and exactly_fitted(equation.residuals, X[:, target]):
        # The collinearity screen reports the cause.
        return none_computed("the residual is zero (exact linear relation)")
    out = list(normality_checks(equation.residuals, seed=seed))
    if not equation.parents:
        return tuple(out)
    P, y, n = X[:, list(equation.parents)], X[:, target], X.shape[0]
    on_all_rows = _departure_checks(P, y, max_df)
    spared = extreme_rows(n)
    if n - spared < auxiliary_rows_needed(white_auxiliary_columns(P.shape[1])):
        return tuple(out + on_all_rows)  # too few rows to spare any: the tests on all rows stand
    kept = np.sort(np.argsort(-leverage(P), kind="stable")[spared:])
    without_extremes = _departure_checks(P[kept], y[kept], max_df)
    out += [_weaker(full, trimmed, spared) for full, trimmed in zip(on_all_rows, without_extremes)]
    return tuple(out)


def extreme_rows(n: int) -> int:
    """How many rows, those with the most extreme parent values, a departure must survive losing:
    ceil(sqrt(n) / 10), at least 1 (2 at 200 rows, 5 at 2,000, 32 at 100,000)."""
    return max(1, math.ceil(math.sqrt(n) / 10))


def _departure_checks(P: np.ndarray, y: np.ndarray, max_df: int) -> list:
    """RESET, the additive spline F-test, Breusch-Pagan and White of y on the parents P (see
    :func:`equation_checks`)."""
    from preflight.checks.linearity import _nested_f, full_rank_columns
    from preflight.checks.variance import (
        WHITE,
        auxiliary_rows_needed,
        breusch_pagan,
        white_auxiliary_columns,
        white_test,
    )
    from preflight.fit import ols, spline_df
    from preflight.results import CheckResult, not_computed

    n = P.shape[0]
    linear = ols(P, y)
    fitted = y - linear.residuals
    spread = float(fitted.std())
    s = (fitted - fitted.mean()) / (spread if spread > 0 else 1.0)
    # Built one at a time: at a million rows a design of several parents' splines is hundreds of MB.
    df = spline_df(n, max_df)
    larger = [(lambda: np.column_stack([P, s**2, s**3]), _RESET, "powers 2, 3 of the fitted values"),
              (lambda: additive_spline_design(P, range(P.shape[1]), df),
               _SPLINE, f"cubic B-spline with {df} columns per parent")]
    out = []
    for build, name, what in larger:
        fit = ols(full_rank_columns(build()), y)
        f_stat, p_value, df_num, df_den = _nested_f(linear.rss, linear.rank, fit.rss, fit.rank, n)
        out.append(CheckResult(name=name, statistic=f_stat, p_value=p_value, effect=fit.r_squared - linear.r_squared,
                               effect_name="gain in R-squared", n=n, note=f"{what}; F({df_num}, {df_den})"))
    out.append(breusch_pagan(linear.residuals, P))
    columns = white_auxiliary_columns(P.shape[1])
    if n < auxiliary_rows_needed(columns):
        # Many parents (a hypothesised graph can give any number) on few rows: the rest of the equation stands.
        out.append(not_computed(WHITE, n, f"the auxiliary regression on {columns} columns needs at least "
                                          f"{auxiliary_rows_needed(columns)} rows, got {n}"))
    else:
        out.append(white_test(linear.residuals, P))
    return out


def _weaker(full, trimmed, spared: int):
    """Of the check on all rows and the same check without the ``spared`` rows of highest leverage in the
    parents, the one with the larger p-value, its note naming both.

    Rejecting only when both reject keeps the level (the larger of two
    valid p-values is a valid p-value), and a departure that one or two
    outlying parent values carry, as heavy-tailed parents give, does not
    count as a property of the mechanism (deletion diagnostics: Belsley, Kuh
    and Welsch 1980).
    """
    if full.p_value is None or trimmed.p_value is None:
        return full
    weaker = trimmed if trimmed.p_value > full.p_value else full
    return replace(weaker, name=full.name, note=(
        f"{weaker.note}; the weaker of all {full.n} rows (p = {full.p_value:.3g}) and all but the {spared} rows "
        f"of highest leverage in the parents (p = {trimmed.p_value:.3g})"))


# --------------------------------------------------------------------------- residual independence


@dataclass(frozen=True)
class EarlyStop:
    """When a residual bootstrap may stop after its first ``first`` refits: the decision it feeds is settled.

    A sequential Monte Carlo test stops as soon as more simulation cannot
    change its answer (Besag and Clifford 1991, Biometrika 78: 301-304).
    Here the answer is "a significant dependence with a material effect",
    for the HSIC and for the spread change alike; each is settled when its
    observed effect is below the floor that would make it count
    (``hsic_floor``, ``spread_floor``: it cannot count at any p-value), or
    when its tail beyond the first refits (a gamma matched to them: see
    :func:`_settled`) is below ``clear_below`` (significant after a
    correction over fewer than 10^5 tests at any allowed alpha, with two
    orders of magnitude to spare for the error of a tail fitted to
    ``first`` draws) or its p-value (:func:`_tail_p_value`) is above
    ``clear_above`` (the default is five times alpha = 0.05; the caller
    passes its own).
    The remaining refits run only when one of the two is not settled.
    When both observed effects are below their floors before any refit, the
    decision is settled already and only ``negligible`` refits run, for the
    reported p-values.

    An earlier look after ``early`` refits settles only clear dependences:
    an effect below its floor, or a far tail below ``early_clear_below``
    (four more orders of magnitude than ``clear_below``, for the larger
    error of a gamma matched to fewer draws).  A p-value above
    ``clear_above`` waits for the look at ``first``: read from 20 draws, a
    true p-value of 0.05 would show above 0.25 in 0.26 % of tests
    (binomial tail: 5 or more of 20 draws reach it), from 50 in 5e-6.  Most anti-causal tests are
    clear after 20 refits, which is where the look pays.
    """

    first: int = 50
    negligible: int = 20
    early: int = 20
    hsic_floor: float = 0.0
    spread_floor: float = 0.0
    clear_below: float = 1e-8
    early_clear_below: float = 1e-12
    clear_above: float = 0.25

    def looks(self, hsic_effect: float, spread_effect: float, replicates: int) -> tuple[int, ...]:
        """The numbers of refits after which to decide whether to go on (each below ``replicates``)."""
        negligible = hsic_effect < self.hsic_floor and spread_effect < self.spread_floor
        return tuple(sorted({look for look in ((self.negligible,) if negligible else (self.early, self.first))
                             if look < replicates}))

    def settled(self, effect: float, p_value: float, far_tail: float | None, floor: float, refits: int) -> bool:
        """``p_value`` from :func:`_tail_p_value`; ``far_tail`` from a gamma matched to the same draws, after
        ``refits`` of them; below ``first`` (the early look) only clear dependences are settled (see the class).
        """
        if refits < self.first:
            return effect < floor or (far_tail if far_tail is not None else p_value) < self.early_clear_below
        return (effect < floor or p_value > self.clear_above
                or (far_tail if far_tail is not None else p_value) < self.clear_below)


class DegenerateResidual(InputError):
    """A residual or a tested column is constant (an exact linear relation): there is nothing to test."""


@dataclass(frozen=True)
class ResidualIndependence:
    """Test of a least-squares residual against the columns it should be independent of.

    ``p_value`` is for all tested columns jointly; ``column_p_values`` one
    per tested column.  ``effect`` is the largest normalised HSIC (in [0, 1],
    free of n) over the tested columns.
    """

    statistic: float
    p_value: float
    effect: float
    n: int
    column_statistics: tuple[float, ...]
    column_p_values: tuple[float, ...]
    column_effects: tuple[float, ...]
    calibration: str
    replicates: int
    note: str = ""
    tail_p_value: float | None = None
    """Bootstrap only: the joint p-value with the tail beyond every bootstrap statistic resolved
    (:func:`_tail_p_value`), below the counted p-value's floor 1 / (1 + replicates), as a correction over many
    tests needs; equal to ``p_value`` while a bootstrap statistic reaches the observed one."""
    spread: SpreadChange | None = None
    """Bootstrap only: does the residual's spread change with the tested columns (same bootstrap draws)."""


@dataclass(frozen=True)
class SpreadChange:
    """White-type check of a residual's spread against the tested columns, calibrated by the residual bootstrap.

    ``statistic`` (= ``effect``) is the R-squared of the squared residual on
    the tested columns and their squares; ``p_value`` is its bootstrap
    p-value with the tail beyond the largest bootstrap value resolved
    (:func:`_tail_p_value`; ``counted_p_value`` is the plain share).
    H0: the residual's variance does not change with the tested columns.
    """

    statistic: float
    p_value: float
    counted_p_value: float
    effect: float
    n: int
    note: str = ""


def _inputs(y, design, tested) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    yv = as_vector(y, name="y", min_n=8)
    D = as_matrix(design, name="design", min_n=8, allow_empty_columns=False)
    T = D if tested is None else as_matrix(tested, name="tested", min_n=8, allow_empty_columns=False)
    same_length(yv, D, T, names=("y", "design", "tested"))
    if yv.shape[0] < D.shape[1] + 8:
        raise InputError(f"{D.shape[1]} regressors need at least {D.shape[1] + 8} rows, got {yv.shape[0]}")
    return yv, D, T


def _check_whole(label: str, value, least: int) -> int:
    if isinstance(value, bool) or int(value) != value or value < least:
        raise InputError(f"{label} must be a whole number of at least {least}, got {value!r}")
    return int(value)


def residual_independence(y, design, tested=None, calibration: str = "bootstrap", replicates: int = 200,
                          n_features: int = 40, exact_max_n: int = 2000, max_n: int = 20000,
                          seed: int = 0, early_stop: EarlyStop | None = None) -> ResidualIndependence:
    """Is the least-squares residual of y on [1, design] independent of the tested columns?

    H0: y = c + design b + e with e independent of the design (then of any
    tested column that is a function of the design).  ``tested`` defaults to
    the design's columns.

    The residual is not the noise: the coefficients were fitted on the same
    rows, and HSIC's usual null for a residual against its own regressors is
    then wrong by an amount of the order of the statistic (too liberal with
    skewed noise, too conservative with symmetric noise; Sen and Sen 2014).
    ``calibration``:

    * ``"bootstrap"`` (default): the residual bootstrap of Sen and Sen
      (2014): draw e* from the centred residuals with replacement,
      rebuild y* = c + design b_hat + e*, refit, and recompute the statistic
      on the refitted residual.  The refitted residual of y* is the
      residual of e* alone, so only e* is projected.  Statistic per tested
      column: the random-Fourier-feature HSIC of
      :func:`preflight.checks.independence.hsic_rff` (n * ||C_xy||_F^2;
      with one tested column, the same number, for the same ``seed``),
      with frequencies and bandwidths held fixed across replicates, on a
      seeded subsample of ``max_n`` rows when n is larger (the fit and the
      bootstrap refits use every row).  The joint statistic is the sum of
      the per-column statistics, each divided by its bootstrap mean.
      p = (1 + #{T* >= T}) / (1 + B); ``tail_p_value`` resolves the tail
      beyond every bootstrap statistic by a log-normal fitted to them
      (:func:`_tail_p_value`), for decisions after a correction over many
      tests, where 1 / (1 + B) is too coarse.  With ``early_stop``, the
      refits stop after the first batch once the decision they feed is settled (see
      :class:`EarlyStop`); ``replicates`` then records how many ran.
    * ``"first-order"``: per column,
      ``hsic(..., residual_design=design)``, the gamma null corrected by a
      first-order expansion; joint p-value by Bonferroni over the columns.
    * ``"none"``: per column the plain ``hsic`` (the null for a true noise);
      joint p-value by Bonferroni.  Kept only to measure what calibration
      changes.

    References: Sen and Sen (2014), "Testing independence and goodness-of-fit
    in linear models", Biometrika 101: 927-942; Gretton et al. (2008);
    Zhang, Filippi, Gretton and Sejdinovic (2018) for the features.
    """
    if calibration not in CALIBRATIONS:
        raise InputError(f"calibration must be one of {', '.join(CALIBRATIONS)}, got {calibration!r}")
    replicates = _check_whole("replicates", replicates, 1)
    n_features = _check_whole("n_features", n_features, 1)
    max_n = _check_whole("max_n", max_n, 8)
    yv, D, T = _inputs(y, design, tested)
    from preflight.fit import ols

    residual = ols(D, yv).residuals
    if calibration != "bootstrap":
        return _gamma_calibrated(residual, D, T, calibration, n_features, exact_max_n, max_n, seed)
    return _bootstrap_calibrated(residual, D, T, replicates, n_features, max_n, seed, early_stop)


def _gamma_calibrated(residual, D, T, calibration, n_features, exact_max_n, max_n, seed) -> ResidualIndependence:
    from preflight.checks.independence import hsic

    results = [hsic(T[:, k], residual, exact_max_n=exact_max_n, max_n=max_n, n_features=n_features,
                    seed=seed + k, residual_design=D if calibration == "first-order" else None)
               for k in range(T.shape[1])]
    p_values = tuple(1.0 if r.p_value is None else float(r.p_value) for r in results)
    effects = tuple(0.0 if r.effect is None else float(r.effect) for r in results)
    statistics = tuple(float(r.statistic) for r in results)
    return ResidualIndependence(
        statistic=float(sum(statistics)), p_value=min(1.0, len(p_values) * min(p_values)),
        effect=max(effects), n=results[0].n, column_statistics=statistics, column_p_values=p_values,
        column_effects=effects, calibration=calibration, replicates=0,
        note=f"HSIC per tested column ({results[0].name} null"
             f"{', first-order correction for the fitted coefficients' if calibration == 'first-order' else ''}); "
             "joint p-value by Bonferroni",
    )


def _standardised_columns(V: np.ndarray) -> np.ndarray:
    centred = V - V.mean(axis=0)
    sd = np.sqrt(np.einsum("ij,ij->j", centred, centred) / V.shape[0])
    return centred / np.where(sd > 0, sd, 1.0)


def _bootstrap_calibrated(residual, D, T, replicates, n_features, max_n, seed,
                          early_stop: EarlyStop | None = None) -> ResidualIndependence:
    from preflight.checks.independence import (
        _features_and_derivative_mean,
        _median_bandwidth,
        _orthonormal_basis,
        _standardise,
    )

    n = residual.shape[0]
    rng = np.random.default_rng(seed)
    rows = np.arange(n)
    if n > max_n:
        rows = np.sort(rng.choice(n, max_n, replace=False))
    m = rows.shape[0]
    standardised = [_standardise(v) for v in (residual[rows], *T[rows].T)]
    if any(v is None for v in standardised):
        raise DegenerateResidual("the residual or a tested column is constant: independence is undefined")
    ys, *columns = [v for v in standardised if v is not None]
    # The draw order matches hsic_rff's for one column, so its statistic is the same number.
    sigmas = [_median_bandwidth(c, rng)[0] for c in columns]
    sigma_y = _median_bandwidth(ys, rng)[0]
    omegas = [rng.standard_normal(n_features) / s for s in sigmas]
    omega_y = rng.standard_normal(n_features) / sigma_y
    phis = [_features_and_derivative_mean(c, w)[0] for c, w in zip(columns, omegas)]
    psi = _features_and_derivative_mean(ys, omega_y)[0]
    k = len(phis)
    phi_all = _reduced_features(phis)
    observed = _column_statistics(phi_all, _raw_features(ys[:, None], omega_y), k, m)[:, 0]
    norms_x = [float(np.einsum("ij,ij->", c, c)) for c in ((f.T @ f).astype(np.float64) / m for f in phis)]
    c_yy = (psi.T @ psi).astype(np.float64) / m
    norm_yy = float(np.einsum("ij,ij->", c_yy, c_yy))
    effects = tuple(float(s / m / math.sqrt(nx * norm_yy)) if nx * norm_yy > 0 else 0.0
                    for s, nx in zip(observed, norms_x))
    basis = _orthonormal_basis(D)
    centred = residual - residual.mean()
    squares_basis = _orthonormal_basis(np.column_stack([*columns, *(c * c for c in columns)]))
    spread_observed = _spread_r2(centred[rows][:, None], squares_basis)[0]
    spread_boot = np.empty(replicates)
    boot = np.empty((k, replicates))
    chunk = max(1, min(replicates, int(4e6 // (m * 2 * n_features))))
    looks = () if early_stop is None else early_stop.looks(max(effects), spread_observed, replicates)
    # The refits are drawn in blocks of ``chunk``, restarted at the last look (at ``first`` refits, as before
    # the early look), and a look inside a block uses its first columns: the early look changes no draw,
    # so a test that goes past it reports what it reported without it.
    segment = looks[-1] if looks else replicates
    blocks = [*range(0, segment, chunk), *range(segment, replicates, chunk), replicates]
    drawn: dict[int, np.ndarray] = {}

    def refit(start: int, stop: int) -> None:
        for low, high in zip(blocks[:-1], blocks[1:]):
            if high <= start or low >= stop:
                continue
            if low not in drawn:
                drawn.clear()
                drawn[low] = rng.integers(0, n, size=(n, high - low))
            first, last = max(start, low), min(stop, high)
            draws = centred[drawn[low][:, first - low:last - low]]
            draws -= draws.mean(axis=0)
            draws -= basis @ (basis.T @ draws)
            boot[:, first:last] = _column_statistics(phi_all, _raw_features(
                _standardised_columns(draws[rows]), omega_y), k, m)
            spread_boot[first:last] = _spread_r2(draws[rows], squares_basis)

    done, stopped = 0, False
    for look in looks:
        refit(done, look)
        done = look
        if early_stop is not None and _settled(early_stop, observed, boot[:, :done], max(effects),
                                               spread_observed, spread_boot[:done]):
            boot, spread_boot, replicates, stopped = boot[:, :done], spread_boot[:done], done, True
            break
    if not stopped:
        refit(done, replicates)
    joint, joint_boot = _joint(observed, boot)
    column_p = tuple(_counted_p_value(observed[c], boot[c]) for c in range(k))
    tail = _tail_p_value(joint, joint_boot)  # before the spread's: the tail-model probe records them in this order
    spread = SpreadChange(
        statistic=spread_observed, p_value=_tail_p_value(spread_observed, spread_boot),
        counted_p_value=_counted_p_value(spread_observed, spread_boot), effect=spread_observed, n=m,
        note=(f"R-squared of the squared residual on the tested column(s) and their squares (White 1980); "
              f"null from the same {replicates} residual-bootstrap refits, log-normal tail beyond the largest"))
    return ResidualIndependence(
        statistic=joint, p_value=_counted_p_value(joint, joint_boot),
        effect=max(effects), n=m, column_statistics=tuple(float(s) for s in observed),
        column_p_values=column_p, column_effects=effects, calibration="bootstrap", replicates=replicates,
        tail_p_value=tail, spread=spread,
        note=(f"random-Fourier-feature HSIC ({n_features} frequencies) per tested column on {m} of {n} rows; "
              f"null from {replicates} residual-bootstrap refits on all rows (Sen and Sen 2014)"
              + (", stopped once the decision was settled" if stopped else "")),
    )


def _settled(stop: EarlyStop, observed, boot, effect, spread_observed, spread_boot) -> bool:
    """Whether neither the joint HSIC nor the spread change can change its decision with more refits.

    Far beyond every draw, whether the p-value is below ``clear_below`` is
    read from a gamma matched to the draws' mean and variance: its tail is
    too light by a factor of 2 to 5 near 0.001 (:func:`_tail_p_value`),
    well inside the two orders of magnitude ``clear_below`` keeps to spare,
    while the log-normal's tail, fitted to 50 draws of a spread change that
    start near zero, rarely reaches 1e-8 even for an R-squared of 0.5 and
    would run every refit of every anti-causal test (3,440 instead of 1,190
    refits on a 10-variable table at 5,000 rows).
    """
    joint, joint_boot = _joint(observed, boot)
    refits = boot.shape[1]
    return (stop.settled(effect, _tail_p_value(joint, joint_boot), _gamma_tail(joint, joint_boot), stop.hsic_floor,
                         refits)
            and stop.settled(spread_observed, _tail_p_value(spread_observed, spread_boot),
                             _gamma_tail(spread_observed, spread_boot), stop.spread_floor, refits))


def _joint(observed: np.ndarray, boot: np.ndarray) -> tuple[float, np.ndarray]:
    """The joint statistic and its bootstrap draws: each column's statistic divided by its bootstrap mean,
    summed over the tested columns."""
    means = boot.mean(axis=1)
    means = np.where(means > 0, means, 1.0)
    return float((observed / means).sum()), (boot / means[:, None]).sum(axis=0)


_KEPT_EIGENVALUE = 1e-6
"""Share of the largest eigenvalue of a tested column's feature Gram matrix below which a direction is dropped."""


def _reduced_features(phis: list[np.ndarray]) -> np.ndarray:
    """Each tested column's centred features on their numerical column space, side by side (m, k * r).

    The statistic is m * ||phi^T psi / m||_F^2; with phi^T phi = V L V^T it
    equals the same with phi replaced by phi V (rotation).  Directions whose
    eigenvalue is below ``_KEPT_EIGENVALUE`` of the largest are dropped: a
    direction adds to the statistic in proportion to its eigenvalue, and
    below about 1e-6 the float32 Gram matrix cannot tell its eigenvalue from
    round-off (relative error about eps * sqrt(m), 4e-6 at 5,000 rows).
    Features of one column span 7 to 17 such directions of their 2F = 80
    (uniform to t3 columns; 35 to 49 at 1e-10), which makes every bootstrap
    product that much cheaper.  The observed and the bootstrap statistics
    use the same directions, so the test is exact for the statistic it
    computes.  Columns are padded with zeros to a common width.
    """
    reduced = []
    for phi in phis:
        values, vectors = np.linalg.eigh((phi.T @ phi).astype(np.float64))
        keep = values > _KEPT_EIGENVALUE * max(float(values[-1]), 0.0)
        keep[-1] = True
        reduced.append(phi @ vectors[:, keep].astype(np.float32))
    width = max(r.shape[1] for r in reduced)
    return np.concatenate([np.pad(r, ((0, 0), (0, width - r.shape[1]))) for r in reduced], axis=1)


def _tail_p_value(observed: float, draws: np.ndarray) -> float:
    """Monte Carlo p-value of ``observed`` against bootstrap ``draws``, resolved beyond the largest draw.

    While at least one draw reaches the observed value, the counted
    p-value (1 + #{T* >= T}) / (1 + B) is returned: it is valid at every
    level it can reach.  Beyond every draw it cannot go below 1 / (1 + B),
    too coarse after a correction over tens of tests, so the tail there is
    that of a log-normal fitted to the draws (mean and standard deviation of
    their logarithms), capped at 1 / (1 + B).  A gamma matched to the
    draws' mean and variance, used before, has too light a tail: on 3,000
    linear equations at 2,000 rows with independent noise, it rejected at
    0.001 in 0.40 % (HSIC) and 0.53 % (spread change); this rule, in 0.03 %
    and 0.10 % (``benchmarks/equations_probe.py tail-model``).  The
    log-normal's own tail is far too heavy for the spread change in the
    body (2 % at 0.05), which the counted p-value avoids.
    """
    draws = np.asarray(draws, dtype=float)
    counted = _counted_p_value(observed, draws)
    if counted > 1 / (1 + draws.shape[0]) or observed <= 0 or draws.min() <= 0:
        return counted
    logs = np.log(draws)
    spread = float(logs.std())
    if spread <= 0:
        return counted
    from scipy.special import ndtr

    return float(min(counted, ndtr((float(logs.mean()) - math.log(observed)) / spread)))


def _counted_p_value(observed: float, draws: np.ndarray) -> float:
    """(1 + #{T* >= T}) / (1 + B): the Monte Carlo p-value of ``observed`` against ``draws``."""
    return float((1 + np.count_nonzero(draws >= observed)) / (1 + draws.shape[0]))


def _gamma_tail(observed: float, draws: np.ndarray) -> float | None:
    """P(G >= observed) for a gamma G with the mean and variance of the draws (None when they do not vary)."""
    variance = float(draws.var())
    centre = float(draws.mean())
    if variance <= 0 or centre <= 0:
        return None
    from scipy import stats

    return float(stats.gamma.sf(observed, centre**2 / variance, scale=variance / centre))


def _spread_r2(residuals: np.ndarray, basis: np.ndarray) -> np.ndarray:
    """R-squared of each column's centred square on an orthonormal basis of centred regressors."""
    squares = residuals * residuals
    squares -= squares.mean(axis=0)
    total = np.einsum("ij,ij->j", squares, squares)
    explained = basis.T @ squares
    return np.where(total > 0, np.einsum("ij,ij->j", explained, explained) / np.where(total > 0, total, 1.0), 0.0)


def _raw_features(U: np.ndarray, omega: np.ndarray) -> np.ndarray:
    """Uncentred, unscaled cosine and sine features of every column of U: (2, m, b, F), float32.

    They need no centring: they only meet the centred features of the
    tested columns in a cross-covariance.  The cosines and the sines are
    each written to a contiguous block: numpy's vectorised float32
    trigonometry takes about a third longer into interleaved halves;
    the 1 / sqrt(F) scale is applied once, to the statistic
    (:func:`_column_statistics`).
    """
    angles = np.multiply.outer(U.astype(np.float32), omega.astype(np.float32))
    out = np.empty((2,) + angles.shape, dtype=np.float32)
    np.cos(angles, out=out[0])
    np.sin(angles, out=out[1])
    return out


def _column_statistics(phi_all: np.ndarray, features: np.ndarray, k: int, m: int) -> np.ndarray:
    """m * ||C_xy||_F^2 for each tested column (rows) and each residual (columns): (k, b).

    ``features`` from :func:`_raw_features`; their cosine and sine blocks
    add their squared cross-covariances, and the scale 1 / F of the
    squared features is applied here.
    """
    _, _, b, f = features.shape
    cross = np.matmul(phi_all.T, features.reshape(2, m, b * f)).astype(np.float64)
    cross *= cross
    return cross.reshape(2, k, phi_all.shape[1] // k, b, f).sum(axis=(0, 2, 4)) / (m * f)


# --------------------------------------------------------------------------- one edge inside its equations


@dataclass(frozen=True)
class EdgeJudgement:
    """Orientation of the adjacent pair (i, j) judged inside the structural equations.

    ``orientation`` is ``"i->j"``, ``"j->i"`` or ``"undetermined"``.
    ``forward`` tests the residual of j on i (and the other parents) against
    i's partial residual; ``backward`` the same with i and j swapped.
    ``likelihood_ratio`` > 0 favours i -> j.
    """

    orientation: str
    forward: ResidualIndependence
    backward: ResidualIndependence
    likelihood_ratio: float
    conditioning: tuple[int, ...]
    n: int
    reason: str
    forward_spread: tuple = ()
    """Spread checks of the forward residual against i's partial residual (``CheckResult``s, see
    :func:`_spread_checks`)."""
    backward_spread: tuple = ()
    """The same for the backward residual against j's partial residual."""
    partial_correlation: CheckResult | None = None
    """Fisher z test of the correlation of the partial residuals u_i and u_j (the partial correlation of i
    and j given the other parents; a ``CheckResult``), or None when the rows are too few for it."""
    forward_normality: tuple = ()
    """The noise normality checks of the forward residual
    (:func:`preflight.checks.normality.normality_checks`)."""
    backward_normality: tuple = ()
    """The same for the backward residual."""


def _rejects(result, alpha: float, min_effect: float) -> bool:
    return result.p_value is not None and result.p_value < alpha and (result.effect or 0.0) >= min_effect


def _spread_checks(test: ResidualIndependence, residual: np.ndarray, regressor: np.ndarray) -> tuple:
    """Does the residual's spread change with the regressor, as ``CheckResult``s: a changing spread is
    dependence HSIC can miss at moderate n (a hidden common cause of two symmetric variables leaves little
    else).  From the test's residual bootstrap when it ran one (White's auxiliary R-squared, its null
    simulated with the regressor fixed, which heavy-tailed regressors need: the chi-squared null rejected 4 of
    30 Laplace pairs at 1,000 rows), else Koenker's Breusch-Pagan and White."""
    if test.spread is not None:
        return (_bootstrap_white(test.spread),)
    from preflight.checks.variance import breusch_pagan, white_test

    column = regressor[:, None]
    return breusch_pagan(residual, column), white_test(residual, column)


def _bootstrap_white(spread: SpreadChange) -> CheckResult:
    """White's auxiliary R-squared with its null from a residual bootstrap, as a ``CheckResult``."""
    from preflight.results import CheckResult

    return CheckResult(name="white", statistic=spread.statistic, p_value=spread.p_value, effect=spread.effect,
                       effect_name="auxiliary R-squared", n=spread.n,
                       note=f"{spread.note}; counted p = {spread.counted_p_value:.4g}")


def judge_edge(X, i: int, j: int, parents: Sequence[Sequence[int]], alpha: float = 0.05, min_effect: float = 0.0,
               calibration: str = "bootstrap", replicates: int = 200, n_features: int = 40,
               exact_max_n: int = 2000, max_n: int = 20000, seed: int = 0,
               min_spread_effect: float | None = None, early_stop: EarlyStop | None = None,
               normality_max_n: int = 5000) -> EdgeJudgement:
    """Orient the adjacent pair i - j from their structural equations.

    Z = (parents(i) | parents(j)) minus {i, j}: the other parents of either
    side.  Under i -> j with these parent sets, the partial residuals
    u_i, u_j of i and j on Z follow the two-variable model u_j = b u_i + e_j
    with e_j independent of u_i (Frisch-Waugh-Lovell).  Forward: j on
    [i, Z], its residual tested against u_i; backward: i on [j, Z] against
    u_j (:func:`residual_independence`, calibrated as asked).  Oriented
    i -> j when the forward residual is not rejected, the backward one is
    (p < ``alpha`` and effect >= ``min_effect``), and the Hyvärinen-Smith
    likelihood ratio of (u_i, u_j) is positive; the mirror for j -> i;
    undetermined otherwise.  No multiplicity correction here: the caller's
    evidence layer owns it.  ``early_stop`` (bootstrap only) lets each
    test stop its refits once its decision is settled.  Beside the
    orientation, ``partial_correlation`` tests whether u_i and u_j are
    correlated at all (H0: the partial correlation of i and j given Z is
    zero; Fisher z with |Z| degrees of freedom spent): an adjacency that the
    skeleton search kept but that shows no partial correlation inside the
    equations has no support there.  ``forward_normality`` and
    ``backward_normality`` test each residual for Gaussian shape (H0: an iid
    normal sample; Shapiro-Wilk on at most ``normality_max_n`` rows): with
    i -> j the forward residual estimates j's noise, so when both look
    Gaussian the linear non-Gaussian model cannot orient the pair.  The
    marginal residual of j on i alone carries j's other parents too, whose
    sum can look Gaussian when the noise is not.

    References: Hyvärinen and Smith (2013), JMLR 14 (likelihood ratio);
    Shimizu et al. (2006) (identifiability); Sen and Sen (2014)
    (calibration); Fisher (1924) (partial correlation).
    """
    from preflight.checks.association import pearson_fisher_z
    from preflight.checks.direction import pairwise_likelihood_ratio
    from preflight.fit import residualize

    X = as_matrix(X, name="X", min_n=8)
    p = X.shape[1]
    sets = _parent_sets(parents, p)
    i, j = int(i), int(j)
    if i == j or not (0 <= i < p and 0 <= j < p):
        raise InputError(f"i and j must be two different column indices below {p}, got {i} and {j}")
    if not 0 < alpha < 1 or not 0 <= min_effect <= 1:
        raise InputError(f"alpha must lie in (0, 1) and min_effect in [0, 1], got {alpha} and {min_effect}")
    Z = tuple(sorted((set(sets[i]) | set(sets[j])) - {i, j}))
    Zm = X[:, list(Z)] if Z else None
    u_i, u_j = residualize(X[:, i], Zm), residualize(X[:, j], Zm)

    def test(y: np.ndarray, design: np.ndarray, tested: np.ndarray, test_seed: int) -> ResidualIndependence:
        return residual_independence(y, design, tested=tested, calibration=calibration, replicates=replicates,
                                     n_features=n_features, exact_max_n=exact_max_n, max_n=max_n, seed=test_seed,
                                     early_stop=early_stop)

    forward = test(X[:, j], X[:, [i, *Z]], u_i, seed)
    backward = test(X[:, i], X[:, [j, *Z]], u_j, seed + 1)
    ratio = pairwise_likelihood_ratio(u_i, u_j).statistic
    forward_residual, backward_residual = residualize(X[:, j], X[:, [i, *Z]]), residualize(X[:, i], X[:, [j, *Z]])
    forward_spread = _spread_checks(forward, forward_residual, u_i)
    backward_spread = _spread_checks(backward, backward_residual, u_j)
    spread_floor = 2.0 if min_spread_effect is None else min_spread_effect  # above any R-squared: never counts
    forward_out = _rejects(forward, alpha, min_effect) or any(_rejects(r, alpha, spread_floor) for r in forward_spread)
    backward_out = (_rejects(backward, alpha, min_effect)
                    or any(_rejects(r, alpha, spread_floor) for r in backward_spread))
    if not forward_out and backward_out and ratio > 0:
        orientation, reason = "i->j", "residual independent only with i as cause; likelihood ratio agrees"
    elif forward_out and not backward_out and ratio < 0:
        orientation, reason = "j->i", "residual independent only with j as cause; likelihood ratio agrees"
    elif forward_out and backward_out:
        orientation, reason = "undetermined", "residual dependent in both directions"
    elif not forward_out and not backward_out:
        orientation, reason = "undetermined", "residual independent in both directions"
    else:
        orientation, reason = "undetermined", "likelihood ratio disagrees with residual independence"
    partial = pearson_fisher_z(u_i, u_j, n_conditioning=len(Z)) if X.shape[0] - 3 - len(Z) >= 1 else None
    return EdgeJudgement(orientation=orientation, forward=forward, backward=backward,
                         likelihood_ratio=float(ratio), conditioning=Z, n=X.shape[0], reason=reason,
                         forward_spread=forward_spread, backward_spread=backward_spread,
                         partial_correlation=partial,
                         forward_normality=_shape_checks(forward_residual, X[:, j], normality_max_n, seed),
                         backward_normality=_shape_checks(backward_residual, X[:, i], normality_max_n, seed + 1))


def _shape_checks(residual: np.ndarray, response: np.ndarray, max_n: int, seed: int) -> tuple:
    """The normality checks of an edge residual; "not computed" where the regression fits exactly."""
    from preflight.checks.normality import NORMALITY_TESTS, normality_checks
    from preflight.fit import exactly_fitted
    from preflight.results import not_computed

    if exactly_fitted(residual, response):
        return tuple(not_computed(name, residual.shape[0], "the residual is zero (exact linear relation)")
                     for name in NORMALITY_TESTS)
    return normality_checks(residual, max_n=max_n, seed=seed)


# --------------------------------------------------------------------------- one edge of a bent equation


@dataclass(frozen=True)
class SplineEdgeJudgement:
    """The pair i - j, where i is a parent of j, tested for an additive-noise model both ways with every
    parent entered as a spline (:func:`judge_edge_with_splines`).

    ``forward``: j on splines of all its parents, the residual tested
    against i; ``backward``: i on splines of j and of i's other parents, the
    residual tested against j.  Each spread tuple holds White's auxiliary
    R-squared from the same bootstrap (:func:`_bootstrap_white`).
    """

    forward: ResidualIndependence
    backward: ResidualIndependence
    forward_spread: tuple
    backward_spread: tuple
    df: int
    n: int


def additive_spline_design(X: np.ndarray, columns: Sequence[int], df: int) -> np.ndarray:
    """Cubic B-splines with ``df`` columns of each given column, side by side, each without its first column
    (the intercept the fit adds spans it): the design of an additive model sum_k f_k(x_k)."""
    from preflight.fit import bspline_basis

    return np.column_stack([bspline_basis(X[:, c], df)[:, 1:] for c in columns])


def judge_edge_with_splines(X, i: int, j: int, parents: Sequence[Sequence[int]], max_df: int = 10,
                            replicates: int = 200, n_features: int = 40, max_n: int = 20000, seed: int = 0,
                            early_stop: EarlyStop | None = None) -> SplineEdgeJudgement:
    """Does an additive-noise model with independent noise fit the pair i -> j or j -> i inside the equations?

    For a variable whose linear equation bends, each parent i of j is tested
    both ways with every parent as a spline.  Forward, H0: j = sum over the
    parents k of f_k(x_k) + e with e independent of i; backward, H0: i =
    g(x_j) + sum over i's other parents of g_k(x_k) + e with e independent
    of j.  Each f is a cubic regression spline with
    :func:`preflight.fit.spline_df` columns (at most ``max_df``), so each
    model is least squares on fixed basis columns and its residual is
    tested as a straight line's is (:func:`residual_independence`, the
    residual bootstrap of Sen and Sen 2014, which treats the design as
    fixed).

    A nonlinear mechanism with additive noise and the right parents leaves
    an independent residual in its causal direction (Hoyer et al. 2009; for
    several parents the additive model of Bühlmann, Peters and Ernest
    2014).  A hidden common cause of i and j generally leaves none either
    way, while a linear order that turned the hidden cause's other child
    into a parent bends the equation: this is the check that tells a bent
    equation's two readings apart.  Raises :class:`DegenerateResidual`
    when either residual or regressor is constant and
    :class:`preflight.errors.InputError` when the rows are too few for the
    splines.

    References: Hoyer et al. (2009), NeurIPS; Bühlmann, Peters and Ernest
    (2014), Annals of Statistics 42: 2526-2556; Sen and Sen (2014),
    Biometrika 101: 927-942.
    """
    from preflight.fit import spline_df

    X = as_matrix(X, name="X", min_n=8)
    p = X.shape[1]
    sets = _parent_sets(parents, p)
    i, j = int(i), int(j)
    if i not in sets[j]:
        raise InputError(f"column {i} is not a parent of column {j}")
    df = spline_df(X.shape[0], max_df)
    forward_columns = list(sets[j])
    backward_columns = [j, *(k for k in sets[i] if k != j)]

    def test(response: int, columns: list[int], tested: int, test_seed: int):
        result = residual_independence(X[:, response], additive_spline_design(X, columns, df),
                                       tested=X[:, [tested]], replicates=replicates, n_features=n_features,
                                       max_n=max_n, seed=test_seed, early_stop=early_stop)
        assert result.spread is not None  # the residual bootstrap always simulates the spread test
        return result, (_bootstrap_white(result.spread),)

    forward, forward_spread = test(j, forward_columns, i, seed)
    backward, backward_spread = test(i, backward_columns, j, seed + 1)
    return SplineEdgeJudgement(forward=forward, backward=backward, forward_spread=forward_spread,
                               backward_spread=backward_spread, df=df, n=X.shape[0])
