"""Edges judged inside their structural equations (issue #17, items 1 and 2; a spike).

The pair battery regresses y on x alone, so a child's other parents stay in
its residual and read as nonlinearity, changing spread and confounding.
Here each variable is fitted on all its estimated parents at once
(:mod:`preflight.equations`), and each adjacent pair is judged inside those
equations: the orientation, the ``confounding-suspected`` signal from
residual dependence in both directions, and the ``nonlinear`` and
``heteroscedastic`` flags of the child's equation replace the battery's.

The raw tests are computed by :func:`edge_tests` and
:func:`equation_tests`; the evidence layer adjusts them with everything
else (:func:`preflight.evidence.adjust_named_groups`), and
:func:`judge_in_equations` turns one pair's adjusted tests into its findings.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from preflight.battery import PairFindings, _material_departure
from preflight.evidence import Tagged, significant
from preflight.policy import Policy
from preflight.results import CheckResult
from preflight.seeds import derived_seed

EDGE_FAMILY = "equation residual independence"
LINEARITY_FAMILY = "equation linearity"
VARIANCE_FAMILY = "equation variance"
STRUCTURAL_EQUATION = "structural equation"
"""Variant of a check computed on a structural equation (a variable on all its parents)."""

CANDIDATE_EDGES_FROM_PARENTS = True
"""Spike switch (not a policy key yet): add the pruned parent edges to the PC-stable skeleton, which leaves out
weak edges (a third of the true edges at 2,000 rows in benchmarks/EQUATIONS_WIRING.md)."""

ONLY_TRUSTED_PARENT_EDGES = True
"""Spike switch: add only the parent edges of equations that hold up (linear and homoscedastic, see
:func:`trusted`); a departing equation is a sign of a scrambled causal order, whose parent sets are not edges.
With every parent edge, the kiln demo's reversed chain adds gas_flow - wall_temp (oriented) and
gas_flow - glaze_gloss."""

BOOTSTRAP_REPLICATES = 200
"""Residual-bootstrap refits per edge test.  The decision uses the smooth p-value (a gamma matched to the
bootstrap), which resolves the tail a Holm correction over many edges needs; the counted p-value cannot go
below 1 / (1 + B)."""


def trusted(equations: dict[int, tuple[Tagged, ...]], p: int, policy: Policy) -> frozenset[int]:
    """The variables whose equation holds up: no parents, or linear and homoscedastic (adjusted as the
    evidence layer will adjust them: the equation families hold nothing else)."""
    from preflight.evidence import adjust_named_groups

    adjusted = adjust_named_groups({j: list(tests) for j, tests in equations.items()}, policy.correction)
    return frozenset(j for j in range(p) if j not in adjusted or not any(_departs(adjusted[j], policy)))


def with_parent_edges(estimated: np.ndarray, parents, children=None) -> np.ndarray:
    """The skeleton's adjacency with every edge of the pruned parent sets added.

    PC-stable's Fisher-z tests leave out weak edges the DirectLiNGAM pruning
    keeps (a fifth to a third of true edges in the equations probe); an edge
    that is never adjacent is never judged.
    """
    out = estimated.copy()
    for child, ps in enumerate(parents):
        if children is not None and child not in children:
            continue
        for parent in ps:
            out[child, parent] = out[parent, child] = True
    return out


def edge_tests(X: np.ndarray, names, parents, adjacency: np.ndarray, pairs, policy: Policy,
               progress=None) -> dict[tuple[int, int], tuple[Tagged, ...]]:
    """Per adjacent pair (i, j): forward (j on i and the other parents), reverse, and the likelihood ratio."""
    from preflight.equations import judge_edge

    todo = [ij for ij in pairs if adjacency[ij]]
    out = {}
    for done, (i, j) in enumerate(todo):
        if progress is not None:
            progress("edges in their equations", done, len(todo))
        judgement = judge_edge(X, i, j, parents, alpha=policy.alpha, calibration="bootstrap",
                               replicates=BOOTSTRAP_REPLICATES, n_features=policy.hsic_features,
                               exact_max_n=policy.hsic_exact_max_n, max_n=policy.hsic_max_n,
                               seed=derived_seed(policy.seed, "edge in its equations", names[i], names[j]))
        given = ", ".join(names[c] for c in judgement.conditioning) or "nothing"
        tagged = []
        for role, result, response, regressor in (("forward", judgement.forward, names[j], names[i]),
                                                  ("reverse", judgement.backward, names[i], names[j])):
            decision_p = result.smooth_p_value if result.smooth_p_value is not None else result.p_value
            check = CheckResult(
                name=f"hsic in the equation ({response} on {regressor} and its other parents)",
                statistic=result.statistic, p_value=float(decision_p), effect=result.effect,
                effect_name="normalised HSIC", n=result.n,
                note=(f"{result.note}; smooth p-value (gamma matched to the bootstrap), counted "
                      f"p = {result.p_value:.4g}; other parents partialled out: {given}"))
            tagged.append(Tagged(EDGE_FAMILY, role, check.identified(
                scope="pair", family=EDGE_FAMILY, variables=tuple(sorted((names[i], names[j]))),
                direction=(response, regressor), test="hsic", variant=STRUCTURAL_EQUATION)))
        ratio = CheckResult(name=f"pairwise likelihood ratio in the equations ({names[i]} -> {names[j]} if > 0)",
                            statistic=judgement.likelihood_ratio, p_value=None, n=judgement.n,
                            note=f"on the partial residuals given {given}")
        tagged.append(Tagged(None, "pair", ratio.identified(
            scope="pair", variables=tuple(sorted((names[i], names[j]))), test="pairwise-likelihood-ratio",
            variant=STRUCTURAL_EQUATION)))
        out[(i, j)] = tuple(tagged)
    if progress is not None and todo:
        progress("edges in their equations", len(todo), len(todo))
    return out


def equation_tests(X: np.ndarray, names, parents, policy: Policy) -> dict[int, tuple[Tagged, ...]]:
    """Per variable with parents: RESET and the additive spline F-test on its equation, Breusch-Pagan and White."""
    from preflight.equations import equation_checks

    out = {}
    for j, ps in enumerate(parents):
        if not ps:
            continue
        results = equation_checks(X, j, ps, max_df=policy.spline_max_df,
                                  seed=derived_seed(policy.seed, "equation", names[j]))[-4:]
        label = f"{names[j]} on {', '.join(names[c] for c in ps)}"
        out[j] = tuple(Tagged(family, "variable", r.identified(
            scope="variable", family=family, variables=(names[j],), variant=STRUCTURAL_EQUATION,
            name=f"{r.name.replace(' (equation)', '')} (equation: {label})"))
            for r, family in zip(results, (LINEARITY_FAMILY, LINEARITY_FAMILY, VARIANCE_FAMILY, VARIANCE_FAMILY)))
    return out


def _departs(equation: list[Tagged], policy: Policy) -> tuple[bool, bool]:
    """(nonlinear, heteroscedastic): a significant departure with at least the policy's effect floor."""
    alpha = policy.alpha
    return (_material_departure([t.result for t in equation if t.family == LINEARITY_FAMILY], alpha,
                                policy.nonlinear_min_r2_gain),
            _material_departure([t.result for t in equation if t.family == VARIANCE_FAMILY], alpha,
                                policy.heteroscedastic_min_r2))


