"""Measurements for issue #17: structural equations as the unit of judgement.

Nothing in the package calls ``preflight.equations`` yet; this script
measures what it would change.  Parts (run one at a time, each a few minutes
on one core; run under ``nice -n 19`` on a shared machine):

  calibration   false alarms of residual independence at alpha = 0.05 under a
                true linear model (non-Gaussian noise, 1-3 correlated
                non-Gaussian parents), by n: no correction, the first-order
                corrected gamma null, the residual bootstrap.
  edges         random linear DAGs (6-12 variables, 1-4 parents per child,
                noise families the project's tests do not use): every true
                edge judged inside its equations, with the true parent sets
                and with parent sets from the DirectLiNGAM order and pruning,
                against what ``preflight.check`` concludes on the same table.
  equation-flags  false linearity and spread flags of the true equations
                (RESET, additive spline, Breusch-Pagan, White) by effect floor.
  likelihood-ratio  two-variable pairs: how often the Hyvärinen-Smith ratio
                points the right way, log-cosh entropies against scipy's
                m-spacing entropy estimator.
  confounding   noise dependence between two equations' residuals for a pair
                with a hidden common cause against clean pairs.
  tail-model    the bootstrap p-value's tail: the residual bootstrap's draws of the
                joint HSIC and of the spread change under a true linear model,
                fitted by a gamma (the package's rule before), a log-normal, a
                Pearson type III, and the package's rule (counted while a draw
                reaches the statistic, a log-normal beyond); rejection rates at small levels, on the
                observed statistics and leaving one draw out.

Usage:
  python benchmarks/equations_probe.py calibration --n 1000 5000 --replicates 200
  python benchmarks/equations_probe.py edges --n 2000 --tables 12
  python benchmarks/equations_probe.py equation-flags --n 2000 10000 50000 --tables 20
  python benchmarks/equations_probe.py confounding --n 2000 10000 --replicates 100
  python benchmarks/equations_probe.py tail-model --n 1000 2000 --replicates 200
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
from collections import Counter

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import numpy as np  # noqa: E402

from preflight.equations import judge_edge, residual_independence  # noqa: E402

ALPHA = 0.05
SKEWED = ("chi-square(3)", "gamma(0.5)", "log-normal(0.6)")
SYMMETRIC = ("arcsine", "two-gaussian mixture", "signed log-normal")
FAMILIES = SKEWED + SYMMETRIC


def noise(rng: np.random.Generator, family: str, n: int) -> np.ndarray:
    """Standardised draws of a family the project's own tests do not use."""
    if family == "arcsine":
        v = rng.beta(0.5, 0.5, n)
    elif family == "chi-square(3)":
        v = rng.chisquare(3, n)
    elif family == "gamma(0.5)":
        v = rng.gamma(0.5, 1.0, n)
    elif family == "log-normal(0.6)":
        v = rng.lognormal(0.0, 0.6, n)
    elif family == "two-gaussian mixture":
        v = np.where(rng.random(n) < 0.5, -1.5, 1.5) + 0.5 * rng.standard_normal(n)
    elif family == "signed log-normal":
        v = rng.choice([-1.0, 1.0], n) * rng.lognormal(0.0, 0.6, n)
    else:
        raise ValueError(family)
    return (v - v.mean()) / v.std()


def weight(rng: np.random.Generator) -> float:
    """Uniform on +-[0.3, 1.5], one in five weak (+-[0.1, 0.3])."""
    low, high = (0.1, 0.3) if rng.random() < 0.2 else (0.3, 1.5)
    return float(rng.choice([-1.0, 1.0]) * rng.uniform(low, high))


# --------------------------------------------------------------------------- calibration


