"""Hostile and unlucky input: every case exits 0, 1 or 2 as documented, never 3, and loses nothing.

Each failing case asserts exit 2, exactly one line on stderr without a
traceback, no report written, and the input unchanged byte for byte.  The CLI
runs in this process (``preflight.cli.main``, the console entry point, with
its exit-code mapping), so a case costs milliseconds; the few that need a
real process (closed stdin, a device as stdout) run one.
"""

from __future__ import annotations

import contextlib
import hashlib
import io
import json
import os
import stat
import subprocess
import sys

import numpy as np
import pytest

from conftest import ROOT, validate_report

ROWS = 60


def run_main(*args: str) -> tuple[int, str, str]:
    """``preflight ARGS`` in this process: (exit code, stdout, stderr)."""
    from preflight.cli import main

    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        try:
            main([str(a) for a in args])
            code = 0
        except SystemExit as exc:
            code = exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 1)
    return code, out.getvalue(), err.getvalue()


def table_text(names=("a", "b", "c"), rows: int = ROWS, seed: int = 0, cells=None) -> str:
    """A small chain a -> b -> c of uniform noise as CSV; ``cells`` maps (row, column) to replacement text."""
    import csv

    rng = np.random.default_rng(seed)
    data = np.empty((rows, len(names)))
    data[:, 0] = rng.uniform(size=rows)
    for j in range(1, len(names)):
        data[:, j] = data[:, j - 1] + rng.uniform(size=rows)
    buffer = io.StringIO()
    writer = csv.writer(buffer)  # "\r\n" line ends, so a lone "\r" in a name is quoted too
    writer.writerow(names)
    for i, row in enumerate(data):
        writer.writerow([(cells or {}).get((i, j), f"{v:.6f}") for j, v in enumerate(row)])
    return buffer.getvalue()


def digest(path) -> str:
    return hashlib.sha256(open(path, "rb").read()).hexdigest()


def assert_one_line_error(code, err, fragment=""):
    assert code == 2, (code, err)
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1, err
    assert "Traceback" not in err
    assert lines[0].startswith("preflight: error:"), lines[0]
    assert fragment.lower() in lines[0].lower(), lines[0]


@pytest.fixture
def data(tmp_path):
    path = tmp_path / "in.csv"
    path.write_text(table_text())
    return path


# ---------------------------------------------------------------- refused cases, one per numbered item

def _files_after(tmp_path):
    return sorted(p.name for p in tmp_path.rglob("*"))


