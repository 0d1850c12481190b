"""Stopping cleanly on SIGINT and SIGTERM, and worker processes that never outlive their parent.

The CLI turns both signals into :class:`Interrupted`, which unwinds the run
like any exception: the pipeline stops its worker processes, the atomic
writer removes its temporary file, and ``main`` prints one line and exits
128 + the signal number (130 for SIGINT, 143 for SIGTERM, DESIGN.md).

A worker must not outlive the process that started it, even when that
process dies by SIGKILL and runs no cleanup at all: a surviving worker holds
memory and, worse, the caller's stdout and stderr, so a CI job reading them
waits for ever.  :func:`bind_worker_to_parent` makes each worker die with its
parent and let go of the caller's terminal and pipes.
"""

from __future__ import annotations

import os
import signal
import sys
import threading
import time

SIGNALS = (signal.SIGINT, signal.SIGTERM)


class Interrupted(BaseException):
    """SIGINT or SIGTERM reached the main process.

    A BaseException like KeyboardInterrupt, so no ``except Exception`` on
    the way turns an interruption into an input error or an internal error.
    """

    def __init__(self, signum: int):
        super().__init__(signum)
        self.signum = int(signum)

    @property
    def signal_name(self) -> str:
        return signal.Signals(self.signum).name

    @property
    def exit_code(self) -> int:
        return 128 + self.signum


class _State:
    signum: int | None = None
    settled = False


def _handling_interruption() -> bool:
    """True while this thread runs an except, finally or __exit__ block for an :class:`Interrupted`."""
    return isinstance(sys.exc_info()[1], Interrupted)


def stop_on_signals() -> None:
    """Raise :class:`Interrupted` on SIGINT and SIGTERM in this process.

    Python cannot raise from a signal handler that runs inside a fork hook,
    a ``__del__`` or a weakref callback: the exception goes to
    ``sys.unraisablehook`` and the run would go on (a signal landing while
    the pool forked its workers did exactly that).  So the first signal also
    starts a thread that sends it again to the main thread every quarter
    second until :func:`settle` is called, and the hook passes over an
    :class:`Interrupted` in silence.  While one is being handled (the
    cleanup on the way out), further signals are ignored, so neither a
    second Ctrl-C nor a re-sent signal breaks the cleanup half-way.

    Only the main thread may set signal handlers; elsewhere this does nothing.
    """
    if threading.current_thread() is not threading.main_thread():
        return
    owner = os.getpid()

    def interrupt(signum, frame):
        if os.getpid() != owner:
            # A worker forked before its initializer replaced this handler:
            # behave as the worker will (SIGINT ignored, SIGTERM fatal).
            if signum == signal.SIGTERM:
                os._exit(128 + signum)
            return
        if _State.settled or _handling_interruption():
            return
        if _State.signum is None:
            _State.signum = signum
            if hasattr(signal, "pthread_kill"):  # POSIX
                threading.Thread(target=_send_again, name="preflight-interrupt", daemon=True).start()
        raise Interrupted(_State.signum)

    previous_hook = sys.unraisablehook

    def unraisable(info):
        if not isinstance(info.exc_value, Interrupted):  # an Interrupted is sent again shortly
            previous_hook(info)

    sys.unraisablehook = unraisable
    for signum in SIGNALS:
        signal.signal(signum, interrupt)


def _send_again(period: float = 0.25) -> None:
    main = threading.main_thread()
    while True:
        time.sleep(period)
        if _State.settled or not main.is_alive() or main.ident is None or _State.signum is None:
            return
        signal.pthread_kill(main.ident, _State.signum)


def settle() -> None:
    """The interruption reached the exit path: ignore SIGINT and SIGTERM from now on."""
    _State.settled = True
    for signum in SIGNALS:
        signal.signal(signum, signal.SIG_IGN)


def _die_with_parent_linux() -> bool:
    """Ask the kernel to SIGKILL this process when its parent thread ends (Linux prctl)."""
    if not sys.platform.startswith("linux"):
        return False
    try:
        import ctypes

        libc = ctypes.CDLL(None, use_errno=True)
        pr_set_pdeathsig = 1
        return libc.prctl(pr_set_pdeathsig, int(signal.SIGKILL), 0, 0, 0) == 0
    except (OSError, AttributeError):
        return False


def _watch_parent(parent_pid: int, interval: float = 0.5) -> None:
    """Portable fallback: a daemon thread that ends the process once it is re-parented."""
    def watch():
        while True:
            if os.getppid() != parent_pid:
                os._exit(1)
            time.sleep(interval)

    threading.Thread(target=watch, name="preflight-parent-watch", daemon=True).start()


def bind_worker_to_parent(parent_pid: int) -> None:
    """Run first in every worker process: die with the parent, ignore Ctrl-C, free the caller's streams.

    The death signal follows the parent *thread* that forked the worker; the
    pool is created and fed by the thread running the check, which outlives
    its workers.  The parent may already have died before the request took
    effect, hence the check of the parent's process id right after it.
    Only the parent handles SIGINT (a terminal sends it to the whole process
    group), so workers print no tracebacks; SIGTERM keeps its default
    action, so the parent can stop a worker at once.  Workers print nothing
    useful (their results and exceptions travel back through the pool), so
    their stdin, stdout and stderr are pointed at the null device: a worker
    never keeps a pipe of the caller open.
    """
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    if not _die_with_parent_linux():
        _watch_parent(parent_pid)
    if os.getppid() != parent_pid:
        os._exit(1)
    null = os.open(os.devnull, os.O_RDWR)
    for stream in (0, 1, 2):
        os.dup2(null, stream)
    os.close(null)