def calibration_table(ns, replicates: int, bootstrap_replicates: int, seed: int,
                      calibrations=("none", "first-order", "bootstrap")) -> list[dict]:
    rows = []
    for n in ns:
        counts: Counter = Counter()
        started = time.time()
        for r in range(replicates):
            rng = np.random.default_rng([seed, n, r])
            k = 1 + r % 3
            family = FAMILIES[r % len(FAMILIES)]
            parents = np.empty((n, k))
            for c in range(k):
                own = noise(rng, FAMILIES[(r + c + 1) % len(FAMILIES)], n)
                parents[:, c] = own + (0.8 * parents[:, c - 1] if c else 0.0)
            y = parents @ np.array([weight(rng) for _ in range(k)]) + noise(rng, family, n)
            kind = "skewed" if family in SKEWED else "symmetric"
            for calibration in calibrations:
                result = residual_independence(y, parents, calibration=calibration, replicates=bootstrap_replicates,
                                               seed=r)
                for group in ("all", kind, f"{k} parents", family):
                    counts[(calibration, "joint", group)] += int(result.p_value < ALPHA)
                counts[(calibration, "first parent", "all")] += int(result.column_p_values[0] < ALPHA)
                if result.tail_p_value is not None:
                    for group in ("all", kind, f"{k} parents", family):
                        counts[("bootstrap, tail resolved", "joint", group)] += int(result.tail_p_value < ALPHA)
                        counts[("bootstrap, tail resolved, at 0.005", "joint", group)] += int(result.tail_p_value < 0.005)
                        counts[("bootstrap at 0.005", "joint", group)] += int(result.p_value < 0.005)
            for group in (kind, f"{k} parents", family):
                counts[("count", group)] += 1
        rows.append({"n": n, "replicates": replicates, "seconds": round(time.time() - started, 1),
                     "counts": {"|".join(key): int(v) for key, v in counts.items()}})
        print(json.dumps(rows[-1]), file=sys.stderr, flush=True)
    return rows


def calibration_markdown(rows: list[dict]) -> str:
    lines = ["| n | replicates | test | none | first-order | bootstrap |", "|---|---|---|---|---|---|"]
    for row in rows:
        c = row["counts"]
        for label, key, total in (("joint, all", "joint|all", row["replicates"]),
                                  ("joint, skewed noise", "joint|skewed", c.get("count|skewed", 0)),
                                  ("joint, symmetric noise", "joint|symmetric", c.get("count|symmetric", 0)),
                                  ("first parent alone", "first parent|all", row["replicates"])):
            cells = [f"{c.get(f'{m}|{key}', 0)}/{total} ({100 * c.get(f'{m}|{key}', 0) / max(total, 1):.1f} %)"
                     for m in ("none", "first-order", "bootstrap")]
            lines.append(f"| {row['n']} | {row['replicates']} | {label} | " + " | ".join(cells) + " |")
    return "\n".join(lines)


# --------------------------------------------------------------------------- random DAGs


def random_dag(rng: np.random.Generator, n: int):
    """(X, parents, families): 6-12 variables in a random order, 1-4 parents per child, columns standardised."""
    p = int(rng.integers(6, 13))
    roots = int(rng.integers(1, 3))
    parents: list[tuple[int, ...]] = []
    for k in range(p):
        if k < roots:
            parents.append(())
            continue
        count = int(rng.integers(1, min(4, k) + 1))
        parents.append(tuple(sorted(int(i) for i in rng.choice(k, count, replace=False))))
    families = [FAMILIES[int(rng.integers(len(FAMILIES)))] for _ in range(p)]
    X = np.empty((n, p))
    for k in range(p):
        X[:, k] = noise(rng, families[k], n)
        for i in parents[k]:
            X[:, k] += weight(rng) * X[:, i]
    X = (X - X.mean(axis=0)) / X.std(axis=0)
    # Hide the generating order from anything that reads column positions.
    perm = rng.permutation(p)
    inverse = np.argsort(perm)
    Xp = X[:, perm]
    parents_p = [tuple(sorted(int(inverse[i]) for i in parents[perm[c]])) for c in range(p)]
    return Xp, parents_p, [families[perm[c]] for c in range(p)]


def estimated_parents(X: np.ndarray, seed: int):
    from preflight import structure

    order = structure.causal_order(X, seed=seed)
    return [tuple(ps) for ps in structure.prune_parents(X, order, alpha=ALPHA)]


