"""The pre-commit hook in .pre-commit-hooks.yaml: its entry, run as pre-commit runs it, gates on the worst file."""

import os
import shlex
import shutil
import subprocess
import sys

import numpy as np
import pytest

from conftest import ROOT, write_csv

yaml = pytest.importorskip("yaml")
pytestmark = pytest.mark.skipif(shutil.which("bash") is None, reason="the hook's entry runs in bash")


def _hook() -> dict:
    with open(os.path.join(ROOT, ".pre-commit-hooks.yaml")) as handle:
        hooks = yaml.safe_load(handle)
    (hook,) = [h for h in hooks if h["id"] == "preflight-check"]
    return hook


def _run_hook(tmp_path, *args):
    """pre-commit's way: the entry split like a shell line, then the hook's args, then the file names."""
    shim = tmp_path / "bin" / "preflight"
    shim.parent.mkdir(exist_ok=True)
    shim.write_text(f'#!/bin/sh\nexec "{sys.executable}" -m preflight "$@"\n')
    shim.chmod(0o755)
    env = dict(os.environ, PATH=f"{shim.parent}{os.pathsep}{os.environ['PATH']}",
               PYTHONPATH=ROOT + os.pathsep + os.environ.get("PYTHONPATH", ""))
    proc = subprocess.run(shlex.split(_hook()["entry"]) + list(args), capture_output=True, text=True,
                          cwd=tmp_path, env=env, timeout=300)
    return proc.returncode, proc.stdout, proc.stderr


def test_hook_definition_selects_data_files():
    import re

    hook = _hook()
    assert hook["language"] == "python" and hook["require_serial"] is True
    pattern = re.compile(hook["files"])
    for name in ("data/batch.csv", "a.tsv", "b.tab", "c.parquet", "d.pq"):
        assert pattern.search(name)
    for name in ("notes.txt", "report.json", "csv/readme.md"):
        assert not pattern.search(name)


def test_hook_exits_with_the_worst_code_and_passes_options_on(tmp_path):
    rng = np.random.default_rng(3)
    x = rng.uniform(-1, 1, 1000)  # see conftest.linear_uniform_csv for why not fewer rows
    good = write_csv(tmp_path / "uniform.csv", {"x": x, "y": 0.8 * x + 0.6 * rng.uniform(-1, 1, 1000)})
    g = rng.normal(size=400)
    gaussian = write_csv(tmp_path / "gaussian.csv", {"x": g, "y": 0.7 * g + 0.7 * rng.normal(size=400)})

    code, out, _ = _run_hook(tmp_path, "uniform.csv", "gaussian.csv")
    assert code == 1  # the Gaussian pair supports only the equivalence class
    assert out.count("== ") == 2 and "== uniform.csv" in out and "== gaussian.csv" in out
    assert "PASS [linear-non-gaussian]" in out and "[equivalence-class]" in out

    # Options in args reach every file; a value is never taken for a file name.
    code, out, _ = _run_hook(tmp_path, "--require", "equivalence-class", "gaussian.csv")
    assert code == 0 and out.count("== ") == 1

    (tmp_path / "empty.csv").write_text("")
    code, out, err = _run_hook(tmp_path, "empty.csv", good, gaussian)
    assert code == 2 and "empty" in err and out.count("== ") == 3
