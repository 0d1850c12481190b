"""Verdicts do not depend on the column order or on the units.

Level, orientations (mapped to the same pair of names) and flags must be the
same under any permutation of the columns, under rescaling one column or all
of them by 10^k for k from -200 to 200, and under a shift.  Five table kinds
from ``preflight.scenarios``: chain, collider, random DAG, mixed noise,
nonlinear; small tables and one process so the file stays fast.

``varsortable`` is left out of the unit comparison on purpose: it asks
whether the input's units happen to order the variances along the edges, so
it must change with the units; it only adds a caution (checked below).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import preflight
from preflight.scenarios import simulate

TABLES = {
    "chain": dict(kind="linear-non-gaussian", shape="chain", p=4, n=400, seed=3),
    "collider": dict(kind="linear-non-gaussian", shape="collider", p=4, n=400, seed=4),
    "random": dict(kind="linear-non-gaussian", shape="random", p=6, n=400, seed=5),
    "mixed": dict(kind="mixed", shape="random", p=5, n=400, seed=6),
    "nonlinear": dict(kind="nonlinear", shape="chain", p=4, n=300, seed=7),
}
NAMES = ("kiln_temp", "belt speed", "Dryer", "zone_2", "ash %", "air")
UNIT_FREE_GLOBAL = lambda flags: sorted(f for f in flags if f != "varsortable")  # noqa: E731


def _frame(kind: str) -> pd.DataFrame:
    s = simulate(**TABLES[kind])
    # names that are not already in sorted order, so the canonical order is not the input order
    return pd.DataFrame(s.data, columns=list(NAMES[:s.data.shape[1]]))


def verdict(frame: pd.DataFrame) -> tuple:
    """Level, pass, every pair's orientation as (cause, effect) names, and every flag, keyed by names."""
    r = preflight.check(frame, seed=1, jobs=1, keep_samples=False).data
    pairs = {}
    for p in r["pairs"]:
        key = frozenset((p["x"], p["y"]))
        if p["orientation"] == "x->y":
            edge = (p["x"], p["y"])
        elif p["orientation"] == "y->x":
            edge = (p["y"], p["x"])
        else:
            edge = p["orientation"]
        pairs[key] = (p["adjacent"], edge, p["basis"], tuple(sorted(p["flags"])), frozenset(p["conditioning"]))
    variables = {v["name"]: tuple(sorted(v["flags"])) for v in r["variables"]}
    return (r["conclusion"]["level"], r["conclusion"]["passed"], pairs, variables,
            UNIT_FREE_GLOBAL(r["global"]["flags"]))


_REFERENCE: dict[str, tuple] = {}


def reference(kind: str) -> tuple:
    if kind not in _REFERENCE:
        _REFERENCE[kind] = verdict(_frame(kind))
    return _REFERENCE[kind]


@pytest.mark.parametrize("kind", sorted(TABLES))
def test_same_verdict_in_random_column_orders(kind):
    frame = _frame(kind)
    rng = np.random.default_rng(sum(map(ord, kind)))
    for _ in range(8):
        order = list(rng.permutation(frame.columns))
        assert verdict(frame[order]) == reference(kind), order


def test_report_lists_pairs_in_the_input_order_with_the_orientation_mapped():
    frame = _frame("chain")
    reversed_frame = frame[list(reversed(frame.columns))]
    r = preflight.check(reversed_frame, seed=1, jobs=1, keep_samples=False).data
    columns = list(reversed_frame.columns)
    assert r["input"]["columns"] == columns
    assert [v["name"] for v in r["variables"]] == columns
    expected_pairs = [(columns[i], columns[j]) for i in range(len(columns)) for j in range(i + 1, len(columns))]
    assert [(p["x"], p["y"]) for p in r["pairs"]] == expected_pairs
    assert any(p["orientation"] != "undetermined" for p in r["pairs"])


@pytest.mark.parametrize("kind", sorted(TABLES))
def test_same_verdict_when_one_column_or_all_are_rescaled(kind):
    frame = _frame(kind)
    rng = np.random.default_rng(100 + sum(map(ord, kind)))
    for k in (-200, -81, -12, 78, 200, int(rng.integers(-200, 201))):
        everything = frame * 10.0 ** k
        assert verdict(everything) == reference(kind), k
        one = frame.copy()
        column = frame.columns[int(rng.integers(frame.shape[1]))]
        one[column] = frame[column] * 10.0 ** k
        assert verdict(one) == reference(kind), (k, column)


@pytest.mark.parametrize("kind", sorted(TABLES))
def test_same_verdict_when_columns_are_shifted(kind):
    frame = _frame(kind)
    shifted = frame + np.array([1e3, -250.0, 7.5, -1e4, 42.0, -3.0][:frame.shape[1]]) * frame.std().to_numpy()
    assert verdict(shifted) == reference(kind)


def test_extreme_magnitudes_run_without_warnings(recwarn):
    frame = _frame("chain")
    for scale in (1e-300, 5e-324 * 2**40, 1e300):
        f = frame / frame.abs().max() * scale
        assert verdict(f)[0] == reference("chain")[0]
    assert not [w for w in recwarn if issubclass(w.category, RuntimeWarning)]


