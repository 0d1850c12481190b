"""Conditioning sets leave out variables that sit in a relation judged nonlinear.

Ground truth comes from simulations whose structure is known exactly: the
kiln demo (``preflight.demo``, a linear chain ending in a saturating tanh
curve) and a seeded linear fork beside an unrelated nonlinear pair.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import preflight
from preflight import demo


def _pair(report: dict, x: str, y: str) -> dict:
    return next(p for p in report["pairs"] if {p["x"], p["y"]} == {x, y})


@pytest.fixture(scope="module")
def kiln_reports():
    frame = pd.DataFrame(demo.kiln_data(2000))
    return [preflight.check(frame, seed=1, keep_samples=False, jobs=jobs).to_dict() for jobs in (1, 2)]


def test_kiln_chain_is_not_conditioned_on_the_end_of_its_saturating_curve(kiln_reports):
    # The tanh corner puts glaze_gloss first in the estimated linear order, which
    # made it a "common parent" of flame_temp and wall_temp.  Partialled out, this
    # descendant gave the linear, homoscedastic edge flame_temp -> wall_temp a
    # changing spread and a confounding signal; without it the edge is oriented.
    report = kiln_reports[0]
    assert report["structure"]["order"].index("glaze_gloss") < report["structure"]["order"].index("flame_temp")
    nonlinear = _pair(report, "wall_temp", "glaze_gloss")
    assert "nonlinear" in nonlinear["flags"]
    for cause, effect in (("gas_flow", "flame_temp"), ("flame_temp", "wall_temp")):
        pair = _pair(report, cause, effect)
        assert pair["adjacent"]
        assert "glaze_gloss" not in pair["conditioning"]
        assert pair["flags"] == []
        wanted = "x->y" if pair["x"] == cause else "y->x"
        assert (pair["orientation"], pair["basis"]) == (wanted, "linear-non-gaussian")
    note = _pair(report, "flame_temp", "wall_temp")["checks"][0]["note"]
    assert "not partialled out: glaze_gloss" in note
    assert report["conclusion"]["level"] == demo.EXPECTED_LEVEL


def test_guard_gives_the_same_report_with_and_without_workers(kiln_reports):
    single, pooled = (dict(r) for r in kiln_reports)
    single.pop("generated_at")
    pooled.pop("generated_at")
    single["settings"].pop("jobs", None)
    pooled["settings"].pop("jobs", None)
    assert single == pooled


def test_a_linear_common_cause_stays_in_the_conditioning_set():
    # Seeded fork z -> x, z -> y with x -> y, all linear with uniform noise, next to
    # an unrelated nonlinear pair u -> v.  Only u and v sit in a nonlinear relation,
    # so the pair (x, y) keeps z in its set when the structural view finds it.
    rng = np.random.default_rng(2026)
    n = 3000
    z = rng.uniform(-1.7, 1.7, n)
    x = 0.8 * z + rng.uniform(-1.7, 1.7, n)
    y = 0.7 * z + 0.6 * x + rng.uniform(-1.7, 1.7, n)
    u = rng.uniform(-1.7, 1.7, n)
    v = np.tanh(2.0 * u) + 0.3 * rng.uniform(-1.7, 1.7, n)
    frame = pd.DataFrame({"x": x, "y": y, "z": z, "u": u, "v": v})
    report = preflight.check(frame, seed=3, keep_samples=False, jobs=1).to_dict()
    assert "nonlinear" in _pair(report, "u", "v")["flags"]
    xy = _pair(report, "x", "y")
    assert xy["conditioning"] == ["z"]
    assert not any("not partialled out" in c["note"] for c in xy["checks"])
