"""The justified graph and its background knowledge: built from the report, written by networkx, read back by networkx.

Reports are the hand-made ones of test_report_renderers (a -> b oriented on
a linear non-Gaussian basis, b -- c undetermined and nonlinear, d and e not
adjacent with signs of a hidden common cause), with the level changed where
the licensing rule is tested, plus one real analysis through the CLI.
"""

from __future__ import annotations

import copy
import json
import os

import networkx as nx
import pytest
from test_report_renderers import demo, handmade_report  # noqa: F401 - demo is a session fixture

from preflight.report.discovery import (
    FLAG_SEPARATOR,
    GRAPH_FORMATS,
    LICENSED_BASES,
    render_graph,
    to_networkx,
)
from preflight.report.model import Report

from conftest import load_json, validate_report

AWKWARD = ("a:b", 'say "hi"', "back\\slash", "comma,name", "node")


def _with_level(report: Report, level: str) -> Report:
    data = copy.deepcopy(report.data)
    data["conclusion"]["level"] = level
    validate_report(data)
    return Report.from_dict(data)


def _dot_value(value: str) -> str:
    """A DOT attribute as pydot reads it back: the quotes this writer put around every value, escapes kept."""
    if len(value) >= 2 and value[0] == value[-1] == '"':
        value = value[1:-1]
    return value.replace('\\"', '"').replace("\\\\", "\\")


def _expected_edges(data: dict) -> dict[tuple[str, str], dict]:
    edges = {}
    for p in data["pairs"]:
        if not p["adjacent"]:
            continue
        key = (p["y"], p["x"]) if p["orientation"] == "y->x" else (p["x"], p["y"])
        edges[key] = {"oriented": p["orientation"] != "undetermined", "basis": p["basis"] or "",
                      "flags": FLAG_SEPARATOR.join(p["flags"]), "orientation": p["orientation"],
                      "x": p["x"], "y": p["y"]}
    return edges


# ---------------------------------------------------------------- background knowledge

def test_background_knowledge_partitions_the_pairs_and_licenses_by_level():
    report = handmade_report()
    pairs = {(p["x"], p["y"]) for p in report.pairs}
    for level in LICENSED_BASES:
        knowledge = _with_level(report, level).background_knowledge()
        fixed = {tuple(sorted(e, key=report.data["input"]["columns"].index)) for e in knowledge.directions_to_fix}
        groups = [fixed, set(knowledge.pairs_to_keep_apart), set(knowledge.edges_to_leave_open)]
        assert sum(len(g) for g in groups) == len(set().union(*groups)), level  # disjoint
        if level == "none":
            assert not fixed and not knowledge.pairs_to_keep_apart
            assert set(knowledge.edges_to_leave_open) == {("a", "b"), ("b", "c")}
            continue
        assert set().union(*groups) == pairs, level
        assert set(knowledge.pairs_to_keep_apart) == {(p["x"], p["y"]) for p in report.pairs if not p["adjacent"]}
        # a -> b rests on linear-non-gaussian: fixed exactly when the level licenses that basis.
        if "linear-non-gaussian" in LICENSED_BASES[level]:
            assert knowledge.directions_to_fix == (("a", "b"),)
            assert knowledge.edges_to_leave_open == (("b", "c"),)
        else:
            assert knowledge.directions_to_fix == ()
            assert knowledge.edges_to_leave_open == (("a", "b"), ("b", "c"))


def test_licensing_table_is_monotone_down_the_ladder():
    from preflight.policy import LEVELS

    sizes = [len(LICENSED_BASES[level]) for level in LEVELS]
    assert sizes == sorted(sizes, reverse=True)
    assert LICENSED_BASES["latent-equivalence-class"] == () and LICENSED_BASES["none"] == ()


def test_reversed_orientation_points_from_cause_to_effect():
    report = _with_level(handmade_report(), "equivalence-class")
    report.data["pairs"][0]["orientation"] = "y->x"  # the pair (a, b)
    assert report.background_knowledge().directions_to_fix == (("b", "a"),)
    graph = report.to_networkx()
    assert graph.has_edge("b", "a") and not graph.has_edge("a", "b")
    assert graph.edges["b", "a"]["orientation"] == "y->x"


# ---------------------------------------------------------------- the graph in memory

