"""Plots of the HTML report, each returned as inline SVG text.

Everything is drawn with matplotlib's object API on an Agg canvas (no pyplot,
so no global figure state and no display is needed).  Scatter points are
rasterised inside the SVG, which keeps a 2000-point panel to tens of
kilobytes while axes and labels stay vector and sharp in print.

Every element id inside an SVG is prefixed with a key unique to the plot, so
several SVGs can sit inline in one HTML page without one figure's glyph or
clip-path definitions shadowing another's.
"""

from __future__ import annotations

import html
import io
import itertools
import math
import re
from collections.abc import Sequence
from dataclasses import dataclass
from fractions import Fraction
from typing import TYPE_CHECKING, Any

import numpy as np

from preflight.evidence import rejects
from preflight.report.identity import pair_check

if TYPE_CHECKING:
    from preflight.battery import PlotFits

# Colours are never the only carrier of meaning: every styled element also
# has a line style, a marker or a text label.
INK = "#1b1b1b"
ORIENTED = "#1f4e79"
UNORIENTED = "#5a5a5a"
SUSPECT = "#a34700"
POINTS = "#2b6a99"
FIT_LINE = "#1b1b1b"
SPLINE_LINE = "#b3261e"

_SVG_METADATA = {"Creator": None, "Date": None, "Format": None, "Type": None}
_RC: dict[Any, Any] = {
    "font.family": "DejaVu Sans",
    "font.size": 9.0,
    "axes.titlesize": 9.5,
    "axes.labelsize": 9.0,
    "axes.edgecolor": "#444444",
    "axes.linewidth": 0.8,
    "xtick.labelsize": 8.0,
    "ytick.labelsize": 8.0,
    "svg.fonttype": "path",
    # Column names are text, not TeX: "price ($)" must not start mathtext.
    "text.parse_math": False,
}

LABEL_MAX_CHARS = 40
"""Longest column name drawn in a plot; longer ones are cut with an ellipsis (laying out
thousands of characters of text costs minutes and gigabytes, and helps no reader)."""

_CONTROL = re.compile("[\x00-\x1f\x7f-\x9f]")


def _label(name: Any) -> str:
    """A column name as drawn: control characters shown as U+FFFD, at most LABEL_MAX_CHARS characters."""
    text = _CONTROL.sub("\ufffd", str(name))
    return text if len(text) <= LABEL_MAX_CHARS else text[:LABEL_MAX_CHARS - 1] + "\u2026"


# ---------------------------------------------------------------- helpers

def _figure(width_in: float, height_in: float):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width_in, height_in))
    FigureCanvasAgg(fig)
    return fig


def _to_svg(fig, key: str, *, title: str, tight: bool = True, raster_dpi: int = 150) -> str:
    """Serialise ``fig`` as SVG fit for inlining: no XML prolog, ids prefixed with ``key``.

    ``title`` becomes the SVG's ``<title>``: glyphs are drawn as paths, so
    this is the text that screen readers, tooltips and searches see.
    """
    import matplotlib

    buffer = io.StringIO()
    # A fixed salt per plot makes the output reproducible run to run.
    with matplotlib.rc_context({**_RC, "svg.hashsalt": key}):
        fig.savefig(buffer, format="svg", metadata=_SVG_METADATA, dpi=raster_dpi,
                    bbox_inches="tight" if tight else None, pad_inches=0.05)
    text = buffer.getvalue()
    text = text[text.index("<svg"):]
    prefix = re.sub(r"[^A-Za-z0-9_-]", "-", key) + "-"
    text = re.sub(r'\bid="([^"]+)"', lambda m: f'id="{prefix}{m.group(1)}"', text)
    text = re.sub(r'href="#([^"]+)"', lambda m: f'href="#{prefix}{m.group(1)}"', text)
    text = re.sub(r"url\(#([^)]+)\)", lambda m: f"url(#{prefix}{m.group(1)})", text)
    text = re.sub(r"<!--.*?-->\s*", "", text, flags=re.S)
    opening = text.index(">") + 1
    title = re.sub("[\x00-\x08\x0b\x0c\x0e-\x1f\x7f-\x9f]", "\ufffd", title)
    text = text[:opening] + f"\n <title>{html.escape(title)}</title>" + text[opening:]
    return text.strip() + "\n"


