"""Normality checks: agreement with scipy/statsmodels, calibration under the
null, power against uniform and Laplace noise, and the departure rule."""

from __future__ import annotations

import math
import warnings
from dataclasses import replace

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import integrate, stats
from statsmodels.stats.diagnostic import normal_ad
from statsmodels.stats.multitest import multipletests

from preflight.checks import normality as nm
from preflight.errors import InputError
from preflight.results import CheckResult

ALPHA = 0.05


def _samples():
    """Seeded arrays of several shapes and sizes for the reference comparisons."""
    out = []
    for seed, n in [(0, 30), (1, 200), (2, 1000)]:
        rng = np.random.default_rng(seed)
        out.append((f"normal-{n}", rng.normal(3.0, 2.0, size=n)))
        out.append((f"t5-{n}", rng.standard_t(5, size=n)))
        out.append((f"lognormal-{n}", rng.lognormal(0.0, 0.4, size=n)))
        out.append((f"uniform-{n}", rng.uniform(-1.0, 4.0, size=n)))
    return out


SAMPLES = _samples()
SAMPLE_IDS = [name for name, _ in SAMPLES]


def _holm(p_values) -> np.ndarray:
    """Holm (1979) step-down adjusted p-values, written out (multipletests is slow in a loop)."""
    p = np.asarray(p_values, dtype=float)
    m = p.shape[0]
    order = np.argsort(p)
    stepped = np.minimum(1.0, np.maximum.accumulate((m - np.arange(m)) * p[order]))
    adjusted = np.empty(m)
    adjusted[order] = stepped
    return adjusted


def test_holm_helper_matches_statsmodels():
    rng = np.random.default_rng(0)
    for _ in range(5):
        p = rng.uniform(0, 0.2, size=4)
        assert np.allclose(_holm(p), multipletests(p, method="holm")[1], rtol=1e-12)


def _interval_rate(replicates: int, alpha: float = ALPHA) -> tuple[float, float]:
    low, high = stats.binom.interval(0.99, replicates, alpha)
    return low / replicates, high / replicates


# ---------------------------------------------------------------- reference agreement

@pytest.mark.parametrize("name,x", SAMPLES, ids=SAMPLE_IDS)
def test_anderson_statistic_matches_scipy(name, x):
    # scipy.stats.anderson (normal case, ddof=1 scale) computes the same A^2 on the log scale.
    reference = stats.anderson(x, dist="norm", method="interpolate").statistic
    assert nm.anderson_darling(x).statistic == pytest.approx(reference, rel=1e-10)


@pytest.mark.parametrize("name,x", SAMPLES, ids=SAMPLE_IDS)
def test_anderson_pvalue_matches_statsmodels_normal_ad(name, x):
    # statsmodels' normal_ad uses the same modification and D'Agostino-Stephens
    # formulas, but forms log(1 - Phi(w)) from Phi(w), which loses digits for
    # standardised values beyond ~4; there the tolerance is 1e-6 (our log-sf
    # value agrees with scipy.stats.anderson to 1e-10, see above).
    a2, p = normal_ad(x)
    result = nm.anderson_darling(x)
    far_tail = np.abs((x - x.mean()) / x.std(ddof=1)).max() > 4.0
    tolerance = 1e-6 if far_tail else 1e-8
    assert result.statistic == pytest.approx(a2, rel=tolerance)
    assert result.p_value == pytest.approx(p, rel=tolerance, abs=1e-300)
    assert result.effect == pytest.approx(result.statistic / x.shape[0], rel=1e-14)


@pytest.mark.parametrize("name,x", SAMPLES, ids=SAMPLE_IDS)
def test_jarque_bera_matches_scipy(name, x):
    reference = stats.jarque_bera(x)
    result = nm.jarque_bera(x)
    assert result.statistic == pytest.approx(reference.statistic, rel=1e-10)
    assert result.p_value == pytest.approx(reference.pvalue, rel=1e-8, abs=1e-300)
    assert result.effect == pytest.approx(stats.skew(x), rel=1e-10)
    assert result.effect_name == "skewness"


