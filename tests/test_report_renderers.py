"""Markdown, HTML and JUnit renderers, on a real analysis of the kiln demo and on hand-made edge cases.

The demo report comes from ``preflight.api.check`` on ``preflight.demo``'s
simulated table; the hand-made reports exercise what the demo cannot
(awkward column names, a passing gate, a report whose data voided the
analysis).  Every report is validated against the shipped JSON schema
before it is rendered.
"""

from __future__ import annotations

import functools
import itertools
import json
import re
import xml.etree.ElementTree as ET

import numpy as np
import pytest

from preflight.report.model import CAUTIONS, Report

from conftest import validate_report

DEMO_ROWS = 1000
DEMO_PLOT_POINTS = 600  # below DEMO_ROWS, so the plots really show a subsample


@functools.lru_cache(maxsize=1)
def demo_report(tmp_dir: str) -> Report:
    """One real analysis of the kiln demo per test session (shared with test_html_browser)."""
    from preflight.api import check
    from preflight.demo import write_demo_csv

    path = write_demo_csv(f"{tmp_dir}/kiln.csv", n=DEMO_ROWS)
    report = check(path, plot_max_points=DEMO_PLOT_POINTS, seed=11)
    validate_report(report.to_dict())
    return report


@functools.lru_cache(maxsize=1)
def demo_html(tmp_dir: str) -> str:
    """The demo's HTML report, rendered once per session (plots take a few seconds)."""
    from preflight.report.html import render_html

    return render_html(demo_report(tmp_dir))


@pytest.fixture(scope="session")
def demo_page(tmp_path_factory) -> str:
    return demo_html(str(tmp_path_factory.getbasetemp()))


@pytest.fixture(scope="session")
def demo(tmp_path_factory) -> Report:
    return demo_report(str(tmp_path_factory.getbasetemp()))


# ---------------------------------------------------------------- hand-made reports

def _check(name, statistic, p, effect=None, effect_name=None, n=0, passed=None, note="", p_adjusted=None):
    return {"name": name, "statistic": statistic, "p_value": p,
            "p_adjusted": p if p_adjusted is None and p is not None else p_adjusted,
            "effect": effect, "effect_name": effect_name, "n": n, "passed": passed, "note": note}