def pipeline_orientations(X: np.ndarray, seed: int) -> dict:
    """{(cause, effect) or (a, b, 'undetermined'): ...} from preflight.check on the same table."""
    import pandas as pd

    import preflight

    names = [f"v{c:02d}" for c in range(X.shape[1])]
    report = preflight.check(pd.DataFrame(X, columns=names), seed=seed, jobs=1)
    frame = report.pairs_frame()
    out = {}
    for row in frame.itertuples(index=False):
        a, b = names.index(row.x), names.index(row.y)
        cause = names.index(row.cause) if isinstance(row.cause, str) else None
        out[frozenset((a, b))] = (cause, bool(row.adjacent), str(row.flags))
    return out, report.data["conclusion"]["level"]


def _disagreement(X: np.ndarray, cause: int, child: int, judgement, families) -> dict:
    """What the likelihood ratio saw on an edge whose residual asymmetry it contradicted."""
    from preflight.checks.direction import pairwise_likelihood_ratio
    from preflight.checks.normality import shape
    from preflight.fit import residualize

    Z = X[:, list(judgement.conditioning)] if judgement.conditioning else None
    u_i, u_j = residualize(X[:, cause], Z), residualize(X[:, child], Z)
    cause_shape = shape(u_i)
    return {"cause noise": families[cause], "child noise": families[child],
            "R (entropy)": round(judgement.likelihood_ratio, 5),
            "R (auto: tanh or sub-gaussian score)": round(pairwise_likelihood_ratio(u_i, u_j, density="auto").statistic, 5),
            "cause partial residual excess kurtosis": round(float(cause_shape.excess_kurtosis), 3),
            "cause partial residual skewness": round(float(cause_shape.skewness), 3),
            "conditioning size": len(judgement.conditioning)}


def edges_table(n: int, tables: int, bootstrap_replicates: int, seed: int, with_pipeline: bool,
                only_true: bool = False) -> dict:
    counts: Counter = Counter()
    levels: Counter = Counter()
    disagreements = []
    started = time.time()
    variants = [("true parents, bootstrap", "true", "bootstrap")]
    if not only_true:
        variants += [("true parents, uncalibrated", "true", "none"), ("estimated parents, bootstrap", "est", "bootstrap")]
    for t in range(tables):
        rng = np.random.default_rng([seed, n, t])
        X, parents, families = random_dag(rng, n)
        p = X.shape[1]
        estimated = None if only_true else estimated_parents(X, seed=t)
        pipeline = pipeline_orientations(X, seed=t) if with_pipeline else None
        if pipeline is not None:
            levels[pipeline[1]] += 1
        for child in range(p):
            for cause in parents[child]:
                counts["edges"] += 1
                for label, which, calibration in variants:
                    sets = parents if which == "true" else estimated
                    j = judge_edge(X, cause, child, sets, calibration=calibration,
                                   replicates=bootstrap_replicates, seed=t)
                    verdict = {"i->j": "correct", "j->i": "wrong"}.get(j.orientation, "undetermined")
                    counts[(label, verdict)] += 1
                    counts[(label, j.reason)] += 1
                    if j.reason.startswith("likelihood") and label == "true parents, bootstrap":
                        disagreements.append(_disagreement(X, cause, child, j, families))
                if pipeline is not None:
                    found_cause, adjacent, flags = pipeline[0][frozenset((cause, child))]
                    verdict = ("correct" if found_cause == cause else "wrong" if found_cause == child
                               else "undetermined")
                    counts[("preflight.check", verdict)] += 1
                    counts[("preflight.check", "not adjacent")] += not adjacent
                    counts[("preflight.check", "confounding-suspected")] += "confounding-suspected" in flags
                    counts[("preflight.check", "nonlinear")] += "nonlinear" in flags
                    counts[("preflight.check", "heteroscedastic")] += "heteroscedastic" in flags
        print(f"n={n} table {t + 1}/{tables} p={p} {time.time() - started:.0f}s", file=sys.stderr, flush=True)
    return {"n": n, "tables": tables, "seconds": round(time.time() - started, 1), "disagreements": disagreements,
            "levels": dict(levels), "counts": {"|".join(k) if isinstance(k, tuple) else k: int(v)
                                                for k, v in counts.items()}}


