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

from preflight.cli import _Progress

from conftest import ROOT, write_csv

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
    lines = [part for part in stream.getvalue().split("\r") if part.strip() and part != "\x1b[K"]
    bars = [BAR.search(line) for line in lines]
    assert all(bars), lines
    # Updates within tqdm's minimum interval are not redrawn; a finished stage always is.
    assert [(m["stage"], m["done"], m["total"]) for m in bars] == [
        ("pair battery", "0", "10"), ("pair battery", "10", "10"), ("second pass", "0", "2")]
    assert bars[0]["left"] == "?"  # no rate yet, so no estimate
    assert bars[1]["pct"] == "100" and bars[1]["left"] == "00:00"
    # Closing erases the whole line (an echoed "^C" included): the last thing written.
    assert stream.getvalue().endswith("\r\x1b[K")
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
    bars = [BAR.search(part) for part in terminal.split("\r") if part.strip() and part != "\x1b[K"]
    assert bars and all(bars), terminal
    stages = [m["stage"] for m in bars]
    for stage in ("causal order", "noise shape", "pair battery"):
        assert stage in stages
    assert ("pair battery", "3", "3") in [(m["stage"], m["done"], m["total"]) for m in bars]
    assert terminal.endswith("\r\x1b[K")  # the bar's line is erased at the end
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


@pytest.mark.parametrize("failure", ["interrupt", "input error", "internal error"])
def test_bar_is_erased_before_the_run_ends_on_a_failure(monkeypatch, tmp_path, failure):
    import preflight.api
    from preflight.cli import main
    from preflight.errors import InputError

    def failing_check(data, *, progress, **_):
        progress("pair battery", 2, 8)
        raise {"interrupt": KeyboardInterrupt(), "input error": InputError("the table went away"),
               "internal error": RuntimeError("boom")}[failure]

    monkeypatch.setattr(preflight.api, "check", failing_check)
    terminal = _Terminal()
    monkeypatch.setattr(sys, "stderr", terminal)
    data = write_csv(tmp_path / "t.csv", {"a": np.arange(40.0), "b": np.arange(40.0) ** 2})
    with pytest.raises(SystemExit) as stopped:
        main(["check", data])
    assert stopped.value.code != 0
    text = terminal.getvalue()
    assert BAR.search(text)["stage"] == "pair battery"
    # The bar's line is erased first; the one-line message follows on a clean line
    # (on Ctrl-C click ends the echoed "^C" line first).
    drawn, after = text.split("\r\x1b[K", 1)
    assert "\n" not in drawn and "%|" not in after
    assert after.lstrip("\n").startswith("preflight: ") and after.rstrip("\n").count("\n") <= 1


def test_causal_order_reports_pairs_scored_and_keeps_its_answer():
    from preflight.structure import causal_order

    X = np.random.default_rng(4).laplace(size=(300, 6)) @ np.triu(np.ones((6, 6)))
    steps = []
    assert causal_order(X, seed=1, on_step=lambda done, total: steps.append((done, total))) == causal_order(X, seed=1)
    # One call per step; a step over k columns scores k (k - 1) / 2 pairs.
    assert steps == [(15, 35), (25, 35), (31, 35), (34, 35), (35, 35)]
