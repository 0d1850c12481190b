"""Preflight on published reference data sets and textbook identifiability facts."""

import numpy as np
import pandas as pd

import preflight
from preflight.fit import coefficient_standard_errors, ols
from preflight.graph import dag_to_cpdag

# NIST StRD Longley certified values (itl.nist.gov/div898/strd/lls/data/Longley.shtml),
# written here from memory: intercept, GNPDEFL, GNP, UNEMP, ARMED, POP, YEAR.
NIST_LONGLEY_COEF = np.array([-3482258.63459582, 15.0618722713733, -0.358191792925910e-01,
                              -2.02022980381683, -1.03322686717359, -0.511041056535807e-01,
                              1829.15146461355])
NIST_LONGLEY_SE = np.array([890420.383607373, 84.9149257747669, 0.334910077722432e-01,
                            0.488399681651699, 0.214274163161675, 0.226073200069370,
                            455.478499142212])


def _longley():
    from statsmodels.datasets import longley
    return longley.load_pandas().data


def _significant_digits(estimate, certified):
    # log relative error, the NIST StRD accuracy measure (LRE)
    return -np.log10(np.abs(estimate - certified) / np.abs(certified))


def test_nist_strd_longley_certified_coefficients_and_standard_errors():
    data = _longley()
    X = data[["GNPDEFL", "GNP", "UNEMP", "ARMED", "POP", "YEAR"]].to_numpy(float)
    y = data["TOTEMP"].to_numpy(float)
    fit = ols(X, y)
    se = coefficient_standard_errors(X, fit)
    assert np.all(_significant_digits(fit.coef, NIST_LONGLEY_COEF) >= 7)
    assert np.all(_significant_digits(se, NIST_LONGLEY_SE) >= 7)


def test_nist_strd_longley_check_flags_collinear():
    report = preflight.check(_longley(), seed=0).to_dict()
    assert any("collinear" in v["flags"] for v in report["variables"])


def test_statsmodels_engel_koenker_bassett_1982_heteroscedastic():
    from statsmodels.datasets import engel
    data = engel.load_pandas().data[["income", "foodexp"]]
    report = preflight.check(data, seed=0).to_dict()
    (pair,) = report["pairs"]
    assert "heteroscedastic" in pair["flags"]


def test_statsmodels_sunspots_autocorrelated():
    from statsmodels.datasets import sunspots
    activity = sunspots.load_pandas().data["SUNACTIVITY"].to_numpy(float)
    rng = np.random.default_rng(3)
    frame = pd.DataFrame({"SUNACTIVITY": activity, "independent": rng.normal(size=activity.size)})
    report = preflight.check(frame, seed=0).to_dict()
    flags = {v["name"]: v["flags"] for v in report["variables"]}
    assert "autocorrelated" in flags["SUNACTIVITY"]


def _pair_frame(noise, n, seed):
    rng = np.random.default_rng(seed)
    draw = (lambda: rng.normal(size=n)) if noise == "gaussian" else (lambda: rng.uniform(-1, 1, n))
    cause = draw()
    effect = 0.8 * cause + 0.6 * draw()
    return pd.DataFrame({"cause": cause, "effect": effect})


def test_shimizu_2006_gaussian_linear_pair_not_oriented():
    report = preflight.check(_pair_frame("gaussian", 2000, 5), seed=0).to_dict()
    (pair,) = report["pairs"]
    assert pair["orientation"] == "undetermined"
    assert "gaussian-noise" in pair["flags"]


def test_shimizu_2006_uniform_linear_pair_oriented_correctly():
    report = preflight.check(_pair_frame("uniform", 2000, 5), seed=0).to_dict()
    (pair,) = report["pairs"]
    arrow = f"{pair['x']}->{pair['y']}" if pair["orientation"] == "x->y" else (
        f"{pair['y']}->{pair['x']}" if pair["orientation"] == "y->x" else None)
    assert arrow == "cause->effect"


def test_meek_1995_v_structure_compelled_in_cpdag():
    # a -> c <- b, plus c -> d which Meek rule 1 then compels too
    dag = np.zeros((4, 4), dtype=np.int8)
    dag[0, 2] = dag[1, 2] = dag[2, 3] = 1
    cpdag = dag_to_cpdag(dag)
    for i, j in [(0, 2), (1, 2), (2, 3)]:
        assert cpdag[i, j] == 1 and cpdag[j, i] == 0
    assert cpdag[0, 1] == 0 and cpdag[1, 0] == 0
    # a chain a -> b -> c has no v-structure and stays undirected
    chain = np.zeros((3, 3), dtype=np.int8)
    chain[0, 1] = chain[1, 2] = 1
    assert np.array_equal(dag_to_cpdag(chain), chain + chain.T)
