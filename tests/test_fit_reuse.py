"""Designs built once per regressor (preflight.fit.RegressorDesigns) give exactly the values of the direct ones.

Reports must not change by a bit when a spline basis or a full-rank design is
handed to a check instead of rebuilt inside it, or when SciPy's design
matrix is asked for without its Python-level bounds scan, so everything here
compares bit patterns, not tolerances.  No design is remembered anywhere but
in the object the caller holds.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.interpolate import BSpline

from preflight import fit
from preflight.checks import linearity, variance


def _checked_basis(x, df, degree=3):
    """The basis as SciPy's checked path builds it: quantile knots, design_matrix with extrapolate=False."""
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


def _same_bits(a: np.ndarray, b: np.ndarray) -> bool:
    return a.shape == b.shape and a.dtype == b.dtype and np.array_equal(a.view(np.int64), b.view(np.int64))


@pytest.mark.parametrize("name", list(_regressors()))
@pytest.mark.parametrize("df", [4, 5, 7, 10])
def test_basis_equals_the_checked_design_matrix_bit_for_bit(name, df):
    x = _regressors()[name]
    expected = _checked_basis(x, df)
    designs = fit.RegressorDesigns(x)
    first = designs.spline_basis(df)
    assert designs.spline_basis(df) is first  # built once, then handed out again
    for got in (fit.bspline_basis(x, df), first):
        assert _same_bits(got, expected)


def test_designs_cannot_be_written_or_made_writeable():
    x = _regressors()["normal"]
    designs = fit.RegressorDesigns(x)
    for array in (designs.spline_basis(7), designs.spline_design(7), designs.white_design()):
        reference = array.copy()
        with pytest.raises(ValueError):
            array[0, 0] = 5.0
        with pytest.raises(ValueError):
            array.flags.writeable = True
        with pytest.raises(ValueError):
            array[:, 1:] *= 2.0
        assert np.array_equal(array, reference)
    # The plain function returns a fresh array the caller owns.
    assert fit.bspline_basis(x, 7).flags.writeable


def test_designs_tell_apart_df_degree_and_regressors():
    rng = np.random.default_rng(3)
    x = rng.normal(size=500)
    y = x.copy()
    y[17] = np.nextafter(y[17], np.inf)  # one ulp apart in one value
    designs = {"x": fit.RegressorDesigns(x), "y": fit.RegressorDesigns(y)}
    for name, values in (("x", x), ("y", y)):
        for df in (5, 6):
            for degree in (2, 3):
                assert _same_bits(designs[name].spline_basis(df, degree), _checked_basis(values, df, degree))
    assert not np.array_equal(designs["x"].spline_basis(6), designs["y"].spline_basis(6))
    with pytest.raises(ValueError, match="another regressor"):
        fit.RegressorDesigns.of(y, designs["x"])
    with pytest.raises(ValueError, match="another regressor"):
        linearity.linearity_checks(y, np.sin(y) + rng.normal(size=500), designs=designs["x"])
    assert fit.RegressorDesigns.of(x.copy(), designs["x"]) is designs["x"]


def test_too_small_df_still_raises():
    with pytest.raises(ValueError, match="df must be at least"):
        fit.bspline_basis(np.arange(10.0), 3)
    with pytest.raises(ValueError, match="df must be at least"):
        fit.RegressorDesigns(np.arange(10.0)).spline_basis(3)


def test_spline_design_is_the_fresh_full_rank_selection_bit_for_bit():
    rng = np.random.default_rng(5)
    for x in (rng.normal(size=3000), np.round(rng.normal(size=3000), 1), rng.integers(0, 5, 800).astype(float)):
        y = np.sin(x) + rng.normal(size=x.shape[0])
        designs = fit.RegressorDesigns(x)
        fresh = fit.full_rank_columns(fit.bspline_basis(x, 8)[:, 1:])
        handed = designs.spline_design(8)
        assert designs.spline_design(8) is handed
        # Same values and the same memory layout, so least squares on it rounds the same way.
        assert handed.strides == fresh.strides and _same_bits(handed, fresh)
        expected, got = fit.ols(fresh, y), fit.ols(handed, y)
        assert got.rss == expected.rss and got.rank == expected.rank
        assert np.array_equal(got.residuals, expected.residuals) and np.array_equal(got.coef, expected.coef)


def test_checks_given_designs_equal_the_checks_building_their_own():
    rng = np.random.default_rng(9)
    for x in (rng.normal(size=3000), rng.integers(0, 2, 3000).astype(float), rng.exponential(size=3000)):
        designs = fit.RegressorDesigns(x)
        y = np.tanh(x) + rng.normal(size=x.shape[0]) * (1.0 + 0.3 * np.abs(x))
        assert linearity.linearity_checks(x, y, designs=designs) == linearity.linearity_checks(x, y)
        for _ in range(2):  # the second time the design is the one already built
            e = rng.normal(size=x.shape[0]) * (1.0 + 0.3 * np.abs(x))
            assert variance.variance_checks(e, x, designs) == variance.variance_checks(e, x)
            assert variance.variance_checks(e, x, designs)[1] == variance.white_test(e, x)
    # A strided view of the same values is the same regressor.
    table = np.column_stack([x, x])
    e = rng.normal(size=x.shape[0])
    assert variance.variance_checks(e, table[:, 1], designs)[1] == variance.white_test(e, x)


