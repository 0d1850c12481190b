"""Speed and memory of preflight, side by side with the same battery written by hand.

    python benchmarks/bench.py            # full run (about 15 minutes on 2 cores)
    python benchmarks/bench.py --quick    # skips 10^6 rows, 100 variables and 50 x 10^5
    python benchmarks/bench.py --startup-only   # only section 5 (start-up), about 30 s

Writes the section between <!-- bench:start --> and <!-- bench:end --> of
benchmarks/RESULTS.md and leaves every other section as it is.  Each timed
preflight run is a fresh interpreter (``python -c``), so wall time includes
imports and peak RSS is that process's own (children included).

The targets (issue "Speed and scale") are checked here, never in unit tests:
at least 20 times faster than the hand-written battery at 10 variables and
5,000 rows; 50 variables x 100,000 rows within 120 s and 2 GiB; log-log
slope of time against n at most 1.15 between 10^4 and 10^6 rows; and
(issue "In the notebook and in the next step") ``preflight --help`` within
0.3 s and a whole ``preflight check`` of a 2-column 2,000-row table within
1 s of wall time on a quiet 2-core machine.
"""
from __future__ import annotations

import argparse
import datetime as dt
import json
import os
import platform
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
RESULTS = HERE / "RESULTS.md"
START, END = "<!-- bench:start -->", "<!-- bench:end -->"
ALPHA = 0.05
SEED = 1
REPEATS = 3
"""preflight runs per side-by-side row; the median is reported (the hand battery runs once: it takes seconds)."""

# One timed check in a fresh interpreter; prints wall seconds and the level as JSON.
CHILD = r"""
import json, resource, sys, time
t0 = time.perf_counter()
import numpy as np, pandas as pd
import preflight
from preflight import scenarios
p, n, jobs = int(sys.argv[1]), int(sys.argv[2]), int(sys.argv[3])
s = scenarios.simulate("linear-non-gaussian", "random", p=p, n=n, seed=1, density=min(0.4, 4.0 / (p - 1)))
frame = pd.DataFrame(s.data, columns=list(s.names))
t1 = time.perf_counter()
report = preflight.check(frame, seed=1, jobs=jobs, keep_samples=False)
t2 = time.perf_counter()
# ru_maxrss is in KiB on Linux; forked workers share the parent's pages, so the
# main process's peak is the footprint and the largest worker's is reported beside it.
own = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
workers = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024
print(json.dumps({"check_s": t2 - t1, "total_s": t2 - t0, "level": report.level, "edges": int(s.dag.sum()),
                  "rss_mib": own, "worker_rss_mib": workers}))
"""


# --------------------------------------------------------------------------- the hand-written battery


def _hand_hsic_p(x: np.ndarray, y: np.ndarray, max_n: int = 2000) -> float:
    """Exact HSIC with Gaussian kernels, median heuristic and the gamma null (Gretton et al. 2008).

    Written the way a careful analyst would: O(n^2) Gram matrices, centred
    by row and column means (not by multiplying with H).
    """
    from scipy import stats

    x, y = x[:max_n], y[:max_n]
    x = (x - x.mean()) / x.std()
    y = (y - y.mean()) / y.std()
    n = len(x)

    def centred_gram(v):
        d = np.abs(v[:, None] - v[None, :])
        sigma = np.median(d[np.triu_indices(n, 1)])
        k = np.exp(-d * d / (2 * sigma * sigma))
        mu = (k.sum() - n) / (n * (n - 1))
        m = k.mean(axis=0)
        return k - m[None, :] - m[:, None] + m.mean(), mu

    kc, mu_x = centred_gram(x)
    lc, mu_y = centred_gram(y)
    stat = float((kc * lc).sum()) / n
    mean = (1 + mu_x * mu_y - mu_x - mu_y) / n
    b = (kc * lc) ** 2
    var = 2 * (n - 4) * (n - 5) / (n * (n - 1) * (n - 2) * (n - 3)) * (b.sum() - np.trace(b)) / (n * (n - 1))
    return float(stats.gamma.sf(stat, mean ** 2 / var, scale=n * var / mean))


def _holm(p) -> np.ndarray:
    from statsmodels.stats.multitest import multipletests

    return multipletests(np.asarray(p, float), method="holm")[1]


def _hand_spline(x: np.ndarray, y: np.ndarray):
    """statsmodels OLS of y on a cubic B-spline of x with 8 df built by patsy (intercept included)."""
    import patsy
    import statsmodels.api as sm

    return sm.OLS(y, np.asarray(patsy.dmatrix("bs(x, df=8, degree=3)", {"x": x}, return_type="matrix"))).fit()


