"""`preflight compare OLD.json NEW.json`: what changed between two batches, and the drift gate's exit codes.

The reports are the hand-made one of test_report_renderers (a -> b oriented
on a linear non-Gaussian basis, b -- c undetermined, level
latent-equivalence-class) and edited copies of it, each validated against
the schema, so every difference is known in advance.
"""

from __future__ import annotations

import copy
import json
import os

import pytest
from test_report_renderers import ODD_NAMES, handmade_report

from preflight.report.compare import (
    BASIS_CHANGED,
    COLUMN_GONE,
    EDGE_NEW,
    FLAGS_CHANGED,
    FLOOR_FROM_OLD_LEVEL,
    FLOOR_FROM_REQUIRE,
    ORIENTATION_GAINED,
    ORIENTATION_LOST,
    ORIENTATION_REVERSED,
    compare_reports,
)

from conftest import validate_report


@pytest.fixture(scope="module")
def old() -> dict:
    return handmade_report().to_dict()


def _pair(data: dict, a: str, b: str) -> dict:
    return next(p for p in data["pairs"] if {p["x"], p["y"]} == {a, b})


def _edited(data: dict, edit) -> dict:
    new = copy.deepcopy(data)
    edit(new)
    validate_report(new)
    return new


def _save(tmp_path, name: str, data: dict) -> str:
    path = tmp_path / name
    path.write_text(json.dumps(data))
    return str(path)


# ---------------------------------------------------------------- what is compared

def test_identical_reports_show_no_change(old):
    comparison = compare_reports(old, copy.deepcopy(old))
    assert comparison.passed and comparison.level_move == "unchanged"
    assert comparison.edges == () and comparison.variables == () and comparison.settings_changed == ()
    assert comparison.same_input and comparison.failures() == []
    assert comparison.floor == old["conclusion"]["level"] and comparison.floor_from == FLOOR_FROM_OLD_LEVEL


def test_lost_reversed_and_gained_orientations(old):
    def lose(d):
        p = _pair(d, "a", "b")
        p["orientation"], p["basis"] = "undetermined", None

    lost = compare_reports(old, _edited(old, lose))
    (edge,) = lost.edges
    assert (edge.before, edge.after) == ("a -> b", "a -- b")
    assert ORIENTATION_LOST in edge.changes and BASIS_CHANGED in edge.changes
    assert edge.lost_orientation and not lost.passed
    assert "a -> b became a -- b" in lost.failures()[0]

    reversed_ = compare_reports(old, _edited(old, lambda d: _pair(d, "a", "b").update(orientation="y->x")))
    assert reversed_.edges[0].changes == (ORIENTATION_REVERSED,) and not reversed_.passed

    def gain(d):
        _pair(d, "b", "c").update(orientation="y->x", basis="additive-noise")

    gained = compare_reports(old, _edited(old, gain))
    assert gained.edges[0].changes == (ORIENTATION_GAINED, BASIS_CHANGED)
    assert gained.edges[0].after == "c -> b" and gained.passed


def test_column_order_does_not_matter(old):
    def swap(d):
        for p in d["pairs"]:
            p["x"], p["y"] = p["y"], p["x"]
            p["orientation"] = {"x->y": "y->x", "y->x": "x->y"}.get(p["orientation"], p["orientation"])
        d["input"]["columns"].reverse()

    comparison = compare_reports(old, _edited(old, swap))
    assert comparison.edges == () and comparison.passed


def test_level_floor_defaults_to_the_old_level_and_require_overrides(old):
    def fall(d):
        d["conclusion"]["level"] = "none"

    fell = compare_reports(old, _edited(old, fall))
    assert fell.level_move == "fell" and fell.level_below_floor and not fell.passed
    assert "below latent-equivalence-class (the old report's level)" in fell.failures()[0]
    risen_old = _edited(old, lambda d: d["conclusion"].update(level="linear-non-gaussian"))
    lower = compare_reports(risen_old, old, require="equivalence-class")
    assert lower.level_move == "fell" and lower.level_below_floor and lower.floor_from == FLOOR_FROM_REQUIRE
    assert compare_reports(risen_old, old, require="latent-equivalence-class").passed
    assert compare_reports(old, risen_old).level_move == "rose"


