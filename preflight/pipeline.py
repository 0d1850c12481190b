"""The stages of one analysis, in the order data flow through them (:func:`run`).

Each stage takes and returns the frozen records of :mod:`preflight.stages`.
"""

from __future__ import annotations

import datetime as _dt
import functools
import itertools
import os
from collections.abc import Callable, Sequence
from dataclasses import replace
from typing import Any, cast

import numpy as np

from preflight import equation_stage
from preflight._version import __version__
from preflight.battery import (
    NOT_A_NOISE,
    PairBattery,
    PairFindings,
    PlotFits,
    SharedAssociation,
    judge_pair,
    noise_estimates_flag,
    nongaussian_under,
    run_pair_battery,
    separation_given_spline,
    with_distant_noise_dependence,
    with_noise_dependence,
)
from preflight.evidence import Tagged, adjust_named_groups, adjust_p_values, significant
from preflight.fit import exactly_fitted
from preflight.io import GraphFile, LoadedData
from preflight.policy import Policy, level_rank
from preflight.report.model import CAUTIONS, Report
from preflight.results import NOISE_ESTIMATE, NOISE_ESTIMATES, CheckResult, not_computed
from preflight.rules import RulesOutcome, evaluate, meets
from preflight.seeds import derived_seed
from preflight.stages import (
    Computed,
    Conclusion,
    Evidence,
    Findings,
    Pair,
    PairPlan,
    PairTask,
    Screen,
    Skeleton,
    Structure,
    Table,
    VariableFindings,
    WholeTable,
)

NO_NOISE = "the noise estimate is zero (exact linear relation)"
"""Why a variable that its parents fit to the last bit gets no noise checks."""

Progress = Callable[[str, int, int], None]


def run(loaded: LoadedData, policy: Policy, *, graph: GraphFile | None, progress: Progress,
        keep_samples: bool) -> Report:
    """One analysis, order- and unit-free: columns sorted by name and scaled by powers of two, then mapped back.

    The report lists variables and pairs in the input's order, each pair with
    x before y as in the input; a pair computed the other way round has its
    orientation swapped to match (check names keep the literal names they
    were computed with).
    """
    table = _canonical_table(loaded, policy, keep_samples)
    screen = _screen(table)
    computed = _compute(table, screen, graph, progress)
    evidence = _adjust(table, screen, computed, computed.batteries)
    evidence = _second_pass(table, screen, computed, evidence, progress)
    variables = _judge_variables(table, screen, computed, evidence)
    findings = _judge_pairs(table, computed, evidence)
    conclusion = _conclude(table, screen, computed, variables, findings)
    report = _report(table, computed, evidence, variables, conclusion)
    return _in_input_order(report, loaded, table.input_positions)


# ---------------------------------------------------------------- shared computations

def _many_pair_hsic(X: np.ndarray, names, pairs, label: str, policy: Policy, pair_seeds,
                    progress: Progress | None = None) -> list[CheckResult]:
    """HSIC of many column pairs at once (:func:`preflight.checks.independence.hsic_pairs`) under the policy.

    Row subsample and random features are seeded by ``label`` and the column
    names, never by positions, so reordering columns changes nothing.
    """
    from preflight.checks.independence import hsic_pairs

    return hsic_pairs(
        X, pairs, pair_seeds, exact_max_n=policy.hsic_exact_max_n, max_n=policy.hsic_max_n,
        n_features=policy.hsic_features, permutations=policy.hsic_permutations,
        seed=derived_seed(policy.seed, f"{label} rows"),
        column_seeds=[derived_seed(policy.seed, f"{label} features", name) for name in names],
        on_pair=None if progress is None else (lambda done, total: progress(label, done, total)))


def _noise_dependence_results(noise: np.ndarray, names, pairs, policy: Policy,
                              progress: Progress | None = None) -> list[CheckResult]:
    """HSIC between the noise estimates of every given (adjacent) pair.

    Seeds follow the column names, not positions, so reordering the columns
    draws the same subsamples and features.
    """
    if not pairs:
        return []
    return _many_pair_hsic(noise, names, pairs, "noise dependence", policy,
                           [derived_seed(policy.seed, "noise dependence", names[i], names[j]) for i, j in pairs],
                           progress)


def _noise_dependence_task(noise: np.ndarray, pairs, distant_pairs, policy: Policy):
    names = _WORKER["names"]
    return (_noise_dependence_results(noise, names, pairs, policy),
            _distant_screen_results(noise, names, distant_pairs, policy))


def _distant_screen_results(noise: np.ndarray, names, pairs, policy: Policy) -> list[CheckResult]:
    """HSIC between the ranks of the noise estimates of every non-adjacent pair, on random features at every
    number of rows.

    The pairs are most of the table's (p (p - 1) / 2 less the edges), and
    the exact test costs a kernel matrix per pair up to ``hsic_exact_max_n``
    rows (30 pairs at 2,000 rows: seconds, against a tenth of one with the
    features each column shares); the features' gamma null is the one the
    adjacent pairs use above that size.
    """
    return _noise_dependence_results(_column_ranks(noise), names, pairs, replace(policy, hsic_exact_max_n=1))


def _column_ranks(noise: np.ndarray) -> np.ndarray:
    """Each column replaced by its ranks (ties averaged).

    HSIC's gamma null is read far into its tail once it is corrected across
    every non-adjacent pair, and with heavy-tailed noise it is too liberal
    there (p = 0.0002 where 300 permutations give 0.003 to 0.01 for two
    true, independent noises at 2,000 rows); on ranks the two agree.  Ranks
    keep any dependence (HSIC of the copula: Poczos, Ghahramani and
    Schneider 2012).
    """
    from scipy.stats import rankdata

    return rankdata(noise, axis=0)


DISTANT_NOISE_FAMILY = "non-adjacent noise dependence"
"""Family of the HSICs between the noise estimates of pairs the skeleton left non-adjacent (Holm across them)."""


def _distant_noise_tests(noise: np.ndarray, names, pairs, results: list[CheckResult],
                         policy: Policy) -> dict[Pair, tuple[Tagged, ...]]:
    """Per non-adjacent pair: the HSIC between the ranks of its noise estimates and, where that is material
    after the correction across all such pairs, the least-squares residual of each estimate on the other
    tested for independence of it both ways (residual bootstrap, Sen and Sen 2014) and the estimates'
    third-order cross-moments (:func:`preflight.checks.confounding.cross_skewness`).

    A skeleton can separate the two children of a hidden cause when their
    partial correlation cancels, and their noise estimates then share the
    cause: regressed on each other, neither leaves an independent residual
    when it is non-Gaussian (Darmois-Skitovich; Hoyer et al. 2008).  An edge
    the skeleton missed leaves the child's estimate the parent's noise plus
    its own, so one direction comes out independent.  Two children whose
    spreads follow one parent have dependent estimates too, both ways, but
    their cross-moments of third order are zero; a skewed hidden cause's are
    not.  The follow-up tests run only where the family's correction leaves
    the HSIC material, which keeps them to a few pairs.
    """
    tagged = {ij: _noise_hsic(result, names, ij, DISTANT_NOISE_FAMILY, "noise dependence of non-adjacent variables")
              for ij, result in zip(pairs, results)}
    finite = [ij for ij, r in zip(pairs, results) if r.p_value is not None and np.isfinite(r.p_value)]
    adjusted = dict(zip(finite, adjust_p_values([cast(float, tagged[ij].result.p_value) for ij in finite],
                                                policy.correction))) if finite else {}
    out: dict[Pair, tuple[Tagged, ...]] = {}
    for ij in pairs:
        hsic_test = tagged[ij]
        material = (ij in adjusted and adjusted[ij] < policy.alpha
                    and (hsic_test.result.effect or 0.0) >= policy.dependence_min_hsic)
        if not material:
            out[ij] = (hsic_test,)
            continue
        out[ij] = (hsic_test, *_distant_follow_up(noise, names, ij, policy))
    return _with_joint_adjustment(out, len(pairs), policy)


