"""Bad input: exit 2, one clear line on stderr, no traceback, input untouched (issue: foundation)."""

import hashlib

import numpy as np
import pytest

import preflight

from conftest import run_cli


def _one_line_error(code, out, err, fragment):
    assert code == 2, (code, out, err)
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1, err
    assert "Traceback" not in err
    assert lines[0].startswith("preflight: error:")
    assert fragment.lower() in lines[0].lower(), lines[0]


def _write(tmp_path, name, content: bytes):
    path = tmp_path / name
    path.write_bytes(content)
    return str(path)


GOOD_ROWS = "".join(f"{i * 0.37 % 1:.3f},{(i * 0.71) % 1:.3f}\n" for i in range(50))

CASES = [
    ("missing-file", None, "not found"),
    ("empty.csv", b"", "empty"),
    ("blank.csv", b"\n\n  \n", "empty"),
    ("header-only.csv", b"a,b,c\n", "no data rows"),
    ("one-column.csv", b"a\n" + b"1\n2\n3\n", "at least 2 numeric columns"),
    ("text-only.csv", b"a,b\nx,y\nz,w\n", "at least 2 numeric columns"),
    ("duplicate.csv", b"a,b,a\n1,2,3\n4,5,6\n", "more than once"),
    ("ragged-long.csv", ("a,b\n" + GOOD_ROWS + "1,2,3\n").encode(), "ragged"),
    ("ragged-short.csv", (b"a,b,c\n1,2,3\n4,5\n"), "ragged"),
    ("inf.csv", ("a,b\n" + GOOD_ROWS + "inf,2\n").encode(), "infinite"),
    ("garbage.csv", bytes(range(256)) * 8, "binary"),
    ("latin1.csv", "a,b\n1,2\n\xe9,3\n".encode("latin-1"), "utf-8"),
    ("empty-name.csv", b"a,,c\n1,2,3\n", "empty column name"),
]


@pytest.mark.parametrize("name,content,fragment", CASES, ids=[c[0] for c in CASES])
def test_bad_input_exits_2_with_one_line(tmp_path, name, content, fragment):
    path = str(tmp_path / "does-not-exist.csv") if content is None else _write(tmp_path, name, content)
    before = hashlib.sha256(open(path, "rb").read()).hexdigest() if content is not None else None
    code, out, err = run_cli("check", path, "--json", str(tmp_path / "r.json"))
    _one_line_error(code, out, err, fragment)
    assert not (tmp_path / "r.json").exists(), "no report may be written on bad input"
    if before is not None:
        assert hashlib.sha256(open(path, "rb").read()).hexdigest() == before


def test_asked_text_column_is_an_error(tmp_path):
    path = _write(tmp_path, "t.csv", b"a,b,kiln\n1,2,east\n3,4,west\n")
    code, out, err = run_cli("check", path, "--columns", "a,b,kiln")
    _one_line_error(code, out, err, "not numeric")


def test_unknown_column_is_an_error(tmp_path, linear_uniform_csv):
    code, out, err = run_cli("check", linear_uniform_csv, "--columns", "x,nope")
    _one_line_error(code, out, err, "nope")
    code, out, err = run_cli("check", linear_uniform_csv, "--exclude", "nope")
    _one_line_error(code, out, err, "nope")


def test_folder_is_an_error(tmp_path):
    code, out, err = run_cli("check", str(tmp_path))
    _one_line_error(code, out, err, "folder")


def test_missing_error_mode_refuses(tmp_path):
    rng = np.random.default_rng(0)
    lines = ["a,b"] + [f"{v:.4f},{w:.4f}" for v, w in rng.uniform(size=(60, 2))] + ["1.0,"]
    path = _write(tmp_path, "m.csv", ("\n".join(lines) + "\n").encode())
    code, out, err = run_cli("check", path, "--missing", "error")
    _one_line_error(code, out, err, "missing")