def test_flags_columns_settings_and_rules(old):
    def drift(d):
        d["variables"][0]["flags"] = ["autocorrelated"]
        d["variables"][4]["flags"] = []  # e was discrete
        _pair(d, "b", "c")["flags"] = ["nonlinear", "heteroscedastic"]
        d["global"]["flags"] = ["duplicate-rows"]
        d["settings"]["alpha"] = 0.01
        d["conclusion"]["rules_fired"] = ["repeated-rows"]
        d["input"]["sha256"] = "cd" * 32

    comparison = compare_reports(old, _edited(old, drift))
    assert {(v.name, v.added, v.removed) for v in comparison.variables} == {
        ("a", ("autocorrelated",), ()), ("e", (), ("discrete",))}
    (edge,) = comparison.edges
    assert edge.changes == (FLAGS_CHANGED,) and edge.flags_added == ("heteroscedastic",)
    assert comparison.global_flags_added == ("duplicate-rows",)
    assert ("alpha", 0.05, 0.01) in comparison.settings_changed
    assert comparison.rules_fired_added == ("repeated-rows",)
    assert comparison.same_input is False and comparison.passed  # flags alone do not fail the gate
    text, markdown = comparison.to_text(), comparison.to_markdown()
    for words in ("+autocorrelated", "-discrete", "+heteroscedastic", "+duplicate-rows", "alpha 0.05 -> 0.01",
                  "different input"):
        assert words in text
    assert "+autocorrelated" in markdown and "## Settings changed" in markdown


def test_paths_and_report_objects_compare_like_dictionaries(old, tmp_path):
    from preflight.errors import InputError
    from preflight.report.model import Report

    new = _edited(old, lambda d: _pair(d, "a", "b").update(orientation="undetermined", basis=None))
    expected = compare_reports(old, new)
    old_path, new_path = _save(tmp_path, "o.json", old), _save(tmp_path, "n.json", new)
    assert compare_reports(old_path, tmp_path / "n.json") == expected  # str and pathlib paths
    assert compare_reports(Report.from_dict(old), new_path) == expected
    assert compare_reports(Report.from_dict(old), Report.from_dict(new)).edges == expected.edges
    with pytest.raises(InputError, match="not found"):
        compare_reports(old, tmp_path / "missing.json")


def test_input_without_a_checksum_is_not_called_different(old):
    frame_report = _edited(old, lambda d: d["input"].update(sha256=None, path="<DataFrame>"))
    comparison = compare_reports(old, frame_report)
    assert comparison.same_input is None and "inputs not compared" in comparison.to_text()


def test_removed_and_added_columns(old):
    def drop_a_add_f(d):
        d["input"]["columns"] = ["b", "c", "d", "e", "f"]
        d["variables"] = [v for v in d["variables"] if v["name"] != "a"] + [
            {"name": "f", "flags": [], "checks": []}]
        d["pairs"] = [p for p in d["pairs"] if "a" not in (p["x"], p["y"])]
        d["pairs"].append({"x": "c", "y": "f", "adjacent": True, "orientation": "x->y",
                           "basis": "equivalence-class", "flags": [], "checks": []})

    comparison = compare_reports(old, _edited(old, drop_a_add_f))
    assert comparison.columns_removed == ("a",) and comparison.columns_added == ("f",)
    changes = {(e.x, e.y): e for e in comparison.edges}
    assert changes[("a", "b")].changes == (COLUMN_GONE,) and changes[("a", "b")].after == "absent"
    assert changes[("a", "b")].lost_orientation
    assert changes[("c", "f")].changes == (EDGE_NEW,) and not changes[("c", "f")].lost_orientation
    assert not comparison.passed


