"""The CLI as a pipeline uses it: reports, schema, seed, gate, demo."""

import json

import numpy as np
import pytest

from conftest import load_json, run_cli, validate_report, write_csv


def _strip_time(data: dict) -> dict:
    data = dict(data)
    data.pop("generated_at")
    return data


def test_report_validates_and_same_seed_same_report(tmp_path, linear_uniform_csv):
    first, second = tmp_path / "a.json", tmp_path / "b.json"
    code1, _, err1 = run_cli("check", linear_uniform_csv, "--json", str(first), "--seed", "5")
    code2, _, err2 = run_cli("check", linear_uniform_csv, "--json", str(second), "--seed", "5")
    assert code1 in (0, 1) and code2 in (0, 1), (err1, err2)
    a, b = load_json(first), load_json(second)
    validate_report(a)
    assert _strip_time(a) == _strip_time(b)
    assert a["input"]["sha256"] and len(a["input"]["sha256"]) == 64
    assert a["settings"]["seed"] == 5


def test_uniform_pair_is_oriented_and_passes(tmp_path, linear_uniform_csv):
    out = tmp_path / "r.json"
    code, stdout, err = run_cli("check", linear_uniform_csv, "--json", str(out))
    data = load_json(out)
    pair = data["pairs"][0]
    assert pair["orientation"] == "x->y", pair
    assert data["conclusion"]["level"] == "linear-non-gaussian", data["conclusion"]
    assert code == 0 and data["conclusion"]["passed"]
    assert stdout.startswith("PASS [linear-non-gaussian]")


def test_gaussian_pair_gives_equivalence_class_and_gate(tmp_path):
    rng = np.random.default_rng(3)
    x = rng.normal(size=1500)
    y = 0.7 * x + 0.7 * rng.normal(size=1500)
    path = write_csv(tmp_path / "g.csv", {"x": x, "y": y})
    code, _, _ = run_cli("check", path, "--json", str(tmp_path / "r.json"))
    data = load_json(tmp_path / "r.json")
    validate_report(data)
    assert data["conclusion"]["level"] == "equivalence-class"
    assert code == 1
    assert "gaussian-noise" in data["pairs"][0]["flags"]
    assert data["pairs"][0]["orientation"] == "undetermined"
    code, _, _ = run_cli("check", path, "--require", "equivalence-class", "--quiet")
    assert code == 0


def test_few_rows_give_none(tmp_path):
    rng = np.random.default_rng(4)
    x = rng.uniform(size=25)
    path = write_csv(tmp_path / "s.csv", {"x": x, "y": x + rng.uniform(size=25)})
    code, stdout, _ = run_cli("check", path, "--json", str(tmp_path / "r.json"))
    data = load_json(tmp_path / "r.json")
    validate_report(data)
    assert code == 1
    assert data["conclusion"]["level"] == "none"
    assert "too-few-rows" in data["global"]["flags"]
    assert all(p["basis"] is None for p in data["pairs"])


def test_missing_values_are_dropped_and_counted(tmp_path):
    rng = np.random.default_rng(5)
    lines = ["a,b,c"]
    for k in range(400):
        a, b, c = rng.uniform(size=3)
        lines.append(f"{a:.5f},{'' if k % 40 == 0 else f'{b:.5f}'},{c:.5f}")
    path = tmp_path / "m.csv"
    path.write_text("\n".join(lines) + "\n")
    run_cli("check", str(path), "--json", str(tmp_path / "r.json"))
    data = load_json(tmp_path / "r.json")
    validate_report(data)
    assert data["input"]["rows"] == 400 and data["input"]["rows_used"] == 390
    flags = {v["name"]: v["flags"] for v in data["variables"]}
    assert "missing-values" in flags["b"] and "missing-values" not in flags["a"]


def test_discrete_and_constant_columns(tmp_path):
    rng = np.random.default_rng(6)
    n = 500
    path = write_csv(tmp_path / "d.csv", {"count": rng.integers(0, 4, n), "level": rng.uniform(size=n),
                                          "flat": np.full(n, 2.0)})
    code, _, _ = run_cli("check", path, "--json", str(tmp_path / "r.json"))
    data = load_json(tmp_path / "r.json")
    validate_report(data)
    flags = {v["name"]: v["flags"] for v in data["variables"]}
    assert "discrete" in flags["count"]
    assert "constant" in flags["flat"]
    assert data["conclusion"]["level"] == "none"
    assert code == 1


def test_stdin_tsv_and_parquet_agree(tmp_path, linear_uniform_csv):
    import pandas as pd

    frame = pd.read_csv(linear_uniform_csv)
    frame.to_csv(tmp_path / "p.tsv", sep="\t", index=False)
    frame.to_parquet(tmp_path / "p.parquet")
    levels = []
    for source, stdin in ((str(tmp_path / "p.tsv"), None), (str(tmp_path / "p.parquet"), None),
                          ("-", open(linear_uniform_csv, "rb").read())):
        out = tmp_path / "r.json"
        run_cli("check", source, "--json", str(out), stdin=stdin)
        data = load_json(out)
        validate_report(data)
        levels.append((data["conclusion"]["level"], data["pairs"][0]["orientation"]))
    assert len(set(levels)) == 1


