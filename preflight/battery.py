"""The pair battery: every assumption check, in both directions of a pair.

For a pair (x, y) with conditioning set Z, both variables are first
residualised on Z (Frisch-Waugh-Lovell: the partial slope is unchanged),
then y is regressed on x ("forward") and x on y ("reverse").  Under a linear
non-Gaussian model x -> y the forward residual is independent of x while the
reverse residual is not (Shimizu et al. 2006); with Gaussian noise both are
independent and the direction is not identifiable.

Computing the checks (:func:`run_pair_battery`) is separated from judging
them (:func:`judge_pair`), because judging needs p-values adjusted across
all pairs.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field, replace

import numpy as np

from preflight.evidence import Tagged, rejects, significant
from preflight.fit import (
    RegressorDesigns,
    bspline_basis,
    exactly_fitted,
    ols,
    residualize,
    simple_slope,
    spline_df,
)
from preflight.policy import Policy
from preflight.results import GIVEN_A_SPLINE, SPLINE_RESIDUAL, CheckResult, not_computed
from preflight.seeds import derived_seed


@dataclass(frozen=True)
class PairBattery:
    """Raw (unadjusted) checks of one pair."""

    x: str
    y: str
    adjacent: bool
    n: int
    conditioning: tuple[str, ...]
    checks: tuple[Tagged, ...]
    likelihood_ratio: float | None = None
    """Hyvärinen-Smith R on the partial residuals; > 0 favours x -> y."""
    plot_fits: PlotFits | None = field(default=None, compare=False)
    """The fits the checks made, at the plotted rows (adjacent pairs of a run that keeps samples), else None."""


@dataclass(frozen=True)
class PlotFits:
    """What the battery fitted on one adjacent pair, kept at the rows the report plots.

    Values are in the units the battery computed in (each column scaled by a
    power of two, see ``pipeline.unit_exponents``); the plots map them back.
    The partialled columns have their full-data means added back, so with no
    conditioning set they are the columns themselves.
    """

    x: str
    y: str
    x_partialled: np.ndarray
    y_partialled: np.ndarray
    y_on_x: np.ndarray
    """Residual of the straight line of y on x (both partialled): the forward checks' residual."""
    x_on_y: np.ndarray
    """Residual of the straight line of x on y: the reverse checks' residual."""
    spline_df: int
    spline_y_on_x: np.ndarray | None = None
    """Residual of the spline F-test's regression spline of y on x; None where it was not fitted."""
    spline_x_on_y: np.ndarray | None = None

    def partialled(self, name: str) -> np.ndarray:
        return self.x_partialled if name == self.x else self.y_partialled

    def residual(self, response: str) -> np.ndarray:
        """The straight-line residual of ``response`` regressed on the pair's other variable."""
        return self.y_on_x if response == self.y else self.x_on_y

    def spline_residual(self, response: str) -> np.ndarray | None:
        return self.spline_y_on_x if response == self.y else self.spline_x_on_y

    def without_splines(self) -> PlotFits:
        return replace(self, spline_y_on_x=None, spline_x_on_y=None)


def _plot_fits(x: np.ndarray, y: np.ndarray, names: tuple[str, str], partialled: tuple[np.ndarray, np.ndarray],
               residuals: dict[str, np.ndarray], designs: dict[str, RegressorDesigns] | None,
               max_df: int, rows: np.ndarray) -> PlotFits:
    """The battery's fits of an adjacent pair at ``rows``; spline residuals only when ``designs`` are given.

    The spline is the spline F-test's own fit (:meth:`RegressorDesigns.spline_fit`
    keeps it for its regressor and response).
    """
    xr, yr = partialled
    n = xr.shape[0]
    df = spline_df(n, max_df)
    splines: dict[str, np.ndarray | None] = {"forward": None, "reverse": None}
    if designs is not None and n >= df + 2:
        for role, response in (("forward", yr), ("reverse", xr)):
            if np.allclose(designs[role].spline_basis(df).sum(axis=1), 1.0, rtol=0.0, atol=1e-8):
                splines[role] = designs[role].spline_fit(df, response).residuals[rows]
    return PlotFits(x=names[0], y=names[1], x_partialled=xr[rows] + x.mean(), y_partialled=yr[rows] + y.mean(),
                    y_on_x=residuals["forward"][rows], x_on_y=residuals["reverse"][rows], spline_df=df,
                    spline_y_on_x=splines["forward"], spline_x_on_y=splines["reverse"])