def _hand_pair(x: np.ndarray, y: np.ndarray) -> dict:
    """OLS of y on x and every test on its residual: the p-values, and the statistics that effect sizes come from."""
    import statsmodels.api as sm
    from scipy import stats
    from statsmodels.stats.diagnostic import het_breuschpagan, het_white, linear_reset

    exog = sm.add_constant(x)
    fit = sm.OLS(y, exog).fit()
    r = fit.resid
    normal = [stats.shapiro(r[:5000]).pvalue, stats.normaltest(r).pvalue, stats.jarque_bera(r).pvalue,
              stats.anderson(r, method="interpolate").pvalue]
    reset = linear_reset(fit, power=3, use_f=True)
    spline_fit = _hand_spline(x, y)
    spline_f, spline_p, spline_q = spline_fit.compare_f_test(fit)
    bp = het_breuschpagan(r, exog, robust=True)
    white = het_white(r, exog)
    return {"normal": normal, "linear": [reset.pvalue, spline_p], "variance": [bp[1], white[1]],
            "hsic": _hand_hsic_p(x, r), "resid": r, "response": y,
            "f": [(reset.fvalue, reset.df_num, reset.df_denom), (spline_f, spline_q, spline_fit.df_resid)],
            "lm": [bp[0], white[0]]}


def _hand_adjust(raw: dict, keys: list) -> dict:
    """Holm within each family over the ordered pairs ``keys``: (ordered pair, family) -> adjusted p-values."""
    adjusted = {}
    for family in ("normal", "linear", "variance"):
        flat = [(k, m) for k in keys for m in range(len(raw[k][family]))]
        values = _holm([raw[k][family][m] for k, m in flat])
        for (k, _m), value in zip(flat, values):
            adjusted.setdefault((k, family), []).append(value)
    return adjusted


def _hand_favoured(raw: dict, pair: tuple[str, str]) -> tuple[str, str]:
    """(regressor, response) whose residual looks more independent (larger HSIC p-value; ties go to column order)."""
    fwd, rev = pair, pair[::-1]
    return fwd if raw[fwd]["hsic"] >= raw[rev]["hsic"] else rev


def _hand_flags(raw: dict, adjusted: dict, pairs: list, favoured: dict | None = None, floors: tuple | None = None,
                spread_when_nonlinear: bool = False) -> dict:
    """The three flags of each unordered pair from adjusted p-values.

    The hand battery's own rule is the default.  The keywords each swap in
    one ingredient of preflight's judgement, so that a disagreement can be
    traced to it: ``favoured`` (pair -> ordered pair) judges a given
    direction; ``floors`` = (settings of a preflight report, effect sizes
    from :func:`_hand_effects`) counts a rejection only where preflight's
    effect-size floor is met; ``spread_when_nonlinear`` judges spread even
    where the pair is judged nonlinear.
    """
    def departs(key, family, floor_key):
        p = adjusted[(key, family)]
        if floors is None:
            return min(p) < ALPHA
        settings, effects = floors
        return any(v < ALPHA and e >= settings[floor_key] for v, e in zip(p, effects[key][family]))

    def nongaussian(key):
        rejected = min(adjusted[(key, "normal")]) < ALPHA
        if floors is None:
            return rejected
        settings, effects = floors
        skew, kurtosis = effects[key]["shape"]
        return rejected and (abs(skew) >= settings["nongaussian_min_abs_skew"]
                             or abs(kurtosis) >= settings["nongaussian_min_abs_excess_kurtosis"])

    flags = {}
    for pair in pairs:
        key = (favoured or {}).get(pair) or _hand_favoured(raw, pair)
        nonlinear = departs(key, "linear", "nonlinear_min_r2_gain")
        hetero = (spread_when_nonlinear or not nonlinear) and departs(key, "variance", "heteroscedastic_min_r2")
        flags[pair] = {"gaussian-noise": not (nongaussian(pair) or nongaussian(pair[::-1])),
                       "nonlinear": nonlinear, "heteroscedastic": hetero}
    return flags


