"""The policy reaches everything it governs: each key, set away from its default, changes what it governs.

One probe per key of ``Policy``: a small table built so that the key
matters for it, and the part of the analysis the key governs (a flag, a
verdict, a p-value, the number of worker processes).  A key without a probe
fails ``test_every_key_has_a_probe``, so a new key cannot be left unwired.
"""

from __future__ import annotations

import dataclasses
import functools

import numpy as np
import pandas as pd
import pytest

import preflight
from preflight import pipeline, structure
from preflight.evidence import adjust_p_values
from preflight.policy import Policy
from preflight.screen import collinearity_check, duplicate_rows_check, screen_variables

DEFAULT = Policy()
FAST = {"jobs": 1}


# --------------------------------------------------------------------------- tables


def _chain(n: int = 400) -> pd.DataFrame:
    """a -> b -> c with uniform noise; spread shrinks along the chain (not varsortable)."""
    rng = np.random.default_rng(11)
    a = 4.0 * rng.uniform(-1, 1, n)
    b = 0.2 * a + 0.5 * rng.uniform(-1, 1, n)
    c = 0.3 * b + 0.1 * rng.uniform(-1, 1, n)
    return pd.DataFrame({"a": a, "b": b, "c": c})


def _gaussian(n: int = 400) -> pd.DataFrame:
    rng = np.random.default_rng(12)
    a = rng.standard_normal(n)
    b = 0.8 * a + rng.standard_normal(n)
    return pd.DataFrame({"a": a, "b": b})


def _curved(n: int = 400) -> pd.DataFrame:
    rng = np.random.default_rng(13)
    a = rng.uniform(-2, 2, n)
    return pd.DataFrame({"a": a, "b": np.tanh(2.0 * a) + 0.1 * rng.standard_normal(n)})


def _spreading(n: int = 600) -> pd.DataFrame:
    rng = np.random.default_rng(14)
    a = rng.uniform(0, 2, n)
    return pd.DataFrame({"a": a, "b": a + (0.1 + a) * rng.uniform(-1, 1, n)})


def _hidden_cause(n: int = 1000) -> pd.DataFrame:
    """Two sub-Gaussian variables with a hidden common cause: a faint spread change in one direction."""
    rng = np.random.default_rng(0)
    h = rng.uniform(-1, 1, n)
    return pd.DataFrame({"a": h + 0.8 * rng.uniform(-1, 1, n), "b": 0.5 * h + 0.6 * rng.uniform(-1, 1, n)})


def _skewed_hidden_cause() -> pd.DataFrame:
    """Two noisy measures of one skewed hidden cause that a spline reads as a curve one way (2,000 rows)."""
    from preflight.scenarios import simulate, to_frame

    return to_frame(simulate("hidden-cause-non-adjacent", "pair", 2, 2000, "exponential", 2074554286))


TABLES = {"chain": _chain, "gaussian": _gaussian, "curved": _curved, "spreading": _spreading,
          "hidden cause": _hidden_cause, "skewed hidden cause": _skewed_hidden_cause}


@functools.cache
def _report(table: str, key: str | None = None, value=None) -> preflight.Report:
    settings = dict(FAST)
    if key is not None:
        settings[key] = value
    return preflight.check(TABLES[table](), policy=Policy(**settings))


def _pair_checks(report) -> list[dict]:
    return [c for pair in report.data["pairs"] for c in pair["checks"]]


def _full(table: str, extract):
    """A probe through the whole analysis of one table."""
    def probe(key, value):
        return extract(_report(table, key, value))
    return probe


def _policy(key, value) -> Policy:
    return dataclasses.replace(DEFAULT, **({} if key is None else {key: value}))


def _edge_dependence_counts(key, value):
    """Whether a clear (p = 1e-6) residual dependence of normalised HSIC 0.01 inside an equation counts."""
    from preflight import equation_stage
    from preflight.evidence import Tagged
    from preflight.results import CheckResult

    check = CheckResult(name="hsic", statistic=1.0, p_value=1e-6, effect=0.01, n=1000)
    return equation_stage._counts(Tagged(equation_stage.EDGE_FAMILY, "forward", check), _policy(key, value))


def _equations_take_precedence_at_2000_rows(key, value):
    from preflight import equation_stage

    return equation_stage.has_precedence(2000, _policy(key, value))


# --------------------------------------------------------------------------- screens built for one key


