"""Terminal summary: conclusion first, then edges, then what failed and what still fits."""

from __future__ import annotations

import re
from collections.abc import Callable
from typing import Any

_CONTROL = re.compile("[\x00-\x1f\x7f-\x9f]")
_NAMED = {"\n": "\\n", "\r": "\\r", "\t": "\\t"}


def visible(text: Any) -> str:
    """Text safe to print on a terminal: control characters (newlines and escape sequences in
    column names, say) shown as backslash escapes instead of acting on the terminal."""
    return _CONTROL.sub(lambda m: _NAMED.get(m.group(), f"\\x{ord(m.group()):02x}"), str(text))

LEVEL_WORDS = {
    "linear-non-gaussian": "a unique DAG from a linear non-Gaussian analysis",
    "additive-noise": "a unique DAG from a nonlinear additive-noise analysis",
    "equivalence-class": "the Markov equivalence class (CPDAG) only",
    "latent-equivalence-class": "only a class that allows hidden common causes",
    "none": "no structural conclusion",
}

WHAT_STILL_FITS = {
    "gaussian-noise": "a constraint- or score-based search (PC, GES) for the equivalence class",
    "nonlinear": "a nonlinear additive-noise analysis, or transform the variables first",
    "heteroscedastic": "a location-scale noise model, or a variance-stabilising transform",
    "confounding-suspected": "a method that allows latent confounders (FCI-type search, lvLiNGAM)",
    "no-association": "nothing to orient: the pair looks independent given its conditioning set",
    "discrete": "methods for discrete or mixed data",
    "autocorrelated": "time-series methods (for example VAR-LiNGAM) or --rows-unordered if order is meaningless",
    "constant": "excluding the column",
    "multiple-gaussian-components": "the equivalence class, orienting only edges with non-Gaussian noise",
    "dependent-components": "a method that allows latent confounders",
    "too-few-rows": "collecting more rows",
    "too-few-rows-to-orient": "the equivalence class, or collecting more rows",
    "varsortable": "checking that findings survive standardising the columns",
    "duplicate-rows": "removing the repeated rows, or confirming they are genuine observations",
}

FLAG_MEANING = {
    "gaussian-noise": "residuals look Gaussian both ways, so the direction is not identifiable from noise shape",
    "nonlinear": "the mechanism departs materially from a straight line",
    "heteroscedastic": "the residual spread changes with the regressor",
    "confounding-suspected": "signs of a hidden common cause",
    "no-association": "no association after conditioning",
    "constant": "the column does not vary",
    "discrete": "few distinct values",
    "heavy-tailed": "heavy tails",
    "outliers": "values far from the bulk",
    "autocorrelated": "rows depend on their neighbours in file order",
    "missing-values": "rows with missing values were dropped",
    "collinear": "nearly a linear combination of other columns",
    "too-few-rows": "too few rows for any conclusion",
    "too-few-rows-to-orient": "too few rows to orient from noise shape",
    "multiple-gaussian-components": "two or more noise terms look Gaussian",
    "dependent-components": "no unmixing gives independent components",
    "varsortable": "variance increases along the estimated order",
    "duplicate-rows": "some rows repeat earlier rows exactly",
}


def headline(report: dict[str, Any]) -> str:
    c = report["conclusion"]
    level = c["level"]
    total, oriented = c["edges_total"], c["edges_oriented"]
    status = "PASS" if c["passed"] else "FAIL"
    if level == "none":
        body = "No structural conclusion is justified by these data"
    elif total == 0:
        body = "No adjacent edges were found"
    elif oriented == total:
        body = f"Direction is identifiable for all {total} edge{'s' if total != 1 else ''}"
    else:
        rest = total - oriented
        body = (f"Direction is identifiable for {oriented} of {total} edges; "
                f"{rest} edge{'s' if rest != 1 else ''} rest{'s' if rest == 1 else ''} on weaker ground")
    return f"{status} [{level}] {body}: the data support {LEVEL_WORDS[level]} (required: {c['required']})."


def _arrow(pair: dict[str, Any]) -> str:
    x, y = visible(pair["x"]), visible(pair["y"])
    if pair["orientation"] == "x->y":
        return f"{x} -> {y}"
    if pair["orientation"] == "y->x":
        return f"{y} -> {x}"
    return f"{x} -- {y}"


def render_text(report: dict[str, Any], style: Callable[..., str] | None = None, quiet: bool = False) -> str:
    style = style or (lambda text, **_: text)
    c = report["conclusion"]
    colour = "green" if c["passed"] else ("yellow" if c["level"] != "none" else "red")
    lines = [style(headline(report), fg=colour, bold=True)]
    if quiet:
        return lines[0] + "\n"
    edges = [p for p in report["pairs"] if p["adjacent"]]
    if edges:
        width = max(len(_arrow(p)) for p in edges)
        width = max(width, 4)
        lines.append("")
        lines.append(f"  {'edge'.ljust(width)}  {'basis'.ljust(24)}  flags")
        for p in edges:
            basis = p["basis"] or "undetermined"
            flags = visible(", ".join(p["flags"])) or "-"
            lines.append(f"  {_arrow(p).ljust(width)}  {visible(basis).ljust(24)}  {flags}")
    lines.append("")
    lines.append("Why:")
    for reason in c["reasons"]:
        lines.append(f"  - {visible(reason)}")
    seen: list[str] = []
    for flag in report["global"]["flags"]:
        seen.append(flag)
    for v in report["variables"]:
        seen += v["flags"]
    for p in edges:
        seen += p["flags"]
    failed = [f for f in dict.fromkeys(seen) if f in WHAT_STILL_FITS]
    if failed:
        lines.append("")
        lines.append("What each finding means, and what analysis still fits:")
        for flag in failed:
            lines.append(f"  - {flag}: {FLAG_MEANING.get(flag, flag)}; consider {WHAT_STILL_FITS[flag]}.")
    return "\n".join(lines) + "\n"
