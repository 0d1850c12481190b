"""The rules layer: the table parses, and rules act on the conclusion and on edges as documented."""

import pytest

from preflight.rules import _parse_rule, evaluate, load_rules


def _rule(**fields):
    base = {"id": "r", "scope": "pair", "when": ["adjacent", "orientation-conflict"], "explain": "{items}"}
    base.update(fields)
    return _parse_rule(base, 0)


def test_edge_only_rungs_leave_the_overall_conclusion_alone():
    contested = _rule(rules_out=["linear-non-gaussian"], edge_rules_out=["equivalence-class"])
    facts = {("a", "b"): frozenset({"adjacent", "orientation-conflict"}), ("a", "c"): frozenset({"adjacent"})}
    outcome = evaluate(frozenset(), {}, facts, {}, rules=(contested,))
    assert outcome.level == "additive-noise"
    assert outcome.edge_ruled_out[("a", "b")] == {"linear-non-gaussian", "equivalence-class"}
    assert outcome.edge_ruled_out[("a", "c")] == frozenset()


def test_shipped_table_leaves_a_contested_edge_undetermined():
    (rule,) = [r for r in load_rules() if r.id == "orientation-disagrees-with-class"]
    assert "equivalence-class" in rule.edge_rules_out and "equivalence-class" not in rule.rules_out


@pytest.mark.parametrize("fields", [{"edge_rules_out": ["none"]}, {"edge_rules_out": ["sideways"]},
                                    {"kind": "caution", "edge_rules_out": ["equivalence-class"]}])
def test_bad_edge_rules_are_refused(fields):
    with pytest.raises(ValueError):
        _rule(**fields)
