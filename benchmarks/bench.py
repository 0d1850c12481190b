"""Speed and memory of preflight, side by side with the same battery written by hand.

    python benchmarks/bench.py            # full run (about 15 minutes on 2 cores)
    python benchmarks/bench.py --quick    # skips 10^6 rows, 100 variables and 50 x 10^5

Writes the section between <!-- bench:start --> and <!-- bench:end --> of
benchmarks/RESULTS.md and leaves every other section as it is.  Each timed
preflight run is a fresh interpreter (``python -c``), so wall time includes
imports and peak RSS is that process's own (children included).

The targets (issue "Speed and scale") are checked here, never in unit tests:
at least 20 times faster than the hand-written battery at 10 variables and
5,000 rows; 50 variables x 100,000 rows within 120 s and 2 GiB; log-log
slope of time against n at most 1.15 between 10^4 and 10^6 rows; and
``preflight --help`` within 0.5 s.
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


def hand_battery(data: np.ndarray, names: list[str]) -> dict:
    """Every ordered pair: OLS of y on x with statsmodels, then the usual tests on its residual.

    Shapiro-Wilk (first 5,000 rows), D'Agostino-Pearson, Jarque-Bera and
    Anderson-Darling (scipy); RESET (powers 2, 3), Koenker's Breusch-Pagan
    and White (statsmodels); a cubic B-spline with 8 df built by patsy
    against the line (nested F-test); exact HSIC of regressor and residual
    on the first 2,000 rows.  Holm within each family across the table.
    Flags per unordered pair, judged in the direction whose residual looks
    more independent (larger HSIC p-value), as preflight does.
    """
    import patsy
    import statsmodels.api as sm
    from scipy import stats
    from statsmodels.stats.diagnostic import het_breuschpagan, het_white, linear_reset

    raw = {}
    for i, x_name in enumerate(names):
        for j, y_name in enumerate(names):
            if i == j:
                continue
            x, y = data[:, i], data[:, j]
            exog = sm.add_constant(x)
            fit = sm.OLS(y, exog).fit()
            r = fit.resid
            normal = [stats.shapiro(r[:5000]).pvalue, stats.normaltest(r).pvalue, stats.jarque_bera(r).pvalue,
                      stats.anderson(r, method="interpolate").pvalue]
            reset = linear_reset(fit, power=3, use_f=True).pvalue
            spline_design = patsy.dmatrix("bs(x, df=8, degree=3)", {"x": x}, return_type="matrix")
            spline_p = sm.OLS(y, np.asarray(spline_design)).fit().compare_f_test(fit)[1]
            bp = het_breuschpagan(r, exog, robust=True)[1]
            white = het_white(r, exog)[1]
            raw[(x_name, y_name)] = {"normal": normal, "linear": [reset, spline_p], "variance": [bp, white],
                                     "hsic": _hand_hsic_p(x, r)}
    keys = list(raw)
    adjusted = {}
    for family in ("normal", "linear", "variance"):
        flat = [(k, m) for k in keys for m in range(len(raw[k][family]))]
        values = _holm([raw[k][family][m] for k, m in flat])
        for (k, m), value in zip(flat, values):
            adjusted.setdefault((k, family), []).append(value)
    flags = {}
    for a in range(len(names)):
        for b in range(a + 1, len(names)):
            fwd, rev = (names[a], names[b]), (names[b], names[a])
            favoured = fwd if raw[fwd]["hsic"] >= raw[rev]["hsic"] else rev
            gaussian = all(min(adjusted[(k, "normal")]) >= ALPHA for k in (fwd, rev))
            nonlinear = min(adjusted[(favoured, "linear")]) < ALPHA
            hetero = not nonlinear and min(adjusted[(favoured, "variance")]) < ALPHA
            flags[(names[a], names[b])] = {"gaussian-noise": gaussian, "nonlinear": nonlinear,
                                           "heteroscedastic": hetero}
    return flags


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
    t = time.perf_counter()
    hand = hand_battery(data, names)
    hand_s = time.perf_counter() - t
    agree = total = 0
    for pair in report.pairs:
        if not pair["adjacent"]:
            continue
        for flag, value in hand[(pair["x"], pair["y"])].items():
            total += 1
            agree += (flag in pair["flags"]) == value
    return {"label": label, "p": len(names), "n": data.shape[0], "preflight_s": mine_s, "hand_s": hand_s,
            "agree": agree, "compared": total}


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


def startup(repeats: int = 7) -> tuple[float, list[str]]:
    exe = Path(sys.executable).with_name("preflight")
    command = [str(exe), "--help"] if exe.exists() else [sys.executable, "-m", "preflight", "--help"]
    times = []
    for _ in range(repeats):
        t = time.perf_counter()
        subprocess.run(command, capture_output=True, cwd=ROOT, check=True)
        times.append(time.perf_counter() - t)
    probe = ("import sys; sys.argv = ['preflight', '--help']\n"
             "from preflight.cli import main\n"
             "try:\n    main()\nexcept SystemExit:\n    pass\n"
             "heavy = ('numpy', 'scipy', 'pandas', 'statsmodels', 'sklearn', 'matplotlib', 'pingouin')\n"
             "print(','.join(m for m in heavy if m in sys.modules), file=sys.stderr)")
    res = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, cwd=ROOT)
    loaded = [m for m in res.stderr.strip().splitlines()[-1].split(",") if m] if res.stderr.strip() else []
    return float(np.median(times)), loaded


def fmt(value, spec=".1f") -> str:
    return "-" if value is None else format(value, spec)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--quick", action="store_true", help="skip 10^6 rows, 100 variables and 50 x 10^5")
    parser.add_argument("--jobs", type=int, default=0, help="worker processes for preflight (0: all cores)")
    parser.add_argument("--timeout", type=float, default=1800.0)
    parser.add_argument("--skip-hand", action="store_true", help="skip the hand-written battery")
    args = parser.parse_args()
    sys.path.insert(0, str(ROOT))
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
              "agree on `gaussian-noise`, `nonlinear` and `heteroscedastic`; the hand battery does not "
              "condition on other variables, so some disagreement is expected where preflight does.", "",
              "| data | variables | preflight s | hand battery s | speed-up (target 20x) | flag agreement |",
              "|---|---|---|---|---|---|"]
    if args.skip_hand:
        lines.append("| (skipped with --skip-hand) | | | | | |")
    else:
        sim = scenarios.simulate("linear-non-gaussian", "random", p=10, n=5000, seed=SEED, density=0.4)
        kiln = demo.kiln_data(5000)
        for label, data, names in (("linear non-Gaussian random DAG", sim.data, list(sim.names)),
                                   ("kiln demo", np.column_stack(list(kiln.values())), list(kiln))):
            r = side_by_side(label, data, names)
            lines.append(f"| {label} | {r['p']} | {r['preflight_s']:.2f} | {r['hand_s']:.1f} | "
                         f"{r['hand_s'] / r['preflight_s']:.0f}x | {r['agree']}/{r['compared']} |")
            print(lines[-1], flush=True)

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

    median, loaded = startup()
    lines += ["", "### 5. Start-up", "",
              f"`preflight --help`: median of 7 runs **{median:.3f} s** (target 0.5 s); heavy modules loaded "
              f"by it: {', '.join(loaded) if loaded else 'none'}.", "",
              f"Benchmark run time: {(time.perf_counter() - began) / 60:.1f} minutes.", "", END]
    section = "\n".join(lines)
    text = RESULTS.read_text() if RESULTS.exists() else "# Results\n"
    if START in text and END in text:
        head, rest = text.split(START, 1)
        text = head + section + rest.split(END, 1)[1]
    else:
        text = text.rstrip("\n") + "\n\n" + section + "\n"
    RESULTS.write_text(text)
    print(section)


if __name__ == "__main__":
    main()