@pytest.mark.parametrize("name,x", SAMPLES, ids=SAMPLE_IDS)
def test_dagostino_pearson_matches_scipy_normaltest(name, x):
    reference = stats.normaltest(x)
    result = nm.dagostino_pearson(x)
    assert result.statistic == pytest.approx(reference.statistic, rel=1e-10)
    assert result.p_value == pytest.approx(reference.pvalue, rel=1e-8, abs=1e-300)
    assert result.effect == pytest.approx(stats.kurtosis(x), rel=1e-10)
    assert result.effect_name == "excess kurtosis"


@pytest.mark.parametrize("name,x", SAMPLES, ids=SAMPLE_IDS)
def test_shapiro_wilk_is_scipy_below_max_n(name, x):
    reference = stats.shapiro(x)
    result = nm.shapiro_wilk(x)
    assert result.statistic == pytest.approx(reference.statistic, rel=1e-12)
    assert result.p_value == pytest.approx(reference.pvalue, rel=1e-12)
    assert result.effect == pytest.approx(1.0 - reference.statistic, rel=1e-10)
    assert result.n == x.shape[0] and result.note == ""


def test_shapiro_wilk_subsample_is_seeded_without_replacement():
    x = np.random.default_rng(7).normal(size=7000)
    result = nm.shapiro_wilk(x, max_n=2500, seed=11)
    # The documented subsample: default_rng(seed).choice without replacement.
    chosen = np.random.default_rng(11).choice(7000, size=2500, replace=False)
    reference = stats.shapiro(x[chosen])
    assert result.n == 2500
    assert result.statistic == pytest.approx(reference.statistic, rel=1e-12)
    assert result.p_value == pytest.approx(reference.pvalue, rel=1e-12)
    assert "subsample of 2500 of 7000" in result.note and "seed 11" in result.note
    assert nm.shapiro_wilk(x, max_n=2500, seed=11) == result
    assert nm.shapiro_wilk(x, max_n=2500, seed=12).statistic != result.statistic


@pytest.mark.parametrize("name,x", SAMPLES, ids=SAMPLE_IDS)
def test_shape_is_the_biased_moment_estimates(name, x):
    summary = nm.shape(x)
    assert summary.skewness == pytest.approx(stats.skew(x, bias=True), rel=1e-10)
    assert summary.excess_kurtosis == pytest.approx(stats.kurtosis(x, fisher=True, bias=True), rel=1e-10)
    assert summary.negentropy == pytest.approx(nm.negentropy(x).effect, rel=1e-12)
    with pytest.raises(AttributeError):
        summary.skewness = 0.0  # frozen


def test_skewness_z_is_zero_for_a_symmetric_sample():
    # D'Agostino's transformation is odd in g1; scipy.stats.skewtest substitutes
    # y = 1 when y == 0 and so reports a non-zero Z here.
    assert nm._skewness_z(0.0, 50) == 0.0


# ---------------------------------------------------------------- negentropy

def _orthonormal_constant(g, basis):
    """1 / (2 ||g - projection of g on basis||^2) under the standard normal density."""
    def inner(f1, f2):
        return integrate.quad(lambda t: f1(t) * f2(t) * stats.norm.pdf(t), -np.inf, np.inf, epsabs=1e-13)[0]

    norm2 = inner(g, g) - sum(inner(g, b) ** 2 for b in basis)
    return 1.0 / (2.0 * norm2)


def test_negentropy_constants_follow_from_orthonormalisation():
    # Hyvärinen (1998): k = 1 / (2 ||G~||^2), with G~ the part of G orthogonal to
    # the polynomials of degree <= 2 (orthonormal basis 1, t, (t^2 - 1)/sqrt 2).
    one = lambda t: 1.0  # noqa: E731
    linear = lambda t: t  # noqa: E731
    quadratic = lambda t: (t * t - 1.0) / math.sqrt(2.0)  # noqa: E731
    k1 = _orthonormal_constant(lambda t: t * math.exp(-t * t / 2), [linear])
    k2 = _orthonormal_constant(lambda t: math.exp(-t * t / 2), [one, quadratic])
    k2_abs = _orthonormal_constant(abs, [one, quadratic])
    assert nm.NEGENTROPY_K1 == pytest.approx(k1, rel=1e-9)
    assert nm.NEGENTROPY_K2 == pytest.approx(k2, rel=1e-9)
    # 1 / (2 - 6/pi) belongs to the |y| version, not to exp(-y^2/2).
    assert k2_abs == pytest.approx(1.0 / (2.0 - 6.0 / math.pi), rel=1e-9)
    assert nm.NEGENTROPY_K2 != pytest.approx(k2_abs, rel=0.1)
    # E[exp(-y^2/2)] of a standard normal is sqrt(1/2).
    assert integrate.quad(lambda t: math.exp(-t * t / 2) * stats.norm.pdf(t), -np.inf, np.inf)[0] == pytest.approx(
        math.sqrt(0.5), rel=1e-10)