def test_text_column_skipped_with_warning(tmp_path):
    rng = np.random.default_rng(8)
    lines = ["a,operator,b"] + [f"{u:.5f},{'east' if u > 0.5 else 'west'},{v:.5f}"
                                for u, v in rng.uniform(size=(300, 2))]
    (tmp_path / "t.csv").write_text("\n".join(lines) + "\n")
    run_cli("check", str(tmp_path / "t.csv"), "--json", str(tmp_path / "r.json"))
    data = load_json(tmp_path / "r.json")
    assert data["input"]["columns"] == ["a", "b"]
    assert any("operator" in w for w in data["input"]["warnings"])


def test_fail_on_flag_fails_the_gate(tmp_path):
    rng = np.random.default_rng(9)
    x = rng.normal(size=800)
    path = write_csv(tmp_path / "g.csv", {"x": x, "y": 0.6 * x + rng.normal(size=800)})
    code, _, _ = run_cli("check", path, "--require", "equivalence-class", "--quiet")
    assert code == 0
    code, out, _ = run_cli("check", path, "--require", "equivalence-class", "--fail-on", "gaussian-noise",
                           "--json", str(tmp_path / "r.json"))
    assert code == 1
    assert any("gaussian-noise" in r for r in load_json(tmp_path / "r.json")["conclusion"]["reasons"])


def test_policy_precedence(tmp_path, linear_uniform_csv):
    (tmp_path / "pyproject.toml").write_text("[tool.preflight]\nalpha = 0.02\nseed = 3\n")
    (tmp_path / "p.toml").write_text("alpha = 0.03\n")
    run_cli("check", linear_uniform_csv, "--json", "r1.json", cwd=str(tmp_path))
    s1 = load_json(tmp_path / "r1.json")["settings"]
    assert s1["alpha"] == 0.02 and s1["seed"] == 3
    run_cli("check", linear_uniform_csv, "--json", "r2.json", "--policy", "p.toml", cwd=str(tmp_path))
    s2 = load_json(tmp_path / "r2.json")["settings"]
    assert s2["alpha"] == 0.03 and s2["seed"] == 3
    run_cli("check", linear_uniform_csv, "--json", "r3.json", "--policy", "p.toml", "--alpha", "0.04",
            cwd=str(tmp_path))
    assert load_json(tmp_path / "r3.json")["settings"]["alpha"] == 0.04


def test_version_schema_rules_policy_commands():
    code, out, _ = run_cli("--version")
    assert code == 0 and out.startswith("preflight ")
    code, out, _ = run_cli("schema")
    assert code == 0 and json.loads(out)["title"].startswith("preflight report")
    code, out, _ = run_cli("rules")
    assert code == 0 and "hidden-common-cause" in out
    code, out, _ = run_cli("policy")
    assert code == 0 and "alpha = 0.05" in out


def test_python_api_matches_cli(tmp_path, linear_uniform_csv):
    import pandas as pd

    import preflight

    report = preflight.check(pd.read_csv(linear_uniform_csv), seed=5)
    run_cli("check", linear_uniform_csv, "--json", str(tmp_path / "r.json"), "--seed", "5")
    cli_data = load_json(tmp_path / "r.json")
    api_data = report.to_dict()
    validate_report(api_data)
    assert api_data["pairs"] == cli_data["pairs"]
    assert api_data["conclusion"] == cli_data["conclusion"]


def test_results_do_not_depend_on_the_number_of_worker_processes():
    # Large enough that the pair battery goes to a process pool with jobs=2
    # (and random-feature HSIC is shared across pairs); the reports must be
    # identical, settings.jobs apart.
    import preflight
    from preflight.scenarios import simulate, to_frame

    frame = to_frame(simulate("linear-non-gaussian", "chain", p=6, n=30000, noise="laplace", seed=3))
    serial = preflight.check(frame, seed=4, jobs=1, keep_samples=False).to_dict()
    pooled = preflight.check(frame, seed=4, jobs=2, keep_samples=False).to_dict()
    for report in (serial, pooled):
        report.pop("generated_at")
        report["settings"].pop("jobs")
    assert serial == pooled


@pytest.mark.parametrize("argument", ["--help", "--version"])
def test_help_and_version_import_no_heavy_module(argument):
    # Start-up stays fast because nothing numerical is imported before a check runs.
    import subprocess
    import sys

    probe = ("import sys\n"
             f"sys.argv = ['preflight', {argument!r}]\n"
             "from preflight.cli import main\n"
             "try:\n    main()\nexcept SystemExit:\n    pass\n"
             "heavy = ('numpy', 'scipy', 'pandas', 'statsmodels', 'sklearn', 'matplotlib', 'pingouin', "
             "'pyarrow', 'tqdm')\n"
             "print('LOADED=' + ','.join(m for m in heavy if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, check=True).stdout
    assert out.strip().splitlines()[-1] == "LOADED=", out
