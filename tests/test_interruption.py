"""Interrupting a check: SIGINT, SIGTERM and SIGKILL while the pair battery runs in worker processes.

Each case starts the CLI in a session of its own on a table large enough for
the process pool, waits until the workers run, sends the signal and checks
what a user and a CI job see: the exit code, one line on stderr, no report,
no temporary file, the input unchanged, and no process left behind (after
SIGKILL the workers must end on their own).  Linux only: processes are
observed through /proc.
"""

from __future__ import annotations

import hashlib
import os
import signal
import subprocess
import sys
import textwrap
import time

import numpy as np
import pytest

from preflight.pipeline import cores_available

from conftest import ROOT

pytestmark = pytest.mark.skipif(not os.path.isdir("/proc/self/task"), reason="observes processes through /proc")

START_TIMEOUT = 90.0  # seconds for the workers to appear, generous on a busy machine
EXIT_TIMEOUT = 30.0   # seconds for the main process to exit after the signal
GONE_TIMEOUT = 10.0   # seconds for every worker to be gone after that
SHUTDOWN_LIMIT = 10.0  # seconds from SIGINT / SIGTERM to exit (about 0.5 s on a quiet machine)

needs_two_cores = pytest.mark.skipif(cores_available() < 2, reason="needs two cores for a process pool")


def _stat(pid: int) -> tuple[str, int] | None:
    """(state, parent pid) of a live process, None when it is gone or a zombie."""
    try:
        with open(f"/proc/{pid}/stat") as handle:
            fields = handle.read().rsplit(")", 1)[1].split()
    except OSError:
        return None
    return None if fields[0] in ("Z", "X") else (fields[0], int(fields[1]))


def _children(pid: int) -> list[int]:
    out = []
    for entry in os.listdir("/proc"):
        if entry.isdigit():
            stat = _stat(int(entry))
            if stat is not None and stat[1] == pid:
                out.append(int(entry))
    return out


def _wait_for_workers(proc: subprocess.Popen, count: int) -> list[int]:
    deadline = time.monotonic() + START_TIMEOUT
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            raise AssertionError(f"the check ended (exit {proc.returncode}) before its workers were seen")
        workers = _children(proc.pid)
        if len(workers) >= count:
            return workers
        time.sleep(0.05)
    raise AssertionError(f"no {count} worker processes within {START_TIMEOUT} s")


def _wait_gone(pids: list[int], timeout: float) -> list[int]:
    deadline = time.monotonic() + timeout
    alive = list(pids)
    while alive and time.monotonic() < deadline:
        time.sleep(0.05)
        alive = [pid for pid in alive if _stat(pid) is not None]
    return alive


def _kill_group(proc: subprocess.Popen) -> None:
    try:
        os.killpg(proc.pid, signal.SIGKILL)
    except (ProcessLookupError, PermissionError):
        pass


def _env() -> dict:
    env = dict(os.environ)
    env["PYTHONPATH"] = ROOT + os.pathsep + env.get("PYTHONPATH", "")
    return env


@pytest.fixture(scope="module")
def slow_table(tmp_path_factory) -> str:
    """15 columns x 2,000 rows of a non-Gaussian chain: 105 pairs, so the pool starts.

    With exact HSIC and a permutation null (see the command) the battery takes
    minutes, so the signal always lands while the workers are busy.
    """
    rng = np.random.default_rng(5)
    n, p = 2000, 15
    X = np.empty((n, p))
    X[:, 0] = rng.uniform(-1, 1, n)
    for j in range(1, p):
        X[:, j] = 0.6 * X[:, j - 1] + rng.uniform(-1, 1, n)
    path = tmp_path_factory.mktemp("interrupt-input") / "furnace.csv"
    np.savetxt(path, X, delimiter=",", header=",".join(f"zone_{j}" for j in range(p)), comments="", fmt="%.6f")
    return str(path)


def _digest(path: str) -> str:
    with open(path, "rb") as handle:
        return hashlib.sha256(handle.read()).hexdigest()


@needs_two_cores
@pytest.mark.parametrize("signame, whole_group, expected", [
    ("SIGINT", True, 130),    # Ctrl-C in a terminal: the whole process group gets it
    ("SIGINT", False, 130),
    ("SIGTERM", False, 143),  # a CI runner or supervisor stopping the job
    ("SIGTERM", True, 143),   # `timeout`, process-group kill
    ("SIGKILL", False, -signal.SIGKILL),  # no cleanup possible: workers must die on their own
])
def test_interrupted_check_stops_its_workers_and_leaves_nothing(tmp_path, slow_table, signame, whole_group, expected):
    out_dir = tmp_path / "reports"
    out_dir.mkdir()
    before = _digest(slow_table)
    command = [sys.executable, "-m", "preflight", "check", slow_table, "--jobs", "2",
               "--set", "hsic_permutations=200", "--json", str(out_dir / "r.json"),
               "--markdown", str(out_dir / "r.md")]
    proc = subprocess.Popen(command, stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=_env(),
                            start_new_session=True)
    workers: list[int] = []
    try:
        workers = _wait_for_workers(proc, 2)
        time.sleep(0.3)  # let the workers get into their tasks
        sig = getattr(signal, signame)
        sent = time.monotonic()
        if whole_group:
            os.killpg(proc.pid, sig)
        else:
            proc.send_signal(sig)
        # communicate() returns only when every holder of the pipes is gone:
        # a worker keeping the caller's stdout or stderr would time out here.
        out, err = proc.communicate(timeout=EXIT_TIMEOUT)
        took = time.monotonic() - sent
        left = _wait_gone(workers, GONE_TIMEOUT)
    finally:
        _kill_group(proc)
        proc.wait(timeout=EXIT_TIMEOUT)
        for pid in workers:
            try:
                os.kill(pid, signal.SIGKILL)
            except (ProcessLookupError, PermissionError):
                pass
    assert left == [], f"workers {left} still alive {GONE_TIMEOUT} s after the main process exited"
    assert proc.returncode == expected
    lines = err.decode().splitlines()
    if signame == "SIGKILL":
        assert lines == []
    else:
        assert lines == [f"preflight: interrupted by {signame}"], err.decode()
        assert took < SHUTDOWN_LIMIT, f"{took:.1f} s to stop"
    assert out == b""
    assert os.listdir(out_dir) == [], "no report and no temporary file after an interruption"
    assert _digest(slow_table) == before