def test_negentropy_matches_direct_formula_on_a_sample():
    x = np.random.default_rng(3).gamma(2.0, size=500)
    y = (x - x.mean()) / x.std()
    k1 = 36 / (8 * math.sqrt(3) - 9)
    k2 = 24 / (16 * math.sqrt(3) - 27)
    expected = k1 * np.mean(y * np.exp(-y**2 / 2)) ** 2 + k2 * (np.mean(np.exp(-y**2 / 2)) - math.sqrt(0.5)) ** 2
    result = nm.negentropy(x)
    assert result.effect == pytest.approx(expected, rel=1e-12)
    assert result.p_value is None and result.effect_name == "negentropy"


@pytest.mark.parametrize(
    "label,draw,density,support",
    [
        # Uniform with unit variance lives on [-sqrt 3, sqrt 3].
        ("uniform", lambda rng, n: rng.uniform(-1, 1, n), lambda t: 1 / (2 * math.sqrt(3)),
         (-math.sqrt(3), math.sqrt(3))),
        # Laplace with unit variance has scale 1 / sqrt 2.
        ("laplace", lambda rng, n: rng.laplace(size=n), lambda t: math.exp(-abs(t) * math.sqrt(2)) / math.sqrt(2),
         (-np.inf, np.inf)),
    ],
)
def test_negentropy_estimates_the_population_value(label, draw, density, support):
    even = integrate.quad(lambda t: math.exp(-t * t / 2) * density(t), *support)[0]
    population = nm.NEGENTROPY_K2 * (even - math.sqrt(0.5)) ** 2  # odd term is 0 by symmetry
    sample = nm.negentropy(draw(np.random.default_rng(4), 200_000)).effect
    assert sample == pytest.approx(population, rel=0.05)


def test_negentropy_is_near_zero_for_a_gaussian():
    values = [nm.negentropy(np.random.default_rng(s).normal(size=20_000)).effect for s in range(5)]
    uniform = nm.negentropy(np.random.default_rng(9).uniform(size=20_000)).effect
    assert max(values) < 0.05 * uniform
    assert min(values) >= 0.0


# ---------------------------------------------------------------- Anderson-Darling p-value formula

def test_anderson_pvalue_is_decreasing_and_nearly_continuous():
    for low, high in [(0.0, 0.2), (0.2, 0.34), (0.34, 0.6), (0.6, 13.0)]:
        grid = np.linspace(low, high, 2001)[:-1]
        p = np.array([nm.anderson_darling_pvalue(a) for a in grid])
        assert np.all(np.diff(p) < 0), (low, high)
    # The pieces of D'Agostino & Stephens join to within a few thousandths
    # (at 0.6 the next piece starts 0.0025 higher).
    for boundary in (0.2, 0.34, 0.6):
        left = nm.anderson_darling_pvalue(boundary - 1e-12)
        right = nm.anderson_darling_pvalue(boundary)
        assert abs(left - right) < 0.005
    assert nm.anderson_darling_pvalue(13.5) == 0.0
    assert 0.0 < nm.anderson_darling_pvalue(13.0) < 5e-31


def test_anderson_far_tail_note_and_small_n():
    x = np.concatenate([np.zeros(500), np.ones(500)])  # two-point data: A*^2 far beyond 13
    result = nm.anderson_darling(x)
    assert result.p_value == 0.0 and "p < 5e-31" in result.note
    small = nm.anderson_darling([0.1, 0.5, 0.2, 0.9, 0.4, 0.3, 0.8])
    assert small.p_value is None and small.n == 7 and math.isfinite(small.statistic)


def test_dagostino_pearson_below_twenty_has_no_p_value():
    x = np.random.default_rng(5).normal(size=19)
    result = nm.dagostino_pearson(x)
    assert result.p_value is None
    assert "fewer than 20" in result.note
    assert result.effect == pytest.approx(stats.kurtosis(x), rel=1e-10)
    assert nm.dagostino_pearson(np.random.default_rng(5).normal(size=20)).p_value is not None


