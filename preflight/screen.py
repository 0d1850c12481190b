"""Per-variable screen: findings about each column on its own.

Each finding is a documented rule with its threshold in :class:`Policy`.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from preflight.policy import Policy
from preflight.results import CheckResult


@dataclass(frozen=True)
class VariableScreen:
    name: str
    flags: tuple[str, ...]
    checks: tuple[CheckResult, ...]


def distinct_values_check(x: np.ndarray, policy: Policy) -> CheckResult:
    """Distinct values and tie share of one column (descriptive; common practice)."""
    n = x.shape[0]
    distinct = int(np.unique(x).shape[0])
    tie_share = 1.0 - distinct / n
    return CheckResult(
        name="distinct values",
        statistic=float(distinct),
        p_value=None,
        effect=tie_share,
        effect_name="tie share",
        n=n,
        note=(f"discrete when at most {policy.discrete_max_levels} distinct values "
              f"or fewer than {policy.discrete_min_distinct_share:.0%} of rows distinct"),
    )


def is_constant(x: np.ndarray) -> bool:
    return bool(np.ptp(x) == 0) if x.size else True


def screen_variables(X: np.ndarray, names: list[str], policy: Policy) -> list[VariableScreen]:
    """Screen every column of X (rows already cleaned of missing values)."""
    out = []
    for j, name in enumerate(names):
        x = X[:, j]
        flags: list[str] = []
        checks: list[CheckResult] = []
        distinct = distinct_values_check(x, policy)
        checks.append(distinct)
        if is_constant(x):
            flags.append("constant")
        elif (distinct.statistic <= policy.discrete_max_levels
              or distinct.statistic < policy.discrete_min_distinct_share * x.shape[0]):
            flags.append("discrete")
        out.append(VariableScreen(name=name, flags=tuple(flags), checks=tuple(checks)))
    return out
