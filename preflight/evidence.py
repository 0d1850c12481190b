"""Multiplicity correction within families of tests.

A *family* is one kind of question asked many times (for example "is this
residual independent of its regressor?" asked for every pair and
direction).  p-values are adjusted within a family across the whole table,
Holm (1979) by default or Benjamini and Hochberg (1995) on request.

This module is the one place that adjusts p-values (:func:`adjust_p_values`,
through ``statsmodels.stats.multitest.multipletests``; :func:`with_adjusted`
writes the adjusted values into results) and the one place that decides
significance (:func:`rejects`): a test rejects its null hypothesis when its
p-value is strictly below alpha.  Strictly, so that it is the exact
complement of the PC-stable skeleton's rule, which treats a pair as
independent when p >= alpha.
"""

from __future__ import annotations

from collections import defaultdict
from collections.abc import Hashable, Iterable, Mapping, Sequence
from dataclasses import dataclass, replace
from typing import TypeVar, cast

import numpy as np

from preflight.policy import CORRECTIONS
from preflight.results import CheckResult


@dataclass(frozen=True)
class Tagged:
    """A check with the family it is corrected in and the role it plays."""

    family: str | None
    role: str
    """``forward`` (y on x), ``reverse`` (x on y), ``pair`` or ``variable``/``global``."""
    result: CheckResult


def adjust_p_values(p_values: Iterable[float], method: str) -> np.ndarray:
    """Multiplicity-adjusted p-values, in the order given.

    ``holm``: Holm's (1979) step-down; ``fdr_bh``: Benjamini and Hochberg's
    (1995) step-up; both capped at 1, computed by statsmodels'
    ``multipletests``.  Its Holm branch calls ``gc.collect()``, which in a
    process holding a few hundred thousand objects (numpy, scipy, pandas and
    scikit-learn loaded) took 30 ms per call; the objects alive before the
    call are frozen out of the collection meanwhile (``gc.freeze``), which
    leaves only what the call itself allocates to scan.
    """
    import gc

    from statsmodels.stats.multitest import multipletests

    if method not in CORRECTIONS:
        raise ValueError(f"unknown correction {method!r}")
    p = np.asarray(list(p_values), dtype=np.float64)
    if p.size == 0:
        return p
    gc.freeze()
    try:
        return np.asarray(multipletests(p, alpha=0.05, method=method)[1], dtype=np.float64)
    finally:
        gc.unfreeze()


def rejects(p_value, alpha: float):
    """The significance rule of every decision: p-value strictly below alpha.

    Takes a number or an array (elementwise); None or NaN never rejects.
    """
    if p_value is None:
        return False
    return np.less(p_value, alpha) if np.ndim(p_value) else bool(p_value < alpha)


def with_adjusted(results: Sequence[CheckResult], method: str) -> list[CheckResult]:
    """The results with ``p_adjusted`` filled in, adjusted together as one family.

    Results without a finite p-value are returned unchanged (``p_adjusted`` None).
    """
    out = list(results)
    where = [k for k, r in enumerate(out) if r.p_value is not None and np.isfinite(r.p_value)]
    for k, value in zip(where, adjust_p_values([cast(float, out[k].p_value) for k in where], method)):
        out[k] = replace(out[k], p_adjusted=float(value))
    return out


def adjust_families(groups: list[list[Tagged]], method: str) -> list[list[Tagged]]:
    """Fill ``p_adjusted`` for every tagged check that has a family and a p-value.

    ``groups`` is a list of lists (one per pair or variable); the same shape
    is returned.  Checks without a p-value or family keep ``p_adjusted=None``.
    """
    positions: dict[str, list[tuple[int, int]]] = defaultdict(list)
    for g, group in enumerate(groups):
        for k, tagged in enumerate(group):
            if tagged.family is not None and tagged.result.p_value is not None and np.isfinite(tagged.result.p_value):
                positions[tagged.family].append((g, k))
    out = [list(group) for group in groups]
    for family in sorted(positions):
        where = positions[family]
        adjusted = with_adjusted([groups[g][k].result for g, k in where], method)
        for (g, k), result in zip(where, adjusted):
            out[g][k] = replace(out[g][k], result=result)
    return out


Key = TypeVar("Key", bound=Hashable)


def adjust_named_groups(groups: Mapping[Key, list[Tagged]], method: str) -> dict[Key, list[Tagged]]:
    """:func:`adjust_families` on groups keyed by what they belong to; the same keys come back.

    The groups are adjusted in the mapping's order, so the numbers are those
    of :func:`adjust_families` on the same groups listed in that order.
    """
    keys = list(groups)
    return dict(zip(keys, adjust_families([list(groups[key]) for key in keys], method)))


def significant(result: CheckResult, alpha: float) -> bool:
    """Rejected at alpha on the adjusted p-value (raw when no adjustment applies)."""
    return rejects(result.p_adjusted if result.p_adjusted is not None else result.p_value, alpha)
