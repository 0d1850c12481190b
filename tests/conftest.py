import json
import os
import subprocess
import sys

import numpy as np
import pytest

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


def run_cli(*args, stdin: bytes | None = None, cwd: str | None = None, env: dict | None = None):
    """Run the installed CLI as a user would; returns (code, stdout, stderr)."""
    full_env = dict(os.environ)
    full_env.pop("NO_COLOR", None)
    full_env["PYTHONPATH"] = ROOT + os.pathsep + full_env.get("PYTHONPATH", "")
    if env:
        full_env.update(env)
    proc = subprocess.run([sys.executable, "-m", "preflight", *args], input=stdin, capture_output=True,
                          cwd=cwd, env=full_env, timeout=600)
    return proc.returncode, proc.stdout.decode(), proc.stderr.decode()


@pytest.fixture
def cli():
    return run_cli


def write_csv(path, columns: dict, fmt: str = "{:.6f}") -> str:
    names = list(columns)
    block = np.column_stack([np.asarray(columns[c], dtype=float) for c in names])
    with open(path, "w") as handle:
        handle.write(",".join(names) + "\n")
        for row in block:
            handle.write(",".join(fmt.format(v) for v in row) + "\n")
    return str(path)


@pytest.fixture
def linear_uniform_csv(tmp_path):
    # 1,000 rows: below about 1,000 the residual bootstrap inside the equations rejects the causal direction
    # of a uniform pair in about one draw in ten (nominal: one in twenty), and preflight then abstains.
    rng = np.random.default_rng(11)
    x = rng.uniform(-1, 1, 1000)
    y = 0.8 * x + rng.uniform(-1, 1, 1000) * 0.6
    return write_csv(tmp_path / "pair.csv", {"x": x, "y": y})


_SCHEMA = None


def validate_report(data: dict) -> None:
    """Every report the tests produce is checked against the shipped schema."""
    import jsonschema

    from preflight.report.json import schema

    global _SCHEMA
    if _SCHEMA is None:
        _SCHEMA = schema()
    jsonschema.validate(data, _SCHEMA, format_checker=jsonschema.FormatChecker())


@pytest.fixture
def valid_report():
    return validate_report


def load_json(path) -> dict:
    with open(path) as handle:
        return json.load(handle)


def judged_pair(x, y):
    """The findings of one pair (x, y) after the battery and the multiplicity correction, default policy."""
    from preflight.battery import judge_pair, run_pair_battery
    from preflight.evidence import adjust_families
    from preflight.policy import Policy

    policy = Policy()
    battery = run_pair_battery(x, y, "x", "y", None, (), True, policy)
    checks = adjust_families([list(battery.checks)], policy.correction)[0]
    return judge_pair(battery, checks, policy)


def pool_map(func, tasks):
    """Seeded replicates in two worker processes (the CI machine has two cores)."""
    from concurrent.futures import ProcessPoolExecutor

    with ProcessPoolExecutor(max_workers=2) as pool:
        return list(pool.map(func, tasks))
