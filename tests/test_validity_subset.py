"""A fast subset of the validity study (benchmarks/validity.py), run by plain pytest.

The study's own functions are imported from the script, so the subset and
the full run share one implementation: the same nulls and tests for the
calibration, the same scoring of a report against a scenario's truth, the
same headline arithmetic.  The full study and its tables are in
benchmarks/RESULTS.md.
"""

from __future__ import annotations

import importlib.util
import sys
from itertools import combinations
from pathlib import Path

import numpy as np
import pytest

ROOT = Path(__file__).resolve().parents[1]


def _load_validity():
    name = "preflight_validity_study"
    if name in sys.modules:
        return sys.modules[name]
    spec = importlib.util.spec_from_file_location(name, ROOT / "benchmarks" / "validity.py")
    module = importlib.util.module_from_spec(spec)
    sys.modules[name] = module  # dataclasses look their module up while the class is built
    spec.loader.exec_module(module)
    return module


validity = _load_validity()

CALIBRATION_REPLICATES = 500
SEED = 20261203

# Tests that cost at most a few ms per replicate at n = 200; the full study covers the rest (the
# distance-correlation t-test is documented as liberal for two scalars and is left to the study).
CHEAP = ("Shapiro-Wilk", "Anderson-Darling", "Jarque-Bera", "D'Agostino-Pearson", "Ramsey RESET", "spline F-test",
         "Breusch-Pagan (Koenker)", "White", "HSIC gamma", "Pearson (Fisher z)", "Spearman", "Ljung-Box",
         "noise dependence (HSIC)")


def _cheap_cases(one_per_test: bool = False):
    out = []
    seen = set()
    for case in validity.test_cases():
        if case.name.startswith(CHEAP) and not (one_per_test and case.name in seen):
            seen.add(case.name)
            out.append(case)
    return out


@pytest.mark.parametrize("case", _cheap_cases(), ids=lambda c: f"{c.name} | {c.null_label}")
def test_rejection_rate_under_the_null_lies_in_the_binomial_99_interval(case):
    row = validity.calibrate(case, 200, CALIBRATION_REPLICATES, SEED)
    assert row["replicates"] == CALIBRATION_REPLICATES  # every replicate produced a p-value
    assert row["low"] <= row["rejections"] <= row["high"], row


def test_power_exceeds_alpha_under_the_alternative():
    # The power side of the same machinery: each test rejects its stated alternative at least four
    # times as often as alpha (Breusch-Pagan's linear design is weak against the generator's
    # symmetric spread, hence the modest bar).
    for case in _cheap_cases(one_per_test=True):
        n = 2000 if case.name.startswith(("Pearson", "Spearman", "Ljung-Box")) else 500
        rejections, valid = validity.rejection_count(case, n, 60, SEED, "alternative")
        assert valid == 60
        assert rejections / valid >= 4 * validity.ALPHA, (case.name, rejections)


def test_binomial_interval_matches_scipy_and_catches_a_broken_test():
    from scipy import stats

    low, high = validity.binomial_interval(500)
    assert (low, high) == tuple(int(v) for v in stats.binom.interval(0.99, 500, 0.05))
    broken = validity.TestCase("always 0.01", "none", lambda d, s: 0.01, lambda rng, n: rng.normal(size=n),
                               "N(0, 1)", (50,), lambda rng, n: rng.normal(size=n), "same", (50,))
    row = validity.calibrate(broken, 50, 100, SEED)
    assert row["rejections"] == 100 and not row["inside"]


def test_scoring_counts_reversed_spurious_and_missed_edges():
    from preflight.scenarios import simulate

    scenario = simulate("linear-non-gaussian", "chain", 3, 60, "uniform", 5)
    spec = validity.Spec("linear-non-gaussian", "chain", "uniform", 3, 60, 0, 5)
    (a, b), (c, d) = [tuple(scenario.names.index(v) for v in edge) for edge in scenario.true_edges()]
    names = scenario.names
    spurious = {frozenset(p) for p in combinations(range(3), 2)} - {frozenset((a, b)), frozenset((c, d))}
    s1, s2 = sorted(next(iter(spurious)))

    def pair(i, j, adjacent, cause=None):
        x, y = (i, j) if i < j else (j, i)
        orientation = "undetermined" if cause is None else ("x->y" if cause == x else "y->x")
        return {"x": names[x], "y": names[y], "adjacent": adjacent, "orientation": orientation, "flags": []}

    report = {
        "conclusion": {"level": "linear-non-gaussian", "rules_fired": []},
        "pairs": [pair(a, b, True, cause=b),     # reversed
                  pair(c, d, True, cause=None),  # missed
                  pair(s1, s2, True, cause=s1)],  # spurious, oriented
        "variables": [{"name": v, "flags": []} for v in names],
        "global": {"flags": []},
    }
    scored = validity.score(scenario, spec, report)
    counts = scored["counts"]
    assert counts["reversed"] == 1 and counts["missed"] == 1 and counts["spurious_oriented"] == 1
    assert validity.false_orientations(counts) == (2, 3)
    assert scored["correct_level"]


