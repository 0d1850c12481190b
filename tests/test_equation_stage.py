"""Edges judged inside their structural equations, through the whole analysis (preflight.check)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import preflight
from preflight.report.identity import decode


def _pair(report) -> dict:
    (pair,) = [p for p in report.data["pairs"] if p["adjacent"]]
    return pair


def _variable(report, name: str) -> dict:
    (entry,) = [v for v in report.data["variables"] if v["name"] == name]
    return entry


def _collider(n: int, seed: int) -> pd.DataFrame:
    """a -> c <- b with exponential and uniform noises: c's residual on a alone still holds b."""
    rng = np.random.default_rng(seed)
    a = rng.exponential(size=n) - 1.0
    b = rng.uniform(-1.7, 1.7, n)
    return pd.DataFrame({"a": a, "b": b, "c": 0.9 * a + 0.8 * b + 0.5 * (rng.exponential(size=n) - 1.0)})


def test_a_child_with_two_parents_is_judged_on_both():
    # Regressing c on a alone leaves b in the residual, which reads as nonlinearity or changing spread;
    # inside c's equation (c on a and b) both edges are oriented into c and no mechanism flag is raised.
    report = preflight.check(_collider(3000, 5), jobs=1, keep_samples=False)
    pairs = {(p["x"], p["y"]): p for p in report.data["pairs"]}
    assert pairs[("a", "c")]["orientation"] == "x->y" and pairs[("b", "c")]["orientation"] == "x->y"
    for key in (("a", "c"), ("b", "c")):
        assert not {"nonlinear", "heteroscedastic", "confounding-suspected"} & set(pairs[key]["flags"]), pairs[key]
    assert not pairs[("a", "b")]["adjacent"]
    names = [c["name"] for c in _variable(report, "c")["checks"]]
    assert "ramsey reset (equation: c on a, b)" in names and "white (equation: c on a, b)" in names


def test_hypothesised_graph_gives_the_equations_their_parents(tmp_path):
    # With --graph, an equation's parents are the graph's, not the estimated order's.
    graph = tmp_path / "graph.txt"
    graph.write_text("b -> a\nc -> a\n")
    report = preflight.check(_collider(1000, 6), graph=str(graph), jobs=1, keep_samples=False)
    names = [c["name"] for c in _variable(report, "a")["checks"]]
    assert "ramsey reset (equation: a on b, c)" in names
    assert not any("(equation: c on" in c["name"] for c in _variable(report, "c")["checks"])


@pytest.mark.parametrize("seed", range(6))
def test_two_variables_with_only_a_skewed_hidden_cause_are_flagged(seed):
    # Neither a line nor a spline leaves an independent residual in either direction: confounding-suspected,
    # not only nonlinear (before the equations: nonlinear in 3 of 3 seeds, never confounding-suspected).
    rng = np.random.default_rng(400 + seed)
    n = 2000
    hidden = rng.exponential(size=n)
    frame = pd.DataFrame({"a": hidden + 0.5 * rng.laplace(size=n), "b": 0.7 * hidden + 0.5 * rng.laplace(size=n)})
    pair = _pair(preflight.check(frame, jobs=1, keep_samples=False))
    assert "confounding-suspected" in pair["flags"] and pair["orientation"] == "undetermined", pair["flags"]


def test_edge_tests_do_not_depend_on_the_worker_count(monkeypatch):
    from preflight import pipeline

    monkeypatch.setattr(pipeline, "POOL_MIN_WORK", 1)  # start the workers on a small table
    frame = _collider(2000, 7)
    one = preflight.check(frame, jobs=1, keep_samples=False).to_dict()
    two = preflight.check(frame, jobs=2, keep_samples=False).to_dict()
    for report in (one, two):
        report.pop("generated_at")
        report["settings"].pop("jobs")
    assert one == two


def test_an_edge_of_a_hypothesised_graph_that_the_equations_do_not_support_is_left_undetermined(tmp_path):
    # a -> b -> d and a -> c: c and d are correlated through a and b but not given them.  The graph adds
    # c -> d; the pair battery partials out only the parents c and d share (none) and keeps the association,
    # while inside the equations (given a and b) the two are uncorrelated, so no rung orients the edge,
    # not even the class.  The other edges keep their orientation.
    rng = np.random.default_rng(11)
    n = 3000
    a = rng.exponential(size=n) - 1.0
    b = 0.8 * a + 0.6 * rng.laplace(size=n)
    c = 0.9 * a + 0.5 * (rng.exponential(size=n) - 1.0)
    d = 0.7 * b + rng.uniform(-1.2, 1.2, n)
    graph = tmp_path / "graph.txt"
    graph.write_text("a -> b\na -> c\nb -> d\nc -> d\n")
    report = preflight.check(pd.DataFrame({"a": a, "b": b, "c": c, "d": d}), graph=str(graph), jobs=1,
                             keep_samples=False)
    pairs = {(p["x"], p["y"]): p for p in report.data["pairs"]}
    spurious = pairs[("c", "d")]
    assert spurious["adjacent"] and spurious["orientation"] == "undetermined" and spurious["basis"] is None
    (partial,) = [k for k in spurious["checks"] if k["name"].startswith("partial correlation in the equations")]
    assert partial["p_adjusted"] >= 0.05 and abs(partial["effect"]) < 0.05
    # A saved report's reader recovers the check's fields from its name.
    assert decode(dict(partial), "pair", ("c", "d")) == partial.identity
    assert partial.identity.family == "equation partial correlation"
    assert "edge-without-support-in-equations" in report.data["conclusion"]["rules_fired"]
    assert report.data["conclusion"]["level"] == "linear-non-gaussian"
    for key in (("a", "b"), ("a", "c"), ("b", "d")):
        assert pairs[key]["orientation"] == "x->y", pairs[key]


