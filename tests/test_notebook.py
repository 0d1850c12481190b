"""The report in a notebook: repr, the HTML cell, the DataFrames, and the example notebook run end to end."""

from __future__ import annotations

import copy
import os

import pandas as pd
from test_report_renderers import ODD_NAMES, every_check, handmade_report, void_report

from preflight.report.notebook import CHECK_COLUMNS, CHECK_FIELDS, PAIR_COLUMNS, REPR_REASONS, VARIABLE_COLUMNS

from conftest import ROOT

NOTEBOOK = os.path.join(ROOT, "docs", "example.ipynb")


# ---------------------------------------------------------------- repr

def test_repr_is_a_few_lines_with_the_conclusion_and_first_reasons():
    report = handmade_report()
    text = repr(report)
    lines = text.splitlines()
    assert lines[0].startswith("<preflight Report: level latent-equivalence-class, not passed")
    assert "1 of 2 edges oriented" in lines[0]
    assert "handmade.csv, 300 of 303 rows, 5 columns" in lines[1]
    assert lines[2].startswith("  - d and e: noise estimates are dependent")
    assert len(lines) == 3 and text.endswith(">")

    many = copy.deepcopy(report.data)
    many["conclusion"]["reasons"] = [f"reason {i} " + "word " * 60 for i in range(REPR_REASONS + 4)]
    lines = repr(type(report).from_dict(many)).splitlines()
    assert len(lines) == 2 + REPR_REASONS + 1
    assert all(len(line) <= 120 for line in lines[2:])
    assert "and 4 more reasons" in lines[-1]
    assert "passed (required" in repr(handmade_report(passed=True)).splitlines()[0]
    assert repr(type(report)(data={"schema_version": "1"})).startswith("<preflight Report: incomplete data")


# ---------------------------------------------------------------- HTML cell

def _fragment(text: str):
    import html5lib

    return html5lib.HTMLParser(strict=True, namespaceHTMLElements=False).parseFragment(text)


def test_html_cell_has_conclusion_edges_and_reasons_with_inline_styles_only():
    report = handmade_report(names=ODD_NAMES)
    text = report._repr_html_()
    tree = _fragment(text)  # strict parsing: well-formed
    words = " ".join(" ".join(tree.itertext()).split())
    assert "FAIL" in words and "latent-equivalence-class" in words
    assert "a|b \u2192 <x>&y" in words and "<x>&y \u2014 c`d" in words
    assert report.conclusion["reasons"][0] in words
    assert "discrete" in words  # the flagged variable
    # Escaped, and nothing a notebook would have to fetch or run.
    assert "<x>&y" not in text and "&lt;x&gt;&amp;y" in text
    for banned in ("<style", "<script", "<link", "<img", "src=", "href=", "url(", "class="):
        assert banned not in text.lower()
    assert text.count('style="') > 10

    void = void_report()._repr_html_()
    assert "No adjacent edges" in void and "too-few-rows" in void
    assert "PASS" in handmade_report(passed=True)._repr_html_()


# ---------------------------------------------------------------- DataFrames

def test_pairs_frame_matches_the_report():
    report = handmade_report()
    frame = report.pairs_frame()
    assert isinstance(frame, pd.DataFrame) and list(frame.columns) == list(PAIR_COLUMNS)
    assert len(frame) == len(report.pairs) == 10
    row = frame[(frame.x == "a") & (frame.y == "b")].iloc[0]
    assert (row.cause, row.effect, row.basis, bool(row.adjacent)) == ("a", "b", "linear-non-gaussian", True)
    row = frame[(frame.x == "b") & (frame.y == "c")].iloc[0]
    assert row.orientation == "undetermined" and pd.isna(row.cause) and row["flags"] == "nonlinear"
    assert row.conditioning == ("a",)
    assert frame.adjacent.sum() == 2
    assert list(frame.checks) == [len(p["checks"]) for p in report.pairs]
    assert list(frame.checks_failed) == [sum(c["passed"] is False for c in p["checks"]) for p in report.pairs]


