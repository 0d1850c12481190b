"""What a report hands to the discovery step: the justified graph and its background knowledge.

The graph has one node per analysed variable and one edge per adjacent
pair.  An oriented edge points from cause to effect; an edge the report
leaves undetermined is stored once, from the pair's ``x`` to its ``y``
(the table's column order), with ``oriented`` false.  So a plain
``networkx.DiGraph`` holds both kinds, and no reader mistakes an
undetermined edge for a two-way cycle.

Every attribute is a scalar (text, boolean, integer) so that the same graph
writes to Graphviz DOT, GraphML and node-link JSON without loss of meaning:
flags are joined with :data:`FLAG_SEPARATOR` (flags never contain it), and
lists of variable names, which may contain any character, are JSON text.

Background knowledge: the three lists a discovery step can take as given.

- ``directions_to_fix``: oriented edges whose basis the overall conclusion
  licenses (:data:`LICENSED_BASES`);
- ``pairs_to_keep_apart``: pairs the report found not adjacent;
- ``edges_to_leave_open``: adjacent pairs whose direction the discovery step
  must find for itself (undetermined, or oriented on a basis the conclusion
  does not license).
"""

from __future__ import annotations

import io
import json
import os
import re
from dataclasses import dataclass
from typing import Any

from preflight.errors import InputError

FLAG_SEPARATOR = ","
"""Flags in the graph files are one string, joined with this (no flag contains it)."""

GRAPH_FORMATS = {".dot": "Graphviz DOT", ".graphml": "GraphML", ".json": "node-link JSON"}
"""File extensions ``--graph-out`` accepts, and the format each one selects."""

_ORIENTING = ("linear-non-gaussian", "additive-noise", "equivalence-class")
LICENSED_BASES: dict[str, tuple[str, ...]] = {
    # A unique DAG (either orienting rung) licenses every orientation the
    # report made: a linear mechanism with non-Gaussian noise is an additive-
    # noise model too, and a compelled orientation holds in any DAG of the class.
    "linear-non-gaussian": _ORIENTING,
    "additive-noise": _ORIENTING,
    # The equivalence class licenses its compelled orientations and, with
    # mixed noise, the edges non-Gaussian noise still orients (Hoyer et al.
    # 2008): the per-edge rules already withdrew the basis of every edge whose
    # own checks failed.
    "equivalence-class": _ORIENTING,
    # A class that allows hidden common causes licenses no direction: each
    # orientation above assumed no hidden common cause, and a compelled
    # CPDAG arrow is not an ancestral claim in such a class.
    "latent-equivalence-class": (),
    "none": (),
}
"""For each conclusion level, the bases on which an orientation may be fixed by the discovery step."""


@dataclass(frozen=True)
class BackgroundKnowledge:
    """Constraints a discovery step can take from the report.

    Every entry is a pair of column names: ``(cause, effect)`` in
    ``directions_to_fix``; ``(x, y)`` in the table's column order in the other
    two lists.  At level ``none`` the report licenses no structure, so nothing
    is fixed or kept apart and every adjacent pair is left open.
    """

    level: str
    directions_to_fix: tuple[tuple[str, str], ...]
    pairs_to_keep_apart: tuple[tuple[str, str], ...]
    edges_to_leave_open: tuple[tuple[str, str], ...]

    def to_dict(self) -> dict[str, Any]:
        return {
            "level": self.level,
            "licensed_bases": list(LICENSED_BASES[self.level]),
            "directions_to_fix": [list(edge) for edge in self.directions_to_fix],
            "pairs_to_keep_apart": [list(pair) for pair in self.pairs_to_keep_apart],
            "edges_to_leave_open": [list(pair) for pair in self.edges_to_leave_open],
        }


def cause_effect(pair: dict[str, Any]) -> tuple[str, str] | None:
    """(cause, effect) of an oriented pair, ``None`` when undetermined."""
    if pair["orientation"] == "x->y":
        return pair["x"], pair["y"]
    if pair["orientation"] == "y->x":
        return pair["y"], pair["x"]
    return None


def direction_may_be_fixed(pair: dict[str, Any], level: str) -> bool:
    return (pair["adjacent"] and cause_effect(pair) is not None
            and pair["basis"] in LICENSED_BASES[level])


def background_knowledge(data: dict[str, Any]) -> BackgroundKnowledge:
    level = data["conclusion"]["level"]
    fixed, apart, open_ = [], [], []
    for pair in data["pairs"]:
        if not pair["adjacent"]:
            if level != "none":
                apart.append((pair["x"], pair["y"]))
        elif direction_may_be_fixed(pair, level):
            edge = cause_effect(pair)
            assert edge is not None  # a direction that may be fixed is an oriented one
            fixed.append(edge)
        else:
            open_.append((pair["x"], pair["y"]))
    return BackgroundKnowledge(level, tuple(fixed), tuple(apart), tuple(open_))


def _names_json(items) -> str:
    return json.dumps([list(item) if isinstance(item, tuple) else item for item in items], ensure_ascii=False)


