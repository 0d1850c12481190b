"""Every numeric policy key has a documented range, enforced when the policy is built (exit 2, one line)."""

from __future__ import annotations

import math
import os

import numpy as np
import pytest

from preflight.errors import InputError
from preflight.policy import BOUNDS, POLICY_KEYS, Policy, build_policy, describe_policy

from conftest import run_cli

WORK_KEYS = ("autocorrelation_lags", "spline_max_df", "hsic_exact_max_n", "hsic_max_n", "hsic_features",
             "hsic_permutations", "plot_max_points")


def _just_above(key: str):
    high = BOUNDS[key].high
    if POLICY_KEYS[key] is int:
        return int(high) + 1
    return high if BOUNDS[key].high_open else float(np.nextafter(high, math.inf))


def _just_below(key: str):
    low = BOUNDS[key].low
    if POLICY_KEYS[key] is int:
        return int(low) - 1
    return low if BOUNDS[key].low_open else float(np.nextafter(low, -math.inf))


def _text(value) -> str:
    return repr(value) if isinstance(value, float) else str(value)


def test_every_numeric_key_but_the_seed_has_bounds_and_every_work_key_an_upper_one():
    numeric = {k for k, kind in POLICY_KEYS.items() if kind in (int, float)}
    assert numeric - set(BOUNDS) == {"seed"}
    assert set(BOUNDS) <= numeric
    for key in WORK_KEYS:
        assert BOUNDS[key].high is not None and BOUNDS[key].high_why, key


@pytest.mark.parametrize("key", sorted(k for k in BOUNDS if BOUNDS[k].high is not None))
def test_a_value_just_above_the_bound_exits_2_with_one_line(tmp_path, linear_uniform_csv, key):
    value = _just_above(key)
    before = open(linear_uniform_csv, "rb").read()
    report = tmp_path / "r.json"
    code, out, err = run_cli("check", linear_uniform_csv, "--set", f"{key}={_text(value)}", "--json", str(report))
    assert code == 2 and out == ""
    lines = err.splitlines()
    assert len(lines) == 1 and "Traceback" not in err
    assert key in lines[0] and _text(value) in lines[0] and f"{BOUNDS[key].high:g}" in lines[0]
    assert not report.exists()
    assert open(linear_uniform_csv, "rb").read() == before


@pytest.mark.parametrize("key", sorted(BOUNDS))
def test_the_ends_of_each_range(key):
    bounds = BOUNDS[key]
    kind = POLICY_KEYS[key]
    for end, is_open, outside in ((bounds.low, bounds.low_open, _just_below),
                                  (bounds.high, bounds.high_open, _just_above)):
        if end is None:
            continue
        if not is_open:
            Policy(**{key: kind(end)})  # the bound itself is allowed
        with pytest.raises(InputError, match=key):
            build_policy({key: outside(key)})
    if kind is float:
        for bad in (math.nan, math.inf, -math.inf):
            with pytest.raises(InputError, match=f"policy {key} must be a finite number"):
                build_policy({key: bad})
        with pytest.raises(InputError, match=key):
            build_policy({key: "nan"})


@pytest.mark.parametrize("key", sorted(BOUNDS))
def test_wrong_types_are_refused_even_past_the_command_line(key):
    # preflight.check(policy=..., key=value) replaces fields without the parser.
    with pytest.raises(InputError, match=key):
        Policy(**{key: "3"})
    with pytest.raises(InputError, match=key):
        Policy(**{key: True})
    if POLICY_KEYS[key] is int:
        with pytest.raises(InputError, match=key):
            Policy(**{key: 3.0})


def test_the_ranges_are_listed_in_preflight_policy():
    docs = {key: doc for key, _, doc in describe_policy()}
    for key, bounds in BOUNDS.items():
        assert f"Allowed: a {'whole ' if POLICY_KEYS[key] is int else ''}number {bounds.text()}." in docs[key]
    code, out, _ = run_cli("policy")
    assert code == 0
    assert "Allowed: a whole number from 0 to 10000." in out.split("hsic_permutations = 0")[0].splitlines()[-1]


def test_policy_file_and_api_are_bounded_too(tmp_path, linear_uniform_csv):
    import preflight

    policy_file = tmp_path / "slow.toml"
    policy_file.write_text("hsic_permutations = 100000000\n")
    code, out, err = run_cli("check", linear_uniform_csv, "--policy", str(policy_file))
    assert code == 2 and len(err.splitlines()) == 1 and "hsic_permutations" in err and "100000000" in err
    with pytest.raises(InputError, match="hsic_permutations"):
        preflight.check(linear_uniform_csv, hsic_permutations=10**8)
    with pytest.raises(InputError, match="jobs"):
        preflight.check(linear_uniform_csv, policy=Policy(), jobs=-1)
    with pytest.raises(InputError, match="hsic_features"):
        preflight.check(linear_uniform_csv, policy=Policy(), hsic_features=True)
    with pytest.raises(InputError, match="no_such_key"):
        preflight.check(linear_uniform_csv, policy=Policy(), no_such_key=1)
    # numpy scalars are numbers like any other
    report = preflight.check(linear_uniform_csv, policy=Policy(), jobs=np.int64(1), alpha=np.float64(0.01))
    assert report.to_dict()["settings"]["jobs"] == 1 and report.to_dict()["settings"]["alpha"] == 0.01
    assert sorted(os.listdir(tmp_path)) == ["pair.csv", "slow.toml"]  # no report
