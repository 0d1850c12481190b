"""The report in a notebook: a short text form, an HTML cell and pandas DataFrames.

The HTML is a fragment for a notebook's output cell, not a page: inline
styles only (notebook front ends drop or sandbox <style> blocks and
external assets), every value escaped, and every coloured mark also
written in words.
"""

from __future__ import annotations

import html
import re
from typing import Any

from preflight.report.prose import NO_REASON, edge_text, gate_outcome
from preflight.report.text import headline

REPR_REASONS = 3
"""How many reasons the text form shows; the rest are counted."""
REPR_REASON_CHARS = 110

CHECK_FIELDS = ("name", "statistic", "p_value", "p_adjusted", "effect", "effect_name", "n", "passed", "note")
CHECK_COLUMNS = ("scope", "variable", "x", "y") + CHECK_FIELDS
PAIR_COLUMNS = ("x", "y", "adjacent", "orientation", "cause", "effect", "basis", "flags", "conditioning",
                "checks_failed", "checks")
VARIABLE_COLUMNS = ("name", "flags", "noise_looks_gaussian", "estimated_parents", "checks_failed", "checks")

_CONTROL = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\x7f-\x9f\ufffe\uffff]")


def _e(value: Any) -> str:
    return html.escape(_CONTROL.sub("\ufffd", str(value)), quote=True)


def _shorten(text: str, limit: int) -> str:
    text = " ".join(text.split())
    return text if len(text) <= limit else text[: limit - 3].rstrip() + "..."


# ---------------------------------------------------------------- text form

def report_repr(data: dict[str, Any]) -> str:
    try:
        return _report_repr(data)
    except (KeyError, TypeError, AttributeError):  # a repr must never raise, even on a partial dictionary
        keys = sorted(map(str, data)) if isinstance(data, dict) else type(data).__name__
        return f"<preflight Report: incomplete data with keys {keys}>"


def _report_repr(data: dict[str, Any]) -> str:
    c = data["conclusion"]
    status = "passed" if c["passed"] else "not passed"
    lines = [f"<preflight Report: level {c['level']}, {status} (required {c['required']}); "
             f"{c['edges_oriented']} of {c['edges_total']} edges oriented"]
    source = data["input"]
    lines.append(f"  input: {source['path']}, {source['rows_used']} of {source['rows']} rows, "
                 f"{len(source['columns'])} columns")
    reasons = c["reasons"]
    for reason in reasons[:REPR_REASONS]:
        lines.append(f"  - {_shorten(reason, REPR_REASON_CHARS)}")
    if len(reasons) > REPR_REASONS:
        more = len(reasons) - REPR_REASONS
        lines.append(f"  ... and {more} more reason{'s' if more != 1 else ''} (report.conclusion['reasons'])")
    return "\n".join(lines) + ">"


# ---------------------------------------------------------------- HTML cell

_COLOURS = {"pass": ("#1d6b34", "#e8f4eb"), "weaker": ("#8a5200", "#fdf2e1"), "none": ("#a3191b", "#fbeaea")}
_CELL = "padding:3px 10px;border-bottom:1px solid #d4d4d4;text-align:left;vertical-align:top;"
_HEAD = _CELL + "border-bottom:2px solid #8c8c8c;font-weight:600;"
_FLAG = ("display:inline-block;border:1px solid #8c8c8c;border-radius:4px;padding:0 5px;margin:1px 2px 1px 0;"
         "font-size:90%;white-space:nowrap;")


def _flags(flags: list[str]) -> str:
    if not flags:
        return '<span style="opacity:0.6;">-</span>'
    return "".join(f'<span style="{_FLAG}">{_e(flag)}</span>' for flag in flags)


def _table(header: tuple[str, ...], rows: list[list[str]]) -> str:
    head = "".join(f'<th scope="col" style="{_HEAD}">{_e(h)}</th>' for h in header)
    body = "".join("<tr>" + "".join(f'<td style="{_CELL}">{cell}</td>' for cell in row) + "</tr>" for row in rows)
    return (f'<table style="border-collapse:collapse;margin:6px 0;"><thead><tr>{head}</tr></thead>'
            f"<tbody>{body}</tbody></table>")


