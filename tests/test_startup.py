"""Start-up: a small table runs in this process with one helper thread, and the result does not change."""

import subprocess
import sys

import numpy as np

from conftest import ROOT, write_csv


def test_small_table_uses_a_helper_thread_and_gives_the_same_report(monkeypatch):
    import preflight
    from preflight import pipeline
    from preflight.scenarios import simulate, to_frame

    made = []
    original = pipeline._helper_thread

    def spy(policy, pool):
        helper = original(policy, pool)
        made.append((policy.jobs, pool is None, helper is not None))
        return helper

    monkeypatch.setattr(pipeline, "_helper_thread", spy)
    frame = to_frame(simulate("linear-non-gaussian", "chain", p=3, n=800, noise="uniform", seed=2))
    alone = preflight.check(frame, seed=6, jobs=1, keep_samples=False).to_dict()
    helped = preflight.check(frame, seed=6, jobs=2, keep_samples=False).to_dict()
    # No worker processes for a table this small; the helper thread only when more than one job is allowed.
    assert made == [(1, True, False), (2, True, True)]
    assert "sklearn.decomposition" in sys.modules
    for report in (alone, helped):
        report.pop("generated_at")
        report["settings"].pop("jobs")
    assert alone == helped
    assert any(pair["checks"] and any(c["name"].startswith("noise dependence") for c in pair["checks"])
               for pair in helped["pairs"])


def test_check_without_a_terminal_never_imports_the_progress_bar(tmp_path):
    rng = np.random.default_rng(1)
    x = rng.uniform(-1, 1, 300)
    data = write_csv(tmp_path / "pair.csv", {"x": x, "y": 0.8 * x + rng.uniform(-1, 1, 300)})
    probe = ("import sys\n"
             f"sys.argv = ['preflight', 'check', {data!r}]\n"
             "from preflight.cli import main\n"
             "try:\n    main()\nexcept SystemExit:\n    pass\n"
             "print('TQDM=' + str('tqdm' in sys.modules))")
    proc = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, cwd=ROOT, timeout=120)
    assert proc.stdout.strip().splitlines()[-1] == "TQDM=False", proc.stdout + proc.stderr
    assert proc.stderr == ""
