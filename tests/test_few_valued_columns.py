"""Two-valued and few-valued columns: the median-heuristic bandwidth and HSIC on them.

A standardised 0/1 column has two values a < b whose rounded sum a + (b - a)
can fall one ulp short of b; the selection of the median difference once
compared rounded sums with rounded differences and lost every cross pair
(IndexError for hundreds of class splits between 20 and 79 rows).
"""

from __future__ import annotations

import numpy as np
import pytest

from preflight.checks.independence import (
    _count_differences_at_most,
    _kth_difference,
    _median_bandwidth,
    _standardise,
    hsic,
    hsic_pairs,
)


def _reference_bandwidth(v: np.ndarray) -> tuple[float, bool]:
    rows, cols = np.triu_indices(v.shape[0], k=1)
    diffs = np.abs(v[rows] - v[cols])
    median = float(np.median(diffs))
    if median > 0:
        return median, False
    positive = diffs[diffs > 0]
    return (float(np.median(positive)) if positive.size else 1.0), True


def _two_valued_reference(s: np.ndarray) -> tuple[float, bool]:
    # The differences of a two-valued column are 0 (pairs within a class) and
    # the one rounded difference d of its two values (pairs across classes).
    low, high = np.unique(s)
    d = float(high - low)
    k = int(np.count_nonzero(s == high))
    n = s.shape[0]
    ties, cross = k * (k - 1) // 2 + (n - k) * (n - k - 1) // 2, k * (n - k)
    total = ties + cross
    middle = [total // 2, (total - 1) // 2]  # 0-based positions whose mean is the median
    median = 0.5 * sum(0.0 if m < ties else d for m in middle)
    return (median, False) if median > 0 else (d, True)


def _splits(n: int, rng: np.random.Generator) -> list[int]:
    # Every class split up to 79 rows (where the fault was found); above, the
    # extreme and middle splits and a few drawn at random, to stay fast.
    if n < 80:
        return list(range(1, n))
    return sorted({1, 2, n // 3, n // 2, n - 2, n - 1, *rng.integers(1, n, 4).tolist()})


def test_two_valued_columns_of_every_size_from_20_to_200_rows():
    # Standardised as the HSIC tests do: the bandwidth is exactly the median
    # of all pairwise differences.
    rng = np.random.default_rng(20)
    checked = 0
    for n in range(20, 201):
        for ones in _splits(n, rng):
            v = np.zeros(n)
            v[:ones] = 1.0
            s = _standardise(v)
            assert _median_bandwidth(s, np.random.default_rng(0)) == _two_valued_reference(s), (n, ones)
            checked += 1
    assert checked > sum(n - 1 for n in range(20, 80))


def test_two_valued_reference_agrees_with_numpy_on_a_sample_of_splits():
    for n, ones in [(20, 1), (20, 10), (21, 7), (48, 13), (79, 40), (120, 119)]:
        v = np.zeros(n)
        v[:ones] = 1.0
        s = _standardise(v)
        assert _two_valued_reference(s) == _reference_bandwidth(s)


@pytest.mark.parametrize("levels", [2, 3, 4, 5, 7])
def test_few_valued_columns_of_every_size_from_20_to_200_rows(levels):
    rng = np.random.default_rng(100 + levels)
    for n in range(20, 201):
        values = rng.normal(size=levels) * 10.0 ** rng.uniform(-3, 3)
        v = values[rng.integers(0, levels, n)]
        if np.ptp(v) == 0:
            continue
        s = _standardise(v)
        for column in (v, s):
            assert _median_bandwidth(column, np.random.default_rng(0)) == _reference_bandwidth(column), (n, levels)


def test_counting_agrees_with_the_rounded_differences():
    # The count of differences at most t is taken on the differences as computed,
    # so t equal to an observed difference counts that difference.
    rng = np.random.default_rng(7)
    for n in range(20, 120):
        s = np.sort(_standardise(rng.integers(0, 2, n).astype(float)) if n % 2 else
                    _standardise(rng.integers(0, 3, n).astype(float)))
        diffs = (s[None, :] - s[:, None])[np.triu_indices(n, k=1)]
        for t in np.unique(diffs):
            assert _count_differences_at_most(s, float(t)) == int(np.count_nonzero(diffs <= t))
        ordered = np.sort(diffs)
        for k in (1, len(ordered) // 2, len(ordered)):
            assert _kth_difference(s, k) == ordered[k - 1]


@pytest.mark.parametrize("n", [20, 23, 37, 48, 61, 79, 150, 200])
def test_hsic_on_a_zero_one_column_runs_and_sees_dependence(n):
    rng = np.random.default_rng(n)
    x = (rng.uniform(size=n) < 0.3).astype(float)
    x[:2] = [0.0, 1.0]
    y = 2.0 * x + 0.3 * rng.normal(size=n)
    dependent = hsic(x, y, seed=1)
    assert dependent.p_value is not None and dependent.p_value < 0.01
    unrelated = hsic(x, rng.normal(size=n), seed=1)
    assert unrelated.p_value is not None and 0.0 <= unrelated.p_value <= 1.0
    shared = hsic_pairs(np.column_stack([x, y]), [(0, 1)], [1], exact_max_n=10, max_n=20000, n_features=40,
                        permutations=0, seed=1, column_seeds=[2, 3])
    assert shared[0].p_value < 0.01


@pytest.mark.parametrize("n", [24, 40, 57, 200])
def test_end_to_end_with_a_zero_one_column(tmp_path, n):
    import preflight

    rng = np.random.default_rng(3 + n)
    flag = (rng.uniform(size=n) < 0.4).astype(float)
    flag[:2] = [0.0, 1.0]
    load = 3.0 * flag + rng.uniform(-1, 1, n)
    out = 0.8 * load + rng.laplace(size=n)
    import pandas as pd

    frame = pd.DataFrame({"door_open": flag, "load": load, "output": out})
    report = preflight.check(frame, seed=1, jobs=1, keep_samples=False).data
    assert report["conclusion"]["level"]
    flags = {v["name"]: v["flags"] for v in report["variables"]}
    assert "discrete" in flags["door_open"]