@needs_two_cores
def test_api_check_leaves_no_worker_on_keyboard_interrupt(tmp_path, slow_table):
    # preflight.check() from Python: the caller's own KeyboardInterrupt unwinds the
    # run, the pool is stopped before it reaches the caller, workers print nothing.
    script = textwrap.dedent(f"""
        import os, sys
        import preflight
        try:
            preflight.check({slow_table!r}, jobs=2, hsic_permutations=200, keep_samples=False)
        except KeyboardInterrupt:
            children = []
            for entry in os.listdir("/proc"):
                if entry.isdigit():
                    try:
                        with open(f"/proc/{{entry}}/stat") as handle:
                            fields = handle.read().rsplit(")", 1)[1].split()
                    except OSError:
                        continue
                    if int(fields[1]) == os.getpid() and fields[0] not in ("Z", "X"):
                        children.append(entry)
            print("caught; children left:", len(children))
            sys.exit(0)
        print("not interrupted")
    """)
    proc = subprocess.Popen([sys.executable, "-c", script], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            env=_env(), cwd=str(tmp_path), start_new_session=True)
    workers: list[int] = []
    try:
        workers = _wait_for_workers(proc, 2)
        time.sleep(0.3)
        os.killpg(proc.pid, signal.SIGINT)
        out, err = proc.communicate(timeout=EXIT_TIMEOUT)
        left = _wait_gone(workers, GONE_TIMEOUT)
    finally:
        _kill_group(proc)
        proc.wait(timeout=EXIT_TIMEOUT)
    assert proc.returncode == 0, err.decode()
    assert out.decode().strip() == "caught; children left: 0"
    assert err.decode() == "", "workers ignore SIGINT: no traceback from them"
    assert left == []


def test_interruption_while_writing_a_report_removes_the_temporary_file(tmp_path, monkeypatch):
    from preflight import outputs
    from preflight.interruption import Interrupted

    def interrupted(fd):
        raise Interrupted(signal.SIGTERM)

    targets = outputs.plan_outputs([("--json", str(tmp_path / "report.json")),
                                    ("--markdown", str(tmp_path / "report.md"))])
    monkeypatch.setattr(outputs.os, "fsync", interrupted)
    with pytest.raises(Interrupted):
        outputs.write_outputs([(target, "{}\n" * 100_000) for target in targets])
    assert os.listdir(tmp_path) == []


def test_interrupted_maps_signals_onto_exit_codes():
    from preflight.interruption import Interrupted

    assert Interrupted(signal.SIGINT).exit_code == 130
    assert Interrupted(signal.SIGTERM).exit_code == 143
    assert Interrupted(signal.SIGTERM).signal_name == "SIGTERM"
    assert not isinstance(Interrupted(signal.SIGINT), Exception)


def test_an_interruption_swallowed_by_python_is_sent_again():
    # A signal handler that runs inside a fork hook or a __del__ cannot raise:
    # Python reports the exception as "ignored" and carries on.  The CLI's
    # handler sends the signal again until the run unwinds, silently.
    script = textwrap.dedent("""
        import os, signal, time
        from preflight.interruption import Interrupted, settle, stop_on_signals

        stop_on_signals()

        class Swallows:
            def __del__(self):
                os.kill(os.getpid(), signal.SIGTERM)
                for _ in range(100000):
                    pass

        try:
            Swallows()
            print("swallowed", flush=True)
            time.sleep(20)
        except Interrupted as exc:
            settle()
            print("sent again:", exc.signal_name, flush=True)
    """)
    proc = subprocess.run([sys.executable, "-c", script], capture_output=True, env=_env(), timeout=60)
    assert proc.stdout.decode().splitlines() == ["swallowed", "sent again: SIGTERM"]
    assert proc.stderr == b""


@needs_two_cores
def test_interruption_during_the_pooled_pair_batteries_prints_nothing_from_the_pool(tmp_path, slow_table):
    # The interruption lands deterministically while most pair batteries are
    # still queued in the workers: the caller's progress callback raises it
    # when the first result comes back.  Stopping the pool must not leave the
    # executor's own thread failing on cancelled work (a traceback on stderr).
    script = textwrap.dedent(f"""
        import preflight

        def interrupt_after_first_battery(stage, done, total):
            if stage == "pair battery" and done >= 1 and total > 8:
                raise KeyboardInterrupt

        try:
            preflight.check({slow_table!r}, jobs=2, keep_samples=False, progress=interrupt_after_first_battery)
        except KeyboardInterrupt:
            print("caught")
        else:
            print("not interrupted")
    """)
    proc = subprocess.run([sys.executable, "-c", script], capture_output=True, env=_env(), cwd=str(tmp_path),
                          timeout=EXIT_TIMEOUT + 120)
    assert proc.stdout.decode().strip() == "caught", proc.stderr.decode()
    assert proc.stderr.decode() == ""
