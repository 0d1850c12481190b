"""Self-contained HTML report: one file, no network, readable on screen and on paper.

Order of reading: the conclusion (large, first), why, cautions, the graph,
the edges, the variables, the plots, then methods, settings, input and every
check.  Every coloured element also carries its meaning in words (PASS,
FAIL, evidence, line styles named in the legend), so the report survives
black-and-white printing and colour-blind readers.

Plots are inline SVG from :mod:`preflight.report.plots`.  Data-dependent
plots need ``report.samples`` (the plotted rows, the noise estimates and the
pair battery's fits at those rows); a report re-rendered from saved JSON has
none, and says so in place of those plots.
"""

from __future__ import annotations

import html
import re
import warnings
from collections.abc import Sequence
from typing import Any

from preflight.report.identity import variable_check
from preflight.report.model import Report
from preflight.report.prose import (
    CHECK_HEADER,
    FINDINGS_LEAD,
    INPUT_WARNING,
    NO_CHECKS,
    NO_REASON,
    REFERENCES,
    ROWS_NEEDED_HEADER,
    SECTION_TITLES,
    WHOLE_TABLE_FLAGS,
    conclusion_words,
    edge_text,
    findings_explained,
    fmt_count,
    fmt_number,
    fmt_p,
    fmt_setting,
    gate_outcome,
    methods_paragraphs,
    methods_used,
    noise_finding,
    outcome,
    pairs_in_reading_order,
    policy_descriptions,
    report_title,
    rows_needed_text,
)
from preflight.report.text import headline
from preflight.results import NOISE_ESTIMATE

ARROW, UNDIRECTED = "\u2192", "\u2014"

MAX_EDGE_PLOTS = 40
"""Residual and spline plots are drawn for at most this many pairs (the first in column order)."""
MAX_QQ_PLOTS = 60
"""Q-Q plots are drawn for at most this many variables (the first in column order)."""

