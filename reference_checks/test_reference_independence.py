"""Reference checks for the independence, association and direction checks.

Each test names its source in its name and in a comment: a direct formula
from the paper written out here, a large permutation null, a published
worked example, or a reference library run on the same arrays.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from preflight.checks.association import pearson_fisher_z, spearman
from preflight.checks.independence import distance_correlation, hsic_gamma, hsic_permutation


def _gretton_2008_explicit(x, y):
    """Gretton et al. (2008), "A kernel statistical test of independence", NIPS 20:
    HSIC_b = tr(KHLH)/n^2 with H = I - 11'/n, and the gamma null of n HSIC_b with
    mean (1 + mu_x mu_y - mu_x - mu_y)/n and variance
    2(n-4)(n-5)/(n(n-1)(n-2)(n-3)) * mean_{i != j} ((HKH)_ij (HLH)_ij)^2.
    Kernels exp(-d^2 / (2 sigma^2)), sigma the median pairwise distance of the
    standardised variable."""
    def standardise(v):
        return (v - v.mean()) / v.std()

    def gram(v):
        d = np.abs(v[:, None] - v[None, :])
        sigma = np.median(d[np.triu_indices(v.shape[0], k=1)])
        return np.exp(-d**2 / (2 * sigma**2))

    K, L = gram(standardise(x)), gram(standardise(y))
    n = K.shape[0]
    H = np.eye(n) - np.ones((n, n)) / n
    hsic_b = np.trace(K @ H @ L @ H) / n**2
    off = ~np.eye(n, dtype=bool)
    mu_x, mu_y = K[off].mean(), L[off].mean()
    mean = (1 + mu_x * mu_y - mu_x - mu_y) / n
    B = ((H @ K @ H) * (H @ L @ H)) ** 2
    var = 2 * (n - 4) * (n - 5) / (n * (n - 1) * (n - 2) * (n - 3)) * B[off].mean()
    return hsic_b, stats.gamma.sf(n * hsic_b, mean**2 / var, scale=n * var / mean)


@pytest.mark.parametrize("seed", [101, 102])
def test_hsic_gamma_matches_gretton_2008_explicit_formula(seed):
    # Source: the formulas of Gretton et al. (2008), written with explicit matrices above.
    rng = np.random.default_rng(seed)
    x = rng.standard_normal(180)
    y = np.sin(2 * x) + rng.standard_normal(180)
    hsic_b, p = _gretton_2008_explicit(x, y)
    result = hsic_gamma(x, y)
    assert result.statistic / 180 == pytest.approx(hsic_b, rel=1e-10)
    assert result.p_value == pytest.approx(p, rel=1e-8, abs=1e-15)


@pytest.mark.parametrize("seed, strength", [(103, 0.0), (104, 0.12), (105, 0.2)])
def test_hsic_gamma_agrees_with_large_permutation_null(seed, strength):
    # Source: a 2000-permutation null of the same statistic (Gretton et al. 2008
    # validate the gamma approximation the same way).  Tolerance: 0.02 where the
    # permutation p is below 0.2, 0.08 elsewhere.
    rng = np.random.default_rng(seed)
    x = rng.standard_normal(200)
    y = strength * x**2 + rng.standard_normal(200)
    gamma_p = hsic_gamma(x, y).p_value
    permutation_p = hsic_permutation(x, y, n_permutations=2000, seed=seed).p_value
    assert abs(gamma_p - permutation_p) <= (0.02 if permutation_p < 0.2 else 0.08)


def test_distance_correlation_matches_energy_dcor_ttest_published_example():
    # Source: output of dcor.ttest(c(1,2,3,4,5), c(1.4,1.4,3.5,4.2,4.8)) from the R
    # package energy (Rizzo and Székely), as quoted in the comments of
    # brian-lau/highdim, Testing/test_dcorr.m: T = 5.6569, df = 4,
    # p-value = 0.002406, bias corrected dcor = 0.942809.
    result = distance_correlation([1, 2, 3, 4, 5], [1.4, 1.4, 3.5, 4.2, 4.8])
    assert result.effect == pytest.approx(0.942809, abs=5e-7)
    assert result.statistic == pytest.approx(5.6569, abs=5e-5)
    assert result.p_value == pytest.approx(0.002406, abs=5e-7)
    assert "4 degrees of freedom" in result.note


@pytest.mark.parametrize("seed", [106, 107])
def test_distance_correlation_matches_dcor_library(seed):
    # Source: the PyPI package dcor (Ramos-Carreño et al.), a test-only
    # dependency: u_distance_correlation_sqr and distance_correlation_t_test.
    dcor = pytest.importorskip("dcor")
    rng = np.random.default_rng(seed)
    x = rng.standard_normal(150)
    y = 0.3 * np.abs(x) + rng.standard_normal(150)
    result = distance_correlation(x, y)
    assert result.effect == pytest.approx(dcor.u_distance_correlation_sqr(x, y), rel=1e-9, abs=1e-12)
    reference = dcor.independence.distance_correlation_t_test(x, y)
    assert result.statistic == pytest.approx(reference.statistic, rel=1e-9, abs=1e-10)
    assert result.p_value == pytest.approx(reference.pvalue, rel=1e-8, abs=1e-14)


@pytest.mark.parametrize("seed, n", [(108, 30), (109, 500)])
def test_pearson_r_matches_scipy_pearsonr_and_p_matches_fisher_formula(seed, n):
    # Source: scipy.stats.pearsonr for r; Fisher (1915) z = atanh(r) sqrt(n - 3)
    # with a two-sided normal tail for p (written out here with math.erfc).
    rng = np.random.default_rng(seed)
    x = rng.standard_normal(n)
    y = 0.2 * x + rng.standard_normal(n)
    result = pearson_fisher_z(x, y)
    r = stats.pearsonr(x, y).statistic
    assert result.effect == pytest.approx(r, rel=1e-12)
    assert result.p_value == pytest.approx(math.erfc(abs(math.atanh(r)) * math.sqrt(n - 3) / math.sqrt(2)),
                                           rel=1e-10)


@pytest.mark.parametrize("seed, n", [(110, 15), (111, 400)])
def test_spearman_matches_scipy_spearmanr(seed, n):
    # Source: scipy.stats.spearmanr on the same arrays (with ties).
    rng = np.random.default_rng(seed)
    x = np.round(rng.standard_normal(n), 1)
    y = np.round(x**3 + rng.standard_normal(n), 1)
    result = spearman(x, y)
    reference = stats.spearmanr(x, y)
    assert result.statistic == pytest.approx(reference.statistic, rel=1e-10)
    assert result.p_value == pytest.approx(reference.pvalue, rel=1e-10, abs=1e-15)


def test_bootstrap_tail_beyond_every_draw_matches_scipy_lognorm():
    # Source: scipy.stats.lognorm (shape s = standard deviation of the log draws, scale = exp of their mean),
    # the log-normal the residual bootstrap's p-value uses beyond its largest draw, capped at 1 / (1 + B).
    from preflight.equations import _tail_p_value

    rng = np.random.default_rng(3)
    draws = rng.chisquare(3, size=200)
    logs = np.log(draws)
    for observed in (draws.max() * 1.01, 40.0, 80.0):
        reference = stats.lognorm.sf(observed, logs.std(), scale=np.exp(logs.mean()))
        assert _tail_p_value(observed, draws) == pytest.approx(min(1 / 201, reference), rel=1e-9)
    assert _tail_p_value(80.0, draws) < 1e-4
