"""The stages of one analysis, in the order data flow through them."""

from __future__ import annotations

import datetime as _dt
import itertools
import os
from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace
from typing import Any, cast

import numpy as np

from preflight._version import __version__
from preflight.battery import PairBattery, PairFindings, derived_seed, judge_pair, run_pair_battery
from preflight.evidence import Tagged, adjust_families, significant
from preflight.io import LoadedData
from preflight.policy import Policy, level_rank
from preflight.report.model import CAUTIONS, Report
from preflight.results import NOISE_ESTIMATE, NOISE_ESTIMATES, CheckResult
from preflight.rules import evaluate, meets

Progress = Callable[[str, int, int], None]


@dataclass(frozen=True)
class StructuralView:
    order: tuple[int, ...]
    parents: tuple[tuple[int, ...], ...]
    noise: np.ndarray
    variable_checks: dict[int, list[Tagged]]
    global_checks: list[Tagged]
    global_flags: tuple[str, ...]


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


def _noise_dependence_task(noise: np.ndarray, pairs, policy: Policy) -> list[CheckResult]:
    return _noise_dependence_results(noise, _WORKER["names"], pairs, policy)


def _tag_noise_dependence(results: list[CheckResult], names, pairs, progress: Progress) -> dict:
    if pairs:
        progress("noise dependence", len(pairs), len(pairs))
    return {(i, j): Tagged("noise dependence", "pair", result.identified(
                scope="pair", family="noise dependence", variables=tuple(sorted((names[i], names[j]))), test="hsic",
                variant=NOISE_ESTIMATES, name=f"noise dependence (hsic) ({names[i]}, {names[j]})"))
            for (i, j), result in zip(pairs, results)}


# ---------------------------------------------------------------- stages

def _screen(loaded: LoadedData, policy: Policy):
    from preflight.screen import screen_variables

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
    return flags, checks


def _structural_view(X: np.ndarray, names: tuple[str, ...], policy: Policy, progress: Progress,
                     exponents=None) -> StructuralView:
    from preflight import structure
    from preflight.checks.normality import normality_checks

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
        for result in normality_checks(noise[:, j], max_n=policy.shapiro_max_n, seed=seed):
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
    return StructuralView(order=order, parents=parents, noise=noise, variable_checks=variable_checks,
                          global_checks=global_checks, global_flags=tuple(flags))


def _whole_table_screens(X: np.ndarray, policy: Policy) -> tuple[list[CheckResult], bool]:
    """Henze-Zirkler and the FastICA cross-check: their checks, and whether components are dependent.

    Neither feeds the pair battery, so with worker processes they run in one
    of them while the main process builds the structural view and the pairs.
    """
    from preflight import structure

    checks = [structure.henze_zirkler(X, seed=policy.seed)]
    ica = structure.fastica_gaussian_components(X, policy)
    checks += list(ica.checks)
    return checks, bool(ica.dependent)


def _whole_table_task(policy: Policy) -> tuple[list[CheckResult], bool]:
    return _whole_table_screens(_WORKER["X"], policy)


def _adjacency(X: np.ndarray, names: tuple[str, ...], policy: Policy, graph: str | None):
    """Adjacency matrix and CPDAG; from the user's graph or estimated by PC-stable.

    The estimated skeleton rests only on partial correlations, which stay
    valid for linear mechanisms whatever the noise shape; the structural
    view's order, which a nonlinear or confounded part of the table can
    scramble, never adds or removes an edge.  It only decides which common
    neighbours of a pair are conditioned on (see :func:`_conditioning_sets`).
    """
    from preflight import graph as graphs

    if graph is not None:
        dag = graphs.read_graph_file(graph, list(names))
        adjacency = (dag + dag.T) > 0
        cpdag = graphs.dag_to_cpdag(dag)
        return adjacency, cpdag, "hypothesised graph from " + os.path.basename(graph)
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
    return adjacency, cpdag, "estimated: PC-stable skeleton (Fisher-z partial correlations)"


