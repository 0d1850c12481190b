"""Batch to batch: what changed between two JSON reports, and whether the change fails the drift gate.

Pairs are matched by their two column names, whatever the column order, and
an orientation is compared as (cause, effect).  Only edges (pairs adjacent in
either report) are compared pair by pair; the flags of pairs that are not
adjacent in either report are left out.

The drift gate fails when

- the new level is below the floor: ``require`` when given, otherwise the
  old report's level (so, by default, any fall down the ladder fails); or
- an edge oriented in the old report is not oriented the same way in the new
  one: now undetermined, reversed, no longer adjacent, or gone with a column.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from typing import Any

from preflight.policy import LEVELS, level_rank
from preflight.report.discovery import cause_effect

FLOOR_FROM_REQUIRE = "--require"
FLOOR_FROM_OLD_LEVEL = "the old report's level"

# What happened to an edge, in the words the outputs use.
ORIENTATION_LOST = "orientation lost"
ORIENTATION_REVERSED = "orientation reversed"
ORIENTATION_GAINED = "orientation gained"
EDGE_NEW = "new edge"
EDGE_GONE = "no longer adjacent"
COLUMN_GONE = "column removed"
BASIS_CHANGED = "basis changed"
FLAGS_CHANGED = "flags changed"


@dataclass(frozen=True)
class EdgeChange:
    """One pair adjacent in either report whose orientation, basis or flags changed."""

    x: str
    y: str
    before: str
    """The edge in the old report: ``a -> b``, ``a -- b`` (undetermined), ``not adjacent`` or ``absent``."""
    after: str
    basis_before: str | None
    basis_after: str | None
    flags_added: tuple[str, ...]
    flags_removed: tuple[str, ...]
    changes: tuple[str, ...]
    """What happened, in words (``orientation lost``, ``basis changed``, ...)."""

    @property
    def lost_orientation(self) -> bool:
        return any(c in (ORIENTATION_LOST, ORIENTATION_REVERSED) for c in self.changes) or (
            self.before_oriented and any(c in (EDGE_GONE, COLUMN_GONE) for c in self.changes))

    @property
    def before_oriented(self) -> bool:
        return " -> " in self.before


@dataclass(frozen=True)
class FlagChange:
    name: str
    added: tuple[str, ...]
    removed: tuple[str, ...]


@dataclass(frozen=True)
class ReportComparison:
    old_source: str
    new_source: str
    old_level: str
    new_level: str
    floor: str
    floor_from: str
    old_edges: tuple[int, int]
    """(oriented, total) in the old report."""
    new_edges: tuple[int, int]
    old_rows_used: int
    new_rows_used: int
    same_input: bool | None
    """Whether the two inputs have the same SHA-256; ``None`` when a report has none (a DataFrame)."""
    columns_added: tuple[str, ...]
    columns_removed: tuple[str, ...]
    settings_changed: tuple[tuple[str, Any, Any], ...]
    edges: tuple[EdgeChange, ...]
    variables: tuple[FlagChange, ...]
    global_flags_added: tuple[str, ...]
    global_flags_removed: tuple[str, ...]
    rules_fired_added: tuple[str, ...]
    rules_fired_removed: tuple[str, ...]

    @property
    def level_below_floor(self) -> bool:
        return level_rank(self.new_level) > level_rank(self.floor)

    @property
    def lost_orientations(self) -> tuple[EdgeChange, ...]:
        return tuple(edge for edge in self.edges if edge.lost_orientation)

    @property
    def passed(self) -> bool:
        return not self.level_below_floor and not self.lost_orientations

    @property
    def level_move(self) -> str:
        old, new = level_rank(self.old_level), level_rank(self.new_level)
        return "unchanged" if old == new else ("fell" if new > old else "rose")

    def failures(self) -> list[str]:
        """Why the drift gate fails, one sentence each (empty when it passes)."""
        out = []
        if self.level_below_floor:
            out.append(f"the level fell to {self.new_level}, below {self.floor} ({self.floor_from})")
        lost = self.lost_orientations
        if lost:
            noun = "edge" if len(lost) == 1 else "edges"
            out.append(f"{len(lost)} {noun} lost {'its' if len(lost) == 1 else 'their'} orientation: "
                       + "; ".join(f"{e.before} became {e.after}" for e in lost))
        return out

    def headline(self) -> str:
        status = "PASS" if self.passed else "FAIL"
        move = {"unchanged": f"level unchanged at {self.new_level}",
                "fell": f"level fell from {self.old_level} to {self.new_level}",
                "rose": f"level rose from {self.old_level} to {self.new_level}"}[self.level_move]
        edges = (f"edges oriented {self.old_edges[0]} of {self.old_edges[1]} -> "
                 f"{self.new_edges[0]} of {self.new_edges[1]}")
        return f"{status} {move}; {edges} (floor: {self.floor}, {self.floor_from})."

    def to_text(self) -> str:
        return render_comparison_text(self)

    def to_markdown(self) -> str:
        return render_comparison_markdown(self)

    def __str__(self) -> str:
        return self.to_text()

    def _repr_markdown_(self) -> str:
        return self.to_markdown()


# ---------------------------------------------------------------- comparing

def _edge_words(pair: dict[str, Any] | None, columns_present: bool) -> str:
    if pair is None:
        return "not adjacent" if columns_present else "absent"
    if not pair["adjacent"]:
        return "not adjacent"
    direction = cause_effect(pair)
    return f"{direction[0]} -> {direction[1]}" if direction else f"{pair['x']} -- {pair['y']}"


def _pairs_by_names(data: dict[str, Any]) -> dict[frozenset[str], dict[str, Any]]:
    return {frozenset((p["x"], p["y"])): p for p in data["pairs"]}


def _edge_change(old: dict[str, Any] | None, new: dict[str, Any] | None, new_has_columns: bool,
                 old_has_columns: bool) -> EdgeChange | None:
    reference = new or old
    old_adjacent = bool(old and old["adjacent"])
    new_adjacent = bool(new and new["adjacent"])
    if not old_adjacent and not new_adjacent:
        return None
    assert reference is not None  # one side is adjacent, so present
    changes: list[str] = []
    old_dir = cause_effect(old) if old and old_adjacent else None
    new_dir = cause_effect(new) if new and new_adjacent else None
    if old_adjacent and not new_adjacent:
        changes.append(EDGE_GONE if new_has_columns else COLUMN_GONE)
    elif new_adjacent and not old_adjacent:
        changes.append(EDGE_NEW)
    elif old_dir and not new_dir:
        changes.append(ORIENTATION_LOST)
    elif old_dir and new_dir and old_dir != new_dir:
        changes.append(ORIENTATION_REVERSED)
    elif new_dir and not old_dir:
        changes.append(ORIENTATION_GAINED)
    basis_before = old["basis"] if old and old_adjacent else None
    basis_after = new["basis"] if new and new_adjacent else None
    if old_adjacent and new_adjacent and basis_before != basis_after:
        changes.append(BASIS_CHANGED)
    old_flags = list(old["flags"]) if old else []
    new_flags = list(new["flags"]) if new else []
    added = tuple(f for f in new_flags if f not in old_flags)
    removed = tuple(f for f in old_flags if f not in new_flags)
    if added or removed:
        changes.append(FLAGS_CHANGED)
    if not changes:
        return None
    return EdgeChange(x=reference["x"], y=reference["y"],
                      before=_edge_words(old, old_has_columns), after=_edge_words(new, new_has_columns),
                      basis_before=basis_before, basis_after=basis_after,
                      flags_added=added, flags_removed=removed, changes=tuple(changes))


def _diff(old: list[str], new: list[str]) -> tuple[tuple[str, ...], tuple[str, ...]]:
    return tuple(v for v in new if v not in old), tuple(v for v in old if v not in new)


def _report_data(report: Any) -> dict[str, Any]:
    if isinstance(report, (str, os.PathLike)):
        from preflight.report.json import read_report

        return read_report(os.fspath(report))
    return getattr(report, "data", report)


def compare_reports(old: Any, new: Any, require: str | None = None) -> ReportComparison:
    """Compare two reports (``Report`` objects, their JSON dictionaries, or paths of JSON reports).

    See the module docstring for what is compared and when the drift gate fails.
    """
    old_data, new_data = _report_data(old), _report_data(new)
    if require is not None and require not in LEVELS:
        raise ValueError(f"require must be one of {', '.join(LEVELS)}, got {require!r}")
    old_columns = list(old_data["input"]["columns"])
    new_columns = list(new_data["input"]["columns"])
    columns_added, columns_removed = _diff(old_columns, new_columns)

    old_pairs, new_pairs = _pairs_by_names(old_data), _pairs_by_names(new_data)
    edges = []
    # New report's column order first, then pairs only the old report has.
    for key in list(new_pairs) + [k for k in old_pairs if k not in new_pairs]:
        change = _edge_change(old_pairs.get(key), new_pairs.get(key),
                              new_has_columns=key <= set(new_columns), old_has_columns=key <= set(old_columns))
        if change is not None:
            edges.append(change)

    old_vars = {v["name"]: v for v in old_data["variables"]}
    variables = []
    for v in new_data["variables"]:
        if v["name"] in old_vars:
            added, removed = _diff(old_vars[v["name"]]["flags"], v["flags"])
            if added or removed:
                variables.append(FlagChange(v["name"], added, removed))

    old_settings, new_settings = old_data["settings"], new_data["settings"]
    settings_changed = tuple((key, old_settings.get(key), new_settings.get(key))
                             for key in list(new_settings) + [k for k in old_settings if k not in new_settings]
                             if old_settings.get(key) != new_settings.get(key))
    global_added, global_removed = _diff(old_data["global"]["flags"], new_data["global"]["flags"])
    rules_added, rules_removed = _diff(old_data["conclusion"].get("rules_fired", []),
                                       new_data["conclusion"].get("rules_fired", []))
    old_c, new_c = old_data["conclusion"], new_data["conclusion"]
    old_sha, new_sha = old_data["input"].get("sha256"), new_data["input"].get("sha256")
    return ReportComparison(
        old_source=old_data["input"]["path"], new_source=new_data["input"]["path"],
        old_level=old_c["level"], new_level=new_c["level"],
        floor=require or old_c["level"], floor_from=FLOOR_FROM_REQUIRE if require else FLOOR_FROM_OLD_LEVEL,
        old_edges=(old_c["edges_oriented"], old_c["edges_total"]),
        new_edges=(new_c["edges_oriented"], new_c["edges_total"]),
        old_rows_used=old_data["input"]["rows_used"], new_rows_used=new_data["input"]["rows_used"],
        same_input=None if not (old_sha and new_sha) else old_sha == new_sha,
        columns_added=columns_added, columns_removed=columns_removed,
        settings_changed=settings_changed, edges=tuple(edges), variables=tuple(variables),
        global_flags_added=global_added, global_flags_removed=global_removed,
        rules_fired_added=rules_added, rules_fired_removed=rules_removed,
    )


# ---------------------------------------------------------------- rendering

def _input_words(same: bool | None) -> str:
    if same is None:
        return "inputs not compared (a report records no SHA-256)"
    return "same input (SHA-256)" if same else "different input (SHA-256)"


def _flag_delta(added: tuple[str, ...], removed: tuple[str, ...]) -> str:
    return " ".join([f"+{f}" for f in added] + [f"-{f}" for f in removed]) or "-"


def _setting(value: Any) -> str:
    from preflight.report.prose import fmt_setting

    return "(absent)" if value is None else fmt_setting(value)


def render_comparison_text(comparison: ReportComparison, style=None, quiet: bool = False) -> str:
    style = style or (lambda text, **_: text)
    colour = "green" if comparison.passed else "red"
    lines = [style(comparison.headline(), fg=colour, bold=True)]
    if quiet:
        return lines[0] + "\n"
    for failure in comparison.failures():
        lines.append(f"  - {failure}")
    lines.append("")
    c = comparison
    data_words = _input_words(c.same_input)
    lines.append(f"Input: {c.old_source} -> {c.new_source}; rows used {c.old_rows_used} -> {c.new_rows_used}; "
                 f"{data_words}.")
    if c.columns_added or c.columns_removed:
        added, removed = ", ".join(c.columns_added) or "-", ", ".join(c.columns_removed) or "-"
        lines.append(f"Columns added: {added}; removed: {removed}.")
    if c.settings_changed:
        lines.append("Settings changed: " + "; ".join(f"{k} {_setting(a)} -> {_setting(b)}"
                                                      for k, a, b in c.settings_changed) + ".")
    lines.append("")
    if c.edges:
        width = max(max(len(e.before) for e in c.edges), len("old edge"))
        width_after = max(max(len(e.after) for e in c.edges), len("new edge"))
        bases = [f"{e.basis_before or '-'} -> {e.basis_after or '-'}" for e in c.edges]
        width_basis = max(max(len(b) for b in bases), len("basis"))
        lines.append(f"  {'old edge'.ljust(width)}  {'new edge'.ljust(width_after)}  {'basis'.ljust(width_basis)}"
                     "  what changed")
        for e, basis in zip(c.edges, bases):
            what = ", ".join(e.changes)
            if e.flags_added or e.flags_removed:
                what += f" ({_flag_delta(e.flags_added, e.flags_removed)})"
            lines.append(f"  {e.before.ljust(width)}  {e.after.ljust(width_after)}  {basis.ljust(width_basis)}  {what}")
    else:
        lines.append("No edge changed its adjacency, orientation, basis or flags.")
    if c.variables:
        lines.append("")
        lines.append("Variable flags:")
        for v in c.variables:
            lines.append(f"  {v.name}: {_flag_delta(v.added, v.removed)}")
    if c.global_flags_added or c.global_flags_removed:
        lines.append(f"Whole-table flags: {_flag_delta(c.global_flags_added, c.global_flags_removed)}")
    if c.rules_fired_added or c.rules_fired_removed:
        lines.append(f"Rules fired: {_flag_delta(c.rules_fired_added, c.rules_fired_removed)}")
    return "\n".join(lines) + "\n"


def render_comparison_markdown(comparison: ReportComparison) -> str:
    from preflight.report.markdown import md_code, md_escape, md_table

    c = comparison
    out = ["# Batch comparison", "", f"**{md_escape(c.headline())}**", ""]
    for failure in c.failures():
        out.append(f"- {md_escape(failure)}")
    if c.failures():
        out.append("")
    out += md_table(("", "old", "new"), [
        ("input", md_code(c.old_source), md_code(c.new_source)),
        ("level", md_code(c.old_level), md_code(c.new_level)),
        ("edges oriented", f"{c.old_edges[0]} of {c.old_edges[1]}", f"{c.new_edges[0]} of {c.new_edges[1]}"),
        ("rows used", str(c.old_rows_used), str(c.new_rows_used)),
    ])
    out += ["", f"Floor: {md_code(c.floor)} ({md_escape(c.floor_from)}). "
                f"{_input_words(c.same_input).capitalize()}.", ""]
    if c.columns_added or c.columns_removed:
        out += [f"Columns added: {', '.join(md_code(x) for x in c.columns_added) or '-'}; "
                f"removed: {', '.join(md_code(x) for x in c.columns_removed) or '-'}.", ""]
    out += ["## Edges", ""]
    if c.edges:
        out += md_table(("old edge", "new edge", "old basis", "new basis", "flags", "what changed"), [
            (md_escape(e.before), md_escape(e.after), md_escape(e.basis_before or "-"),
             md_escape(e.basis_after or "-"), md_escape(_flag_delta(e.flags_added, e.flags_removed)),
             md_escape(", ".join(e.changes))) for e in c.edges])
    else:
        out.append("No edge changed its adjacency, orientation, basis or flags.")
    out += ["", "## Variables and the whole table", ""]
    rows = [(md_escape(v.name), md_escape(_flag_delta(v.added, v.removed))) for v in c.variables]
    if c.global_flags_added or c.global_flags_removed:
        rows.append(("whole table", md_escape(_flag_delta(c.global_flags_added, c.global_flags_removed))))
    out += md_table(("variable", "flags (+ raised, - cleared)"), rows) if rows else ["No flag changed."]
    if c.rules_fired_added or c.rules_fired_removed:
        out += ["", f"Rules fired: {md_escape(_flag_delta(c.rules_fired_added, c.rules_fired_removed))}"]
    if c.settings_changed:
        out += ["", "## Settings changed", ""]
        out += md_table(("setting", "old", "new"), [(md_code(k), md_escape(_setting(a)), md_escape(_setting(b)))
                                                    for k, a, b in c.settings_changed])
    return "\n".join(out) + "\n"
