"""The frozen result object every check returns.

Mirrors the style of ``scipy.stats`` results: a small immutable record with
the statistic, its p-value, an effect size with its name, and the sample
size.  ``p_adjusted`` and ``passed`` are filled in later by the evidence
layer (multiplicity correction and policy thresholds); check functions leave
them at ``None``.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field, replace

SCOPES = ("variable", "pair", "global")

STRUCTURAL_EQUATION = "structural equation"
"""Variant of a check computed on a structural equation (a variable on all its parents at once)."""
SPLINE_EQUATION = "structural equation with splines"
"""Variant of a check computed on a structural equation with every parent entered as a spline."""
NEIGHBOURS_AS_SPLINES = "neighbours as splines"
"""Variant of a check computed on a pair's regression with each side's other skeleton neighbours as splines."""
SPLINE_RESIDUAL = "spline residual"
"""Variant of a check computed on the residual of the regression spline rather than of the straight line."""
NOISE_ESTIMATE = "noise estimate"
"""Variant of a check computed on a variable's structural noise estimate."""
NOISE_ESTIMATES = "noise estimates"
"""Variant of a pair check computed on the two variables' structural noise estimates."""
GIVEN_A_SPLINE = "given a spline"
"""Variant of an association check of two variables both regressed on a cubic spline of a common neighbour."""


@dataclass(frozen=True)
class CheckIdentity:
    """What a check is, as fields: the one thing code may branch on.

    A check's ``name`` and ``note`` are display text for the reader; every
    decision (which residual a variance check was computed on, which HSIC a
    plot shows, which methods the report cites) reads these fields instead.
    They are not written to the JSON report (schema version 1 has no slot
    for them); :mod:`preflight.report.identity` recovers them from a saved
    report.

    Attributes
    ----------
    test : str
        The published test, as a slug: ``"shapiro-wilk"``, ``"hsic"``,
        ``"ramsey-reset"``, ``"ljung-box"``, ``"rows-needed"``.
    family : str or None
        The multiplicity family it is corrected in (:mod:`preflight.evidence`);
        None when it is not corrected.
    scope : str
        ``"variable"``, ``"pair"`` or ``"global"``; empty while only the
        check function has named its test (the caller sets the rest).
    variables : tuple of str
        The variables involved: one for a variable, the pair as the battery
        ran it (names sorted) for a pair, none for the whole table.
    direction : (response, regressor) or None
        For a check of one regression's residual.
    variant : str or None
        What the test was applied to, where a test has several uses:
        ``"spline residual"`` (residual of the regression spline rather
        than of the straight line), ``"noise estimate"`` (a variable's
        structural noise estimate), ``"noise estimates"`` (two of them).
    null : str or None
        How an HSIC p-value was obtained: ``"gamma"``, ``"permutation"`` or
        ``"random features"``; None for other tests.
    """

    test: str
    family: str | None = None
    scope: str = ""
    variables: tuple[str, ...] = ()
    direction: tuple[str, str] | None = None
    variant: str | None = None
    null: str | None = None


def test_id(published_name: str) -> str:
    """The slug of a check function's own test name: ``"ljung-box (10 lags)"`` -> ``"ljung-box"``.

    Used once, where a result is identified; never to recognise a check later.
    """
    base = re.sub(r"\s*\(.*$", "", published_name).strip() or published_name
    return base.lower().replace("'", "").replace(" ", "-")


class CheckRecord(dict):
    """A check's JSON-ready dict that also carries its :class:`CheckIdentity` in memory.

    ``json.dumps`` writes only the dict's items, so the identity never
    reaches the JSON report; renderers of an in-memory report read it from
    ``.identity`` (see :func:`preflight.report.identity.identity_of`).
    """

    identity: CheckIdentity | None = None


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
    identity : CheckIdentity or None
        What the check is, as fields (set where the result is identified:
        the battery, the screen, the pipeline); never written to the JSON,
        and not part of equality (two results with the same numbers and
        text compare equal however they were identified).
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
    identity: CheckIdentity | None = field(default=None, compare=False)

    def with_name(self, name: str) -> CheckResult:
        return replace(self, name=name)

    def identified(self, *, scope: str, family: str | None = None, variables: tuple[str, ...] = (),
                   direction: tuple[str, str] | None = None, variant: str | None = None,
                   test: str | None = None, name: str | None = None) -> CheckResult:
        """This result with its identity set (and its display ``name``, if given).

        The test defaults to the one the check function named; how an HSIC
        null was computed (``identity.null``, set by the check function) is kept.
        """
        own = self.identity
        identity = CheckIdentity(
            test=test or (own.test if own is not None else test_id(self.name)), family=family, scope=scope,
            variables=tuple(variables), direction=direction, variant=variant,
            null=own.null if own is not None else None)
        return replace(self, identity=identity, name=self.name if name is None else name)

    def to_dict(self) -> CheckRecord:
        # Every field is a number, a string, a bool or None, so a flat dict in
        # field order is what dataclasses.asdict builds, without its
        # recursive deep copy (a report converts hundreds of results).
        record = CheckRecord({
            "name": self.name,
            "statistic": _finite_or_none(self.statistic),
            "p_value": _finite_or_none(self.p_value),
            "effect": _finite_or_none(self.effect),
            "effect_name": self.effect_name,
            "n": int(self.n),
            "note": self.note,
            "p_adjusted": _finite_or_none(self.p_adjusted),
            "passed": self.passed,
        })
        record.identity = self.identity
        return record


def not_computed(name: str, n: int, why: str) -> CheckResult:
    """A check that could not run on this data: NaN statistic, no p-value, and why in its note."""
    return CheckResult(name=name, statistic=float("nan"), p_value=None, n=n, note=f"not computed: {why}")