_CSS = """
:root { --ink:#1b1b1b; --muted:#555; --line:#d4d4d4; --soft:#f4f4f2;
        --pass:#1d6b34; --pass-bg:#e8f4eb; --fail:#a3191b; --fail-bg:#fbeaea;
        --weak:#8a5200; --weak-bg:#fdf2e1; --accent:#1f4e79; }
* { box-sizing: border-box; }
html { -webkit-text-size-adjust: 100%; }
body { margin: 0 auto; max-width: 1120px; padding: 28px 28px 60px; color: var(--ink); background: #fff;
       font: 15px/1.5 system-ui, -apple-system, "Segoe UI", Roboto, "Noto Sans", "DejaVu Sans", sans-serif; }
h1 { font-size: 24px; margin: 0 0 2px; }
h2 { font-size: 19px; margin: 34px 0 10px; padding-bottom: 4px; border-bottom: 2px solid var(--ink); }
h3 { font-size: 16px; margin: 22px 0 6px; }
p { margin: 6px 0 10px; }
code, .mono { font-family: ui-monospace, "SFMono-Regular", Menlo, Consolas, "DejaVu Sans Mono", monospace;
              font-size: 0.92em; }
.meta { color: var(--muted); font-size: 13px; margin: 0 0 18px; }
.verdict { display: flex; gap: 22px; align-items: flex-start; border: 2px solid; border-left-width: 12px;
           border-radius: 6px; padding: 18px 22px; margin: 8px 0 6px; }
.verdict.pass { border-color: var(--pass); background: var(--pass-bg); }
.verdict.weaker { border-color: var(--weak); background: var(--weak-bg); }
.verdict.none { border-color: var(--fail); background: var(--fail-bg); }
.badge { flex: none; font-weight: 800; font-size: 22px; letter-spacing: 0.04em; padding: 6px 14px;
         border: 3px solid currentColor; border-radius: 6px; background: #fff; }
.verdict.pass .badge { color: var(--pass); }
.verdict.weaker .badge { color: var(--weak); }
.verdict.none .badge { color: var(--fail); }
.verdict .label { text-transform: uppercase; font-size: 12px; letter-spacing: 0.08em; color: var(--muted); margin: 0; }
.verdict .level { font-size: 22px; font-weight: 700; margin: 0 0 4px; }
.verdict .plain { font-size: 17px; margin: 0 0 8px; }
.verdict .facts { margin: 0; font-size: 14px; }
.headline { font-family: ui-monospace, Menlo, Consolas, "DejaVu Sans Mono", monospace; font-size: 12.5px;
            color: var(--muted); margin: 6px 0 0; }
ul.reasons li { margin: 4px 0; }
table { border-collapse: collapse; width: 100%; font-size: 13.5px; margin: 6px 0 12px; }
th, td { border-bottom: 1px solid var(--line); padding: 5px 8px; text-align: left; vertical-align: top; }
th { background: var(--soft); font-weight: 600; border-bottom: 2px solid #bbb; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
td.note { color: var(--muted); font-size: 12.5px; }
table.kv th { width: 220px; background: none; border-bottom: 1px solid var(--line); }
.res { font-weight: 700; white-space: nowrap; }
.res.pass { color: var(--pass); }
.res.fail { color: var(--fail); }
.res.evidence { color: var(--muted); font-weight: 400; font-style: italic; }
tr.failed td { background: var(--fail-bg); }
.flag { display: inline-block; white-space: nowrap; border: 1px solid #8c8c8c; border-radius: 4px; padding: 0 6px; margin: 1px 2px 1px 0;
        font-size: 12px; font-family: ui-monospace, Menlo, Consolas, "DejaVu Sans Mono", monospace; background: #fff; }
.none { color: var(--muted); }
.edge { font-weight: 600; white-space: nowrap; }
.cautions { border: 1px solid #bbb; border-radius: 6px; padding: 8px 18px; background: var(--soft); }
.cautions li { margin: 5px 0; }
figure { margin: 14px 0 18px; }
figcaption { font-size: 13px; color: var(--muted); margin-top: 4px; }
svg { max-width: 100%; height: auto; }
.plotgrid { display: grid; grid-template-columns: repeat(auto-fill, minmax(250px, 1fr)); gap: 10px 14px; }
.plotgrid.wide { grid-template-columns: repeat(auto-fill, minmax(440px, 1fr)); }
.plotgrid figure { margin: 0; }
.notice { border-left: 4px solid var(--accent); padding: 6px 12px; background: #eef3f8; }
details { border: 1px solid var(--line); border-radius: 5px; margin: 6px 0; padding: 0 10px; }
details > summary { cursor: pointer; padding: 6px 0; font-weight: 600; }
details[open] > summary { border-bottom: 1px solid var(--line); margin-bottom: 6px; }
.counts { font-weight: 400; color: var(--muted); }
.counts .fails { color: var(--fail); font-weight: 700; }
ol.refs { font-size: 13px; padding-left: 22px; }
footer { margin-top: 40px; color: var(--muted); font-size: 12.5px; border-top: 1px solid var(--line); padding-top: 8px; }
@media print {
  @page { margin: 14mm 12mm; }
  body { max-width: none; padding: 0; font-size: 10.5pt; }
  h2 { break-after: avoid; }
  figure, .verdict, tr { break-inside: avoid; }
  table { font-size: 8.5pt; }
  details { border: none; padding: 0; }
  details > summary { list-style: none; }
  .verdict, tr.failed td, th, .cautions, .notice { -webkit-print-color-adjust: exact; print-color-adjust: exact; }
}
"""  # noqa: E501 -- a stylesheet embedded verbatim; rewrapping it would change the report's bytes

# Closed <details> would hide every check on paper; open them all before printing.
_PRINT_SCRIPT = ("window.addEventListener('beforeprint',function(){"
                 "document.querySelectorAll('details').forEach(function(d){d.open=true;});});")


# Control characters are not allowed in HTML text even when escaped; a
# column name or note carrying one must not break the page.
_CONTROL = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\x7f-\x9f\ufffe\uffff]")


def _e(value: Any) -> str:
    return html.escape(_CONTROL.sub("\ufffd", str(value)), quote=True)