def _setup(case, tmp_path, data):
    """Arguments for one refused case; files it needs are created in tmp_path."""
    d = str(data)
    if case == "1-json-is-input":
        return ["check", d, "--json", d], "refusing to overwrite"
    if case == "1-html-relative-path":
        (tmp_path / "sub").mkdir()
        return ["check", d, "--html", str(tmp_path / "sub" / ".." / "in.csv")], "refusing to overwrite"
    if case == "1-markdown-hard-link":
        os.link(d, tmp_path / "alias.csv")
        return ["check", d, "--markdown", str(tmp_path / "alias.csv")], "refusing to overwrite"
    if case == "1-junit-symlink-to-input":
        os.symlink(d, tmp_path / "link.xml")
        return ["check", d, "--junit", str(tmp_path / "link.xml")], "refusing to overwrite"
    if case == "1-two-outputs-one-file":
        out = str(tmp_path / "r.out")
        return ["check", d, "--json", out, "--markdown", out], "same file"
    if case == "1-graph-file-as-output":
        graph = tmp_path / "g.txt"
        graph.write_text("a -> b\n")
        return ["check", d, "--graph", str(graph), "--json", str(graph)], "refusing to overwrite"
    if case == "2-output-is-a-folder":
        return ["check", d, "--json", str(tmp_path)], "folder"
    if case == "6-stray-token-with-missing-error":
        data.write_text(table_text(cells={(5, 1): "-"}))
        return ["check", d, "--missing", "error"], "missing"
    if case == "7-fail-on-typo":
        return ["check", d, "--fail-on", "gausian-noise"], "gausian-noise"
    if case == "7-empty-graph":
        (tmp_path / "g.txt").write_text("")
        return ["check", d, "--graph", str(tmp_path / "g.txt")], "no edge"
    if case == "7-comments-only-graph":
        (tmp_path / "g.txt").write_text("# a -> b\n\n   \n# nothing\n")
        return ["check", d, "--graph", str(tmp_path / "g.txt")], "no edge"
    if case == "7-header-only-csv-graph":
        (tmp_path / "g.csv").write_text("source,target\n")
        return ["check", d, "--graph", str(tmp_path / "g.csv")], "no edge"
    if case == "11-negative-seed":
        return ["check", d, "--seed", "-1"], "seed"
    if case == "11-negative-seed-in-policy-file":
        (tmp_path / "p.toml").write_text("seed = -5\n")
        return ["check", d, "--policy", str(tmp_path / "p.toml")], "seed"
    if case == "12-folder-missing":
        missing_folder = str(tmp_path / "no" / "x.html")
        return ["check", d, "--json", str(tmp_path / "r.json"), "--html", missing_folder], "does not exist"
    if case == "12-parent-is-a-file":
        return ["check", d, "--json", str(tmp_path / "r.json"), "--html", str(data / "x.html")], "not a folder"
    if case == "13-report-missing-key":
        report = _saved_report(tmp_path, data)
        del report["conclusion"]["level"]
        (tmp_path / "bad.json").write_text(json.dumps(report))
        return ["report", str(tmp_path / "bad.json"), "--html", str(tmp_path / "r.html")], "conclusion: 'level'"
    if case == "13-report-markup-in-number":
        markup = "<script>alert(1)</script>"
        return _changed_report(tmp_path, data, ["variables", 0, "checks", 0, "n"], markup), "variables[0].checks[0].n"
    if case == "13-report-not-an-object":
        (tmp_path / "bad.json").write_text("[1, 2]")
        return ["report", str(tmp_path / "bad.json"), "--markdown", str(tmp_path / "r.md")], "not a preflight report"
    if case == "13-report-pair-names-an-unknown-column":
        return _changed_report(tmp_path, data, ["pairs", 0, "x"], "kiln"), "pairs[0].x: 'kiln'"
    if case == "13-report-repeated-column":
        return _changed_report(tmp_path, data, ["input", "columns"], ["a", "a", "b"]), "more than once"
    if case == "13-report-conditioning-not-names":
        return _changed_report(tmp_path, data, ["pairs", 0, "conditioning"], [1]), "pairs[0].conditioning"
    if case == "13-report-order-repeats-a-column":
        return _changed_report(tmp_path, data, ["structure", "order"], ["a", "a", "c"]), "structure.order"
    if case == "13-report-nested-too-deeply":
        (tmp_path / "bad.json").write_text("[" * 100_000 + "]" * 100_000)
        return ["compare", str(tmp_path / "bad.json"), str(tmp_path / "bad.json")], "nested too deeply"
    if case == "14-binary-policy":
        (tmp_path / "p.toml").write_bytes(bytes(range(256)) * 4)
        return ["check", d, "--policy", str(tmp_path / "p.toml")], "policy file"
    if case == "14-empty-parquet":
        import pandas as pd

        pd.DataFrame({"a": np.array([], float), "b": np.array([], float)}).to_parquet(tmp_path / "e.parquet")
        return ["check", str(tmp_path / "e.parquet"), "--json", str(tmp_path / "r.json")], "no data rows"
    if case == "17-empty-json-path":
        return ["check", d, "--json", ""], "--json"
    if case == "17-two-outputs-to-stdout":
        return ["check", d, "--json", "-", "--markdown", "-"], "standard output"
    if case == "19-two-rows":
        data.write_text("a,b\n1,2\n3,5\n")
        return ["check", d], "in.csv has only 2 usable"
    if case == "19-duplicate-parquet-names":
        import pyarrow as pa
        import pyarrow.parquet as pq

        pq.write_table(pa.table([pa.array([1.0, 2.0]), pa.array([3.0, 4.0])], names=["a", "a"]),
                       tmp_path / "dup.parquet")
        return ["check", str(tmp_path / "dup.parquet")], "column name 'a' appears more than once"
    if case == "19-large-alpha":
        return ["check", d, "--alpha", "0.6"], "alpha"
    if case == "19-semicolons":
        data.write_text(table_text().replace(",", ";"))
        return ["check", d], "--sep ';'"
    if case == "19-semicolons-decimal-commas":
        data.write_text(table_text().replace(",", ";").replace(".", ","))
        return ["check", d], "--sep ';'"
    if case == "19-commas-in-a-tsv":
        tsv = tmp_path / "table.tsv"
        tsv.write_text(table_text())
        return ["check", str(tsv)], "--sep ','"
    raise AssertionError(case)


