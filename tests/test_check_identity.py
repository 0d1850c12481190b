"""A check is identified by fields (``CheckResult.identity``), never by its display text.

Three guards:

- a static scan of the package for comparisons, membership tests and string
  matching on a check's ``name`` or ``note``;
- a run with every check renamed and its note blanked as soon as it is
  identified: every decision, flag, verdict and the methods the report
  cites stay as they were (this catches what the scan cannot see, such as
  a name copied into a local variable and matched later);
- the decoder of saved reports (:mod:`preflight.report.identity`) gives,
  for every check of a real report, exactly the fields the check carried
  in memory, so ``preflight report`` renders what ``preflight check`` did.
"""

from __future__ import annotations

import ast
import dataclasses
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import preflight
from preflight.report.identity import checks_with_identity
from preflight.report.markdown import methods_paragraphs, methods_used, render_markdown
from preflight.report.model import Report
from preflight.report.plots import direction_hsic
from preflight.results import CheckIdentity, CheckResult

PACKAGE = Path(__file__).resolve().parent.parent / "preflight"

DECODER = PACKAGE / "report" / "identity.py"
"""The one module allowed to read a check's text: it decodes saved reports (schema 1 has no slot for the fields)."""

NOT_CHECKS = frozenset({"f", "field", "v", "variable", "s", "screen", "path", "self", "signal", "edge", "node"})
"""Receivers of ``.name`` / ``["name"]`` that are never checks: dataclass fields, variable entries, files.

A new receiver is flagged until it is identified here, so a check's name
cannot slip through under a new variable name.
"""

MATCHING_METHODS = frozenset({"startswith", "endswith", "find", "rfind", "index", "count", "__contains__",
                              "search", "match", "fullmatch", "split", "partition"})


def _receiver(node: ast.expr) -> str:
    """The identifier a ``.name`` lookup hangs on: ``t.result.name`` -> ``result``, ``check["name"]`` -> ``check``."""
    if isinstance(node, ast.Name):
        return node.id
    if isinstance(node, ast.Attribute):
        return node.attr
    if isinstance(node, ast.Subscript):
        return _receiver(node.value)
    if isinstance(node, ast.Call):
        return _receiver(node.func)
    return ""


def _text_access(node: ast.AST) -> str | None:
    """``"note"`` or ``"name"`` when ``node`` reads that field of what may be a check, else None."""
    if isinstance(node, ast.Attribute) and node.attr in ("name", "note"):
        field, receiver = node.attr, node.value
    elif (isinstance(node, ast.Subscript) and isinstance(node.slice, ast.Constant)
          and node.slice.value in ("name", "note")):
        field, receiver = str(node.slice.value), node.value
    elif (isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute) and node.func.attr == "get"
          and node.args and isinstance(node.args[0], ast.Constant) and node.args[0].value in ("name", "note")):
        field, receiver = str(node.args[0].value), node.func.value
    else:
        return None
    if field == "name" and _receiver(receiver) in NOT_CHECKS:
        return None
    return field


def _reads_text(node: ast.AST) -> bool:
    return any(_text_access(sub) is not None for sub in ast.walk(node))


def text_matches(source: str) -> list[tuple[int, str]]:
    """(line, code) of every comparison or string match that involves a check's name or note."""
    found = []
    for node in ast.walk(ast.parse(source)):
        suspect = False
        if isinstance(node, ast.Compare):
            suspect = any(_reads_text(operand) for operand in (node.left, *node.comparators))
        elif isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute) and node.func.attr in MATCHING_METHODS:
            suspect = _reads_text(node.func.value) or any(_reads_text(arg) for arg in node.args)
        if suspect:
            found.append((node.lineno, ast.unparse(node)))
    return found


def test_scan_finds_the_patterns_it_forbids():
    # The scan itself must see each way a check used to be recognised by its text.
    flagged = text_matches(
        'a = SPLINE in r.name\n'
        'b = c.name.startswith("ljung-box")\n'
        'c = check["name"] == f"hsic ({x} on {y})"\n'
        'd = "fourier" in (check.get("note") or "").lower()\n'
        'e = t.result.note.endswith("x")\n'
        'f = re.search("hsic", check["name"].lower())\n')
    assert [line for line, _ in flagged] == [1, 2, 3, 4, 5, 6]
    assert text_matches('ok = v["name"] in names\nfine = f.name in BOUNDS\nx = identity.test == "hsic"\n') == []