def _p_text(p: float | None) -> str:
    if p is None:
        return "n/a"
    if p < 1e-4:
        return "< 0.0001"
    return f"{p:.3g}" if p < 0.001 else f"{p:.3f}"


def _best_p(check: dict[str, Any] | None) -> tuple[float | None, str]:
    """The adjusted p-value when there is one (that is what the verdicts use), else the raw one."""
    if check is None:
        return None, ""
    if check.get("p_adjusted") is not None:
        return check["p_adjusted"], "adjusted"
    return check.get("p_value"), "raw"


def direction_hsic(pair: dict[str, Any], regressor: str, response: str) -> dict[str, Any] | None:
    """The pair's HSIC check of the (straight-line) residual of ``response`` regressed on ``regressor``."""
    return pair_check(pair, "hsic", (response, regressor), family="residual independence")


def pair_fits(samples: dict[str, Any], pair: dict[str, Any]) -> PlotFits | None:
    """The pair battery's fits of this pair at the plotted rows, or None when the report carries none for it."""
    return (samples.get("fits") or {}).get(frozenset((pair["x"], pair["y"])))


def _displayed(values: np.ndarray, name: str, samples: dict[str, Any]) -> np.ndarray:
    """Values the battery computed (column scaled by 2**-exponent) in the units the axis shows.

    Those are the column's own units, or units of 10**power for a column
    near the ends of the floating-point range (:func:`_display_power`).  The
    factor 2**exponent / 10**power is formed exactly and rounded once, so
    nothing overflows on the way.
    """
    exponent = int(samples["exponents"][name])
    power = _display_power(np.asarray(samples["values"], dtype=np.float64)[:, list(samples["names"]).index(name)])
    factor = math.ldexp(1.0, exponent) if not power else float(Fraction(2) ** exponent / Fraction(10) ** power)
    return np.asarray(values, dtype=np.float64) * factor


def _display_power(v: np.ndarray) -> int:
    """0 for a column of ordinary magnitude; else the power of ten its axis is shown in.

    Columns near 1e308 or 1e-300 are analysed exactly (scaled by powers of
    two), but their sums overflow or underflow in a plot's own arithmetic.
    """
    largest = float(np.abs(v).max(initial=0.0))
    if largest == 0.0 or 1e-100 <= largest <= 1e100:
        return 0
    return int(np.floor(np.log10(largest)))


def _unit_note(name: str, samples: dict[str, Any] | None) -> str:
    if samples is None or name not in samples["names"]:
        return ""
    power = _display_power(np.asarray(samples["values"], dtype=np.float64)[:, list(samples["names"]).index(name)])
    return f" [in units of 1e{power}]" if power else ""


def _axis_label(name: str, pair: dict[str, Any], samples: dict[str, Any] | None = None) -> str:
    conditioning = pair.get("conditioning") or []
    if not conditioning:
        return _label(name) + _unit_note(name, samples)
    shown = ", ".join(_label(c) for c in conditioning[:3]) + (", ..." if len(conditioning) > 3 else "")
    return f"{_label(name)} (given {shown}){_unit_note(name, samples)}"


def _scatter(ax, x: np.ndarray, y: np.ndarray) -> None:
    size = 6.0 if x.shape[0] > 1000 else 10.0
    ax.scatter(x, y, s=size, c=POINTS, alpha=0.45, linewidths=0, rasterized=True)


def _style_axes(ax) -> None:
    ax.grid(True, color="#dddddd", linewidth=0.6)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)


# ---------------------------------------------------------------- residual plots