REFUSED = ["1-json-is-input", "1-html-relative-path", "1-markdown-hard-link", "1-junit-symlink-to-input",
           "1-two-outputs-one-file", "1-graph-file-as-output", "2-output-is-a-folder",
           "6-stray-token-with-missing-error", "7-fail-on-typo", "7-empty-graph", "7-comments-only-graph",
           "7-header-only-csv-graph", "11-negative-seed", "11-negative-seed-in-policy-file", "12-folder-missing",
           "12-parent-is-a-file", "13-report-missing-key", "13-report-markup-in-number",
           "13-report-not-an-object", "13-report-pair-names-an-unknown-column", "13-report-repeated-column",
           "13-report-nested-too-deeply", "13-report-conditioning-not-names", "13-report-order-repeats-a-column",
           "14-binary-policy", "14-empty-parquet", "17-empty-json-path",
           "17-two-outputs-to-stdout", "19-two-rows", "19-duplicate-parquet-names", "19-large-alpha",
           "19-semicolons", "19-semicolons-decimal-commas", "19-commas-in-a-tsv"]


def _changed_report(tmp_path, data, where: list, value) -> list[str]:
    """Arguments of ``preflight report`` on a saved report whose entry at ``where`` was set to ``value``."""
    report = _saved_report(tmp_path, data)
    target = report
    for key in where[:-1]:
        target = target[key]
    target[where[-1]] = value
    (tmp_path / "bad.json").write_text(json.dumps(report))
    return ["report", str(tmp_path / "bad.json"), "--html", str(tmp_path / "r.html")]


def _saved_report(tmp_path, data) -> dict:
    code, _, err = run_main("check", data, "--json", tmp_path / "saved.json", "--jobs", "1", "-q")
    assert code in (0, 1), err
    report = json.loads((tmp_path / "saved.json").read_text())
    (tmp_path / "saved.json").unlink()
    return report


@pytest.mark.parametrize("case", REFUSED)
def test_refused_case_exits_2_with_one_line_and_writes_nothing(tmp_path, data, case):
    args, fragment = _setup(case, tmp_path, data)
    inputs = {p: digest(p) for p in tmp_path.rglob("*") if p.is_file() and not p.is_symlink()}
    before = _files_after(tmp_path)
    code, out, err = run_main(*args)
    assert_one_line_error(code, err, fragment)
    assert out == ""
    assert _files_after(tmp_path) == before, "no report and no temporary file may be left behind"
    assert {p: digest(p) for p in inputs} == inputs, "the input files must be unchanged"


# ---------------------------------------------------------------- cases that must work

def test_stray_tokens_are_missing_values_counted_and_said_on_stderr(tmp_path, data):
    data.write_text(table_text(cells={(5, 1): "-", (9, 1): "0x1F"}))
    before = digest(data)
    code, _, err = run_main("check", data, "--json", tmp_path / "r.json", "--jobs", "1")
    assert code in (0, 1), err
    report = json.loads((tmp_path / "r.json").read_text())
    validate_report(report)
    assert report["input"]["columns"] == ["a", "b", "c"], "the column with stray tokens must not be dropped"
    assert report["input"]["rows_used"] == ROWS - 2
    assert any("'b': 2 cell(s) that are not numbers" in w for w in report["input"]["warnings"])
    warned = [line for line in err.splitlines() if line.startswith("preflight: warning:")]
    assert any("'b'" in line and "not numbers" in line for line in warned), err
    assert digest(data) == before
    code, _, err = run_main("check", data, "--jobs", "1", "--quiet")
    assert "warning" not in err