def test_normality_checks_order_and_names():
    x = np.random.default_rng(6).normal(size=100)
    results = nm.normality_checks(x)
    assert [r.name for r in results] == ["shapiro-wilk", "anderson-darling", "jarque-bera", "d'agostino-pearson",
                                         "negentropy"]
    assert all(isinstance(r, CheckResult) and r.p_adjusted is None and r.passed is None for r in results)
    assert all(r.n == 100 for r in results)


# ---------------------------------------------------------------- calibration and power

def test_false_alarm_rate_under_gaussian_null():
    replicates, n = 400, 200
    draws = np.random.default_rng(20240601).normal(size=(replicates, n))
    rejections = np.zeros(4)
    nongaussian = 0
    for row in draws:
        results = nm.normality_checks(row)
        raw = [r.p_value for r in results[:4]]
        rejections += np.array(raw) <= ALPHA
        holm = _holm(raw)
        adjusted = tuple(replace(r, p_adjusted=float(a)) for r, a in zip(results[:4], holm)) + results[4:]
        nongaussian += nm.is_nongaussian(adjusted, ALPHA)
    low, high = _interval_rate(replicates)
    rates = rejections / replicates
    assert np.all((rates >= low) & (rates <= high)), dict(zip(["sw", "ad", "jb", "dp"], rates))
    # Holm keeps the family-wise rate at or below alpha; the materiality floor only lowers it.
    assert nongaussian / replicates <= high


@pytest.mark.parametrize("label", ["uniform", "laplace"])
def test_power_against_uniform_and_laplace(label):
    replicates, n = 60, 1000
    rng = np.random.default_rng(31 if label == "uniform" else 32)
    draws = rng.uniform(size=(replicates, n)) if label == "uniform" else rng.laplace(size=(replicates, n))
    rejections = np.zeros(4)
    nongaussian = 0
    for row in draws:
        results = nm.normality_checks(row)
        raw = [r.p_value for r in results[:4]]
        rejections += np.array(raw) <= ALPHA
        holm = _holm(raw)
        adjusted = tuple(replace(r, p_adjusted=float(a)) for r, a in zip(results[:4], holm)) + results[4:]
        nongaussian += nm.is_nongaussian(adjusted, ALPHA)
    assert np.all(rejections / replicates >= 0.95)
    assert nongaussian / replicates >= 0.95


def test_large_sample_with_immaterial_shape_is_not_declared_nongaussian():
    # t(60) has excess kurtosis 6/56 ~ 0.107 and no skew: significant at n=200000, not material.
    x = np.random.default_rng(8).standard_t(60, size=200_000)
    results = nm.normality_checks(x, seed=1)
    assert min(r.p_value for r in results if r.p_value is not None) <= ALPHA
    assert not nm.is_nongaussian(results, ALPHA, p_key="p_value")
    assert nm.is_nongaussian(results, ALPHA, min_abs_excess_kurtosis=0.05, p_key="p_value")


# ---------------------------------------------------------------- the departure rule

def _result(name, p, effect=None, effect_name=None, p_adjusted=None):
    return CheckResult(name=name, statistic=1.0, p_value=p, effect=effect, effect_name=effect_name, n=100,
                       p_adjusted=p_adjusted)


def test_is_nongaussian_needs_rejection_and_material_shape():
    skew_material = _result("jarque-bera", 0.001, 0.5, "skewness", p_adjusted=0.004)
    kurt_flat = _result("d'agostino-pearson", 0.3, 0.05, "excess kurtosis", p_adjusted=0.6)
    assert nm.is_nongaussian([skew_material, kurt_flat], ALPHA)
    # Rejection without a material shape.
    small_skew = replace(skew_material, effect=0.05)
    assert not nm.is_nongaussian([small_skew, kurt_flat], ALPHA)
    # Material shape without rejection (adjusted p above alpha).
    not_rejected = replace(skew_material, p_adjusted=0.2)
    assert not nm.is_nongaussian([not_rejected, kurt_flat], ALPHA)
    # Raw p decides when asked for.
    assert nm.is_nongaussian([not_rejected, kurt_flat], ALPHA, p_key="p_value")
    # Kurtosis alone can make the shape material; the rejecting test need not be the one carrying it.
    heavy = replace(kurt_flat, effect=-0.9)
    shapiro = _result("shapiro-wilk", 0.001, 0.02, "1 - W", p_adjusted=0.002)
    assert nm.is_nongaussian([small_skew.with_name("jarque-bera (y on x)"), replace(heavy, p_adjusted=0.9), shapiro],
                             ALPHA)
    assert nm.is_nongaussian([small_skew, heavy], ALPHA, min_abs_excess_kurtosis=0.95) is False


