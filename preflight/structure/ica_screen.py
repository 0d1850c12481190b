"""The FastICA screen: how many independent components look Gaussian, and whether they are independent."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import cast

import numpy as np

from preflight.checks._validate import as_matrix
from preflight.evidence import rejects
from preflight.policy import Policy
from preflight.results import CheckResult
from preflight.structure.entropy import _logcosh_negentropy, _standardise_columns


@dataclass(frozen=True)
class ComponentScreen:
    """FastICA components of the standardised table and what they look like.

    ``normality`` and ``dependence`` carry ``p_adjusted`` filled in here
    (Holm or BH within each of the two families), because the verdicts
    ``gaussian_like`` and ``dependent_pairs`` depend on them.
    """

    n_components: int
    gaussian_like: tuple[int, ...]
    """Components whose normality tests do not declare a material departure."""
    dependent_pairs: tuple[tuple[int, int], ...]
    """Component pairs whose adjusted HSIC p-value is below alpha with a material effect."""
    normality: tuple[tuple[CheckResult, ...], ...]
    pairs: tuple[tuple[int, int], ...]
    dependence: tuple[CheckResult, ...]
    checks: tuple[CheckResult, ...]
    """Two summary results for the report's global section."""
    converged: bool
    note: str = ""
    stable: bool = True
    """Whether FastICA's seeded starts agree on the components (see fastica_gaussian_components)."""

    @property
    def n_gaussian(self) -> int:
        return len(self.gaussian_like)

    @property
    def dependent(self) -> bool:
        return bool(self.dependent_pairs)



ICA_FIT_MAX_N = 20000
"""Rows FastICA is fitted on (a seeded subsample above); the unmixing is then applied to every row.

Not a policy key: a cost cap, not a threshold.  The unmixing of 20,000 rows
is estimated to within sampling error far below what the component tests
resolve, and every row is then transformed and tested."""

COMPONENT_DEPENDENCE_MAX_N = 5000
"""Rows on which the pairs of ICA components are tested for dependence (seeded subsample above).

Not a policy key: a cost cap (k components make k (k - 1) / 2 pairs).  The
materiality floor scales with the rows tested
(``Policy.ica_dependence_min_effect_rows`` / m), so the verdict does not
hinge on it; ``hsic_max_n`` lowers it further when smaller."""


def _pair_seed(seed: int, a: int, b: int) -> int:
    return int(np.random.SeedSequence([seed & 0xFFFFFFFF, a & 0xFFFFFFFF, b & 0xFFFFFFFF]).generate_state(1)[0])


def _same_components(S: np.ndarray, others: list[np.ndarray], min_correlation: float = 0.95) -> bool:
    """Whether every other unmixing recovers each component of S up to sign, scale and order.

    A component is recovered when some component of the other unmixing has
    |correlation| of at least ``min_correlation`` with it
    (``Policy.ica_stable_min_correlation``).
    """
    Zs = _standardise_columns(S)[0]
    for other in others:
        Zo = _standardise_columns(other)[0]
        matches = np.abs(Zs.T @ Zo / Zs.shape[0]).max(axis=1)
        if matches.min() < min_correlation:
            return False
    return True


