"""Remembered and shortened computations in preflight.fit give exactly the values of the direct ones.

Reports must not change by a bit when a spline basis comes from the cache
or when SciPy's design matrix is asked for without its Python-level bounds
scan, so everything here compares bit patterns, not tolerances.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.interpolate import BSpline

from preflight import fit


def _checked_basis(x, df, degree=3):
    """The basis as built before the cache: quantile knots, design_matrix with extrapolate=False."""
    x = np.asarray(x, dtype=np.float64)
    lo, hi = float(x.min()), float(x.max())
    n_interior = df - degree - 1
    interior = np.quantile(x, np.linspace(0, 1, n_interior + 2)[1:-1]) if n_interior else np.array([])
    interior = np.unique(interior[(interior > lo) & (interior < hi)])
    knots = np.concatenate([[lo] * (degree + 1), interior, [hi] * (degree + 1)])
    return BSpline.design_matrix(np.clip(x, lo, hi), knots, degree, extrapolate=False).toarray()


def _regressors():
    rng = np.random.default_rng(11)
    n = 2000
    normal = rng.normal(size=n)
    return {
        "normal": normal,
        "offset": 1e6 + normal,
        "tiny-scale": 1e-9 * normal,
        "skewed": rng.exponential(size=n),
        "heavy-tailed": rng.standard_t(2, size=n),
        "rounded": np.round(normal, 1),
        "heavily-tied": rng.integers(0, 4, n).astype(float),
        "binary": rng.integers(0, 2, n).astype(float),
        "ties-at-the-ends": np.concatenate([np.zeros(900), rng.uniform(size=200), np.ones(900)]),
        "data-on-quantiles": np.repeat(np.linspace(-1.0, 1.0, 7), 40),
        "sorted": np.sort(normal),
        "short": normal[:12],
    }


@pytest.mark.parametrize("name", list(_regressors()))
@pytest.mark.parametrize("df", [4, 5, 7, 10])
def test_basis_equals_the_checked_design_matrix_bit_for_bit(name, df):
    x = _regressors()[name]
    expected = _checked_basis(x, df)
    fit._MEMO.clear()
    first = fit.bspline_basis(x, df)
    again = fit.bspline_basis(x.copy(), df)  # equal content, another array: served from the cache
    assert again is first or np.shares_memory(again, first)
    for got in (first, again):
        assert got.shape == expected.shape and got.dtype == expected.dtype
        assert np.array_equal(got.view(np.int64), expected.view(np.int64))


def test_cached_basis_cannot_be_written_or_made_writeable():
    x = _regressors()["normal"]
    basis = fit.bspline_basis(x, 7)
    reference = basis.copy()
    with pytest.raises(ValueError):
        basis[0, 0] = 5.0
    with pytest.raises(ValueError):
        basis.flags.writeable = True
    with pytest.raises(ValueError):
        basis[:, 1:] *= 2.0
    assert np.array_equal(fit.bspline_basis(x, 7), reference)


def test_cache_tells_apart_regressors_df_and_degree():
    rng = np.random.default_rng(3)
    x = rng.normal(size=500)
    y = x.copy()
    y[17] = np.nextafter(y[17], np.inf)  # one ulp apart in one value
    fit._MEMO.clear()
    bases = {(name, df, degree): fit.bspline_basis(v, df, degree)
             for name, v in (("x", x), ("y", y)) for df in (5, 6) for degree in (2, 3)}
    for (name, df, degree), basis in bases.items():
        assert np.array_equal(basis, _checked_basis(x if name == "x" else y, df, degree))
    assert not np.array_equal(bases[("x", 6, 3)], bases[("y", 6, 3)])
    assert len(fit._MEMO) == 2 and all(len(entry.arrays) == 4 for entry in fit._MEMO.values())


def test_cache_stays_bounded(monkeypatch):
    rng = np.random.default_rng(4)
    fit._MEMO.clear()
    for _ in range(3 * fit._MEMO_ENTRIES):
        fit.bspline_basis(rng.normal(size=300), 6)
    assert len(fit._MEMO) == fit._MEMO_ENTRIES
    # Old entries go when the bytes run out; a basis larger than the whole
    # budget is computed but not kept.
    monkeypatch.setattr(fit, "_MEMO_BYTES", 2**20)
    fit.bspline_basis(rng.normal(size=20_000), 4)
    assert sum(entry.nbytes for entry in fit._MEMO.values()) <= fit._MEMO_BYTES
    x = rng.normal(size=40_000)
    large = fit.bspline_basis(x, 4)
    assert large.nbytes > fit._MEMO_BYTES and len(fit._MEMO) == 0
    assert np.array_equal(large, _checked_basis(x, 4))


def test_too_small_df_still_raises():
    with pytest.raises(ValueError, match="df must be at least"):
        fit.bspline_basis(np.arange(10.0), 3)


def test_design_derived_from_a_cached_basis_is_the_fresh_one_bit_for_bit():
    from preflight.checks.linearity import full_rank_columns

    rng = np.random.default_rng(5)
    fit._MEMO.clear()
    for x in (rng.normal(size=3000), np.round(rng.normal(size=3000), 1), rng.integers(0, 5, 800).astype(float)):
        y = np.sin(x) + rng.normal(size=x.shape[0])
        basis = fit.bspline_basis(x, 8)
        fresh = full_rank_columns(basis[:, 1:])
        calls = []

        def build():
            calls.append(1)
            return full_rank_columns(basis[:, 1:])

        derived = fit.derived_from_basis(basis, "design", build)
        assert fit.derived_from_basis(fit.bspline_basis(x.copy(), 8), "design", build) is derived
        assert len(calls) == 1
        # Same values and the same memory layout, so least squares on it rounds the same way.
        assert derived.strides == fresh.strides and np.array_equal(derived, fresh)
        assert not derived.flags.writeable
        with pytest.raises(ValueError):
            derived.flags.writeable = True
        expected, got = fit.ols(fresh, y), fit.ols(derived, y)
        assert got.rss == expected.rss and got.rank == expected.rank
        assert np.array_equal(got.residuals, expected.residuals) and np.array_equal(got.coef, expected.coef)


def test_design_of_an_uncached_basis_is_built_each_time():
    x = np.random.default_rng(6).normal(size=400)
    basis = fit.bspline_basis(x, 6)
    fit._MEMO.clear()
    calls = []

    def build():
        calls.append(1)
        return basis[:, 1:] * 1.0

    first = fit.derived_from_basis(basis, "design", build)
    second = fit.derived_from_basis(basis, "design", build)
    assert len(calls) == 2 and first is not second and first.flags.writeable
    assert len(fit._MEMO) == 0


def test_full_rank_columns_of_a_cached_basis_tail_is_remembered_and_exact():
    from preflight.checks.linearity import _full_rank_columns, full_rank_columns

    rng = np.random.default_rng(7)
    fit._MEMO.clear()
    x = np.round(rng.normal(size=2500), 1)
    basis = fit.bspline_basis(x, 9)
    first = full_rank_columns(basis[:, 1:])
    again = full_rank_columns(fit.bspline_basis(x.copy(), 9)[:, 1:])
    fresh = _full_rank_columns(basis[:, 1:].copy(), 1e-10)
    assert again is first and not first.flags.writeable
    assert first.strides == fresh.strides and np.array_equal(first, fresh)
    # Anything that is not exactly basis[:, 1:] of a cached basis is computed afresh.
    assert fit.basis_of_tail(basis[:, 1:]) is basis
    for other in (basis[:, 1:].copy(), basis[:, 2:], basis[1:, 1:], basis[:, :-1], basis[:, 1::2]):
        assert fit.basis_of_tail(other) is None
        assert full_rank_columns(other).flags.writeable
    fit._MEMO.clear()
    assert fit.basis_of_tail(basis[:, 1:]) is None


def test_white_test_with_a_remembered_design_equals_the_direct_one():
    from preflight.checks import variance

    rng = np.random.default_rng(9)
    fit._MEMO.clear()
    for x in (rng.normal(size=3000), rng.integers(0, 2, 3000).astype(float), rng.exponential(size=3000)):
        for _ in range(2):  # the second time from the memo
            e = rng.normal(size=x.shape[0]) * (1.0 + 0.3 * np.abs(x))
            remembered = variance.variance_checks(e, x)[1]
            direct = variance.white_test(e, x)
            assert remembered == direct
    # A strided view of the same values gets the same remembered design.
    table = np.column_stack([x, x])
    e = rng.normal(size=x.shape[0])
    assert variance.variance_checks(e, table[:, 1])[1] == variance.white_test(e, x)
