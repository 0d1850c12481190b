"""The Report: everything the renderers need, and nothing they compute."""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from typing import Any

CAUTIONS = (
    "Passing these checks does not prove a causal structure: they can only fail to find evidence "
    "against the assumptions of the conclusion stated.",
    "Acyclicity, the absence of selection bias and the absence of measurement error are not testable "
    "from these data; they must be argued from how the data were collected.",
    "Domain review and the local rules of practice of your field come first; use this report as one "
    "input to that review, not as a substitute for it.",
)


@dataclass(repr=False)
class Report:
    """The result of :func:`preflight.check`.

    ``data`` holds the plain JSON-ready content (schema version 1);
    ``samples`` optionally holds what the plots draw: ``rows`` (the seeded
    subsample), ``values`` (the columns at those rows, input units), ``n``,
    ``noise`` (noise estimates at those rows), ``exponents`` (each column's
    power of two in the analysis) and ``fits`` (the pair battery's
    ``PlotFits`` of each adjacent pair, keyed by the frozenset of its two
    names).  It is never written to the JSON report, so the report does not
    carry the data.
    """

    data: dict[str, Any]
    samples: dict[str, Any] | None = field(default=None, repr=False)

    # Convenience accessors -------------------------------------------------
    @property
    def conclusion(self) -> dict[str, Any]:
        return self.data["conclusion"]

    @property
    def level(self) -> str:
        return self.data["conclusion"]["level"]

    @property
    def passed(self) -> bool:
        return bool(self.data["conclusion"]["passed"])

    @property
    def pairs(self) -> list[dict[str, Any]]:
        return self.data["pairs"]

    @property
    def variables(self) -> list[dict[str, Any]]:
        return self.data["variables"]

    def pair(self, a: str, b: str) -> dict[str, Any]:
        for entry in self.data["pairs"]:
            if {entry["x"], entry["y"]} == {a, b}:
                return entry
        raise KeyError(f"no pair {a!r}, {b!r}")

    def to_dict(self) -> dict[str, Any]:
        return json.loads(json.dumps(self.data))

    def to_json(self, indent: int | None = 2) -> str:
        return json.dumps(self.data, indent=indent, ensure_ascii=False, allow_nan=False) + "\n"

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> Report:
        return cls(data=data)

    # In a notebook ------------------------------------------------------------
    def __repr__(self) -> str:
        from preflight.report.notebook import report_repr

        return report_repr(self.data)

    def _repr_html_(self) -> str:
        from preflight.report.notebook import report_html

        return report_html(self.data)

    def pairs_frame(self):
        """One row per pair of variables: adjacency, orientation (and cause, effect), basis, flags."""
        from preflight.report.notebook import pairs_frame

        return pairs_frame(self.data)

    def variables_frame(self):
        """One row per variable: flags, whether its noise looks Gaussian, estimated parents."""
        from preflight.report.notebook import variables_frame

        return variables_frame(self.data)

    def checks_frame(self):
        """Every check in long form: one row per check, with its scope and the variable or pair it belongs to."""
        from preflight.report.notebook import checks_frame

        return checks_frame(self.data)

    # For the discovery step ---------------------------------------------------
    def background_knowledge(self):
        """Directions to fix, pairs to keep apart and edges to leave open (:mod:`preflight.report.discovery`)."""
        from preflight.report.discovery import background_knowledge

        return background_knowledge(self.data)

    def to_networkx(self):
        """The justified graph as a ``networkx.DiGraph`` (see :mod:`preflight.report.discovery`)."""
        from preflight.report.discovery import to_networkx

        return to_networkx(self.data)

    def write_graph(self, path: str) -> None:
        """Write the justified graph whole or not at all; ``.dot``, ``.graphml`` or ``.json`` picks the format."""
        from preflight.outputs import plan_outputs, write_outputs
        from preflight.report.discovery import graph_format, render_graph

        text = render_graph(self.data, graph_format(path))
        write_outputs([(target, text) for target in plan_outputs([("graph", path)])])
