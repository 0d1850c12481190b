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


def _shipped_text() -> str:
    from importlib import resources

    return resources.files("preflight").joinpath("rules.toml").read_text(encoding="utf-8")


@pytest.mark.parametrize("right, wrong", [
    ('when = ["adjacent", "gaussian-noise"]', 'when = ["adjacent", "gausian-noise"]'),
    ('"not:confounding-suspected"]', '"not:confounding-suspect"]'),
    ('when = ["outliers"]', 'when = ["adjacent"]'),
])
def test_a_misspelt_or_misplaced_fact_is_refused_when_the_table_loads(right, wrong):
    from preflight.rules import parse_rules

    text = _shipped_text()
    assert text.count(right) == 1
    assert len(parse_rules(text)) == len(load_rules())
    name = wrong.split('"')[-2].removeprefix("not:")
    with pytest.raises(ValueError, match=f"unknown (pair|variable) fact '{name}'"):
        parse_rules(text.replace(right, wrong))


def test_every_flag_is_a_fact_of_its_scope():
    from preflight.policy import GLOBAL_FLAGS, PAIR_FLAGS, VARIABLE_FLAGS
    from preflight.rules import FACTS

    for scope, flags in (("global", GLOBAL_FLAGS), ("variable", VARIABLE_FLAGS), ("pair", PAIR_FLAGS)):
        assert set(flags) <= set(FACTS[scope])


def test_an_orientation_made_inside_the_equations_outweighs_the_class_and_is_shown_as_a_caution():
    oriented = frozenset({"adjacent", "lingam-oriented", "anm-undetermined"})
    inside = {("a", "b"): oriented | {"orientation-conflict", "oriented-in-equations"}, ("a", "c"): oriented}
    outcome = evaluate(frozenset(), {}, inside, {})
    assert outcome.level == "linear-non-gaussian"
    assert [f.rule.id for f in outcome.fired] == ["class-disagrees-with-equations"]
    assert outcome.edge_ruled_out[("a", "b")] == frozenset()
    from_battery = {("a", "b"): oriented | {"orientation-conflict"}, ("a", "c"): oriented}
    outcome = evaluate(frozenset(), {}, from_battery, {})
    assert outcome.level == "equivalence-class"
    assert "equivalence-class" in outcome.edge_ruled_out[("a", "b")]


def test_an_edge_too_faint_to_read_limits_itself_and_not_the_table():
    oriented = frozenset({"adjacent", "lingam-oriented", "anm-undetermined"})
    faint = frozenset({"adjacent", "lingam-undetermined", "anm-undetermined", "independent-both-ways"})
    outcome = evaluate(frozenset(), {}, {("a", "b"): faint, ("a", "c"): oriented}, {})
    assert outcome.level == "linear-non-gaussian"
    assert outcome.edge_ruled_out[("a", "b")] == {"linear-non-gaussian", "additive-noise"}
    assert outcome.edge_ruled_out[("a", "c")] == frozenset()
    unresolved = faint - {"independent-both-ways"}
    assert evaluate(frozenset(), {}, {("a", "b"): unresolved, ("a", "c"): oriented}, {}).level == "additive-noise"


def test_an_edge_without_support_in_its_equations_is_not_oriented_even_by_the_class():
    oriented = frozenset({"adjacent", "lingam-oriented", "anm-undetermined"})
    faint = frozenset({"adjacent", "lingam-undetermined", "anm-undetermined", "independent-both-ways"})
    unsupported = faint | {"no-partial-correlation"}
    outcome = evaluate(frozenset(), {}, {("a", "b"): unsupported, ("a", "c"): oriented}, {})
    assert outcome.level == "linear-non-gaussian"
    assert [f.rule.id for f in outcome.fired] == ["edge-without-support-in-equations"]
    assert outcome.edge_ruled_out[("a", "b")] == {"linear-non-gaussian", "additive-noise", "equivalence-class"}
    assert outcome.edge_ruled_out[("a", "c")] == frozenset()
    # Without the partial correlation's verdict the edge is only too faint to orient, and the class may orient it.
    outcome = evaluate(frozenset(), {}, {("a", "b"): faint, ("a", "c"): oriented}, {})
    assert [f.rule.id for f in outcome.fired] == ["direction-too-faint"]
    assert "equivalence-class" not in outcome.edge_ruled_out[("a", "b")]


def test_a_compelled_orientation_the_equations_lean_against_is_left_out_and_the_table_keeps_its_rung():
    oriented = frozenset({"adjacent", "lingam-oriented", "anm-undetermined"})
    leaning = frozenset({"adjacent", "lingam-undetermined", "anm-undetermined", "independent-both-ways",
                         "equations-lean-y->x", "class-against-equations-lean"})
    outcome = evaluate(frozenset(), {}, {("a", "b"): leaning, ("a", "c"): oriented}, {})
    assert outcome.level == "linear-non-gaussian"
    assert "class-against-equations-lean" in [f.rule.id for f in outcome.fired]
    assert "equivalence-class" in outcome.edge_ruled_out[("a", "b")]
    assert outcome.edge_ruled_out[("a", "c")] == frozenset()
    # The lean alone, with the class agreeing or silent, rules nothing out.
    agreeing = leaning - {"class-against-equations-lean"}
    outcome = evaluate(frozenset(), {}, {("a", "b"): agreeing, ("a", "c"): oriented}, {})
    assert "equivalence-class" not in outcome.edge_ruled_out[("a", "b")]


def test_the_class_gives_no_direction_beside_a_curve_at_a_discrete_variable_or_with_autocorrelated_rows():
    undirected = frozenset({"adjacent", "lingam-undetermined", "anm-undetermined"})
    beside = undirected | {"beside-nonlinear"}
    outcome = evaluate(frozenset(), {}, {("a", "b"): beside, ("a", "c"): undirected}, {})
    assert "class-beside-a-curve" in [f.rule.id for f in outcome.fired]
    assert "equivalence-class" in outcome.edge_ruled_out[("a", "b")]
    assert "equivalence-class" not in outcome.edge_ruled_out[("a", "c")]
    assert outcome.level != "latent-equivalence-class"  # the table keeps its rung
    pairs = {("a", "b"): undirected, ("b", "c"): undirected, ("c", "d"): undirected}
    discrete = evaluate(frozenset(), {"a": frozenset({"discrete"})}, pairs, {})
    assert "equivalence-class" in discrete.edge_ruled_out[("a", "b")]  # touching the discrete variable only
    assert "equivalence-class" not in discrete.edge_ruled_out[("c", "d")]
    autocorrelated = evaluate(frozenset(), {"a": frozenset({"autocorrelated"})}, pairs, {})
    assert all("equivalence-class" in autocorrelated.edge_ruled_out[pair] for pair in pairs)  # every edge


def test_autocorrelated_rows_leave_every_edge_without_a_direction_from_the_class():
    import preflight
    from preflight.scenarios import simulate, to_frame

    # A collider of 5 variables with AR(1) noise (validity study, 1,000 rows): its class compels directions.
    scenario = simulate("autocorrelated", "collider", 5, 1000, "laplace", 752772110)
    report = preflight.check(to_frame(scenario), seed=752772110, keep_samples=False).to_dict()
    assert "rows-not-independent" in report["conclusion"]["rules_fired"]
    # The table reaches the class (without the rule it took 2 directions from it, both for absent edges).
    assert report["conclusion"]["level"] == "equivalence-class"
    assert [p for p in report["pairs"] if p["adjacent"]]
    assert not [p for p in report["pairs"] if p["orientation"] != "undetermined"]
