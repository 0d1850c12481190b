"""The rules layer: a table of data from findings to the conclusion ladder.

The table lives in ``rules.toml`` next to this module so a reviewer can read
it without reading code; ``preflight rules`` prints it.  This module only
loads, validates and applies it.
"""

from __future__ import annotations

import sys
from collections.abc import Mapping
from dataclasses import dataclass
from functools import lru_cache
from importlib import resources

from preflight.policy import GLOBAL_FLAGS, LEVELS, PAIR_FLAGS, VARIABLE_FLAGS, level_rank

SCOPES = ("global", "variable", "pair")
EDGE_REACH = ("all", "touching", "none")
KINDS = ("limit", "caution")

PAIR_FINDINGS = ("adjacent", "not-adjacent", "lingam-oriented", "lingam-undetermined", "anm-oriented",
                 "anm-undetermined", "orientation-conflict", "residuals-dependent-both-ways",
                 "noise-estimates-dependent", "no-independent-noise-model", "moment-slope-inside-bracket",
                 "independent-both-ways",
                 "oriented-in-equations", "no-partial-correlation", "equations-lean-x->y", "equations-lean-y->x",
                 "class-against-equations-lean", "beside-nonlinear")
"""Facts about a pair besides its flags (``battery.judge_pair``; ``orientation-conflict`` and
``beside-nonlinear`` from the pipeline)."""
GLOBAL_FINDINGS = ("any-nonlinear",)
"""Facts about the table besides its flags: ``any-nonlinear`` when some adjacent pair is ``nonlinear``."""
FACTS: dict[str, tuple[str, ...]] = {
    "global": GLOBAL_FLAGS + GLOBAL_FINDINGS,
    "variable": VARIABLE_FLAGS,
    "pair": PAIR_FLAGS + PAIR_FINDINGS,
}
"""The facts a rule of each scope may condition on; any other name in ``when`` is refused when the table loads."""


@dataclass(frozen=True)
class Rule:
    id: str
    scope: str
    when: tuple[str, ...]
    rules_out: tuple[str, ...]
    edges: str
    kind: str
    explain: str
    reference: str
    edge_rules_out: tuple[str, ...] = ()
    """Rungs ruled out for the edges it touches only, not for the overall conclusion."""

    def holds(self, facts: frozenset[str] | set[str]) -> bool:
        for fact in self.when:
            if fact.startswith("not:"):
                if fact[4:] in facts:
                    return False
            elif fact not in facts:
                return False
        return True


@dataclass(frozen=True)
class FiredRule:
    rule: Rule
    items: tuple[str, ...]
    """Names of the variables or pairs ("a - b") it fired for; empty for global rules."""
    text: str


@dataclass(frozen=True)
class RulesOutcome:
    level: str
    fired: tuple[FiredRule, ...]
    edge_ruled_out: Mapping[tuple[str, str], frozenset[str]]
    """For every adjacent pair, the rungs that may not be used to orient it."""

    @property
    def reasons(self) -> list[str]:
        return [f.text for f in self.fired if f.rule.kind == "limit"]

    @property
    def cautions(self) -> list[str]:
        return [f.text for f in self.fired if f.rule.kind == "caution"]


def _parse_rule(raw: dict, position: int) -> Rule:
    known = {"id", "scope", "when", "rules_out", "edge_rules_out", "edges", "kind", "explain", "reference"}
    unknown = set(raw) - known
    if unknown:
        raise ValueError(f"rule {position}: unknown field(s) {sorted(unknown)}")
    scope = raw["scope"]
    if scope not in SCOPES:
        raise ValueError(f"rule {raw.get('id', position)}: scope must be one of {SCOPES}")
    rules_out = tuple(raw.get("rules_out", ()))
    for level in rules_out:
        if level not in LEVELS or level == "none":
            raise ValueError(f"rule {raw['id']}: cannot rule out {level!r}")
    edge_rules_out = tuple(raw.get("edge_rules_out", ()))
    for level in edge_rules_out:
        if level not in LEVELS or level == "none":
            raise ValueError(f"rule {raw['id']}: cannot rule out {level!r} for an edge")
    when = tuple(raw["when"])
    for fact in when:
        name = fact[4:] if fact.startswith("not:") else fact
        if name not in FACTS[scope]:
            raise ValueError(f"rule {raw.get('id', position)}: unknown {scope} fact {name!r} in when; "
                             f"known: {', '.join(FACTS[scope])}")
    edges = raw.get("edges", "touching" if scope != "global" else "all")
    if edges not in EDGE_REACH:
        raise ValueError(f"rule {raw['id']}: edges must be one of {EDGE_REACH}")
    kind = raw.get("kind", "limit")
    if kind not in KINDS:
        raise ValueError(f"rule {raw['id']}: kind must be one of {KINDS}")
    if kind == "caution" and (rules_out or edge_rules_out):
        raise ValueError(f"rule {raw['id']}: a caution rules nothing out")
    return Rule(id=raw["id"], scope=scope, when=when, rules_out=rules_out, edges=edges,
                kind=kind, explain=" ".join(raw["explain"].split()), reference=raw.get("reference", ""),
                edge_rules_out=edge_rules_out)


