"""CheckResult.to_dict builds what dataclasses.asdict built, field for field and in field order.

The one exception is ``identity``: it stays in memory (on the returned
``CheckRecord``) and never reaches the JSON, whose schema has no slot for it.
"""

from __future__ import annotations

import json
import math
from dataclasses import asdict, fields

import numpy as np
import pytest

from preflight.results import CheckIdentity, CheckResult, _finite_or_none


def _asdict_version(result: CheckResult) -> dict:
    out = asdict(result)
    del out["identity"]
    out["statistic"] = _finite_or_none(result.statistic)
    out["p_value"] = _finite_or_none(result.p_value)
    out["p_adjusted"] = _finite_or_none(result.p_adjusted)
    out["effect"] = _finite_or_none(result.effect)
    out["n"] = int(result.n)
    return out


RESULTS = [
    CheckResult(name="hsic (y on x)", statistic=12.5, p_value=0.003, effect=0.01, effect_name="normalised HSIC",
                n=5000, note="random features", p_adjusted=0.02, passed=False,
                identity=CheckIdentity("hsic", "residual independence", "pair", ("x", "y"), ("y", "x"),
                                       null="random features")),
    CheckResult(name="negentropy", statistic=np.float64(0.2), p_value=None, effect=np.float64(0.2)),
    CheckResult(name="spline f-test", statistic=math.nan, p_value=None, effect=0.0, n=np.int64(12), note="no test"),
    CheckResult(name="reset", statistic=math.inf, p_value=0.0, effect=-math.inf, effect_name="R-squared gain",
                n=30, p_adjusted=math.nan, passed=True),
    CheckResult(name="", statistic=np.float32(1.5), p_value=np.float64(1e-300), effect=None, passed=None),
]


@pytest.mark.parametrize("result", RESULTS, ids=range(len(RESULTS)))
def test_to_dict_matches_asdict_version(result):
    got, expected = result.to_dict(), _asdict_version(result)
    assert list(got) == list(expected) == [f.name for f in fields(CheckResult) if f.name != "identity"]
    assert got.identity is result.identity
    assert json.dumps(got) == json.dumps(expected)
    assert [type(v) for v in got.values()] == [type(v) for v in expected.values()]