def _flags(flags: Sequence[str]) -> str:
    if not flags:
        return '<span class="none">none</span>'
    return " ".join(f'<span class="flag">{_e(f)}</span>' for f in flags)


def _result_cell(passed: bool | None) -> str:
    word = outcome(passed)
    css = {True: "pass", False: "fail", None: "evidence"}[passed]
    return f'<td><span class="res {css}">{_e(word)}</span></td>'


def _table(header: Sequence[str], rows: Sequence[str], css: str = "") -> str:
    head = "".join(f'<th scope="col">{_e(h)}</th>' for h in header)
    cls = f' class="{css}"' if css else ""
    return f"<table{cls}><thead><tr>{head}</tr></thead><tbody>{''.join(rows)}</tbody></table>"


def _kv(rows: Sequence[tuple[str, str]]) -> str:
    body = "".join(f'<tr><th scope="row">{_e(k)}</th><td>{v}</td></tr>' for k, v in rows)
    return f'<table class="kv"><tbody>{body}</tbody></table>'


def _check_table(checks: Sequence[dict[str, Any]]) -> str:
    rows = []
    for c in checks:
        effect = _e(fmt_number(c["effect"]))
        if c["effect"] is not None and c.get("effect_name"):
            effect += f' <span class="none">({_e(c["effect_name"])})</span>'
        failed = ' class="failed"' if c["passed"] is False else ""
        rows.append(f"<tr{failed}><td>{_e(c['name'])}</td><td class=\"num\">{_e(fmt_number(c['statistic']))}</td>"
                    f"<td class=\"num\">{_e(fmt_p(c['p_value']))}</td>"
                    f"<td class=\"num\">{_e(fmt_p(c['p_adjusted']))}</td>"
                    f"<td>{effect}</td><td class=\"num\">{_e(c['n'])}</td>{_result_cell(c['passed'])}"
                    f"<td class=\"note\">{_e(c.get('note') or '')}</td></tr>")
    return _table(CHECK_HEADER, rows)


def _counts(checks: Sequence[dict[str, Any]]) -> str:
    fails = sum(1 for c in checks if c["passed"] is False)
    passes = sum(1 for c in checks if c["passed"] is True)
    evidence = sum(1 for c in checks if c["passed"] is None)
    fail_text = f'<span class="fails">{fails} FAIL</span>' if fails else "0 FAIL"
    noun = "check" if len(checks) == 1 else "checks"
    return f'<span class="counts">{len(checks)} {noun}: {fail_text}, {passes} PASS, {evidence} evidence</span>'


def _edge_cell(pair: dict[str, Any]) -> str:
    if not pair["adjacent"]:
        return '<span class="none">not adjacent</span>'
    return f'<span class="edge">{_e(edge_text(pair, arrow=ARROW, line=UNDIRECTED))}</span>'


def _svg_with_label(svg: str, label: str) -> str:
    return svg.replace("<svg ", f'<svg role="img" aria-label="{_e(label)}" ', 1)


# ---------------------------------------------------------------- sections

def _verdict(data: dict[str, Any]) -> str:
    c = data["conclusion"]
    css = "pass" if c["passed"] else ("none" if c["level"] == "none" else "weaker")
    status = "PASS" if c["passed"] else "FAIL"
    # The headline without its "PASS [level]" prefix reads as one plain sentence.
    plain = headline(data).split("] ", 1)[-1]
    plain = plain.rsplit(" (required:", 1)[0].rstrip(".") + "."
    gate = gate_outcome(c)
    return (f'<section class="verdict {css}" id="conclusion" aria-label="{_e(SECTION_TITLES["conclusion"])}">'
            f'<div class="badge">{status}</div><div>'
            f'<p class="label">{_e(SECTION_TITLES["conclusion"])}</p>'
            f'<p class="level">{_e(c["level"])}</p>'
            f'<p class="plain">{_e(plain)}</p>'
            f'<p class="facts">Required level: <strong>{_e(c["required"])}</strong> '
            f'({_e(conclusion_words(c["required"]))}): {_e(gate)}. '
            f'Edges oriented: <strong>{_e(c["edges_oriented"])} of {_e(c["edges_total"])}</strong>.</p>'
            "</div></section>")