# ---------------------------------------------------------------- the command

def test_cli_exit_0_when_nothing_fell(cli, old, tmp_path):
    a = _save(tmp_path, "old.json", old)
    code, out, err = cli("compare", a, a, "--markdown", str(tmp_path / "c.md"))
    assert code == 0, err
    assert out.startswith("PASS level unchanged at latent-equivalence-class")
    assert "No edge changed" in out
    assert (tmp_path / "c.md").read_text().startswith("# Batch comparison")


def test_cli_exit_1_when_an_edge_lost_its_orientation_even_when_the_level_meets_require(cli, old, tmp_path):
    new = _edited(old, lambda d: _pair(d, "a", "b").update(orientation="undetermined", basis=None))
    a, b = _save(tmp_path, "old.json", old), _save(tmp_path, "new.json", new)
    code, out, _ = cli("compare", a, b, "--require", "none", "--markdown", str(tmp_path / "c.md"))
    assert code == 1
    assert out.startswith("FAIL") and "1 edge lost its orientation: a -> b became a -- b" in out
    markdown = (tmp_path / "c.md").read_text()
    assert "orientation lost" in markdown and "| a -> b | a -- b |" in markdown


def test_cli_exit_1_when_the_level_fell_below_require(cli, old, tmp_path):
    new = _edited(old, lambda d: d["conclusion"].update(level="none"))
    a, b = _save(tmp_path, "old.json", old), _save(tmp_path, "new.json", new)
    code, out, _ = cli("compare", a, b, "--quiet")
    assert code == 1 and out.count("\n") == 1 and "level fell from latent-equivalence-class to none" in out
    code, out, _ = cli("compare", a, b, "--require", "none")
    assert code == 0, out
    code, out, _ = cli("compare", b, a, "--require", "equivalence-class")
    assert code == 1 and "below equivalence-class (--require)" in out


@pytest.mark.parametrize("content, words", [
    ("not json", "is not a JSON report"),
    ('{"schema_version": "1"}', "is not a valid preflight report: top level: 'tool' is a required property"),
    ('{"schema_version": "2"}', "schema version 1"),
    ("[1, 2]", "schema version 1"),
])
def test_cli_exit_2_on_bad_input_without_writing(cli, old, tmp_path, content, words):
    good = _save(tmp_path, "old.json", old)
    bad = tmp_path / "bad.json"
    bad.write_text(content)
    for args in ((good, str(bad)), (str(bad), good)):
        code, out, err = cli("compare", *args, "--markdown", str(tmp_path / "c.md"))
        assert code == 2 and out == "" and words in err
        assert err.count("\n") == 1 and "Traceback" not in err
        assert not os.path.exists(tmp_path / "c.md")


def test_cli_exit_2_on_a_schema_violation_names_where(cli, old, tmp_path):
    broken = copy.deepcopy(old)
    broken["pairs"][0]["orientation"] = "sideways"
    code, _, err = cli("compare", _save(tmp_path, "old.json", old), _save(tmp_path, "new.json", broken))
    assert code == 2 and "pairs[0].orientation:" in err
    code, _, err = cli("compare", _save(tmp_path, "old.json", old), str(tmp_path / "missing.json"))
    assert code == 2 and "not found" in err


def test_markdown_escapes_awkward_names(tmp_path):
    old = handmade_report(names=ODD_NAMES).to_dict()
    first, second = ODD_NAMES[0], ODD_NAMES[1]
    new = _edited(old, lambda d: _pair(d, first, second).update(orientation="undetermined", basis=None))
    markdown = compare_reports(old, new).to_markdown()
    assert "a\\|b -> \\<x>&y" in markdown  # the pipe and angle bracket are escaped, the table intact
    table = [line for line in markdown.splitlines() if line.startswith("| a")]
    assert len(table) == 1 and table[0].count(" | ") == 5
