"""Signs of hidden common causes.

* :func:`noise_dependence` -- HSIC between two noise estimates.  Under a
  linear acyclic model without hidden common causes the noise terms are
  mutually independent; a latent cause of both variables leaves them dependent.
* :func:`spectral_confounding` -- strength of confounding of one regression,
  from how its coefficient vector sits in the eigenbasis of the predictors'
  covariance (after Janzing & Schölkopf 2018).
"""

from __future__ import annotations

import math

import numpy as np

from preflight.checks._validate import as_matrix, as_vector, same_length
from preflight.errors import InputError
from preflight.results import CheckResult

SPECTRAL_MIN_PREDICTORS = 5
"""The estimate rests on concentration of measure in the predictor dimension; below this it is noise.

Not a policy key: it is a condition of the method (Janzing and Schölkopf
2018 argue from high-dimensional predictors), not a trade-off a user
could tune, and the check is descriptive: no flag or rule reads it."""

_BETA_GRID = np.linspace(0.0, 1.0, 201)


def noise_dependence(noise_i, noise_j, **hsic_kwargs) -> CheckResult:
    """HSIC test of independence between two noise estimates.

    Null hypothesis: the two noise terms are independent, as a linear
    acyclic model without hidden common causes implies.  Keyword arguments
    go to :func:`preflight.checks.independence.hsic` (``exact_max_n``,
    ``max_n``, ``n_features``, ``permutations``, ``seed``).  References:
    Gretton et al. (2008) for HSIC; Shimizu et al. (2006) for the
    independence of the noise terms.
    """
    from preflight.checks.independence import hsic

    x = as_vector(noise_i, name="noise_i", min_n=6)
    y = as_vector(noise_j, name="noise_j", min_n=6)
    same_length(x, y, names=("noise_i", "noise_j"))
    return hsic(x, y, **hsic_kwargs).with_name("noise dependence (hsic)")


def _profile_negative_log_likelihood(u2: np.ndarray, causal_var: np.ndarray, confounding_var: np.ndarray,
                                     noise_var: np.ndarray, beta: float) -> float:
    """Minimum over the total length t of the Gaussian negative log-likelihood at this beta."""
    from scipy import optimize

    shape = (1.0 - beta) * causal_var + beta * confounding_var

    def nll(log_t: float) -> float:
        v = math.exp(log_t) * shape + noise_var
        return 0.5 * float(np.sum(np.log(v) + u2 / v))

    scale = max(float(u2.sum()), 1e-300)
    result = optimize.minimize_scalar(nll, bounds=(math.log(scale) - 30.0, math.log(scale) + 5.0),
                                      method="bounded", options={"xatol": 1e-6})
    return float(result.fun)