def test_varsortability_is_only_a_caution():
    from importlib import resources

    import tomllib

    rules = tomllib.loads(resources.files("preflight").joinpath("rules.toml").read_text())
    rows = [row for row in rules["rule"] if "varsortable" in row.get("when", [])]
    assert rows and all(not row["rules_out"] and row["kind"] == "caution" for row in rows)


@pytest.mark.parametrize("kind", ["linear-non-gaussian", "gaussian", "mixed", "nonlinear"])
def test_class_construction_does_not_depend_on_the_column_order(kind):
    # Without the canonical order of the pipeline: the graph step itself.
    from preflight import graph

    for seed in range(4):
        X = simulate(kind, shape="random", p=8, n=800, seed=seed).data
        skeleton = graph.pc_stable_skeleton(X)
        cpdag = graph.cpdag_from_all_separating_sets(X, skeleton.adjacency).cpdag
        rng = np.random.default_rng(seed)
        for _ in range(6):
            perm = rng.permutation(8)
            back = np.argsort(perm)
            permuted = graph.pc_stable_skeleton(X[:, perm])
            assert np.array_equal(np.asarray(permuted.adjacency)[np.ix_(back, back)], skeleton.adjacency)
            other = graph.cpdag_from_all_separating_sets(X[:, perm], permuted.adjacency).cpdag
            assert np.array_equal(other[np.ix_(back, back)], cpdag), (kind, seed, perm)


def test_conservative_rule_on_oracle_separation_gives_the_true_class():
    # Large n, linear Gaussian: collider and chain triples are decided as the DAG says.
    from preflight import graph

    rng = np.random.default_rng(0)
    n = 20000
    a, b = rng.normal(size=n), rng.normal(size=n)
    c = a + b + rng.normal(size=n)          # a -> c <- b
    d = c + rng.normal(size=n)              # c -> d
    X = np.column_stack([a, b, c, d])
    skeleton = graph.pc_stable_skeleton(X, alpha=0.01)
    result = graph.cpdag_from_all_separating_sets(X, skeleton.adjacency, alpha=0.01)
    dag = np.zeros((4, 4), dtype=int)
    dag[0, 2] = dag[1, 2] = dag[2, 3] = 1
    assert np.array_equal(result.cpdag, graph.dag_to_cpdag(dag))
    assert result.ambiguous == ()


@pytest.mark.parametrize("method", ["holm", "fdr_bh"])
def test_multiplicity_adjustment_follows_the_p_values_not_their_order(method):
    # Ties included: equal p-values get equal adjusted values, whatever their positions.
    from preflight.evidence import adjust_p_values

    rng = np.random.default_rng(11)
    for _ in range(200):
        m = int(rng.integers(1, 30))
        p = rng.choice(np.round(rng.uniform(0, 0.2, 6), 3), size=m)
        adjusted = adjust_p_values(p, method)
        perm = rng.permutation(m)
        assert np.array_equal(adjust_p_values(p[perm], method), adjusted[perm])
        for value in np.unique(p):
            assert np.unique(adjusted[p == value]).size == 1


@pytest.mark.parametrize("method", ["holm", "fdr_bh"])
def test_groups_adjusted_by_key_get_the_numbers_of_the_listed_groups(method):
    from preflight.evidence import Tagged, adjust_families, adjust_named_groups
    from preflight.results import CheckResult

    rng = np.random.default_rng(5)

    def tagged(family):
        return Tagged(family, "pair", CheckResult(name="t", statistic=0.0, p_value=float(rng.uniform(0, 0.1))))

    groups = {("pair", k): [tagged("a"), tagged("b")] for k in range(6)}
    groups[("table", "")] = [tagged("a"), Tagged(None, "global", CheckResult(name="u", statistic=1.0, p_value=None))]
    listed = adjust_families(list(groups.values()), method)
    keyed = adjust_named_groups(groups, method)
    assert list(keyed) == list(groups)
    assert list(keyed.values()) == listed
    assert any(t.result.p_adjusted > t.result.p_value for group in keyed.values() for t in group
               if t.result.p_value is not None)
    assert keyed[("table", "")][1].result.p_adjusted is None
    reversed_keys = adjust_named_groups(dict(reversed(list(groups.items()))), method)
    assert all(reversed_keys[key] == keyed[key] for key in groups)


def test_reports_of_columns_near_the_ends_of_the_float_range_render_without_warnings():
    import warnings

    from preflight.report.html import render_html
    from preflight.report.markdown import render_markdown

    frame = _frame("chain").iloc[:, :3]
    frame.iloc[:, 0] = frame.iloc[:, 0] / frame.iloc[:, 0].abs().max() * 1.7e308
    frame.iloc[:, 1] = frame.iloc[:, 1] / frame.iloc[:, 1].abs().max() * 4e-320
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        report = preflight.check(frame, seed=1, jobs=1)
        html = render_html(report)
        render_markdown(report)
    assert report.data["conclusion"]["edges_total"] >= 1
    assert "<svg" in html
