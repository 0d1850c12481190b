"""Signs of hidden common causes.

* :func:`noise_dependence` -- HSIC between two noise estimates.  Under a
  linear acyclic model without hidden common causes the noise terms are
  mutually independent; a latent cause of both variables leaves them dependent.
* :func:`spectral_confounding` -- strength of confounding of one regression,
  from how its coefficient vector sits in the eigenbasis of the predictors'
  covariance (after Janzing & Schölkopf 2018).
* :func:`third_moment_slope_bracket` -- whether Geary's (1942) third-moment
  slope of a pair lies strictly between its two least-squares slopes, as it
  does when both variables measure one skewed hidden cause with noise.
* :func:`cross_skewness` -- whether the two third-order cross-moments
  E[x^2 y] and E[x y^2] of two noise estimates are zero, as they are for
  independent noises and for noises whose spreads share a driver.
"""

from __future__ import annotations

import math

import numpy as np

from preflight.checks._distributions import norm_sf
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


_BRACKET = "third-moment slope bracket"
_BRACKET_EFFECT = "depth inside the bracket"


def _no_bracket(n: int, why: str) -> CheckResult:
    return CheckResult(name=_BRACKET, statistic=math.nan, p_value=None, effect=None, effect_name=_BRACKET_EFFECT,
                       n=n, note=why)


def _bracket_conditions(moments: np.ndarray) -> np.ndarray:
    """(m_y, m_x, k_xx, k_yy) from the raw moments (E x, E y, E x^2, E xy, E y^2, E x^2 y, E x y^2) along axis 0.

    m_y = E[x y r] with r the residual of y on x, m_x = E[x y s] with s the
    residual of x on y, k_xx = E[x^2 y], k_yy = E[x y^2], every expectation about
    the means and each divided by the powers of the two standard deviations
    that make it free of units, so that the delta method also carries the
    estimated means and spreads.
    """
    mx, my, sxx, sxy, syy, sxxy, sxyy = moments
    cov = sxy - mx * my
    var_x = sxx - mx * mx
    var_y = syy - my * my
    k_xx = sxxy - my * sxx - 2.0 * mx * sxy + 2.0 * mx * mx * my
    k_yy = sxyy - mx * syy - 2.0 * my * sxy + 2.0 * my * my * mx
    scale_xx = var_x * np.sqrt(var_y)
    scale_yy = np.sqrt(var_x) * var_y
    return np.array([(k_yy - cov / var_x * k_xx) / scale_yy, (k_xx - cov / var_y * k_yy) / scale_xx,
                     k_xx / scale_xx, k_yy / scale_yy])