def _why(data: dict[str, Any]) -> str:
    parts = [f'<section id="why"><h2>{_e(SECTION_TITLES["why"])}</h2>']
    reasons = data["conclusion"]["reasons"] or [NO_REASON]
    parts.append('<ul class="reasons">' + "".join(f"<li>{_e(r)}</li>" for r in reasons) + "</ul>")
    findings = findings_explained(data)
    if findings:
        rows = [f"<tr><td>{_flags([flag])}</td><td>{_e(meaning)}</td>"
                f"<td>{_e(fits) if fits else '<span class=none>-</span>'}</td></tr>"
                for flag, meaning, fits in findings]
        parts.append(f"<h3>{_e(FINDINGS_LEAD)}</h3>")
        parts.append(_table(("finding", "what it means", "what still fits"), rows))
    parts.append("</section>")
    return "".join(parts)


def _cautions(data: dict[str, Any]) -> str:
    items = "".join(f"<li>{_e(c)}</li>" for c in data["cautions"])
    return (f'<section id="cautions"><h2>{_e(SECTION_TITLES["cautions"])}</h2>'
            f'<div class="cautions"><ul>{items}</ul></div></section>')


def _graph(data: dict[str, Any]) -> str:
    from preflight.report.plots import graph_svg

    svg = graph_svg(data, key="graph")
    structure = data.get("structure") or {}
    order = structure.get("order") or []
    where = (f"Variables are laid out left to right along the estimated causal order ({_e(' < '.join(order))})."
             if order else "No causal order was estimated; variables are shown in column order.")
    label = ("Overview graph of the variables: solid arrows are oriented edges, dashed lines are adjacent pairs "
             "whose direction is not determined, dotted lines with a diamond mark pairs with signs of a hidden "
             "common cause.")
    return (f'<section id="graph"><h2>The graph</h2><figure>{_svg_with_label(svg, label)}'
            f"<figcaption>{_e(label)} {where} A variable's box lists its flags and whether its noise looks "
            f"Gaussian.</figcaption></figure></section>")


def _edges(data: dict[str, Any]) -> str:
    ordered = pairs_in_reading_order(data["pairs"])
    # Edges, and pairs suspected of a hidden common cause even though not adjacent.
    shown = [p for p in ordered if p["adjacent"] or "confounding-suspected" in p["flags"]]
    rest = [p for p in ordered if p not in shown]

    def row(p: dict[str, Any]) -> str:
        conditioning = ", ".join(p.get("conditioning", []))
        return (f"<tr><td>{_e(p['x'])}</td><td>{_e(p['y'])}</td><td>{'yes' if p['adjacent'] else 'no'}</td>"
                f"<td>{_edge_cell(p)}</td><td><code>{_e(p['orientation'])}</code></td>"
                f"<td>{_e(p['basis']) if p['basis'] else '<span class=none>none</span>'}</td>"
                f"<td>{_flags(p['flags'])}</td><td>{_e(conditioning) or '<span class=none>-</span>'}</td></tr>")

    header = ("x", "y", "adjacent", "edge", "orientation", "basis", "flags", "conditioning set")
    parts = [f'<section id="edges"><h2>{_e(SECTION_TITLES["pairs"])}</h2>',
             "<p>Edges (adjacent pairs) and pairs suspected of a hidden common cause. "
             "In the edge column the cause comes first (\u2192); \u2014 marks an adjacent pair whose direction "
             "is not determined. The basis is the rung of the ladder that licenses the orientation.</p>"]
    parts.append(_table(header, [row(p) for p in shown]) if shown else "<p>No pair is adjacent or flagged.</p>")
    if rest:
        parts.append(f"<details><summary>The other {len(rest)} pairs: not adjacent</summary>"
                     + _table(header, [row(p) for p in rest]) + "</details>")
    parts.append("</section>")
    return "".join(parts)