def hand_battery(data: np.ndarray, names: list[str], keep: dict | None = None) -> dict:
    """Every ordered pair: OLS of y on x with statsmodels, then the usual tests on its residual.

    Shapiro-Wilk (first 5,000 rows), D'Agostino-Pearson, Jarque-Bera and
    Anderson-Darling (scipy); RESET (powers 2, 3), Koenker's Breusch-Pagan
    and White (statsmodels); a cubic B-spline with 8 df built by patsy
    against the line (nested F-test); exact HSIC of regressor and residual
    on the first 2,000 rows.  Holm within each family across the table.
    Flags per unordered pair, judged in the direction whose residual looks
    more independent (larger HSIC p-value), as preflight does when it cannot
    orient the pair.  ``keep``, if given, receives the standardised data, the
    raw results and the adjusted p-values, for the comparison afterwards.
    """
    # statsmodels' RESET appends raw powers of the fitted values.  In plant
    # units (a temperature near 1,180 with a spread of 25) they are collinear
    # with the constant to working precision: on the kiln demo 13 of the 56
    # ordered pairs raised a rank warning, 9 of them tested one constraint
    # instead of two, and "glaze_gloss on shrinkage" gave p = 4e-247 where
    # standardised columns give 0.06.  Every test here is unchanged by a
    # change of units in exact arithmetic, so the columns are put on one
    # scale first.
    data = (data - data.mean(axis=0)) / data.std(axis=0)
    raw = {}
    for i, x_name in enumerate(names):
        for j, y_name in enumerate(names):
            if i != j:
                raw[(x_name, y_name)] = _hand_pair(data[:, i], data[:, j])
    adjusted = _hand_adjust(raw, list(raw))
    pairs = [(names[a], names[b]) for a in range(len(names)) for b in range(a + 1, len(names))]
    flags = _hand_flags(raw, adjusted, pairs)
    if keep is not None:
        keep.update(data=data, raw=raw, adjusted=adjusted)
    return flags


def _hand_effects(raw: dict) -> dict:
    """Effect sizes of the hand battery's tests in the terms preflight's floors use, from statistics it computed.

    Skewness and excess kurtosis of the residual (moment estimates, as
    preflight's Jarque-Bera and D'Agostino-Pearson report them); R-squared
    gain of RESET and of the spline over the line, from the nested F
    (RSS_line / RSS_larger = 1 + F q / df); auxiliary R-squared of
    Breusch-Pagan and White (LM / n).
    """
    from scipy import stats

    effects = {}
    for (x_name, y_name), entry in raw.items():
        r, y = entry["resid"], entry["response"]
        rss, tss = float(r @ r), float(((y - y.mean()) ** 2).sum())
        gains = [rss * (1 - 1 / (1 + float(np.squeeze(f)) * q / df)) / tss for f, q, df in entry["f"]]
        effects[(x_name, y_name)] = {"shape": (float(stats.skew(r)), float(stats.kurtosis(r))), "linear": gains,
                                     "variance": [lm / r.shape[0] for lm in entry["lm"]]}
    return effects


REASONS = {
    "conditioned": ("preflight partialled out a conditioning set; the hand battery run on the same partial "
                    "residuals agrees"),
    "direction": "the hand battery agrees when judged in the direction preflight favoured",
    "floor": "the hand battery agrees once preflight's effect-size floors are applied to its p-values",
    "spline-spread": ("the hand battery skips spread for a nonlinear pair; judged on its spline residual, "
                      "as preflight does, it agrees"),
    "holm": "the hand battery agrees when Holm runs over the adjacent pairs only, as preflight's families do",
    "other": "no single one of the above makes the hand battery agree",
}
"""Reason codes of a disagreeing (pair, flag) cell; a cell lists every ingredient that alone makes the two agree."""


def _preflight_favoured(pair: dict) -> tuple[str, str] | None:
    """(regressor, response) preflight judged the pair in: only there do its linearity checks carry a verdict."""
    x, y = pair["x"], pair["y"]
    for key, label in (((x, y), f"{y} on {x}"), ((y, x), f"{x} on {y}")):
        if any(c["name"] == f"ramsey reset ({label})" and c["passed"] is not None for c in pair["checks"]):
            return key
    return None


def _hand_spline_spread(entry: dict, x: np.ndarray, y: np.ndarray) -> dict:
    """``entry`` with its spread tests (Breusch-Pagan, White) run on the residual of the spline of y on x."""
    import statsmodels.api as sm
    from statsmodels.stats.diagnostic import het_breuschpagan, het_white

    residual, exog = _hand_spline(x, y).resid, sm.add_constant(x)
    bp, white = het_breuschpagan(residual, exog, robust=True), het_white(residual, exog)
    return dict(entry, variance=[bp[1], white[1]], lm=[bp[0], white[0]])