def _distant_follow_up(noise: np.ndarray, names, pair: Pair, policy: Policy) -> tuple[Tagged, ...]:
    """The two direction tests and the cross-moments of one non-adjacent pair's noise estimates (none when a
    residual is degenerate)."""
    from preflight.checks.confounding import cross_skewness
    from preflight.equations import DegenerateResidual, residual_independence

    i, j = pair
    variables = tuple(sorted((names[i], names[j])))
    tests = []
    for response, regressor in ((j, i), (i, j)):
        try:
            result = residual_independence(
                noise[:, response], noise[:, [regressor]], calibration="bootstrap",
                replicates=equation_stage.BOOTSTRAP_REPLICATES, n_features=policy.hsic_features,
                exact_max_n=policy.hsic_exact_max_n, max_n=policy.hsic_max_n,
                seed=derived_seed(policy.seed, "non-adjacent noise direction", names[response], names[regressor]))
        except DegenerateResidual:
            return ()
        check = equation_stage.bootstrap_hsic(
            result, f"hsic between noise estimates ({names[response]} on {names[regressor]})",
            "the residual of one noise estimate regressed on the other")
        tests.append(Tagged(None, "forward" if response == j else "reverse", check.identified(
            scope="pair", family=DISTANT_NOISE_FAMILY, variables=variables,
            direction=(names[response], names[regressor]), variant=NOISE_ESTIMATES)))
    shape = cross_skewness(noise[:, i], noise[:, j]).identified(
        scope="pair", family=DISTANT_NOISE_FAMILY, variables=variables, variant=NOISE_ESTIMATES,
        name=f"third-order cross-moments of noise estimates ({names[i]}, {names[j]})")
    return (*tests, Tagged(None, "pair", shape))


def _with_joint_adjustment(tests: dict[Pair, tuple[Tagged, ...]], family_size: int,
                           policy: Policy) -> dict[Pair, tuple[Tagged, ...]]:
    """The direction tests with ``p_adjusted`` set: the pair's intersection-union p-value (the larger of its
    two; Berger 1982) corrected across every non-adjacent pair, those never tested counting as p = 1.

    The claim "no independent-noise model either way" is made for a pair out
    of all the non-adjacent ones, so it bears the same correction as the HSIC
    that selected it.
    """
    tested = [ij for ij, t in tests.items() if len(t) == 4]
    if not tested:
        return tests
    joint = [max(cast(float, t.result.p_value) for t in tests[ij][1:3]) for ij in tested]
    adjusted = adjust_p_values(joint + [1.0] * (family_size - len(tested)), policy.correction)[:len(tested)]
    out = dict(tests)
    for ij, value in zip(tested, adjusted):
        hsic_test, forward, reverse, shape = tests[ij]
        out[ij] = (hsic_test, *(replace(t, result=replace(t.result, p_adjusted=float(value)))
                                for t in (forward, reverse)), shape)
    return out


def _noise_hsic(result: CheckResult, names, pair: Pair, family: str, label: str) -> Tagged:
    """An HSIC between the noise estimates of a pair, identified and named ``label (hsic) (x, y)``."""
    i, j = pair
    return Tagged(family, "pair", result.identified(
        scope="pair", family=family, variables=tuple(sorted((names[i], names[j]))), test="hsic",
        variant=NOISE_ESTIMATES, name=f"{label} (hsic) ({names[i]}, {names[j]})"))


def _tag_noise_dependence(results: list[CheckResult], names, pairs, progress: Progress) -> dict:
    if pairs:
        progress("noise dependence", len(pairs), len(pairs))
    return {ij: _noise_hsic(result, names, ij, "noise dependence", "noise dependence")
            for ij, result in zip(pairs, results)}


# ---------------------------------------------------------------- table and screen

def _canonical_table(loaded: LoadedData, policy: Policy, keep_samples: bool = False) -> Table:
    """The columns sorted by name (:func:`canonical_columns`) and scaled by powers of two (:func:`unit_exponents`).

    With ``keep_samples``, the rows the plots will draw are chosen now, so the
    pair battery can keep its fits at those rows.
    """
    from preflight.seeds import working_seed

    names = loaded.names
    order = canonical_columns(names)
    exponents = unit_exponents(loaded.values)
    values = np.ldexp(loaded.values[:, order], -exponents[order][None, :])
    # The same memory layout as the input keeps the round-off of every later
    # matrix product as it was.
    values = np.asfortranarray(values) if loaded.values.flags.f_contiguous and not loaded.values.flags.c_contiguous \
        else np.ascontiguousarray(values)
    canonical = replace(loaded, values=values, names=tuple(names[k] for k in order))
    working = replace(policy, seed=working_seed(policy.seed))
    return Table(data=canonical, input_positions=tuple(order), exponents=exponents[order], policy=working,
                 requested=policy, plot_rows=plot_rows(values.shape[0], working) if keep_samples else None)


def plot_rows(n: int, policy: Policy) -> np.ndarray:
    """The seeded subsample of rows the plots draw (sorted), at most ``policy.plot_max_points`` of n."""
    rng = np.random.default_rng(derived_seed(policy.seed, "plot sample"))
    return np.sort(rng.choice(n, size=min(n, policy.plot_max_points), replace=False))


def _screen(table: Table) -> Screen:
    from preflight.screen import collinearity_check, duplicate_rows_check, screen_variables

    loaded, policy = table.data, table.policy
    X, names, n = loaded.values, loaded.names, loaded.values.shape[0]
    screens = screen_variables(loaded.values, list(loaded.names), policy)
    flags = {s.name: list(s.flags) for s in screens}
    for name in loaded.missing_by_column:
        flags[name].append("missing-values")
    checks = {s.name: [Tagged(c.identity.family if c.identity is not None else None, "variable", c)
                       for c in s.checks] for s in screens}
    for name, count in loaded.missing_by_column.items():
        checks[name].append(Tagged(None, "variable", CheckResult(
            name="missing values", statistic=float(count), p_value=None, effect=count / loaded.rows,
            effect_name="share of rows", n=loaded.rows, note="rows with a missing value were dropped",
        ).identified(scope="variable", variables=(name,))))
    global_flags: list[str] = []
    global_checks: list[Tagged] = [Tagged(None, "global", CheckResult(
        name="usable rows", statistic=float(n), p_value=None, effect=None, effect_name=None, n=n,
        note=(f"minimum {policy.min_rows} for any conclusion, {policy.min_rows_orientation} "
              "to orient from noise shape")))]
    if n < policy.min_rows:
        global_flags.append("too-few-rows")
    elif n < policy.min_rows_orientation:
        global_flags.append("too-few-rows-to-orient")
    global_checks.append(Tagged(None, "global", collinearity_check(X, list(names), policy)))
    duplicates = duplicate_rows_check(X, list(names), policy)
    global_checks.append(Tagged(None, "global", duplicates))
    if duplicates.passed is False:
        global_flags.append("duplicate-rows")
    return Screen(variable_flags={name: tuple(f) for name, f in flags.items()},
                  variable_checks={name: tuple(c) for name, c in checks.items()},
                  global_checks=tuple(global_checks), global_flags=tuple(global_flags))


# ---------------------------------------------------------------- structure, skeleton, pair plan, batteries

