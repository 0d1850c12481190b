"""Simulated data with known ground truth, for the tests and the validity study.

Each scenario draws a DAG of a given shape, a mechanism and noise family,
and returns the data with the truth: the DAG, which edges are identifiable
from the data in principle, and the conclusion a careful analyst should
reach (``expected_level``).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

NOISE_FAMILIES = ("uniform", "laplace", "exponential", "student-t5", "gaussian")
SHAPES = ("pair", "chain", "fork", "collider", "random")
KINDS = (
    "linear-non-gaussian",
    "gaussian",
    "mixed",
    "nonlinear",
    "heteroscedastic",
    "hidden-confounder",
    "discrete",
    "autocorrelated",
    "independent",
)

EXPECTED_LEVEL = {
    "linear-non-gaussian": "linear-non-gaussian",
    "gaussian": "equivalence-class",
    "mixed": "equivalence-class",
    "nonlinear": "additive-noise",
    "heteroscedastic": "equivalence-class",
    "hidden-confounder": "latent-equivalence-class",
    "discrete": "equivalence-class",
    "autocorrelated": "equivalence-class",
    "independent": "linear-non-gaussian",
}
"""The rung a careful analyst should reach; `independent` has no edges to orient."""


@dataclass(frozen=True)
class Scenario:
    kind: str
    shape: str
    noise: str
    n: int
    data: np.ndarray
    names: tuple[str, ...]
    dag: np.ndarray
    """dag[i, j] = 1 when column i causes column j (observed columns only)."""
    identifiable: np.ndarray
    """identifiable[i, j] = True when the edge i -> j can be oriented from these data in principle."""
    expected_level: str
    hidden: tuple[tuple[int, int], ...] = ()
    """Pairs of observed columns that share a hidden common cause."""

    def true_edges(self) -> list[tuple[str, str]]:
        return [(self.names[i], self.names[j]) for i, j in zip(*np.nonzero(self.dag))]


def _noise(rng: np.random.Generator, family: str, n: int) -> np.ndarray:
    """Unit-variance, zero-mean draws of a noise family."""
    if family == "uniform":
        return rng.uniform(-np.sqrt(3), np.sqrt(3), n)
    if family == "laplace":
        return rng.laplace(0, 1 / np.sqrt(2), n)
    if family == "exponential":
        return rng.exponential(1.0, n) - 1.0
    if family == "student-t5":
        return rng.standard_t(5, n) / np.sqrt(5 / 3)
    if family == "gaussian":
        return rng.normal(size=n)
    raise ValueError(f"unknown noise family {family!r}")


def dag_of_shape(shape: str, p: int, rng: np.random.Generator, density: float = 0.4) -> np.ndarray:
    """Adjacency of a DAG whose topological order is 0..p-1."""
    dag = np.zeros((p, p), dtype=np.int8)
    if shape == "pair":
        dag[0, 1] = 1
    elif shape == "chain":
        for i in range(p - 1):
            dag[i, i + 1] = 1
    elif shape == "fork":
        dag[0, 1:] = 1
    elif shape == "collider":
        dag[:-1, p - 1] = 1
    elif shape == "random":
        upper = np.triu(rng.uniform(size=(p, p)) < density, 1)
        for j in range(1, p):  # keep the graph connected enough to be interesting
            if not upper[:j, j].any():
                upper[rng.integers(0, j), j] = True
        dag = upper.astype(np.int8)
    else:
        raise ValueError(f"unknown shape {shape!r}")
    return dag


def _compelled(dag: np.ndarray) -> np.ndarray:
    from preflight.graph import dag_to_cpdag

    cpdag = dag_to_cpdag(dag)
    return (cpdag == 1) & (cpdag.T == 0)


def simulate(kind: str, shape: str = "chain", p: int = 4, n: int = 2000, noise: str = "uniform",
             seed: int = 0, shuffle_columns: bool = True, density: float = 0.4) -> Scenario:
    """Draw one scenario; columns are shuffled so the causal order is not the file order.

    ``density`` is the chance of each forward edge in the ``random`` shape
    (wide tables in the benchmark use a sparser graph, about two parents per
    variable, as real process or cohort tables have).
    """
    if kind not in KINDS:
        raise ValueError(f"unknown kind {kind!r}")
    rng = np.random.default_rng(seed)
    p = 2 if shape == "pair" else p
    dag = dag_of_shape(shape, p, rng, density=density)
    if kind == "independent":
        dag = np.zeros_like(dag)
    weights = rng.uniform(0.5, 1.0, size=(p, p)) * rng.choice([-1.0, 1.0], size=(p, p)) * dag
    families = [noise] * p
    if kind == "gaussian":
        families = ["gaussian"] * p
    elif kind == "mixed":
        families = ["gaussian", "gaussian"] + [noise] * (p - 2)
    elif kind in ("nonlinear", "heteroscedastic"):
        families = ["gaussian" if kind == "nonlinear" else noise] * p
    hidden: list[tuple[int, int]] = []
    latent = None
    if kind == "hidden-confounder":
        latent = _noise(rng, noise, n)
        # the confounded pair: the two earliest variables that are not already adjacent
        pairs = [(i, j) for i in range(p) for j in range(i + 1, p) if not dag[i, j]]
        i, j = pairs[0] if pairs else (0, 1)
        hidden.append((i, j))
    X = np.zeros((n, p))
    for j in range(p):
        e = _noise(rng, families[j], n)
        if kind == "autocorrelated":
            ar = np.empty(n)
            ar[0] = e[0]
            for t in range(1, n):
                ar[t] = 0.8 * ar[t - 1] + np.sqrt(1 - 0.64) * e[t]
            e = ar
        total = np.zeros(n)
        for i in np.flatnonzero(dag[:, j]).tolist():
            parent = X[:, i] / X[:, i].std()
            if kind == "nonlinear":
                total += np.sign(weights[i, j]) * 1.5 * np.tanh(1.5 * parent)
            else:
                total += weights[i, j] * parent
        if kind == "heteroscedastic" and dag[:, j].any():
            spread = 0.3 + np.abs(X[:, np.flatnonzero(dag[:, j])[0]] / X[:, np.flatnonzero(dag[:, j])[0]].std())
            e = e * spread
        scale = 0.6 if kind == "nonlinear" else 1.0
        X[:, j] = total + scale * e
        if latent is not None and any(j in h for h in hidden):
            X[:, j] += 1.2 * latent
    if kind == "discrete":
        X = np.round(X / X.std(axis=0) * 1.2)
    scales = rng.uniform(0.5, 20.0, size=p)
    offsets = rng.uniform(-50, 50, size=p)
    X = X * scales + offsets
    perm = rng.permutation(p) if shuffle_columns else np.arange(p)
    X = X[:, perm]
    dag_perm = dag[np.ix_(perm, perm)]
    # identifiable edges, in the permuted labelling
    compelled = _compelled(dag_perm) if dag_perm.any() else np.zeros_like(dag_perm, dtype=bool)
    if kind in ("linear-non-gaussian", "nonlinear"):
        identifiable = dag_perm.astype(bool)
    elif kind == "mixed":
        gaussian = np.array([families[k] == "gaussian" for k in perm])
        identifiable = dag_perm.astype(bool) & ~(gaussian[:, None] & gaussian[None, :]) | compelled
    else:
        identifiable = compelled & dag_perm.astype(bool)
    inverse = np.argsort(perm)
    hidden_perm = tuple((min(a2, b2), max(a2, b2)) for a2, b2 in
                        ((int(inverse[a]), int(inverse[b])) for a, b in hidden))
    names = tuple(f"v{k}" for k in range(p))
    return Scenario(kind=kind, shape=shape, noise=noise if kind != "gaussian" else "gaussian", n=n, data=X,
                    names=names, dag=dag_perm, identifiable=identifiable,
                    expected_level=EXPECTED_LEVEL[kind], hidden=hidden_perm)


def to_frame(scenario: Scenario):
    import pandas as pd

    return pd.DataFrame(scenario.data, columns=list(scenario.names))