def _screen_flags(column: np.ndarray, extra=None):
    def probe(key, value):
        X = column[:, None] if extra is None else np.column_stack([column, extra])
        return screen_variables(X, [f"c{k}" for k in range(X.shape[1])], _policy(key, value))[0].flags
    return probe


_rng = np.random.default_rng(21)
FIFTEEN_LEVELS = np.resize(np.arange(15.0), 400)
FIFTY_LEVELS = np.resize(np.arange(50.0), 400)
LAPLACE = _rng.laplace(size=2000)
WITH_FAR_VALUE = np.append(np.linspace(-1, 1, 399), 6.0 * 1.4826 * 0.5)  # robust z of 6
AR = np.empty(3000)
AR[0] = 0.0
_noise = _rng.standard_normal(3000)
for _t in range(1, 3000):
    AR[_t] = 0.15 * AR[_t - 1] + _noise[_t]
_base = _rng.standard_normal(400)
CORRELATED = (_base, 0.9 * _base + 0.3 * _rng.standard_normal(400))  # VIF about 10 / 1.1


def _ljung_box_statistic(key, value):
    screen = screen_variables(AR[:, None], ["x"], _policy(key, value))[0]
    return [c.statistic for c in screen.checks if c.name.startswith("ljung-box")]


def _collinearity(key, value):
    X = np.column_stack([CORRELATED[0], CORRELATED[1], _rng.standard_normal(400)])
    # Descriptive: the key decides whether the note names the near-dependent columns.
    return "near-dependence among" in collinearity_check(X, ["a", "b", "c"], _policy(key, value)).note


def _copied_rows(key, value):
    rng = np.random.default_rng(22)
    X = rng.standard_normal((400, 2))
    X[:8] = X[100:108]  # 2 % of the rows repeat an earlier one
    return duplicate_rows_check(X, ["a", "b"], _policy(key, value)).passed


def _coarse_rows(key, value):
    rng = np.random.default_rng(23)
    X = np.column_stack([rng.integers(0, 150, 400), rng.integers(0, 3, 400)]).astype(float)
    return duplicate_rows_check(X, ["a", "b"], _policy(key, value)).passed


# --------------------------------------------------------------------------- the FastICA screen


def _mixed(sources: np.ndarray) -> np.ndarray:
    return sources @ np.array([[1.0, 0.4, 0.2], [0.3, 1.0, 0.5], [0.1, 0.2, 1.0]])


def _confounded(rng: np.random.Generator, n: int) -> np.ndarray:
    """x0 -> x1 -> x2 with skewed noise and a hidden cause of x0 and x2."""
    h = rng.exponential(size=n) - 1
    e = rng.exponential(size=(n, 3)) - 1
    x0 = e[:, 0] + h
    x1 = 0.6 * x0 + e[:, 1]
    return np.column_stack([x0, x1, 0.7 * x1 + e[:, 2] + h])


_ica_rng = np.random.default_rng(31)
UNIFORM_SOURCES = _mixed(_ica_rng.uniform(-1, 1, (1000, 3)))
SKEWED_SOURCES = _mixed(_ica_rng.beta(2.0, 5.0, (1000, 3)))  # skewness 0.6, excess kurtosis -0.12
CONFOUNDED = _confounded(np.random.default_rng(401), 1000)
LARGE = _mixed(_ica_rng.exponential(size=(2500, 3)))  # above hsic_exact_max_n: random features


def _ica(X, extract):
    def probe(key, value):
        return extract(structure.fastica_gaussian_components(X, _policy(key, value)))
    return probe


def _dependence_p(screen):
    return [r.p_adjusted for r in screen.dependence]


def _jobs(key, value):
    return pipeline._jobs(_policy(key, value), 100)


def _equivalence_class(key, value):
    """The CPDAG of a Gaussian random DAG whose collider decisions differ between the rules."""
    from preflight.scenarios import simulate

    scenario = simulate("gaussian", "random", p=7, n=600, seed=3)
    return pipeline._adjacency(scenario.data, scenario.names, _policy(key, value), None).cpdag.tolist()