def _run_headline_subset():
    # A handful of seeded scenarios on the cheap end of the grid (p = 4, n = 1000): the first
    # headline figure on linear non-Gaussian chains and colliders, the second on Gaussian and
    # autocorrelated chains.  Seeds come from the study's own derivation, not chosen by outcome.
    specs = []
    for kind, shape in (("linear-non-gaussian", "chain"), ("linear-non-gaussian", "collider"),
                        ("gaussian", "chain"), ("autocorrelated", "chain")):
        for r in range(2):
            noise = "gaussian" if kind == "gaussian" else validity.NONGAUSSIAN_FAMILIES[r]
            seed = validity.derived_seed(SEED, 0, validity.SHAPES.index(shape), 1000, r, 99)
            specs.append(validity.Spec(kind, shape, noise, 4, 1000, r, seed))
    records = [validity.run_spec(spec) for spec in specs]
    return records, validity.headline(records)


@pytest.fixture(scope="module")
def headline_subset():
    return _run_headline_subset()


def test_subset_runs_without_errors(headline_subset):
    records, _ = headline_subset
    assert [r.get("error") for r in records] == [None] * len(records)


def test_headline_orientation_is_consistent_with_the_two_percent_target(headline_subset):
    # Rejected when the count of wrong orientations is too high for a rate of 2 % (exact one-sided
    # binomial test at the 1 % level): with ~20 edges, three or more wrong ones fail.
    _, figures = headline_subset
    wrong, edges = figures["orientation"]["wrong"], figures["orientation"]["edges"]
    assert edges >= 10
    assert validity.consistent_with_target(wrong, edges), figures["orientation"]


def test_headline_lingam_conclusion_is_consistent_with_the_two_percent_target(headline_subset):
    _, figures = headline_subset
    v = figures["lingam_conclusion"]
    assert v["replicates"] == 4
    assert validity.consistent_with_target(v["hits"], v["replicates"]), v


def test_target_check_rejects_rates_well_above_two_percent():
    assert validity.consistent_with_target(0, 20)
    assert not validity.consistent_with_target(3, 20)
    assert not validity.consistent_with_target(40, 1000)
    assert validity.consistent_with_target(20, 1000)
    assert np.isclose(validity.TARGET, 0.02)


def test_grid_options_take_the_new_shapes_and_kinds_and_large_tables():
    from preflight.scenarios import WIDE_PER_VARIABLE

    grid = validity.grid_from_options(validity.full_grid(16), "linear-non-gaussian,hidden-cause-non-adjacent",
                                      "chain,pair,several-parents", "1000,2000:3,100000", 16)
    assert grid.ns == (1000, 2000, 100000)
    assert grid.replicates == {1000: 16, 2000: 3, 100000: 1}
    specs = validity.make_specs(grid, SEED)
    combos = {(s.kind, s.shape) for s in specs}
    # a chain has no two variables without a directed path: that combination is not drawn
    assert ("hidden-cause-non-adjacent", "chain") not in combos
    assert ("hidden-cause-non-adjacent", "pair") in combos and ("linear-non-gaussian", "chain") in combos
    several = [s for s in specs if s.shape == "several-parents"]
    assert {s.noise for s in several} == {WIDE_PER_VARIABLE}
    assert {s.p for s in several} == set(range(5, 16))  # 16 replicates at n = 1000 span 5 to 15 variables
    assert {s.p for s in specs if s.shape == "pair"} == {2}
    # the default grid keeps its kinds and shapes, so its seeds and figures are unchanged
    assert "hidden-cause-non-adjacent" not in validity.full_grid(16).kinds
    assert validity.full_grid(16).shapes == ("chain", "fork", "collider", "random")
    for kinds, shapes, ns in (("no-such-kind", None, None), (None, "ring", None), (None, None, "1000:x"),
                              (None, None, "10"), (None, None, "1000:0")):
        with pytest.raises(ValueError):
            validity.grid_from_options(validity.full_grid(16), kinds, shapes, ns, 16)


