"""Tests of preflight.checks.independence: HSIC (exact, permutation, random
Fourier features, dispatcher) and the bias-corrected distance correlation.

References are direct formulas written here with explicit matrices, scipy on
the same numbers, and seeded simulation (false-alarm rate inside the binomial
99 % interval, power under an alternative).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats
from threadpoolctl import threadpool_limits

from preflight.checks.independence import (
    distance_correlation,
    hsic,
    hsic_gamma,
    hsic_pairs,
    hsic_permutation,
    hsic_rff,
)
from preflight.errors import InputError

ALPHA = 0.05


@pytest.fixture(autouse=True, scope="module")
def _single_threaded_blas():
    # The simulations run thousands of small matrix products; on a shared
    # 2-core machine BLAS threads contend and run several times slower.
    with threadpool_limits(limits=1):
        yield


def _binomial_99(replicates: int, rate: float = ALPHA) -> tuple[float, float]:
    return stats.binom.interval(0.99, replicates, rate)


def _standardised(v):
    v = np.asarray(v, dtype=float)
    return (v - v.mean()) / v.std()


def _median_distance(v):
    diffs = np.abs(v[:, None] - v[None, :])
    return float(np.median(diffs[np.triu_indices(v.shape[0], k=1)]))


def _direct_hsic(x, y):
    """HSIC_b, normalised HSIC and the gamma p-value with an explicit H matrix.

    Formulas of Gretton et al. (2008), "A kernel statistical test of
    independence": HSIC_b = tr(KHLH)/n^2; null mean (1 + mu_x mu_y - mu_x - mu_y)/n;
    null variance 2(n-4)(n-5)/(n(n-1)(n-2)(n-3)) * mean_{i != j} ((HKH)_ij (HLH)_ij)^2;
    gamma with shape mean^2/var and scale n var/mean for n HSIC_b.
    """
    xs, ys = _standardised(x), _standardised(y)
    n = xs.shape[0]
    K = np.exp(-((xs[:, None] - xs[None, :]) ** 2) / (2 * _median_distance(xs) ** 2))
    L = np.exp(-((ys[:, None] - ys[None, :]) ** 2) / (2 * _median_distance(ys) ** 2))
    H = np.eye(n) - np.ones((n, n)) / n
    hsic_b = np.trace(K @ H @ L @ H) / n**2
    Kc, Lc = H @ K @ H, H @ L @ H
    normalised = np.trace(Kc @ Lc) / math.sqrt(np.trace(Kc @ Kc) * np.trace(Lc @ Lc))
    ones = np.ones(n)
    mu_x = ones @ (K - np.diag(np.diag(K))) @ ones / (n * (n - 1))
    mu_y = ones @ (L - np.diag(np.diag(L))) @ ones / (n * (n - 1))
    mean = (1 + mu_x * mu_y - mu_x - mu_y) / n
    B = (Kc * Lc) ** 2
    var = (2 * (n - 4) * (n - 5) / (n * (n - 1) * (n - 2) * (n - 3))
           * (ones @ (B - np.diag(np.diag(B))) @ ones) / (n * (n - 1)))
    p = stats.gamma.sf(n * hsic_b, mean**2 / var, scale=n * var / mean)
    return hsic_b, normalised, p


def _dependent_pair(rng, n, strength):
    x = rng.standard_normal(n)
    return x, strength * x**2 + rng.standard_normal(n)


# --------------------------------------------------------------------------- exact HSIC


@pytest.mark.parametrize("seed, strength", [(1, 0.0), (2, 0.3), (3, 1.0)])
def test_exact_hsic_matches_explicit_matrix_formula(seed, strength):
    # Reference: direct O(n^2) formula with explicit H, K, L (Gretton et al. 2008).
    rng = np.random.default_rng(seed)
    x, y = _dependent_pair(rng, 150, strength)
    hsic_b, normalised, p = _direct_hsic(x, y)
    result = hsic_gamma(x, y)
    n = x.shape[0]
    assert result.n == n
    assert result.statistic / n == pytest.approx(hsic_b, rel=1e-10, abs=1e-14)
    assert result.effect == pytest.approx(normalised, rel=1e-10)
    assert result.p_value == pytest.approx(p, rel=1e-8, abs=1e-14)
    assert result.effect_name == "normalised HSIC"
    assert result.p_adjusted is None and result.passed is None


def test_exact_hsic_statistic_is_invariant_to_shift_and_positive_rescale():
    rng = np.random.default_rng(4)
    x, y = _dependent_pair(rng, 300, 0.5)
    base = hsic_gamma(x, y)
    moved = hsic_gamma(3.7 + 250.0 * x, -12.0 + 0.004 * y)
    assert moved.statistic == pytest.approx(base.statistic, rel=1e-10)
    assert moved.p_value == pytest.approx(base.p_value, rel=1e-8)
    rff_base = hsic_rff(x, y, seed=9)
    rff_moved = hsic_rff(3.7 + 250.0 * x, -12.0 + 0.004 * y, seed=9)
    assert rff_moved.statistic == pytest.approx(rff_base.statistic, rel=1e-8)
    dc_base = distance_correlation(x, y)
    dc_moved = distance_correlation(3.7 + 250.0 * x, -12.0 + 0.004 * y)
    assert dc_moved.effect == pytest.approx(dc_base.effect, rel=1e-10)


def test_exact_hsic_rejection_rate_under_independence_is_nominal():
    # Seeded simulation: 400 independent pairs of very different shapes at n = 200.
    rng = np.random.default_rng(20261202)
    replicates, n = 400, 200
    rejections = 0
    for i in range(replicates):
        x = rng.standard_normal(n) if i % 2 else rng.uniform(size=n)
        y = rng.exponential(size=n) if i % 2 else rng.standard_t(3, size=n)
        rejections += hsic_gamma(x, y).p_value < ALPHA
    low, high = _binomial_99(replicates)
    assert low <= rejections <= high


def test_exact_hsic_detects_reverse_regression_residual():
    # y = x + uniform noise; regressing x on y (the wrong way) leaves a residual
    # uncorrelated with y but dependent on it (Shimizu et al. 2006 for the idea).
    rng = np.random.default_rng(7)
    replicates, n = 20, 1000
    detected = 0
    for _ in range(replicates):
        x = rng.uniform(-1, 1, n)
        y = x + rng.uniform(-1, 1, n)
        yc = y - y.mean()
        residual = x - x.mean() - (yc @ (x - x.mean())) / (yc @ yc) * yc
        assert abs(np.corrcoef(residual, y)[0, 1]) < 1e-10
        detected += hsic_gamma(residual, y).p_value < ALPHA
    assert detected >= math.ceil(0.95 * replicates)


@pytest.mark.parametrize("seed, strength", [(11, 0.0), (12, 0.1), (13, 0.15), (14, 0.25)])
def test_gamma_p_value_agrees_with_large_permutation_null(seed, strength):
    # Reference: 2000-permutation null on the same statistic.  Tolerance: 0.02
    # where the permutation p is below 0.2 (where decisions are made; Monte
    # Carlo SE <= 0.009), 0.08 elsewhere (the gamma fits the body less well;
    # largest gap seen over 8 datasets was 0.054).
    rng = np.random.default_rng(seed)
    x, y = _dependent_pair(rng, 200, strength)
    gamma_p = hsic_gamma(x, y).p_value
    permutation_p = hsic_permutation(x, y, n_permutations=2000, seed=seed).p_value
    tolerance = 0.02 if permutation_p < 0.2 else 0.08
    assert abs(gamma_p - permutation_p) <= tolerance


def test_permutation_p_value_is_seeded_and_on_the_permutation_grid():
    rng = np.random.default_rng(15)
    x, y = _dependent_pair(rng, 80, 0.2)
    first = hsic_permutation(x, y, n_permutations=99, seed=3)
    again = hsic_permutation(x, y, n_permutations=99, seed=3)
    assert first == again
    assert first.statistic == pytest.approx(hsic_gamma(x, y).statistic, rel=1e-12)
    exceed = first.p_value * 100 - 1
    assert exceed == pytest.approx(round(exceed), abs=1e-9) and 0 <= round(exceed) <= 99
    strong = hsic_permutation(x, x + 0.1 * rng.standard_normal(80), n_permutations=99, seed=3)
    assert strong.p_value == pytest.approx(1 / 100)


# --------------------------------------------------------------------------- random Fourier features


def test_rff_statistic_converges_to_the_exact_one():
    # Same data and bandwidths (n <= 1000 uses every point for the median).
    # Tolerance: root-mean-square relative error over 8 seeds falls with the
    # number of frequencies and is below 4 % at 4096 (about 1.7 % observed).
    rng = np.random.default_rng(21)
    x, y = _dependent_pair(rng, 200, 1.0)
    exact = hsic_gamma(x, y).statistic
    rms = []
    for n_features in (16, 256, 4096):
        errors = np.array([hsic_rff(x, y, n_features=n_features, seed=s).statistic / exact - 1
                           for s in range(8)])
        rms.append(float(np.sqrt(np.mean(errors**2))))
    assert rms[0] > rms[1] > rms[2]
    assert rms[2] < 0.04
    exact_effect = hsic_gamma(x, y).effect
    assert hsic_rff(x, y, n_features=4096, seed=0).effect == pytest.approx(exact_effect, rel=0.05)


def test_rff_rejection_rate_under_independence_is_nominal():
    # Seeded simulation: 300 independent pairs at n = 2000 with the default 40 frequencies.
    rng = np.random.default_rng(31)
    replicates, n = 300, 2000
    rejections = 0
    for i in range(replicates):
        x = rng.standard_normal(n)
        y = rng.exponential(size=n) if i % 2 else rng.uniform(size=n)
        rejections += hsic_rff(x, y, seed=i).p_value < ALPHA
    low, high = _binomial_99(replicates)
    assert low <= rejections <= high


def test_rff_detects_dependence_without_correlation():
    rng = np.random.default_rng(32)
    x = rng.standard_normal(5000)
    y = np.abs(x) + 0.5 * rng.standard_normal(5000)
    result = hsic_rff(x, y)
    assert result.p_value < 1e-6
    assert result.n == 5000


# --------------------------------------------------------------------------- many pairs of one table


def test_hsic_pairs_equals_hsic_pair_by_pair_up_to_exact_max_n():
    rng = np.random.default_rng(40)
    X = rng.standard_normal((600, 3))
    X[:, 1] += np.abs(X[:, 0])
    pairs = [(0, 1), (0, 2), (1, 2)]
    results = hsic_pairs(X, pairs, [7, 8, 9])
    for (a, b), seed, result in zip(pairs, [7, 8, 9], results):
        single = hsic(X[:, a], X[:, b], seed=seed)
        assert (result.statistic, result.p_value, result.effect) == (single.statistic, single.p_value, single.effect)


def test_hsic_pairs_with_shared_features_matches_the_exact_statistic():
    # Above exact_max_n the shared random features approximate the exact
    # n * HSIC_b; with many frequencies the two agree closely.
    rng = np.random.default_rng(41)
    X = rng.standard_normal((1500, 3))
    X[:, 1] = np.sin(2 * X[:, 0]) + 0.3 * rng.standard_normal(1500)
    (shared,) = hsic_pairs(X, [(0, 1)], [0], exact_max_n=1000, n_features=4096, seed=3)
    exact = hsic_gamma(X[:, 0], X[:, 1])
    assert "shared by every pair" in shared.note
    assert shared.statistic == pytest.approx(exact.statistic, rel=0.05)
    assert shared.effect == pytest.approx(exact.effect, rel=0.05)


def test_hsic_pairs_rejection_rate_under_independence_is_nominal():
    # 300 seeded tables of two independent columns, n = 2500 (random-feature regime).
    replicates, n = 300, 2500
    rejections = 0
    for i in range(replicates):
        rng = np.random.default_rng(4200 + i)
        X = np.column_stack([rng.standard_normal(n), rng.exponential(size=n) if i % 2 else rng.uniform(size=n)])
        (result,) = hsic_pairs(X, [(0, 1)], [0], seed=i)
        rejections += result.p_value < ALPHA
    low, high = _binomial_99(replicates)
    assert low <= rejections <= high


def test_hsic_pairs_detects_dependence_and_respects_column_seeds():
    rng = np.random.default_rng(43)
    X = rng.standard_normal((5000, 3))
    X[:, 2] = np.abs(X[:, 0]) + 0.5 * rng.standard_normal(5000)
    results = hsic_pairs(X, [(0, 2), (0, 1)], [0, 0], seed=1)
    assert results[0].p_value < 1e-6 and results[1].p_value > 1e-3
    # Column seeds follow the columns: the same pair of columns in another
    # position with the same column seeds gives the same result.
    moved = X[:, [2, 1, 0]]
    again = hsic_pairs(moved, [(2, 0)], [0], seed=1, column_seeds=[30, 20, 10])
    first = hsic_pairs(X, [(0, 2)], [0], seed=1, column_seeds=[10, 20, 30])
    assert again[0].statistic == pytest.approx(first[0].statistic, rel=1e-6)


def test_hsic_pairs_constant_column_and_bad_seeds():
    X = np.column_stack([np.ones(3000), np.arange(3000.0), np.sin(np.arange(3000.0))])
    results = hsic_pairs(X, [(0, 1), (1, 2)], [0, 0])
    assert results[0].p_value is None and "constant" in results[0].note
    assert results[1].p_value is not None
    with pytest.raises(InputError):
        hsic_pairs(X, [(0, 1)], [0, 1])


# --------------------------------------------------------------------------- dispatcher


def test_dispatcher_runs_exact_gamma_up_to_exact_max_n():
    rng = np.random.default_rng(41)
    x, y = _dependent_pair(rng, 300, 0.3)
    result = hsic(x, y)
    direct = hsic_gamma(x, y)
    assert result.name == "hsic"
    assert (result.statistic, result.p_value, result.effect, result.n) == (
        direct.statistic, direct.p_value, direct.effect, direct.n)
    assert "exact HSIC on 300 rows" in result.note and "gamma" in result.note


def test_dispatcher_runs_permutations_when_asked():
    rng = np.random.default_rng(42)
    x, y = _dependent_pair(rng, 100, 0.3)
    result = hsic(x, y, permutations=49, seed=5)
    assert result == hsic_permutation(x, y, n_permutations=49, seed=5).with_name("hsic")
    assert "49 permutations" in result.note


def test_dispatcher_switches_to_random_features_above_exact_max_n():
    rng = np.random.default_rng(43)
    x, y = _dependent_pair(rng, 1500, 0.3)
    result = hsic(x, y, exact_max_n=1000, permutations=10)
    assert result.n == 1500
    assert "random-Fourier-feature HSIC on 1500 rows with 40" in result.note
    assert "10 permutations requested but not run" in result.note


def test_dispatcher_subsamples_above_max_n():
    rng = np.random.default_rng(44)
    x, y = _dependent_pair(rng, 3000, 0.3)
    result = hsic(x, y, exact_max_n=1000, max_n=2000, n_features=64, seed=8)
    assert result.n == 2000
    assert result.note.startswith("seeded subsample of 2000 of 3000 rows")
    assert "random-Fourier-feature HSIC on 2000 rows with 64" in result.note
    assert result == hsic(x, y, exact_max_n=1000, max_n=2000, n_features=64, seed=8)
    small = hsic(x, y, exact_max_n=1000, max_n=500, seed=8)
    assert small.n == 500 and "exact HSIC on 500 rows" in small.note


def test_constant_input_gives_no_p_value():
    x = np.linspace(0, 1, 50)
    for result in (hsic_gamma(x, np.full(50, 2.5)), hsic_rff(np.full(50, 2.5), x),
                   hsic(x, np.full(50, 0.1)), distance_correlation(x, np.full(50, 0.1))):
        assert math.isnan(result.statistic) and result.p_value is None
        assert "constant" in result.note
        assert result.to_dict()["statistic"] is None


def test_heavily_tied_input_uses_non_zero_differences_for_bandwidth():
    rng = np.random.default_rng(45)
    x = np.where(rng.uniform(size=200) < 0.8, 0.0, rng.standard_normal(200))
    result = hsic_gamma(x, rng.standard_normal(200))
    assert result.p_value is not None and 0 <= result.p_value <= 1
    assert "non-zero differences" in result.note


@pytest.mark.parametrize("call", [
    lambda: hsic_gamma(np.arange(10.0), np.arange(11.0)),
    lambda: hsic_gamma([1.0, np.nan, 2.0, 3.0, 4.0, 5.0], np.arange(6.0)),
    lambda: hsic_permutation(np.arange(10.0), np.arange(10.0), n_permutations=0),
    lambda: hsic_rff(np.arange(10.0), np.arange(10.0), n_features=0),
    lambda: hsic(np.arange(10.0), np.arange(10.0), permutations=-1),
    lambda: distance_correlation(np.arange(3.0), np.arange(3.0)),
])
def test_bad_input_raises_input_error(call):
    with pytest.raises(InputError):
        call()


def test_inputs_are_not_modified():
    rng = np.random.default_rng(46)
    x, y = _dependent_pair(rng, 60, 0.3)
    x_copy, y_copy = x.copy(), y.copy()
    hsic_gamma(x, y), hsic_permutation(x, y, 20), hsic_rff(x, y), hsic(x, y), distance_correlation(x, y)
    assert np.array_equal(x, x_copy) and np.array_equal(y, y_copy)


# --------------------------------------------------------------------------- distance correlation


def _direct_bias_corrected_dcor(x, y):
    """Unbiased dCov^2 in the closed form of Huo and Székely (2016), "Fast computing
    for distance covariance", Technometrics 58 (from memory; it agrees with the
    U-centred form of Székely and Rizzo 2014 to round-off):
    T1/(n(n-3)) - 2 T2/(n(n-2)(n-3)) + T3/(n(n-1)(n-2)(n-3)),
    T1 = sum a_ij b_ij, T2 = sum_i a_i. b_i., T3 = a.. b..
    """
    def omega(a, b):
        n = a.shape[0]
        return ((a * b).sum() / (n * (n - 3)) - 2 * (a.sum(1) * b.sum(1)).sum() / (n * (n - 2) * (n - 3))
                + a.sum() * b.sum() / (n * (n - 1) * (n - 2) * (n - 3)))

    a = np.abs(x[:, None] - x[None, :])
    b = np.abs(y[:, None] - y[None, :])
    return omega(a, b) / math.sqrt(omega(a, a) * omega(b, b))


@pytest.mark.parametrize("seed, strength", [(51, 0.0), (52, 0.5)])
def test_distance_correlation_matches_closed_form(seed, strength):
    rng = np.random.default_rng(seed)
    x, y = _dependent_pair(rng, 120, strength)
    r_star = _direct_bias_corrected_dcor(x, y)
    result = distance_correlation(x, y)
    assert result.effect == pytest.approx(r_star, rel=1e-10, abs=1e-13)
    nu = 120 * 117 / 2
    t_stat = math.sqrt(nu - 1) * r_star / math.sqrt(1 - r_star**2)
    assert result.statistic == pytest.approx(t_stat, rel=1e-9, abs=1e-11)
    assert result.p_value == pytest.approx(stats.t.sf(t_stat, nu - 1), rel=1e-8, abs=1e-14)


def test_distance_correlation_subsamples_above_max_n():
    rng = np.random.default_rng(53)
    x, y = _dependent_pair(rng, 2500, 0.3)
    result = distance_correlation(x, y, seed=4)
    assert result.n == 2000 and result.note.startswith("seeded subsample of 2000 of 2500 rows")
    assert result == distance_correlation(x, y, seed=4)


def test_distance_correlation_t_test_is_liberal_for_scalars_and_permutation_is_nominal():
    # Seeded simulation.  The t limit holds in high dimension (Székely and Rizzo
    # 2013); for two scalars its false-alarm rate at 0.05 is above nominal
    # (about 0.06-0.07 observed over 4000 pairs) but bounded, which the
    # docstring states; the permutation p-value is exact.
    rng = np.random.default_rng(54)
    replicates = 400
    t_rejections = 0
    for _ in range(replicates):
        t_rejections += distance_correlation(rng.standard_normal(150), rng.exponential(size=150)).p_value < ALPHA
    low, _ = _binomial_99(replicates)
    _, high_liberal = _binomial_99(replicates, 0.10)
    assert low <= t_rejections <= high_liberal
    perm_rejections = 0
    replicates_perm = 300
    for i in range(replicates_perm):
        result = distance_correlation(rng.standard_normal(40), rng.uniform(size=40), permutations=99, seed=i)
        perm_rejections += result.p_value < ALPHA
    low, high = _binomial_99(replicates_perm)
    assert low <= perm_rejections <= high


def test_distance_correlation_detects_nonmonotone_dependence():
    rng = np.random.default_rng(55)
    x = rng.standard_normal(300)
    y = x**2 + 0.5 * rng.standard_normal(300)
    result = distance_correlation(x, y)
    assert result.p_value < 1e-6 and result.effect > 0.05


@pytest.mark.parametrize("kind", ["normal", "rounded", "binary", "mostly-zero", "heavy-tailed"])
def test_median_bandwidth_equals_numpy_median_of_all_differences(kind):
    # The selection algorithm must give exactly np.median of the m(m-1)/2
    # absolute differences (and the non-zero fallback on heavy ties).
    from preflight.checks.independence import _median_bandwidth

    for seed in range(25):
        rng = np.random.default_rng(9000 + seed)
        n = int(rng.integers(2, 1200))
        v = {"normal": lambda: rng.standard_normal(n),
             "rounded": lambda: np.round(rng.standard_normal(n) * rng.uniform(0.1, 3)),
             "binary": lambda: rng.integers(0, 2, n).astype(float),
             "mostly-zero": lambda: np.concatenate([np.zeros(n), rng.standard_normal(max(1, n // 10))]),
             "heavy-tailed": lambda: rng.standard_t(1, n)}[kind]()
        if v.shape[0] > 1000:
            v = v[:1000]  # below the subsample limit, so no rows are drawn
        rows, cols = np.triu_indices(v.shape[0], k=1)
        diffs = np.abs(v[rows] - v[cols])
        expected = float(np.median(diffs))
        fallback = not expected > 0
        if fallback:
            positive = diffs[diffs > 0]
            expected = float(np.median(positive)) if positive.size else 1.0
        assert _median_bandwidth(v, np.random.default_rng(0)) == (expected, fallback)


def test_remembered_features_change_no_result():
    # A pair's regressor enters several HSICs with the same seed; its features
    # are then reused.  Results must equal a run with nothing remembered.
    from preflight.checks import independence

    rng = np.random.default_rng(44)
    x = rng.uniform(size=3000)
    others = [x + rng.uniform(size=3000), rng.uniform(size=3000), np.abs(x - 0.5) + 0.1 * rng.normal(size=3000)]
    warm = [hsic_rff(x, other, seed=12) for other in others]
    cold = []
    for other in others:
        independence._FEATURE_CACHE.clear()
        cold.append(hsic_rff(x, other, seed=12))
    assert [(r.statistic, r.p_value, r.effect) for r in warm] == [(r.statistic, r.p_value, r.effect) for r in cold]


def _fitted_residual_null(rng, n, noise):
    """Skewed regressor, y = 0.7 x + noise, and the OLS residual of y on x (x independent of the noise)."""
    x = rng.exponential(size=n) + rng.exponential(size=n)
    y = 0.7 * x + noise(rng, n)
    slope = np.cov(x, y)[0, 1] / np.var(x, ddof=1)
    return x, y - slope * x


def _exponential(rng, n):
    return rng.exponential(size=n) - 1.0


def _gaussian(rng, n):
    return rng.standard_normal(n)


@pytest.mark.parametrize("n", [500, 2500], ids=["exact", "random-features"])
def test_hsic_of_regressor_and_ols_residual_without_design_is_liberal_with_skewed_noise(n):
    # The shortfall the correction exists for (Sen and Sen 2014): the slope was
    # estimated from the same rows.  Measured when this test was written:
    # 25/300 (n=500) and 28/300 (n=2500) at alpha 5 %, against 15 and 17 with the
    # design; the 99 % interval is 7-24.  With Gaussian noise the same test
    # without the design is conservative instead (2 and 6 of 300).
    rejections = sum(hsic(*_fitted_residual_null(np.random.default_rng(k), n, _exponential), seed=k).p_value < ALPHA
                     for k in range(300))
    assert rejections > 20, rejections


@pytest.mark.parametrize("n", [500, 2500], ids=["exact", "random-features"])
@pytest.mark.parametrize("noise", [_exponential, _gaussian], ids=["skewed noise", "gaussian noise"])
def test_hsic_with_residual_design_is_calibrated_under_the_null(n, noise):
    replicates = 300
    rejections = 0
    for k in range(replicates):
        x, residual = _fitted_residual_null(np.random.default_rng(k), n, noise)
        rejections += hsic(x, residual, residual_design=x, seed=k).p_value < ALPHA
    low, high = _binomial_99(replicates)
    assert low <= rejections <= high, rejections


def test_hsic_with_residual_design_is_calibrated_for_a_spline_fit_with_other_regressors():
    # Regression spline of a bending mechanism plus a second regressor: 8 + 1
    # estimated coefficients.  Without the design 39 of these 300 true nulls
    # were rejected when this was written (20 with it).
    from preflight.fit import bspline_basis, ols

    replicates, n = 300, 800
    rejections = 0
    for k in range(replicates):
        rng = np.random.default_rng(5000 + k)
        x = rng.uniform(-2, 2, size=n)
        z = x + rng.uniform(size=n)
        design = np.column_stack([bspline_basis(x, 8)[:, 1:], z])
        y = np.tanh(x) + 0.5 * z + rng.exponential(size=n)
        rejections += hsic(x, ols(design, y).residuals, residual_design=design, seed=k).p_value < ALPHA
    low, high = _binomial_99(replicates)
    assert low <= rejections <= high, rejections


def test_hsic_with_residual_design_keeps_its_power_against_the_anticausal_regression():
    # x -> y with uniform noise; regressing x on y leaves a residual that depends on y.
    replicates, n = 100, 1500
    detected = {False: 0, True: 0}
    for k in range(replicates):
        rng = np.random.default_rng(8000 + k)
        x = rng.uniform(size=n)
        y = x + 0.6 * rng.uniform(size=n)
        slope = np.cov(y, x)[0, 1] / np.var(y, ddof=1)
        residual = x - slope * y
        for corrected in (False, True):
            result = hsic(y, residual, residual_design=y if corrected else None, seed=k)
            detected[corrected] += result.p_value < ALPHA
    assert detected[True] >= 0.9 * replicates, detected
    assert detected[True] >= detected[False] - 5, detected


@pytest.mark.parametrize("n", [400, 3000], ids=["exact", "random-features"])
def test_residual_design_correction_does_not_depend_on_how_the_design_is_written(n):
    # The correction depends on the design's column space only.
    rng = np.random.default_rng(3)
    x, z = rng.exponential(size=n), rng.uniform(size=n)
    design = np.column_stack([x, z])
    y = x * 0.3 + z + rng.exponential(size=n)
    residual = y - np.column_stack([np.ones(n), design]) @ np.linalg.lstsq(
        np.column_stack([np.ones(n), design]), y, rcond=None)[0]
    rewritten = np.column_stack([3.0 * x + 2.0 * z - 7.0, 1e3 * z, x + z])  # same span, one column redundant
    a = hsic(x, residual, residual_design=design, seed=1)
    b = hsic(x, residual, residual_design=rewritten, seed=1)
    assert a.p_value == pytest.approx(b.p_value, rel=1e-6)
    assert a.statistic == b.statistic


def test_residual_design_correction_in_feature_form_approaches_the_kernel_form():
    # With many random features the feature-form terms estimate the kernel-form ones.
    from preflight.checks import independence as ind

    rng = np.random.default_rng(21)
    n = 400
    x = ind._standardise(rng.exponential(size=n))
    design = np.column_stack([x, rng.uniform(size=n)])
    fit = ind._ResidualFit(ind._orthonormal_basis(design), 1.0)
    u = ind._standardise(rng.exponential(size=n))
    sigma_x, sigma_u = 0.9, 0.8
    kc, _, _ = ind._centred_gram(x, sigma_x)
    exact_x = ind._regressor_terms_exact(kc, fit)
    _, _, exact_u = ind._centred_gram(u, sigma_u, fitted_residual=True)
    omega_rng = np.random.default_rng(0)
    phi, _ = ind._features_and_derivative_mean(x, omega_rng.standard_normal(20000) / sigma_x)
    psi, derivative_mean = ind._features_and_derivative_mean(u, omega_rng.standard_normal(20000) / sigma_u)
    features_x = ind._regressor_terms_rff(phi, fit)
    features_u = ind._residual_terms_rff(psi, derivative_mean, u)
    np.testing.assert_allclose(features_x, exact_x, rtol=0.03)
    np.testing.assert_allclose(features_u, exact_u, rtol=0.05, atol=2e-3)


def test_residual_design_must_fit_the_residual():
    rng = np.random.default_rng(2)
    x, y = rng.uniform(size=200), rng.uniform(size=200)
    with pytest.raises(InputError, match="not the least-squares residual"):
        hsic(x, y, residual_design=x)
    with pytest.raises(InputError, match="rows"):
        hsic(x, y - np.polyval(np.polyfit(x, y, 1), x), residual_design=x[:150])


@pytest.mark.parametrize("n", [3, 40, 95, 400, 1000])
def test_consecutive_ranks_of_the_differences_from_one_search(n):
    # The median of an even number of differences needs two neighbouring ranks; one bisection returns both,
    # equal to sorting every difference, on continuous, tied and two-valued columns.
    from preflight.checks.independence import _kth_differences

    rng = np.random.default_rng(n)
    for column in (rng.standard_normal(n), np.round(rng.standard_normal(n), 1), rng.integers(0, 2, n) * 0.3):
        s = np.sort(column)
        ordered = np.sort((s[None, :] - s[:, None])[np.triu_indices(n, k=1)])
        total = ordered.shape[0]
        for k in sorted({1, max(1, total // 2), max(1, total - 1)}):
            count = min(2, total - k + 1)
            assert _kth_differences(s, k, count) == tuple(ordered[k - 1:k - 1 + count])


def test_neighbouring_ranks_far_apart_are_found_on_each_side_of_a_midpoint():
    # 100 zeros and 100 tens: 9,900 zero differences, then 10,000 of ten.  Ranks 9,900 and 9,901 straddle
    # the bisection's midpoint, and each side's search goes on from its half of the bracket.
    from preflight.checks.independence import _kth_differences, _median_bandwidth

    s = np.sort(np.r_[np.zeros(100), np.full(100, 10.0)])
    assert _kth_differences(s, 9900, 2) == (0.0, 10.0)
    assert _kth_differences(s, 9899, 3) == (0.0, 0.0, 10.0)
    assert _median_bandwidth(s, np.random.default_rng(0)) == (10.0, False)  # median of 19,900: rank 9,950
