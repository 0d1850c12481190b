"""The records that pass from one stage of an analysis to the next (:func:`preflight.pipeline.run`).

Each stage takes records and returns one; none is changed after it is made.
In order::

    Table -> Screen -> Computed (Structure, Skeleton, PairPlan, batteries) -> Evidence
          -> VariableFindings -> Findings -> Conclusion -> Report

Variables are column positions of the table as every stage sees it
(:class:`Table`: sorted by name); pairs are position pairs ``(i, j)`` with
``i < j``.
"""

from __future__ import annotations

import functools
import itertools
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from preflight.battery import PairBattery, PairFindings, SharedAssociation
from preflight.evidence import Tagged
from preflight.io import LoadedData
from preflight.policy import Policy
from preflight.results import CheckResult
from preflight.rules import RulesOutcome

Pair = tuple[int, int]


@dataclass(frozen=True)
class Table:
    """The table as every stage sees it: columns sorted by name, each scaled by a power of two."""

    data: LoadedData
    """The input's values and provenance, columns in canonical order and scale."""
    input_positions: tuple[int, ...]
    """Position in the input of each canonical column (to map the report back)."""
    exponents: np.ndarray
    """Per canonical column, the power of two its values were divided by."""
    policy: Policy
    """The policy in force, its seed resolved (:func:`preflight.seeds.working_seed`)."""
    requested: Policy
    """The policy as the user gave it, echoed in the report's settings."""
    plot_rows: np.ndarray | None = None
    """The rows the report's plots draw (sorted; chosen by ``pipeline.plot_rows``), or None when no plots are kept."""

    @property
    def values(self) -> np.ndarray:
        return self.data.values

    @property
    def names(self) -> tuple[str, ...]:
        return self.data.names

    @functools.cached_property
    def pairs(self) -> tuple[Pair, ...]:
        """Every pair of columns once, ``i < j``, in the order of the report (built on first use)."""
        return tuple(itertools.combinations(range(len(self.names)), 2))


@dataclass(frozen=True)
class Screen:
    """What the data show before any model: per-variable flags and checks, and the table-wide ones."""

    variable_flags: dict[str, tuple[str, ...]]
    variable_checks: dict[str, tuple[Tagged, ...]]
    """Per variable: the screen's checks (autocorrelation, missing values)."""
    global_checks: tuple[Tagged, ...]
    """Usable rows, collinearity, duplicated rows."""
    global_flags: tuple[str, ...]

    @property
    def void(self) -> bool:
        """Too few rows or a constant column: no structural analysis is run."""
        return "too-few-rows" in self.global_flags or any("constant" in f for f in self.variable_flags.values())


@dataclass(frozen=True)
class Structure:
    """The linear structural view: causal order, pruned parents, noise estimates and their checks."""

    order: tuple[int, ...]
    parents: tuple[tuple[int, ...], ...]
    """Per variable, the positions of its parents."""
    noise: np.ndarray
    """(rows, p) residual of each variable on its parents."""
    variable_checks: dict[int, tuple[Tagged, ...]]
    """Per variable: noise normality and spectral confounding strength."""
    global_checks: tuple[Tagged, ...]
    """Varsortability (when there are edges)."""
    global_flags: tuple[str, ...]


@dataclass(frozen=True)
class Skeleton:
    """Which pairs are adjacent, and the Markov equivalence class (CPDAG) of that skeleton.

    ``estimated`` is the skeleton as estimated (or read from the user's
    graph); ``dropped`` the edges removed afterwards because their pair shows
    no association once its conditioning set is partialled out.

    ``cpdag`` is the class of the skeleton *as estimated*, and the compelled
    orientations of the report are read from it even after edges are
    dropped.  Why: a class without the dropped edges needs a separating set
    for each dropped pair, which the skeleton search never found (the drop
    rests on the battery's association checks given the pair's conditioning
    set, not on a Fisher-z test of the search), and it may then add
    v-structures at the pair's common neighbours; with a user's graph it
    would mean a DAG other than the one given.  Which evidence should
    decide is issue #17.  Measured on the 14 tables of the identity check
    and 45 simulated ones (every kind and shape, 5 columns, 400 rows), 3
    had a dropped edge, and re-deriving the class with the pair's
    conditioning set as its separating set changed no edge's status there.
    """

    estimated: np.ndarray
    """(p, p) symmetric boolean adjacency before any edge is dropped."""
    cpdag: np.ndarray
    """(p, p) int8: the class of ``estimated`` (see :func:`preflight.graph.edge_status`)."""
    source: str
    """Where the adjacency came from, as the report says it."""
    dropped: frozenset[Pair] = frozenset()

    def adjacent(self, pair: Pair) -> bool:
        """Adjacent in the estimated skeleton and not dropped since."""
        return bool(self.estimated[pair]) and pair not in self.dropped

    def without(self, pairs) -> Skeleton:
        return replace(self, dropped=self.dropped | frozenset(pairs))