def test_no_package_code_branches_on_a_check_name_or_note():
    offenders = []
    for path in sorted(PACKAGE.rglob("*.py")):
        if path == DECODER:
            continue
        offenders += [f"{path.relative_to(PACKAGE.parent)}:{line}: {code}"
                      for line, code in text_matches(path.read_text())]
    assert offenders == [], "compare identity fields instead:\n" + "\n".join(offenders)


# ---------------------------------------------------------------- behaviour

def _table() -> pd.DataFrame:
    """Straight-line and bending edges, an unrelated column, names with brackets and ' on ' in them."""
    rng = np.random.default_rng(3)
    n = 400
    a = rng.uniform(-1, 1, n)
    b = 0.9 * a + 0.4 * rng.uniform(-1, 1, n)
    c = np.tanh(3 * b) + 0.2 * rng.uniform(-1, 1, n)
    d = rng.exponential(1.0, n)
    return pd.DataFrame({"feed (kg/h)": a, "temp on line 2": b, "glaze": c, "spare": d})


@pytest.fixture(scope="module")
def report() -> Report:
    return preflight.check(_table(), seed=4, jobs=1)


def test_every_check_in_a_report_carries_its_identity(report):
    seen = set()
    for check, identity in checks_with_identity(report.data):
        assert getattr(check, "identity", None) is identity, check["name"]
        assert identity.scope in ("variable", "pair", "global")
        seen.add((identity.test, identity.family, identity.variant))
    # The kinds the decisions branch on are all present in this table.
    assert ("breusch-pagan", "variance", "spline residual") in seen
    assert ("hsic", "additive-noise independence", "spline residual") in seen
    assert ("hsic", "residual independence", None) in seen
    assert ("ljung-box", "autocorrelation", None) in seen
    assert ("rows-needed", None, "noise estimate") in seen


def test_decoder_of_saved_reports_gives_the_fields_carried_in_memory(report):
    saved = json.loads(report.to_json())
    for (check, identity), (plain, decoded) in zip(checks_with_identity(report.data), checks_with_identity(saved)):
        assert not hasattr(plain, "identity")
        if identity.null is not None and decoded.null is None:
            # The pipeline replaced the note that named the null with why the
            # check was set aside; the same null shows in the pair's other HSICs.
            assert check["note"].startswith("not used as a confounding signal"), check["name"]
            identity = dataclasses.replace(identity, null=None)
        assert decoded == identity, check["name"]
    assert render_markdown(Report.from_dict(saved)) == render_markdown(report)


def test_renaming_every_check_changes_no_decision(monkeypatch, report):
    original = CheckResult.identified

    def renamed(self, **fields):
        result = original(self, **fields)
        identity: CheckIdentity = result.identity
        return dataclasses.replace(result, name=f"check {abs(hash(identity)) % 10**6}", note="")

    monkeypatch.setattr(CheckResult, "identified", renamed)
    scrambled = preflight.check(_table(), seed=4, jobs=1)

    def decisions(data):
        return (data["conclusion"], [(v["flags"], [c["passed"] for c in v["checks"]]) for v in data["variables"]],
                [(p["orientation"], p["basis"], p["flags"], [(c["p_adjusted"], c["passed"]) for c in p["checks"]])
                 for p in data["pairs"]],
                data["global"]["flags"], data["structure"])

    assert decisions(scrambled.data) == decisions(report.data)
    assert methods_used(scrambled.data).methods == methods_used(report.data).methods
    def cited(data):  # the descriptive counts are listed by their (display) names
        return [p for p in methods_paragraphs(data) if not p.startswith("Descriptive counts")]

    assert cited(scrambled.data) == cited(report.data)
    for before, after in zip(report.pairs, scrambled.pairs):
        for regressor, response in ((before["x"], before["y"]), (before["y"], before["x"])):
            found, again = direction_hsic(before, regressor, response), direction_hsic(after, regressor, response)
            # An edge dropped after its battery ran (no association, or separated given a spline) keeps its checks.
            assert (found is None) == (again is None)
            assert found is not None or not before["adjacent"]
            if found is not None:
                assert found["p_adjusted"] == again["p_adjusted"]
