"""The frozen result object every check returns.

Mirrors the style of ``scipy.stats`` results: a small immutable record with
the statistic, its p-value, an effect size with its name, and the sample
size.  ``p_adjusted`` and ``passed`` are filled in later by the evidence
layer (multiplicity correction and policy thresholds); check functions leave
them at ``None``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Any


def _finite_or_none(value: float | None) -> float | None:
    if value is None:
        return None
    value = float(value)
    return value if math.isfinite(value) else None


@dataclass(frozen=True)
class CheckResult:
    """Outcome of one statistical check.

    Attributes
    ----------
    name : str
        Published name of the test, with the direction or target appended by
        the caller where it matters, e.g. ``"hsic (y on x)"``.
    statistic : float
        The test statistic.
    p_value : float or None
        Raw p-value; ``None`` for purely descriptive measures.
    effect : float or None
        Effect size on a scale that does not grow with n.
    effect_name : str or None
        What ``effect`` measures, e.g. ``"excess kurtosis"``.
    n : int
        Number of observations the check actually used.
    note : str
        Anything a reader needs to interpret the numbers (subsampling, the
        approximation used, a degenerate case).
    p_adjusted : float or None
        p-value after multiplicity correction within the check's family.
    passed : bool or None
        Whether the assumption the check guards holds at the policy's
        thresholds; ``None`` when the check is evidence rather than a guard.
    """

    name: str
    statistic: float
    p_value: float | None
    effect: float | None = None
    effect_name: str | None = None
    n: int = 0
    note: str = ""
    p_adjusted: float | None = None
    passed: bool | None = None

    def with_name(self, name: str) -> CheckResult:
        return replace(self, name=name)

    def to_dict(self) -> dict[str, Any]:
        # Every field is a number, a string, a bool or None, so a flat dict in
        # field order is what dataclasses.asdict builds, without its
        # recursive deep copy (a report converts hundreds of results).
        return {
            "name": self.name,
            "statistic": _finite_or_none(self.statistic),
            "p_value": _finite_or_none(self.p_value),
            "effect": _finite_or_none(self.effect),
            "effect_name": self.effect_name,
            "n": int(self.n),
            "note": self.note,
            "p_adjusted": _finite_or_none(self.p_adjusted),
            "passed": self.passed,
        }
