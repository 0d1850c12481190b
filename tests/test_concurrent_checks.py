"""Two checks at once in one process give the reports each gives alone: no stage shares state between runs."""

from __future__ import annotations

import threading

import numpy as np
import pandas as pd

import preflight
from preflight import demo


def _fork_table(n: int, seed: int) -> pd.DataFrame:
    """A linear fork with uniform noise (greenhouse: vent opening drives humidity and leaf temperature)."""
    rng = np.random.default_rng(seed)
    vent = rng.uniform(-1, 1, n)
    humidity = 0.8 * vent + rng.uniform(-1, 1, n)
    leaf = -0.6 * vent + rng.uniform(-1, 1, n)
    soil = rng.exponential(1.0, n)
    return pd.DataFrame({"vent_opening": vent, "humidity": humidity, "leaf_temp": leaf, "soil_moisture": soil})


def _comparable(report) -> dict:
    data = dict(report.data)
    data.pop("generated_at")
    return data


def test_two_threads_checking_different_tables_get_the_serial_reports():
    tables = [pd.DataFrame(demo.kiln_data(400)), _fork_table(500, seed=5)]

    def check(frame):
        return preflight.check(frame, seed=3, jobs=1, keep_samples=False)

    serial = [_comparable(check(frame)) for frame in tables]
    assert serial[0] != serial[1]
    start = threading.Barrier(len(tables))
    concurrent: list = [None] * len(tables)
    errors: list[BaseException] = []

    def worker(k: int) -> None:
        try:
            start.wait()
            for _ in range(2):  # twice, so each run overlaps the other's pair battery
                concurrent[k] = _comparable(check(tables[k]))
                assert concurrent[k] == serial[k]
        except BaseException as error:  # surfaced in the main thread below
            errors.append(error)

    threads = [threading.Thread(target=worker, args=(k,)) for k in range(len(tables))]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    assert not errors, errors
    assert concurrent == serial


def test_random_feature_hsic_from_many_threads_matches_serial():
    """The random-feature HSIC remembers recent features; threads evicting each other's entries change nothing."""
    from preflight.checks.independence import hsic

    rng = np.random.default_rng(11)
    columns = [rng.exponential(size=3000) for _ in range(12)]
    pairs = [(columns[k], columns[k] + 0.3 * columns[(k + 1) % 12]) for k in range(12)]

    def run(k: int):
        x, y = pairs[k]
        return hsic(x, y, exact_max_n=500, seed=k).p_value  # 3,000 rows: the random-feature test

    serial = [run(k) for k in range(12)]
    results: dict[tuple[int, int], float | None] = {}
    errors: list[BaseException] = []
    start = threading.Barrier(4)

    def worker(t: int) -> None:
        try:
            start.wait()
            for repeat in range(3):
                for k in range(t, 12, 4) if repeat % 2 == 0 else range(12):
                    results[(t, k)] = run(k)
        except BaseException as error:  # surfaced in the main thread below
            errors.append(error)

    threads = [threading.Thread(target=worker, args=(t,)) for t in range(4)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    assert not errors, errors
    assert all(value == serial[k] for (_, k), value in results.items())


def _blas_thread_counts() -> list[int]:
    from threadpoolctl import threadpool_info

    return [info["num_threads"] for info in threadpool_info() if info["user_api"] == "blas"]


def test_a_check_in_any_thread_runs_on_one_blas_thread_and_hands_back_the_callers_count():
    """threadpoolctl 3.8 lets only one Python thread at a time change OpenBLAS's count and silently
    ignores the others; a check in a second thread once ran on the caller's count and its HSIC
    statistics differed from the serial report in the seventh digit."""
    from preflight.api import _single_threaded_blas

    before = _blas_thread_counts()
    inside: dict[str, list[int]] = {}
    entered, leave = threading.Barrier(3), threading.Barrier(3)

    def hold(name: str) -> None:
        with _single_threaded_blas():
            entered.wait()
            inside[name] = _blas_thread_counts()
            leave.wait()

    with _single_threaded_blas():  # the main thread takes control first, as a serial check would
        inside["main"] = _blas_thread_counts()
    threads = [threading.Thread(target=hold, args=(name,)) for name in ("first", "second")]
    for thread in threads:
        thread.start()
    entered.wait()
    leave.wait()
    for thread in threads:
        thread.join()
    assert inside == {name: [1] * len(before) for name in ("main", "first", "second")}
    assert _blas_thread_counts() == before
    # Control was handed back: a check in yet another thread still gets its one thread.
    later = threading.Thread(target=hold, args=("later",))
    entered, leave = threading.Barrier(2), threading.Barrier(2)
    later.start()
    entered.wait()
    leave.wait()
    later.join()
    assert inside["later"] == [1] * len(before)