def residuals_both_ways(pair: dict[str, Any],
                        samples: dict[str, Any]) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(x, residual of y on x, y, residual of x on y) at the plotted rows, as the pair battery computed them.

    x and y are the battery's columns after partialling out the pair's
    conditioning set, with their means added back; the residuals are those
    the battery's checks tested (by Frisch-Waugh-Lovell, the residuals of y on
    [1, x, Z] over all rows).  Nothing is refitted here.
    """
    fits = pair_fits(samples, pair)
    if fits is None:
        raise KeyError(f"the report carries no fits of the pair ({pair['x']}, {pair['y']})")
    x, y = pair["x"], pair["y"]
    return (_displayed(fits.partialled(x), x, samples), _displayed(fits.residual(y), y, samples),
            _displayed(fits.partialled(y), y, samples), _displayed(fits.residual(x), x, samples))


def residual_pair_svg(pair: dict[str, Any], samples: dict[str, Any], *, alpha: float, key: str) -> str:
    """Residual against regressor for both directions of one pair, side by side.

    Left: the residual of y regressed on x, against x.  Right: the residual
    of x regressed on y, against y.  Under a linear non-Gaussian model the
    causal direction leaves a residual independent of its regressor (an
    even, patternless band) and the other direction does not (Shimizu et al.
    2006).  Each panel's title carries that direction's HSIC p-value from
    the report.
    """
    x_name, y_name = pair["x"], pair["y"]
    xp, resid_y, yp, resid_x = residuals_both_ways(pair, samples)
    panels = (
        (xp, resid_y, x_name, y_name, "x->y"),
        (yp, resid_x, y_name, x_name, "y->x"),
    )
    import matplotlib

    titles = []
    with matplotlib.rc_context(_RC):
        fig = _figure(9.6, 3.5)
        axes = fig.subplots(1, 2)
        for ax, (regressor, residual, reg_name, resp_name, orientation) in zip(axes, panels):
            _scatter(ax, regressor, residual)
            ax.axhline(0.0, color=FIT_LINE, linewidth=0.9, linestyle="-")
            p, kind = _best_p(direction_hsic(pair, reg_name, resp_name))
            if p is None:
                verdict = "no HSIC p-value"
            else:
                verdict = "dependent" if rejects(p, alpha) else "looks independent"
            chosen = "  [reported direction]" if pair.get("orientation") == orientation else ""
            shown_p = _p_text(p)
            p_shown = shown_p if shown_p.startswith("<") else "= " + shown_p
            title = (f"{_label(resp_name)} on {_label(reg_name)}{chosen}\nHSIC p {p_shown}"
                     f"{' (' + kind + ')' if kind else ''}: {verdict}")
            titles.append(" ".join(title.split()))
            ax.set_title(title, loc="left")
            ax.set_xlabel(_axis_label(reg_name, pair, samples))
            ax.set_ylabel(f"residual of {_label(resp_name)}{_unit_note(resp_name, samples)}")
            _style_axes(ax)
        fig.tight_layout(w_pad=2.0)
        return _to_svg(fig, key, title="Residual against regressor. Left: " + titles[0] + ". Right: " + titles[1] + ".")


# ---------------------------------------------------------------- Q-Q plots

def qq_svg(noise: np.ndarray, name: str, *, subtitle: str, key: str) -> str:
    """Normal Q-Q plot of one standardised noise estimate.

    Plotting positions (i - 3/8) / (n + 1/4) (Blom 1958, from memory); a
    Gaussian noise term follows the diagonal, the non-Gaussian noise that
    orients edges bends away from it at the ends.
    """
    from scipy import stats

    values = np.asarray(noise, dtype=np.float64)
    values = values[np.isfinite(values)]
    import matplotlib

    with matplotlib.rc_context(_RC):
        fig = _figure(3.2, 3.4)
        ax = fig.subplots()
        if values.size >= 3 and values.std() > 0:
            z = np.sort((values - values.mean()) / values.std())
            n = z.shape[0]
            theoretical = stats.norm.ppf((np.arange(1, n + 1) - 0.375) / (n + 0.25))
            _scatter(ax, theoretical, z)
            lim = float(max(np.abs(theoretical).max(), np.abs(z).max())) * 1.05
            ax.plot([-lim, lim], [-lim, lim], color=FIT_LINE, linewidth=0.9, linestyle="--")
            ax.set_xlim(-lim, lim)
            ax.set_ylim(-lim, lim)
        else:
            ax.text(0.5, 0.5, "no variation to plot", ha="center", va="center", transform=ax.transAxes)
        ax.set_title(f"noise of {_label(name)}\n" + subtitle.replace("; ", "\n"), loc="left")
        ax.set_xlabel("normal quantile")
        ax.set_ylabel("standardised noise")
        _style_axes(ax)
        fig.tight_layout()
        # Same size for every variable, so the grid of Q-Q plots lines up.
        return _to_svg(fig, key, title=f"Normal Q-Q plot of the noise of {name}: {subtitle}", tight=False)


# ---------------------------------------------------------------- linear vs spline

@dataclass(frozen=True)
class SplineComparisonFits:
    """Fitted values of the straight line and of the regression spline on the plotted rows."""

    regressor: np.ndarray
    response: np.ndarray
    regressor_name: str
    response_name: str
    df: int
    linear_fitted: np.ndarray
    spline_fitted: np.ndarray | None
    """None where the battery fitted no spline (a regressor too tied for quantile knots)."""


def linear_and_spline_fits(pair: dict[str, Any], samples: dict[str, Any]) -> SplineComparisonFits:
    """Straight line and cubic regression spline of the effect (y unless oriented y->x) on the cause.

    Both are the pair battery's: the straight line its checks' residual, the
    spline that of the spline F-test (its degrees of freedom, all rows).
    """
    fits = pair_fits(samples, pair)
    if fits is None:
        raise KeyError(f"the report carries no fits of the pair ({pair['x']}, {pair['y']})")
    reg_name, resp_name = (pair["y"], pair["x"]) if pair.get("orientation") == "y->x" else (pair["x"], pair["y"])
    regressor = _displayed(fits.partialled(reg_name), reg_name, samples)
    response = _displayed(fits.partialled(resp_name), resp_name, samples)
    spline = fits.spline_residual(resp_name)
    return SplineComparisonFits(regressor, response, reg_name, resp_name, fits.spline_df,
                                response - _displayed(fits.residual(resp_name), resp_name, samples),
                                None if spline is None else response - _displayed(spline, resp_name, samples))


def linear_vs_spline_svg(pair: dict[str, Any], samples: dict[str, Any], *, key: str) -> str:
    """Straight-line fit against a cubic regression spline for one pair flagged ``nonlinear``.

    The response is the effect when the pair is oriented, else y.  Both fits
    are the pair battery's (:func:`linear_and_spline_fits`).
    """
    fits = linear_and_spline_fits(pair, samples)
    regressor, response, df = fits.regressor, fits.response, fits.df
    reg_name, resp_name = fits.regressor_name, fits.response_name
    order = np.argsort(regressor)
    grid = regressor[order]
    spline_fitted = None if fits.spline_fitted is None else fits.spline_fitted[order]
    straight_fitted = fits.linear_fitted[order]
    gain = pair_check(pair, "spline-f-test", (resp_name, reg_name))
    gain_text = ""
    if gain is not None and gain.get("effect") is not None:
        gain_text = f"; spline adds R\u00b2 {gain['effect']:.3f}"
    import matplotlib

    with matplotlib.rc_context(_RC):
        fig = _figure(4.6, 3.3)
        ax = fig.subplots()
        _scatter(ax, regressor, response)
        ax.plot(grid, straight_fitted, color=FIT_LINE, linewidth=1.6,
                linestyle="--", label="straight line (dashed)")
        if spline_fitted is not None:
            ax.plot(grid, spline_fitted, color=SPLINE_LINE, linewidth=1.8, linestyle="-",
                    label=f"cubic spline, {df} df (solid)")
        else:
            gain_text += "; no spline: the regressor is too tied for its knots"
        title = f"{_label(resp_name)} on {_label(reg_name)}: straight line vs spline{gain_text}"
        ax.set_title(title, loc="left")
        ax.set_xlabel(_axis_label(reg_name, pair, samples))
        ax.set_ylabel(_axis_label(resp_name, pair, samples))
        ax.legend(loc="best", fontsize=8, frameon=True, framealpha=0.9)
        _style_axes(ax)
        fig.tight_layout()
        described = f" (cubic spline with {df} degrees of freedom)" if spline_fitted is not None else ""
        return _to_svg(fig, key, title=title + described)


# ---------------------------------------------------------------- graph overview

_NODE_FONT = 11.0
_FLAG_FONT = 8.0
_PAD_X, _PAD_Y = 8.0, 6.0
_COLUMN_GAP, _ROW_GAP = 84.0, 38.0
_MARGIN = 12.0


def _text_width(text: str, size: float) -> float:
    from matplotlib.font_manager import FontProperties
    from matplotlib.path import Path
    from matplotlib.textpath import text_to_path

    if not text:
        return 0.0
    # The outline TextPath builds (no math parsing), scaled as it scales it; a text of invisible characters
    # only (a soft hyphen, a zero-width space) has none, where TextPath fails (matplotlib 3.10): width 0.
    vertices, codes = text_to_path.get_text_path(FontProperties(family="DejaVu Sans"), text, ismath=False)
    if len(vertices) == 0:
        return 0.0
    return float(Path(np.asarray(vertices) * (size / text_to_path.FONT_SCALE), codes).get_extents().width)


def graph_layout(names: Sequence[str], order: Sequence[str],
                 edges: Sequence[tuple[str, str]]) -> dict[str, tuple[int, int]]:
    """Layer and row of each variable: left to right along the estimated causal order.

    A variable's layer is one more than the deepest earlier-in-order
    neighbour, so every edge runs left to right and chains read as chains.
    Rows within a layer come from alternating barycentre sweeps (Sugiyama et
    al. 1981, from memory); the arrangement with the fewest crossings of
    straight edges is kept.
    """
    sequence = [n for n in order if n in names] + [n for n in names if n not in order]
    rank = {n: k for k, n in enumerate(sequence)}
    earlier: dict[str, list[str]] = {n: [] for n in sequence}
    later: dict[str, list[str]] = {n: [] for n in sequence}
    links: list[tuple[str, str]] = []
    for a, b in edges:
        if a in rank and b in rank and a != b:
            first, second = (a, b) if rank[a] < rank[b] else (b, a)
            earlier[second].append(first)
            later[first].append(second)
            links.append((first, second))
    layer: dict[str, int] = {}
    for n in sequence:
        layer[n] = 1 + max((layer[m] for m in earlier[n]), default=-1)
    n_layers = max(layer.values(), default=-1) + 1
    layers = [[n for n in sequence if layer[n] == level] for level in range(n_layers)]

    def centred(arrangement: list[list[str]]) -> dict[str, float]:
        return {n: k - (len(members) - 1) / 2 for members in arrangement for k, n in enumerate(members)}

    def crossings(arrangement: list[list[str]]) -> int:
        pos = centred(arrangement)
        segments = [((layer[a], pos[a]), (layer[b], pos[b])) for a, b in links]
        count = 0
        for (p1, p2), (q1, q2) in itertools.combinations(segments, 2):
            if len({p1, p2, q1, q2}) < 4:
                continue
            d1 = (q2[0] - q1[0]) * (p1[1] - q1[1]) - (q2[1] - q1[1]) * (p1[0] - q1[0])
            d2 = (q2[0] - q1[0]) * (p2[1] - q1[1]) - (q2[1] - q1[1]) * (p2[0] - q1[0])
            d3 = (p2[0] - p1[0]) * (q1[1] - p1[1]) - (p2[1] - p1[1]) * (q1[0] - p1[0])
            d4 = (p2[0] - p1[0]) * (q2[1] - p1[1]) - (p2[1] - p1[1]) * (q2[0] - p1[0])
            count += (d1 * d2 < 0) and (d3 * d4 < 0)
        return count

    def sweep(arrangement: list[list[str]], levels: Sequence[int], neighbours: dict[str, list[str]]) -> list[list[str]]:
        arrangement = [list(m) for m in arrangement]
        for level in levels:
            pos = centred(arrangement)
            current = {n: k for k, n in enumerate(arrangement[level])}
            # The loop's values are bound as defaults: the key belongs to this level's sort alone.
            def key(n: str, pos=pos, current=current, level=level) -> tuple[float, int]:
                near = [pos[m] for m in neighbours[n]]
                return (float(np.mean(near)) if near else current[n] - (len(arrangement[level]) - 1) / 2, rank[n])
            arrangement[level].sort(key=key)
        return arrangement

    best, best_count = layers, crossings(layers) if len(links) <= 400 else 0
    arrangement = layers
    for _ in range(4 if len(links) <= 400 else 1):
        arrangement = sweep(arrangement, range(1, n_layers), earlier)
        arrangement = sweep(arrangement, range(n_layers - 2, -1, -1), later)
        if len(links) <= 400:
            count = crossings(arrangement)
            if count < best_count:
                best, best_count = arrangement, count
        else:
            best = arrangement
    return {n: (level, k) for level, members in enumerate(best) for k, n in enumerate(members)}


def _bezier(p0: np.ndarray, control: np.ndarray, p2: np.ndarray, t: np.ndarray) -> np.ndarray:
    t = t[:, None]
    return (1 - t) ** 2 * p0 + 2 * (1 - t) * t * control + t**2 * p2


def _inside(points: np.ndarray, centre: tuple[float, float], half: tuple[float, float], gap: float) -> np.ndarray:
    return ((np.abs(points[:, 0] - centre[0]) <= half[0] + gap)
            & (np.abs(points[:, 1] - centre[1]) <= half[1] + gap))


def _clear_bend(p0: np.ndarray, p2: np.ndarray, others: list[tuple[tuple[float, float], tuple[float, float]]]) -> float:
    """The smallest bend (arc3 ``rad``) whose curve from p0 to p2 passes through no other box.

    Falls back to the bend touching the fewest sampled points of other boxes.
    """
    t = np.linspace(0.0, 1.0, 120)
    best, best_hits = 0.0, None
    mid, delta = (p0 + p2) / 2.0, p2 - p0
    for rad in (0.0, 0.12, -0.12, 0.25, -0.25, 0.4, -0.4, 0.6, -0.6):
        curve = _bezier(p0, mid + rad * np.array([delta[1], -delta[0]]), p2, t)
        hits = sum(int(_inside(curve, centre, size, 6.0).sum()) for centre, size in others)
        if hits == 0:
            return rad
        if best_hits is None or hits < best_hits:
            best, best_hits = rad, hits
    return best


def _arrow_head(ax, tip: np.ndarray, direction: np.ndarray, colour: str, length: float = 9.0,
                width: float = 3.8) -> np.ndarray:
    from matplotlib.patches import Polygon

    d = direction / (np.linalg.norm(direction) or 1.0)
    normal = np.array([-d[1], d[0]])
    base = tip - length * d
    ax.add_patch(Polygon([tip, base + width * normal, base - width * normal], closed=True,
                         facecolor=colour, edgecolor=colour, linewidth=0.5, zorder=4))
    return base


def _edge_style(kind: str) -> tuple[str, Any, float]:
    if kind == "suspect":
        return SUSPECT, (0, (1.2, 2.2)), 1.8
    if kind == "oriented":
        return ORIENTED, "-", 1.6
    return UNORIENTED, (0, (5.0, 3.5)), 1.4


def _draw_edge(ax, centre_a, half_a, centre_b, half_b, kind: str, arrow: bool, rad: float) -> None:
    """Draw from node a to node b (arrow head at b when ``arrow``), clipped at both boxes."""
    from matplotlib.lines import Line2D

    colour, linestyle, width = _edge_style(kind)
    p0, p2 = np.asarray(centre_a, float), np.asarray(centre_b, float)
    mid, delta = (p0 + p2) / 2.0, p2 - p0
    control = mid + rad * np.array([delta[1], -delta[0]])
    t = np.linspace(0.0, 1.0, 400)
    curve = _bezier(p0, control, p2, t)
    outside = ~_inside(curve, centre_a, half_a, 3.0) & ~_inside(curve, centre_b, half_b, 3.0)
    if outside.sum() < 2:
        return
    first, last = np.argmax(outside), len(outside) - 1 - np.argmax(outside[::-1])
    visible = curve[first:last + 1]
    if arrow:
        base = _arrow_head(ax, visible[-1], visible[-1] - visible[-4 if len(visible) > 4 else 0], colour)
        keep = np.linalg.norm(visible - visible[-1], axis=1) >= np.linalg.norm(visible[-1] - base)
        visible = np.vstack([visible[keep], base])
    ax.add_line(Line2D(visible[:, 0], visible[:, 1], color=colour, linestyle=linestyle, linewidth=width,
                       solid_capstyle="butt", zorder=3))
    if kind == "suspect":
        centre = _bezier(p0, control, p2, np.array([0.5]))[0]
        ax.plot([centre[0]], [centre[1]], marker="D", markersize=6.5, color=SUSPECT,
                markeredgecolor="white", markeredgewidth=0.8, zorder=5, linestyle="none")


def edge_kinds(report: dict[str, Any]) -> list[tuple[dict[str, Any], str, bool]]:
    """(pair, kind, oriented) for every pair the overview draws.

    kind is ``suspect`` for pairs flagged ``confounding-suspected`` (whether
    adjacent or not), else ``oriented`` or ``unoriented`` for adjacent pairs;
    pairs that are neither are not drawn.
    """
    out = []
    for pair in report["pairs"]:
        oriented = pair["adjacent"] and pair["orientation"] in ("x->y", "y->x")
        if "confounding-suspected" in pair["flags"]:
            out.append((pair, "suspect", oriented))
        elif pair["adjacent"]:
            out.append((pair, "oriented" if oriented else "unoriented", oriented))
    return out


_LEGEND = (("oriented", True, "oriented edge: solid arrow from cause to effect"),
           ("unoriented", False, "adjacent, direction not determined: dashed line"),
           ("suspect", False, "hidden common cause suspected: dotted line with a diamond"))
_KIND_WORDS = {"oriented": "oriented", "unoriented": "direction not determined",
               "suspect": "hidden common cause suspected"}


@dataclass(frozen=True)
class _GraphGeometry:
    """Where every box of the overview graph sits, in points."""

    width: float
    height: float
    legend_height: float
    centres: dict[str, tuple[float, float]]
    half: dict[str, tuple[float, float]]
    """Half width and half height of each variable's box."""
    labels: dict[str, tuple[str, str]]
    """(title, flags line) of each variable's box."""