def _compute(table: Table, screen: Screen, graph: GraphFile | None, progress: Progress) -> Computed:
    """Every raw check of the analysis, in worker processes when the table is large enough."""
    if screen.void:
        p = len(table.names)
        return Computed(structure=None, skeleton=Skeleton(
            estimated=np.zeros((p, p), dtype=bool), cpdag=np.zeros((p, p), dtype=np.int8),
            source="not estimated: the data void the analysis"), plan=PairPlan(tasks=()),
            batteries=(), noise_dependence={}, whole_table=WholeTable(checks=(), dependent_components=False))
    pool = _start_pool(table.values, table.names, table.policy)
    try:
        computed = _analyse_table(table, graph, progress, pool)
    except BaseException:  # interrupted (Ctrl-C, SIGTERM) or failed: no worker may be left behind
        if pool is not None:
            _stop_pool(pool, interrupted=True)
        raise
    if pool is not None:
        _stop_pool(pool, interrupted=False)
    return computed


def _analyse_table(table: Table, graph: GraphFile | None, progress: Progress, pool) -> Computed:
    """Structural view, skeleton, every pair's battery, the noise dependence and the whole-table screens."""
    X, names, policy = table.values, table.names, table.policy
    whole = pool.submit(_whole_table_task, policy) if pool is not None else None
    structure = _structural_view(X, names, policy, progress, table.exponents)
    progress("skeleton", 0, 1)
    skeleton = _adjacency(X, names, policy, graph)
    progress("skeleton", 1, 1)
    # A hypothesised graph states the parents; otherwise the structural view's pruned parents stand in.
    parents = equation_stage.graph_parents(graph.matrix(names)) if graph is not None else structure.parents
    equations = equation_stage.equation_tests(X, names, parents, policy)
    holding = equation_stage.trusted(equations, len(names), policy)
    if graph is None and equation_stage.CANDIDATE_EDGES_FROM_PARENTS:
        children = holding if equation_stage.ONLY_TRUSTED_PARENT_EDGES else None
        skeleton = replace(skeleton, estimated=equation_stage.with_parent_edges(skeleton.estimated, parents,
                                                                                children))
    noise_pairs = tuple(ij for ij in table.pairs if skeleton.estimated[ij])
    distant_pairs = tuple(ij for ij in table.pairs if not skeleton.estimated[ij])
    tested_pairs = noise_pairs + distant_pairs
    # The adjacent pairs' tests inside their equations and the bent equations' links, queued in the
    # workers to run beside the batteries.
    edge_futures = _submit_tasks(pool, _edge_task_in_worker, noise_pairs, parents, policy)
    links = equation_stage.bent_links(parents, holding)
    link_futures = _submit_tasks(pool, _spline_edge_task_in_worker, links, parents, policy)
    # The noise HSICs need nothing the pairs need: with workers they run in
    # the one the whole-table screens left idle while this process shares
    # the association checks.
    noise_future = (pool.submit(_noise_dependence_task, structure.noise, noise_pairs, distant_pairs, policy)
                    if pool is not None and tested_pairs else None)
    plan = _plan(table, structure, skeleton, progress)
    if noise_pairs:
        progress("noise dependence", 0, len(noise_pairs))  # the non-adjacent screen is a tenth of it, untracked
    if noise_future is not None:
        noise_results, distant_results = noise_future.result()
    else:
        noise_results = _noise_dependence_results(structure.noise, names, noise_pairs, policy, progress)
        distant_results = _distant_screen_results(structure.noise, names, distant_pairs, policy)
    noise_dependence = _tag_noise_dependence(noise_results, names, noise_pairs, progress)
    distant_noise = _distant_noise_tests(structure.noise, names, distant_pairs, distant_results, policy)
    batteries = _run_batteries(table, plan.tasks, progress, pool)
    progress("whole-table screens", 0, 1)
    whole_table = whole.result() if whole is not None else _whole_table_screens(X, policy)
    progress("whole-table screens", 1, 1)
    edges = _collect(noise_pairs, edge_futures, "edges in their equations", progress,
                     lambda ij: equation_stage.edge_task(table.values, table.names, parents, ij, policy))
    spline_edges = _collect(links, link_futures, "edges of bent equations", progress,
                            lambda link: equation_stage.spline_edge_task(table.values, table.names, parents, link,
                                                                         policy))
    return Computed(structure=structure, skeleton=skeleton, plan=plan, batteries=tuple(batteries),
                    noise_dependence=noise_dependence, whole_table=whole_table, edge_tests=edges,
                    equation_checks=equations, spline_edge_tests=spline_edges, distant_noise=distant_noise)


def _submit_tasks(pool, in_worker, units, parents, policy: Policy) -> list | None:
    """One future per unit of work (a pair or a link), or None to run them here (no pool, or a single unit)."""
    if pool is None or len(units) < 2:
        return None
    task = functools.partial(in_worker, parents=parents, policy=policy)
    return [pool.submit(task, unit) for unit in units]


def _collect(units, futures: list | None, stage: str, progress: Progress, run_here) -> dict:
    """Each unit's result, from its future or computed here, in the order given."""
    out = {}
    for done, unit in enumerate(units):
        progress(stage, done, len(units))
        out[unit] = futures[done].result() if futures is not None else run_here(unit)
    if units:
        progress(stage, len(units), len(units))
    return out