def test_mostly_text_column_is_skipped_and_said_on_stderr(tmp_path, data):
    cells = {(i, 2): "east" if i % 2 else "west" for i in range(ROWS)}
    data.write_text(table_text(cells=cells))
    code, _, err = run_main("check", data, "--json", tmp_path / "r.json", "--jobs", "1")
    assert code in (0, 1), err
    assert json.loads((tmp_path / "r.json").read_text())["input"]["columns"] == ["a", "b"]
    assert "preflight: warning: skipped non-numeric column 'c'" in err


def test_dataframe_number_columns_of_any_dtype_are_analysed():
    from decimal import Decimal

    import pandas as pd

    import preflight

    rng = np.random.default_rng(3)
    a = rng.uniform(size=ROWS)
    b = a + rng.uniform(size=ROWS)
    c = b + rng.uniform(size=ROWS)
    d = c + rng.uniform(size=ROWS)
    frame = pd.DataFrame({
        "floats-as-objects": pd.Series(list(a), dtype=object),
        "decimals": pd.Series([Decimal(f"{v:.9f}") for v in b], dtype=object),
        "categorical": pd.Series(pd.Categorical(np.round(c, 9))),
        "nullable": pd.Series(d, dtype="Float64"),
    })
    report = preflight.check(frame, jobs=1, keep_samples=False)
    assert report.data["input"]["columns"] == list(frame.columns)
    assert report.data["input"]["warnings"] == []


def test_dollar_signs_and_backslashes_in_names_render_in_html(tmp_path):
    names = ("price ($)", "cost $x^2$", r"\frac{a}{b} $")
    path = tmp_path / "in.csv"
    path.write_text(table_text(names=names))
    code, _, err = run_main("check", path, "--html", tmp_path / "r.html", "--jobs", "1", "-q")
    assert code in (0, 1), err
    page = (tmp_path / "r.html").read_text()
    assert "price ($)" in page and "cost $x^2$" in page


def test_very_long_names_are_cut_in_plots(tmp_path):
    import time

    from preflight.report.plots import LABEL_MAX_CHARS, _label

    long = "k" * 10_000
    path = tmp_path / "in.csv"
    path.write_text(table_text(names=(long, long + "2", "c")))
    start = time.perf_counter()
    code, _, err = run_main("check", path, "--html", tmp_path / "r.html", "--markdown", tmp_path / "r.md",
                            "--jobs", "1", "-q")
    assert code in (0, 1), err
    assert time.perf_counter() - start < 60
    assert len(_label(long)) == LABEL_MAX_CHARS and _label(long).endswith("\u2026")
    assert long in (tmp_path / "r.md").read_text(), "reports keep the full name; only plots cut it"


def test_seeds_outside_32_bits_are_accepted_and_smaller_seeds_unchanged(tmp_path, data):
    from preflight.seeds import SEED_LIMIT, working_seed

    for seed in (0, 1, 20261202, SEED_LIMIT - 1):
        assert working_seed(seed) == seed
    assert 0 <= working_seed(SEED_LIMIT) < SEED_LIMIT
    assert working_seed(SEED_LIMIT) != working_seed(10**40)
    for seed in (SEED_LIMIT, 10**40):
        code, _, err = run_main("check", data, "--seed", seed, "--json", tmp_path / "r.json", "--jobs", "1", "-q")
        assert code in (0, 1), err
        assert json.loads((tmp_path / "r.json").read_text())["settings"]["seed"] == seed


