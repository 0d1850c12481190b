"""Power and false-alarm rate of the random-feature HSIC against the number of frequencies.

The policy key ``hsic_features`` sets how many random frequencies each
variable gets in the linear-time HSIC (Zhang et al. 2018) that runs above
``hsic_exact_max_n`` rows.  Its cost grows with the square of that number,
so it is the main lever on the battery's time at large n; this script shows
what a smaller number costs in power on the dependence the battery exists
to find: the residual of the anti-causal regression, x regressed on
y = b x + e with non-Gaussian x and Gaussian e.  It also shows the
rejection rate on independent pairs (skewed and heavy-tailed).

Every replicate is seeded; the rows of the table are rejection counts at
alpha = 0.05 over ``REPLICATES`` draws, with the exact gamma HSIC on the
first 2,000 rows of each draw as a yardstick.  Run:

    python benchmarks/hsic_features.py            # about 3 minutes
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from preflight.checks.independence import hsic_gamma, hsic_rff  # noqa: E402
from preflight.fit import simple_slope  # noqa: E402

REPLICATES = 200
ALPHA = 0.05
FREQUENCIES = (128, 64, 40, 32, 16)
EXACT_ROWS = 2000

def _reverse_residual(x: np.ndarray, slope: float, rng: np.random.Generator):
    y = slope * x + rng.standard_normal(x.shape[0])
    _, residual = simple_slope(y, x)
    return y, residual


def _laplace(rng, n):
    return rng.laplace(size=n) / np.sqrt(2)


def _uniform(rng, n):
    return rng.uniform(-np.sqrt(3), np.sqrt(3), n)


def _exponential(rng, n):
    return rng.exponential(size=n) - 1


# (label, rows, draw(rng, n) -> (a, b)); b values chosen so that power at 64
# frequencies sits between the floor and the ceiling, where a loss would show.
CASES = [
    ("reverse regression, Laplace cause, b = 0.08", 3000, lambda rng, n: _reverse_residual(_laplace(rng, n), 0.08, rng)),
    ("reverse regression, uniform cause, b = 0.10", 3000, lambda rng, n: _reverse_residual(_uniform(rng, n), 0.10, rng)),
    ("reverse regression, exponential cause, b = 0.05", 3000,
     lambda rng, n: _reverse_residual(_exponential(rng, n), 0.05, rng)),
    ("reverse regression, Laplace cause, b = 0.05", 20000, lambda rng, n: _reverse_residual(_laplace(rng, n), 0.05, rng)),
    ("reverse regression, uniform cause, b = 0.05", 20000, lambda rng, n: _reverse_residual(_uniform(rng, n), 0.05, rng)),
    ("independent: exponential and Student t(5)", 3000, lambda rng, n: (rng.exponential(size=n), rng.standard_t(5, n))),
    ("independent: uniform and exponential", 20000, lambda rng, n: (rng.uniform(size=n), rng.exponential(size=n))),
]


def main() -> None:
    header = "| case | n | " + " | ".join(f"{m} frequencies" for m in FREQUENCIES) + \
        f" | exact, first {EXACT_ROWS:,} rows |"
    print(f"Rejections at alpha = {ALPHA} out of {REPLICATES} seeded draws.\n")
    print(header)
    print("|" + "---|" * (len(FREQUENCIES) + 3))
    for label, n, draw in CASES:
        counts = {m: 0 for m in FREQUENCIES}
        exact = 0
        for r in range(REPLICATES):
            a, b = draw(np.random.default_rng([20261203, r]), n)
            for m in FREQUENCIES:
                counts[m] += hsic_rff(a, b, n_features=m, seed=r).p_value < ALPHA
            exact += hsic_gamma(a[:EXACT_ROWS], b[:EXACT_ROWS]).p_value < ALPHA
        print(f"| {label} | {n:,} | " + " | ".join(str(counts[m]) for m in FREQUENCIES) + f" | {exact} |",
              flush=True)


if __name__ == "__main__":
    main()