def _variables(data: dict[str, Any]) -> str:
    structure = data.get("structure") or {}
    parents = structure.get("parents") or {}
    rows = []
    for v in data["variables"]:
        sw = variable_check(v, "shapiro-wilk", NOISE_ESTIMATE)
        sw_p = fmt_p(sw["p_adjusted"] if sw and sw["p_adjusted"] is not None else (sw["p_value"] if sw else None))
        rows.append(f"<tr><td><strong>{_e(v['name'])}</strong></td><td>{_flags(v['flags'])}</td>"
                    f"<td>{_e(noise_finding(data, v['name']))}</td><td class=\"num\">{_e(sw_p)}</td>"
                    f"<td>{_e(', '.join(parents.get(v['name'], []))) or '<span class=none>-</span>'}</td>"
                    f"<td class=\"num\">{_e(rows_needed_text(v))}</td></tr>")
    header = ("variable", "flags", "noise", "Shapiro-Wilk p of noise (adjusted)", "estimated parents",
              ROWS_NEEDED_HEADER)
    parts = [f'<section id="variables"><h2>{_e(SECTION_TITLES["variables"])}</h2>', _table(header, rows)]
    if data["global"]["flags"]:
        parts.append(f"<p>{WHOLE_TABLE_FLAGS}: {_flags(data['global']['flags'])}</p>")
    parts.append("</section>")
    return "".join(parts)


def _qq_subtitle(data: dict[str, Any], variable: dict[str, Any]) -> str:
    finding = noise_finding(data, variable["name"])
    sw = variable_check(variable, "shapiro-wilk", NOISE_ESTIMATE)
    if sw is None:
        return finding
    p = sw["p_adjusted"] if sw["p_adjusted"] is not None else sw["p_value"]
    return f"{finding}; Shapiro-Wilk p = {fmt_p(p)}"