def _partialled(column: dict, conditioning: list[str], *variables: np.ndarray) -> list[np.ndarray]:
    """Least-squares residuals of each variable on a constant and the conditioning columns."""
    Z = np.column_stack([np.ones(len(variables[0]))] + [column[c] for c in conditioning])
    return [v - Z @ np.linalg.lstsq(Z, v, rcond=None)[0] for v in variables]


def _reasons(pair: dict, flag: str, kept: dict, names: list[str], settings: dict, effects: dict,
             adjacent_keys: list) -> list[str]:
    """Every preflight ingredient that, swapped into the hand battery alone, makes it agree on this cell."""
    data, raw, adjusted = kept["data"], kept["raw"], kept["adjusted"]
    key = (pair["x"], pair["y"])
    target = flag in pair["flags"]
    column = {name: data[:, k] for k, name in enumerate(names)}
    found = []
    if pair["conditioning"]:
        x, y = _partialled(column, pair["conditioning"], column[key[0]], column[key[1]])
        given = {**raw, key: _hand_pair(x, y), key[::-1]: _hand_pair(y, x)}
        if _hand_flags(given, _hand_adjust(given, list(given)), [key])[key][flag] == target:
            found.append("conditioned")
    favoured = _preflight_favoured(pair)
    if favoured is not None and _hand_flags(raw, adjusted, [key], favoured={key: favoured})[key][flag] == target:
        found.append("direction")
    if _hand_flags(raw, adjusted, [key], floors=(settings, effects))[key][flag] == target:
        found.append("floor")
    own = _hand_favoured(raw, key)
    if flag == "heteroscedastic" and _hand_flags(raw, adjusted, [key])[key]["nonlinear"]:
        swapped = {**raw, own: _hand_spline_spread(raw[own], column[own[0]], column[own[1]])}
        if _hand_flags(swapped, _hand_adjust(swapped, list(swapped)), [key],
                       spread_when_nonlinear=True)[key][flag] == target:
            found.append("spline-spread")
    if _hand_flags(raw, _hand_adjust(raw, adjacent_keys), [key])[key][flag] == target:
        found.append("holm")
    return found or ["other"]


def _hand_with_every_choice(report, kept: dict, names: list[str], settings: dict) -> dict:
    """The hand battery's flags with every documented choice of preflight's judgement made at once.

    On preflight's adjacent pairs only: the same conditioning set partialled
    out (least squares on the set), Holm over these ordered pairs, each pair
    judged in the direction preflight favoured, the effect-size floors, and
    spread judged on the spline residual where the pair is nonlinear.  The
    tests themselves stay the hand battery's own (statsmodels, scipy, patsy).
    """
    data = kept["data"]
    column = {name: data[:, k] for k, name in enumerate(names)}
    adjacent = [pair for pair in report.pairs if pair["adjacent"]]
    given, favoured, regressions = {}, {}, {}
    for pair in adjacent:
        key = (pair["x"], pair["y"])
        x, y = column[key[0]], column[key[1]]
        if pair["conditioning"]:
            x, y = _partialled(column, pair["conditioning"], x, y)
            given[key], given[key[::-1]] = _hand_pair(x, y), _hand_pair(y, x)
        else:
            given[key], given[key[::-1]] = kept["raw"][key], kept["raw"][key[::-1]]
        favoured[key] = _preflight_favoured(pair) or _hand_favoured(given, key)
        regressions[favoured[key]] = (x, y) if favoured[key] == key else (y, x)
    keys, pairs = list(given), list(favoured)
    first = _hand_flags(given, _hand_adjust(given, keys), pairs, favoured=favoured,
                        floors=(settings, _hand_effects(given)))
    for key in pairs:
        if first[key]["nonlinear"]:
            given[favoured[key]] = _hand_spline_spread(given[favoured[key]], *regressions[favoured[key]])
    return _hand_flags(given, _hand_adjust(given, keys), pairs, favoured=favoured,
                       floors=(settings, _hand_effects(given)), spread_when_nonlinear=True)