@dataclass(frozen=True)
class PairTask:
    """What the pair battery computes for one pair."""

    pair: Pair
    conditioning: tuple[int, ...]
    """Positions partialled out of both variables (see ``pipeline._conditioning_set``)."""
    adjacent: bool
    association: SharedAssociation | None = None
    """Association checks computed with many pairs at once (unconditioned pairs only), or None."""


@dataclass(frozen=True)
class PairPlan:
    """One task per pair, in pair order."""

    tasks: tuple[PairTask, ...]


@dataclass(frozen=True)
class WholeTable:
    """Henze-Zirkler and the FastICA cross-check."""

    checks: tuple[CheckResult, ...]
    dependent_components: bool


@dataclass(frozen=True)
class Computed:
    """Every raw (unadjusted) check of the analysis: the structural view, the skeleton, the batteries."""

    structure: Structure | None
    """None when the screen voids the analysis."""
    skeleton: Skeleton
    plan: PairPlan
    batteries: tuple[PairBattery, ...]
    """One per pair, in pair order (empty when void)."""
    noise_dependence: dict[Pair, Tagged]
    """HSIC between the noise estimates of each adjacent pair."""
    whole_table: WholeTable
    edge_tests: dict[Pair, tuple[Tagged, ...]] = field(default_factory=dict)
    """Per adjacent pair, the edge judged inside its structural equations (:func:`preflight.equations.judge_edge`):
    the forward and the reverse residual independence (family ``equation residual independence``) and the
    likelihood ratio on the partial residuals."""
    equation_checks: dict[int, tuple[Tagged, ...]] = field(default_factory=dict)
    """Per variable with parents, the checks of its structural equation on all its parents at once."""
    spline_edge_tests: dict[tuple[int, int], tuple[Tagged, ...]] = field(default_factory=dict)
    """Per (parent, child) link of an equation that bends on its own (:func:`preflight.equation_stage.bent_links`),
    the pair regressed on splines both ways (:func:`preflight.equation_stage.spline_edge_task`)."""
    distant_noise: dict[Pair, tuple[Tagged, ...]] = field(default_factory=dict)
    """Per pair the skeleton left non-adjacent, the HSIC between its noise estimates and, where material, the
    two direction tests (:func:`preflight.pipeline._distant_noise_tests`)."""


@dataclass(frozen=True)
class Evidence:
    """Every check with p-values adjusted within families across the whole table, and each pair's judgement.

    ``batteries`` are the final ones (after the second pass re-ran pairs
    conditioned on a variable in a nonlinear relation); ``judged`` holds each
    pair judged on its adjusted battery alone, before noise dependence and
    before any edge is dropped.
    """

    batteries: tuple[PairBattery, ...]
    pair_checks: dict[Pair, list[Tagged]]
    noise_dependence: dict[Pair, CheckResult]
    variable_checks: dict[str, list[Tagged]]
    global_checks: tuple[Tagged, ...]
    judged: tuple[PairFindings, ...] = ()
    edge_checks: dict[Pair, list[Tagged]] = field(default_factory=dict)
    """Per adjacent pair, ``Computed.edge_tests`` adjusted."""
    equation_checks: dict[int, list[Tagged]] = field(default_factory=dict)
    """Per variable with parents, ``Computed.equation_checks`` adjusted."""
    spline_edge_checks: dict[tuple[int, int], list[Tagged]] = field(default_factory=dict)
    """Per (parent, child) link, ``Computed.spline_edge_tests`` adjusted."""
    distant_noise: dict[Pair, list[Tagged]] = field(default_factory=dict)
    """Per non-adjacent pair, ``Computed.distant_noise`` adjusted."""


@dataclass(frozen=True)
class VariableFindings:
    """Per variable, its report entry (name, flags, judged checks); and the variables with Gaussian noise."""

    entries: tuple[dict[str, Any], ...]
    gaussian_noises: tuple[str, ...]


@dataclass(frozen=True)
class Findings:
    """Each pair's final findings (pair order) and the skeleton with the edges dropped for no association."""

    pairs: tuple[PairFindings, ...]
    skeleton: Skeleton


@dataclass(frozen=True)
class Conclusion:
    """The rules' outcome, each pair's verdict, and the gate."""

    outcome: RulesOutcome
    global_flags: tuple[str, ...]
    pair_entries: tuple[dict[str, Any], ...]
    """Per pair, its report entry (orientation, basis, flags, checks, conditioning)."""
    edges_oriented: int
    edges_total: int
    reasons: tuple[str, ...]
    passed: bool