def test_variables_frame_matches_the_report():
    report = handmade_report()
    frame = report.variables_frame()
    assert list(frame.columns) == list(VARIABLE_COLUMNS) and list(frame["name"]) == list("abcde")
    assert list(frame["flags"]) == ["", "", "", "", "discrete"]
    assert list(frame.noise_looks_gaussian) == [False, False, True, False, False]
    assert frame.set_index("name").estimated_parents.to_dict() == {"a": (), "b": ("a",), "c": ("b",), "d": (), "e": ()}


def test_checks_frame_is_long_form_with_every_field():
    report = handmade_report()
    frame = report.checks_frame()
    expected = list(every_check(report.data))
    assert list(frame.columns) == list(CHECK_COLUMNS) and len(frame) == len(expected)
    for (owner, check), (_, row) in zip(expected, frame.iterrows()):
        if owner == "global":
            assert row.scope == "global" and pd.isna(row.variable) and pd.isna(row.x)
        elif isinstance(owner, tuple):
            assert row.scope == "pair" and (row.x, row.y) == owner and pd.isna(row.variable)
        else:
            assert row.scope == "variable" and row.variable == owner and pd.isna(row.x)
        for field in CHECK_FIELDS:
            value = check[field]
            if value is None and field != "passed":
                assert pd.isna(row[field]), field
            else:
                assert row[field] == value or row[field] is value, field
    # FAIL (False) and evidence (None) stay apart.
    assert set(map(repr, frame.passed.unique())) <= {"True", "False", "None"}
    assert (frame.passed.map(lambda v: v is None)).sum() == sum(c["passed"] is None for _, c in expected)
    assert frame.p_value.dtype == "float64" and frame.n.dtype == "int64"


def test_frames_of_a_void_report_keep_their_columns():
    report = void_report()
    assert list(report.checks_frame().columns) == list(CHECK_COLUMNS)
    assert (report.checks_frame().scope == "global").all()
    assert not report.pairs_frame().adjacent.any()


# ---------------------------------------------------------------- the example notebook

def test_example_notebook_is_what_the_build_script_writes():
    import importlib.util

    import nbformat

    spec = importlib.util.spec_from_file_location("build_example_notebook",
                                                  os.path.join(ROOT, "docs", "build_example_notebook.py"))
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    saved = nbformat.read(NOTEBOOK, as_version=4)
    nbformat.validate(saved)
    built = module.build()
    assert [(c.cell_type, c.source) for c in saved.cells] == [(c.cell_type, c.source) for c in built.cells]
    assert all(not c.get("outputs") for c in saved.cells if c.cell_type == "code")


def test_example_notebook_runs(tmp_path):
    import nbformat
    from nbclient import NotebookClient

    notebook = nbformat.read(NOTEBOOK, as_version=4)
    NotebookClient(notebook, timeout=240, kernel_name="python3",
                   resources={"metadata": {"path": str(tmp_path)}}).execute()
    outputs = [o for c in notebook.cells if c.cell_type == "code" for o in c.outputs]
    assert not [o for o in outputs if o.output_type == "error"]

    def cell_output(start: str) -> list:
        cell = next(c for c in notebook.cells if c.cell_type == "code" and c.source.startswith(start))
        return cell.outputs

    (shown,) = cell_output("report = preflight.check")
    assert "Edges (cause" in shown.data["text/html"] and "<preflight Report: level" in shown.data["text/plain"]
    (table,) = cell_output('report.pairs_frame().query("adjacent")')
    assert "<table" in table.data["text/html"] and "heater_power" in table.data["text/plain"]
    (knowledge,) = cell_output("knowledge = report.background_knowledge()")
    assert "directions_to_fix" in knowledge.data["text/plain"]
    (edges,) = cell_output("import networkx as nx")
    assert "heater_power" in edges.data["text/plain"]
    assert (tmp_path / "greenhouse-graph.graphml").exists()
    (printed,) = cell_output("next_report = preflight.check")
    assert printed.output_type == "stream" and "edges oriented" in printed.text
    assert "leaf_temp" in printed.text