def test_api_refuses_a_negative_seed_with_its_own_message():
    import pandas as pd

    import preflight
    from preflight.errors import InputError

    frame = pd.read_csv(io.StringIO(table_text()))
    with pytest.raises(InputError, match="seed must be a whole number of 0 or more"):
        preflight.check(frame, seed=-1)
    with pytest.raises(ValueError, match="seed"):
        preflight.check(frame, seed=-(2**40), jobs=1)


def test_a_bad_graph_fails_before_any_computation(tmp_path, data, monkeypatch):
    from preflight import pipeline

    def refuse(*args, **kwargs):
        raise AssertionError("the analysis must not start")

    monkeypatch.setattr(pipeline, "run", refuse)
    (tmp_path / "g.txt").write_text("a -> nowhere\n")
    code, _, err = run_main("check", data, "--graph", tmp_path / "g.txt")
    assert_one_line_error(code, err, "nowhere")


def test_a_bad_graph_exits_2_before_screening(tmp_path, data, monkeypatch):
    """The graph file is read with the table: a bad one stops the run before the first stage, in the CLI and the API."""
    import preflight
    from preflight import screen
    from preflight.errors import InputError

    class Screened(Exception):
        pass

    def screening(*args, **kwargs):
        raise Screened

    monkeypatch.setattr(screen, "screen_variables", screening)
    cyclic = tmp_path / "cyclic.txt"
    cyclic.write_text("a -> b\nb -> c\nc -> a\n")
    code, _, err = run_main("check", data, "--graph", cyclic, "--jobs", "1")
    assert_one_line_error(code, err, "graph file")
    assert "has a cycle: a -> b -> c -> a" in err
    with pytest.raises(InputError, match="unknown variable 'd'"):
        (tmp_path / "unknown.csv").write_text("source,target\na,d\n")
        preflight.check(data, graph=str(tmp_path / "unknown.csv"), jobs=1)
    # A good graph gets past the check and into screening, where the stub stops it.
    good = tmp_path / "good.txt"
    good.write_text("a -> b\nb -> c\n")
    with pytest.raises(Screened):
        preflight.check(data, graph=str(good), jobs=1)


def test_a_graph_file_is_read_once(tmp_path, data, monkeypatch):
    import preflight
    from preflight import api
    from preflight import io as preflight_io

    calls = []

    def counting(path, names, **options):
        calls.append(path)
        return preflight_io.read_graph(path, names, **options)

    monkeypatch.setattr(api, "read_graph", counting)
    good = tmp_path / "good.txt"
    good.write_text("# the chain, columns named out of order\nb -> c\na -> b\n")
    report = preflight.check(data, graph=str(good), jobs=1, keep_samples=False)
    assert len(calls) == 1
    assert report.data["structure"]["adjacency"] == "hypothesised graph from good.txt"
    given = preflight_io.read_graph(good, ["c", "a", "b"])
    assert given.edges == (("b", "c"), ("a", "b")) and given.name == "good.txt"
    assert given.matrix(["c", "a", "b"]).tolist() == [[0, 0, 0], [0, 0, 1], [1, 0, 0]]
    assert given.matrix(["a", "b", "c"]).tolist() == [[0, 1, 0], [0, 0, 1], [0, 0, 0]]


def test_fail_on_accepts_every_documented_flag(data):
    from preflight.policy import FLAGS
    from preflight.report.text import FLAG_MEANING

    assert set(FLAGS) == set(FLAG_MEANING), "the vocabulary and the terminal's explanations must agree"
    from preflight.policy import Policy

    assert Policy(fail_on=FLAGS).fail_on == FLAGS


# ---------------------------------------------------------------- outputs: atomic, all or none

def test_symlinked_output_replaces_its_target_and_keeps_the_link(tmp_path, data):
    target = tmp_path / "target.json"
    target.write_text("old\n")
    link = tmp_path / "link.json"
    link.symlink_to(target)
    code, _, err = run_main("check", data, "--json", link, "--jobs", "1", "-q")
    assert code in (0, 1), err
    assert link.is_symlink() and os.readlink(link) == str(target)
    validate_report(json.loads(target.read_text()))


