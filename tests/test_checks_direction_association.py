"""Tests of preflight.checks.direction (Hyvärinen-Smith pairwise likelihood
ratio) and preflight.checks.association (Pearson with Fisher z, Spearman).

References: scipy.stats on the same arrays, direct formulas written here,
and seeded simulation.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from preflight.checks.association import pearson_fisher_z, spearman
from preflight.checks.direction import pairwise_likelihood_ratio
from preflight.errors import InputError

ALPHA = 0.05


def _binomial_99(replicates: int, rate: float = ALPHA) -> tuple[float, float]:
    return stats.binom.interval(0.99, replicates, rate)


def _noise(rng, family, n):
    if family == "laplace":
        return rng.laplace(size=n)
    if family == "uniform":
        return rng.uniform(-1.0, 1.0, n)
    return rng.standard_normal(n)


# --------------------------------------------------------------------------- pairwise likelihood ratio


def test_likelihood_ratio_matches_tanh_formula_for_sparse_data():
    # Reference: R = rho * mean(x tanh(y) - tanh(x) y) on standardised data,
    # Hyvärinen and Smith (2013), the tanh approximation for sparse variables.
    rng = np.random.default_rng(1)
    x = rng.laplace(size=500)
    y = 0.8 * x + rng.laplace(size=500)
    xs, ys = (x - x.mean()) / x.std(), (y - y.mean()) / y.std()
    rho = np.mean(xs * ys)
    expected = rho * np.mean(xs * np.tanh(ys) - np.tanh(xs) * ys)
    result = pairwise_likelihood_ratio(x, y, density="super-gaussian")
    assert result.statistic == pytest.approx(expected, rel=1e-12)
    assert result.effect == result.statistic and result.p_value is None
    assert "pairwise likelihood ratio" in result.name
    assert "super-gaussian" in result.note


@pytest.mark.parametrize("family_index, family", [(0, "laplace"), (1, "uniform")])
@pytest.mark.parametrize("slope", [0.5, 1.0, -1.5])
def test_likelihood_ratio_sign_points_from_cause_to_effect(family_index, family, slope):
    # Seeded simulation: x -> y with x and the noise from the same non-Gaussian
    # family; R > 0 (x -> y) in at least 95 % of replicates at n = 1000.
    rng = np.random.default_rng([2, family_index, int(10 * slope) + 100])
    replicates, n = 100, 1000
    correct = 0
    for _ in range(replicates):
        x = _noise(rng, family, n)
        y = slope * x + _noise(rng, family, n)
        correct += pairwise_likelihood_ratio(x, y).statistic > 0
    assert correct >= 95


def test_entropy_ratio_orients_sub_gaussian_cause_with_sparse_noise():
    # Seeded simulation: uniform cause, Laplace noise, the case where the
    # first-order tanh form misleads; the entropy form (the default) is right
    # in at least 95 % of replicates at n = 1000.
    rng = np.random.default_rng(12)
    correct_entropy = correct_tanh = 0
    for _ in range(100):
        x = rng.uniform(-1.7, 1.7, 1000)
        y = 0.8 * x + 0.6 * rng.laplace(0, 0.7, 1000)
        correct_entropy += pairwise_likelihood_ratio(x, y).statistic > 0
        correct_tanh += pairwise_likelihood_ratio(x, y, density="auto").statistic > 0
    assert correct_entropy >= 95
    assert correct_entropy > correct_tanh


def test_likelihood_ratio_is_exactly_antisymmetric():
    rng = np.random.default_rng(3)
    for family in ("laplace", "uniform", "gaussian"):
        x = _noise(rng, family, 700)
        y = 0.7 * x + _noise(rng, family, 700)
        forward = pairwise_likelihood_ratio(x, y)
        backward = pairwise_likelihood_ratio(y, x)
        assert backward.statistic == -forward.statistic
        for density in ("super-gaussian", "sub-gaussian", "auto"):
            assert (pairwise_likelihood_ratio(y, x, density=density).statistic
                    == -pairwise_likelihood_ratio(x, y, density=density).statistic)


def test_likelihood_ratio_is_centred_on_zero_for_gaussian_pairs():
    # Gaussian pairs carry no direction: the mean of R over replicates lies
    # within 3 standard errors of 0, and |R| is far smaller than for Laplace pairs.
    rng = np.random.default_rng(4)
    replicates, n = 300, 1000
    gaussian = np.empty(replicates)
    laplace = np.empty(replicates)
    for i in range(replicates):
        x = rng.standard_normal(n)
        gaussian[i] = pairwise_likelihood_ratio(x, x + rng.standard_normal(n)).statistic
        z = rng.laplace(size=n)
        laplace[i] = pairwise_likelihood_ratio(z, z + rng.laplace(size=n)).statistic
    standard_error = gaussian.std(ddof=1) / math.sqrt(replicates)
    assert abs(gaussian.mean()) <= 3 * standard_error
    assert np.median(np.abs(gaussian)) < 0.2 * np.median(np.abs(laplace))


def test_sub_gaussian_model_flips_the_sign_and_auto_follows_kurtosis():
    # With uniform (sub-Gaussian) components the sparse tanh model points the
    # wrong way; the sub-Gaussian score u - tanh(u) gives exactly the negative.
    rng = np.random.default_rng(5)
    x = rng.uniform(-1, 1, 2000)
    y = x + rng.uniform(-1, 1, 2000)
    sparse_model = pairwise_likelihood_ratio(x, y, density="super-gaussian")
    sub_model = pairwise_likelihood_ratio(x, y, density="sub-gaussian")
    automatic = pairwise_likelihood_ratio(x, y, density="auto")
    assert sub_model.statistic == -sparse_model.statistic
    assert sparse_model.statistic < 0 < sub_model.statistic
    assert automatic.statistic == sub_model.statistic
    assert "sub-gaussian" in automatic.note


def test_likelihood_ratio_constant_and_bad_input():
    result = pairwise_likelihood_ratio(np.full(20, 4.0), np.arange(20.0))
    assert math.isnan(result.statistic) and result.p_value is None and "constant" in result.note
    with pytest.raises(InputError):
        pairwise_likelihood_ratio(np.arange(10.0), np.arange(10.0), density="laplace")
    with pytest.raises(InputError):
        pairwise_likelihood_ratio(np.arange(10.0), np.arange(9.0))


# --------------------------------------------------------------------------- Pearson / Fisher z


def _fisher_p(r, n, k=0):
    # Direct formula: two-sided normal tail of atanh(r) sqrt(n - 3 - k), via erfc.
    z = math.atanh(r) * math.sqrt(n - 3 - k)
    return math.erfc(abs(z) / math.sqrt(2.0)), z


@pytest.mark.parametrize("seed, n, slope", [(11, 10, 0.5), (12, 60, 0.2), (13, 400, 0.05), (14, 25, -2.0)])
def test_pearson_r_matches_scipy_and_p_matches_fisher_formula(seed, n, slope):
    rng = np.random.default_rng(seed)
    x = rng.standard_normal(n)
    y = slope * x + rng.standard_normal(n)
    result = pearson_fisher_z(x, y)
    # Reference: scipy.stats.pearsonr for r.
    assert result.effect == pytest.approx(stats.pearsonr(x, y).statistic, rel=1e-12, abs=1e-15)
    p, z = _fisher_p(result.effect, n)
    assert result.statistic == pytest.approx(z, rel=1e-12)
    assert result.p_value == pytest.approx(p, rel=1e-10, abs=1e-300)
    assert result.effect_name == "Pearson r" and result.n == n


def test_pearson_p_agrees_with_scipy_t_test_at_large_n():
    # scipy.stats.pearsonr uses the exact t-distribution; Fisher z agrees
    # asymptotically.  At n = 20000 and p near 0.09 the relative gap observed
    # is 3e-6; the tolerance is 1e-3.
    rng = np.random.default_rng(15)
    n = 20000
    x = rng.standard_normal(n)
    y = 0.018 * x + rng.standard_normal(n)
    ours = pearson_fisher_z(x, y).p_value
    reference = stats.pearsonr(x, y).pvalue
    assert 1e-4 < reference < 0.2
    assert ours == pytest.approx(reference, rel=1e-3)


def test_fisher_z_with_conditioning_is_calibrated_for_partial_correlations():
    # Seeded simulation: partial correlation of x and y given k = 10 Gaussian
    # covariates at n = 30, computed from least-squares residuals; under the
    # null the rejection rate with sqrt(n - 3 - k) lies in the binomial 99 %
    # interval.  Ignoring k (sqrt(n - 3)) would reject about 11 %.
    rng = np.random.default_rng(16)
    replicates, n, k = 2000, 30, 10
    rejections = 0
    for _ in range(replicates):
        z = np.column_stack([np.ones(n), rng.standard_normal((n, k))])
        x = z[:, 1:] @ rng.standard_normal(k) + rng.standard_normal(n)
        y = z[:, 1:] @ rng.standard_normal(k) + rng.standard_normal(n)
        q, _ = np.linalg.qr(z)
        rx, ry = x - q @ (q.T @ x), y - q @ (q.T @ y)
        rejections += pearson_fisher_z(rx, ry, n_conditioning=k).p_value < ALPHA
    low, high = _binomial_99(replicates)
    assert low <= rejections <= high


def test_pearson_constant_and_bad_input():
    result = pearson_fisher_z(np.arange(10.0), np.full(10, 0.1))
    assert math.isnan(result.statistic) and result.p_value is None and "y is constant" in result.note
    with pytest.raises(InputError):
        pearson_fisher_z(np.arange(10.0), np.arange(10.0) ** 2, n_conditioning=7)
    with pytest.raises(InputError):
        pearson_fisher_z(np.arange(10.0), np.arange(10.0), n_conditioning=-1)
    exact = pearson_fisher_z(np.arange(10.0), 3 * np.arange(10.0) + 1)
    assert exact.effect == 1.0 and exact.p_value == 0.0


# --------------------------------------------------------------------------- Spearman


@pytest.mark.parametrize("seed, n, ties", [(21, 8, False), (22, 50, True), (23, 300, False), (24, 120, True)])
def test_spearman_matches_scipy(seed, n, ties):
    # Reference: scipy.stats.spearmanr on the same arrays (rho and p).
    rng = np.random.default_rng(seed)
    x = rng.standard_normal(n)
    y = np.exp(0.3 * x) + rng.standard_normal(n)
    if ties:
        x, y = np.round(x, 1), np.round(y, 0)
    result = spearman(x, y)
    reference = stats.spearmanr(x, y)
    assert result.statistic == pytest.approx(reference.statistic, rel=1e-10, abs=1e-12)
    assert result.effect == result.statistic
    assert result.p_value == pytest.approx(reference.pvalue, rel=1e-10, abs=1e-15)
    assert result.effect_name == "Spearman rho"


def test_spearman_is_invariant_to_monotone_transforms_and_calibrated():
    rng = np.random.default_rng(25)
    x = rng.standard_normal(80)
    y = x + rng.standard_normal(80)
    assert spearman(np.exp(x), y**3).statistic == pytest.approx(spearman(x, y).statistic, rel=1e-12)
    replicates = 1000
    rejections = sum(spearman(rng.exponential(size=40), rng.standard_normal(40)).p_value < ALPHA
                     for _ in range(replicates))
    low, high = _binomial_99(replicates)
    assert low <= rejections <= high


def test_spearman_constant_input():
    result = spearman(np.full(12, 1.0), np.arange(12.0))
    assert math.isnan(result.statistic) and result.p_value is None


def test_pairwise_associations_equal_the_pair_by_pair_tests():
    from preflight.checks.association import pairwise_associations

    rng = np.random.default_rng(77)
    X = rng.standard_normal((400, 4))
    X[:, 1] += 0.3 * X[:, 0]
    X[:, 3] = np.round(X[:, 3] * 2)  # ties: mid-ranks
    X[:, 2] = 5.0  # a constant column has no correlation
    pairs = [(0, 1), (0, 3), (1, 3), (0, 2)]
    for (a, b), (pearson, rank) in zip(pairs, pairwise_associations(X, pairs)):
        expected_pearson = pearson_fisher_z(X[:, a], X[:, b])
        expected_rank = spearman(X[:, a], X[:, b])
        if b == 2:
            assert pearson.p_value is None and rank.p_value is None
            continue
        assert pearson.effect == pytest.approx(expected_pearson.effect, abs=1e-12)
        assert pearson.p_value == pytest.approx(expected_pearson.p_value, rel=1e-9, abs=1e-300)
        assert rank.effect == pytest.approx(expected_rank.effect, abs=1e-12)
        assert rank.p_value == pytest.approx(expected_rank.p_value, rel=1e-9, abs=1e-300)
        # and scipy, the reference library, on the same numbers
        assert rank.effect == pytest.approx(stats.spearmanr(X[:, a], X[:, b]).statistic, abs=1e-12)


def _rank_cases():
    rng = np.random.default_rng(31)
    normal = rng.standard_normal(3000)
    return {
        "continuous": normal,
        "rounded": np.round(normal, 1),
        "few-levels": rng.integers(0, 3, 500).astype(float),
        "all-equal": np.full(40, 2.5),
        "one-value": np.array([7.0]),
        "two-tied": np.array([1.0, 1.0]),
        "signed-zeros": np.array([0.0, -0.0, 1.0, -0.0, -1.0, 0.0]),
        "infinities": np.array([np.inf, -np.inf, 3.0, np.inf, -2.0]),
        "sorted-with-runs": np.repeat(np.arange(50.0), rng.integers(1, 6, 50)),
        "strided-column": rng.standard_normal((600, 3)).round(1)[:, 1],
    }


@pytest.mark.parametrize("name", list(_rank_cases()))
def test_mid_ranks_are_scipy_rankdata_bit_for_bit(name):
    # Mid-ranks are integers or half-integers, so they must agree exactly.
    from preflight.checks.association import _mid_ranks

    values = _rank_cases()[name]
    ranks, expected = _mid_ranks(values), stats.rankdata(values)
    assert ranks.dtype == expected.dtype == np.float64
    assert np.array_equal(ranks, expected)


def test_entropy_ratio_reads_both_orders_from_one_matrix_bit_for_bit():
    # The ratio used to evaluate the swapped order separately; reading it
    # from the same matrix must give exactly the same value.
    from preflight.checks.direction import _standardise
    from preflight.structure import pairwise_likelihood_ratios

    def two_evaluations(x, y):
        xs, ys = _standardise(x), _standardise(y)
        forward = float(pairwise_likelihood_ratios(np.column_stack([xs, ys]), measure="logcosh")[0, 1])
        backward = float(pairwise_likelihood_ratios(np.column_stack([ys, xs]), measure="logcosh")[0, 1])
        return (forward - backward) / 2.0

    rng = np.random.default_rng(41)
    for n in (12, 300, 5000, 9000):
        for x in (rng.laplace(size=n), rng.uniform(size=n), rng.exponential(size=n), rng.standard_t(3, n)):
            x = x * 10.0 ** rng.uniform(-3, 3)
            y = rng.uniform(-2, 2) * x + _noise(rng, "laplace", n) * 10.0 ** rng.uniform(-3, 3)
            got = pairwise_likelihood_ratio(x, y).statistic
            assert np.float64(got).view(np.int64) == np.float64(two_evaluations(x, y)).view(np.int64)
            assert pairwise_likelihood_ratio(y, x).statistic == -got
