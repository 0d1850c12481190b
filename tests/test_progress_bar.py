"""The progress bar on stderr: shown only on a terminal, silenced by --quiet, never touching stdout or reports."""

import io
import json
import os
import re
import select
import struct
import subprocess
import sys

import numpy as np
import pytest

from conftest import ROOT, write_csv
from preflight.cli import _Progress

pty = pytest.importorskip("pty")
fcntl = pytest.importorskip("fcntl")
termios = pytest.importorskip("termios")

BAR = re.compile(r"(?P<stage>[a-z -]+): +(?P<pct>\d+)%\|[^|]*\| (?P<done>\d+)/(?P<total>\d+) "
                 r"\[(?P<elapsed>\d\d:\d\d)<(?P<left>\d\d:\d\d|\?)\]")


class _Terminal(io.StringIO):
    def isatty(self):
        return True


def test_bar_shows_stage_count_elapsed_and_time_left_and_clears_its_line():
    stream = _Terminal()
    progress = _Progress(enabled=True, stream=stream)
    progress("pair battery", 0, 10)
    progress("pair battery", 4, 10)
    progress("pair battery", 10, 10)
    progress("second pass", 1, 2)
    progress.close()
    lines = [part for part in stream.getvalue().split("\r") if part.strip()]
    bars = [BAR.search(line) for line in lines]
    assert all(bars), lines
    # Updates within tqdm's minimum interval are not redrawn; a finished stage always is.
    assert [(m["stage"], m["done"], m["total"]) for m in bars] == [
        ("pair battery", "0", "10"), ("pair battery", "10", "10"), ("second pass", "0", "2")]
    assert bars[0]["left"] == "?"  # no rate yet, so no estimate
    assert bars[1]["pct"] == "100" and bars[1]["left"] == "00:00"
    # Closing leaves a blank line behind: the last thing written erases the bar.
    assert stream.getvalue().rstrip("\r").split("\r")[-1].strip() == ""
    assert progress.bar is None


def test_no_terminal_or_disabled_writes_nothing():
    class Pipe(io.StringIO):
        def isatty(self):
            return False

    for stream, enabled in ((Pipe(), True), (_Terminal(), False)):
        progress = _Progress(enabled=enabled, stream=stream)
        progress("pair battery", 3, 10)
        progress.close()
        assert stream.getvalue() == ""


def _run_on_terminal(args, cwd):
    """Run the CLI with stderr on a pseudo-terminal; returns (code, stdout, what the terminal received)."""
    master, slave = pty.openpty()
    fcntl.ioctl(slave, termios.TIOCSWINSZ, struct.pack("HHHH", 24, 100, 0, 0))
    env = dict(os.environ, PYTHONPATH=ROOT + os.pathsep + os.environ.get("PYTHONPATH", ""), COLUMNS="100")
    env.pop("NO_COLOR", None)
    proc = subprocess.Popen([sys.executable, "-m", "preflight", *args], stdout=subprocess.PIPE,
                            stderr=slave, cwd=cwd, env=env)
    os.close(slave)
    received = []
    while True:
        ready, _, _ = select.select([master], [], [], 0.1)
        if ready:
            try:
                chunk = os.read(master, 65536)
            except OSError:  # the child closed the terminal
                break
            if not chunk:
                break
            received.append(chunk)
        elif proc.poll() is not None:
            break
    os.close(master)
    stdout = proc.stdout.read().decode()
    proc.stdout.close()
    return proc.wait(timeout=120), stdout, b"".join(received).decode()


def _report(path):
    data = json.loads(open(path).read())
    data.pop("generated_at")
    return data


def _text(path):
    """The report's bytes with its generation time taken out (the one thing allowed to differ)."""
    return re.sub(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d[+-]\d\d:\d\d", "", open(path).read())


def test_bar_on_a_terminal_and_nothing_with_quiet_or_a_pipe_same_reports(tmp_path):
    rng = np.random.default_rng(5)
    a = rng.uniform(-1, 1, 400)
    b = 0.7 * a + rng.exponential(0.5, 400)
    c = 0.5 * b + rng.uniform(-1, 1, 400)
    data = write_csv(tmp_path / "three.csv", {"a": a, "b": b, "c": c})
    common = ["check", data, "--seed", "3", "--jobs", "1"]

    code, out, terminal = _run_on_terminal(common + ["--json", "bar.json", "--markdown", "bar.md"], tmp_path)
    bars = [BAR.search(part) for part in terminal.split("\r") if part.strip()]
    assert bars and all(bars), terminal
    stages = [m["stage"] for m in bars]
    for stage in ("causal order", "noise shape", "pair battery"):
        assert stage in stages
    assert ("pair battery", "3", "3") in [(m["stage"], m["done"], m["total"]) for m in bars]
    assert terminal.rstrip("\r").split("\r")[-1].strip() == ""  # the bar is cleared at the end
    assert "%|" not in out and "\r" not in out  # stdout carries the summary only

    quiet_code, quiet_out, quiet_terminal = _run_on_terminal(common + ["--quiet", "--json", "quiet.json"], tmp_path)
    assert quiet_terminal == ""

    proc = subprocess.run([sys.executable, "-m", "preflight", *common, "--json", "pipe.json", "--markdown", "pipe.md"],
                          capture_output=True, cwd=tmp_path, timeout=120,
                          env=dict(os.environ, PYTHONPATH=ROOT + os.pathsep + os.environ.get("PYTHONPATH", "")))
    assert proc.stderr == b""
    assert code == quiet_code == proc.returncode
    assert proc.stdout.decode() == out
    assert _text(tmp_path / "bar.json") == _text(tmp_path / "pipe.json") == _text(tmp_path / "quiet.json")
    assert _report(tmp_path / "bar.json") == _report(tmp_path / "pipe.json")
    assert _text(tmp_path / "bar.md") == _text(tmp_path / "pipe.md")