def _structural_view(X: np.ndarray, names: tuple[str, ...], policy: Policy, progress: Progress,
                     exponents=None) -> Structure:
    from preflight import structure
    from preflight.checks.normality import NORMALITY_TESTS, normality_checks

    p = X.shape[1]
    # Counted in candidate pairs scored, which is what each step costs.
    progress("causal order", 0, max(1, (p + 1) * p * (p - 1) // 6))
    order = tuple(int(i) for i in structure.causal_order(
        X, seed=policy.seed, on_step=lambda done, total: progress("causal order", done, total)))
    parents = structure.prune_parents(X, order, alpha=policy.alpha, correction=policy.correction)
    noise = structure.noise_estimates(X, parents)

    variable_checks: dict[int, list[Tagged]] = {j: [] for j in range(p)}
    progress("noise shape", 0, p)
    for j, name in enumerate(names):
        seed = derived_seed(policy.seed, "noise", name)
        if exactly_fitted(noise[:, j], X[:, j]):
            # The collinearity screen says why.
            results = tuple(not_computed(test, X.shape[0], NO_NOISE) for test in NORMALITY_TESTS)
        else:
            results = normality_checks(noise[:, j], max_n=policy.shapiro_max_n, seed=seed)
        for result in results:
            variable_checks[j].append(Tagged("noise normality", "variable", result.identified(
                scope="variable", family="noise normality", variables=(name,), variant=NOISE_ESTIMATE,
                name=f"{result.name} (noise of {name})")))
        progress("noise shape", j + 1, p)
    from preflight.checks.confounding import SPECTRAL_MIN_PREDICTORS, spectral_confounding

    for j, name in enumerate(names):
        if len(parents[j]) >= SPECTRAL_MIN_PREDICTORS:
            strength = spectral_confounding(X, j, parents[j])
            variable_checks[j].append(Tagged(None, "variable", strength.identified(
                scope="variable", variables=(name,), test="spectral-confounding-strength",
                name=f"spectral confounding strength ({name} on its {len(parents[j])} parents)")))
    global_checks: list[Tagged] = []
    edges = [(parent, child) for child, ps in enumerate(parents) for parent in ps]
    flags: list[str] = []
    if edges:
        share = structure.varsortability(X, edges, exponents=exponents)
        global_checks.append(Tagged(None, "global", CheckResult(
            name="varsortability", statistic=float(share), p_value=None, effect=float(share),
            effect_name="share of edges with increasing variance", n=len(edges),
            note=f"varsortable when at least {policy.varsortable_min_share:.0%} (Reisach et al. 2021)")))
        if share >= policy.varsortable_min_share and len(edges) >= 2:
            flags.append("varsortable")
    return Structure(order=order, parents=parents, noise=noise,
                     variable_checks={j: tuple(checks) for j, checks in variable_checks.items()},
                     global_checks=tuple(global_checks), global_flags=tuple(flags))


def _whole_table_screens(X: np.ndarray, policy: Policy) -> WholeTable:
    """Henze-Zirkler and the FastICA cross-check: their checks, and whether components are dependent.

    Neither feeds the pair battery, so with worker processes they run in one
    of them while the main process builds the structural view and the pairs.
    """
    from preflight import structure

    checks = [structure.henze_zirkler(X, seed=policy.seed)]
    ica = structure.fastica_gaussian_components(X, policy)
    checks += list(ica.checks)
    return WholeTable(checks=tuple(checks), dependent_components=bool(ica.dependent))


def _whole_table_task(policy: Policy) -> WholeTable:
    return _whole_table_screens(_WORKER["X"], policy)


def _adjacency(X: np.ndarray, names: tuple[str, ...], policy: Policy, graph: GraphFile | None) -> Skeleton:
    """Adjacency matrix and CPDAG; from the user's graph or estimated by PC-stable.

    The estimated skeleton rests only on partial correlations, which stay
    valid for linear mechanisms whatever the noise shape; the structural
    view's order, which a nonlinear or confounded part of the table can
    scramble, never adds or removes an edge.  It only decides which common
    neighbours of a pair are conditioned on (see :func:`_conditioning_set`).
    """
    from preflight import graph as graphs

    if graph is not None:
        dag = graph.matrix(names)
        return Skeleton(estimated=(dag + dag.T) > 0, cpdag=graphs.dag_to_cpdag(dag),
                        source="hypothesised graph from " + graph.name)
    skeleton = graphs.pc_stable_skeleton(X, alpha=policy.alpha)
    adjacency = np.array(skeleton.adjacency, dtype=bool)
    # The first separating set depends on the column order; the columns
    # arrive sorted by name, so the class does not (see Policy.collider_rule).
    if policy.collider_rule == "first-separating-set":
        cpdag = graphs.cpdag_from_skeleton(adjacency, dict(skeleton.separating_sets))
    else:
        cpdag = graphs.cpdag_from_all_separating_sets(
            X, adjacency, alpha=policy.alpha, max_condition_size=max(skeleton.max_condition_size_reached, 0),
            rule=policy.collider_rule).cpdag
    return Skeleton(estimated=adjacency, cpdag=cpdag,
                    source="estimated: PC-stable skeleton (Fisher-z partial correlations)")


def _conditioning_set(i: int, j: int, adjacency: np.ndarray, parents) -> tuple[int, ...]:
    """The variables partialled out of the pair (i, j), in position order.

    They are the common neighbours of i and j that the structural view puts
    among the parents of both: an observed common cause must be partialled
    out.  A common neighbour that is a parent of only one of them is either
    a common child of the two or a mediator; a child must not be conditioned
    on (that creates dependence) and leaving a mediator in the residual keeps
    it independent of the cause, so neither enters.  This also keeps a
    mis-estimated order elsewhere in the table from bending this pair.  The
    same set enters the additive-noise check's spline regressions linearly.
    """
    common = set(np.flatnonzero(adjacency[i] & adjacency[j]).tolist()) - {i, j}
    return tuple(sorted(common & set(parents[i]) & set(parents[j])))


def _plan(table: Table, structure: Structure, skeleton: Skeleton, progress: Progress) -> PairPlan:
    """Each pair's conditioning set and adjacency, with the association checks shared by the unconditioned pairs."""
    conditioning = {(i, j): _conditioning_set(i, j, skeleton.estimated, structure.parents) for i, j in table.pairs}
    shared = _shared_association(table.values, table.names, [ij for ij in table.pairs if not conditioning[ij]],
                                 table.policy, progress)
    tasks = tuple(PairTask(pair=ij, conditioning=conditioning[ij], adjacent=bool(skeleton.estimated[ij]),
                           association=shared.get(ij)) for ij in table.pairs)
    return PairPlan(tasks=tasks)


def _shared_association(X: np.ndarray, names, pairs, policy: Policy,
                        progress: Progress | None = None) -> dict[Pair, SharedAssociation]:
    """Association checks of the given pairs (unconditioned) at once.

    Pearson and Spearman come from two correlation matrices
    (:func:`preflight.checks.association.pairwise_associations`).  HSIC is
    shared too when it runs on random features: each column's features are
    then drawn once instead of once per pair; exact HSIC (small n) gains
    nothing from sharing and stays in the parallel pair battery (None here).
    """
    from preflight.checks.association import pairwise_associations

    if not pairs:
        return {}
    linear = pairwise_associations(X, pairs)
    kernel: Sequence[CheckResult | None]
    if min(X.shape[0], policy.hsic_max_n) <= policy.hsic_exact_max_n:
        kernel = [None] * len(pairs)
    else:
        kernel = _many_pair_hsic(X, names, pairs, "association", policy,
                                 [derived_seed(policy.seed, names[i], names[j]) for i, j in pairs], progress)
    return {pair: SharedAssociation(pearson=pearson, spearman=spearman, hsic=hsic)
            for pair, (pearson, spearman), hsic in zip(pairs, linear, kernel)}


def _pair_battery(X: np.ndarray, names: Sequence[str], task: PairTask, policy: Policy,
                  plot_rows: np.ndarray | None = None) -> PairBattery:
    """The battery of one pair of the table ``X`` (the data are passed, never read from a global)."""
    i, j = task.pair
    conditioning = task.conditioning
    return run_pair_battery(X[:, i], X[:, j], names[i], names[j], X[:, list(conditioning)] if conditioning else None,
                            tuple(names[c] for c in conditioning), task.adjacent, policy,
                            association=task.association, plot_rows=plot_rows)


_WORKER: dict[str, Any] = {}
"""The table of a worker process, set once by :func:`_init_worker`; the main process never writes it."""


def _pair_batteries_in_worker(tasks: list[PairTask], policy: Policy,
                              plot_rows: np.ndarray | None) -> list[PairBattery]:
    return [_pair_battery(_WORKER["X"], _WORKER["names"], task, policy, plot_rows) for task in tasks]


def _edge_task_in_worker(pair: tuple[int, int], parents, policy: Policy):
    return equation_stage.edge_task(_WORKER["X"], _WORKER["names"], parents, pair, policy)


def _spline_edge_task_in_worker(link: tuple[int, int], parents, policy: Policy):
    return equation_stage.spline_edge_task(_WORKER["X"], _WORKER["names"], parents, link, policy)


def _init_worker(X, names, parent_pid: int):
    from preflight.interruption import bind_worker_to_parent

    bind_worker_to_parent(parent_pid)
    _WORKER["X"] = X
    _WORKER["names"] = names
    from threadpoolctl import threadpool_limits

    threadpool_limits(1)  # a worker process's own setting: it ends with the pool


def cores_available() -> int:
    """Cores this process may run on (its CPU affinity where the platform has one)."""
    if hasattr(os, "sched_getaffinity"):
        return max(1, len(os.sched_getaffinity(0)))
    return os.cpu_count() or 1


def jobs_note(policy: Policy) -> str | None:
    """One line for the user when ``jobs`` asks for more processes than there are cores, else None."""
    cores = cores_available()
    if policy.jobs <= cores:
        return None
    return f"jobs {policy.jobs} is more than the {cores} core{'s' if cores != 1 else ''} available; capped at {cores}"


def _jobs(policy: Policy, n_pairs: int) -> int:
    """The number of worker processes: the one place that decides it.

    ``jobs`` (0: every core available), capped at the cores available, since
    more processes than cores only add memory and switching, and at the
    tasks there are: one per pair plus the whole-table screens and the noise
    dependence, which run beside the pairs.
    """
    cores = cores_available()
    wanted = min(policy.jobs, cores) if policy.jobs else cores
    return max(1, min(wanted, n_pairs + 2))


POOL_MIN_WORK = 200_000
"""Rows x pairs below which the run stays in one process whatever ``jobs`` says.

Not a policy key: it changes no result (reports do not depend on the
number of processes), only whether starting worker processes, which costs
about as much as the pair battery of a table this small, can pay off."""


def _start_pool(X: np.ndarray, names, policy: Policy):
    """Worker processes for the run, or None when the table is too small to gain from them."""
    n, p = X.shape
    jobs = _jobs(policy, p * (p - 1) // 2)
    if jobs <= 1 or n * p * (p - 1) // 2 < POOL_MIN_WORK:
        return None
    import concurrent.futures as cf
    import multiprocessing as mp

    context = mp.get_context("fork") if "fork" in mp.get_all_start_methods() else None
    return cf.ProcessPoolExecutor(max_workers=jobs, mp_context=context, initializer=_init_worker,
                                  initargs=(X, names, os.getpid()))


def _stop_pool(pool, interrupted: bool) -> None:
    """Shut the pool down; when the run did not finish, stop its workers at once.

    Waiting for queued pairs after an interruption or an error would keep the
    user waiting for a report that will not be written, so the workers are
    sent SIGTERM (their default action: exit), then SIGKILL after a grace
    period; every wait is bounded, so stopping never hangs.
    """
    if not interrupted:
        try:
            pool.shutdown()
            return
        except BaseException:  # interrupted while the idle workers were leaving
            _stop_pool(pool, interrupted=True)
            raise
    processes = list((getattr(pool, "_processes", None) or {}).values())
    for process in processes:
        if process.is_alive():
            process.terminate()
    for process in _join_all(processes, seconds=2.0):
        process.kill()
    _join_all(processes, seconds=2.0)
    pool.shutdown(wait=True, cancel_futures=True)


def _join_all(processes, seconds: float) -> list:
    """Wait at most ``seconds`` in all for the processes to end; returns those still alive."""
    import time

    deadline = time.monotonic() + seconds
    for process in processes:
        process.join(timeout=max(0.0, deadline - time.monotonic()))
    return [process for process in processes if process.is_alive()]


def _run_batteries(table: Table, tasks: Sequence[PairTask], progress: Progress, pool=None) -> list[PairBattery]:
    """Every pair's battery, in task order; results do not depend on the number of processes."""
    X, names, policy, rows = table.values, table.names, table.policy, table.plot_rows
    jobs = _jobs(policy, len(tasks))
    results: list[PairBattery | None] = [None] * len(tasks)
    # A non-adjacent pair whose association checks are all ready needs no more
    # computation: sending it to a worker would cost more than it does here.
    ready = [k for k, task in enumerate(tasks)
             if not task.adjacent and task.association is not None and task.association.complete]
    for k in ready:
        results[k] = _pair_battery(X, names, tasks[k], policy, rows)
    heavy = [k for k in range(len(tasks)) if results[k] is None]
    # Counted over the pairs that need the whole battery: the others are done
    # already and would make the time left look shorter than it is.
    done = 0
    progress("pair battery", done, len(heavy))
    if pool is None or len(heavy) < 2:
        for k in heavy:
            results[k] = _pair_battery(X, names, tasks[k], policy, rows)
            done += 1
            progress("pair battery", done, len(heavy))
        return cast("list[PairBattery]", results)  # every slot is filled by now
    chunk = max(1, len(heavy) // (8 * jobs))
    # Submitted in chunks rather than through Executor.map: map cancels its
    # pending futures when an interruption unwinds it, and the executor's
    # manager thread (CPython 3.11) then fails on those cancelled futures
    # while the stopped pool is torn down, printing a traceback.
    in_worker = functools.partial(_pair_batteries_in_worker, policy=policy, plot_rows=rows)
    chunks = [heavy[start:start + chunk] for start in range(0, len(heavy), chunk)]
    futures = [pool.submit(in_worker, [tasks[k] for k in ks]) for ks in chunks]
    for ks, future in zip(chunks, futures):
        for k, result in zip(ks, future.result()):
            results[k] = result
            done += 1
            progress("pair battery", done, len(heavy))
    return cast("list[PairBattery]", results)  # every slot is filled by now


# ---------------------------------------------------------------- evidence

def _adjust(table: Table, screen: Screen, computed: Computed, batteries: Sequence[PairBattery]) -> Evidence:
    """Every check with p-values adjusted within families across the whole table.

    The groups are keyed by what they belong to (a pair's battery, a pair's
    noise dependence, a variable, the table) and adjusted together through
    :func:`preflight.evidence.adjust_named_groups`.
    """
    structure = computed.structure
    groups: dict[tuple[str, Any], list[Tagged]] = {}
    for ij, battery in zip(table.pairs, batteries):
        groups[("pair", ij)] = list(battery.checks)
    for ij in table.pairs:
        if ij in computed.noise_dependence:
            groups[("noise", ij)] = [computed.noise_dependence[ij]]
    for j, name in enumerate(table.names):
        groups[("variable", name)] = list(screen.variable_checks[name]) + list(
            structure.variable_checks[j] if structure is not None else ())
    # Report order: the screen's, Henze-Zirkler and the FastICA checks, then the view's own (varsortability).
    groups[("global", "table")] = (list(screen.global_checks)
                                   + [Tagged(None, "global", c) for c in computed.whole_table.checks]
                                   + list(structure.global_checks if structure is not None else ()))
    for ij, tests in computed.edge_tests.items():
        groups[("edge", ij)] = list(tests)
    for ij, tests in computed.distant_noise.items():
        groups[("distant noise", ij)] = list(tests)
    for j, tests in computed.equation_checks.items():
        groups[("equation", j)] = list(tests)
    for link, tests in computed.spline_edge_tests.items():
        groups[("spline edge", link)] = list(tests)
    adjusted = adjust_named_groups(groups, table.policy.correction)
    return Evidence(
        edge_checks={ij: adjusted[("edge", ij)] for ij in computed.edge_tests},
        distant_noise={ij: adjusted[("distant noise", ij)] for ij in computed.distant_noise},
        equation_checks={j: adjusted[("equation", j)] for j in computed.equation_checks},
        spline_edge_checks={link: adjusted[("spline edge", link)] for link in computed.spline_edge_tests},
        batteries=tuple(batteries),
        pair_checks={ij: adjusted[("pair", ij)] for ij, _ in zip(table.pairs, batteries)},
        noise_dependence={ij: adjusted[("noise", ij)][0].result for ij in table.pairs
                          if ("noise", ij) in adjusted},
        variable_checks={name: adjusted[("variable", name)] for name in table.names},
        global_checks=tuple(adjusted[("global", "table")]))


def _second_pass(table: Table, screen: Screen, computed: Computed, evidence: Evidence,
                 progress: Progress) -> Evidence:
    """Re-run, without them, the pairs conditioned on variables that sit in a nonlinear relation.

    Conditioning sets rest on the structural view's linear causal order.  A
    nonlinear mechanism can scramble that order (a saturating curve reads as
    a cause of its own cause), so a variable in an adjacent pair judged
    nonlinear may be a descendant of the pair it conditions, and partialling
    out a descendant adds spread and curvature that are not there.  Leaving
    a true common cause in the residuals instead can only raise
    ``confounding-suspected``, never orient an edge.

    The variables start from the nonlinear pairs with an empty conditioning
    set; each round re-runs the pairs whose set holds one of them (in this
    process, in pair order, so results do not depend on workers), re-judges
    every pair with p-values adjusted afresh, and adds the variables of
    every nonlinear pair, until nothing is added.  The evidence returned
    holds the last round's judgement of every pair.
    """
    if computed.structure is None:
        return evidence
    policy = table.policy
    planned = {task.pair: task.conditioning for task in computed.plan.tasks}
    excluded: frozenset[int] = frozenset()
    # Ends: a round that does not return adds at least one of the p variables to ``excluded``.
    while True:
        judged = tuple(judge_pair(battery, evidence.pair_checks[ij], policy)
                       for ij, battery in zip(table.pairs, evidence.batteries))
        in_nonlinear = {v for ij, f in zip(table.pairs, judged)
                        if f.adjacent and "nonlinear" in f.flags and (excluded or not planned[ij]) for v in ij}
        if in_nonlinear <= excluded:
            return replace(evidence, judged=judged)
        batteries = _rerun_without(table, computed.plan, evidence.batteries, excluded, excluded | in_nonlinear,
                                   progress)
        excluded = excluded | in_nonlinear
        evidence = _adjust(table, screen, computed, batteries)


def _rerun_without(table: Table, plan: PairPlan, batteries: Sequence[PairBattery], before: frozenset[int],
                   after: frozenset[int], progress: Progress) -> list[PairBattery]:
    """The batteries with the pairs whose conditioning set loses a variable (``after`` minus ``before``) re-run.

    The first check of a re-run battery notes the variables this round took
    out of its set.
    """
    names = table.names
    out = list(batteries)
    rerun = [k for k, task in enumerate(plan.tasks) if set(task.conditioning) & (after - before)]
    for done, k in enumerate(rerun):
        task = plan.tasks[k]
        progress("second pass", done, len(rerun))
        dropped = tuple(c for c in task.conditioning if c in after and c not in before)
        kept = tuple(c for c in task.conditioning if c not in after)
        battery = _pair_battery(table.values, names, replace(task, conditioning=kept, association=None), table.policy,
                                table.plot_rows)
        note = (f"not partialled out: {', '.join(names[c] for c in dropped)}, in a relation judged "
                "nonlinear, so its place in the linear causal order is not trusted")
        first = battery.checks[0]
        checks = (replace(first, result=replace(first.result, note=f"{first.result.note}; {note}"
                                                if first.result.note else note)),) + battery.checks[1:]
        out[k] = replace(battery, checks=checks)
    if rerun:
        progress("second pass", len(rerun), len(rerun))
    return out


# ---------------------------------------------------------------- judging

def _judge_variables(table: Table, screen: Screen, computed: Computed, evidence: Evidence) -> VariableFindings:
    """Each variable's report entry: its flags, and its checks judged (noise shape, rows needed)."""
    policy, structure = table.policy, computed.structure
    gaussian_noises: list[str] = []
    entries = []
    for j, name in enumerate(table.names):
        tagged = evidence.variable_checks[name]
        if structure is not None:
            noise_norm = [t.result for t in tagged if t.family == "noise normality"]
            # No noise at all (an exact linear relation) is neither a Gaussian nor a non-Gaussian component.
            exact = exactly_fitted(structure.noise[:, j], table.values[:, j])
            if not exact and not nongaussian_under(noise_norm, policy):
                gaussian_noises.append(name)
            tagged = tagged + [Tagged(None, "variable", _rows_needed_check(structure.noise[:, j], exact, name,
                                                                           policy))]
        flags = list(screen.variable_flags[name])
        judged = []
        for t in tagged + evidence.equation_checks.get(j, []):
            r = t.result
            if t.family in equation_stage.EQUATION_FAMILIES:
                r = replace(r, passed=not any(equation_stage.departs([t], policy)))
            elif t.family == "noise normality":
                r = replace(r, passed=None if r.p_value is None else significant(r, policy.alpha))
            elif t.family == "autocorrelation":
                r = replace(r, passed="autocorrelated" not in flags)
            judged.append(r)
        entries.append({"name": name, "flags": flags, "checks": [r.to_dict() for r in judged]})
    return VariableFindings(entries=tuple(entries), gaussian_noises=tuple(gaussian_noises))


def _judge_pairs(table: Table, computed: Computed, evidence: Evidence) -> Findings:
    """Each pair's final findings: edges without association dropped, then the noise dependence applied.

    Every pair was judged once on its adjusted battery (``evidence.judged``);
    only a pair whose adjacency changes here is judged again.
    """
    policy = table.policy
    # A skeleton edge between two variables that show no association once
    # their conditioning set is partialled out is a test error of the
    # skeleton phase (typically the two parents of a collider, which no
    # conditioning set can separate), so the pair is treated as non-adjacent.
    dropped = [ij for ij, f in zip(table.pairs, evidence.judged) if f.adjacent and "no-association" in f.flags]
    skeleton = computed.skeleton.without(dropped)
    judged = [judge_pair(replace(battery, adjacent=False), evidence.pair_checks[ij], policy)
              if ij in skeleton.dropped else f
              for ij, battery, f in zip(table.pairs, evidence.batteries, evidence.judged)]
    in_equations = {ij: computed.structure is not None and ij not in skeleton.dropped
                    and equation_stage.judged_in_equations(f, ij, evidence.edge_checks.get(ij),
                                                           evidence.equation_checks, policy)
                    for ij, f in zip(table.pairs, judged)}
    judged = [equation_stage.judge_in_equations(f, ij, evidence.edge_checks.get(ij), evidence.equation_checks,
                                                policy) if in_equations[ij] else f
              for ij, f in zip(table.pairs, judged)]
    separation, separated = _separated_given_splines(table, skeleton, judged, evidence)
    if separation:
        skeleton = skeleton.without(separated)
        judged = [_tested_for_separation(f, battery, separation.get(ij, ()), ij in separated,
                                         evidence.pair_checks[ij], policy)
                  for ij, f, battery in zip(table.pairs, judged, evidence.batteries)]
    misspecified = {name for f in judged if f.adjacent and "nonlinear" in f.flags for name in (f.x, f.y)}
    final = []
    for ij, f in zip(table.pairs, judged):
        noise = evidence.noise_dependence.get(ij)
        if noise is None:
            final.append(f)
        elif f.x in misspecified or f.y in misspecified:
            noise = replace(noise, note=NOT_A_NOISE)
            final.append(replace(f, checks=f.checks + (noise,)))
        else:
            final.append(with_noise_dependence(f, noise, policy))
    final = [with_distant_noise_dependence(f, evidence.distant_noise[ij], misspecified, policy)
             if not f.adjacent and ij in evidence.distant_noise else f for ij, f in zip(table.pairs, final)]
    bent = _bent_links_by_pair(evidence)
    final = [f if ij in separated or ij not in bent else equation_stage.judge_bent_edge(f, bent[ij], policy)
             for ij, f in zip(table.pairs, final)]
    final = _judged_with_neighbours(table, skeleton, final, in_equations, evidence.noise_dependence,
                                    misspecified)
    return Findings(pairs=tuple(final), skeleton=skeleton)


def _judged_with_neighbours(table: Table, skeleton: Skeleton, judged: list[PairFindings],
                            in_equations: dict[Pair, bool], noise_dependence: dict[Pair, CheckResult],
                            misspecified: set[str]) -> list[PairFindings]:
    """Each pair flagged ``confounding-suspected`` on regressions of one variable on the other alone (the
    battery's, or a bent equation's splines), judged again with each side's other skeleton neighbours as
    splines (:func:`equation_stage.fits_with_neighbours`).  Where the flag is withdrawn (and with it any
    orientation the battery made beside it), a material dependence of the pair's structural noise estimates
    raises it again (:func:`noise_estimates_flag`)."""
    pending = [ij for ij, f in zip(table.pairs, judged)
               if skeleton.adjacent(ij) and equation_stage.rests_on_marginal_regressions(f, in_equations[ij])]
    if not pending:
        return judged
    p = len(table.names)
    neighbours = [[k for k in range(p) if k != v and skeleton.adjacent((min(v, k), max(v, k)))] for v in range(p)]
    out = list(judged)
    position = {ij: k for k, ij in enumerate(table.pairs)}
    for ij in pending:
        tests = equation_stage.neighbour_edge_task(table.values, table.names, neighbours, ij, table.policy)
        findings = equation_stage.fits_with_neighbours(out[position[ij]], tests, table.policy)
        noise = noise_dependence.get(ij)
        if ("confounding-suspected" not in findings.flags and noise is not None
                and not {findings.x, findings.y} & misspecified
                and noise_estimates_flag(findings, noise, table.policy)):
            findings = replace(findings, flags=findings.flags + ("confounding-suspected",),
                               facts=findings.facts | {"confounding-suspected", "noise-estimates-dependent"})
        out[position[ij]] = findings
    return out


def _bent_links_by_pair(evidence: Evidence) -> dict[Pair, list[Tagged]]:
    """The spline-equation tests of each link (:func:`equation_stage.bent_links`), keyed by its table pair."""
    out: dict[Pair, list[Tagged]] = {}
    for (parent, child), tests in evidence.spline_edge_checks.items():
        out.setdefault((min(parent, child), max(parent, child)), []).extend(tests)
    return out


def _separated_given_splines(table: Table, skeleton: Skeleton, judged: Sequence[PairFindings],
                             evidence: Evidence) -> tuple[dict[Pair, tuple[CheckResult, ...]], frozenset[Pair]]:
    """The separation checks of each adjacent pair with a common neighbour in a relation judged nonlinear,
    and the pairs a spline separated.

    The skeleton's Fisher-z tests condition linearly, so a chain through a
    saturating curve (a -> k -> b with k -> b bent) keeps a - b partially
    correlated and the skeleton keeps a spurious edge, which the noise-based
    tests may then orient.  Each such pair is tested again with both ends
    regressed on a spline of the neighbour (:func:`separation_given_spline`);
    the tests are adjusted together as one family.  A pair is separated when
    no test is significant for one neighbour; its checks are marked
    ``passed=False`` and the pipeline drops that edge.
    """
    policy, names, X = table.policy, table.names, table.values
    bent = sorted({v for ij, f in zip(table.pairs, judged) if f.adjacent and "nonlinear" in f.flags for v in ij})
    if not bent:
        return {}, frozenset()
    position = {name: k for k, name in enumerate(names)}

    def linked(a: int, b: int) -> bool:
        return skeleton.adjacent((min(a, b), max(a, b)))

    groups: dict[tuple[Pair, int], list[Tagged]] = {}
    for ij, battery in zip(table.pairs, evidence.batteries):
        i, j = ij
        if not skeleton.adjacent(ij):
            continue
        for k in bent:
            if k in ij or not (linked(i, k) and linked(j, k)):
                continue
            kept = [position[c] for c in battery.conditioning if position[c] != k]
            seed = derived_seed(policy.seed, "separation given a spline", names[i], names[j], names[k])
            groups[(ij, k)] = separation_given_spline(X[:, i], X[:, j], names[i], names[j], X[:, k], names[k],
                                                      X[:, kept] if kept else None, policy, seed)
    if not groups:
        return {}, frozenset()
    adjusted = adjust_named_groups(groups, policy.correction)
    separated = frozenset(ij for (ij, _), tests in adjusted.items()
                          if not any(significant(t.result, policy.alpha) for t in tests))
    out: dict[Pair, tuple[CheckResult, ...]] = {}
    for (ij, _), tests in adjusted.items():
        out[ij] = out.get(ij, ()) + tuple(replace(t.result, passed=False if ij in separated else None)
                                          for t in tests)
    return out, separated


def _tested_for_separation(findings: PairFindings, battery: PairBattery, checks: tuple[CheckResult, ...],
                           separated: bool, battery_checks: list[Tagged], policy: Policy) -> PairFindings:
    """A pair's findings with its separation checks; a pair a spline separated becomes non-adjacent."""
    if not separated:
        return replace(findings, checks=findings.checks + checks)
    apart = judge_pair(replace(battery, adjacent=False), battery_checks, policy)
    return replace(apart, flags=("no-association",), facts=frozenset({"not-adjacent", "no-association"}),
                   checks=apart.checks + checks)


# ---------------------------------------------------------------- rules, verdicts, gate

def _conclude(table: Table, screen: Screen, computed: Computed, variables: VariableFindings,
              findings: Findings) -> Conclusion:
    """The rules applied to every finding, each edge's verdict, and the gate."""
    from preflight import graph as graphs

    policy, names = table.policy, table.names
    global_flags = list(screen.global_flags)
    if computed.structure is not None:
        global_flags += list(computed.structure.global_flags)
        if computed.whole_table.dependent_components:
            global_flags.append("dependent-components")
    if len(variables.gaussian_noises) >= 2:
        global_flags.append("multiple-gaussian-components")
    # The compelled orientations come from the class of the skeleton as
    # estimated, before edges without association were dropped (see Skeleton).
    status = graphs.edge_status(findings.skeleton.cpdag) if names else {}
    pair_facts: dict[tuple[str, str], frozenset[str]] = {}
    curved = {name for f in findings.pairs if f.adjacent and "nonlinear" in f.flags for name in (f.x, f.y)}
    for f, ij in zip(findings.pairs, table.pairs):
        facts = set(f.facts)
        # The class's compelled direction in the pair's own x, y terms; None when it compels none.
        compelled = {"i->j": "x->y", "j->i": "y->x"}.get(status.get(ij, "undirected"))
        if (compelled is not None and f.adjacent and {f.x, f.y} & curved
                and f.lingam_orientation == f.anm_orientation == "undetermined"):
            facts.add("beside-nonlinear")  # only where the class would give the edge its direction
        if compelled is not None and f.lingam_orientation != "undetermined":
            if compelled != f.lingam_orientation:
                facts.add("orientation-conflict")
        elif compelled is not None and f"equations-lean-{'y->x' if compelled == 'x->y' else 'x->y'}" in facts:
            facts.add("class-against-equations-lean")
        pair_facts[(f.x, f.y)] = frozenset(facts)
    if screen.void:
        for (i, j) in table.pairs:
            pair_facts[(names[i], names[j])] = frozenset({"not-adjacent"})
    any_nonlinear = ["any-nonlinear"] if any("nonlinear" in f.flags and f.adjacent for f in findings.pairs) else []
    context = {"rows_used": table.values.shape[0], "min_rows": policy.min_rows,
               "min_rows_orientation": policy.min_rows_orientation,
               "gaussian_noises": ", ".join(variables.gaussian_noises)}
    outcome = evaluate(frozenset(global_flags + any_nonlinear),
                       {k: frozenset(v) for k, v in screen.variable_flags.items()}, pair_facts, context)
    entries = _pair_entries(table, screen, findings, outcome, status)
    total = sum(1 for e in entries if e["adjacent"])
    oriented = sum(1 for e in entries if e["orientation"] != "undetermined")

    present_flags = set(global_flags)
    for entry in variables.entries + entries:
        present_flags.update(entry["flags"])
    failing_flags = sorted(set(policy.fail_on) & present_flags)
    reasons = list(outcome.reasons)
    if not reasons:
        reasons.append(f"Every one of the {total} adjacent edges is linear, homoscedastic, and leaves a residual "
                       "independent of its regressor in exactly one direction; no sign of hidden confounding.")
    for flag in failing_flags:
        reasons.append(f"Flag {flag} is present and the policy fails the gate on it (--fail-on).")
    return Conclusion(outcome=outcome, global_flags=tuple(global_flags), pair_entries=entries,
                      edges_oriented=oriented, edges_total=total, reasons=tuple(reasons),
                      passed=bool(meets(outcome.level, policy.require) and not failing_flags))


def _pair_entries(table: Table, screen: Screen, findings: Findings, outcome: RulesOutcome,
                  status: dict) -> tuple[dict[str, Any], ...]:
    """Each pair's report entry: the orientation the strongest level the rules leave it licenses."""
    entries: list[dict[str, Any]] = []
    for k, (i, j) in enumerate(table.pairs):
        x, y = table.names[i], table.names[j]
        finding: PairFindings | None = findings.pairs[k] if findings.pairs else None
        adjacent = findings.skeleton.adjacent((i, j)) and not screen.void
        orientation, basis = "undetermined", None
        if adjacent and finding is not None:
            banned = outcome.edge_ruled_out.get((x, y), frozenset())
            compelled = status.get((i, j), "undirected")
            if finding.lingam_orientation != "undetermined" and "linear-non-gaussian" not in banned:
                orientation, basis = finding.lingam_orientation, "linear-non-gaussian"
            elif finding.anm_orientation != "undetermined" and "additive-noise" not in banned:
                orientation, basis = finding.anm_orientation, "additive-noise"
            elif (compelled != "undirected" and "equivalence-class" not in banned
                  and level_rank(outcome.level) <= level_rank("equivalence-class")):
                orientation, basis = ("x->y" if compelled == "i->j" else "y->x"), "equivalence-class"
        entries.append({"x": x, "y": y, "adjacent": adjacent, "orientation": orientation, "basis": basis,
                        "flags": list(finding.flags) if finding is not None else [],
                        "checks": [r.to_dict() for r in finding.checks] if finding is not None else [],
                        "conditioning": list(finding.conditioning) if finding is not None else []})
    return tuple(entries)


# ---------------------------------------------------------------- report

def _report(table: Table, computed: Computed, evidence: Evidence, variables: VariableFindings,
            conclusion: Conclusion) -> Report:
    """The report dictionary (columns still in canonical order) and, if asked, the rows the plots draw."""
    loaded, policy, names, structure = table.data, table.policy, table.names, computed.structure
    outcome = conclusion.outcome
    report = {
        "schema_version": "1",
        "tool": {"name": "preflight", "version": __version__},
        "input": {"path": loaded.path, "sha256": loaded.sha256, "rows": loaded.rows, "rows_used": loaded.rows_used,
                  "columns": list(names), "warnings": list(loaded.warnings)},
        "settings": table.requested.to_dict(),
        "conclusion": {"level": outcome.level, "required": policy.require, "passed": conclusion.passed,
                       "reasons": list(conclusion.reasons), "edges_oriented": conclusion.edges_oriented,
                       "edges_total": conclusion.edges_total, "rules_fired": [fr.rule.id for fr in outcome.fired]},
        "variables": list(variables.entries),
        "pairs": list(conclusion.pair_entries),
        "global": {"flags": list(conclusion.global_flags),
                   "checks": [_identified_global(t.result).to_dict() for t in evidence.global_checks]},
        "structure": {
            "adjacency": computed.skeleton.source,
            "order": [names[i] for i in structure.order] if structure else [],
            "parents": ({names[c]: [names[q] for q in ps] for c, ps in enumerate(structure.parents)}
                        if structure else {}),
            "gaussian_noises": list(variables.gaussian_noises),
        },
        "cautions": list(CAUTIONS) + list(outcome.cautions) + [f"Input: {w}" for w in loaded.warnings],
        "generated_at": _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat(),
    }
    samples = None
    rows = table.plot_rows
    if rows is not None:
        samples = {"names": list(names), "values": table.values[rows], "rows": rows, "n": table.values.shape[0],
                   "noise": structure.noise[rows] if structure is not None else None,
                   "exponents": {name: int(e) for name, e in zip(names, table.exponents)},
                   "fits": _plotted_fits(evidence.batteries, conclusion.pair_entries)}
    return Report(data=report, samples=samples)


def _plotted_fits(batteries: Sequence[PairBattery], entries) -> dict[frozenset[str], PlotFits]:
    """The battery fits the HTML plots draw: those of the pairs reported adjacent, splines only where nonlinear."""
    fits = {}
    for battery, entry in zip(batteries, entries):
        if entry["adjacent"] and battery.plot_fits is not None:
            kept = battery.plot_fits if "nonlinear" in entry["flags"] else battery.plot_fits.without_splines()
            fits[frozenset((battery.x, battery.y))] = kept
    return fits


def _rows_needed_check(noise_column: np.ndarray, exact: bool, name: str, policy: Policy) -> CheckResult:
    from preflight import structure
    from preflight.checks.normality import shape

    if exact:
        return not_computed(f"rows needed (noise of {name})", int(noise_column.shape[0]), NO_NOISE).identified(
            scope="variable", variables=(name,), test="rows-needed", variant=NOISE_ESTIMATE)
    s = shape(noise_column)
    needed = structure.rows_needed(s.skewness, s.excess_kurtosis, alpha=policy.alpha)
    return CheckResult(
        name=f"rows needed (noise of {name})", statistic=float(needed) if needed is not None else float("nan"),
        p_value=None, effect=float(s.excess_kurtosis), effect_name="excess kurtosis", n=int(noise_column.shape[0]),
        note=("rows for the Jarque-Bera test to detect this noise's skewness "
              f"({s.skewness:.3f}) and excess kurtosis ({s.excess_kurtosis:.3f}) with 80% power at alpha "
              f"{policy.alpha:g}" if needed is not None
              else "noise shape indistinguishable from Gaussian: no finite number"),
    ).identified(scope="variable", variables=(name,), test="rows-needed", variant=NOISE_ESTIMATE)


def _identified_global(result: CheckResult) -> CheckResult:
    """A whole-table check with its identity: the test its function named, no family, no variables."""
    return result if result.identity is not None else result.identified(scope="global")


def canonical_columns(names) -> list[int]:
    """Positions of the columns in the order every analysis step sees them: sorted by name.

    Whatever the order of the columns in the input, the analysis then makes
    the same choices (first separating sets, ties of the causal order, the
    starting point of FastICA, the direction each pair is computed in), so
    the verdicts do not depend on it.  They may depend on the names: a
    renamed column can take another place in this order.
    """
    return sorted(range(len(names)), key=lambda k: names[k])


def unit_exponents(values: np.ndarray) -> np.ndarray:
    """Per column, the power of two that brings its largest magnitude into [0.5, 1).

    Multiplying by a power of two is exact in floating point (short of the
    subnormal range), so every later step computes the same digits it would
    on the column in its own units, while squares, fourth powers and cross
    products of 1e-200 or 1e200 no longer underflow or overflow.  A column
    of zeros keeps exponent 0.
    """
    if values.size == 0:
        return np.zeros(values.shape[1], dtype=int)
    largest = np.abs(values).max(axis=0)
    return np.where(largest > 0, np.frexp(largest)[1], 0).astype(int)


_SWAPPED = {"x->y": "y->x", "y->x": "x->y"}


def _in_input_order(report: Report, loaded: LoadedData, order: Sequence[int]) -> Report:
    names = list(loaded.names)
    position = {name: k for k, name in enumerate(names)}
    data = report.data
    data["input"]["columns"] = names
    by_name = {v["name"]: v for v in data["variables"]}
    data["variables"] = [by_name[name] for name in names]
    by_pair = {frozenset((p["x"], p["y"])): p for p in data["pairs"]}
    pairs = []
    for i, j in itertools.combinations(range(len(names)), 2):
        pair = by_pair[frozenset((names[i], names[j]))]
        if pair["x"] != names[i]:
            pair["x"], pair["y"] = pair["y"], pair["x"]
            pair["orientation"] = _SWAPPED.get(pair["orientation"], pair["orientation"])
        pair["conditioning"] = sorted(pair["conditioning"], key=position.__getitem__)
        pairs.append(pair)
    data["pairs"] = pairs
    structure = data["structure"]
    structure["parents"] = {name: sorted(structure["parents"][name], key=position.__getitem__)
                            for name in names if name in structure["parents"]}
    samples = report.samples
    if samples is not None:
        inverse = np.argsort(order)
        rows = samples["rows"]
        noise = samples["noise"]
        # Noise estimates stay in the scaled units (plots standardise them);
        # back in the input's units they could overflow near 1e308.
        samples = {**samples, "names": names, "values": loaded.values[rows],
                   "noise": None if noise is None else noise[:, inverse]}
    return Report(data=data, samples=samples)