def _plots(data: dict[str, Any], samples: dict[str, Any] | None, max_edge_plots: int, max_qq_plots: int) -> str:
    from preflight.report import plots

    parts = ['<section id="plots"><h2>Plots</h2>']
    if samples is None or samples.get("values") is None:
        parts.append('<p class="notice">The residual, Q-Q and spline plots need the data. This report was rendered '
                     "from a saved JSON report, which does not carry the data; run <code>preflight check DATA "
                     "--html PATH</code> to include them. The graph above and every table still hold.</p>"
                     "</section>")
        return "".join(parts)
    shown, total = int(len(samples["values"])), int(samples.get("n") or len(samples["values"]))
    parts.append(f'<p class="notice">Plots show {shown:,} of {total:,} rows (seeded subsample).</p>')
    alpha = float(data["settings"]["alpha"])
    edges = [p for p in data["pairs"] if p["adjacent"]]

    parts.append("<h3>Residual against regressor, both directions</h3>")
    parts.append("<p>For each edge, the left panel regresses y on x and plots the residual against x; the right "
                 "panel does the reverse. With linear mechanisms and non-Gaussian noise, the causal direction "
                 "leaves a residual that is an even band with no pattern (independent of its regressor, high HSIC "
                 "p-value) while the other direction shows structure. Gaussian noise leaves both panels patternless, "
                 "and then the direction cannot be told from these data.</p>")
    if not edges:
        parts.append("<p>No adjacent pairs, so no residual plots.</p>")
    for k, pair in enumerate(edges[:max_edge_plots]):
        label = f"Residuals of {pair['y']} on {pair['x']} and of {pair['x']} on {pair['y']}"
        if plots.pair_fits(samples, pair) is None:
            parts.append(f"<p>{_e(label)}: not drawn, the report carries no fits of this pair.</p>")
            continue
        svg = plots.residual_pair_svg(pair, samples, alpha=alpha, key=f"edge{k}")
        given = f" (given {_e(', '.join(pair['conditioning']))})" if pair.get("conditioning") else ""
        parts.append(f"<figure>{_svg_with_label(svg, label)}<figcaption>"
                     f"{_e(edge_text(pair, arrow=ARROW, line=UNDIRECTED))}{given}"
                     f": {_e(label)}; HSIC p-values as in the report.</figcaption></figure>")
    if len(edges) > max_edge_plots:
        parts.append(f"<p>Residual plots are shown for the first {max_edge_plots} of {len(edges)} edges.</p>")

    nonlinear = [p for p in data["pairs"] if "nonlinear" in p["flags"]]
    if nonlinear:
        parts.append("<h3>Straight line against spline, for pairs flagged nonlinear</h3>")
        parts.append("<p>The dashed line is the least-squares straight line, the solid curve the regression spline "
                     "the spline F-test compared it with. A material gap between them is what the "
                     "<span class=\"flag\">nonlinear</span> flag reports.</p>")
        parts.append('<div class="plotgrid wide">')
        for k, pair in enumerate(nonlinear[:max_edge_plots]):
            label = f"Straight line and spline fit for {pair['x']} and {pair['y']}"
            if plots.pair_fits(samples, pair) is None:
                parts.append(f"<p>{_e(label)}: not drawn, the report carries no fits of this pair.</p>")
                continue
            svg = plots.linear_vs_spline_svg(pair, samples, key=f"spline{k}")
            parts.append(f"<figure>{_svg_with_label(svg, label)}<figcaption>{_e(label)}.</figcaption></figure>")
        parts.append("</div>")

    noise = samples.get("noise")
    parts.append("<h3>Noise estimates against the normal distribution (Q-Q)</h3>")
    if noise is None:
        parts.append("<p>No noise estimates: the structure was not estimated for these data.</p>")
    else:
        parts.append("<p>Each variable's noise estimate (its residual given its estimated parents), standardised, "
                     "against normal quantiles. Points on the dashed diagonal mean Gaussian-looking noise; "
                     "S-shapes and bent ends mean non-Gaussian noise, which is what lets noise shape orient an "
                     "edge.</p>")
        parts.append('<div class="plotgrid">')
        names = list(samples["names"])
        for k, variable in enumerate(data["variables"][:max_qq_plots]):
            if variable["name"] not in names:
                continue
            column = noise[:, names.index(variable["name"])]
            subtitle = _qq_subtitle(data, variable)
            svg = plots.qq_svg(column, variable["name"], subtitle=subtitle, key=f"qq{k}")
            label = f"Normal Q-Q plot of the noise of {variable['name']}: {subtitle}"
            parts.append(f"<figure>{_svg_with_label(svg, label)}</figure>")
        parts.append("</div>")
        if len(data["variables"]) > max_qq_plots:
            parts.append(f"<p>Q-Q plots are shown for the first {max_qq_plots} of {len(data['variables'])} "
                         "variables.</p>")
    parts.append("</section>")
    return "".join(parts)


def _methods(data: dict[str, Any]) -> str:
    paragraphs = "".join(f"<p>{_e(p)}</p>" for p in methods_paragraphs(data))
    refs = "".join(f"<li>{_e(REFERENCES[k])}</li>" for k in methods_used(data).reference_keys)
    return (f'<section id="methods"><h2>{_e(SECTION_TITLES["methods"])}</h2>{paragraphs}'
            f'<h3>{_e(SECTION_TITLES["references"])}</h3><ol class="refs">{refs}</ol></section>')


def _settings(data: dict[str, Any]) -> str:
    docs = policy_descriptions()
    rows = [f"<tr><td><code>{_e(k)}</code></td><td><code>{_e(fmt_setting(v))}</code></td>"
            f"<td class=\"note\">{_e(docs.get(k, ''))}</td></tr>" for k, v in data["settings"].items()]
    return (f'<section id="settings"><h2>{_e(SECTION_TITLES["settings"])}</h2>'
            + _table(("setting", "value", "meaning"), rows) + "</section>")


