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
