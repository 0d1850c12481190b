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
WIDE_NOISE_FAMILIES = (
    "signed-lognormal",
    "gamma-2",
    "bimodal-mixture",
    "arcsine",
    "chi-square-1",
    "gumbel",
    "skewed-t5",
)
"""Non-Gaussian families the package's own tests do not draw from, so the validity study does not
only confirm the generator the code was tuned on (each centred and scaled to unit variance):
random sign times log-normal(0, 0.75); gamma with shape 2; an equal mixture of N(-1, 0.5^2) and
N(1, 0.5^2); beta(0.5, 0.5) (the arcsine law); chi-square with 1 df; Gumbel; noncentral Student-t
with 5 df and noncentrality 1 (right-skewed, heavy-tailed)."""
WIDE_PER_VARIABLE = "wide-per-variable"
"""Noise name meaning: draw each variable's family on its own from WIDE_NOISE_FAMILIES."""
SKEWED_FAMILIES = ("exponential", "gamma-2", "chi-square-1", "gumbel", "skewed-t5")
"""Families the hidden cause of ``hidden-cause-non-adjacent`` draws from (one per replicate)."""
SHAPES = ("pair", "chain", "fork", "collider", "random", "several-parents")
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
    "hidden-cause-non-adjacent",
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
    "hidden-cause-non-adjacent": "latent-equivalence-class",
}
"""The rung a careful analyst should reach; `independent` has no edges to orient."""

PATH_FREE_KINDS = ("hidden-cause-non-adjacent",)
"""Kinds that need two variables with no directed path between them (a chain has none)."""


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
    families: tuple[str, ...] = ()
    """Noise family of each observed column (column order)."""
    latent_noise: str | None = None
    """Noise family of the hidden common cause, when there is one."""

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
    # The wider families; moments are exact (stated beside each), not estimated from the draw.
    if family == "signed-lognormal":
        sigma = 0.75  # E[X^2] = exp(2 sigma^2); kurtosis exp(4 sigma^2), about 9.5
        return rng.choice([-1.0, 1.0], size=n) * rng.lognormal(0.0, sigma, n) / np.exp(sigma ** 2)
    if family == "gamma-2":
        return (rng.gamma(2.0, 1.0, n) - 2.0) / np.sqrt(2.0)
    if family == "bimodal-mixture":
        # modes at -1 and 1, each with spread 0.5: variance 1 + 0.25
        return (rng.choice([-1.0, 1.0], size=n) + 0.5 * rng.normal(size=n)) / np.sqrt(1.25)
    if family == "arcsine":
        return (rng.beta(0.5, 0.5, n) - 0.5) / np.sqrt(0.125)  # beta(a, b) variance ab / ((a+b)^2 (a+b+1))
    if family == "chi-square-1":
        return (rng.chisquare(1.0, n) - 1.0) / np.sqrt(2.0)
    if family == "gumbel":
        return (rng.gumbel(0.0, 1.0, n) - np.euler_gamma) / (np.pi / np.sqrt(6.0))
    if family == "skewed-t5":
        from scipy import stats

        law = stats.nct(5, 1.0)
        return (law.rvs(size=n, random_state=rng) - law.mean()) / law.std()
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
    elif shape == "several-parents":
        # one exogenous variable (two from 8 variables on), then one to four parents per child, most with two
        # or more: what process tables look like, and where a pair's marginal regression leaves parents out
        roots = 1 if p < 8 else 2
        for j in range(roots, p):
            count = min(j, int(rng.choice([1, 2, 3, 4], p=[0.15, 0.35, 0.3, 0.2])))
            dag[rng.choice(j, size=count, replace=False), j] = 1
    else:
        raise ValueError(f"unknown shape {shape!r}")
    return dag


def _wide_weights(rng: np.random.Generator, p: int) -> np.ndarray:
    """Edge weights on standardised parents: magnitude in [0.3, 1.5], one in five weak (in [0.1, 0.3]),
    random sign."""
    weak = rng.uniform(size=(p, p)) < 0.2
    magnitude = np.where(weak, rng.uniform(0.1, 0.3, size=(p, p)), rng.uniform(0.3, 1.5, size=(p, p)))
    return magnitude * rng.choice([-1.0, 1.0], size=(p, p))