def test_gaussian_noise_of_an_edge_is_judged_on_its_residuals_in_the_equations(tmp_path):
    # x and y each have six uniform parents and a bimodal noise.  A pair regression's residual holds the
    # other parents' sum, which looks Gaussian to every normality test; inside the equations the residuals
    # are the bimodal noises, so the edge is not called Gaussian and is oriented (before: gaussian-noise,
    # undetermined).
    rng = np.random.default_rng(31)
    n, k = 2000, 6

    def bimodal():
        return (rng.choice([-1.0, 1.0], size=n) + 0.5 * rng.normal(size=n)) / np.sqrt(1.25)

    A, B = rng.uniform(-1, 1, size=(n, k)), rng.uniform(-1, 1, size=(n, k))
    x = A.sum(axis=1) + 0.8 * bimodal()
    y = 0.8 * x + B.sum(axis=1) + 0.8 * bimodal()
    frame = pd.DataFrame({**{f"a{i}": A[:, i] for i in range(k)}, **{f"b{i}": B[:, i] for i in range(k)},
                          "x": x, "y": y})
    graph = tmp_path / "graph.txt"
    graph.write_text("\n".join([f"a{i} -> x" for i in range(k)] + [f"b{i} -> y" for i in range(k)] + ["x -> y"]))
    report = preflight.check(frame, graph=str(graph), jobs=1, keep_samples=False)
    (pair,) = [p for p in report.data["pairs"] if {p["x"], p["y"]} == {"x", "y"}]
    marginal = [c for c in pair["checks"] if c["name"] in ("jarque-bera (y on x)", "jarque-bera (x on y)")]
    assert len(marginal) == 2 and not any(c["passed"] for c in marginal)
    in_equations = [c for c in pair["checks"] if c["name"].startswith("jarque-bera in the equation")]
    assert len(in_equations) == 2 and all(c["passed"] for c in in_equations)
    assert decode(in_equations[0], "pair", ("x", "y")).family == "equation noise normality"
    assert pair["orientation"] == "x->y" and pair["basis"] == "linear-non-gaussian"
    assert "gaussian-noise" not in pair["flags"]


def _edge_test(family: str, role: str, p_value: float, effect: float):
    from preflight.evidence import Tagged
    from preflight.results import CheckResult

    return Tagged(family, role, CheckResult(name=f"{family} {role}", statistic=effect, p_value=p_value,
                                            effect=effect, n=1000))


@pytest.mark.parametrize(("forward_p", "reverse_p", "lr", "lean"), [
    (0.01, 0.50, -0.02, "y->x"),   # the forward residual depends on x, the ratio agrees: y -> x
    (0.50, 0.02, 0.03, "x->y"),
    (0.01, 0.50, 0.02, None),      # the ratio disagrees
    (0.08, 0.50, -0.02, None),     # nothing below alpha before adjustment
    (0.01, 0.004, -0.02, None),    # the other residual depends more clearly
])
def test_the_lean_of_an_edge_the_equations_could_not_orient(forward_p, reverse_p, lr, lean):
    from preflight.equation_stage import EDGE_FAMILY, SPREAD_FAMILY, _lean
    from preflight.policy import Policy

    policy = Policy()
    edge = [_edge_test(EDGE_FAMILY, "forward", forward_p, 0.01), _edge_test(SPREAD_FAMILY, "forward", 0.6, 0.001),
            _edge_test(EDGE_FAMILY, "reverse", reverse_p, 0.01), _edge_test(SPREAD_FAMILY, "reverse", 0.7, 0.001)]
    assert _lean(edge, lr, policy) == lean
    # Below its effect floor a small p-value is no lean.
    faint = [_edge_test(t.family, t.role, t.result.p_value, 0.0005) if t.family == EDGE_FAMILY else t for t in edge]
    assert _lean(faint, lr, policy) is None