def compare(report, hand: dict, kept: dict, names: list[str]) -> dict:
    """Flag agreement on preflight's adjacent pairs, split by conditioning, with every disagreeing cell explained.

    Runs after the clock: the hand battery's effect sizes and the
    counterfactual re-runs it needs are not part of its timed work.
    """
    settings = report.data["settings"]
    effects = _hand_effects(kept["raw"])
    adjacent = [pair for pair in report.pairs if pair["adjacent"]]
    adjacent_keys = [k for pair in adjacent for k in ((pair["x"], pair["y"]), (pair["y"], pair["x"]))]
    floored = _hand_flags(kept["raw"], kept["adjusted"], [(p["x"], p["y"]) for p in adjacent],
                          floors=(settings, effects))
    combined = _hand_with_every_choice(report, kept, names, settings)
    tally = {group: [0, 0] for group in ("all", "unconditioned", "conditioned", "floors", "combined")}
    cells, floor_breaks = [], []
    for pair in adjacent:
        key = (pair["x"], pair["y"])
        group = "conditioned" if pair["conditioning"] else "unconditioned"
        judged = {"hand": _hand_favoured(kept["raw"], key), "preflight": _preflight_favoured(pair)}
        for flag, value in hand[key].items():
            mine = flag in pair["flags"]
            verdicts = (("all", mine == value), (group, mine == value), ("floors", mine == floored[key][flag]),
                        ("combined", mine == combined[key][flag]))
            for name, agrees in verdicts:
                tally[name][0] += agrees
                tally[name][1] += 1
            cell = {"pair": key, "flag": flag, "preflight": mine, "hand": value,
                    "conditioning": list(pair["conditioning"]), "judged": judged}
            if mine != value:
                cells.append(dict(cell, reasons=_reasons(pair, flag, kept, names, settings, effects, adjacent_keys)))
            elif floored[key][flag] != mine:
                # The floors are not tuned to agree: where they turn an agreeing cell into a disagreeing one, say so.
                floor_breaks.append(dict(cell, hand=floored[key][flag]))
    return {"tally": {name: (int(a), int(b)) for name, (a, b) in tally.items()}, "cells": cells,
            "floor_breaks": floor_breaks}


def side_by_side(label: str, data: np.ndarray, names: list[str]) -> dict:
    import pandas as pd

    import preflight

    frame = pd.DataFrame(data, columns=names)
    preflight.check(frame.iloc[:300], seed=SEED, keep_samples=False)  # imports off the clock
    times = []
    for _ in range(REPEATS):
        t = time.perf_counter()
        report = preflight.check(frame, seed=SEED, keep_samples=False)
        times.append(time.perf_counter() - t)
    mine_s = float(np.median(times))
    kept: dict = {}
    t = time.perf_counter()
    hand = hand_battery(data, names, keep=kept)
    hand_s = time.perf_counter() - t
    comparison = compare(report, hand, kept, names)
    agree, total = comparison["tally"]["all"]
    return {"label": label, "p": len(names), "n": data.shape[0], "preflight_s": mine_s, "hand_s": hand_s,
            "agree": agree, "compared": total, **comparison}


def _fraction(pair: tuple[int, int]) -> str:
    return f"{pair[0]}/{pair[1]}" if pair[1] else "-"


def disagreement_lines(results: list[dict]) -> list[str]:
    """The disagreeing cells of each table with their reason codes, for the results section."""
    def judged(key):
        return f"{key[1]} on {key[0]}" if key else "-"

    def row(label, c, reasons):
        return (f"| {label} | {c['pair'][0]} - {c['pair'][1]} | {c['flag']} | {'yes' if c['preflight'] else 'no'} | "
                f"{'yes' if c['hand'] else 'no'} | {', '.join(c['conditioning']) or '-'} | "
                f"{judged(c['judged']['hand'])} / {judged(c['judged']['preflight'])} | {reasons} |")

    header = ["| data | pair | flag | preflight | hand battery | conditioning set "
              "| favoured regression (hand / preflight) | reasons |", "|---|---|---|---|---|---|---|---|"]
    lines = ["Disagreeing (adjacent pair, flag) cells. Each lists every reason code whose ingredient alone, swapped "
             "into the hand battery, makes it agree with preflight: "
             + "; ".join(f"`{code}`: {text}" for code, text in REASONS.items()) + ".", ""] + header
    for r in results:
        rows = [row(r["label"], c, ", ".join(c["reasons"])) for c in r["cells"]]
        lines += rows or [f"| {r['label']} | none | | | | | | |"]
    breaks = [(r["label"], c) for r in results for c in r["floor_breaks"]]
    if breaks:
        lines += ["", "Cells that agree without the floors and disagree with them (the hand battery's column shows its "
                  "verdict with the floors):", ""] + header
        lines += [row(label, c, "-") for label, c in breaks]
    return lines


# --------------------------------------------------------------------------- scaling