def test_is_nongaussian_rejects_inconsistent_input():
    with_p = _result("jarque-bera", 0.01, 0.5, "skewness")
    with pytest.raises(ValueError, match="p_adjusted"):
        nm.is_nongaussian([with_p], ALPHA)
    with pytest.raises(ValueError, match="skewness or excess kurtosis"):
        nm.is_nongaussian([_result("shapiro-wilk", 0.01, 0.1, "1 - W", p_adjusted=0.01)], ALPHA)
    with pytest.raises(ValueError, match="p_key"):
        nm.is_nongaussian([with_p], ALPHA, p_key="p")
    # Descriptive results (no p-value) are never asked for an adjusted p.
    descriptive = _result("negentropy", None, 0.3, "negentropy")
    assert nm.is_nongaussian([descriptive, replace(with_p, p_adjusted=0.01)], ALPHA)


_P = st.floats(min_value=0.0, max_value=1.0)
_EFFECT = st.floats(min_value=-5.0, max_value=5.0)


@settings(max_examples=200, deadline=None)
@given(p_values=st.lists(_P, min_size=4, max_size=4), skew=_EFFECT, kurt=_EFFECT,
       alpha=st.floats(min_value=0.001, max_value=0.2), floor_scale=st.floats(min_value=1.0, max_value=10.0))
def test_is_nongaussian_is_monotone_in_alpha_and_floors(p_values, skew, kurt, alpha, floor_scale):
    names = ["shapiro-wilk", "anderson-darling", "jarque-bera", "d'agostino-pearson"]
    effects = [(0.01, "1 - W"), (0.001, "A^2 / n"), (skew, "skewness"), (kurt, "excess kurtosis")]
    results = [_result(n, p, e, en, p_adjusted=p) for n, p, (e, en) in zip(names, p_values, effects)]
    verdict = nm.is_nongaussian(results, alpha)
    # A stricter level or higher materiality floors never create a departure.
    if nm.is_nongaussian(results, alpha / 2) or nm.is_nongaussian(
            results, alpha, min_abs_skew=0.1 * floor_scale, min_abs_excess_kurtosis=0.2 * floor_scale):
        assert verdict
    # The rule is exactly its definition, with the one significance rule (p strictly below alpha).
    expected = min(p_values) < alpha and (abs(skew) >= 0.1 or abs(kurt) >= 0.2)
    assert verdict == expected


# ---------------------------------------------------------------- input validation

CHECKS = [nm.shapiro_wilk, nm.anderson_darling, nm.jarque_bera, nm.dagostino_pearson, nm.negentropy, nm.shape,
          nm.normality_checks]


@pytest.mark.parametrize("check", CHECKS, ids=lambda f: f.__name__)
@pytest.mark.parametrize(
    "bad",
    [
        np.array([1.0, np.nan, 2.0, 3.0, 4.0]),
        np.array([1.0, np.inf, 2.0, 3.0, 4.0]),
        np.array([1.0, 2.0]),
        np.ones((3, 4)),
        np.full(50, 2.5),
    ],
    ids=["nan", "inf", "too-short", "matrix", "constant"],
)
def test_bad_input_raises_input_error(check, bad):
    with pytest.raises(InputError):
        check(bad)


@pytest.mark.parametrize("max_n", [2, 5001])
def test_shapiro_max_n_outside_royston_range(max_n):
    with pytest.raises(InputError, match="max_n"):
        nm.shapiro_wilk(np.random.default_rng(0).normal(size=50), max_n=max_n)


def test_column_vector_accepted_and_input_not_mutated():
    x = np.random.default_rng(10).normal(size=(120, 1))
    before = x.copy()
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        results = nm.normality_checks(x)
    assert np.array_equal(x, before)
    assert results[0].statistic == pytest.approx(stats.shapiro(x[:, 0]).statistic, rel=1e-12)