@dataclass(frozen=True)
class PairFindings:
    x: str
    y: str
    adjacent: bool
    lingam_orientation: str
    anm_orientation: str
    flags: tuple[str, ...]
    facts: frozenset[str]
    checks: tuple[CheckResult, ...]
    conditioning: tuple[str, ...] = ()


def _tag(family: str | None, role: str, result: CheckResult, name: str, direction: tuple[str, str] | None = None,
         variables: tuple[str, ...] = (), variant: str | None = None, test: str | None = None) -> Tagged:
    """One pair check with its display name and its identity (:class:`preflight.results.CheckIdentity`)."""
    involved = tuple(sorted(variables or direction or ()))
    return Tagged(family, role, result.identified(scope="pair", family=family, variables=involved,
                                                  direction=direction, variant=variant, test=test, name=name))


def _hsic_kwargs(policy: Policy, seed: int) -> dict:
    return dict(
        exact_max_n=policy.hsic_exact_max_n,
        max_n=policy.hsic_max_n,
        n_features=policy.hsic_features,
        permutations=policy.hsic_permutations,
        seed=seed,
    )


@dataclass(frozen=True)
class SharedAssociation:
    """Association checks of one pair computed beforehand with many pairs at once (unconditioned).

    Any of them may be None: it is then computed with the pair's battery.
    """

    pearson: CheckResult | None = None
    spearman: CheckResult | None = None
    hsic: CheckResult | None = None

    @property
    def complete(self) -> bool:
        """All three are ready, so the pair needs no more work when it is not adjacent."""
        return self.pearson is not None and self.spearman is not None and self.hsic is not None


def association_checks(x: np.ndarray, y: np.ndarray, x_name: str, y_name: str, n_conditioning: int,
                       policy: Policy, seed: int, ready: SharedAssociation | None = None) -> list[Tagged]:
    """Pearson, Spearman and HSIC between x and y.

    ``ready`` holds results computed beforehand for the same pair (any may
    be None, which is then computed here).
    """
    from preflight.checks.association import pearson_fisher_z, spearman
    from preflight.checks.independence import hsic

    label = f"({x_name}, {y_name})"
    ready = ready if ready is not None else SharedAssociation()
    pearson_result, spearman_result, hsic_result = ready.pearson, ready.spearman, ready.hsic
    if pearson_result is None:
        pearson_result = pearson_fisher_z(x, y, n_conditioning=n_conditioning)
    if spearman_result is None:
        spearman_result = spearman(x, y)
    if hsic_result is None:
        hsic_result = hsic(x, y, **_hsic_kwargs(policy, seed))
    pair = (x_name, y_name)
    return [
        _tag("association", "pair", pearson_result, f"pearson {label}", variables=pair, test="pearson"),
        _tag("association", "pair", spearman_result, f"spearman {label}", variables=pair, test="spearman"),
        _tag("association", "pair", hsic_result, f"hsic {label}", variables=pair, test="hsic"),
    ]


SEPARATION_FAMILY = "separation given a spline"