def graph_svg(report: dict[str, Any], *, key: str = "graph") -> str:
    """Overview of the variables with every edge drawn by status.

    Oriented edges are solid arrows, adjacent pairs whose direction is not
    determined are dashed lines, pairs with signs of a hidden common cause
    are dotted with a diamond at the middle.  A legend in words sits under
    the graph.  Coordinates are in points, so box sizes and gaps are exact.
    """
    names = list(report["input"]["columns"])
    drawn = edge_kinds(report)
    geometry = _graph_geometry(report, names, drawn)
    width, height, centres, half = geometry.width, geometry.height, geometry.centres, geometry.half
    import matplotlib

    with matplotlib.rc_context(_RC):
        fig = _figure(width / 72.0, height / 72.0)
        ax = fig.add_axes([0, 0, 1, 1])
        ax.set_xlim(0, width)
        ax.set_ylim(0, height)
        ax.axis("off")
        for pair, kind, oriented in drawn:
            a, b = pair["x"], pair["y"]
            if oriented and pair["orientation"] == "y->x":
                a, b = b, a
            # Bend lines that would otherwise run through the boxes in between.
            others = [(centres[n], half[n]) for n in names if n not in (a, b)]
            rad = _clear_bend(np.asarray(centres[a], float), np.asarray(centres[b], float), others)
            _draw_edge(ax, centres[a], half[a], centres[b], half[b], kind, oriented, rad)
        _draw_boxes(ax, names, geometry)
        _draw_legend(ax, geometry.legend_height)
        if not drawn:
            ax.text(width / 2, height - _MARGIN - 6, "no edges: no pair was found adjacent or suspect",
                    ha="center", va="top", fontsize=8.5, color=INK)
        described = []
        for pair, kind, oriented in drawn:
            a, b = (pair["y"], pair["x"]) if pair["orientation"] == "y->x" else (pair["x"], pair["y"])
            described.append(f"{a} {'->' if oriented else '--'} {b} ({_KIND_WORDS[kind]})")
        summary = "Edges: " + "; ".join(described) + "." if described else "No edges."
        return _to_svg(fig, key, title="Overview graph of the variables. " + summary + " Legend: "
                       + "; ".join(text for _, _, text in _LEGEND) + ".", tight=False)