def test_graph_carries_edges_nodes_and_report_facts():
    report = _with_level(handmade_report(), "equivalence-class")
    graph = report.to_networkx()
    data = report.data
    assert isinstance(graph, nx.DiGraph)
    assert list(graph.nodes) == data["input"]["columns"]
    assert {e: {k: graph.edges[e][k] for k in ("oriented", "basis", "flags", "orientation", "x", "y")}
            for e in graph.edges} == _expected_edges(data)
    assert graph.edges["a", "b"]["direction_may_be_fixed"] is True
    assert graph.edges["b", "c"]["direction_may_be_fixed"] is False
    assert json.loads(graph.edges["b", "c"]["conditioning"]) == ["a"]
    assert graph.nodes["e"]["flags"] == "discrete"
    assert graph.nodes["c"]["noise_looks_gaussian"] is True and graph.nodes["a"]["noise_looks_gaussian"] is False
    assert graph.graph["level"] == "equivalence-class"
    assert graph.graph["preflight_version"] == data["tool"]["version"]
    knowledge = report.background_knowledge()
    assert json.loads(graph.graph["directions_to_fix"]) == [list(e) for e in knowledge.directions_to_fix]
    assert json.loads(graph.graph["pairs_to_keep_apart"]) == [list(e) for e in knowledge.pairs_to_keep_apart]
    assert json.loads(graph.graph["edges_to_leave_open"]) == [list(e) for e in knowledge.edges_to_leave_open]
    for _, _, attrs in graph.edges(data=True):  # scalar attributes only, so every format can hold them
        assert all(isinstance(v, (str, bool, int, float)) for v in attrs.values())


# ---------------------------------------------------------------- round trips through networkx

def _read_dot_exactly(path: str) -> nx.DiGraph:
    """DOT read with pydot's parser, unquoting IDs too.

    networkx's own reader strips quotes from IDs without undoing escapes and
    skips nodes named like DOT keywords (node, graph, edge); the file holds
    them correctly, as this reader shows.
    """
    import pydot

    (dot,) = pydot.graph_from_dot_file(path)
    graph = nx.DiGraph()
    graph.graph.update({k: _dot_value(v) for k, v in dot.get_attributes().items()})
    for node in dot.get_nodes():
        if node.get_name() not in ("node", "graph", "edge"):  # default-attribute statements, unquoted
            graph.add_node(_dot_value(node.get_name()), **{k: _dot_value(v) for k, v in node.get_attributes().items()})
    for edge in dot.get_edges():
        graph.add_edge(_dot_value(edge.get_source()), _dot_value(edge.get_destination()),
                       **{k: _dot_value(v) for k, v in edge.get_attributes().items()})
    return graph


def _read_back(path: str, exact_dot: bool = False):
    extension = os.path.splitext(path)[1]
    if extension == ".graphml":
        return nx.read_graphml(path)
    if extension == ".json":
        with open(path, encoding="utf-8") as handle:
            return nx.node_link_graph(json.load(handle), edges="edges")
    if exact_dot:
        return _read_dot_exactly(path)
    graph = nx.nx_pydot.read_dot(path)  # as the README shows
    plain = nx.DiGraph()
    plain.graph.update({k: _dot_value(v) for k, v in graph.graph.get("graph", {}).items()})
    for node, attrs in graph.nodes(data=True):
        plain.add_node(node, **{k: _dot_value(v) for k, v in attrs.items()})
    for source, target, attrs in graph.edges(data=True):
        plain.add_edge(source, target, **{k: _dot_value(v) for k, v in attrs.items()})
    return plain