def _bracket_moments(xs: np.ndarray, ys: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(raw moments, (m_y, m_x, k_xx, k_yy), delta-method variances of m_y and m_x) of standardised columns."""
    n = xs.shape[0]
    rows = np.stack([xs, ys, xs * xs, xs * ys, ys * ys, xs * xs * ys, xs * ys * ys])
    moments = rows.mean(axis=1)
    step = 1e-6  # central differences in each raw moment: the delta method's gradient
    offsets = step * np.eye(7)
    gradient = (_bracket_conditions(moments[:, None] + offsets)[:2]
                - _bracket_conditions(moments[:, None] - offsets)[:2]) / (2.0 * step)
    centred = rows - moments[:, None]
    covariance = centred @ centred.T / n
    variances = np.einsum("ij,jk,ik->i", gradient, covariance, gradient) / n
    return moments, _bracket_conditions(moments), variances


def third_moment_slope_bracket(x, y) -> CheckResult:
    """Whether Geary's third-moment slope of (x, y) lies strictly inside the bracket of its least-squares slopes.

    Null hypothesis: a straight line with noise independent of its regressor
    links the two, in one direction or the other, and nothing else does.
    Then one of two third-order moment conditions holds exactly:
    E[x y r] = 0 with r the residual of y on x (x -> y), or E[x y s] = 0
    with s the residual of x on y (y -> x), all about the means.

    Why it bears on hidden causes.  If x = a h + u and y = b h + v with h,
    u, v independent and h skewed, Geary's (1942) slope E[x y^2] / E[x^2 y]
    (centred) is b / a (Reiersøl 1950: the slope is identified when h is
    not Gaussian), while the least-squares slope of y on x is attenuated
    towards 0 and the reciprocal of the slope of x on y is inflated (the
    bounds of Frisch 1934): b / a lies strictly between them.  A straight
    line x -> y puts Geary's slope on the first end, y -> x on the second.
    With the signs of y chosen so the covariance is positive, Geary's slope
    is strictly inside exactly when the two moment conditions have the same
    sign (both are E[x^2 y] times its distance from one end).

    Test: intersection-union (Berger 1982).  Each condition gets a Wald z
    with a delta-method standard error from the sample covariance of the
    seven raw moments it is built from (every mean estimated, so the fitted
    slopes are accounted for); the p-value is the larger of the two
    two-sided p-values when the signs agree, 1 when they do not.  Under the
    null one condition is exactly zero, so the level is at most alpha.

    Statistic: where Geary's slope sits in the bracket on a log scale, 0 at
    the slope of y on x, 1 at the reciprocal slope of x on y (outside
    [0, 1] when it is outside the bracket; NaN when it has the other sign,
    E[x^2 y] is zero or the two are exactly collinear).  The log scale makes
    the reading free of which variable is called x.  Effect: its depth
    inside, min(position, 1 - position), 0 outside.

    Not evidence of a hidden cause on its own: a curved mechanism can put
    the slope inside too (a hinge does; see the contributor guide), and a
    symmetric hidden cause leaves the third moments at zero, so the test
    has no power there.  The pair battery reads it only where a pair is
    already judged nonlinear, to tell such a curve from a hidden cause.
    """
    xv = as_vector(x, name="x", min_n=8)
    yv = as_vector(y, name="y", min_n=8)
    n = same_length(xv, yv, names=("x", "y"))
    sd_x, sd_y = float(xv.std()), float(yv.std())
    if sd_x == 0 or sd_y == 0:
        return _no_bracket(n, "a constant variable: no slopes to compare")
    xs = (xv - xv.mean()) / sd_x
    ys = (yv - yv.mean()) / sd_y
    if float(np.mean(xs * ys)) < 0:
        ys = -ys  # so both least-squares slopes are positive and the bracket runs from the smaller up
    cov = float(np.mean(xs * ys))
    if cov <= 1e-12:
        return _no_bracket(n, "uncorrelated: the least-squares slopes are zero")
    moments, conditions, variances = _bracket_moments(xs, ys)
    if np.any(variances <= 0) or not np.all(np.isfinite(variances)):
        return _no_bracket(n, "degenerate moments: no standard error")
    m_y, m_x, k_xx, k_yy = conditions
    z_y, z_x = float(m_y) / math.sqrt(variances[0]), float(m_x) / math.sqrt(variances[1])
    inside = (z_y > 0) == (z_x > 0) and z_y != 0 and z_x != 0
    p_value = float(max(2.0 * norm_sf(abs(z_y)), 2.0 * norm_sf(abs(z_x)))) if inside else 1.0
    # On standardised columns the bracket runs from cov to 1 / cov; on a log scale the position of a
    # slope g is the same whichever variable is called x (swapping them maps g to 1 / g and the
    # position p to 1 - p).
    geary = float(k_yy) / float(k_xx) if k_xx != 0 else math.nan
    position = math.log(geary / cov) / (-2.0 * math.log(cov)) if geary > 0 and cov < 1.0 else math.nan
    depth = max(0.0, min(position, 1.0 - position)) if math.isfinite(position) else 0.0
    return CheckResult(
        name=_BRACKET, statistic=position, p_value=p_value, effect=depth, effect_name=_BRACKET_EFFECT, n=n,
        note=((f"Geary slope at {position:.3g} of the way (log scale) from the slope of y on x to the reciprocal "
               f"slope of x on y" if math.isfinite(position) else
               "Geary slope undefined (no third cross-moment) or of the other sign than the least-squares slopes")
              + f"; moment conditions z = {z_y:.3g} (x -> y) and {z_x:.3g} (y -> x); "
              "intersection-union test with delta-method standard errors"),
    )


_CROSS_SKEWNESS = "third-order cross-moments"


def cross_skewness(x, y) -> CheckResult:
    """Whether the third-order cross-moments E[x^2 y] and E[x y^2] of two variables are zero (about the means).

    Null hypothesis: x and y are independent, or more generally each has
    mean zero given the other's square (then both cross-moments vanish).

    Why it bears on hidden causes.  If x = a h + u and y = b h + v with h,
    u, v independent, E[x^2 y] = a^2 b E[h^3] and E[x y^2] = a b^2 E[h^3]:
    a skewed hidden cause shows in the third-order cross-cumulants (the
    basis of cumulant methods for latent confounders, e.g. Cai et al.
    2023, from memory).  Noises whose spreads follow a common parent,
    x = s(w) u and y = t(w) v with u and v centred and independent of w
    and each other, are dependent too (their sizes move together), yet
    both cross-moments are exactly zero, since E[v] = 0.  So where two
    noise estimates are dependent, this tells a skewed common component
    from a shared change of spread.  A symmetric hidden cause leaves both
    moments at zero: the test has no power there.

    Test: each moment on the standardised columns, m = mean(w) with w the
    products (x^2 - 1) y and x (y^2 - 1); its standard error is the sample
    standard deviation of w over sqrt(n), valid under the null (the centring
    of x^2 and y enters only at second order).  The p-value is
    Bonferroni's over the two two-sided normal p-values.  Statistic: the
    larger |z|; effect: the larger |m|, the standardised cross-skewness.
    """
    xv = as_vector(x, name="x", min_n=8)
    yv = as_vector(y, name="y", min_n=8)
    n = same_length(xv, yv, names=("x", "y"))
    sd_x, sd_y = float(xv.std()), float(yv.std())
    if sd_x == 0 or sd_y == 0:
        return CheckResult(name=_CROSS_SKEWNESS, statistic=math.nan, p_value=None, effect=None,
                           effect_name="standardised cross-skewness", n=n,
                           note="a constant variable: no cross-moments")
    xs = (xv - xv.mean()) / sd_x
    ys = (yv - yv.mean()) / sd_y
    z_values, moments = [], []
    for first, second in ((xs, ys), (ys, xs)):
        w = (first * first - 1.0) * second
        spread = float(w.std())
        moments.append(float(w.mean()))
        z_values.append(moments[-1] / (spread / math.sqrt(n)) if spread > 0 else 0.0)
    statistic = max(abs(z) for z in z_values)
    p_value = float(min(1.0, 2.0 * 2.0 * norm_sf(statistic)))
    return CheckResult(
        name=_CROSS_SKEWNESS, statistic=statistic, p_value=p_value, effect=max(abs(m) for m in moments),
        effect_name="standardised cross-skewness", n=n,
        note=(f"E[x^2 y] = {moments[0]:.3g} (z = {z_values[0]:.3g}) and E[x y^2] = {moments[1]:.3g} "
              f"(z = {z_values[1]:.3g}) on standardised columns; Bonferroni over the two"),
    )