def run_child(p: int, n: int, jobs: int, timeout: float) -> dict:
    """One check in a fresh interpreter: check and process seconds, peak RSS of the main and worker processes."""
    start = time.perf_counter()
    try:
        proc = subprocess.run([sys.executable, "-c", CHILD, str(p), str(n), str(jobs)], cwd=ROOT,
                              capture_output=True, text=True, timeout=timeout)
    except subprocess.TimeoutExpired:
        return {"p": p, "n": n, "note": f"timed out after {timeout:.0f} s"}
    wall = time.perf_counter() - start
    if proc.returncode != 0:
        return {"p": p, "n": n, "note": (proc.stderr.strip().splitlines() or ["failed"])[-1][:100]}
    result = json.loads(proc.stdout.strip().splitlines()[-1])
    result.update(p=p, n=n, wall_s=wall, note="")
    return result


def _preflight_command() -> list[str]:
    exe = Path(sys.executable).with_name("preflight")
    return [str(exe)] if exe.exists() else [sys.executable, "-m", "preflight"]


def _median_wall(command: list[str], repeats: int, ok_codes: tuple[int, ...] = (0,)) -> list[tuple[float, float]]:
    """(wall seconds, CPU seconds of the process and its children) of each run."""
    import resource

    times = []
    for _ in range(repeats):
        before = resource.getrusage(resource.RUSAGE_CHILDREN)
        t = time.perf_counter()
        proc = subprocess.run(command, capture_output=True, cwd=ROOT)
        wall = time.perf_counter() - t
        after = resource.getrusage(resource.RUSAGE_CHILDREN)
        times.append((wall, after.ru_utime - before.ru_utime + after.ru_stime - before.ru_stime))
        if proc.returncode not in ok_codes:
            raise SystemExit(f"{' '.join(command)} exited {proc.returncode}: {proc.stderr.decode()[-300:]}")
    return times


def startup(repeats: int = 7) -> dict:
    """Wall time of whole processes, as a user starts them: ``--help`` and a small check.

    Both run as fresh processes (the installed ``preflight`` script when there
    is one), so the figures include interpreter start-up and every import.
    The small check is a 2-column, 2,000-row table, default worker setting.
    """
    import tempfile

    from preflight import scenarios

    command = _preflight_command()
    load = os.getloadavg()[0]
    helps = _median_wall(command + ["--help"], repeats)
    loaded = _modules_loaded_by(["--help"], ("numpy", "scipy", "pandas", "statsmodels", "sklearn", "matplotlib",
                                             "pingouin", "tqdm"))
    s = scenarios.simulate("linear-non-gaussian", "pair", p=2, n=2000, seed=SEED)
    with tempfile.TemporaryDirectory() as folder:
        table = Path(folder) / "pair.csv"
        np.savetxt(table, s.data, delimiter=",", header=",".join(s.names), comments="", fmt="%.17g")
        _median_wall(command + ["check", str(table)], 1, ok_codes=(0, 1))  # warm the file cache
        checks = _median_wall(command + ["check", str(table)], repeats, ok_codes=(0, 1))
        used = _modules_loaded_by(["check", str(table), "--quiet"], _LIBRARIES)
    floors = {"scipy.stats": _median_wall([sys.executable, "-c", "import scipy.stats"], repeats),
              "all": _median_wall([sys.executable, "-c", "import " + ", ".join(used)], repeats)}
    return {"help": helps, "check": checks, "loaded": loaded, "command": " ".join(Path(c).name for c in command),
            "load": (load, os.getloadavg()[0]), "floors": floors, "used": used}


_LIBRARIES = ("numpy", "scipy.special", "scipy.stats", "scipy.interpolate", "scipy.optimize", "pandas", "pyarrow",
              "statsmodels.stats.multitest", "sklearn.decomposition", "pingouin", "matplotlib", "click", "tqdm",
              "networkx")


def _modules_loaded_by(arguments: list[str], candidates: tuple[str, ...]) -> list[str]:
    """The modules of ``candidates`` that ``preflight ARGUMENTS``, run in a fresh interpreter, has imported
    when it ends."""
    probe = (f"import sys; sys.argv = ['preflight', *{arguments!r}]\n"
             "from preflight.cli import main\n"
             "try:\n    main()\nexcept SystemExit:\n    pass\n"
             f"print(','.join(m for m in {candidates!r} if m in sys.modules), file=sys.stderr)")
    res = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, cwd=ROOT)
    last = res.stderr.strip().splitlines()[-1] if res.stderr.strip() else ""
    return [m for m in last.split(",") if m in candidates]