def reachable(dag: np.ndarray) -> np.ndarray:
    """reachable[i, j] = True when a directed path of one or more edges leads from i to j."""
    step = np.asarray(dag, dtype=bool)
    closure = step.copy()
    for _ in range(step.shape[0]):
        grown = closure | ((closure.astype(np.int64) @ step.astype(np.int64)) > 0)
        if np.array_equal(grown, closure):
            break
        closure = grown
    return closure


def path_free_pairs(dag: np.ndarray) -> list[tuple[int, int]]:
    """Pairs (i < j) with no directed path between them either way (so not adjacent either)."""
    linked = reachable(dag)
    p = linked.shape[0]
    return [(i, j) for i in range(p) for j in range(i + 1, p) if not linked[i, j] and not linked[j, i]]


def shape_allows(kind: str, shape: str) -> bool:
    """False when the kind cannot be drawn on the shape (a chain has no two variables without a path)."""
    return not (kind in PATH_FREE_KINDS and shape == "chain")


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
    if not shape_allows(kind, shape):
        raise ValueError(f"kind {kind!r} needs two variables without a directed path; shape {shape!r} has none")
    rng = np.random.default_rng(seed)
    p = 2 if shape == "pair" else p
    dag = dag_of_shape(shape, p, rng, density=density)
    if kind == "hidden-cause-non-adjacent" and shape != "pair":
        for _ in range(200):  # a random DAG may order every pair; draw again (new kind: old seeds unaffected)
            if path_free_pairs(dag):
                break
            dag = dag_of_shape(shape, p, rng, density=density)
        else:
            raise ValueError(f"no DAG of shape {shape!r} with {p} variables has two variables without a directed path")
    if kind == "independent" or (kind == "hidden-cause-non-adjacent" and shape == "pair"):
        dag = np.zeros_like(dag)  # the pair: two variables driven by the hidden cause alone
    if shape == "several-parents":
        weights = _wide_weights(rng, p) * dag
    else:
        weights = rng.uniform(0.5, 1.0, size=(p, p)) * rng.choice([-1.0, 1.0], size=(p, p)) * dag
    families = [noise] * p
    if noise == WIDE_PER_VARIABLE:
        families = [str(f) for f in rng.choice(WIDE_NOISE_FAMILIES, size=p)]
    if kind == "gaussian":
        families = ["gaussian"] * p
    elif kind == "mixed":
        families = ["gaussian", "gaussian"] + families[2:]
    elif kind == "nonlinear":
        families = ["gaussian"] * p
    hidden: list[tuple[int, int]] = []
    latent = None
    latent_family = None
    loadings: dict[int, float] = {}
    if kind == "hidden-confounder":
        latent = _noise(rng, noise, n)
        latent_family = noise
        # the confounded pair: the two earliest variables that are not already adjacent
        pairs = [(i, j) for i in range(p) for j in range(i + 1, p) if not dag[i, j]]
        i, j = pairs[0] if pairs else (0, 1)
        hidden.append((i, j))
        loadings = {i: 1.2, j: 1.2}
    elif kind == "hidden-cause-non-adjacent":
        latent_family = SKEWED_FAMILIES[int(rng.integers(len(SKEWED_FAMILIES)))]
        latent = _noise(rng, latent_family, n)
        pairs = path_free_pairs(dag)
        i, j = pairs[int(rng.integers(len(pairs)))]
        hidden.append((i, j))
        loadings = {k: float(rng.uniform(0.8, 1.5) * rng.choice([-1.0, 1.0])) for k in (i, j)}
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
        if latent is not None and j in loadings:
            X[:, j] += loadings[j] * latent
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
                    expected_level=EXPECTED_LEVEL[kind], hidden=hidden_perm,
                    families=tuple(families[k] for k in perm), latent_noise=latent_family)


def to_frame(scenario: Scenario):
    import pandas as pd

    return pd.DataFrame(scenario.data, columns=list(scenario.names))