def _graph_geometry(report: dict[str, Any], names: list[str], drawn) -> _GraphGeometry:
    """Box sizes from the labels, layers from the causal order, and the centre of every box."""
    structure = report.get("structure") or {}
    order = list(structure.get("order") or [])
    flags_of = {v["name"]: [f for f in v["flags"]] for v in report["variables"]}
    gaussian = set(structure.get("gaussian_noises") or [])
    # Every adjacent pair shapes the layers; a suspect pair that is not adjacent is drawn but does not.
    layout = graph_layout(names, order, [(p["x"], p["y"]) for p, _, _ in drawn if p["adjacent"]])

    labels: dict[str, tuple[str, str]] = {}
    for name in names:
        notes = list(flags_of.get(name, []))
        if name in gaussian:
            notes.append("Gaussian noise")
        labels[name] = (_label(name), ", ".join(notes))
    half_h = (_NODE_FONT * 1.25 + _PAD_Y * 2) / 2
    half_h_flagged = (_NODE_FONT * 1.25 + _FLAG_FONT * 1.3 + _PAD_Y * 2) / 2
    half: dict[str, tuple[float, float]] = {}
    for name, (title, note) in labels.items():
        width = max(_text_width(title, _NODE_FONT), _text_width(note, _FLAG_FONT)) + 2 * _PAD_X
        half[name] = (width / 2, half_h_flagged if note else half_h)

    n_layers = 1 + max((lv for lv, _ in layout.values()), default=0)
    layer_width = [2 * max((half[n][0] for n, (lv, _) in layout.items() if lv == level), default=20.0)
                   for level in range(n_layers)]
    rows_per_layer = [sum(1 for lv, _ in layout.values() if lv == level) for level in range(n_layers)]
    row_height = 2 * half_h_flagged + _ROW_GAP
    body_height = max(rows_per_layer, default=1) * row_height
    legend_height = 16.0 * len(_LEGEND) + 14.0
    width = sum(layer_width) + _COLUMN_GAP * (n_layers - 1) + 2 * _MARGIN
    width = max(width, 380.0)
    height = body_height + legend_height + 2 * _MARGIN

    centres: dict[str, tuple[float, float]] = {}
    x_left = _MARGIN + max(0.0, (width - 2 * _MARGIN - sum(layer_width) - _COLUMN_GAP * (n_layers - 1)) / 2)
    for level in range(n_layers):
        cx = x_left + sum(layer_width[:level]) + _COLUMN_GAP * level + layer_width[level] / 2
        count = rows_per_layer[level]
        for name, (lv, row) in layout.items():
            if lv == level:
                cy = height - _MARGIN - body_height / 2 - (row - (count - 1) / 2) * row_height
                centres[name] = (cx, cy)
    return _GraphGeometry(width, height, legend_height, centres, half, labels)