def fastica_gaussian_components(
    X,
    policy: Policy | None = None,
    *,
    restarts: int = 8,
    max_iter: int = 1000,
    tol: float = 1e-4) -> ComponentScreen:
    """FastICA cross-check of the noise shape and of hidden common causes.

    The non-constant columns are standardised and unmixed with
    ``sklearn.decomposition.FastICA`` (``whiten="unit-variance"``, as many
    components as the covariance has rank; fitted on at most
    ``ICA_FIT_MAX_N`` rows), from ``restarts`` seeded
    starts (the first with ``random_state=policy.seed``); the unmixing with the
    largest summed log-cosh negentropy is kept.  When the starts disagree
    (some component of the kept unmixing has |correlation| below
    ``policy.ica_stable_min_correlation`` with every component of another start)
    the components are not identified, which happens when the data are
    close to Gaussian; the note says so and no pair is called dependent.

    1. Each component gets the normality battery
       (:func:`preflight.checks.normality.normality_checks`, Shapiro-Wilk on
       at most ``policy.shapiro_max_n`` values); p-values are adjusted with
       ``policy.correction`` across all components' tests together; a component is
       Gaussian-like unless :func:`~preflight.checks.normality.is_nongaussian`
       declares a material departure at ``policy.alpha`` with the shape
       floors ``policy.nongaussian_min_abs_skew`` and
       ``policy.nongaussian_min_abs_excess_kurtosis``.  Null hypothesis per test: the
       component is normal.  ICA cannot unmix more than one Gaussian source
       (Comon 1994), so two or more Gaussian-like components mean the
       linear non-Gaussian model is not identified.
    2. Every pair of components gets HSIC
       (:func:`preflight.checks.independence.hsic` under the policy's
       ``hsic_*`` settings), adjusted within that family.  Null hypothesis: the two components are independent.  A
       hidden common cause adds a source without adding an observed
       variable; the square unmixing then cannot recover independent
       components (Hoyer et al. 2008), so significant dependence points to
       a latent confounder, or to nonlinear mechanisms.  The estimated
       unmixing is only sqrt(n)-consistent, so even for a true linear
       non-Gaussian model the components keep a small real dependence,
       which HSIC detects on skewed sources (normalised HSIC up to about
       25 / n in our simulations, 3-5 variables, n = 1000-5000).  A pair
       therefore counts as dependent only when its adjusted p-value is below
       ``alpha`` AND its normalised HSIC is at least
       ``policy.ica_dependence_min_effect_rows / m``
       with m the rows HSIC runs on: at most ``COMPONENT_DEPENDENCE_MAX_N``
       (a seeded subsample shared by all pairs; k components make
       k (k - 1) / 2 pairs, so this screen would otherwise dominate the run
       time of a wide table).

    ``policy`` defaults to ``Policy()``; ``restarts``, ``max_iter`` and
    ``tol`` control the optimiser only.  Reference: Hyvärinen & Oja (2000)
    for FastICA.
    """
    policy = Policy() if policy is None else policy
    X = as_matrix(X, name="X", min_n=8)
    n = X.shape[0]
    notes: list[str] = []
    Z, rank = _ica_input(X, notes)
    if Z.shape[1] == 0:
        return ComponentScreen(0, (), (), (), (), (), (), True, "; ".join(notes + ["no non-constant column"]))
    S, converged, stable = _unmixed(Z, rank, policy.seed, max(1, int(restarts)), max_iter, tol,
                                    policy.ica_stable_min_correlation, notes)
    k = S.shape[1]
    named, gaussian_like = _component_normality(S, policy)
    pairs = tuple((a, b) for a in range(k) for b in range(a + 1, k))
    dependence = _component_dependence(S, pairs, policy)
    tested = [m for m, r in enumerate(dependence) if r.p_adjusted is not None]
    material = policy.ica_dependence_min_effect_rows / min(n, policy.hsic_max_n, COMPONENT_DEPENDENCE_MAX_N)
    dependent_pairs = [pairs[m] for m in tested if stable and rejects(dependence[m].p_adjusted, policy.alpha)
                       and dependence[m].effect is not None and dependence[m].effect >= material]
    checks = [_gaussian_like_summary(gaussian_like, k, n, policy)]
    if tested:
        checks.append(_dependence_summary(dependence, tested, len(dependent_pairs), material, stable, n, policy))
    return ComponentScreen(
        n_components=k, gaussian_like=gaussian_like, dependent_pairs=tuple(dependent_pairs),
        normality=tuple(named), pairs=pairs, dependence=tuple(dependence), checks=tuple(checks),
        converged=converged, note="; ".join(notes), stable=stable,
    )


def _ica_input(X: np.ndarray, notes: list[str]) -> tuple[np.ndarray, int]:
    """The standardised non-constant columns (C order) and the rank of their covariance; notes what was left out."""
    n = X.shape[0]
    Z, degenerate = _standardise_columns(X)
    Z = Z[:, ~degenerate]
    if degenerate.any():
        notes.append(f"{int(degenerate.sum())} constant column(s) left out")
    if Z.shape[1] == 0:
        return Z, 0
    singular = np.linalg.svd(Z / math.sqrt(n), compute_uv=False)
    rank = int(np.sum(singular > 1e-10 * singular[0]))
    if rank < Z.shape[1]:
        notes.append(f"covariance rank {rank} < {Z.shape[1]} columns: {rank} components")
    # C order whatever the caller's layout: FastICA's result on weakly
    # identified data otherwise depended on the memory layout of the input.
    return np.ascontiguousarray(Z), rank