def test_reports_respect_the_umask(tmp_path, data):
    old = os.umask(0o027)
    try:
        code, _, err = run_main("check", data, "--json", tmp_path / "r.json", "--jobs", "1", "-q")
    finally:
        os.umask(old)
    assert code in (0, 1), err
    assert stat.S_IMODE(os.stat(tmp_path / "r.json").st_mode) == 0o640


def test_json_to_standard_output_moves_the_summary_to_stderr(tmp_path, data):
    code, out, err = run_main("check", data, "--json", "-", "--jobs", "1")
    assert code in (0, 1), err
    validate_report(json.loads(out))
    assert err.startswith(("PASS", "FAIL"))


def test_a_failure_while_writing_leaves_no_new_file(tmp_path, monkeypatch):
    from preflight import outputs
    from preflight.errors import InputError

    (tmp_path / "kept.md").write_text("earlier report\n")
    targets = outputs.plan_outputs([("--json", str(tmp_path / "r.json")), ("--markdown", str(tmp_path / "kept.md")),
                                    ("--html", str(tmp_path / "r.html"))])
    real_replace = os.replace
    calls = []

    def failing_replace(src, dst):
        calls.append(dst)
        if len(calls) == 3:
            raise OSError(28, "No space left on device")
        real_replace(src, dst)

    monkeypatch.setattr(outputs.os, "replace", failing_replace)
    with pytest.raises(InputError, match="no report was written"):
        outputs.write_outputs([(t, f"text of {t.option}\n") for t in targets])
    assert sorted(p.name for p in tmp_path.iterdir()) == ["kept.md"]


def test_unwritable_folder_is_refused_before_the_analysis(tmp_path, data):
    if os.geteuid() == 0:
        pytest.skip("root writes into read-only folders")
    folder = tmp_path / "ro"
    folder.mkdir()
    folder.chmod(0o555)
    try:
        code, _, err = run_main("check", data, "--json", tmp_path / "ok.json", "--html", folder / "x.html")
    finally:
        folder.chmod(0o755)
    assert_one_line_error(code, err, "not writable")
    assert not (tmp_path / "ok.json").exists()


def _run_process(command: str, **kwargs):
    env = dict(os.environ, PYTHONPATH=ROOT + os.pathsep + os.environ.get("PYTHONPATH", ""))
    return subprocess.run(command, shell=True, capture_output=True, text=True, env=env, timeout=120, **kwargs)


def test_devices_are_written_as_streams_and_closed_stdin_is_refused(tmp_path, data):
    python = f"{sys.executable} -m preflight"
    proc = _run_process(f"{python} check {data} --jobs 1 -q --json /dev/null --junit /dev/stdout")
    assert proc.returncode in (0, 1), proc.stderr
    assert proc.stdout.lstrip().startswith("<?xml"), proc.stdout[:200]
    assert stat.S_ISCHR(os.stat("/dev/null").st_mode)
    proc = _run_process(f"{python} check - <&-")
    assert_one_line_error(proc.returncode, proc.stderr, "standard input is closed")


# ---------------------------------------------------------------- names that are not plain text

def test_newline_and_carriage_return_inside_a_quoted_header(tmp_path):
    path = tmp_path / "in.csv"
    path.write_text(table_text(names=("a\nfirst", "b\rsecond", "c")), newline="")
    code, out, err = run_main("check", path, "--json", tmp_path / "r.json", "--markdown", tmp_path / "r.md",
                              "--jobs", "1")
    assert code in (0, 1), err
    report = json.loads((tmp_path / "r.json").read_text())
    assert report["input"]["columns"] == ["a\nfirst", "b\rsecond", "c"], "the JSON keeps names literally"
    assert "\r" not in out and "a\nfirst" not in out
    markdown = (tmp_path / "r.md").read_text()
    for line in markdown.splitlines():
        if line.startswith("| "):
            assert line.endswith("|"), line