def edges_markdown(result: dict) -> str:
    c, total = result["counts"], result["counts"]["edges"]
    lines = [f"n = {result['n']}: {result['tables']} tables, {total} true edges "
             f"({result['seconds']} s)", "",
             "| method | correct | wrong | undetermined |", "|---|---|---|---|"]
    for label in ("true parents, bootstrap", "true parents, uncalibrated", "estimated parents, bootstrap",
                  "preflight.check"):
        if f"{label}|correct" not in c and f"{label}|undetermined" not in c:
            continue
        cells = [f"{c.get(f'{label}|{v}', 0)} ({100 * c.get(f'{label}|{v}', 0) / total:.1f} %)"
                 for v in ("correct", "wrong", "undetermined")]
        lines.append(f"| {label} | " + " | ".join(cells) + " |")
    reasons = sorted({k.split("|", 1)[1] for k in c if "|" in k and k.split("|", 1)[1].startswith(
        ("residual", "likelihood"))})
    if reasons:
        lines += ["", "| method | " + " | ".join(reasons) + " |", "|---|" + "---|" * len(reasons)]
        for label in ("true parents, bootstrap", "true parents, uncalibrated", "estimated parents, bootstrap"):
            lines.append(f"| {label} | " + " | ".join(str(c.get(f"{label}|{r}", 0)) for r in reasons) + " |")
    if "preflight.check|correct" in c:
        extra = ", ".join(f"{flag} {c.get(f'preflight.check|{flag}', 0)}"
                          for flag in ("not adjacent", "confounding-suspected", "nonlinear", "heteroscedastic"))
        lines += ["", f"preflight.check on the true edges: {extra}; conclusion levels {result['levels']}"]
    return "\n".join(lines)


# --------------------------------------------------------------------------- equation flags

EQUATION_TESTS = ("ramsey reset (equation)", "additive spline f-test (equation)", "breusch-pagan", "white")
FLOORS = (0.0, 0.002, 0.005, 0.01, 0.02)


def equation_flags_table(ns, tables: int, seed: int) -> list[dict]:
    """Rejections at alpha of the linearity and spread checks of every true equation (true parents), by n."""
    from preflight.equations import equation_checks

    rows = []
    for n in ns:
        counts: Counter = Counter()
        started = time.time()
        for t in range(tables):
            X, parents, _ = random_dag(np.random.default_rng([seed, n, t]), n)
            for child, ps in enumerate(parents):
                if not ps:
                    continue
                counts["equations"] += 1
                checks = {r.name: r for r in equation_checks(X, child, ps, seed=t)}
                for name in EQUATION_TESTS:
                    r = checks[name]
                    for floor in FLOORS:
                        counts[f"{name}|{floor}"] += bool(r.p_value is not None and r.p_value < ALPHA
                                                          and r.effect is not None and r.effect >= floor)
        rows.append({"n": n, "tables": tables, "seconds": round(time.time() - started, 1), "counts": dict(counts)})
        print(json.dumps(rows[-1]), file=sys.stderr, flush=True)
    return rows


def equation_flags_markdown(rows: list[dict]) -> str:
    lines = ["| n | equations | check | " + " | ".join(f"effect >= {f}" for f in FLOORS) + " |",
             "|---|---|---|" + "---|" * len(FLOORS)]
    for row in rows:
        c, total = row["counts"], row["counts"]["equations"]
        for name in EQUATION_TESTS:
            cells = [f"{c[f'{name}|{f}']} ({100 * c[f'{name}|{f}'] / total:.1f} %)" for f in FLOORS]
            lines.append(f"| {row['n']} | {total} | {name} | " + " | ".join(cells) + " |")
    return "\n".join(lines)


# --------------------------------------------------------------------------- confounding