def test_bad_option_value_is_one_line(linear_uniform_csv):
    code, out, err = run_cli("check", linear_uniform_csv, "--require", "everything")
    _one_line_error(code, out, err, "everything")
    code, out, err = run_cli("check", linear_uniform_csv, "--set", "alpah=0.1")
    _one_line_error(code, out, err, "alpah")
    code, out, err = run_cli("check", linear_uniform_csv, "--alpha", "1.5")
    _one_line_error(code, out, err, "alpha")


def test_unknown_policy_key_in_file(tmp_path, linear_uniform_csv):
    policy = tmp_path / "p.toml"
    policy.write_text("alpha = 0.01\nsignificance = 0.2\n")
    code, out, err = run_cli("check", linear_uniform_csv, "--policy", str(policy))
    _one_line_error(code, out, err, "significance")


def test_unwritable_report_folder(tmp_path, linear_uniform_csv):
    code, out, err = run_cli("check", linear_uniform_csv, "--json", str(tmp_path / "no" / "such" / "r.json"))
    _one_line_error(code, out, err, "does not exist")


@pytest.mark.parametrize("data", [{"a": [1.0, 2.0], "b": [3.0, 4.0]}, [[1.0, 2.0]], 3.5, None])
def test_data_that_is_neither_a_path_nor_a_dataframe_is_refused_in_one_sentence(data):
    from preflight.errors import InputError

    with pytest.raises(InputError, match="file path, '-' for standard input, or a pandas DataFrame") as caught:
        preflight.check(data)
    assert "\n" not in str(caught.value)
    assert ("pandas.DataFrame(data)" in str(caught.value)) == isinstance(data, dict)


def test_api_settings_errors_name_the_arguments_not_the_command_line(linear_uniform_csv):
    from preflight.errors import InputError

    with pytest.raises(InputError, match=r"unknown policy key 'signficance' in the arguments of check\(\)"):
        preflight.check(linear_uniform_csv, signficance=0.1)
    with pytest.raises(InputError, match=r"'seed' in the arguments of check\(\) needs a whole number"):
        preflight.check(linear_uniform_csv, seed=True)


def test_api_columns_given_as_one_string_are_refused_in_one_sentence(linear_uniform_csv):
    """columns="x,y" used to be read letter by letter: "--columns names ','", a message about no option given."""
    from preflight.errors import InputError

    for key in ("columns", "exclude"):
        with pytest.raises(InputError, match=rf"^{key} must be a list of column names, not the string 'x,y'$"):
            preflight.check(linear_uniform_csv, **{key: "x,y"})


def test_a_pyproject_whose_tool_is_not_a_table_is_no_policy(tmp_path, monkeypatch, linear_uniform_csv):
    """``tool = 5`` in the working folder's pyproject.toml used to stop every run with exit 3 (AttributeError)."""
    from preflight.policy import Policy, build_policy

    monkeypatch.chdir(tmp_path)
    (tmp_path / "pyproject.toml").write_text("tool = 5\n")
    policy, origin = build_policy({})
    assert origin == {} and policy == Policy()


@pytest.mark.parametrize("options, why", [(("--exclude", "c"), "excluded"), (("--columns", "a,b"), "not selected"),
                                          ((), "not numeric")])
def test_a_graph_naming_a_column_the_analysis_leaves_out_says_why(tmp_path, options, why):
    # Before: "unknown variable 'c'; known variables: a, b", about a column the file plainly has.
    rng = np.random.default_rng(0)
    c = [f"{v:.3f}" for v in rng.normal(size=60)] if options else ["low", "high"] * 30
    rows = "".join(f"{a:.3f},{b:.3f},{z}\n" for a, b, z in zip(rng.normal(size=60), rng.normal(size=60), c))
    table = _write(tmp_path, "t.csv", ("a,b,c\n" + rows).encode())
    graph = _write(tmp_path, "g.txt", b"a -> b\nb -> c\n")
    code, out, err = run_cli("check", table, "--graph", graph, *options)
    _one_line_error(code, out, err, f"column 'c' is left out of the analysis ({why})")
    assert "unknown variable" not in err
