"""Simulation with known ground truth: the acceptance figures of the battery,
the structural view and the rules layer.

Replicates run in two worker processes (the CI machine has two cores).
Counts are seeded; every threshold is the share the issue states, applied to
the number of replicates run here (fewer than the validity study in
benchmarks/validity.py, to keep the suite within its time budget).
"""

import numpy as np
import pandas as pd
import pytest

from preflight.scenarios import simulate

from conftest import judged_pair, pool_map


def _pair_finding(args):
    family, seed = args
    rng = np.random.default_rng(seed)
    n = 1000
    draw = {
        "uniform": lambda: rng.uniform(-np.sqrt(3), np.sqrt(3), n),
        "laplace": lambda: rng.laplace(0, 1 / np.sqrt(2), n),
        "gaussian": lambda: rng.normal(size=n),
    }[family]
    x = draw()
    y = 0.8 * x + 0.6 * draw()
    finding = judged_pair(x, y)
    orientation = finding.lingam_orientation
    return (orientation if orientation != "undetermined" else finding.anm_orientation), finding.flags


def _mechanism_finding(args):
    kind, seed = args
    rng = np.random.default_rng(seed)
    n = 1000
    x = rng.uniform(-np.sqrt(3), np.sqrt(3), n)
    if kind == "tanh":
        y = np.tanh(2 * x) + 0.3 * rng.normal(size=n)
    else:
        y = 0.8 * x + np.abs(x) * rng.normal(size=n)
    return judged_pair(x, y).flags


_pool_map = pool_map


@pytest.mark.parametrize("family", ["uniform", "laplace"])
def test_non_gaussian_pairs_are_oriented(family):
    # Issue: at n = 1000, uniform- or Laplace-noise pairs oriented correctly in >= 95 %.
    replicates = 100
    results = _pool_map(_pair_finding, [(family, 1000 + k) for k in range(replicates)])
    correct = sum(orientation == "x->y" for orientation, _ in results)
    wrong = sum(orientation == "y->x" for orientation, _ in results)
    assert correct >= 0.95 * replicates, (correct, results)
    assert wrong == 0


def test_gaussian_pairs_stay_undetermined():
    # Issue: Gaussian pairs come out undetermined with gaussian-noise in >= 90 %.
    replicates = 100
    results = _pool_map(_pair_finding, [("gaussian", 2000 + k) for k in range(replicates)])
    hits = sum(o == "undetermined" and "gaussian-noise" in f for o, f in results)
    assert hits >= 0.90 * replicates, results
    assert sum(o != "undetermined" for o, _ in results) <= 0.05 * replicates


@pytest.mark.parametrize("kind,flag", [("tanh", "nonlinear"), ("scaled", "heteroscedastic")])
def test_nonlinear_and_heteroscedastic_are_flagged(kind, flag):
    # Issue: nonlinear and heteroscedastic raised on tanh and |x|-scaled noise in >= 90 %.
    replicates = 100
    results = _pool_map(_mechanism_finding, [(kind, 3000 + k) for k in range(replicates)])
    assert sum(flag in flags for flags in results) >= 0.90 * replicates, results


def _table_run(args):
    kind, shape, p, n, seed, drop = args
    import preflight

    scenario = simulate(kind, shape, p=p, n=n, seed=seed)
    frame = pd.DataFrame(scenario.data, columns=scenario.names)
    if drop is not None:
        frame = frame.drop(columns=[scenario.names[drop]])
    report = preflight.check(frame, keep_samples=False, jobs=1)
    return scenario, report.to_dict()


def _oriented_correctly(scenario, data) -> bool:
    truth = {frozenset(e): e for e in scenario.true_edges()}
    adjacent = [p for p in data["pairs"] if p["adjacent"]]
    if {frozenset((p["x"], p["y"])) for p in adjacent} != set(truth):
        return False
    for p in adjacent:
        cause, effect = truth[frozenset((p["x"], p["y"]))]
        wanted = "x->y" if p["x"] == cause else "y->x"
        if p["orientation"] != wanted:
            return False
    return True


@pytest.mark.parametrize("shape", ["chain", "collider"])
def test_linear_non_gaussian_tables_give_the_top_rung(shape):
    # Issue: chains and colliders at n = 2000 give linear-non-gaussian with every
    # edge correctly oriented in >= 95 % of replicates.
    replicates = 20
    runs = _pool_map(_table_run, [("linear-non-gaussian", shape, 4, 2000, 50 + k, None) for k in range(replicates)])
    good = sum(d["conclusion"]["level"] == "linear-non-gaussian" and _oriented_correctly(s, d) for s, d in runs)
    assert good >= 0.95 * replicates, good