def confounding_table(ns, replicates: int, seed: int) -> list[dict]:
    """Residuals of a -> nothing and b with a hidden common cause h; clean pair without h."""
    from preflight.checks.confounding import noise_dependence
    from preflight.fit import ols

    rows = []
    for n in ns:
        counts: Counter = Counter()
        for r in range(replicates):
            rng = np.random.default_rng([seed, n, r])
            f = [FAMILIES[(r + s) % len(FAMILIES)] for s in range(5)]
            parent = noise(rng, f[0], n)
            hidden = noise(rng, f[1], n)
            for label, strength in (("clean", 0.0), ("hidden cause, weight 0.5", 0.5),
                                    ("hidden cause, weight 0.3", 0.3)):
                a = weight(rng) * parent + strength * hidden + noise(rng, f[2], n)
                b = weight(rng) * parent + strength * rng.choice([-1, 1]) * hidden + noise(rng, f[3], n)
                ea = ols(parent, a).residuals
                eb = ols(parent, b).residuals
                result = noise_dependence(ea, eb, seed=r)
                counts[label] += int(result.p_value is not None and result.p_value < ALPHA)
                pearson = abs(np.corrcoef(ea, eb)[0, 1])
                counts[f"{label}, |r| >= 0.05"] += int(pearson >= 0.05)
        rows.append({"n": n, "replicates": replicates, "counts": dict(counts)})
        print(json.dumps(rows[-1]), file=sys.stderr, flush=True)
    return rows


def confounding_markdown(rows: list[dict]) -> str:
    labels = ("clean", "hidden cause, weight 0.3", "hidden cause, weight 0.5")
    lines = ["| n | replicates | " + " | ".join(f"{label}: HSIC p < 0.05 | {label}: abs(r) >= 0.05" for label in labels)
             + " |", "|---|---|" + "---|---|" * len(labels)]
    for row in rows:
        c, total = row["counts"], row["replicates"]
        cells = [f"{c.get(key, 0)}/{total}" for label in labels for key in (label, f"{label}, |r| >= 0.05")]
        lines.append(f"| {row['n']} | {total} | " + " | ".join(cells) + " |")
    return "\n".join(lines)


# --------------------------------------------------------------------------- likelihood ratio


def _spacing_ratio(x: np.ndarray, y: np.ndarray) -> float:
    """The Hyvärinen-Smith ratio (> 0 favours x -> y) with entropies from scipy's m-spacing estimator."""
    from scipy.stats import differential_entropy

    xs, ys = (x - x.mean()) / x.std(), (y - y.mean()) / y.std()
    rho = float(np.mean(xs * ys))
    scale = np.sqrt(1.0 - rho * rho)
    return float(differential_entropy(ys) + differential_entropy((xs - rho * ys) / scale)
                 - differential_entropy(xs) - differential_entropy((ys - rho * xs) / scale))


def likelihood_ratio_table(ns, replicates: int, seed: int) -> str:
    """Share of two-variable pairs x -> y (cause and noise of one family) the ratio orients right, by n."""
    from preflight.checks.direction import pairwise_likelihood_ratio
    from preflight.structure import causal_order

    lines = ["| n | cause and noise family | log-cosh entropy (project) | scipy m-spacing entropy "
             "| structure.causal_order puts x first |", "|---|---|---|---|---|"]
    for n in ns:
        for family in FAMILIES:
            right = Counter()
            for r in range(replicates):
                rng = np.random.default_rng([seed, n, r])
                x = noise(rng, family, n)
                y = weight(rng) * x + noise(rng, family, n)
                right["log-cosh"] += int(pairwise_likelihood_ratio(x, y).statistic > 0)
                right["spacing"] += int(_spacing_ratio(x, y) > 0)
                right["order"] += int(causal_order(np.column_stack([x, y]), seed=r)[0] == 0)
            lines.append(f"| {n} | {family} | {right['log-cosh']}/{replicates} | {right['spacing']}/{replicates} "
                         f"| {right['order']}/{replicates} |")
            print(lines[-1], file=sys.stderr, flush=True)
    return "\n".join(lines)


# --------------------------------------------------------------------------- tail model of the bootstrap p-value

TAIL_LEVELS = (0.05, 0.01, 0.005, 0.002, 0.001)