def handmade_report(names=("a", "b", "c", "d", "e"), n=300, passed=False, seed=3) -> Report:
    """A schema-valid report over simulated data: a -> b linear, b -- c nonlinear, d and e share a hidden cause.

    The check values come from scipy on the simulated columns; the verdicts
    are set by hand, since these reports test rendering, not inference.
    """
    from scipy import stats

    rng = np.random.default_rng(seed)
    a = rng.uniform(-1, 1, n)
    b = 0.8 * a + 0.5 * rng.uniform(-1, 1, n)
    c = np.tanh(2 * b) + 0.2 * rng.normal(size=n)
    hidden = rng.uniform(-1, 1, n)
    d = hidden + 0.5 * rng.uniform(-1, 1, n)
    e = hidden + 0.5 * rng.uniform(-1, 1, n)
    X = np.column_stack([a, b, c, d, e])
    A, B, C, D, E = names
    edges = {(A, B): ("x->y", "linear-non-gaussian", []), (B, C): ("undetermined", None, ["nonlinear"])}
    variables = []
    for j, name in enumerate(names):
        w, p = stats.shapiro(X[:, j])
        variables.append({"name": name, "flags": ["discrete"] if j == 4 else [], "checks": [
            _check("distinct values", float(n), None, 0.0, "tie share", n, None, "descriptive"),
            _check(f"shapiro-wilk (noise of {name})", float(w), float(p), 1 - float(w), "1 - W", n, bool(p < 0.05),
                   note="control character \x01 in a note"),
        ]})
    pairs = []
    for i, j in itertools.combinations(range(len(names)), 2):
        x, y = names[i], names[j]
        r, pr = stats.pearsonr(X[:, i], X[:, j])
        checks = [_check(f"pearson ({x}, {y})", float(r), float(pr), float(r), "Pearson r", n, None)]
        adjacent = (x, y) in edges
        orientation, basis, flags = edges.get((x, y), ("undetermined", None, []))
        if adjacent:
            for reg, resp in ((x, y), (y, x)):
                rho, p_rho = stats.spearmanr(X[:, names.index(reg)], X[:, names.index(resp)])
                checks.append(_check(f"hsic ({resp} on {reg})", float(rho), float(p_rho), float(rho),
                                     "normalised HSIC", n, bool(p_rho >= 0.05)))
                checks.append(_check(f"spline f-test ({resp} on {reg})", 3.0, 0.01, 0.05, "R^2 gain", n,
                                     "nonlinear" not in flags))
        if (x, y) == (D, E):
            flags = ["confounding-suspected"]
            checks.append(_check(f"noise dependence (hsic) ({x}, {y})", 12.0, 1e-6, 0.1, "normalised HSIC", n, False))
        pairs.append({"x": x, "y": y, "adjacent": adjacent, "orientation": orientation, "basis": basis,
                      "flags": flags, "checks": checks, "conditioning": [A] if (x, y) == (B, C) else []})
    data = {
        "schema_version": "1",
        "tool": {"name": "preflight", "version": "0.1.0"},
        "input": {"path": "handmade.csv", "sha256": "ab" * 32, "rows": n + 3, "rows_used": n,
                  "columns": list(names), "warnings": []},
        "settings": {"alpha": 0.05, "correction": "fdr_bh", "seed": 1,
                     "require": "latent-equivalence-class" if passed else "linear-non-gaussian",
                     "fail_on": [], "spline_max_df": 10},
        "conclusion": {"level": "latent-equivalence-class",
                       "required": "latent-equivalence-class" if passed else "linear-non-gaussian",
                       "passed": passed,
                       "reasons": [f"{D} and {E}: noise estimates are dependent, a sign of a hidden common cause."],
                       "edges_oriented": 1, "edges_total": 2},
        "variables": variables,
        "pairs": pairs,
        "global": {"flags": [], "checks": [_check("usable rows", float(n), None, None, None, n, None)]},
        "structure": {"adjacency": "estimated: PC-stable skeleton", "order": list(names),
                      "parents": {B: [A], C: [B]}, "gaussian_noises": [C]},
        "cautions": list(CAUTIONS),
        "generated_at": "2026-01-01T00:00:00+00:00",
    }
    validate_report(data)
    rows = np.sort(rng.choice(n, size=n // 2, replace=False))
    samples = {"names": list(names), "values": X[rows], "rows": rows, "n": n, "noise": (X - X.mean(0))[rows],
               "exponents": dict.fromkeys(names, 0), "fits": _battery_fits(X, list(names), pairs, rows)}
    return Report(data=data, samples=samples)


def _battery_fits(X: np.ndarray, names: list[str], pairs: list[dict], rows: np.ndarray) -> dict:
    """The fits the pair battery keeps for the plots (``battery._plot_fits``) of every adjacent pair."""
    from preflight.battery import _plot_fits
    from preflight.fit import RegressorDesigns, residualize, simple_slope

    fits = {}
    for pair in (p for p in pairs if p["adjacent"]):
        x, y = X[:, names.index(pair["x"])], X[:, names.index(pair["y"])]
        Z = X[:, [names.index(c) for c in pair["conditioning"]]] if pair["conditioning"] else None
        xr, yr = residualize(x, Z), residualize(y, Z)
        residuals = {"forward": simple_slope(xr, yr)[1], "reverse": simple_slope(yr, xr)[1]}
        designs = ({"forward": RegressorDesigns(xr), "reverse": RegressorDesigns(yr)}
                   if "nonlinear" in pair["flags"] else None)
        fits[frozenset((pair["x"], pair["y"]))] = _plot_fits(x, y, (pair["x"], pair["y"]), (xr, yr), residuals,
                                                             designs, 10, rows)
    return fits


def void_report() -> Report:
    """A report whose data voided the analysis: too few rows, no structure, no noise estimates."""
    names = ["p", "q", "r"]
    data = {
        "schema_version": "1", "tool": {"name": "preflight", "version": "0.1.0"},
        "input": {"path": "tiny.csv", "sha256": None, "rows": 12, "rows_used": 12, "columns": names},
        "settings": {"alpha": 0.05, "correction": "holm", "seed": 1, "require": "linear-non-gaussian"},
        "conclusion": {"level": "none", "required": "linear-non-gaussian", "passed": False,
                       "reasons": ["Only 12 usable rows, below the minimum of 30."], "edges_oriented": 0,
                       "edges_total": 0},
        "variables": [{"name": v, "flags": [], "checks": []} for v in names],
        "pairs": [{"x": x, "y": y, "adjacent": False, "orientation": "undetermined", "basis": None, "flags": [],
                   "checks": []} for x, y in itertools.combinations(names, 2)],
        "global": {"flags": ["too-few-rows"], "checks": [_check("usable rows", 12.0, None, None, None, 12, False)]},
        "structure": {"adjacency": "not estimated", "order": [], "parents": {}, "gaussian_noises": []},
        "cautions": list(CAUTIONS), "generated_at": "2026-01-01T00:00:00+00:00",
    }
    validate_report(data)
    rng = np.random.default_rng(0)
    values = rng.normal(size=(12, 3))
    return Report(data=data, samples={"names": names, "values": values, "rows": np.arange(12), "n": 12,
                                      "noise": None})


ODD_NAMES = ("a|b", "<x>&y", "c`d", "e_f", "g h")


# ---------------------------------------------------------------- helpers

def every_check(data: dict):
    for v in data["variables"]:
        for c in v["checks"]:
            yield v["name"], c
    for p in data["pairs"]:
        for c in p["checks"]:
            yield (p["x"], p["y"]), c
    for c in data["global"]["checks"]:
        yield "global", c


def md_plain(text: str) -> str:
    """Markdown source with backslash escapes removed, so names and sentences can be searched."""
    return re.sub(r"\\([\\`*_\[\]<>|#])", r"\1", text)


def md_sections(markdown: str) -> dict[str, str]:
    parts = re.split(r"^## (.+)$", markdown, flags=re.M)
    return {title.strip(): body for title, body in zip(parts[1::2], parts[2::2])}


def html_tree(text: str):
    import html5lib

    return html5lib.HTMLParser(strict=True, namespaceHTMLElements=False).parse(text)


def html_text(tree) -> str:
    return " ".join(" ".join(tree.itertext()).split())


def expected_svg_count(report: Report) -> int:
    from preflight.report.html import MAX_EDGE_PLOTS, MAX_QQ_PLOTS

    data = report.data
    if report.samples is None:
        return 1
    adjacent = sum(1 for p in data["pairs"] if p["adjacent"])
    nonlinear = sum(1 for p in data["pairs"] if "nonlinear" in p["flags"])
    qq = min(len(data["variables"]), MAX_QQ_PLOTS) if report.samples.get("noise") is not None else 0
    return 1 + min(adjacent, MAX_EDGE_PLOTS) + min(nonlinear, MAX_EDGE_PLOTS) + qq


# ---------------------------------------------------------------- Markdown

def test_markdown_carries_the_whole_report(demo):
    from preflight.report.markdown import render_markdown

    data = demo.data
    text = render_markdown(demo)
    plain = md_plain(text)
    sections = md_sections(text)
    titles = list(sections)
    # Conclusion first, then why, then the details.
    for title in ("Conclusion", "Why", "Cautions", "Pairs and edges", "Variables", "Methods", "Settings in force",
                  "Input", "All checks"):
        assert title in titles
    assert titles.index("Conclusion") == 0 and titles.index("Why") == 1
    assert f"`{data['conclusion']['level']}`" in sections["Conclusion"]
    assert f"{data['conclusion']['edges_oriented']} of {data['conclusion']['edges_total']}" in sections["Conclusion"]
    for reason in data["conclusion"]["reasons"]:
        assert reason in md_plain(sections["Why"])
    for caution in data["cautions"]:
        assert caution in md_plain(sections["Cautions"])
    for key in data["settings"]:
        assert f"| `{key}` |" in sections["Settings in force"]
    assert data["input"]["sha256"] in sections["Input"]
    assert f"{data['input']['rows']:,}" in sections["Input"] and f"{data['input']['rows_used']:,}" in sections["Input"]
    for _, check in every_check(data):
        assert check["name"] in plain


def test_markdown_pairs_table_lists_every_pair_once_with_its_verdict(demo):
    from preflight.report.markdown import render_markdown

    data = demo.data
    table = md_sections(render_markdown(demo))["Pairs and edges"]
    rows = [line for line in table.splitlines() if line.startswith("| `")]
    assert len(rows) == len(data["pairs"])
    by_names = {}
    for row in rows:
        cells = [c.strip() for c in row.strip("|").split(" | ")]
        by_names[(cells[0].strip("`"), cells[1].strip("`"))] = cells
    for pair in data["pairs"]:
        cells = by_names[(pair["x"], pair["y"])]
        assert cells[2] == ("yes" if pair["adjacent"] else "no")
        assert cells[3] == f"`{pair['orientation']}`"
        assert cells[5] == (f"`{pair['basis']}`" if pair["basis"] else "-")
        for flag in pair["flags"]:
            assert f"`{flag}`" in cells[6]


def test_markdown_appendix_has_one_row_per_check(demo):
    from preflight.report.markdown import render_markdown

    data = demo.data
    appendix = md_sections(render_markdown(demo))["All checks"]
    header_rows = appendix.count("| check | statistic | p | adjusted p | effect | n | result | note |")
    body_rows = [line for line in appendix.splitlines()
                 if line.startswith("| ") and not line.startswith("| check |")]
    n_checks = sum(1 for _ in every_check(data))
    assert len(body_rows) == n_checks
    groups_with_checks = (sum(1 for v in data["variables"] if v["checks"])
                          + sum(1 for p in data["pairs"] if p["checks"])
                          + (1 if data["global"]["checks"] else 0))
    assert header_rows == groups_with_checks
    results = [line.rsplit(" | ", 2)[-2] for line in body_rows]
    checks = [c for _, c in every_check(data)]
    assert results.count("FAIL") == sum(1 for c in checks if c["passed"] is False)
    assert results.count("PASS") == sum(1 for c in checks if c["passed"] is True)
    assert results.count("evidence") == sum(1 for c in checks if c["passed"] is None)


# Which citation each test must bring into the methods text; written out
# here independently of the renderer's own catalogue (issue text).
CITATIONS = {
    "shapiro-wilk": ("Shapiro and Wilk 1965", "Royston 1995"),
    "anderson-darling": ("Anderson and Darling 1952", "Stephens (1974)"),
    "jarque-bera": ("Jarque and Bera 1980",),
    "d'agostino-pearson": ("D'Agostino and Pearson 1973",),
    "negentropy": ("Hyv\u00e4rinen 1998",),
    "ramsey reset": ("Ramsey 1969",),
    "breusch-pagan": ("Breusch and Pagan 1979", "Koenker 1981"),
    "white": ("White 1980",),
    "hsic": ("Gretton et al. 2005, 2008",),
    "pairwise likelihood ratio": ("Hyv\u00e4rinen and Smith (2013)",),
    "ljung-box": ("Ljung and Box 1978",),
    "henze-zirkler": ("Henze and Zirkler 1990",),
    "varsortability": ("Reisach et al. 2021",),
}


def test_methods_cite_exactly_the_tests_in_the_report(demo):
    from preflight.report.markdown import render_markdown

    for report in (demo, handmade_report()):
        data = report.data
        methods = md_plain(md_sections(render_markdown(report))["Methods"])
        names = [c["name"].lower() for _, c in every_check(data)]
        for test, citations in CITATIONS.items():
            present = any(name.startswith(test) or f" {test}" in name or f"({test}" in name for name in names)
            for citation in citations:
                assert (citation in methods) == present, (test, citation, present)
        correction = "Holm 1979" if data["settings"]["correction"] == "holm" else "Benjamini and Hochberg 1995"
        other = "Benjamini and Hochberg 1995" if correction == "Holm 1979" else "Holm 1979"
        assert correction in methods and other not in methods
        if data["structure"]["order"]:
            assert "Shimizu et al. 2011" in methods and "Meek 1995" in methods
        if "PC-stable" in data["structure"]["adjacency"]:
            assert "Colombo and Maathuis 2014" in methods


def test_methods_for_a_void_analysis_cite_no_structure():
    from preflight.report.markdown import render_markdown

    methods = md_sections(render_markdown(void_report()))["Methods"]
    for absent in ("DirectLiNGAM", "PC-stable", "Meek", "Shapiro"):
        assert absent not in methods
    assert "Holm 1979" in methods


# ---------------------------------------------------------------- HTML

def test_html_is_strict_html5_self_contained_and_complete(demo, demo_page):
    data = demo.data
    text = demo_page
    tree = html_tree(text)  # raises on any parse error
    for element in tree.iter():
        tag = element.tag.split("}")[-1] if isinstance(element.tag, str) else ""
        assert tag not in ("link", "iframe", "object", "embed", "img")
        if tag == "script":
            assert "src" not in element.attrib and "http" not in (element.text or "")
        for attribute, value in element.attrib.items():
            if attribute.split("}")[-1] in ("src", "href"):
                assert value.startswith("#") or value.startswith("data:image/png;base64,"), (attribute, value)
    assert not re.search(r"""(src|href)\s*=\s*["']?\s*https?://""", text, flags=re.I)
    assert "@import" not in text and "url(http" not in text
    assert "@media print" in text

    words = html_text(tree)
    verdict = tree.find(".//section[@id='conclusion']")
    assert data["conclusion"]["level"] in html_text(verdict)
    assert ("PASS" if data["conclusion"]["passed"] else "FAIL") in html_text(verdict)
    assert words.index(data["conclusion"]["level"]) < words.index("Why")
    for reason in data["conclusion"]["reasons"]:
        assert " ".join(reason.split()) in words
    for caution in data["cautions"]:
        assert " ".join(caution.split()) in words
    for key in data["settings"]:
        assert key in words
    assert data["input"]["sha256"] in words
    for pair in data["pairs"]:
        assert f"{pair['x']} and {pair['y']}" in words
    for _, check in every_check(data):
        assert " ".join(check["name"].split()) in words
    # One collapsible block per variable, per pair and for the whole table.
    assert len(tree.findall(".//section[@id='checks']//details")) == len(data["variables"]) + len(data["pairs"]) + 1
    assert text.count("<svg") == expected_svg_count(demo)


def test_html_states_the_subsample_and_titles_residual_panels_with_the_reports_hsic(demo, demo_page):
    from preflight.report.plots import direction_hsic

    text = demo_page
    shown, total = len(demo.samples["values"]), demo.samples["n"]
    assert shown == DEMO_PLOT_POINTS < total == demo.data["input"]["rows_used"]
    assert f"Plots show {shown:,} of {total:,} rows (seeded subsample)" in text
    titles = re.findall(r"<title>(Residual against regressor[^<]*)</title>", text)
    edges = [p for p in demo.data["pairs"] if p["adjacent"]]
    assert len(titles) == len(edges)
    for pair, title in zip(edges, titles):
        for regressor, response in ((pair["x"], pair["y"]), (pair["y"], pair["x"])):
            check = direction_hsic(pair, regressor, response)
            assert check is not None
            p = check["p_adjusted"] if check["p_adjusted"] is not None else check["p_value"]
            shown_p = "< 0.0001" if p < 1e-4 else "= " + (f"{p:.3g}" if p < 0.001 else f"{p:.3f}")
            assert f"{response} on {regressor}" in title
            assert f"HSIC p {shown_p}".replace("<", "&lt;") in title


def test_html_rerendered_from_json_keeps_graph_and_tables_but_not_data_plots(demo):
    from preflight.report.html import render_html

    saved = Report.from_dict(json.loads(demo.to_json()))
    text = render_html(saved)
    tree = html_tree(text)
    words = html_text(tree)
    assert text.count("<svg") == 1  # the graph overview only
    assert "The residual, Q-Q and spline plots need the data" in words
    assert "Plots show" not in words
    assert len(tree.findall(".//section[@id='edges']//table")) >= 1
    groups = len(demo.data["variables"]) + len(demo.data["pairs"]) + 1
    assert len(tree.findall(".//section[@id='checks']//details")) == groups


def test_html_is_reproducible(demo, demo_page):
    from preflight.report.html import render_html

    assert render_html(demo) == demo_page


def test_html_escapes_awkward_names_and_survives_a_void_analysis():
    from preflight.report.html import render_html

    report = handmade_report(names=ODD_NAMES, passed=True)
    text = render_html(report)
    words = html_text(html_tree(text))
    assert "<x>&y" not in text and "&lt;x&gt;&amp;y" in text
    for name in ODD_NAMES:
        assert name in words
    assert text.count("<svg") == expected_svg_count(report)
    verdict = html_text(html_tree(text).find(".//section[@id='conclusion']"))
    assert "PASS" in verdict and "FAIL" not in verdict

    void = void_report()
    text = render_html(void)
    words = html_text(html_tree(text))
    assert "none" in words and "No edges" in text
    assert text.count("<svg") == 1  # no adjacent pairs, no noise estimates: the graph only
    assert "No noise estimates" in words


def test_plot_residuals_match_a_regression_on_the_conditioning_set():
    """The plotted residuals equal statsmodels OLS residuals of y on [1, x, Z] over all rows (Frisch-Waugh-Lovell)."""
    import statsmodels.api as sm

    from preflight.fit import bspline_basis, residualize, spline_df
    from preflight.report.plots import linear_and_spline_fits, residuals_both_ways

    report = handmade_report()
    pair = report.pair("b", "c")
    assert pair["conditioning"] == ["a"]
    rows = report.samples["rows"]
    rng = np.random.default_rng(3)  # the columns of handmade_report, every row
    a = rng.uniform(-1, 1, 300)
    b = 0.8 * a + 0.5 * rng.uniform(-1, 1, 300)
    c = np.tanh(2 * b) + 0.2 * rng.normal(size=300)
    np.testing.assert_array_equal(report.samples["values"][:, :3], np.column_stack([a, b, c])[rows])
    xp, resid_c, yp, resid_b = residuals_both_ways(pair, report.samples)
    reference_c = sm.OLS(c, sm.add_constant(np.column_stack([b, a]))).fit().resid[rows]
    reference_b = sm.OLS(b, sm.add_constant(np.column_stack([c, a]))).fit().resid[rows]
    np.testing.assert_allclose(resid_c, reference_c, atol=1e-10)
    np.testing.assert_allclose(resid_b, reference_b, atol=1e-10)
    # The x axis is b with a partialled out, shifted back to b's mean.
    reference_xp = sm.OLS(b, sm.add_constant(a)).fit().resid[rows] + b.mean()
    np.testing.assert_allclose(xp, reference_xp, atol=1e-10)

    fits = linear_and_spline_fits(pair, report.samples)
    np.testing.assert_allclose(fits.regressor, xp, atol=1e-12)
    np.testing.assert_allclose(fits.response, reference_c + fits.linear_fitted, atol=1e-10)
    # The spline of the spline F-test: its df (all rows), fitted on all rows of the partialled columns.
    assert fits.df == spline_df(300, 10)
    br, cr = residualize(b, a[:, None]), residualize(c, a[:, None])
    spline = sm.OLS(cr, bspline_basis(br, fits.df)).fit().fittedvalues[rows] + c.mean()
    assert fits.spline_fitted is not None  # the basis sums to one: it spans the intercept
    np.testing.assert_allclose(fits.spline_fitted, spline, atol=1e-8)
    # The spline bends with the tanh mechanism, so it sits closer to the plotted points than the line.
    rss_line = float(((fits.response - fits.linear_fitted) ** 2).sum())
    rss_spline = float(((fits.response - fits.spline_fitted) ** 2).sum())
    assert rss_spline < rss_line


def test_graph_layout_runs_left_to_right_along_the_order():
    from preflight.report.plots import edge_kinds, graph_layout

    report = handmade_report()
    drawn = edge_kinds(report.data)
    kinds = {(p["x"], p["y"]): kind for p, kind, _ in drawn}
    assert kinds == {("a", "b"): "oriented", ("b", "c"): "unoriented", ("d", "e"): "suspect"}
    layout = graph_layout(report.data["input"]["columns"], report.data["structure"]["order"],
                          [("a", "b"), ("b", "c")])
    assert layout["a"][0] < layout["b"][0] < layout["c"][0]
    assert layout["d"][0] == layout["e"][0] == 0


# ---------------------------------------------------------------- JUnit

def _junit_checks(text: str, data: dict) -> ET.Element:
    root = ET.fromstring(text.encode("utf-8"))
    assert root.tag == "testsuites"
    suites = list(root)
    assert all(s.tag == "testsuite" for s in suites)
    expected_names = ([f"preflight.variables.{v['name']}" for v in data["variables"]]
                      + [f"preflight.pairs.{p['x']}__{p['y']}" for p in data["pairs"]]
                      + ["preflight.global", "preflight.conclusion"])
    assert [s.get("name") for s in suites] == expected_names
    groups = ([v["checks"] for v in data["variables"]] + [p["checks"] for p in data["pairs"]]
              + [data["global"]["checks"]])
    for suite, checks in zip(suites, groups):
        cases = list(suite)
        assert all(c.tag == "testcase" for c in cases)
        assert int(suite.get("tests")) == len(cases) == len(checks)
        assert int(suite.get("failures")) == sum(1 for c in checks if c["passed"] is False)
        assert suite.get("errors") == "0" and suite.get("skipped") == "0"
        for case, check in zip(cases, checks):
            assert case.get("classname") == suite.get("name")
            assert case.get("name") == check["name"]
            failure = case.find("failure")
            assert (failure is not None) == (check["passed"] is False)
            assert case.find("skipped") is None
            if check["passed"] is None:
                assert case.find("system-out").text.splitlines()[0] == "evidence, not a guard"
    return root


def test_junit_has_every_check_with_matching_counts(demo):
    from preflight.report.junit import render_junit
    from preflight.report.text import headline

    data = demo.to_dict()
    text = render_junit(data)
    root = _junit_checks(text, data)
    checks = [c for _, c in every_check(data)]
    failing = sum(1 for c in checks if c["passed"] is False) + (0 if data["conclusion"]["passed"] else 1)
    assert int(root.get("tests")) == len(root.findall("./testsuite/testcase")) == len(checks) + 1
    assert int(root.get("failures")) == len(root.findall("./testsuite/testcase/failure")) == failing
    assert sum(int(s.get("tests")) for s in root) == len(checks) + 1
    conclusion = root.find("./testsuite[@name='preflight.conclusion']/testcase[@name='conclusion']")
    failure = conclusion.find("failure")
    if data["conclusion"]["passed"]:
        assert failure is None
    else:
        assert failure.get("message").startswith(headline(data))
        for reason in data["conclusion"]["reasons"]:
            assert reason in failure.get("message")


def test_junit_passing_gate_and_awkward_names_stay_well_formed():
    from preflight.report.junit import render_junit

    data = handmade_report(names=ODD_NAMES, passed=True).to_dict()
    text = render_junit(data)
    root = _junit_checks(text, data)  # also parses: the control character in a note was replaced
    conclusion = root.find("./testsuite[@name='preflight.conclusion']/testcase")
    assert conclusion.find("failure") is None
    assert root.find("./testsuite[@name='preflight.conclusion']").get("failures") == "0"
    assert root.find("./testsuite[@name='preflight.variables.<x>&y']") is not None
    assert int(root.get("failures")) == sum(1 for _, c in every_check(data) if c["passed"] is False)


def test_cli_rerenders_a_saved_report_without_the_data(demo, tmp_path, cli):
    saved = tmp_path / "r.json"
    saved.write_text(demo.to_json())
    code, out, err = cli("report", str(saved), "--html", str(tmp_path / "r.html"), "--markdown",
                         str(tmp_path / "r.md"), "--junit", str(tmp_path / "r.xml"), "--quiet")
    assert code == 0, err
    page = (tmp_path / "r.html").read_text()
    assert page.count("<svg") == 1 and "need the data" in page
    assert demo.level in (tmp_path / "r.md").read_text()
    ET.parse(tmp_path / "r.xml")