def _input(data: dict[str, Any]) -> str:
    inp = data["input"]
    rows = [
        ("File", f"<code>{_e(inp['path'])}</code>"),
        ("SHA-256 of the input bytes", f"<code>{_e(inp['sha256'])}</code>" if inp.get("sha256")
         else '<span class="none">not read from a file</span>'),
        ("Rows read", _e(fmt_count(inp["rows"]))),
        ("Rows used", _e(fmt_count(inp["rows_used"]))),
        ("Columns", _e(", ".join(inp["columns"]))),
        ("Tool", _e(f"{data['tool']['name']} {data['tool']['version']} (report schema {data['schema_version']})")),
        ("Generated at", _e(data["generated_at"])),
    ]
    for warning in inp.get("warnings") or []:
        rows.append((INPUT_WARNING, _e(warning)))
    return f'<section id="input"><h2>{_e(SECTION_TITLES["input"])}</h2>{_kv(rows)}</section>'


def _all_checks(data: dict[str, Any]) -> str:
    parts = [f'<section id="checks"><h2>{_e(SECTION_TITLES["checks"])}</h2>',
             "<p>Every check with its raw and multiplicity-adjusted p-value. <span class=\"res pass\">PASS</span> "
             "and <span class=\"res fail\">FAIL</span> mark checks that guard an assumption; "
             "<span class=\"res evidence\">evidence</span> marks checks that inform a verdict without guarding "
             "on their own. Each summary counts its FAILs.</p>"]

    def block(title: str, checks: Sequence[dict[str, Any]]) -> str:
        body = _check_table(checks) if checks else f"<p>{NO_CHECKS}</p>"
        return f"<details><summary>{_e(title)} {_counts(checks)}</summary>{body}</details>"

    parts.append("<h3>Variables</h3>")
    for v in data["variables"]:
        parts.append(block(f"Variable {v['name']}", v["checks"]))
    parts.append("<h3>Pairs</h3>")
    for p in pairs_in_reading_order(data["pairs"]):
        state = edge_text(p, arrow=ARROW, line=UNDIRECTED) if p["adjacent"] else "not adjacent"
        parts.append(block(f"{p['x']} and {p['y']} ({state})", p["checks"]))
    parts.append(f"<h3>{_e(SECTION_TITLES['global'])}</h3>")
    parts.append(block("Whole table", data["global"]["checks"]))
    parts.append("</section>")
    return "".join(parts)


# ---------------------------------------------------------------- the renderer

def render_html(report: Report, *, max_edge_plots: int = MAX_EDGE_PLOTS, max_qq_plots: int = MAX_QQ_PLOTS) -> str:
    data = report.data if isinstance(report, Report) else report
    samples = report.samples if isinstance(report, Report) else None
    title = report_title(data)
    sha = data["input"].get("sha256")
    meta = (f"{data['tool']['name']} {data['tool']['version']} \u00b7 generated {data['generated_at']} \u00b7 "
            f"{fmt_count(data['input']['rows_used'])} of {fmt_count(data['input']['rows'])} rows used"
            + (f" \u00b7 SHA-256 {sha[:12]}\u2026" if sha else ""))
    with warnings.catch_warnings():
        # A name in a script the plot font lacks is drawn as boxes; the report
        # tables show it properly, so matplotlib's warning is no news to the user.
        warnings.filterwarnings("ignore", message="Glyph .* missing from font", category=UserWarning)
        body = [
            f"<header><h1>{_e(title)}</h1><p class=\"meta\">{_e(meta)}</p></header>",
            _verdict(data),
            _why(data),
            _cautions(data),
            _graph(data),
            _edges(data),
            _variables(data),
            _plots(data, samples, max_edge_plots, max_qq_plots),
            _methods(data),
            _settings(data),
            _input(data),
            _all_checks(data),
            f"<footer>Written by {_e(data['tool']['name'])} {_e(data['tool']['version'])}. "
            "This file is self-contained: it loads nothing from the network.</footer>",
        ]
    return ("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n"
            f"<title>{_e(title)}</title>\n<style>{_CSS}</style>\n<script>{_PRINT_SCRIPT}</script>\n</head>\n<body>\n"
            + "\n".join(body) + "\n</body>\n</html>\n")