def _tail_models() -> dict:
    """Tail probability of an observed statistic under a distribution fitted to bootstrap draws (scipy's)."""
    from scipy import stats

    def gamma(t, d):
        mean, var = d.mean(), d.var()
        return stats.gamma.sf(t, mean * mean / var, scale=var / mean)

    def log_normal(t, d):
        logs = np.log(d)
        return stats.lognorm.sf(t, logs.std(), scale=np.exp(logs.mean()))

    def pearson_iii(t, d):
        return stats.pearson3.sf(t, stats.skew(d), loc=d.mean(), scale=d.std())

    from preflight.equations import _tail_p_value

    return {"gamma (before)": gamma, "log-normal": log_normal, "Pearson III": pearson_iii,
            "counted, log-normal beyond (package)": _tail_p_value}


def _bootstrap_draws(y: np.ndarray, design: np.ndarray, tested: np.ndarray, bootstrap_replicates: int,
                     seed: int) -> dict:
    """The observed statistic and the bootstrap draws behind the joint HSIC and the spread change of one test,
    as :func:`residual_independence` passes them to its tail fit (recorded on the way)."""
    from unittest import mock

    import preflight.equations as equations

    seen: list = []
    real = equations._tail_p_value

    def recording(observed, draws):
        seen.append((float(observed), np.array(draws, dtype=float)))
        return real(observed, draws)

    with mock.patch.object(equations, "_tail_p_value", recording):
        residual_independence(y, design, tested=tested, replicates=bootstrap_replicates, seed=seed)
    (joint, joint_draws), (spread, spread_draws) = seen[-2:]
    return {"joint HSIC": (joint, joint_draws), "spread change": (spread, spread_draws)}


def _tail_cases(n: int, replicates: int, bootstrap_replicates: int, seed: int):
    """Null cases from two generators: this script's own (1-3 correlated parents, the families of
    ``FAMILIES``) and the validity study's several-parents tables (every true edge's forward test with the
    true parents, noise families drawn per variable)."""
    from preflight.fit import residualize
    from preflight.scenarios import simulate

    for r in range(replicates):
        rng = np.random.default_rng([seed, n, r])
        if r % 2 == 0:
            k = 1 + r % 3
            parents = np.empty((n, k))
            for c in range(k):
                parents[:, c] = noise(rng, FAMILIES[(r + c + 1) % len(FAMILIES)], n) + (
                    0.8 * parents[:, c - 1] if c else 0.0)
            y = parents @ np.array([weight(rng) for _ in range(k)]) + noise(rng, FAMILIES[r % len(FAMILIES)], n)
            yield "own generator", _bootstrap_draws(y, parents, parents[:, :1], bootstrap_replicates, r)
        else:
            s = simulate("linear-non-gaussian", "several-parents", 5 + r % 7, n, "wide-per-variable",
                         seed=int(rng.integers(2**31)))
            dag = s.dag.astype(bool)
            edges = [(i, j) for i in range(dag.shape[0]) for j in range(dag.shape[0]) if dag[i, j]]
            i, j = edges[int(rng.integers(len(edges)))]
            others = [c for c in np.flatnonzero(dag[:, j]) if c != i]
            partial = residualize(s.data[:, i], s.data[:, others] if others else None)
            yield "validity tables", _bootstrap_draws(s.data[:, j], s.data[:, [i, *others]], partial,
                                                       bootstrap_replicates, r)