def test_one_direction_builds_each_design_once(monkeypatch):
    """The pair battery hands one RegressorDesigns per direction to the spline F-test and the spline spread."""
    from preflight.battery import _direction_checks, _spline_variance_checks
    from preflight.policy import Policy

    built = []
    original = fit._bspline_basis

    def counting(x, df, degree):
        built.append((df, degree))
        return original(x, df, degree)

    monkeypatch.setattr(fit, "_bspline_basis", counting)
    rng = np.random.default_rng(12)
    x = rng.uniform(-2, 2, size=600)
    y = x**3 + rng.uniform(-1, 1, size=600)
    designs = fit.RegressorDesigns(x)
    policy = Policy()
    direction = _direction_checks(x, y, fit.simple_slope(x, y)[1], "y on x", "forward", policy, 1, designs)
    spread = _spline_variance_checks(x, y, "y on x", "forward", policy, designs)
    assert len(built) == 1 and len(spread) == 2 and direction
    # Without designs handed over, the spline spread builds its own basis, with the same results.
    assert _spline_variance_checks(x, y, "y on x", "forward", policy) == spread
    assert len(built) == 2



def test_one_direction_fits_its_spline_once(monkeypatch):
    """The spline F-test, the spline spread and the plot's spline share one least-squares fit per direction."""
    from preflight.battery import _direction_checks, _plot_fits, _spline_variance_checks
    from preflight.policy import Policy

    rng = np.random.default_rng(13)
    x = rng.uniform(-2, 2, size=600)
    y = x**3 + rng.uniform(-1, 1, size=600)
    designs = fit.RegressorDesigns(x)
    policy = Policy()
    df = fit.spline_df(x.shape[0], policy.spline_max_df)
    fresh = fit.ols(fit.full_rank_columns(fit.bspline_basis(x, df)[:, 1:]), y)
    spline_fits = []
    original = fit.ols

    def counting(X, response, intercept=True):
        if X is designs.spline_design(df):
            spline_fits.append(response)
        return original(X, response, intercept)

    monkeypatch.setattr(fit, "ols", counting)
    _direction_checks(x, y, fit.simple_slope(x, y)[1], ("y", "x"), "forward", policy, 1, designs)
    _spline_variance_checks(x, y, ("y", "x"), "forward", policy, designs)
    residuals = {"forward": fit.simple_slope(x, y)[1], "reverse": fit.simple_slope(y, x)[1]}
    plotted = _plot_fits(x, y, ("x", "y"), (x, y), residuals, {"forward": designs, "reverse": fit.RegressorDesigns(y)},
                         policy.spline_max_df, np.arange(600))
    assert len(spline_fits) == 1
    assert _same_bits(designs.spline_fit(df, y).residuals, fresh.residuals)
    assert plotted.spline_y_on_x is not None and _same_bits(plotted.spline_y_on_x, fresh.residuals)
    # Another response (even with equal values) is fitted afresh, never answered from the kept fit.
    other = y.copy()
    assert designs.spline_fit(df, other) is not designs.spline_fit(df, y)
    assert not designs.spline_fit(df, y).residuals.flags.writeable

def _mutable_globals(module) -> dict[str, int]:
    return {name: len(value) for name, value in vars(module).items()
            if isinstance(value, (dict, list, set)) and not name.startswith("__")}


def test_fit_keeps_no_state_between_checks():
    import pandas as pd

    import preflight

    before = _mutable_globals(fit)
    rng = np.random.default_rng(2)
    a = rng.uniform(-1, 1, 400)
    b = a**3 + 0.3 * rng.uniform(-1, 1, 400)
    c = 0.5 * b + rng.uniform(-1, 1, 400)
    preflight.check(pd.DataFrame({"a": a, "b": b, "c": c}), seed=1, jobs=1, keep_samples=False)
    assert _mutable_globals(fit) == before == {}


def test_pair_batteries_in_threads_equal_the_serial_ones():
    """Nothing a battery builds is shared: four threads at once give the serial results exactly."""
    from concurrent.futures import ThreadPoolExecutor

    from preflight.battery import run_pair_battery
    from preflight.policy import Policy

    rng = np.random.default_rng(8)
    a = rng.uniform(-1, 1, 500)
    b = np.tanh(2 * a) + 0.3 * rng.uniform(-1, 1, 500)
    c = a * a + 0.5 * rng.exponential(size=500)
    d = 0.7 * b + rng.standard_t(4, 500)
    columns = {"a": a, "b": b, "c": c, "d": d}
    pairs = [(x, y) for x in columns for y in columns if x < y]
    policy = Policy()

    def battery(pair):
        x, y = pair
        return run_pair_battery(columns[x], columns[y], x, y, None, (), True, policy)

    serial = [battery(pair) for pair in pairs]
    with ThreadPoolExecutor(max_workers=4) as pool:
        threaded = list(pool.map(battery, pairs * 2))
    assert threaded == serial * 2
