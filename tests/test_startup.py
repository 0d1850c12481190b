"""Start-up: what a check imports only when it needs it."""

import subprocess
import sys

import numpy as np

from conftest import ROOT, write_csv


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