def judge_in_equations(findings: PairFindings, pair: tuple[int, int], edge: list[Tagged] | None,
                       equations: dict[int, list[Tagged]], policy: Policy) -> PairFindings:
    """The pair's findings with orientation, confounding and mechanism flags judged inside its equations.

    Only where both variables' equations hold up (each linear and
    homoscedastic on its estimated parents, or without parents): a
    nonlinear or changing-spread equation means the linear causal order
    behind the parent sets is not trusted there (a saturating curve reads as
    a cause of its own cause and reverses a chain), so such a pair keeps the
    battery's findings.  Otherwise: oriented i -> j when the residual of j
    on i and the other parents is independent of i's partial residual, the
    reverse is not (adjusted p, decided on the smooth bootstrap p-value) and
    the likelihood ratio agrees; not when the battery found both
    directions' residuals Gaussian.  Dependent in both directions:
    ``confounding-suspected``.  The battery's ``nonlinear``,
    ``heteroscedastic`` and ``confounding-suspected`` flags and its
    additive-noise orientation are dropped: they rest on marginal
    regressions that the child's other parents bend.
    """
    if not findings.adjacent or edge is None:
        return findings
    alpha = policy.alpha
    i, j = pair
    sides = [list(equations.get(v, [])) for v in (i, j)]
    equation_results = tuple(replace(t.result, passed=not any(_departs([t], policy))) for side in sides for t in side)
    if any(any(_departs(side, policy)) for side in sides):
        return replace(findings, checks=findings.checks + equation_results)
    forward, reverse, ratio = edge
    independent = {"forward": not significant(forward.result, alpha),
                   "reverse": not significant(reverse.result, alpha)}
    gaussian = "gaussian-noise" in findings.flags
    lr = float(ratio.result.statistic)
    lingam = "undetermined"
    if not gaussian:
        if independent["forward"] and not independent["reverse"] and lr > 0:
            lingam = "x->y"
        elif independent["reverse"] and not independent["forward"] and lr < 0:
            lingam = "y->x"
    flags = [f for f in findings.flags if f not in ("nonlinear", "heteroscedastic", "confounding-suspected")]
    facts = {"adjacent", "anm-undetermined", "lingam-oriented" if lingam != "undetermined" else "lingam-undetermined"}
    if not independent["forward"] and not independent["reverse"] and not gaussian:
        flags.append("confounding-suspected")
        facts.add("residuals-dependent-both-ways")
    judged = (replace(forward.result, passed=independent["forward"] if lingam != "y->x" else None),
              replace(reverse.result, passed=independent["reverse"] if lingam != "x->y" else None),
              ratio.result) + equation_results
    return replace(findings, lingam_orientation=lingam, anm_orientation="undetermined", flags=tuple(flags),
                   facts=frozenset(facts | set(flags)), checks=findings.checks + judged)
