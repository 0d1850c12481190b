"""Multiplicity correction within families of tests.

A *family* is one kind of question asked many times (for example "is this
residual independent of its regressor?" asked for every pair and
direction).  p-values are adjusted within a family across the whole table,
Holm (1979) by default or Benjamini and Hochberg (1995) on request.  The two
procedures are written out here in a few vectorised lines; they agree with
``statsmodels.stats.multitest.multipletests`` to round-off
(reference_checks/test_reference_evidence.py), which calls ``gc.collect()``
on every Holm adjustment and so costs a quarter of a second per family in
a process holding many objects.
"""

from __future__ import annotations

from collections import defaultdict
from collections.abc import Iterable
from dataclasses import dataclass, replace
from typing import cast

import numpy as np

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

    ``holm``: Holm's (1979) step-down, p_(i) * (m - i + 1) made monotone
    upwards.  ``fdr_bh``: Benjamini and Hochberg's (1995) step-up,
    p_(i) * m / i made monotone downwards from the largest.  Both capped at 1.
    """
    p = np.asarray(list(p_values), dtype=np.float64)
    m = p.size
    if m == 0:
        return p
    order = np.argsort(p, kind="stable")
    ranked = p[order]
    if method == "holm":
        adjusted = np.maximum.accumulate(ranked * np.arange(m, 0, -1))
    elif method == "fdr_bh":
        adjusted = np.minimum.accumulate((ranked * m / np.arange(1, m + 1))[::-1])[::-1]
    else:
        raise ValueError(f"unknown correction {method!r}")
    out = np.empty(m)
    out[order] = np.minimum(adjusted, 1.0)
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
        # positions holds only checks with a finite p-value.
        adjusted = adjust_p_values((cast(float, groups[g][k].result.p_value) for g, k in where), method)
        for (g, k), p_adj in zip(where, adjusted):
            tagged = out[g][k]
            out[g][k] = replace(tagged, result=replace(tagged.result, p_adjusted=float(p_adj)))
    return out


def significant(result: CheckResult, alpha: float) -> bool:
    """Rejected at alpha on the adjusted p-value (raw when no adjustment applies)."""
    p = result.p_adjusted if result.p_adjusted is not None else result.p_value
    return p is not None and p < alpha