def _draw_boxes(ax, names: list[str], geometry: _GraphGeometry) -> None:
    from matplotlib.patches import FancyBboxPatch

    for name in names:
        cx, cy = geometry.centres[name]
        hw, hh = geometry.half[name]
        ax.add_patch(FancyBboxPatch((cx - hw, cy - hh), 2 * hw, 2 * hh,
                                    boxstyle="round,pad=0,rounding_size=5", facecolor="white",
                                    edgecolor=INK, linewidth=1.0, zorder=6))
        title, note = geometry.labels[name]
        if note:
            ax.text(cx, cy + _FLAG_FONT * 0.65, title, ha="center", va="center", fontsize=_NODE_FONT,
                    color=INK, zorder=7)
            ax.text(cx, cy - _NODE_FONT * 0.75, note, ha="center", va="center", fontsize=_FLAG_FONT,
                    color="#444444", style="italic", zorder=7)
        else:
            ax.text(cx, cy, title, ha="center", va="center", fontsize=_NODE_FONT, color=INK, zorder=7)


def _draw_legend(ax, legend_height: float) -> None:
    """The legend in words, each entry with its line sample."""
    y = _MARGIN + legend_height - 14.0
    for kind, arrow, text in _LEGEND:
        start, end = (_MARGIN + 4, y), (_MARGIN + 52, y)
        _draw_edge(ax, start, (0.0, 0.0), end, (0.0, 0.0), kind, arrow, 0.0)
        ax.text(_MARGIN + 62, y, text, ha="left", va="center", fontsize=8.5, color=INK)
        y -= 16.0