def _unmixed(Z: np.ndarray, rank: int, seed: int, restarts: int, max_iter: int, tol: float,
             min_correlation: float, notes: list[str]) -> tuple[np.ndarray, bool, bool]:
    """(components of every row, whether the kept start converged, whether the starts agree).

    FastICA from ``restarts`` seeded starts on at most ``ICA_FIT_MAX_N``
    rows; the unmixing with the largest summed log-cosh negentropy is kept
    (ties: the earliest start) and applied to every row.
    """
    import warnings

    from sklearn.decomposition import FastICA
    from sklearn.exceptions import ConvergenceWarning

    n = Z.shape[0]
    Z_fit = Z
    if n > ICA_FIT_MAX_N:
        Z_fit = Z[np.sort(np.random.default_rng(_pair_seed(seed, -1, -1)).choice(n, ICA_FIT_MAX_N, replace=False))]
        notes.append(f"unmixing fitted on a seeded subsample of {ICA_FIT_MAX_N} rows and applied to all {n}")
    runs = []
    for restart in range(restarts):
        state = seed if restart == 0 else _pair_seed(seed, -1 - restart, restart)
        ica = FastICA(n_components=rank, whiten="unit-variance", random_state=state, max_iter=max_iter, tol=tol)
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", ConvergenceWarning)
            S_run = ica.fit_transform(Z_fit)
        runs.append((_logcosh_negentropy(_standardise_columns(S_run)[0]).sum(), restart,
                     not any(issubclass(w.category, ConvergenceWarning) for w in caught), S_run, ica))
    # The most non-Gaussian unmixing is the ICA estimate (ties: earliest run).
    _, best_run, converged, S, best_ica = max(runs, key=lambda r: (r[0], -r[1]))
    if not converged:
        notes.append(f"FastICA did not converge in {max_iter} iterations (seed {seed})")
    stable = _same_components(S, [r[3] for r in runs if r[1] != best_run], min_correlation)
    if Z_fit is not Z:
        S = best_ica.transform(Z)
    if not stable:
        notes.append(f"the unmixing differs between {len(runs)} FastICA starts: components are not identified "
                     "(too little non-Gaussianity), so their dependence is not interpreted")
    return S, converged, stable


def _component_normality(S: np.ndarray, policy: Policy) -> tuple[list[tuple[CheckResult, ...]], tuple[int, ...]]:
    """Each component's normality battery, adjusted as one family, and the components that look Gaussian."""
    from preflight.checks.normality import is_nongaussian, normality_checks
    from preflight.evidence import with_adjusted

    seed, k = policy.seed, S.shape[1]
    normality = [normality_checks(S[:, c], max_n=policy.shapiro_max_n, seed=_pair_seed(seed, c, c))
                 for c in range(k)]
    adjusted = iter(with_adjusted([r for tests in normality for r in tests], policy.correction))
    named = [tuple(next(adjusted).with_name(f"{r.name} (ica component {c + 1})") for r in normality[c])
             for c in range(k)]
    gaussian_like = tuple(c for c in range(k) if not is_nongaussian(
        named[c], policy.alpha, min_abs_skew=policy.nongaussian_min_abs_skew,
        min_abs_excess_kurtosis=policy.nongaussian_min_abs_excess_kurtosis, p_key="p_adjusted"))
    return named, gaussian_like


def _component_dependence(S: np.ndarray, pairs: tuple[tuple[int, int], ...], policy: Policy) -> list[CheckResult]:
    """HSIC of every pair of components on a shared seeded subsample, adjusted as one family."""
    from preflight.checks.independence import hsic_pairs
    from preflight.evidence import with_adjusted

    seed = policy.seed
    dependence = [result.with_name(f"hsic (ica components {a + 1}, {b + 1})") for (a, b), result in zip(
        pairs, hsic_pairs(S, pairs, [_pair_seed(seed, a + 1, b + 1) for a, b in pairs],
                          exact_max_n=policy.hsic_exact_max_n,
                          max_n=min(policy.hsic_max_n, COMPONENT_DEPENDENCE_MAX_N),
                          n_features=policy.hsic_features,
                          permutations=policy.hsic_permutations, seed=_pair_seed(seed, 0, 0)))]
    return with_adjusted(dependence, policy.correction)


def _gaussian_like_summary(gaussian_like: tuple[int, ...], k: int, n: int, policy: Policy) -> CheckResult:
    return CheckResult(
        name="gaussian-like ica components", statistic=float(len(gaussian_like)), p_value=None,
        effect=len(gaussian_like) / k, effect_name="share of components", n=n,
        note=(("no material departure from normality in component(s) " + ", ".join(str(c + 1) for c in gaussian_like)
               if gaussian_like else "every component departs materially from normality")
              + f" ({policy.correction} across {k} components' tests, alpha {policy.alpha:g}); at most one "
              "Gaussian source is identifiable"),
    )


def _dependence_summary(dependence: list[CheckResult], tested: list[int], n_dependent: int, material: float,
                        stable: bool, n: int, policy: Policy) -> CheckResult:
    # tested keeps only finite p-values, each adjusted above.
    raw = [cast(float, dependence[m].p_value) for m in tested]
    adj = [cast(float, dependence[m].p_adjusted) for m in tested]
    effects = [effect for m in tested if (effect := dependence[m].effect) is not None]
    return CheckResult(
        name="ica component dependence (hsic)", statistic=float(n_dependent),
        p_value=float(min(raw)), p_adjusted=float(min(adj)),
        effect=float(max(effects)) if effects else None, effect_name="largest normalised HSIC", n=n,
        note=(f"{n_dependent} of {len(tested)} component pairs dependent ({policy.correction}, "
              f"alpha {policy.alpha:g}, normalised HSIC at least {material:.3g}); "
              "p-values are the smallest over pairs; dependent components suggest a hidden common cause "
              "or nonlinear mechanisms"
              + ("" if stable else "; not interpreted: the FastICA starts disagree on the components")),
    )