@lru_cache(maxsize=1)
def load_rules() -> tuple[Rule, ...]:
    """The packaged table (``rules.toml``), validated."""
    return parse_rules(resources.files("preflight").joinpath("rules.toml").read_text(encoding="utf-8"))


def parse_rules(text: str) -> tuple[Rule, ...]:
    """A rules table from its TOML text; ValueError naming the rule when a field or fact is unknown."""
    if sys.version_info >= (3, 11):
        import tomllib
    else:  # Python 3.10
        import tomli as tomllib
    table = tomllib.loads(text)
    rules = tuple(_parse_rule(raw, k) for k, raw in enumerate(table["rule"]))
    ids = [r.id for r in rules]
    if len(set(ids)) != len(ids):
        raise ValueError("rule ids must be unique")
    return rules


def _render(rule: Rule, items: tuple[str, ...], context: Mapping[str, object]) -> str:
    many = len(items) != 1
    words = {
        "items": ", ".join(items),
        "count": len(items),
        "is_are": "are" if many else "is",
        "has_have": "have" if many else "has",
        "it_them": "them" if many else "it",
        "this_these": "these" if many else "this",
        "s": "s" if many else "",
    }
    words.update(context)
    try:
        return rule.explain.format(**words)
    except (KeyError, IndexError):
        return rule.explain


def evaluate(
    global_facts: frozenset[str],
    variable_facts: Mapping[str, frozenset[str]],
    pair_facts: Mapping[tuple[str, str], frozenset[str]],
    context: Mapping[str, object],
    rules: tuple[Rule, ...] | None = None,
) -> RulesOutcome:
    """Apply the table; ``pair_facts`` is keyed by (x, y) in column order."""
    rules = load_rules() if rules is None else rules
    adjacent = [pair for pair, facts in pair_facts.items() if "adjacent" in facts]
    ruled_out_overall: set[str] = set()
    edge_out: dict[tuple[str, str], set[str]] = {pair: set() for pair in adjacent}
    fired: list[FiredRule] = []
    for rule in rules:
        if rule.scope == "global":
            hits: list[str] = [""] if rule.holds(global_facts) else []
        elif rule.scope == "variable":
            hits = [name for name, facts in variable_facts.items() if rule.holds(facts)]
        else:
            hits = [f"{x} - {y}" for (x, y), facts in pair_facts.items() if rule.holds(facts)]
        if not hits:
            continue
        items = tuple(h for h in hits if h)
        fired.append(FiredRule(rule, items, _render(rule, items, context)))
        ruled_out_overall.update(rule.rules_out)
        for_edges = rule.rules_out + rule.edge_rules_out
        if rule.scope == "pair":
            for (x, y) in adjacent:
                if f"{x} - {y}" in hits:
                    edge_out[(x, y)].update(for_edges)
        elif rule.edges == "all":
            for pair in adjacent:
                edge_out[pair].update(for_edges)
        elif rule.edges == "touching":
            for (x, y) in adjacent:
                if x in hits or y in hits:
                    edge_out[(x, y)].update(for_edges)
    level = next(lvl for lvl in LEVELS if lvl not in ruled_out_overall)
    # An edge may never rest on a rung stronger than the overall conclusion's
    # orienting rungs allow once the data have been judged void.
    if level == "none":
        for pair in adjacent:
            edge_out[pair].update(LEVELS[:-1])
    return RulesOutcome(level=level, fired=tuple(fired),
                        edge_ruled_out={pair: frozenset(v) for pair, v in edge_out.items()})


def meets(level: str, required: str) -> bool:
    return level_rank(level) <= level_rank(required)


def rules_table_text() -> str:
    """The table as plain text for ``preflight rules``."""
    lines = []
    for rule in load_rules():
        if rule.rules_out:
            out = ", ".join(rule.rules_out)
        else:
            out = "nothing for the table" if rule.edge_rules_out else "nothing (caution)"
        reach = "" if rule.scope == "pair" else f"; edges affected: {rule.edges}"
        lines.append(f"{rule.id}  [{rule.scope}{reach}]")
        lines.append(f"  when:      {' and '.join(rule.when)}")
        lines.append(f"  rules out: {out}")
        if rule.edge_rules_out:
            lines.append(f"  and for its edges only: {', '.join(rule.edge_rules_out)}")
        lines.append(f"  says:      {rule.explain}")
        lines.append(f"  source:    {rule.reference}")
        lines.append("")
    return "\n".join(lines).rstrip() + "\n"