def report_html(data: dict[str, Any]) -> str:
    c = data["conclusion"]
    kind = "pass" if c["passed"] else ("none" if c["level"] == "none" else "weaker")
    ink, paper = _COLOURS[kind]
    status = "PASS" if c["passed"] else "FAIL"
    # The headline without its "FAIL [level]" prefix and "(required: ...)" tail, which the box shows apart.
    plain = headline(data).split("] ", 1)[-1]
    plain = plain.rsplit(" (required:", 1)[0].rstrip(".") + "."
    parts = [
        '<div style="font-family:system-ui,-apple-system,\'Segoe UI\',Roboto,sans-serif;line-height:1.45;'
        'max-width:1000px;">',
        f'<div style="border-left:6px solid {ink};background:{paper};color:#1b1b1b;'
        'padding:8px 14px;margin:4px 0 10px;">'
        f'<span style="display:inline-block;background:{ink};color:#fff;font-weight:700;padding:1px 8px;'
        f'border-radius:4px;margin-right:8px;">{status}</span>'
        f'<strong style="font-size:115%;">{_e(c["level"])}</strong>'
        f'<div style="margin-top:4px;">{_e(plain)}</div>'
        f'<div style="margin-top:2px;font-size:92%;">Required level <strong>{_e(c["required"])}</strong>: '
        f'{_e(gate_outcome(c))}. Edges oriented: <strong>{_e(c["edges_oriented"])} of {_e(c["edges_total"])}</strong>.'
        "</div></div>",
    ]
    edges = [p for p in data["pairs"] if p["adjacent"]]
    if edges:
        rows = [[_e(edge_text(p, arrow="\u2192", line="\u2014")), _e(p["basis"] or "undetermined"),
                 _flags(p["flags"])] for p in edges]
        parts.append('<div style="font-weight:600;margin-top:6px;">'
                     'Edges (cause \u2192 effect; \u2014 not determined)</div>')
        parts.append(_table(("edge", "basis", "flags"), rows))
    else:
        parts.append("<div>No adjacent edges.</div>")
    flagged = [v for v in data["variables"] if v["flags"]]
    if flagged or data["global"]["flags"]:
        rows = [[_e(v["name"]), _flags(v["flags"])] for v in flagged]
        if data["global"]["flags"]:
            rows.append(["<em>whole table</em>", _flags(data["global"]["flags"])])
        parts.append('<div style="font-weight:600;margin-top:6px;">Flags on variables and the whole table</div>')
        parts.append(_table(("variable", "flags"), rows))
    reasons = c["reasons"] or [NO_REASON]
    parts.append('<div style="font-weight:600;margin-top:6px;">Why</div>')
    parts.append('<ul style="margin:2px 0 6px 1.2em;padding:0;">'
                 + "".join(f"<li>{_e(r)}</li>" for r in reasons) + "</ul>")
    source = data["input"]
    parts.append(f'<div style="font-size:85%;opacity:0.75;">{_e(source["path"])}: {_e(source["rows_used"])} of '
                 f'{_e(source["rows"])} rows used, {len(source["columns"])} columns; preflight '
                 f'{_e(data["tool"]["version"])}. Tables: report.pairs_frame(), report.variables_frame(), '
                 "report.checks_frame().</div>")
    parts.append("</div>")
    return "".join(parts)


# ---------------------------------------------------------------- DataFrames

def _failed(checks: list[dict[str, Any]]) -> int:
    return sum(1 for check in checks if check["passed"] is False)


def pairs_frame(data: dict[str, Any]):
    import pandas as pd

    rows = []
    for p in data["pairs"]:
        cause = effect = None
        if p["orientation"] == "x->y":
            cause, effect = p["x"], p["y"]
        elif p["orientation"] == "y->x":
            cause, effect = p["y"], p["x"]
        rows.append((p["x"], p["y"], bool(p["adjacent"]), p["orientation"], cause, effect, p["basis"],
                     ",".join(p["flags"]), tuple(p.get("conditioning", [])), _failed(p["checks"]), len(p["checks"])))
    return pd.DataFrame.from_records(rows, columns=list(PAIR_COLUMNS))


def variables_frame(data: dict[str, Any]):
    import pandas as pd

    structure = data.get("structure") or {}
    gaussian = set(structure.get("gaussian_noises", []))
    parents = structure.get("parents") or {}
    rows = [(v["name"], ",".join(v["flags"]), v["name"] in gaussian, tuple(parents.get(v["name"], [])),
             _failed(v["checks"]), len(v["checks"])) for v in data["variables"]]
    return pd.DataFrame.from_records(rows, columns=list(VARIABLE_COLUMNS))


def checks_frame(data: dict[str, Any]):
    import pandas as pd

    rows = []

    def add(scope: str, variable: str | None, x: str | None, y: str | None, checks: list[dict[str, Any]]) -> None:
        for check in checks:
            rows.append((scope, variable, x, y) + tuple(check[field] for field in CHECK_FIELDS))

    for v in data["variables"]:
        add("variable", v["name"], None, None, v["checks"])
    for p in data["pairs"]:
        add("pair", None, p["x"], p["y"], p["checks"])
    add("global", None, None, None, data["global"]["checks"])
    frame = pd.DataFrame.from_records(rows, columns=list(CHECK_COLUMNS))
    # Keep "evidence" (None) apart from FAIL (False) instead of letting pandas coerce.
    frame["passed"] = frame["passed"].astype(object)
    frame["n"] = frame["n"].astype("int64")
    for column in ("statistic", "p_value", "p_adjusted", "effect"):
        frame[column] = pd.to_numeric(frame[column]).astype("float64")
    return frame