def _as_text(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    return str(value)


@pytest.mark.parametrize("extension", sorted(GRAPH_FORMATS))
@pytest.mark.parametrize("names", [("a", "b", "c", "d", "e"), AWKWARD], ids=["plain", "awkward"])
def test_graph_files_load_back_with_the_same_edges_and_attributes(tmp_path, extension, names):
    report = _with_level(handmade_report(names=names), "equivalence-class")
    path = str(tmp_path / f"graph{extension}")
    report.write_graph(path)
    graph, back = report.to_networkx(), _read_back(path, exact_dot=names == AWKWARD)
    assert set(back.nodes) == set(graph.nodes) == set(names)
    assert set(back.edges) == set(graph.edges)
    if extension == ".dot":  # DOT holds text only: compare as text
        for edge in graph.edges:
            attrs = {k: _as_text(v) for k, v in graph.edges[edge].items()}
            assert {k: back.edges[edge][k] for k in attrs} == attrs
            assert back.edges[edge]["dir"] == ("forward" if graph.edges[edge]["oriented"] else "none")
        for node in graph.nodes:
            assert {k: back.nodes[node][k] for k in graph.nodes[node]} == {
                k: _as_text(v) for k, v in graph.nodes[node].items()}
        assert {k: back.graph[k] for k in graph.graph} == {k: _as_text(v) for k, v in graph.graph.items()}
    else:
        assert all(back.edges[e] == graph.edges[e] for e in graph.edges)
        assert all(back.nodes[n] == graph.nodes[n] for n in graph.nodes)
        assert {k: back.graph[k] for k in graph.graph} == graph.graph
    fixed = json.loads(back.graph["directions_to_fix"])
    assert fixed == [[names[0], names[1]]]


def test_node_link_json_has_the_background_knowledge_as_lists(tmp_path):
    report = _with_level(handmade_report(), "linear-non-gaussian")
    linked = json.loads(render_graph(report.data, ".json"))
    assert linked["background_knowledge"] == {
        "level": "linear-non-gaussian",
        "licensed_bases": list(LICENSED_BASES["linear-non-gaussian"]),
        "directions_to_fix": [["a", "b"]],
        "pairs_to_keep_apart": [[p["x"], p["y"]] for p in report.pairs if not p["adjacent"]],
        "edges_to_leave_open": [["b", "c"]],
    }


def test_graph_text_is_the_same_for_the_same_report():
    report = handmade_report()
    for extension in GRAPH_FORMATS:
        assert render_graph(report.data, extension) == render_graph(copy.deepcopy(report.data), extension)


def test_the_kiln_demo_round_trips_in_every_format(demo, tmp_path):  # noqa: F811
    """A real analysis: every edge, orientation and basis survives each format, and the lists follow the level."""
    knowledge = demo.background_knowledge()
    adjacent = [(p["x"], p["y"]) for p in demo.pairs if p["adjacent"]]
    licensed = LICENSED_BASES[demo.level]
    assert [tuple(e) for e in knowledge.directions_to_fix] == [
        e for p in demo.pairs if p["adjacent"] and p["basis"] in licensed
        for e in [(p["x"], p["y"]) if p["orientation"] == "x->y" else (p["y"], p["x"])]]
    assert len(knowledge.directions_to_fix) + len(knowledge.edges_to_leave_open) == len(adjacent)
    assert len(knowledge.pairs_to_keep_apart) == len(demo.pairs) - len(adjacent)
    expected = _expected_edges(demo.data)
    for extension in sorted(GRAPH_FORMATS):
        path = str(tmp_path / f"kiln{extension}")
        demo.write_graph(path)
        back = _read_back(path)
        assert set(back.edges) == set(expected), extension
        for edge, attrs in expected.items():
            got = {k: back.edges[edge][k] for k in attrs}
            assert got == (attrs if extension != ".dot" else {k: _as_text(v) for k, v in attrs.items()}), extension
        assert _as_text(back.graph["level"]) == demo.level


def test_graphml_refuses_a_name_xml_cannot_hold_and_json_keeps_it(tmp_path, cli):
    from preflight.errors import InputError

    names = ("a\x01b", "c", "d", "e", "f")
    report = _with_level(handmade_report(names=names), "equivalence-class")
    with pytest.raises(InputError, match="control character"):
        render_graph(report.data, ".graphml")
    path = str(tmp_path / "g.json")
    report.write_graph(path)
    assert set(_read_back(path).nodes) == set(names)
    saved = tmp_path / "r.json"
    saved.write_text(report.to_json())
    code, _, err = cli("report", str(saved), "--graph-out", str(tmp_path / "g.graphml"),
                       "--markdown", str(tmp_path / "r.md"))
    assert code == 2 and "control character" in err and err.count("\n") == 1
    assert not os.path.exists(tmp_path / "g.graphml") and not os.path.exists(tmp_path / "r.md")


# ---------------------------------------------------------------- command line

def test_cli_graph_out_on_a_real_analysis(cli, linear_uniform_csv, tmp_path):
    graph_path, json_path = tmp_path / "g.graphml", tmp_path / "r.json"
    code, out, err = cli("check", linear_uniform_csv, "--graph-out", str(graph_path), "--json", str(json_path),
                         "--jobs", "1", "--seed", "3")
    assert code in (0, 1), err
    data = load_json(json_path)
    graph = nx.read_graphml(graph_path)
    assert set(graph.edges) == set(_expected_edges(data))
    assert graph.graph["level"] == data["conclusion"]["level"]
    for edge, expected in _expected_edges(data).items():
        assert {k: graph.edges[edge][k] for k in expected} == expected
    expected = to_networkx(data).graph
    assert {k: graph.graph[k] for k in expected} == expected


@pytest.mark.parametrize("command", ["check", "report"])
def test_cli_unknown_graph_extension_exits_2_before_any_work(cli, tmp_path, command):
    report_path = tmp_path / "in.json"
    report_path.write_text(handmade_report().to_json())
    source = str(tmp_path / "missing.csv") if command == "check" else str(report_path)
    code, out, err = cli(command, source, "--graph-out", str(tmp_path / "g.txt"), "--markdown",
                         str(tmp_path / "r.md"))
    assert code == 2
    assert err.count("\n") == 1 and ".dot" in err and ".graphml" in err and ".json" in err
    assert "Traceback" not in err
    assert not os.path.exists(tmp_path / "g.txt") and not os.path.exists(tmp_path / "r.md")


def test_cli_graph_out_from_a_saved_report_is_all_or_none(cli, tmp_path):
    report_path = tmp_path / "in.json"
    report_path.write_text(handmade_report().to_json())
    code, _, err = cli("report", str(report_path), "--markdown", str(tmp_path / "r.md"),
                       "--graph-out", str(tmp_path / "no-such-folder" / "g.dot"))
    assert code == 2 and "no-such-folder" in err
    assert not os.path.exists(tmp_path / "r.md")
    code, _, err = cli("report", str(report_path), "--graph-out", str(tmp_path / "g.dot"), "--quiet")
    assert code == 0, err
    assert set(_read_back(str(tmp_path / "g.dot")).edges) == set(_expected_edges(handmade_report().data))