def test_control_characters_in_names_are_escaped_on_the_terminal(tmp_path):
    path = tmp_path / "in.csv"
    path.write_text(table_text(names=("a\x1b[31m", "b\tx", "c")))
    code, out, err = run_main("check", path, "--jobs", "1", "--require", "none")
    assert code == 0, err
    assert "\x1b" not in out and "\t" not in out
    adjacent = "\\x1b[31m" in out or "b\\tx" in out
    assert adjacent, out


def test_renderers_escape_markup_in_fields_of_any_type(tmp_path, data):
    from preflight.report.html import render_html
    from preflight.report.junit import render_junit
    from preflight.report.markdown import render_markdown
    from preflight.report.model import Report

    report = _saved_report(tmp_path, data)
    markup = "<script>alert(1)</script>"
    check = report["variables"][0]["checks"][0]
    for key in ("n", "statistic", "effect", "p_value", "p_adjusted"):
        check[key] = markup
    report["input"]["rows"] = markup
    page = render_html(Report.from_dict(report))
    assert "<script>alert" not in page
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in page
    import re

    assert not re.search(r"(?<!\\)<script", render_markdown(Report.from_dict(report)))
    assert "<script>alert" not in render_junit(report)


def test_a_column_that_is_an_exact_multiple_of_another_gets_a_report(tmp_path):
    """b = 2a with one non-zero row in ten: b's equation on a fits exactly, leaving no noise to test.

    The residual is zero to the last bit, which used to reach the normality
    checks and exit 2 with "x is constant", a message about no column of the table.
    """
    rows = 10
    a = np.zeros(rows)
    a[0] = 1.0
    lines = ["a,b,c"] + [f"{v:g},{2 * v:g},{i}" for i, v in enumerate(a)]
    path = tmp_path / "in.csv"
    path.write_text("\n".join(lines) + "\n")
    code, _, err = run_main("check", path, "--min-rows", "10", "--json", tmp_path / "r.json", "--jobs", "1", "-q")
    assert code in (0, 1), err
    report = json.loads((tmp_path / "r.json").read_text())
    validate_report(report)
    equation = [c for v in report["variables"] for c in v["checks"] if "(equation: b on a)" in c["name"]]
    assert equation and all(c["p_value"] is None and "exact linear relation" in c["note"] for c in equation)


def test_a_column_that_is_an_exact_function_of_a_two_valued_one_gets_a_report(tmp_path):
    """c = 10 b - 2, b two-valued: c's structural noise estimate is zero to the last bit.

    It used to reach the noise-shape checks and exit 2 with "x is constant".
    """
    a = np.random.default_rng(30).uniform(size=30)
    b = (a > np.median(a)).astype(float)
    c = 10.0 * b - 2
    path = tmp_path / "in.csv"
    rows = zip(a.tolist(), b.tolist(), c.tolist())
    path.write_text("a,b,c\n" + "".join(f"{x!r},{y!r},{z!r}\n" for x, y, z in rows))
    code, _, err = run_main("check", path, "--json", tmp_path / "r.json", "--jobs", "1", "-q")
    assert code in (0, 1), err
    report = json.loads((tmp_path / "r.json").read_text())
    validate_report(report)
    (c_entry,) = [v for v in report["variables"] if v["name"] == "c"]
    noise = [check for check in c_entry["checks"] if "(noise of c)" in check["name"]]
    assert noise and all(check["p_value"] is None and "exact linear relation" in check["note"] for check in noise)