def separation_given_spline(x: np.ndarray, y: np.ndarray, x_name: str, y_name: str, neighbour: np.ndarray,
                            neighbour_name: str, Z: np.ndarray | None, policy: Policy, seed: int) -> list[Tagged]:
    """Pearson, Spearman and HSIC between x and y once both are regressed on a cubic spline of a neighbour.

    H0 (of each test): the two residuals are not associated.  A Fisher-z
    partial correlation conditions linearly, so a chain or a fork through a
    variable that enters a mechanism nonlinearly (a saturating curve) keeps
    its two ends partially correlated, and the skeleton keeps a spurious
    edge between them.  Regressing both ends on a B-spline basis of the
    neighbour (plus ``Z``, the pair's conditioning set, linearly) and testing
    the residuals is the regression-residual test of conditional
    independence with an additive model in place of the linear one (common
    practice; B-spline basis after de Boor 1978).  A common child does not
    separate its parents this way: conditioning on it adds association.
    """
    from preflight.fit import full_rank_columns

    # The full spline_max_df, not the battery's spline_df(n): a coarser basis leaves a misfit of both ends
    # that is one function of the neighbour and correlates them (measured: 42 % rejections at nominal 5 %
    # with 5 df at 500 rows on a chain through tanh, 5.5 % with 10).
    design = bspline_basis(neighbour, min(policy.spline_max_df, max(4, neighbour.shape[0] // 20)))
    if Z is not None and Z.size:
        design = np.column_stack([design, Z])
    design = full_rank_columns(design)
    xr, yr = residualize(x, design), residualize(y, design)
    tagged = association_checks(xr, yr, x_name, y_name, design.shape[1], policy, seed)
    return [_tag(SEPARATION_FAMILY, "pair", t.result, f"{t.result.name} given a spline of {neighbour_name}",
                 variables=(x_name, y_name), variant=GIVEN_A_SPLINE)
            for t in tagged]


def _direction_checks(regressor: np.ndarray, response: np.ndarray, residual: np.ndarray, direction: tuple[str, str],
                      role: str, policy: Policy, seed: int, designs: RegressorDesigns) -> list[Tagged]:
    """Normality, linearity, spread and independence of the residual of ``direction`` = (response, regressor).

    ``residual`` is that of the straight line of response on regressor (:func:`preflight.fit.simple_slope`).
    """
    from preflight.checks.independence import hsic
    from preflight.checks.linearity import linearity_checks
    from preflight.checks.normality import normality_checks
    from preflight.checks.variance import variance_checks

    label = f"{direction[0]} on {direction[1]}"
    n = regressor.shape[0]
    if not np.std(regressor) > 0 or exactly_fitted(residual, response):
        # An exact linear relation (a duplicated or derived column) leaves no
        # noise to test; the collinearity screen reports the cause.
        why = ("the regressor is constant" if not np.std(regressor) > 0
               else "the residual is zero (exact linear relation)")
        return [_tag(None, role, not_computed("battery", n, why), f"battery ({label})", direction)]
    out: list[Tagged] = []
    for result in normality_checks(residual, max_n=policy.shapiro_max_n, seed=seed):
        out.append(_tag("noise normality", role, result, f"{result.name} ({label})", direction))
    for result in linearity_checks(regressor, response, max_df=policy.spline_max_df, designs=designs):
        out.append(_tag("linearity", role, result, f"{result.name} ({label})", direction))
    for result in variance_checks(residual, regressor, designs):
        out.append(_tag("variance", role, result, f"{result.name} ({label})", direction))
    independence = hsic(regressor, residual, **_hsic_kwargs(policy, seed))
    out.append(_tag("residual independence", role, independence, f"hsic ({label})", direction, test="hsic"))
    return out


def _spline_residual(regressor: np.ndarray, response: np.ndarray, max_df: int,
                     Z: np.ndarray | None = None) -> np.ndarray:
    basis = bspline_basis(regressor, spline_df(regressor.shape[0], max_df))[:, 1:]
    if Z is not None and Z.size:
        basis = np.column_stack([basis, Z])
    return ols(basis, response).residuals


def _spline_variance_checks(regressor: np.ndarray, response: np.ndarray, direction: tuple[str, str], role: str,
                            policy: Policy, designs: RegressorDesigns | None = None) -> list[Tagged]:
    """Koenker's Breusch-Pagan and White on the residual of the spline of the spline F-test.

    The residual of a straight line through a curve has a spread that
    follows the curvature, so where the mechanism is nonlinear its spread is
    judged on the residual of the regression spline instead (the basis of
    :func:`preflight.checks.linearity.spline_f_test`), against the regressor.
    Null hypothesis of both: the spline residual's variance does not depend
    on the regressor.  References: Breusch & Pagan (1979), Koenker (1981),
    White (1980).  No checks when x is too tied for quantile knots.
    ``designs`` are the regressor's, as handed to the spline F-test.
    """
    from preflight.checks.variance import variance_checks

    designs = RegressorDesigns.of(regressor, designs)
    n = regressor.shape[0]
    df = spline_df(n, policy.spline_max_df)
    if n < df + 2:
        return []
    basis = designs.spline_basis(df)
    if not np.allclose(basis.sum(axis=1), 1.0, rtol=0.0, atol=1e-8):
        return []
    residual = designs.spline_fit(df, response).residuals
    label = f"{direction[0]} on {direction[1]}"
    spline_note = f"; residual of a cubic regression spline (df={df})"
    return [_tag("variance", role, replace(result, note=result.note + spline_note),
                 f"{result.name} of spline residual ({label})", direction, variant=SPLINE_RESIDUAL)
            for result in variance_checks(residual, regressor, designs)]


def additive_noise_checks(x: np.ndarray, y: np.ndarray, x_name: str, y_name: str,
                          policy: Policy, seed: int, Z: np.ndarray | None = None) -> list[Tagged]:
    """RESIT-style check (Peters et al. 2014): spline residual against regressor, both ways.

    ``x`` and ``y`` are the raw columns: partialling a conditioning set out
    linearly would bend a nonlinear mechanism.  Instead the conditioning
    columns ``Z`` (the observed common causes of the pair) enter the spline
    regression of each response linearly (a partially linear model).
    """
    from preflight.checks.independence import hsic

    out = []
    for regressor, response, direction, role in ((x, y, (y_name, x_name), "forward"),
                                                 (y, x, (x_name, y_name), "reverse")):
        residual = _spline_residual(regressor, response, policy.spline_max_df, Z)
        result = hsic(regressor, residual, **_hsic_kwargs(policy, seed))
        note = (result.note + "; " if result.note else "") + "residual of a regression spline"
        out.append(_tag("additive-noise independence", role, replace(result, note=note),
                        f"hsic of spline residual ({direction[0]} on {direction[1]})", direction,
                        variant=SPLINE_RESIDUAL, test="hsic"))
    return out


BRACKET_FAMILY = "hidden-cause moments"
"""Family of the third-moment slope bracket: one test per pair whose straight lines bend."""


def _slope_bracket_check(xr: np.ndarray, yr: np.ndarray, x_name: str, y_name: str) -> Tagged:
    """Geary's third-moment slope against the bracket of the pair's least-squares slopes (partialled columns)."""
    from preflight.checks.confounding import third_moment_slope_bracket

    result = third_moment_slope_bracket(xr, yr)
    return _tag(BRACKET_FAMILY, "pair", result, f"third-moment slope bracket ({x_name}, {y_name})",
                variables=(x_name, y_name), test="third-moment-slope-bracket")


def run_pair_battery(x: np.ndarray, y: np.ndarray, x_name: str, y_name: str, Z: np.ndarray | None,
                     conditioning: tuple[str, ...], adjacent: bool, policy: Policy,
                     association: SharedAssociation | None = None, plot_rows: np.ndarray | None = None) -> PairBattery:
    """Run the battery on one pair.

    ``Z`` holds the conditioning columns (or None), partialled out of both
    variables and entering the additive-noise check's spline regressions
    linearly.  ``association`` holds checks of x and y computed beforehand
    for many pairs at once (only used when ``Z`` is empty).  With
    ``plot_rows``, an adjacent pair keeps its fits at those rows
    (:class:`PlotFits`) for the report's plots.
    """
    from preflight.checks.direction import pairwise_likelihood_ratio

    seed = derived_seed(policy.seed, x_name, y_name)
    xr = residualize(x, Z)
    yr = residualize(y, Z)
    checks = association_checks(xr, yr, x_name, y_name, len(conditioning), policy, seed,
                                ready=association if not conditioning else None)
    lr_value = None
    fits = None
    if adjacent:
        # Each direction's regressor gets its designs built once, for every check that fits on it.
        designs = {"forward": RegressorDesigns(xr), "reverse": RegressorDesigns(yr)}
        residuals = {"forward": simple_slope(xr, yr)[1], "reverse": simple_slope(yr, xr)[1]}
        checks += _direction_checks(xr, yr, residuals["forward"], (y_name, x_name), "forward", policy, seed,
                                    designs["forward"])
        checks += _direction_checks(yr, xr, residuals["reverse"], (x_name, y_name), "reverse", policy, seed,
                                    designs["reverse"])
        lr = _tag(None, "pair", pairwise_likelihood_ratio(xr, yr),
                  f"pairwise likelihood ratio ({x_name} -> {y_name} if > 0)", variables=(x_name, y_name),
                  test="pairwise-likelihood-ratio")
        lr_value = float(lr.result.statistic)
        checks.append(lr)
        linear_p = [t.result.p_value for t in checks if t.family == "linearity" and t.result.p_value is not None]
        bends = bool(linear_p) and rejects(min(linear_p), policy.alpha)
        if bends:
            checks += additive_noise_checks(x, y, x_name, y_name, policy, seed, Z)
            checks.append(_slope_bracket_check(xr, yr, x_name, y_name))
        # Only a direction whose raw linearity tests reject can be judged
        # nonlinear, so only there is the spread of the spline residual needed.
        for regressor, response, direction, role in ((xr, yr, (y_name, x_name), "forward"),
                                                     (yr, xr, (x_name, y_name), "reverse")):
            role_p = [t.result.p_value for t in checks
                      if t.family == "linearity" and t.role == role and t.result.p_value is not None]
            if role_p and rejects(min(role_p), policy.alpha):
                checks += _spline_variance_checks(regressor, response, direction, role, policy, designs[role])
        if plot_rows is not None:
            # A pair can be judged nonlinear only where its linearity tests reject: only then is a spline drawn.
            fits = _plot_fits(x, y, (x_name, y_name), (xr, yr), residuals, designs if bends else None,
                              policy.spline_max_df, plot_rows)
    return PairBattery(x=x_name, y=y_name, adjacent=adjacent, n=int(x.shape[0]),
                       conditioning=conditioning, checks=tuple(checks), likelihood_ratio=lr_value, plot_fits=fits)


# ---------------------------------------------------------------- judging

def _of(checks: list[Tagged], family: str, role: str) -> list[CheckResult]:
    return [t.result for t in checks if t.family == family and t.role == role]


def _less_dependent(checks: list[Tagged], family: str, battery: PairBattery) -> str:
    """The direction whose residual looks less dependent on its regressor in ``family``.

    Adjusted p-values tie often (Holm caps them at 1), so ties go to the
    larger raw p-value, then to the smaller effect, and only then to the
    regressor whose name sorts first: never to column order, which must not
    change a verdict.
    """
    def key(role: str) -> tuple[float, float, float]:
        results = _of(checks, family, role)
        adjusted = min((r.p_adjusted if r.p_adjusted is not None else 1.0) for r in results) if results else 1.0
        raw = min((r.p_value if r.p_value is not None else 1.0) for r in results) if results else 1.0
        effect = max((r.effect for r in results if r.effect is not None), default=0.0)
        return adjusted, raw, -effect

    forward, reverse = key("forward"), key("reverse")
    if forward != reverse:
        return "forward" if forward > reverse else "reverse"
    return "forward" if battery.x <= battery.y else "reverse"


def _spread(checks: list[Tagged], role: str, spline: bool) -> list[CheckResult]:
    """Variance checks of one direction on the straight-line residual, or on the spline residual."""
    return [r for r in _of(checks, "variance", role) if _on_spline_residual(r) == spline]


def _on_spline_residual(result: CheckResult) -> bool:
    return result.identity is not None and result.identity.variant == SPLINE_RESIDUAL


def _material_departure(results: list[CheckResult], alpha: float, floor: float) -> bool:
    return any(significant(r, alpha) and r.effect is not None and abs(r.effect) >= floor for r in results)


def nongaussian_under(results: list[CheckResult], policy: Policy) -> bool:
    """The policy's verdict on adjusted normality checks of one noise: clearly non-Gaussian (no results: False)."""
    from preflight.checks.normality import is_nongaussian

    if not results:
        return False
    return bool(is_nongaussian(results, policy.alpha,
                               min_abs_skew=policy.nongaussian_min_abs_skew,
                               min_abs_excess_kurtosis=policy.nongaussian_min_abs_excess_kurtosis,
                               p_key="p_adjusted"))


def judge_pair(battery: PairBattery, checks: list[Tagged], policy: Policy,
               noise_dependence: CheckResult | None = None) -> PairFindings:
    """Turn one pair's adjusted checks into flags, facts and an orientation.

    ``noise_dependence`` is the adjusted HSIC between the two variables'
    structural noise estimates, if the structural view computed it (see
    :func:`with_noise_dependence`).
    """
    associated = any(significant(t.result, policy.alpha) for t in checks if t.family == "association")
    flags = () if associated else ("no-association",)
    if battery.adjacent:
        findings = _judge_adjacent(battery, checks, policy, flags)
    else:
        findings = PairFindings(battery.x, battery.y, False, "undetermined", "undetermined", flags,
                                frozenset({"not-adjacent", *flags}), tuple(t.result for t in checks),
                                battery.conditioning)
    return findings if noise_dependence is None else with_noise_dependence(findings, noise_dependence, policy)


def with_noise_dependence(findings: PairFindings, noise_dependence: CheckResult, policy: Policy) -> PairFindings:
    """The findings with the adjusted HSIC between the pair's structural noise estimates judged and added.

    Dependent structural noise estimates count as a confounding signal only
    where the pair's own battery could not orient the edge: the estimates
    rest on the global order, which one nonlinear or confounded corner of
    the table can scramble, while a clean one-way independence here is
    direct evidence against a hidden common cause of this pair.
    """
    material = _material_departure([noise_dependence], policy.alpha, policy.dependence_min_hsic)
    judged = findings.checks + (replace(noise_dependence, passed=not material),)
    if noise_estimates_flag(findings, noise_dependence, policy):
        return replace(findings, flags=findings.flags + ("confounding-suspected",), checks=judged,
                       facts=findings.facts | {"confounding-suspected", "noise-estimates-dependent"})
    return replace(findings, checks=judged)


def noise_estimates_flag(findings: PairFindings, noise_dependence: CheckResult, policy: Policy) -> bool:
    """Whether the adjusted HSIC between the pair's structural noise estimates raises ``confounding-suspected``
    (:func:`with_noise_dependence`): significant with a normalised effect of at least ``dependence_min_hsic``,
    the floor of every other residual-dependence flag (without it, rows that are not i.i.d. raised it at
    effects of 0.0012 to 0.0017 on true edges, 5,000 autocorrelated rows)."""
    return bool(findings.adjacent and _material_departure([noise_dependence], policy.alpha, policy.dependence_min_hsic)
                and findings.lingam_orientation == "undetermined"
                and not {"nonlinear", "gaussian-noise", "confounding-suspected"} & set(findings.flags))


NOT_A_NOISE = ("not used as a confounding signal: a structural equation at this pair is nonlinear, so its linear "
               "noise estimate is not a noise")
"""Why a noise-dependence check at a pair judged nonlinear decides nothing."""


def with_distant_noise_dependence(findings: PairFindings, tests: Sequence[Tagged], misspecified: set[str],
                                  policy: Policy) -> PairFindings:
    """A non-adjacent pair's findings with the dependence of its noise estimates judged and added.

    The pair is flagged ``confounding-suspected`` when the HSIC between its
    noise estimates is significant after the correction across all
    non-adjacent pairs with at least ``dependence_min_hsic``, and the
    residual of each estimate on the other depends on its regressor with at
    least that floor, both ways (an intersection-union test, Berger 1982,
    corrected across the same pairs: no model with independent noise links
    the two in either direction), and their third-order cross-moments are
    not zero at ``alpha`` (a skewed common component, not a shared change of
    spread).  Not where either variable sits in a pair judged nonlinear:
    its linear noise estimate is then not a noise.  (Not withheld where a
    variable's own equation departs: a hidden cause of a variable and one of
    its estimated parents makes that equation bend or change spread.)
    """
    hsic_test, *follow_up = tests

    def material(test: Tagged) -> bool:
        return _material_departure([test.result], policy.alpha, policy.dependence_min_hsic)

    usable = not {findings.x, findings.y} & misspecified
    dependent = material(hsic_test)
    directions, shape = follow_up[:2], follow_up[2:]
    both_ways = len(directions) == 2 and all(material(t) for t in directions)
    skewed = bool(shape) and significant(shape[0].result, policy.alpha)
    judged = [replace(hsic_test.result, passed=not dependent)]
    judged += [replace(t.result, passed=not material(t)) for t in directions]
    judged += [replace(t.result, passed=not skewed) for t in shape]
    why_not = ("" if not dependent or not follow_up else
               "the residual is independent one way, as an edge the skeleton missed would leave it"
               if not both_ways else
               "no skewed common component: a shared change of spread leaves such a dependence"
               if not skewed else "")
    if not usable:
        judged = [replace(r, note=f"{r.note}; {NOT_A_NOISE}") for r in judged]
    elif why_not:
        judged[0] = replace(judged[0], note=f"{judged[0].note}; {why_not}, so not a confounding signal")
    checks = findings.checks + tuple(judged)
    if usable and dependent and both_ways and skewed and "confounding-suspected" not in findings.flags:
        return replace(findings, flags=findings.flags + ("confounding-suspected",), checks=checks,
                       facts=findings.facts | {"confounding-suspected", "noise-estimates-dependent"})
    return replace(findings, checks=checks)


def _orientations(battery: PairBattery, checks: list[Tagged], gaussian: dict[str, bool],
                  indep: dict[str, bool], policy: Policy) -> tuple[str, str]:
    """(linear non-Gaussian orientation, additive-noise orientation), each ``x->y``, ``y->x`` or undetermined.

    An additive-noise direction needs a spline residual that is independent
    of its regressor by both standards of :func:`_spline_residual_dependent`
    (HSIC, and no material change of spread): the same standard under which
    two dependent directions raise ``confounding-suspected``, so a hidden
    common cause whose only trace in one direction is a changing spread is
    not read as a curve.  The other direction must still be rejected by
    HSIC: a spread change alone there does not make an orientation.
    """
    lr = battery.likelihood_ratio or 0.0
    lingam = "undetermined"
    if not (gaussian["forward"] and gaussian["reverse"]):
        if indep["forward"] and not indep["reverse"] and lr > 0:
            lingam = "x->y"
        elif indep["reverse"] and not indep["forward"] and lr < 0:
            lingam = "y->x"
    anm = "undetermined"
    anm_checks = {role: _of(checks, "additive-noise independence", role) for role in ("forward", "reverse")}
    if anm_checks["forward"] and anm_checks["reverse"]:
        clean = {role: not _spline_residual_dependent(checks, role, policy) for role in anm_checks}
        rejected = {role: any(significant(r, policy.alpha) for r in anm_checks[role]) for role in anm_checks}
        if clean["forward"] and rejected["reverse"]:
            anm = "x->y"
        elif clean["reverse"] and rejected["forward"]:
            anm = "y->x"
    return lingam, anm


def _judge_adjacent(battery: PairBattery, checks: list[Tagged], policy: Policy,
                    flags_so_far: tuple[str, ...]) -> PairFindings:
    alpha = policy.alpha
    flags = list(flags_so_far)
    facts = {"adjacent"}
    indep = {role: not any(significant(r, alpha) for r in _of(checks, "residual independence", role))
             for role in ("forward", "reverse")}
    gaussian = {role: not nongaussian_under(_of(checks, "noise normality", role), policy)
                for role in ("forward", "reverse")}
    lingam, anm = _orientations(battery, checks, gaussian, indep, policy)

    # The favoured direction is the one whose residual the evidence says is
    # the noise: the orientation if there is one, else the one that looks
    # less dependent.  Departures in the other direction are expected.
    orientation_found = lingam if lingam != "undetermined" else anm
    if orientation_found == "x->y":
        favoured = "forward"
    elif orientation_found == "y->x":
        favoured = "reverse"
    else:
        favoured = _less_dependent(checks, "residual independence", battery)

    if gaussian["forward"] and gaussian["reverse"]:
        flags.append("gaussian-noise")
    nonlinear = _material_departure(_of(checks, "linearity", favoured), alpha, policy.nonlinear_min_r2_gain)
    # The residual of a straight line through a curve has a spread that
    # follows the curvature, so where the line does not fit, spread is
    # judged on the residual of the regression spline, in the direction the
    # spline evidence favours: the oriented one, else the one whose spline
    # residual looks less dependent on its regressor.  The anti-causal
    # regression through a saturating curve has a spread that changes by
    # construction, so the straight-line favourite is no guide here.
    spread_role = favoured
    if (nonlinear and orientation_found == "undetermined" and _of(checks, "additive-noise independence", "forward")
            and _of(checks, "additive-noise independence", "reverse")):
        spread_role = _less_dependent(checks, "additive-noise independence", battery)
    heteroscedastic = _material_departure(_spread(checks, spread_role, spline=nonlinear), alpha,
                                          policy.heteroscedastic_min_r2)
    if nonlinear:
        flags.append("nonlinear")
    if heteroscedastic:
        flags.append("heteroscedastic")
    # A non-Gaussian hidden common cause makes both regressions look like the
    # anti-causal one: residuals whose spread changes with the regressor.
    # HSIC can miss a change of spread that Breusch-Pagan or White see, so
    # either counts as dependence here.  A heteroscedastic mechanism cannot
    # be told apart from confounding at the pair level; both flags then stand.
    dependent = {role: (not indep[role]) or _material_departure(_spread(checks, role, spline=False), alpha,
                                                                 policy.confounding_spread_min_r2)
                 for role in ("forward", "reverse")}
    if dependent["forward"] and dependent["reverse"] and not nonlinear and "gaussian-noise" not in flags:
        flags.append("confounding-suspected")
        facts.add("residuals-dependent-both-ways")
    elif nonlinear and anm == "undetermined" and _no_additive_noise_model(checks, policy):
        # Neither a line nor a spline leaves an independent residual in either
        # direction: a curve alone would leave one (Hoyer et al. 2009), a
        # hidden common cause need not.
        flags.append("confounding-suspected")
        facts.add("no-independent-noise-model")
    elif nonlinear and _material_departure(_of(checks, BRACKET_FAMILY, "pair"), alpha,
                                           policy.hidden_cause_min_bracket_depth):
        # Two noisy measures of one skewed hidden cause bend each other's
        # regression, and at a few thousand rows a spline may leave a residual
        # that looks independent one way; their third-moment slope sits
        # strictly between the two least-squares slopes, where a straight
        # line never puts it.  Any additive-noise orientation is withdrawn.
        flags.append("confounding-suspected")
        facts.add("moment-slope-inside-bracket")
        anm = "undetermined"
    facts.add("lingam-oriented" if lingam != "undetermined" else "lingam-undetermined")
    facts.add("anm-oriented" if anm != "undetermined" else "anm-undetermined")
    judged = _judged_checks(checks, policy, favoured, spread_role, nonlinear)
    return PairFindings(battery.x, battery.y, True, lingam, anm, tuple(flags),
                        frozenset(facts | set(flags)), judged, battery.conditioning)


def _no_additive_noise_model(checks: list[Tagged], policy: Policy) -> bool:
    """Both spline residuals depend on their regressors."""
    return _spline_residual_dependent(checks, "forward", policy) and _spline_residual_dependent(
        checks, "reverse", policy)


def _spline_residual_dependent(checks: list[Tagged], role: str, policy: Policy) -> bool:
    """The spline residual of one direction depends on its regressor: HSIC, or a material change of spread
    (``confounding_spread_min_r2``).  False when the direction has no additive-noise checks."""
    anm = _of(checks, "additive-noise independence", role)
    return bool(anm) and (any(significant(r, policy.alpha) for r in anm) or _material_departure(
        _spread(checks, role, spline=True), policy.alpha, policy.confounding_spread_min_r2))


def _judged_checks(checks: list[Tagged], policy: Policy, favoured: str, spread_role: str,
                   nonlinear: bool) -> tuple[CheckResult, ...]:
    """Each check of an adjacent pair with ``passed`` set where it guards an assumption, None elsewhere.

    Only the favoured direction guards (the spread on the spline residual:
    the direction ``spread_role``); of the two spread checks, the one on the
    residual that matches the mechanism (straight line or spline) decides.
    """
    alpha = policy.alpha
    guard_families = {"linearity", "variance", "residual independence", "additive-noise independence"}
    judged = []
    for t in checks:
        r = t.result
        if t.family == "noise normality":
            passed = None if r.p_value is None else significant(r, alpha)
        elif t.family in guard_families and t.role in ("forward", "reverse"):
            guard_role = spread_role if t.family == "variance" and _on_spline_residual(r) else favoured
            if t.role != guard_role:
                passed = None
                r = replace(r, note=(r.note + "; " if r.note else "") +
                            "direction not favoured by the evidence: a departure here is expected "
                            "under non-Gaussian noise")
            elif t.family in ("linearity",):
                passed = not _material_departure([r], alpha, policy.nonlinear_min_r2_gain)
            elif t.family == "variance":
                if _on_spline_residual(r) != nonlinear:
                    passed = None
                    r = replace(r, note=(r.note + "; " if r.note else "") + (
                        "not the guard: the mechanism is judged nonlinear, so the spline residual's spread decides"
                        if nonlinear else
                        "not the guard: the mechanism is judged linear, so the straight-line residual's "
                        "spread decides"))
                else:
                    passed = not _material_departure([r], alpha, policy.heteroscedastic_min_r2)
            else:
                passed = not significant(r, alpha)
        else:
            passed = None
        judged.append(replace(r, passed=passed))
    return tuple(judged)