def to_networkx(data: dict[str, Any]):
    """The justified graph as a ``networkx.DiGraph`` with scalar attributes (module docstring)."""
    import networkx as nx

    conclusion = data["conclusion"]
    level = conclusion["level"]
    structure = data.get("structure") or {}
    knowledge = background_knowledge(data)
    graph = nx.DiGraph()
    graph.graph.update({
        "preflight_version": data["tool"]["version"],
        "schema_version": data["schema_version"],
        "level": level,
        "required": conclusion["required"],
        "passed": bool(conclusion["passed"]),
        "edges_oriented": int(conclusion["edges_oriented"]),
        "edges_total": int(conclusion["edges_total"]),
        "global_flags": FLAG_SEPARATOR.join(data["global"]["flags"]),
        "adjacency_source": str(structure.get("adjacency", "")),
        "input_sha256": data["input"].get("sha256") or "",
        "licensed_bases": FLAG_SEPARATOR.join(LICENSED_BASES[level]),
        "directions_to_fix": _names_json(knowledge.directions_to_fix),
        "pairs_to_keep_apart": _names_json(knowledge.pairs_to_keep_apart),
        "edges_to_leave_open": _names_json(knowledge.edges_to_leave_open),
    })
    gaussian = set(structure.get("gaussian_noises", []))
    for variable in data["variables"]:
        graph.add_node(variable["name"], flags=FLAG_SEPARATOR.join(variable["flags"]),
                       noise_looks_gaussian=variable["name"] in gaussian)
    for pair in data["pairs"]:
        if not pair["adjacent"]:
            continue
        source, target = cause_effect(pair) or (pair["x"], pair["y"])
        graph.add_edge(source, target,
                       oriented=cause_effect(pair) is not None,
                       basis=pair["basis"] or "",
                       flags=FLAG_SEPARATOR.join(pair["flags"]),
                       direction_may_be_fixed=direction_may_be_fixed(pair, level),
                       x=pair["x"], y=pair["y"], orientation=pair["orientation"],
                       conditioning=_names_json(pair.get("conditioning", [])))
    return graph


# ---------------------------------------------------------------- file formats

def graph_format(path: str) -> str:
    """The extension of ``path`` if it names a graph format, else an :class:`InputError` naming those accepted."""
    extension = os.path.splitext(path)[1].lower()
    if extension not in GRAPH_FORMATS:
        accepted = ", ".join(f"{ext} ({name})" for ext, name in GRAPH_FORMATS.items())
        raise InputError(f"cannot write a graph to {path}: the extension must be one of {accepted}")
    return extension


def _dot_quoted(value: Any) -> str:
    """One DOT double-quoted string.

    pydot leaves a quoted ID alone but quotes some IDs wrongly itself (a
    colon reads as a port, a double quote is not escaped), so every ID and
    value is quoted here.
    """
    if isinstance(value, bool):
        value = "true" if value else "false"
    text = str(value).replace("\\", "\\\\").replace('"', '\\"')
    return f'"{text}"'


def _dot_text(graph) -> str:
    import networkx as nx

    dot = nx.DiGraph()
    dot.graph["graph"] = {key: _dot_quoted(value) for key, value in graph.graph.items()}
    for node, attrs in graph.nodes(data=True):
        dot.add_node(_dot_quoted(node), **{k: _dot_quoted(v) for k, v in attrs.items()})
    for source, target, attrs in graph.edges(data=True):
        # Graphviz draws an edge without arrowheads when dir is none.
        drawing = {"dir": "forward" if attrs["oriented"] else "none",
                   "style": "solid" if attrs["oriented"] else "dashed"}
        dot.add_edge(_dot_quoted(source), _dot_quoted(target),
                     **{k: _dot_quoted(v) for k, v in {**attrs, **drawing}.items()})
    return nx.nx_pydot.to_pydot(dot).to_string()


# Characters XML 1.0 cannot hold, escaped or not.
_NOT_XML = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\ufffe\uffff\ud800-\udfff]")


def _refuse_names_xml_cannot_hold(graph) -> None:
    for node in graph.nodes:
        if _NOT_XML.search(str(node)):
            raise InputError(f"cannot write GraphML: the column name {str(node)!r} contains a control character, "
                             "which XML cannot hold; write .json or .dot instead, or rename the column")


def render_graph(data: dict[str, Any], extension: str) -> str:
    """The justified graph in the format ``extension`` names (a key of :data:`GRAPH_FORMATS`), as text."""
    import networkx as nx

    graph = to_networkx(data)
    if extension == ".graphml":
        _refuse_names_xml_cannot_hold(graph)
        buffer = io.BytesIO()
        nx.write_graphml(graph, buffer, encoding="utf-8")
        return buffer.getvalue().decode("utf-8")
    if extension == ".dot":
        return _dot_text(graph)
    if extension == ".json":
        linked = nx.node_link_data(graph, edges="edges")
        linked["background_knowledge"] = background_knowledge(data).to_dict()
        return json.dumps(linked, indent=2, ensure_ascii=False) + "\n"
    raise ValueError(f"not a graph format: {extension}")