def test_a_graph_with_more_parents_than_white_can_take_gets_a_report(tmp_path):
    """Seven parents at 30 rows: White's auxiliary regression on 35 columns cannot run, the rest of the equation can.

    It used to exit 2 with "the auxiliary regression on 35 columns needs at
    least 37 observations", which names nothing the user gave.
    """
    rng = np.random.default_rng(3)
    X = rng.uniform(size=(30, 8))
    X[:, 0] = X[:, 1:].sum(axis=1) + rng.uniform(size=30)
    path = tmp_path / "in.csv"
    path.write_text("v0,v1,v2,v3,v4,v5,v6,v7\n" + "".join(",".join(f"{v:.6f}" for v in row) + "\n" for row in X))
    graph = tmp_path / "g.txt"
    graph.write_text("".join(f"v{j} -> v0\n" for j in range(1, 8)))
    code, _, err = run_main("check", path, "--graph", graph, "--json", tmp_path / "r.json", "--jobs", "1", "-q")
    assert code in (0, 1), err
    report = json.loads((tmp_path / "r.json").read_text())
    validate_report(report)
    checks = {c["name"].split(" (equation")[0]: c
              for c in report["variables"][0]["checks"] if "(equation: v0" in c["name"]}
    assert checks["white"]["p_value"] is None and "needs at least 37 rows" in checks["white"]["note"]
    assert checks["breusch-pagan"]["p_value"] is not None


@pytest.mark.parametrize("parents", [28, 29])
def test_a_graph_with_nearly_as_many_parents_as_rows_gets_a_report(tmp_path, parents):
    """28 parents at 30 rows leave too few rows for White's test and the edge tests ("28 regressors need at least
    36 rows"), 29 for the equation itself ("column 0 has 29 parents and only 30 rows"): each exited 2 naming no
    column of the table."""
    X = np.random.default_rng(3).uniform(size=(30, 30))
    path = tmp_path / "in.csv"
    path.write_text(",".join(f"v{j}" for j in range(30)) + "\n"
                    + "".join(",".join(f"{v:.6f}" for v in row) + "\n" for row in X))
    graph = tmp_path / "g.txt"
    graph.write_text("".join(f"v{j} -> v0\n" for j in range(1, parents + 1)))
    code, _, err = run_main("check", path, "--graph", graph, "--json", tmp_path / "r.json", "--jobs", "1", "-q")
    assert code in (0, 1), err
    report = json.loads((tmp_path / "r.json").read_text())
    validate_report(report)
    equation = [c for c in report["variables"][0]["checks"] if "(equation: v0" in c["name"]]
    assert equation and all(c["p_value"] is None and c["note"].startswith("not computed") for c in equation) == (
        parents == 29)


def test_a_policy_file_saved_with_a_byte_order_mark_is_read(tmp_path, data):
    """Editors on Windows save UTF-8 with a byte order mark; it used to read as 'not valid TOML' at line 1, column 1.
    Tables and graph files accept the mark already."""
    policy = tmp_path / "p.toml"
    policy.write_bytes(b"\xef\xbb\xbfalpha = 0.01\n")
    code, _, err = run_main("check", data, "--policy", policy, "--json", tmp_path / "r.json", "--jobs", "1", "-q")
    assert code in (0, 1), err
    assert json.loads((tmp_path / "r.json").read_text())["settings"]["alpha"] == 0.01


def test_one_value_near_the_float_limit_raises_no_numpy_warning(tmp_path, data):
    """One cell of 1e308 among values near 1: its robust z is beyond the float range, an outlier all the same.

    The division used to print numpy's "RuntimeWarning: overflow" and a line of source code on stderr.
    """
    import warnings

    data.write_text(table_text(cells={(5, 1): "1e308"}))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        code, _, err = run_main("check", data, "--json", tmp_path / "r.json", "--jobs", "1", "-q")
    assert code in (0, 1), err
    report = json.loads((tmp_path / "r.json").read_text())
    assert "outliers" in report["variables"][1]["flags"]


def test_two_values_at_the_float_limit_leave_the_hsic_a_usable_bandwidth(tmp_path, data):
    """+1e308 and -1e308 among values near 1: standardised, the other values differ by about 1e-308, so the
    median distance that sets the HSIC bandwidth squared to 0 and the run stopped with exit 3
    (ZeroDivisionError)."""
    data.write_text(table_text(cells={(3, 0): "1e308", (4, 0): "-1e308"}))
    code, _, err = run_main("check", data, "--json", tmp_path / "r.json", "--jobs", "1", "-q")
    assert code in (0, 1), err
    validate_report(json.loads((tmp_path / "r.json").read_text()))
