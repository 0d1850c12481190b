"""--jobs: never more worker processes than cores available or tasks; 0 means every core; negative is refused."""

from __future__ import annotations

import os
import subprocess
import sys
import time

import numpy as np
import pytest

from conftest import ROOT, run_cli, write_csv


def test_jobs_are_capped_at_the_cores_and_the_tasks(monkeypatch):
    from preflight import pipeline
    from preflight.policy import Policy

    monkeypatch.setattr(pipeline, "cores_available", lambda: 4)
    assert pipeline._jobs(Policy(jobs=1000), n_pairs=45) == 4
    assert pipeline._jobs(Policy(jobs=0), n_pairs=45) == 4
    assert pipeline._jobs(Policy(jobs=3), n_pairs=45) == 3
    assert pipeline._jobs(Policy(jobs=1000), n_pairs=1) == 3  # one pair, the whole-table screens, the noise HSICs
    assert pipeline.jobs_note(Policy(jobs=4)) is None
    assert pipeline.jobs_note(Policy(jobs=0)) is None
    assert pipeline.jobs_note(Policy(jobs=1000)) == "jobs 1000 is more than the 4 cores available; capped at 4"


def test_cli_says_once_that_too_many_jobs_are_capped(tmp_path, linear_uniform_csv):
    from preflight.pipeline import cores_available

    code, out, err = run_cli("check", linear_uniform_csv, "--jobs", "1000")
    assert code in (0, 1)
    cores = cores_available()
    assert err.splitlines() == [f"preflight: note: jobs 1000 is more than the {cores} core"
                                f"{'s' if cores != 1 else ''} available; capped at {cores}"]
    code, out, err = run_cli("check", linear_uniform_csv, "--jobs", "1000", "--quiet")
    assert code in (0, 1) and err == ""
    # A refused input still gets exactly one line.
    code, out, err = run_cli("check", str(tmp_path / "missing.csv"), "--jobs", "1000")
    assert code == 2 and len(err.splitlines()) == 1


@pytest.mark.parametrize("value", ["-1", "-1000"])
def test_negative_jobs_exit_2_with_one_line(linear_uniform_csv, value):
    code, out, err = run_cli("check", linear_uniform_csv, "--jobs", value)
    assert code == 2 and out == ""
    assert len(err.splitlines()) == 1 and "jobs" in err and value in err and "Traceback" not in err


@pytest.mark.skipif(not os.path.isdir("/proc/self/task"), reason="counts processes through /proc")
def test_a_thousand_jobs_start_no_more_workers_than_cores(tmp_path):
    from preflight.pipeline import cores_available

    rng = np.random.default_rng(2)
    n, p = 4000, 12  # 66 pairs x 4,000 rows: the pair battery runs in a pool
    X = np.empty((n, p))
    X[:, 0] = rng.uniform(-1, 1, n)
    for j in range(1, p):
        X[:, j] = 0.7 * X[:, j - 1] + rng.uniform(-1, 1, n)
    path = write_csv(tmp_path / "greenhouse.csv", {f"bed_{j}": X[:, j] for j in range(p)})
    env = dict(os.environ, PYTHONPATH=ROOT + os.pathsep + os.environ.get("PYTHONPATH", ""))
    proc = subprocess.Popen([sys.executable, "-m", "preflight", "check", path, "--jobs", "1000", "-q"],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env, cwd=str(tmp_path))
    most = 0
    seen = 0.0  # when the first worker appeared; read only once `most` is positive
    try:
        # The pool forks all its workers at once, so a second of watching after
        # the first one appears is enough; the rest of the run is not needed.
        deadline = time.monotonic() + 300
        while proc.poll() is None and time.monotonic() < deadline:
            if most:
                deadline = min(deadline, seen + 1.0)
            children = 0
            for entry in os.listdir("/proc"):
                if entry.isdigit():
                    try:
                        with open(f"/proc/{entry}/stat") as handle:
                            fields = handle.read().rsplit(")", 1)[1].split()
                    except OSError:
                        continue
                    children += int(fields[1]) == proc.pid
            if children and not most:
                seen = time.monotonic()
            most = max(most, children)
            time.sleep(0.02)
    finally:
        proc.kill()
        proc.wait(timeout=60)
    if cores_available() < 2:
        assert most == 0  # one core: no pool at all
    else:
        assert 0 < most <= cores_available()