def test_bad_option_exits_2_with_one_line(capsys):
    assert validity.main(["--kinds", "no-such-kind", "--skip-calibration", "--no-write"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "no-such-kind" in err[0]


def _hidden_cause_record():
    from dataclasses import asdict

    from preflight.scenarios import simulate

    spec = validity.Spec("hidden-cause-non-adjacent", "fork", "uniform", 4, 60, 0, 3)
    scenario = simulate(spec.kind, spec.shape, spec.p, spec.n, spec.noise, spec.seed)
    names = scenario.names
    edges = {frozenset(scenario.names.index(v) for v in e) for e in scenario.true_edges()}
    hidden = frozenset(scenario.hidden[0])
    first_edge = sorted(tuple(sorted(e)) for e in edges)[0]
    pairs = []
    for i, j in combinations(range(4), 2):
        key = frozenset((i, j))
        flags = ["confounding-suspected"] if key == hidden or (i, j) == first_edge else []
        pairs.append({"x": names[i], "y": names[j], "adjacent": key in edges or key == hidden,
                      "orientation": "undetermined", "flags": flags})
    report = {"conclusion": {"level": "latent-equivalence-class", "rules_fired": []}, "pairs": pairs,
              "variables": [{"name": v, "flags": []} for v in names], "global": {"flags": []}}
    return spec, {"spec": asdict(spec), "check_seconds": 0.1, **validity.score(scenario, spec, report)}, len(edges)


def test_hidden_cause_of_non_adjacent_pair_is_scored_as_hit_there_and_false_alarm_elsewhere():
    _, record, true_edges = _hidden_cause_record()
    assert true_edges == 3  # a fork of four variables
    hits, expected, alarms, clean = record["flags"]["confounding-suspected"]
    assert (hits, expected) == (1, 1)
    assert (alarms, clean) == (1, true_edges)  # the other adjacent pairs are the true edges, one flagged
    assert record["counts"]["hidden_flagged"] == 1 and record["counts"]["hidden_adjacent"] == 1
    assert record["counts"]["confounding_on_true_edges"] == 1
    assert record["correct_level"]


def test_markdown_gives_the_hidden_pair_and_several_parents_figures_by_n():
    from dataclasses import asdict

    from preflight.scenarios import WIDE_PER_VARIABLE, simulate

    _, hidden_record, _ = _hidden_cause_record()
    spec = validity.Spec("linear-non-gaussian", "several-parents", WIDE_PER_VARIABLE, 5, 80, 0, 9)
    scenario = simulate(spec.kind, spec.shape, spec.p, spec.n, spec.noise, spec.seed)
    dag = scenario.dag

    def pair(i, j):  # the truth itself, as a report would give it
        orientation = "x->y" if dag[i, j] else ("y->x" if dag[j, i] else "undetermined")
        return {"x": scenario.names[i], "y": scenario.names[j], "adjacent": bool(dag[i, j] or dag[j, i]),
                "orientation": orientation, "flags": []}

    report = {"conclusion": {"level": "linear-non-gaussian", "rules_fired": []},
              "pairs": [pair(i, j) for i, j in combinations(range(5), 2)],
              "variables": [{"name": v, "flags": []} for v in scenario.names], "global": {"flags": []}}
    several = {"spec": asdict(spec), "check_seconds": 0.2, **validity.score(scenario, spec, report)}
    meta = {"command": "x", "machine": "m", "date": "d", "wall": "w", "version": "v", "commit": "c", "timing": ""}
    text = validity.markdown([hidden_record, several], "grid", [], [], [], meta, ROOT)
    edges = int(scenario.dag.sum())
    assert "### Hidden common causes: the confounded pair, by kind, shape and n" in text
    assert "| hidden-cause-non-adjacent | fork | 60 | 1 | 100.0 % (1/1) | 100.0 % (1/1) | 33.3 % (1/3) |" in text
    assert "| hidden-cause-non-adjacent | 60 | 1 | 100.0 % (1/1) | 100.0 % (1/1) | 33.3 % (1/3) |" in text
    assert "### Several parents per child, wide noise families and weights: by kind and n" in text
    assert (f"| linear-non-gaussian | 80 | 1 | 100.0 % (1/1) | 100.0 % (1/1) | 0.0 % (0/{edges}) | "
            f"0.0 % (0/{edges}) |") in text


def test_no_write_leaves_the_figures_directory_alone(tmp_path, capsys):
    figures = tmp_path / "figures"
    assert validity.main(["--kinds", "linear-non-gaussian", "--shapes", "pair", "--ns", "200:1",
                          "--skip-calibration", "--no-write", "--figures", str(figures)]) == 0
    assert "linear-non-gaussian" in capsys.readouterr().out
    assert not figures.exists() or not any(figures.iterdir())
