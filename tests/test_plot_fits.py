"""The HTML plots draw the fits the pair battery made, at the plotted rows, in the input's units."""

from __future__ import annotations

import ast
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import preflight

FITTING = {"ols", "residualize", "simple_slope", "bspline_basis", "full_rank_columns", "lstsq"}


@pytest.fixture(scope="module")
def fork():
    """z -> x, z -> y, x -> y in three different units, more rows than the plots draw, columns not in name order."""
    rng = np.random.default_rng(5)
    n = 800
    z = rng.uniform(-1, 1, n)
    x = z + rng.uniform(-1, 1, n)
    y = 0.8 * x + 0.6 * z + rng.uniform(-1, 1, n)
    frame = pd.DataFrame({"y": 1e-3 * y, "z": 7 * z, "x": 1000 * x})
    return frame, preflight.check(frame, seed=1, jobs=1, plot_max_points=300)


def test_plotted_residuals_are_the_batterys_at_the_plotted_rows(fork):
    """Residuals of y on [1, x, Z] over every row, read at the plotted rows, in the columns' own units.

    A refit on the 300 plotted rows alone gives other residuals (by about
    1 / sqrt(300) of their spread), far outside the tolerance.
    """
    import statsmodels.api as sm

    from preflight.report.plots import residuals_both_ways

    frame, report = fork
    samples = report.samples
    rows = samples["rows"]
    assert rows.shape == (300,) and samples["n"] == 800
    assert samples["exponents"] == {"x": 11, "y": -8, "z": 3}
    pair = report.pair("y", "x")
    assert pair["adjacent"] and pair["conditioning"] == ["z"]
    x_name, y_name = pair["x"], pair["y"]
    x, y, z = (frame[name].to_numpy() for name in (x_name, y_name, "z"))
    xp, resid_y, yp, resid_x = residuals_both_ways(pair, samples)
    expected = {
        "resid_y": sm.OLS(y, sm.add_constant(np.column_stack([x, z]))).fit().resid[rows],
        "resid_x": sm.OLS(x, sm.add_constant(np.column_stack([y, z]))).fit().resid[rows],
        "xp": sm.OLS(x, sm.add_constant(z)).fit().resid[rows] + x.mean(),
        "yp": sm.OLS(y, sm.add_constant(z)).fit().resid[rows] + y.mean(),
    }
    for name, got in (("resid_y", resid_y), ("resid_x", resid_x), ("xp", xp), ("yp", yp)):
        reference = expected[name]
        np.testing.assert_allclose(got, reference, rtol=1e-9, atol=1e-9 * np.abs(reference).max(), err_msg=name)
    # An unconditioned pair: the x axis is the column itself at the plotted rows.
    plain = report.pair("x", "z")
    assert plain["adjacent"] and plain["conditioning"] == []
    xp, _, zp, _ = residuals_both_ways(plain, samples)
    np.testing.assert_allclose(xp, frame[plain["x"]].to_numpy()[rows], rtol=1e-12)
    np.testing.assert_allclose(zp, frame[plain["y"]].to_numpy()[rows], rtol=1e-12)


def test_the_report_keeps_fits_only_for_the_plotted_pairs_and_never_writes_them(fork):
    _, report = fork
    adjacent = {frozenset((p["x"], p["y"])) for p in report.data["pairs"] if p["adjacent"]}
    nonlinear = {frozenset((p["x"], p["y"])) for p in report.data["pairs"] if "nonlinear" in p["flags"]}
    fits = report.samples["fits"]
    assert set(fits) == adjacent
    for key, kept in fits.items():
        assert kept.x_partialled.shape == kept.y_on_x.shape == (300,)
        if key not in nonlinear:
            assert kept.spline_y_on_x is None and kept.spline_x_on_y is None
    def keys(node):
        if isinstance(node, dict):
            for key, value in node.items():
                yield key
                yield from keys(value)
        elif isinstance(node, list):
            for value in node:
                yield from keys(value)

    written = set(keys(json.loads(report.to_json())))
    assert "fits" not in written and "exponents" not in written


def test_plots_module_fits_nothing():
    """plots.py imports no fitting function and no module that fits: it draws what the analysis computed."""
    import preflight.report.plots as plots

    tree = ast.parse(Path(plots.__file__).read_text())
    imported = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom):
            imported.add(node.module or "")
            imported.update(alias.name for alias in node.names)
        elif isinstance(node, ast.Import):
            imported.update(alias.name for alias in node.names)
    used = {node.attr for node in ast.walk(tree) if isinstance(node, ast.Attribute)}
    assert not imported & (FITTING | {"preflight.fit", "scipy.linalg", "numpy.linalg"})
    assert not used & FITTING
    assert not any(module.startswith(("preflight.fit", "preflight.checks")) for module in imported)


def test_a_pair_without_fits_is_named_not_drawn():
    """Samples without a pair's fits (a report built by hand) leave that pair's plots out, saying so."""
    from test_report_renderers import handmade_report

    from preflight.report.html import render_html

    report = handmade_report()
    full = render_html(report)
    report.samples["fits"] = {key: fits for key, fits in report.samples["fits"].items() if key != frozenset("bc")}
    partial = render_html(report)
    # b -- c loses its residual plot and its spline plot; a -> b keeps its residual plot.
    assert partial.count("<svg") == full.count("<svg") - 2
    assert "Residuals of c on b and of b on c: not drawn, the report carries no fits of this pair." in partial
    assert "Straight line and spline fit for b and c: not drawn" in partial
