"""``preflight.check``: the whole pipeline behind one function.

load -> screen -> structure -> skeleton -> battery -> evidence -> rules -> report.
The CLI calls exactly this.
"""

from __future__ import annotations

import contextlib
import os
import threading
from collections.abc import Callable, Iterator
from dataclasses import replace
from typing import Any

from preflight.io import GraphFile, LoadedData, load_table, read_graph
from preflight.policy import Policy, build_policy
from preflight.report.model import Report

Progress = Callable[[str, int, int], None]


def _no_progress(stage: str, done: int, total: int) -> None:
    return None


_blas_lock = threading.Lock()
_blas_holders = 0
_blas_outermost: Any = None


def _release_blas_control() -> None:
    """Let any Python thread set OpenBLAS's thread count again.

    Since threadpoolctl 3.8 only one Python thread at a time may change the
    limits of a pthreads OpenBLAS (its pool is process-wide); a call from any
    other thread silently does nothing.  Every change made here is made
    under ``_blas_lock`` with control released before and after, so a check
    in a second thread can neither be refused nor lock out the first.
    Earlier threadpoolctl versions have no such rule and nothing to release.
    """
    import threadpoolctl

    clear = getattr(getattr(threadpoolctl, "OpenBLASController", None), "clear_controlling_thread", None)
    if clear is not None:
        clear(force=True)


@contextlib.contextmanager
def _single_threaded_blas() -> Iterator[None]:
    """One BLAS thread while any check in this process runs.

    The float32 feature products of the HSIC round differently on one BLAS
    thread and on several, so a check must never run on the caller's count.
    The thread count belongs to the process: two checks in two threads that
    each restored, on the way out, the count they found would hand the
    other one the caller's count mid-run.  So the first check in sets the
    limit, the last one out restores the count the first one found.
    (An OpenMP-built OpenBLAS keeps a count per thread; each check's thread
    then sets its own, and only the last one out is restored.)
    """
    global _blas_holders, _blas_outermost
    from threadpoolctl import threadpool_limits

    with _blas_lock:
        _release_blas_control()
        limiter = threadpool_limits(limits=1, user_api="blas")
        _release_blas_control()
        if _blas_holders == 0:
            _blas_outermost = limiter
        _blas_holders += 1
    try:
        yield
    finally:
        with _blas_lock:
            _blas_holders -= 1
            if _blas_holders == 0:
                _release_blas_control()
                _blas_outermost.restore_original_limits()
                _release_blas_control()
                _blas_outermost = None


def check(
    data,
    *,
    sep: str | None = None,
    columns: list[str] | None = None,
    exclude: list[str] | None = None,
    missing: str = "drop",
    graph: str | None = None,
    policy: Policy | None = None,
    policy_file: str | None = None,
    progress: Progress | None = None,
    keep_samples: bool = True,
    **settings: Any,
) -> Report:
    """Check whether the data justify orienting causal edges, and how far.

    Parameters
    ----------
    data : str, os.PathLike or pandas.DataFrame
        A CSV, TSV or Parquet path (``"-"`` reads CSV from stdin) or a DataFrame.
    sep, columns, exclude, missing
        Reading options (see :func:`preflight.io.load_table`).
    graph : str, optional
        A hypothesised DAG (CSV edge list ``source,target`` or lines ``a -> b``);
        without it the skeleton is estimated (PC-stable).
    policy : Policy, optional
        A ready policy; otherwise one is built from ``policy_file``,
        ``[tool.preflight]`` in ./pyproject.toml and ``settings``
        (any :class:`Policy` field, e.g. ``alpha=0.01, seed=3``).
    progress : callable(stage, done, total), optional
        Called as work proceeds.

    Returns
    -------
    Report
    """
    if policy is None:
        policy, _ = build_policy(settings, policy_file=policy_file, overrides_from="the arguments of check()")
    elif settings:
        from preflight.policy import _coerce

        policy = replace(policy, **{key: _coerce(key, value, "the arguments of check()")
                                    for key, value in settings.items()})
    progress = progress or _no_progress
    loaded = load_table(data, sep=sep, columns=columns, exclude=exclude, missing=missing)
    # A bad graph file fails here, right after the table it names: before any computation.
    given = None if graph is None else read_graph(graph, loaded.names, left_out=loaded.left_out)
    return analyse(loaded, policy, graph=given, progress=progress, keep_samples=keep_samples)


def analyse(loaded: LoadedData, policy: Policy, *, graph: GraphFile | str | os.PathLike | None = None,
            progress: Progress = _no_progress, keep_samples: bool = True) -> Report:
    """The analysis of a loaded table; ``graph`` is a :class:`~preflight.io.GraphFile` or the path of one."""
    from preflight import pipeline

    if graph is not None and not isinstance(graph, GraphFile):
        graph = read_graph(graph, loaded.names)

    # The work is thousands of small matrix products.  Threaded BLAS gains
    # little on them and, once the pair battery's worker processes share the
    # cores, its spinning threads made a whole check several times slower
    # (benchmarks/bench.py); parallelism comes from the worker processes.
    # The limit is lifted again when the last running check returns.
    with _single_threaded_blas():
        return pipeline.run(loaded, policy, graph=graph, progress=progress, keep_samples=keep_samples)
