"""Tests of the repeated-rows screen (preflight.screen.duplicate_rows_check) and its global flag.

Reference: pandas ``DataFrame.duplicated(keep="first")``, which marks every
row equal to an earlier one; seeded simulation for the chance allowance.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd
import pytest

import preflight
from preflight.errors import InputError
from preflight.policy import Policy
from preflight.screen import duplicate_rows_check

POLICY = Policy()


def _continuous(seed: int, n: int = 600) -> np.ndarray:
    rng = np.random.default_rng(seed)
    x = rng.uniform(-1, 1, n)
    return np.column_stack([x, 0.8 * x + 0.5 * rng.uniform(-1, 1, n), rng.exponential(1.0, n)])


def _with_copies(X: np.ndarray, copies: int, seed: int) -> np.ndarray:
    """X with `copies` of its rows written a second time, at random places."""
    rng = np.random.default_rng(seed)
    extra = X[rng.choice(X.shape[0], size=copies, replace=False)]
    out = np.vstack([X, extra])
    return out[rng.permutation(out.shape[0])]


@pytest.mark.parametrize("seed", [1, 2])
def test_count_and_share_match_pandas_duplicated(seed):
    # Source: pandas.DataFrame.duplicated(keep="first") counts the rows equal to an earlier row.
    rng = np.random.default_rng(seed)
    X = _with_copies(np.round(_continuous(seed, 300), 1), 25, seed)
    X[rng.choice(X.shape[0], 5), 0] = -0.0  # signed zeros are equal values
    expected = int(pd.DataFrame(X).duplicated(keep="first").sum())
    result = duplicate_rows_check(X, ["a", "b", "c"], POLICY)
    assert result.statistic == expected
    assert result.effect == pytest.approx(expected / X.shape[0], rel=1e-15)
    assert result.n == X.shape[0] and result.p_value is None


def test_copied_rows_in_continuous_data_are_material_and_a_few_are_not():
    X = _continuous(3)
    assert duplicate_rows_check(X, ["a", "b", "c"], POLICY).statistic == 0
    assert duplicate_rows_check(X, ["a", "b", "c"], POLICY).passed is True
    copied = duplicate_rows_check(_with_copies(X, 30, 3), ["a", "b", "c"], POLICY)  # 30 / 630 = 4.8 %
    assert copied.statistic == 30 and copied.passed is False
    few = duplicate_rows_check(_with_copies(X, 3, 3), ["a", "b", "c"], POLICY)  # 0.5 %, below 1 %
    assert few.statistic == 3 and few.passed is True
    strict = duplicate_rows_check(_with_copies(X, 3, 3), ["a", "b", "c"], replace(POLICY, duplicate_rows_max_share=0.0))
    assert strict.passed is False


def test_chance_repeats_of_coarse_counts_are_not_material():
    # Two correlated Poisson counts: most rows repeat an earlier one by chance
    # alone, and no column looks continuous.
    rng = np.random.default_rng(4)
    x = rng.poisson(3.0, 2000)
    X = np.column_stack([x, x + rng.poisson(2.0, 2000)]).astype(float)
    result = duplicate_rows_check(X, ["a", "b"], POLICY)
    assert result.effect > 0.5
    assert result.passed is True


def test_rounded_measurements_without_copies_are_not_material():
    # Two decimals on unit-scale data: chance whole-row coincidences stay far below 1 %.
    for seed in range(7, 12):
        X = np.round(_continuous(seed, 1000), 2)
        result = duplicate_rows_check(X, ["a", "b", "c"], POLICY)
        assert result.passed is True, result


def test_copies_next_to_a_continuous_column_are_material_even_with_a_coarse_one():
    rng = np.random.default_rng(5)
    X = np.column_stack([rng.integers(0, 2, 500), rng.standard_normal(500)]).astype(float)
    assert duplicate_rows_check(X, ["switch", "flow"], POLICY).passed is True
    assert duplicate_rows_check(_with_copies(X, 20, 5), ["switch", "flow"], POLICY).passed is False


def test_names_must_match_columns():
    with pytest.raises(InputError):
        duplicate_rows_check(np.zeros((5, 2)), ["a"], POLICY)


def test_copied_rows_raise_the_global_flag_and_lower_the_conclusion():
    X = _continuous(6, 500)
    frame = pd.DataFrame(_with_copies(X, 40, 6), columns=["a", "b", "c"])
    report = preflight.check(frame, seed=0).to_dict()
    assert "duplicate-rows" in report["global"]["flags"]
    assert "repeated-rows" in report["conclusion"]["rules_fired"]
    assert report["conclusion"]["level"] not in ("linear-non-gaussian", "additive-noise")
    (check,) = [c for c in report["global"]["checks"] if c["name"] == "duplicated rows"]
    assert check["statistic"] == 40 and check["passed"] is False
    clean = preflight.check(pd.DataFrame(X, columns=["a", "b", "c"]), seed=0).to_dict()
    assert "duplicate-rows" not in clean["global"]["flags"]