def startup_lines(result: dict, repeats: int) -> list[str]:
    def spread(runs):
        wall = [w for w, _ in runs]
        return (f"**{np.median(wall):.3f} s** (fastest {min(wall):.3f}, slowest {max(wall):.3f}) | "
                f"{np.median([c for _, c in runs]):.3f} s")

    return ["### 5. Start-up", "",
            f"Fresh processes (`{result['command']}`), median of {repeats} runs each, "
            f"run {dt.date.today().isoformat()} on {os.cpu_count()} cores; one-minute load average "
            f"{result['load'][0]:.1f} before and {result['load'][1]:.1f} after (wall times are only "
            "comparable with the target when it is well below the number of cores; CPU time, user plus "
            "system of the process and its threads, moves less with load). "
            "`python benchmarks/bench.py --startup-only` reruns this section alone.", "",
            "| command | target (wall) | wall time | CPU time |", "|---|---|---|---|",
            f"| `preflight --help` | 0.3 s | {spread(result['help'])} |",
            f"| `preflight check` of a 2-column, 2,000-row CSV | 1 s | {spread(result['check'])} |",
            f"| `python -c \"import scipy.stats\"` (Shapiro-Wilk and the reference distributions) | - | "
            f"{spread(result['floors']['scipy.stats'])} |",
            f"| `python -c \"import ...\"` of every library that check imports | - | {spread(result['floors']['all'])} |",
            "",
            f"Libraries that check imports: {', '.join(result['used'])}. Importing them in a fresh process is "
            "a floor under its wall time that no change inside preflight can go below.", "",
            f"Heavy modules loaded by `--help`: {', '.join(result['loaded']) if result['loaded'] else 'none'}."]