def spectral_confounding(X, target: int, predictors) -> CheckResult:
    """Confounding strength beta of the regression of ``target`` on ``predictors`` (descriptive).

    Model (Janzing & Schölkopf 2018, "Detecting non-causal artifacts in
    multivariate linear regression models", ICML): with X the predictors and
    a hidden scalar Z, X = M E + c Z and Y = a'X + b Z + noise.  The
    population regression vector is a~ = a + b Sigma^-1 c, and the
    confounding strength is

        beta = ||a~ - a||^2 / (||a||^2 + ||a~ - a||^2)  in [0, 1].

    Their idea: a causal vector a has "generic" orientation relative to the
    eigenvectors of Sigma = Cov(X), so its squared projections spread
    evenly over the spectrum, while the confounding part b Sigma^-1 c
    concentrates on the small eigenvalues.

    Estimator (ours, following that idea; not the paper's kernel-smoothing
    fit, see below).  Predictors are standardised (the spectrum of a
    covariance depends on units), a~ is the OLS vector and (lambda_k,
    phi_k) the eigenpairs of the predictors' sample correlation matrix.  A
    generic vector has, in high dimension, nearly independent Gaussian
    coordinates in any fixed basis, so the projections u_k = <a~, phi_k>
    are modelled as independent N(0, v_k) with

        v_k = t [(1 - beta) / d + beta lambda_k^-2 / sum_l lambda_l^-2] + sigma^2 / (n lambda_k),

    the last term being the exact OLS sampling variance along phi_k (the
    "overfitting" artefact of the paper, removed here rather than counted as
    confounding).  beta is the maximum-likelihood value over a grid of
    step 0.005, with t profiled out.

    Assumptions, stated in the note: linear model, one hidden common cause,
    a and c generic relative to Sigma, the confounder's share of Cov(X)
    small (the confounding template lambda^-2 is its limit; the paper's
    second parameter, for a confounder that dominates Cov(X), is not
    modelled), at least ``SPECTRAL_MIN_PREDICTORS`` predictors.  No null
    hypothesis is tested (p-value None): the estimate is evidence, and is
    noisy for d near 5.  NaN with a note when the regression vector is
    within its sampling noise.
    """
    P, y = _spectral_inputs(X, target, predictors)
    n, d = P.shape
    centred = P - P.mean(axis=0)
    sd = np.sqrt((centred * centred).mean(axis=0))
    if np.any(sd == 0) or np.ptp(y) == 0:
        return _no_spectral_estimate(n, "a constant predictor or target: no spectrum to read")
    Z = centred / sd
    yc = y - y.mean()
    lam, vectors = np.linalg.eigh(Z.T @ Z / n)
    if lam[0] <= 1e-10 * lam[-1]:
        return _no_spectral_estimate(n, "predictors exactly collinear: the spectrum has a zero eigenvalue")
    coef = vectors @ ((vectors.T @ (Z.T @ yc / n)) / lam)
    residual = yc - Z @ coef
    sigma2 = float(residual @ residual) / (n - d - 1)
    u2 = (vectors.T @ coef) ** 2
    noise_var = sigma2 / (n * lam)
    assumptions = ("assumes a linear model with one hidden common cause, regression and confounding vectors in "
                   "generic orientation to the predictors' eigenvectors, the confounder a small part of their "
                   "covariance; standardised predictors; OLS sampling noise modelled, not counted as confounding")
    if float(u2.sum()) <= float(noise_var.sum()):
        return _no_spectral_estimate(n, "the regression vector is within its sampling noise: no estimate; "
                                     + assumptions)
    causal_var = np.full(d, 1.0 / d)
    template = lam**-2.0
    confounding_var = template / template.sum()
    profile = np.array([_profile_negative_log_likelihood(u2, causal_var, confounding_var, noise_var, b)
                        for b in _BETA_GRID])
    beta = float(_BETA_GRID[int(np.argmin(profile))])
    return CheckResult(
        name=_SPECTRAL, statistic=beta, p_value=None, effect=beta, effect_name=_BETA, n=n,
        note=(f"{d} predictors; maximum-likelihood fit of the squared projections on the correlation "
              f"eigenvectors (after Janzing & Schölkopf 2018); {assumptions}"),
    )


_SPECTRAL = "spectral confounding strength"
_BETA = "confounding strength beta"


def _no_spectral_estimate(n: int, why: str) -> CheckResult:
    return CheckResult(name=_SPECTRAL, statistic=math.nan, p_value=None, effect=None, effect_name=_BETA, n=n,
                       note=why)


def _spectral_inputs(X, target, predictors) -> tuple[np.ndarray, np.ndarray]:
    """(predictor columns, target column), after checking the indices and that there are enough of each."""
    X = as_matrix(X, name="X", min_n=3)
    n, p = X.shape
    target = int(target)
    predictors = [int(j) for j in predictors]
    if not 0 <= target < p or any(not 0 <= j < p for j in predictors):
        raise InputError(f"target and predictors must be column indices below {p}")
    if target in predictors or len(set(predictors)) != len(predictors):
        raise InputError("predictors must be distinct and must not include the target")
    d = len(predictors)
    if d < SPECTRAL_MIN_PREDICTORS:
        raise InputError(f"spectral confounding needs at least {SPECTRAL_MIN_PREDICTORS} predictors, got {d}")
    if n <= d + 1:
        raise InputError(f"spectral confounding needs more rows than predictors + 1 ({d + 1}), got {n}")
    return X[:, predictors], X[:, target]
