"""What each check in a report is, as fields, for the renderers.

A report built by :func:`preflight.check` carries every check's
:class:`~preflight.results.CheckIdentity` in memory
(:class:`~preflight.results.CheckRecord`).  A report read back from its
JSON (``preflight report``) has only the display text, because schema
version 1 has no slot for the fields; :func:`identity_of` then recovers
them with :func:`decode`, the one place in the package that reads a
check's ``name`` or ``note``.  It knows the exact names the battery, the
screen and the pipeline write (the variables involved are known from where
the check sits, so a column name with brackets or " on " in it cannot
confuse it), and ``tests/test_check_identity.py`` holds it to the
in-memory fields for every check of a real report.

Renderers ask :func:`identity_of` (or iterate :func:`checks_with_identity`)
and branch on the fields, never on the text.
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from typing import Any

from preflight.results import (
    GIVEN_A_SPLINE,
    NEIGHBOURS_AS_SPLINES,
    NOISE_ESTIMATE,
    NOISE_ESTIMATES,
    SPLINE_EQUATION,
    SPLINE_RESIDUAL,
    STRUCTURAL_EQUATION,
    CheckIdentity,
    test_id,
)

_DIRECTION_FAMILY = {
    "shapiro-wilk": "noise normality", "anderson-darling": "noise normality", "jarque-bera": "noise normality",
    "dagostino-pearson": "noise normality", "negentropy": "noise normality",
    "ramsey-reset": "linearity", "spline-f-test": "linearity",
    "breusch-pagan": "variance", "white": "variance",
    "hsic": "residual independence",
}
"""Family of each test run on one direction's residual (battery.py)."""

_VARIABLE_FAMILY = {"ljung-box": "autocorrelation"}


def identity_of(check: dict[str, Any], scope: str, names: Sequence[str] = ()) -> CheckIdentity:
    """The check's identity: the one it carries in memory, else :func:`decode` of its text.

    ``scope`` is where the check sits (``"variable"``, ``"pair"``,
    ``"global"``) and ``names`` the variable or the pair's two names.
    """
    own = getattr(check, "identity", None)
    return own if isinstance(own, CheckIdentity) else decode(check, scope, names)


def checks_with_identity(data: dict[str, Any]) -> Iterator[tuple[dict[str, Any], CheckIdentity]]:
    """Every check of a report with its identity, in report order: variables, pairs, whole table."""
    for variable in data["variables"]:
        for check in variable["checks"]:
            yield check, identity_of(check, "variable", (variable["name"],))
    for pair in data["pairs"]:
        for check in pair["checks"]:
            yield check, identity_of(check, "pair", (pair["x"], pair["y"]))
    for check in data["global"]["checks"]:
        yield check, identity_of(check, "global")


def pair_check(pair: dict[str, Any], test: str, direction: tuple[str, str], *, family: str | None = None,
               variant: str | None = None) -> dict[str, Any] | None:
    """The pair's check of ``test`` on the residual of ``direction`` = (response, regressor), if it ran."""
    for check in pair["checks"]:
        identity = identity_of(check, "pair", (pair["x"], pair["y"]))
        if (identity.test == test and identity.direction == direction and identity.variant == variant
                and (family is None or identity.family == family)):
            return check
    return None


def variable_check(variable: dict[str, Any], test: str, variant: str | None = None) -> dict[str, Any] | None:
    """The variable's first check of ``test`` (on ``variant``, e.g. its noise estimate), if it ran."""
    for check in variable["checks"]:
        identity = identity_of(check, "variable", (variable["name"],))
        if identity.test == test and (variant is None or identity.variant == variant):
            return check
    return None


# ---------------------------------------------------------------- from the JSON's display text

def decode(check: dict[str, Any], scope: str, names: Sequence[str] = ()) -> CheckIdentity:
    """The identity of a check read from a saved report, from its name (and, for HSIC, its note)."""
    name = str(check["name"])
    if scope == "pair":
        identity = _decode_pair(name, names[0], names[1])
    elif scope == "variable":
        identity = _decode_variable(name, names[0])
    else:
        identity = CheckIdentity(test_id(name), scope="global")
    if identity.test != "hsic":
        return identity
    return CheckIdentity(identity.test, identity.family, identity.scope, identity.variables, identity.direction,
                         identity.variant, _hsic_null(str(check.get("note") or "")))


def _hsic_null(note: str) -> str | None:
    if "residual-bootstrap refits" in note:
        return "residual bootstrap"
    if "random-Fourier-feature" in note:
        return "random features"
    if "permutation null" in note:
        return "permutation"
    if "gamma approximation" in note:
        return "gamma"
    return None  # a constant column: no test run


_EQUATION_FAMILY = {"ramsey-reset": "equation linearity", "additive-spline-f-test": "equation linearity",
                    "breusch-pagan": "equation variance", "white": "equation variance"}
