"""The scipy.special shortcuts of preflight.checks._distributions against scipy.stats.

They call the kernel scipy.stats itself calls, so the values must agree bit
for bit (not merely within an ulp): any difference would change reports.
The grids cover the edge cases that rv_continuous.sf handles around its
kernel (NaN and non-positive shapes, NaN x, the lower end of the support,
infinities) as well as tiny and huge degrees of freedom.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from scipy import stats

from preflight.checks import _distributions as dist

X_GRID = [-math.inf, -1e300, -50.0, -3.5, -1.0, -1e-300, -0.0, 0.0, 5e-324, 1e-300, 1e-12, 1e-3, 0.25, 0.5, 1.0,
          1.959963984540054, 2.0, 3.0, 7.5, 10.0, 38.0, 100.0, 1e3, 1e5, 1e10, 1e300, math.inf, math.nan]
DF_GRID = [-1.0, 0.0, 1e-300, 1e-10, 0.1, 0.5, 1, 1.0, 1.5, 2, 3, 5, 10, 29, 30.0, 100, 4997, 1e4, 1e6, 1e10,
           1e15, 1e300, math.inf, math.nan]
SMALL_DF_GRID = [-1.0, 0.0, 1e-10, 0.5, 1, 2, 3, 10, 4990, 1e6, 1e15, math.inf, math.nan]


def _same_bits(fast, reference) -> bool:
    fast, reference = np.asarray(fast, dtype=np.float64), np.asarray(reference, dtype=np.float64)
    if fast.shape != reference.shape:
        return False
    both_nan = np.isnan(fast) & np.isnan(reference)
    return bool(np.all(both_nan | (fast.view(np.int64) == reference.view(np.int64))))


def _grid_cases():
    for x, df in itertools.product(X_GRID, DF_GRID):
        yield "chi2", (x, df), dist.chi2_sf, stats.chi2.sf
        yield "t", (x, df), dist.t_sf, stats.t.sf
    for x, dfn, dfd in itertools.product(X_GRID, SMALL_DF_GRID, SMALL_DF_GRID):
        yield "f", (x, dfn, dfd), dist.f_sf, stats.f.sf
    for x in X_GRID:
        yield "norm", (x,), dist.norm_sf, stats.norm.sf


@pytest.mark.filterwarnings("ignore::RuntimeWarning")
def test_scalars_match_scipy_stats_bit_for_bit():
    mismatches = []
    for name, args, fast, reference in _grid_cases():
        got, expected = fast(*args), reference(*args)
        if not _same_bits(got, expected) or type(got) is not type(expected):
            mismatches.append((name, args, got, expected))
    assert not mismatches, mismatches[:10]


@pytest.mark.filterwarnings("ignore::RuntimeWarning")
def test_arrays_and_numpy_scalars_match_scipy_stats():
    x = np.array(X_GRID)
    for df in DF_GRID:
        assert _same_bits(dist.chi2_sf(x, df), stats.chi2.sf(x, df)), df
        assert _same_bits(dist.t_sf(x, df), stats.t.sf(x, df)), df
        assert _same_bits(dist.t_sf(x, np.int64(7)), stats.t.sf(x, np.int64(7)))
    for dfn, dfd in itertools.product(SMALL_DF_GRID, SMALL_DF_GRID):
        assert _same_bits(dist.f_sf(x, dfn, dfd), stats.f.sf(x, dfn, dfd)), (dfn, dfd)
    assert _same_bits(dist.norm_sf(x), stats.norm.sf(x))
    # Shapes broadcast against x, as in scipy.stats.
    df = np.array(DF_GRID)
    assert _same_bits(dist.chi2_sf(x[:, None], df[None, :]), stats.chi2.sf(x[:, None], df[None, :]))
    assert _same_bits(dist.t_sf(np.float64(2.5), df), stats.t.sf(np.float64(2.5), df))
    assert _same_bits(dist.chi2_sf(np.float64(3.0), np.int64(2)), stats.chi2.sf(np.float64(3.0), np.int64(2)))


def test_random_statistics_match_scipy_stats():
    # The values the checks actually produce: F, chi-squared and t statistics of all sizes.
    rng = np.random.default_rng(20240611)
    x = np.concatenate([rng.exponential(scale, 400) for scale in (1e-3, 1.0, 10.0, 1e3)])
    for df in (1, 2, 3, 5, 8, 9, 12, 4990, 4999):
        assert _same_bits(dist.chi2_sf(x, df), stats.chi2.sf(x, df))
        assert _same_bits(dist.t_sf(x, df), stats.t.sf(x, df))
        assert _same_bits(dist.f_sf(x, df, 4990), stats.f.sf(x, df, 4990))
        assert all(_same_bits(dist.f_sf(float(v), df, 4990), stats.f.sf(float(v), df, 4990)) for v in x[::40])
    assert _same_bits(dist.norm_sf(x), stats.norm.sf(x))