def fmt(value, spec=".1f") -> str:
    return "-" if value is None else format(value, spec)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--quick", action="store_true", help="skip 10^6 rows, 100 variables and 50 x 10^5")
    parser.add_argument("--jobs", type=int, default=0, help="worker processes for preflight (0: all cores)")
    parser.add_argument("--timeout", type=float, default=1800.0)
    parser.add_argument("--skip-hand", action="store_true", help="skip the hand-written battery")
    parser.add_argument("--startup-only", action="store_true",
                        help="time only --help and a small check (section 5) and update that section")
    parser.add_argument("--repeats", type=int, default=7, help="runs per start-up figure (median reported)")
    args = parser.parse_args()
    sys.path.insert(0, str(ROOT))
    if args.startup_only:
        update_startup_section(startup_lines(startup(args.repeats), args.repeats))
        return
    import scipy

    from preflight import demo, scenarios

    began = time.perf_counter()
    lines = [START, "", "## Speed and memory (benchmarks/bench.py)", "",
             f"Command: `python benchmarks/bench.py{' --quick' if args.quick else ''}`, run "
             f"{dt.date.today().isoformat()} on {os.cpu_count()} cores, Python {platform.python_version()}, "
             f"numpy {np.__version__}, scipy {scipy.__version__}, {platform.machine()}.", ""]

    lines += ["### 1. Hand-written battery against `preflight.check` (5,000 rows)", "",
              "Same process, imports done beforehand; preflight with its default worker processes, median of "
              f"{REPEATS} runs; the hand battery once. "
              "Flag agreement counts (adjacent pair, flag) cells where the hand battery and preflight "
              "agree on `gaussian-noise`, `nonlinear` and `heteroscedastic`. The hand battery does not "
              "condition on other variables, so agreement is also given separately for the pairs preflight "
              "tested with an empty conditioning set and for those it tested after partialling out a set. "
              "The column `with preflight's floors` applies preflight's documented effect-size floors (`nonlinear_min_r2_gain`, "
              "`heteroscedastic_min_r2`, `nongaussian_min_abs_skew`, `nongaussian_min_abs_excess_kurtosis`) "
              "to the hand battery's own p-values and effect sizes; nothing else in its judgement changes. "
              "The column `with every choice` makes every documented choice of preflight's judgement at once, with the hand "
              "battery's own tests: the same conditioning sets partialled out, Holm over the adjacent pairs, "
              "the direction preflight favoured, the floors, and spread judged on the spline residual where "
              "a pair is nonlinear.", "",
              "| data | variables | preflight s | hand battery s | speed-up (target 20x) | flag agreement "
              "| empty conditioning set | conditioned pairs | with preflight's floors | with every choice |",
              "|---|---|---|---|---|---|---|---|---|---|"]
    if args.skip_hand:
        lines.append("| (skipped with --skip-hand) | | | | | | | | | |")
    else:
        sim = scenarios.simulate("linear-non-gaussian", "random", p=10, n=5000, seed=SEED, density=0.4)
        kiln = demo.kiln_data(5000)
        compared = []
        for label, data, names in (("linear non-Gaussian random DAG", sim.data, list(sim.names)),
                                   ("kiln demo", np.column_stack(list(kiln.values())), list(kiln))):
            r = side_by_side(label, data, names)
            compared.append(r)
            tally = r["tally"]
            lines.append(f"| {label} | {r['p']} | {r['preflight_s']:.2f} | {r['hand_s']:.1f} | "
                         f"{r['hand_s'] / r['preflight_s']:.0f}x | {_fraction(tally['all'])} | "
                         f"{_fraction(tally['unconditioned'])} | {_fraction(tally['conditioned'])} | "
                         f"{_fraction(tally['floors'])} | {_fraction(tally['combined'])} |")
            print(lines[-1], flush=True)
        lines += [""] + disagreement_lines(compared)

    lines += ["", "### 2. Scaling in rows (5 variables)", "",
              "Fresh interpreter per run; `check s` is `preflight.check` alone, `wall s` the whole process.", "",
              "| rows | check s | wall s | peak RSS MiB (main / largest worker) | note |", "|---|---|---|---|---|"]
    sizes = [1_000, 10_000, 100_000] + ([] if args.quick else [1_000_000])
    by_n = []
    for n in sizes:
        r = run_child(5, n, args.jobs, args.timeout)
        by_n.append(r)
        lines.append(f"| {n:,} | {fmt(r.get('check_s'), '.2f')} | {fmt(r.get('wall_s'), '.2f')} | "
                     f"{fmt(r.get('rss_mib'), '.0f')} / {fmt(r.get('worker_rss_mib'), '.0f')} | {r['note']} |")
        print(lines[-1], flush=True)
    timed = {r["n"]: r["check_s"] for r in by_n if r.get("check_s")}
    if 10_000 in timed and max(timed) > 10_000:
        top = max(timed)
        slope = np.log(timed[top] / timed[10_000]) / np.log(top / 10_000)
        lines += ["", f"Log-log slope of check time between 10,000 and {top:,} rows: **{slope:.2f}** (target at most 1.15)."]

    lines += ["", "### 3. Scaling in variables (10,000 rows, about two parents per variable)", "",
              "| variables | edges | check s | wall s | peak RSS MiB (main / largest worker) | note |", "|---|---|---|---|---|---|"]
    for p in (5, 10, 20, 50) + (() if args.quick else (100,)):
        r = run_child(p, 10_000, args.jobs, args.timeout)
        lines.append(f"| {p} | {r.get('edges', '-')} | {fmt(r.get('check_s'), '.2f')} | {fmt(r.get('wall_s'), '.2f')} | "
                     f"{fmt(r.get('rss_mib'), '.0f')} / {fmt(r.get('worker_rss_mib'), '.0f')} | {r['note']} |")
        print(lines[-1], flush=True)

    lines += ["", "### 4. 50 variables x 100,000 rows (targets: 120 s wall, 2 GiB peak RSS)", "",
              "| edges | check s | wall s | peak RSS MiB (main / largest worker) | note |", "|---|---|---|---|---|"]
    if args.quick:
        lines.append("| - | - | - | - | skipped with --quick |")
    else:
        r = run_child(50, 100_000, args.jobs, args.timeout)
        lines.append(f"| {r.get('edges', '-')} | {fmt(r.get('check_s'), '.1f')} | {fmt(r.get('wall_s'), '.1f')} | "
                     f"{fmt(r.get('rss_mib'), '.0f')} / {fmt(r.get('worker_rss_mib'), '.0f')} | {r['note']} |")
        print(lines[-1], flush=True)

    lines += [""] + startup_lines(startup(args.repeats), args.repeats)
    lines += ["", f"Benchmark run time: {(time.perf_counter() - began) / 60:.1f} minutes.", "", END]
    section = "\n".join(lines)
    text = RESULTS.read_text() if RESULTS.exists() else "# Results\n"
    if START in text and END in text:
        head, rest = text.split(START, 1)
        text = head + section + rest.split(END, 1)[1]
    else:
        text = text.rstrip("\n") + "\n\n" + section + "\n"
    RESULTS.write_text(text)
    print(section)


def update_startup_section(lines: list[str]) -> None:
    """Replace section 5 of the benchmark block in RESULTS.md, leaving the rest as the last full run wrote it."""
    text = RESULTS.read_text()
    head, rest = text.split("### 5. Start-up", 1)
    tail = rest[rest.index("Benchmark run time:"):]
    RESULTS.write_text(head + "\n".join(lines) + "\n\n" + tail)
    print("\n".join(lines))


if __name__ == "__main__":
    main()