def tail_model_table(ns, replicates: int, bootstrap_replicates: int, seed: int) -> list[dict]:
    models = _tail_models()
    rows = []
    for n in ns:
        started = time.time()
        counts: Counter = Counter()
        totals: Counter = Counter()
        rng = np.random.default_rng([seed, n, 99])
        for generator, statistics in _tail_cases(n, replicates, bootstrap_replicates, seed):
            for statistic, (observed, draws) in statistics.items():
                left_out = rng.choice(draws.shape[0], 25, replace=False)
                for model, tail in models.items():
                    p_observed = tail(observed, draws)
                    p_left_out = [tail(draws[q], np.delete(draws, q)) for q in left_out]
                    p_fifty = [tail(draws[q], rng.choice(np.delete(draws, q), 50, replace=False)) for q in left_out]
                    for level in TAIL_LEVELS:
                        for group in (generator, "all"):
                            key = f"{statistic}|{model}|{group}|{level}"
                            counts["observed|" + key] += int(p_observed < level)
                            counts["left out|" + key] += sum(int(p < level) for p in p_left_out)
                            counts["left out, 50 draws|" + key] += sum(int(p < level) for p in p_fifty)
                for group in (generator, "all"):
                    totals[f"observed|{statistic}|{group}"] += 1
                    totals[f"left out|{statistic}|{group}"] += len(left_out)
        rows.append({"n": n, "replicates": replicates, "seconds": round(time.time() - started, 1),
                     "counts": dict(counts), "totals": dict(totals)})
        print(json.dumps({"n": n, "seconds": rows[-1]["seconds"]}), file=sys.stderr, flush=True)
    return rows


def tail_model_markdown(rows: list[dict]) -> str:
    levels = " | ".join(f"< {level}" for level in TAIL_LEVELS)
    lines = [f"| n | statistic | tail model | p-values | {levels} |",
             "|---|---|---|---|" + "---|" * len(TAIL_LEVELS)]
    for row in rows:
        c, t = row["counts"], row["totals"]
        for statistic in ("joint HSIC", "spread change"):
            for model in _tail_models():
                for kind, total_key in (("observed", "observed"), ("left out", "left out"),
                                        ("left out, 50 draws", "left out")):
                    total = t.get(f"{total_key}|{statistic}|all", 0)
                    cells = [f"{100 * c.get(f'{kind}|{statistic}|{model}|all|{level}', 0) / max(total, 1):.2f} %"
                             for level in TAIL_LEVELS]
                    lines.append(f"| {row['n']} | {statistic} | {model} | {kind} ({total}) | "
                                 + " | ".join(cells) + " |")
    return "\n".join(lines)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("part", choices=("calibration", "edges", "equation-flags", "confounding", "likelihood-ratio",
                                                   "tail-model"))
    parser.add_argument("--n", type=int, nargs="+", default=[1000])
    parser.add_argument("--replicates", type=int, default=200)
    parser.add_argument("--bootstrap", type=int, default=200, help="residual-bootstrap replicates per test")
    parser.add_argument("--tables", type=int, default=12)
    parser.add_argument("--seed", type=int, default=17)
    parser.add_argument("--no-pipeline", action="store_true")
    parser.add_argument("--only-true-parents", action="store_true", help="edges part: only true parents, bootstrap")
    parser.add_argument("--calibrations", nargs="+", default=["none", "first-order", "bootstrap"],
                        choices=["none", "first-order", "bootstrap"], help="calibration part: which nulls to run")
    parser.add_argument("--json", help="also write the raw counts here")
    args = parser.parse_args(argv)
    if args.part == "calibration":
        result = calibration_table(args.n, args.replicates, args.bootstrap, args.seed, tuple(args.calibrations))
        print(calibration_markdown(result))
    elif args.part == "edges":
        result = [edges_table(n, args.tables, args.bootstrap, args.seed, not args.no_pipeline, args.only_true_parents)
                  for n in args.n]
        print("\n\n".join(edges_markdown(r) for r in result))
    elif args.part == "equation-flags":
        result = equation_flags_table(args.n, args.tables, args.seed)
        print(equation_flags_markdown(result))
    elif args.part == "tail-model":
        result = tail_model_table(args.n, args.replicates, args.bootstrap, args.seed)
        print(tail_model_markdown(result))
    elif args.part == "likelihood-ratio":
        result = likelihood_ratio_table(args.n, args.replicates, args.seed)
        print(result)
    else:
        result = confounding_table(args.n, args.replicates, args.seed)
        print(confounding_markdown(result))
    if args.json:
        with open(args.json, "w") as fh:
            json.dump(result, fh, indent=1)
    return 0


if __name__ == "__main__":
    sys.exit(main())