def _conditioning_sets(i: int, j: int, adjacency: np.ndarray, parents) -> tuple[tuple[int, ...], ...]:
    """(Z for the pair, other parents of j, other parents of i).

    Z holds the common neighbours of i and j that the structural view puts
    among the parents of both: an observed common cause must be partialled
    out.  A common neighbour that is a parent of only one of them is either
    a common child of the two or a mediator; a child must not be conditioned
    on (that creates dependence) and leaving a mediator in the residual keeps
    it independent of the cause, so neither enters.  This also keeps a
    mis-estimated order elsewhere in the table from bending this pair.
    """
    common = set(np.flatnonzero(adjacency[i] & adjacency[j]).tolist()) - {i, j}
    conditioning = tuple(sorted(common & set(parents[i]) & set(parents[j])))
    others_of_j = conditioning
    others_of_i = conditioning
    return conditioning, others_of_j, others_of_i


def _shared_association(X: np.ndarray, names, pairs, policy: Policy,
                        progress: Progress | None = None) -> dict[tuple[int, int], tuple]:
    """Association checks of the given pairs (unconditioned) at once: (i, j) -> (pearson, spearman, hsic).

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
    return {pair: (pearson, spearman, hsic) for pair, (pearson, spearman), hsic in zip(pairs, linear, kernel)}


def _battery_task(args):
    i, j, conditioning, others_of_j, others_of_i, adjacent, policy, association = args
    X, names = _WORKER["X"], _WORKER["names"]

    def columns(index):
        return X[:, list(index)] if index else None

    return run_pair_battery(X[:, i], X[:, j], names[i], names[j], columns(conditioning),
                            tuple(names[c] for c in conditioning), adjacent, policy,
                            Z_for_y=columns(others_of_j), Z_for_x=columns(others_of_i),
                            association=association)


_WORKER: dict[str, Any] = {}


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


def _run_batteries(X, names, tasks, policy: Policy, progress: Progress, pool=None) -> list[PairBattery]:
    """Every pair's battery, in task order; results do not depend on the number of processes."""
    jobs = _jobs(policy, len(tasks))
    results: list[PairBattery | None] = [None] * len(tasks)
    _WORKER["X"], _WORKER["names"] = X, names
    # A non-adjacent pair whose association checks are all ready needs no more
    # computation: sending it to a worker would cost more than it does here.
    ready = [k for k, t in enumerate(tasks) if not t[5] and t[7] is not None and all(r is not None for r in t[7])]
    for k in ready:
        results[k] = _battery_task(tasks[k])
    heavy = [k for k in range(len(tasks)) if results[k] is None]
    # Counted over the pairs that need the whole battery: the others are done
    # already and would make the time left look shorter than it is.
    done = 0
    progress("pair battery", done, len(heavy))
    if pool is None or len(heavy) < 2:
        for k in heavy:
            results[k] = _battery_task(tasks[k])
            done += 1
            progress("pair battery", done, len(heavy))
        return cast("list[PairBattery]", results)  # every slot is filled by now
    chunk = max(1, len(heavy) // (8 * jobs))
    for k, result in zip(heavy, pool.map(_battery_task, [tasks[k] for k in heavy], chunksize=chunk)):
        results[k] = result
        done += 1
        progress("pair battery", done, len(heavy))
    return cast("list[PairBattery]", results)  # every slot is filled by now


def _drop_conditioning_in_nonlinear_relations(X, names, pair_index, sets, batteries: list[PairBattery],
                                              adjusted, groups: list[list[Tagged]], policy: Policy,
                                              progress: Progress | None = None):
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
    nonlinear pairs whose set holds none of them, until nothing is added.
    ``adjusted(batteries)`` adjusts every family of the table and ``groups``
    is its value for the batteries given; returns the final batteries and
    their adjusted groups.
    """
    _WORKER["X"], _WORKER["names"] = X, names
    current = {ij: sets[ij][0] for ij in pair_index}
    excluded: set[int] = set()
    batteries = list(batteries)
    for _ in range(len(names) + 1):
        findings = [judge_pair(b, g, policy) for b, g in zip(batteries, groups[:len(batteries)])]
        in_nonlinear = {v for ij, f in zip(pair_index, findings)
                        if f.adjacent and "nonlinear" in f.flags and not (set(current[ij]) & excluded)
                        and (excluded or not current[ij]) for v in ij}
        if in_nonlinear <= excluded:
            return batteries, groups
        excluded |= in_nonlinear
        rerun = [k for k, ij in enumerate(pair_index) if set(current[ij]) & excluded]
        for done, k in enumerate(rerun):
            ij = pair_index[k]
            if progress is not None:
                progress("second pass", done, len(rerun))
            dropped = tuple(c for c in current[ij] if c in excluded)
            kept = tuple(c for c in current[ij] if c not in excluded)
            current[ij] = kept
            battery = _battery_task((*ij, kept, kept, kept, batteries[k].adjacent, policy, None))
            note = (f"not partialled out: {', '.join(names[c] for c in dropped)}, in a relation judged "
                    "nonlinear, so its place in the linear causal order is not trusted")
            first = battery.checks[0]
            checks = (replace(first, result=replace(first.result, note=f"{first.result.note}; {note}"
                                                    if first.result.note else note)),) + battery.checks[1:]
            batteries[k] = replace(battery, checks=checks)
        if progress is not None and rerun:
            progress("second pass", len(rerun), len(rerun))
        groups = adjusted(batteries)
    return batteries, groups


def _identified_global(result: CheckResult) -> CheckResult:
    """A whole-table check with its identity: the test its function named, no family, no variables."""
    return result if result.identity is not None else result.identified(scope="global")


def _rows_needed_check(noise_column: np.ndarray, name: str, policy: Policy) -> CheckResult:
    from preflight import structure
    from preflight.checks.normality import shape

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


# ---------------------------------------------------------------- the run


def _analyse_table(X, names, pair_index, policy: Policy, graph, progress: Progress, pool, exponents=None):
    """Structural view, adjacency, every pair's battery and the whole-table screens."""
    whole = pool.submit(_whole_table_task, policy) if pool is not None else None
    view = _structural_view(X, names, policy, progress, exponents)
    progress("skeleton", 0, 1)
    adjacency, cpdag, adjacency_source = _adjacency(X, names, policy, graph)
    progress("skeleton", 1, 1)
    sets = {(i, j): _conditioning_sets(i, j, adjacency, view.parents) for i, j in pair_index}
    noise_pairs = [ij for ij in pair_index if adjacency[ij]]
    # The noise HSICs need nothing the pairs need: with workers they run in
    # the one the whole-table screens left idle while this process shares
    # the association checks.
    noise_future = (pool.submit(_noise_dependence_task, view.noise, noise_pairs, policy)
                    if pool is not None and noise_pairs else None)
    ready = _shared_association(X, names, [pair for pair in pair_index if not sets[pair][0]], policy, progress)
    tasks = [(i, j, *sets[(i, j)], bool(adjacency[i, j]), policy, ready.get((i, j))) for i, j in pair_index]
    if noise_pairs:
        progress("noise dependence", 0, len(noise_pairs))
    noise_results = (noise_future.result() if noise_future is not None
                     else _noise_dependence_results(view.noise, names, noise_pairs, policy, progress))
    noise_dep = _tag_noise_dependence(noise_results, names, noise_pairs, progress)
    batteries = _run_batteries(X, names, tasks, policy, progress, pool)
    progress("whole-table screens", 0, 1)
    whole_result = whole.result() if whole is not None else _whole_table_screens(X, policy)
    progress("whole-table screens", 1, 1)
    return view, adjacency, cpdag, adjacency_source, noise_dep, batteries, whole_result, sets


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


def run(loaded: LoadedData, policy: Policy, *, graph: str | None, progress: Progress,
        keep_samples: bool) -> Report:
    """One analysis, order- and unit-free: columns sorted by name and scaled by powers of two, then mapped back.

    The report lists variables and pairs in the input's order, each pair with
    x before y as in the input; a pair computed the other way round has its
    orientation swapped to match (check names keep the literal names they
    were computed with).
    """
    names = loaded.names
    order = canonical_columns(names)
    exponents = unit_exponents(loaded.values)
    values = np.ldexp(loaded.values[:, order], -exponents[order][None, :])
    # The same memory layout as the input keeps the round-off of every later
    # matrix product as it was.
    values = np.asfortranarray(values) if loaded.values.flags.f_contiguous and not loaded.values.flags.c_contiguous \
        else np.ascontiguousarray(values)
    canonical = replace(loaded, values=values, names=tuple(names[k] for k in order))
    report = _run_canonical(canonical, policy, graph=graph, progress=progress, keep_samples=keep_samples,
                            exponents=exponents[order])
    return _in_input_order(report, loaded, order)


_SWAPPED = {"x->y": "y->x", "y->x": "x->y"}


def _in_input_order(report: Report, loaded: LoadedData, order: list[int]) -> Report:
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


def _run_canonical(loaded: LoadedData, policy: Policy, *, graph: str | None, progress: Progress,
                   keep_samples: bool, exponents=None) -> Report:
    from preflight.policy import working_seed

    requested = policy  # echoed in the report as the user gave it
    policy = replace(policy, seed=working_seed(policy.seed))
    X, names = loaded.values, loaded.names
    n, p = X.shape
    var_flags, var_checks = _screen(loaded, policy)
    global_flags: list[str] = []
    global_checks: list[Tagged] = [Tagged(None, "global", CheckResult(
        name="usable rows", statistic=float(n), p_value=None, effect=None, effect_name=None, n=n,
        note=(f"minimum {policy.min_rows} for any conclusion, {policy.min_rows_orientation} "
              "to orient from noise shape")))]
    if n < policy.min_rows:
        global_flags.append("too-few-rows")
    elif n < policy.min_rows_orientation:
        global_flags.append("too-few-rows-to-orient")
    from preflight.screen import collinearity_check, duplicate_rows_check

    global_checks.append(Tagged(None, "global", collinearity_check(X, list(names), policy)))
    duplicates = duplicate_rows_check(X, list(names), policy)
    global_checks.append(Tagged(None, "global", duplicates))
    if duplicates.passed is False:
        global_flags.append("duplicate-rows")

    void = "too-few-rows" in global_flags or any("constant" in f for f in var_flags.values())
    view: StructuralView | None = None
    adjacency = np.zeros((p, p), dtype=bool)
    cpdag = np.zeros((p, p), dtype=np.int8)
    adjacency_source = "not estimated: the data void the analysis"
    batteries: list[PairBattery] = []
    pair_index = list(itertools.combinations(range(p), 2))
    if not void:
        pool = _start_pool(X, names, policy)
        try:
            view, adjacency, cpdag, adjacency_source, noise_dep, batteries, whole, sets = _analyse_table(
                X, names, pair_index, policy, graph, progress, pool, exponents)
        except BaseException:  # interrupted (Ctrl-C, SIGTERM) or failed: no worker may be left behind
            if pool is not None:
                _stop_pool(pool, interrupted=True)
            raise
        if pool is not None:
            _stop_pool(pool, interrupted=False)
        whole_checks, dependent = whole
        # Report order: Henze-Zirkler, the FastICA checks, then the view's own (varsortability).
        global_checks += [Tagged(None, "global", c) for c in whole_checks] + view.global_checks
        global_flags += list(view.global_flags) + (["dependent-components"] if dependent else [])
        for j in range(p):
            var_checks[names[j]] += view.variable_checks[j]
    elif graph is not None:
        from preflight import graph as graphs

        graphs.read_graph_file(graph, list(names))  # a bad graph file is still a usage error

    # ---- evidence: adjust within families across the whole table
    noise_dep = noise_dep if view is not None else {}
    noise_keys = [ij for ij in pair_index if ij in noise_dep]
    noise_groups = [[noise_dep[ij]] for ij in noise_keys]
    var_groups = [var_checks[name] for name in names]

    def adjusted(pair_batteries: list[PairBattery]) -> list[list[Tagged]]:
        return adjust_families([list(b.checks) for b in pair_batteries] + noise_groups + var_groups
                               + [global_checks], policy.correction)

    groups = adjusted(batteries)
    if view is not None:
        batteries, groups = _drop_conditioning_in_nonlinear_relations(
            X, names, pair_index, sets, batteries, adjusted, groups, policy, progress)
    pair_groups = groups[:len(batteries)]
    noise_groups = groups[len(pair_groups):len(pair_groups) + len(noise_groups)]
    var_groups = groups[len(pair_groups) + len(noise_groups):-1]
    global_checks = groups[-1]

    # ---- variables: noise shape and rows needed
    gaussian_noises: list[str] = []
    from preflight.battery import _nongaussian

    variables_out = []
    for j, name in enumerate(names):
        tagged = var_groups[j]
        if view is not None:
            noise_norm = [t.result for t in tagged if t.family == "noise normality"]
            if not _nongaussian(noise_norm, policy):
                gaussian_noises.append(name)
            tagged = tagged + [Tagged(None, "variable", _rows_needed_check(view.noise[:, j], name, policy))]
        flags = list(var_flags[name])
        judged = []
        for t in tagged:
            r = t.result
            if t.family == "noise normality":
                r = replace(r, passed=None if r.p_value is None else significant(r, policy.alpha))
            elif t.family == "autocorrelation":
                r = replace(r, passed="autocorrelated" not in flags)
            judged.append(r)
        variables_out.append({"name": name, "flags": flags, "checks": [r.to_dict() for r in judged]})
    if len(gaussian_noises) >= 2:
        global_flags.append("multiple-gaussian-components")

    # ---- pairs: judge, then apply noise dependence where equations are linear
    findings: list[PairFindings] = []
    misspecified: set[str] = set()
    # A skeleton edge between two variables that show no association once
    # their conditioning set is partialled out is a test error of the
    # skeleton phase (typically the two parents of a collider, which no
    # conditioning set can separate), so the pair is treated as non-adjacent.
    preliminary = [judge_pair(b, g, policy) for b, g in zip(batteries, pair_groups)]
    for k, f in enumerate(preliminary):
        if f.adjacent and "no-association" in f.flags:
            i, j = pair_index[k]
            adjacency[i, j] = adjacency[j, i] = False
            batteries[k] = replace(batteries[k], adjacent=False)
            preliminary[k] = judge_pair(batteries[k], pair_groups[k], policy)
    for f in preliminary:
        if f.adjacent and "nonlinear" in f.flags:
            misspecified.update((f.x, f.y))
    noise_of = {ij: group[0].result for ij, group in zip(noise_keys, noise_groups)}
    for k, (b, g) in enumerate(zip(batteries, pair_groups)):
        nd = noise_of.get(pair_index[k])
        if nd is not None and (b.x in misspecified or b.y in misspecified):
            nd = replace(nd, note="not used as a confounding signal: a structural equation at this pair is "
                                  "nonlinear, so its linear noise estimate is not a noise")
            findings.append(replace(judge_pair(b, g, policy), checks=preliminary[k].checks + (nd,)))
        else:
            findings.append(judge_pair(b, g, policy, noise_dependence=nd))

    # ---- class: compelled orientations and conflicts with noise-based ones
    from preflight import graph as graphs

    status = graphs.edge_status(cpdag) if p else {}
    pair_facts: dict[tuple[str, str], frozenset[str]] = {}
    for f, (i, j) in zip(findings, pair_index):
        facts = set(f.facts)
        compelled = status.get((i, j), "undirected")
        if f.lingam_orientation != "undetermined" and compelled in ("i->j", "j->i"):
            wanted = "x->y" if compelled == "i->j" else "y->x"
            if wanted != f.lingam_orientation:
                facts.add("orientation-conflict")
        pair_facts[(f.x, f.y)] = frozenset(facts)
    if void:
        for (i, j) in pair_index:
            pair_facts[(names[i], names[j])] = frozenset({"not-adjacent"})
    if any("nonlinear" in f.flags and f.adjacent for f in findings):
        global_flags.append("any-nonlinear")
    global_fact_set = frozenset(global_flags)
    context = {"rows_used": n, "min_rows": policy.min_rows, "min_rows_orientation": policy.min_rows_orientation,
               "gaussian_noises": ", ".join(gaussian_noises)}
    outcome = evaluate(global_fact_set, {k: frozenset(v) for k, v in var_flags.items()}, pair_facts, context)
    global_flags = [f for f in global_flags if f != "any-nonlinear"]

    # ---- per-edge verdicts
    pairs_out: list[dict[str, Any]] = []
    oriented = 0
    total = 0
    finding: PairFindings | None
    for k, (i, j) in enumerate(pair_index):
        x, y = names[i], names[j]
        if findings:
            finding = findings[k]
            flags, checks = list(finding.flags), [r.to_dict() for r in finding.checks]
        else:
            finding, flags, checks = None, [], []
        adjacent = bool(adjacency[i, j]) and not void
        orientation, basis = "undetermined", None
        if adjacent and finding is not None:
            total += 1
            banned = outcome.edge_ruled_out.get((x, y), frozenset())
            compelled = status.get((i, j), "undirected")
            if finding.lingam_orientation != "undetermined" and "linear-non-gaussian" not in banned:
                orientation, basis = finding.lingam_orientation, "linear-non-gaussian"
            elif finding.anm_orientation != "undetermined" and "additive-noise" not in banned:
                orientation, basis = finding.anm_orientation, "additive-noise"
            elif (compelled != "undirected" and "equivalence-class" not in banned
                  and level_rank(outcome.level) <= level_rank("equivalence-class")):
                orientation, basis = ("x->y" if compelled == "i->j" else "y->x"), "equivalence-class"
            if orientation != "undetermined":
                oriented += 1
        pairs_out.append({"x": x, "y": y, "adjacent": adjacent, "orientation": orientation, "basis": basis,
                          "flags": flags, "checks": checks,
                          "conditioning": list(finding.conditioning) if finding is not None else []})

    # ---- conclusion and gate
    present_flags = set(global_flags)
    for v in variables_out:
        present_flags.update(v["flags"])
    for pair in pairs_out:
        present_flags.update(pair["flags"])
    failing_flags = sorted(set(policy.fail_on) & present_flags)
    reasons = list(outcome.reasons)
    if not reasons:
        reasons.append(f"Every one of the {total} adjacent edges is linear, homoscedastic, and leaves a residual "
                       "independent of its regressor in exactly one direction; no sign of hidden confounding.")
    for flag in failing_flags:
        reasons.append(f"Flag {flag} is present and the policy fails the gate on it (--fail-on).")
    passed = meets(outcome.level, policy.require) and not failing_flags

    cautions = list(CAUTIONS) + list(outcome.cautions) + [f"Input: {w}" for w in loaded.warnings]
    settings = requested.to_dict()
    report = {
        "schema_version": "1",
        "tool": {"name": "preflight", "version": __version__},
        "input": {"path": loaded.path, "sha256": loaded.sha256, "rows": loaded.rows, "rows_used": loaded.rows_used,
                  "columns": list(names), "warnings": list(loaded.warnings)},
        "settings": settings,
        "conclusion": {"level": outcome.level, "required": policy.require, "passed": bool(passed),
                       "reasons": reasons, "edges_oriented": oriented, "edges_total": total,
                       "rules_fired": [fr.rule.id for fr in outcome.fired]},
        "variables": variables_out,
        "pairs": pairs_out,
        "global": {"flags": global_flags, "checks": [_identified_global(t.result).to_dict() for t in global_checks]},
        "structure": {
            "adjacency": adjacency_source,
            "order": [names[i] for i in view.order] if view else [],
            "parents": {names[c]: [names[q] for q in ps] for c, ps in enumerate(view.parents)} if view else {},
            "gaussian_noises": gaussian_noises,
        },
        "cautions": cautions,
        "generated_at": _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat(),
    }
    samples = None
    if keep_samples:
        rng = np.random.default_rng(derived_seed(policy.seed, "plot sample"))
        rows = np.sort(rng.choice(n, size=min(n, policy.plot_max_points), replace=False))
        samples = {"names": list(names), "values": X[rows], "rows": rows, "n": n,
                   "noise": view.noise[rows] if view is not None else None}
    return Report(data=report, samples=samples)
