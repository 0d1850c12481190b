"""preflight.check on the random linear non-Gaussian DAGs of the equations probe, edge by edge.

Runs whatever ``preflight`` is on the path (this branch, or a checkout of
main with ``PYTHONPATH``), on the tables of ``equations_probe.py edges``
(same generator, same seeds, ``seed`` = table index, ``jobs=1``), and counts
per true edge: correct, wrong, undetermined, not adjacent, flags; and per
adjacent pair that is not a true edge: oriented (a spurious orientation).

    python benchmarks/equations_wiring.py --n 2000 10000 --tables 8
    python benchmarks/equations_wiring.py --n 2000 --tables 8 --candidate-edges union   # this branch only
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from collections import Counter

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))

from equations_probe import random_dag  # noqa: E402

FLAGS = ("confounding-suspected", "nonlinear", "heteroscedastic", "gaussian-noise")


def _count_equation_judgement(counts: Counter, pair: dict, oriented: bool) -> None:
    """Branch only: was the true edge judged inside its equations, and if left undetermined, why."""
    tests = [c for c in pair["checks"] if c["name"].startswith("hsic in the equation")]
    if not pair["adjacent"]:
        return
    if len(tests) != 2:
        counts["true edge: battery's judgement (an equation departs, or main)"] += 1
        return
    counts["true edge: judged in its equations"] += 1
    if oriented:
        return
    rejected = [c["p_adjusted"] is not None and c["p_adjusted"] < 0.05 for c in tests]
    why = ("dependent both ways" if all(rejected) else "independent both ways" if not any(rejected)
           else "likelihood ratio disagrees, or Gaussian noise")
    counts[f"true edge judged in equations, undetermined: {why}"] += 1


def run(n: int, tables: int, seed: int) -> dict:
    import pandas as pd

    import preflight

    counts: Counter = Counter()
    levels: Counter = Counter()
    started = time.time()
    for t in range(tables):
        rng = np.random.default_rng([seed, n, t])
        X, parents, _ = random_dag(rng, n)
        names = [f"v{c:02d}" for c in range(X.shape[1])]
        report = preflight.check(pd.DataFrame(X, columns=names), seed=t, jobs=1)
        levels[report.data["conclusion"]["level"]] += 1
        true = {frozenset((cause, child)): cause for child, ps in enumerate(parents) for cause in ps}
        for pair in report.data["pairs"]:
            a, b = names.index(pair["x"]), names.index(pair["y"])
            orientation = pair["orientation"]
            cause = a if orientation == "x->y" else b if orientation == "y->x" else None
            key = frozenset((a, b))
            if key in true:
                counts["true edges"] += 1
                verdict = "undetermined" if cause is None else "correct" if cause == true[key] else "wrong"
                counts[verdict] += 1
                counts[f"{verdict} ({pair['basis']})"] += cause is not None
                counts["not adjacent"] += not pair["adjacent"]
                for flag in FLAGS:
                    counts[flag] += flag in pair["flags"]
                _count_equation_judgement(counts, pair, cause is not None)
            elif pair["adjacent"]:
                counts["spurious adjacent"] += 1
                counts["spurious oriented"] += cause is not None
                counts["spurious confounding-suspected"] += "confounding-suspected" in pair["flags"]
        print(f"n={n} table {t + 1}/{tables} p={X.shape[1]} {time.time() - started:.0f}s", file=sys.stderr, flush=True)
    return {"n": n, "tables": tables, "seconds": round(time.time() - started, 1), "counts": dict(counts),
            "levels": dict(levels)}


def markdown(results: list[dict], label: str) -> str:
    lines = ["| code | n | tables | true edges | correct | wrong | undetermined | not adjacent | "
             "confounding-suspected | nonlinear | heteroscedastic | spurious adjacent (oriented) | levels | s |",
             "|---|---|---|---|---|---|---|---|---|---|---|---|---|---|"]
    for r in results:
        c, total = r["counts"], r["counts"]["true edges"]

        def cell(key: str, c: dict = c, total: int = total) -> str:
            return f"{c.get(key, 0)} ({100 * c.get(key, 0) / total:.1f} %)"

        lines.append(f"| {label} | {r['n']} | {r['tables']} | {total} | {cell('correct')} | {cell('wrong')} | "
                     f"{cell('undetermined')} | {cell('not adjacent')} | {cell('confounding-suspected')} | "
                     f"{cell('nonlinear')} | {cell('heteroscedastic')} | {c.get('spurious adjacent', 0)} "
                     f"({c.get('spurious oriented', 0)}) | {r['levels']} | {r['seconds']} |")
    return "\n".join(lines)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--n", type=int, nargs="+", default=[2000])
    parser.add_argument("--tables", type=int, default=8)
    parser.add_argument("--seed", type=int, default=17)
    parser.add_argument("--label", default="this checkout")
    parser.add_argument("--candidate-edges", choices=("skeleton", "union", "trusted-union"), default=None,
                        help="this branch only: candidate edges from the skeleton, or skeleton and parent edges "
                             "(of every equation, or only of the equations that hold up)")
    args = parser.parse_args(argv)
    if args.candidate_edges is not None:
        import preflight.equation_stage as stage

        stage.CANDIDATE_EDGES_FROM_PARENTS = args.candidate_edges != "skeleton"
        stage.ONLY_TRUSTED_PARENT_EDGES = args.candidate_edges == "trusted-union"
    results = [run(n, args.tables, args.seed) for n in args.n]
    print(markdown(results, args.label))
    for r in results:
        print(f"\nn = {r['n']}, every count: {dict(sorted(r['counts'].items()))}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