PROBES = {
    "alpha": (0.45, _full("chain", lambda r: [c["passed"] for c in _pair_checks(r)])),
    "collider_rule": ("conservative", _equivalence_class),
    "correction": ("fdr_bh", _full("chain", lambda r: [c["p_adjusted"] for c in _pair_checks(r)])),
    "seed": (7, _ica(UNIFORM_SOURCES, lambda s: [r.statistic for r in s.dependence])),
    "require": ("equivalence-class", _full("gaussian", lambda r: r.passed)),
    "fail_on": (("gaussian-noise",), _full("gaussian", lambda r: r.data["conclusion"]["reasons"])),
    "min_rows": (500, _full("chain", lambda r: r.data["global"]["flags"])),
    "min_rows_orientation": (500, _full("chain", lambda r: r.data["global"]["flags"])),
    "discrete_max_levels": (10, _screen_flags(FIFTEEN_LEVELS)),
    "discrete_min_distinct_share": (0.2, _screen_flags(FIFTY_LEVELS)),
    "heavy_tail_excess_kurtosis": (1.0, _screen_flags(LAPLACE)),
    "outlier_robust_z": (5.0, _screen_flags(WITH_FAR_VALUE)),
    "autocorrelation_lags": (3, _ljung_box_statistic),
    "autocorrelation_min_effect": (0.3, _screen_flags(AR)),
    "rows_unordered": (True, _screen_flags(AR)),
    "vif_max": (2.0, _screen_flags(*CORRELATED)),
    "condition_number_max": (1.5, _collinearity),
    "duplicate_rows_max_share": (0.05, _copied_rows),
    "duplicate_rows_continuous_min_distinct_share": (0.3, _coarse_rows),
    "shapiro_max_n": (100, _ica(UNIFORM_SOURCES, lambda s: [r.statistic for r in s.normality[0]])),
    "nongaussian_min_abs_skew": (1.0, _ica(SKEWED_SOURCES, lambda s: s.gaussian_like)),
    "nongaussian_min_abs_excess_kurtosis": (2.0, _ica(UNIFORM_SOURCES, lambda s: s.gaussian_like)),
    "nonlinear_min_r2_gain": (0.9, _full("curved", lambda r: r.data["pairs"][0]["flags"])),
    "spline_max_df": (4, _full("curved", lambda r: [c["statistic"] for c in _pair_checks(r)
                                                    if "spline" in c["name"]])),
    "heteroscedastic_min_r2": (0.9, _full("spreading", lambda r: r.data["pairs"][0]["flags"])),
    "confounding_spread_min_r2": (0.05, _full("hidden cause", lambda r: r.data["pairs"][0]["flags"])),
    "dependence_min_hsic": (0.9, _edge_dependence_counts),
    "hidden_cause_min_bracket_depth": (0.5, _full("skewed hidden cause", lambda r: r.data["pairs"][0]["flags"])),
    "equation_precedence_min_rows": (5000, _equations_take_precedence_at_2000_rows),
    "hsic_exact_max_n": (100, _ica(UNIFORM_SOURCES, _dependence_p)),
    "hsic_max_n": (300, _ica(UNIFORM_SOURCES, _dependence_p)),
    "hsic_features": (8, _ica(LARGE, _dependence_p)),
    "hsic_permutations": (50, _ica(UNIFORM_SOURCES[:300], _dependence_p)),
    "varsortable_min_share": (0.0, _full("chain", lambda r: r.data["global"]["flags"])),
    "plot_max_points": (100, _full("chain", lambda r: len(r.samples["rows"]))),
    "jobs": (1, _jobs),
    "ica_stable_min_correlation": (1.0, _ica(UNIFORM_SOURCES, lambda s: s.stable)),
    "ica_dependence_min_effect_rows": (1e6, _ica(CONFOUNDED, lambda s: s.dependent_pairs)),
}


def test_every_key_has_a_probe():
    assert set(PROBES) == {f.name for f in dataclasses.fields(Policy)}


@pytest.mark.parametrize("key", sorted(PROBES))
def test_a_key_away_from_its_default_changes_what_it_governs(key, monkeypatch):
    monkeypatch.setattr(pipeline, "cores_available", lambda: 4)
    value, probe = PROBES[key]
    assert value != getattr(DEFAULT, key)
    Policy(**{key: value})  # admitted by the policy's own checks
    assert probe(key, value) != probe(None, None)


@pytest.mark.parametrize("correction", ["holm", "fdr_bh"])
def test_the_ica_screen_adjusts_with_the_policy_correction(correction):
    screen = structure.fastica_gaussian_components(CONFOUNDED, Policy(correction=correction))
    raw = [r.p_value for r in screen.dependence]
    assert [r.p_adjusted for r in screen.dependence] == list(adjust_p_values(raw, correction))
    normality = [r for tests in screen.normality for r in tests if r.p_value is not None]
    assert [r.p_adjusted for r in normality] == list(adjust_p_values([r.p_value for r in normality], correction))
    assert correction in screen.checks[0].note