"""Family of each check of a whole structural equation (equation_stage.py)."""
_IN_EQUATION_FAMILY = {"hsic": "equation residual independence", "white": "equation residual spread",
                       "breusch-pagan": "equation residual spread",
                       **{test: "equation noise normality" for test, family in _DIRECTION_FAMILY.items()
                          if family == "noise normality"}}
"""Family of each test of one edge inside its equations (equation_stage.edge_task)."""
_SPLINE_EQUATION_FAMILY = {"hsic": "equation spline residual independence", "white": "equation spline residual spread"}
"""Family of each test of a bent equation's edge with splines (equation_stage.spline_edge_task)."""


def _decode_pair(name: str, a: str, b: str) -> CheckIdentity:
    pair = tuple(sorted((a, b)))
    for first, second in ((a, b), (b, a)):
        if name == f"pairwise likelihood ratio in the equations ({first} -> {second} if > 0)":
            return CheckIdentity("pairwise-likelihood-ratio", None, "pair", pair, variant=STRUCTURAL_EQUATION)
        if name == f"partial correlation in the equations ({first}, {second} given their other parents)":
            return CheckIdentity("pearson", "equation partial correlation", "pair", pair,
                                 variant=STRUCTURAL_EQUATION)
        suffix = f" in the equation ({first} on {second} and its other parents)"
        if name.endswith(suffix):
            test = test_id(name[: -len(suffix)])
            return CheckIdentity(test, _IN_EQUATION_FAMILY.get(test), "pair", pair, (first, second),
                                 STRUCTURAL_EQUATION)
        suffix = f" in the spline equation ({first} on splines of {second} and its other parents)"
        if name.endswith(suffix):
            test = test_id(name[: -len(suffix)])
            return CheckIdentity(test, _SPLINE_EQUATION_FAMILY.get(test), "pair", pair, (first, second),
                                 SPLINE_EQUATION)
        suffix = f" with neighbours as splines ({first} on splines of {second} and its other neighbours)"
        if name.endswith(suffix):
            return CheckIdentity(test_id(name[: -len(suffix)]), None, "pair", pair, (first, second),
                                 NEIGHBOURS_AS_SPLINES)
        marker = f" ({first}, {second}) given a spline of "
        if marker in name:
            return CheckIdentity(test_id(name[: name.index(marker)]), "separation given a spline", "pair", pair,
                                 variant=GIVEN_A_SPLINE)
        if name == f"noise dependence (hsic) ({first}, {second})":
            return CheckIdentity("hsic", "noise dependence", "pair", pair, variant=NOISE_ESTIMATES)
        if name == f"noise dependence of non-adjacent variables (hsic) ({first}, {second})":
            return CheckIdentity("hsic", "non-adjacent noise dependence", "pair", pair, variant=NOISE_ESTIMATES)
        if name == f"third-order cross-moments of noise estimates ({first}, {second})":
            return CheckIdentity("third-order-cross-moments", "non-adjacent noise dependence", "pair", pair,
                                 variant=NOISE_ESTIMATES)
        if name == f"hsic between noise estimates ({first} on {second})":
            return CheckIdentity("hsic", "non-adjacent noise dependence", "pair", pair, (first, second),
                                 NOISE_ESTIMATES)
        if name == f"pairwise likelihood ratio ({first} -> {second} if > 0)":
            return CheckIdentity("pairwise-likelihood-ratio", None, "pair", pair)
        if name == f"third-moment slope bracket ({first}, {second})":
            return CheckIdentity("third-moment-slope-bracket", "hidden-cause moments", "pair", pair)
        if name.endswith(f" ({first}, {second})"):
            return CheckIdentity(test_id(name[: -len(f" ({first}, {second})")]), "association", "pair", pair)
    for response, regressor in ((a, b), (b, a)):
        suffix = f" ({response} on {regressor})"
        if not name.endswith(suffix):
            continue
        base, variant = name[: -len(suffix)], None
        if base.endswith(" of spline residual"):
            base, variant = base[: -len(" of spline residual")], SPLINE_RESIDUAL
        test = test_id(base)
        family = _DIRECTION_FAMILY.get(test)
        if variant == SPLINE_RESIDUAL:
            family = "additive-noise independence" if test == "hsic" else "variance"
        return CheckIdentity(test, family, "pair", pair, (response, regressor), variant)
    return CheckIdentity(test_id(name), None, "pair", pair)


def _decode_variable(name: str, variable: str) -> CheckIdentity:
    if name.endswith(")") and f" (equation: {variable} on " in name:
        test = test_id(name[: name.rindex(f" (equation: {variable} on ")])
        return CheckIdentity(test, _EQUATION_FAMILY.get(test), "variable", (variable,), variant=STRUCTURAL_EQUATION)
    suffix = f" (noise of {variable})"
    if name.endswith(suffix):
        test = test_id(name[: -len(suffix)])
        family = None if test == "rows-needed" else "noise normality"
        return CheckIdentity(test, family, "variable", (variable,), variant=NOISE_ESTIMATE)
    test = test_id(name)
    return CheckIdentity(test, _VARIABLE_FAMILY.get(test), "variable", (variable,))