def test_gaussian_chain_gives_equivalence_class_only():
    replicates = 8
    runs = _pool_map(_table_run, [("gaussian", "chain", 4, 2000, 70 + k, None) for k in range(replicates)])
    for _, data in runs:
        assert data["conclusion"]["level"] == "equivalence-class"
        assert all(p["orientation"] == "undetermined" for p in data["pairs"] if p["adjacent"])


def test_mixed_noise_chain_orients_the_non_gaussian_part():
    # a -> b -> c -> d with Gaussian noise at a and b: a - b undetermined, b -> c and c -> d oriented.
    replicates = 8
    runs = _pool_map(_table_run, [("mixed", "chain", 4, 2000, 90 + k, None) for k in range(replicates)])
    good = 0
    for scenario, data in runs:
        order = [int(np.flatnonzero(scenario.dag.sum(axis=0) == 0)[0])]
        while len(order) < 4:
            order.append(int(np.flatnonzero(scenario.dag[order[-1]])[0]))
        a, b, c, d = (scenario.names[k] for k in order)
        pairs = {frozenset((p["x"], p["y"])): p for p in data["pairs"]}

        def arrow(u, v):
            p = pairs[frozenset((u, v))]
            return p["orientation"] == ("x->y" if p["x"] == u else "y->x")

        good += (data["conclusion"]["level"] == "equivalence-class"
                 and pairs[frozenset((a, b))]["orientation"] == "undetermined"
                 and arrow(b, c) and arrow(c, d))
    assert good >= replicates - 1, good


def test_hidden_common_cause_gives_latent_class():
    # Issue: a hidden common cause gives latent-equivalence-class in >= 80 %.
    replicates = 10
    runs = _pool_map(_table_run, [("hidden-confounder", "chain", 4, 2000, 110 + k, None) for k in range(replicates)])
    hits = sum(d["conclusion"]["level"] == "latent-equivalence-class" for _, d in runs)
    assert hits >= 0.8 * replicates, hits


def test_observed_common_cause_is_not_confounding_but_dropped_one_is():
    # z -> x, z -> y: with z in the file x - y is not confounding-suspected; with z dropped it is (>= 80 %).
    replicates = 10
    kept = _pool_map(_table_run, [("linear-non-gaussian", "fork", 3, 2000, 130 + k, None) for k in range(replicates)])
    dropped = []
    for scenario, _ in kept:
        root = int(np.flatnonzero(scenario.dag.sum(axis=0) == 0)[0])
        dropped.append((scenario, root))
    dropped_runs = _pool_map(_table_run, [("linear-non-gaussian", "fork", 3, 2000, 130 + k, root)
                                          for k, (_, root) in enumerate(dropped)])
    for scenario, data in kept:
        root = scenario.names[int(np.flatnonzero(scenario.dag.sum(axis=0) == 0)[0])]
        for p in data["pairs"]:
            if root not in (p["x"], p["y"]):
                assert "confounding-suspected" not in p["flags"], p
    hits = sum("confounding-suspected" in d["pairs"][0]["flags"] for _, d in dropped_runs)
    assert hits >= 0.8 * replicates, hits
    # Where the flag is missed, the confounded pair is still not oriented, nor the table put on the top rung
    # (seed 130 was, on a weaker side with a significant spread change below its floor).
    oriented = [d["pairs"][0] for _, d in dropped_runs if d["pairs"][0]["orientation"] != "undetermined"]
    assert not oriented, oriented
    assert not [d["conclusion"]["level"] for _, d in dropped_runs if d["conclusion"]["level"] == "linear-non-gaussian"]


def test_twenty_five_rows_never_orient():
    for seed in range(5):
        _, data = _table_run(("linear-non-gaussian", "chain", 3, 25, 150 + seed, None))
        assert data["conclusion"]["level"] == "none"
        assert all(p["basis"] is None for p in data["pairs"])


def test_two_gaussian_noises_raise_the_global_flag_one_does_not():
    import preflight

    rng = np.random.default_rng(160)
    n = 2000
    a = rng.normal(size=n)
    b = 0.8 * a + 0.6 * rng.normal(size=n)
    c = 0.8 * b + 0.6 * rng.uniform(-1.7, 1.7, n)
    d = 0.8 * c + 0.6 * rng.uniform(-1.7, 1.7, n)
    two = preflight.check(pd.DataFrame({"a": a, "b": b, "c": c, "d": d}), keep_samples=False).to_dict()
    assert "multiple-gaussian-components" in two["global"]["flags"]
    b1 = 0.8 * a + 0.6 * rng.uniform(-1.7, 1.7, n)
    c1 = 0.8 * b1 + 0.6 * rng.uniform(-1.7, 1.7, n)
    one = preflight.check(pd.DataFrame({"a": a, "b": b1, "c": c1}), keep_samples=False).to_dict()
    assert "multiple-gaussian-components" not in one["global"]["flags"]
