"""Per-variable screen: findings about each column on its own.

Each finding is a documented rule with its threshold in :class:`Policy`.
The flags, in the order they are listed on a variable:

``constant``
    The column takes a single value.  No other screen runs on it (its shape,
    autocorrelation and collinearity are undefined), and it is left out of
    the collinearity computations of the other columns.
``discrete``
    At most ``discrete_max_levels`` distinct values, or fewer distinct values
    than ``discrete_min_distinct_share`` of the rows.
``heavy-tailed``
    Sample excess kurtosis g2 = m4 / m2^2 - 3 (divisor n) above
    ``heavy_tail_excess_kurtosis``.  Moment-based checks (Jarque-Bera, the
    cumulant likelihood ratios) are unreliable on such columns.
``outliers``
    At least one value with robust z = |x - median| / (1.4826 MAD) above
    ``outlier_robust_z``.  1.4826 makes the MAD consistent for the standard
    deviation of a normal (Rousseeuw & Croux 1993).  When the MAD is 0
    (more than half of the values tie at the median) the scale falls back to
    1.2533 times the mean absolute deviation from the median, the same
    normal-consistency idea (sqrt(pi/2); Iglewicz & Hoaglin 1993).
``autocorrelated``
    Ljung-Box test (Ljung & Box 1978; the statistic of
    ``statsmodels.stats.diagnostic.acorr_ljungbox``) on the column in file
    order at ``autocorrelation_lags`` lags.  Raised
    when the p-value, adjusted across all screened variables with
    ``policy.correction`` (Holm by default), is below ``alpha`` AND the
    largest |autocorrelation| over lags 1..L is at least
    ``autocorrelation_min_effect`` (a significant but negligible serial
    correlation on a huge table is not material).  Skipped entirely when
    ``rows_unordered`` is set.
``collinear``
    Variance inflation factor VIF_j = 1 / (1 - R_j^2) of the column
    regressed on all other non-constant columns (with intercept) above
    ``vif_max`` (Marquardt 1970).  The table-wide companion,
    :func:`collinearity_check`, reports the condition number of the
    standardised design (Belsley, Kuh & Welsch 1980) for the ``global``
    section.

``missing-values`` is added by the loader, not here.

The table-wide ``duplicate-rows`` (global) comes from
:func:`duplicate_rows_check`: rows that repeat an earlier row exactly, more
often than ``duplicate_rows_max_share``, in a table with a column that looks
continuous.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from preflight.checks._validate import as_matrix
from preflight.errors import InputError
from preflight.policy import Policy
from preflight.results import CheckResult

MAD_TO_SD = 1.4826
"""Consistency factor of the MAD for a normal standard deviation (1 / Phi^-1(3/4))."""
MEAN_AD_TO_SD = 1.2533
"""Consistency factor of the mean absolute deviation for a normal standard deviation (sqrt(pi/2))."""

# Singular values below this share of the largest are treated as exact zeros:
# a few hundred times float64 round-off on a unit-scaled design.
_SINGULAR_RELATIVE_TOL = 1e-13


@dataclass(frozen=True)
class VariableScreen:
    name: str
    flags: tuple[str, ...]
    checks: tuple[CheckResult, ...]


def distinct_values_check(x: np.ndarray, policy: Policy) -> CheckResult:
    """Distinct values and tie share of one column (descriptive; common practice)."""
    n = x.shape[0]
    distinct = int(np.unique(x).shape[0])
    tie_share = 1.0 - distinct / n
    return CheckResult(
        name="distinct values",
        statistic=float(distinct),
        p_value=None,
        effect=tie_share,
        effect_name="tie share",
        n=n,
        note=(f"discrete when at most {policy.discrete_max_levels} distinct values "
              f"or fewer than {policy.discrete_min_distinct_share:.0%} of rows distinct"),
    )


def is_constant(x: np.ndarray) -> bool:
    return bool(np.ptp(x) == 0) if x.size else True


# ---------------------------------------------------------------- shape


def excess_kurtosis_check(x: np.ndarray, policy: Policy) -> CheckResult:
    """Sample excess kurtosis g2 = m4 / m2^2 - 3 with divisor n (descriptive).

    No test: the heavy-tail rule compares g2 with
    ``policy.heavy_tail_excess_kurtosis``.  A normal has 0, a Laplace 3,
    Student's t with 4 or fewer degrees of freedom an infinite population
    value, so its sample g2 grows with n.  Reference: the moment estimator
    of Pearson (1905), as ``scipy.stats.kurtosis`` computes it by default.
    """
    deviations = x - x.mean()
    squared = deviations * deviations
    m2 = float(squared.mean())
    g2 = float((squared * squared).mean()) / (m2 * m2) - 3.0
    return CheckResult(
        name="excess kurtosis", statistic=g2, p_value=None, effect=g2, effect_name="excess kurtosis",
        n=int(x.shape[0]), note=f"heavy-tailed above {policy.heavy_tail_excess_kurtosis:g}",
    )


def robust_z(x: np.ndarray) -> tuple[np.ndarray, str]:
    """|x - median| over a normal-consistent robust scale, and which scale was used."""
    median = float(np.median(x))
    deviations = np.abs(x - median)
    mad = float(np.median(deviations))
    # A value near the float limit among small ones has a robust z beyond the float range: inf, an outlier all
    # the same, and no numpy warning on the user's terminal.
    with np.errstate(over="ignore"):
        if mad > 0:
            return deviations / (MAD_TO_SD * mad), "1.4826 MAD"
        mean_ad = float(deviations.mean())
        # Only a constant column has mean_ad == 0, and constant columns are not screened.
        return deviations / (MEAN_AD_TO_SD * mean_ad), "1.2533 mean absolute deviation (MAD is 0)"


def outlier_check(x: np.ndarray, policy: Policy) -> CheckResult:
    """Count of values with robust z above ``policy.outlier_robust_z`` (descriptive).

    Robust z = |x - median| / (1.4826 MAD), with the mean-absolute-deviation
    fallback when the MAD is 0.  Reference: Iglewicz & Hoaglin (1993),
    Rousseeuw & Croux (1993).
    """
    z, scale = robust_z(x)
    count = int(np.count_nonzero(z > policy.outlier_robust_z))
    n = int(x.shape[0])
    return CheckResult(
        name="robust z outliers", statistic=float(count), p_value=None, effect=count / n,
        effect_name="share of rows", n=n,
        note=f"values with |x - median| / ({scale}) above {policy.outlier_robust_z:g}; largest {float(z.max()):.3g}",
    )


# ---------------------------------------------------------------- serial dependence


def autocorrelations(x: np.ndarray, lags: int) -> np.ndarray:
    """r_1..r_L with the divisor-n autocovariances (as ``statsmodels.tsa.stattools.acf``).

    Direct lagged products: O(n L), cheaper than an FFT for the few lags screened.
    """
    d = x - x.mean()
    denominator = float(d @ d)
    # Elementwise products, not BLAS dot: the offset slices are misaligned and
    # OpenBLAS handles those two orders of magnitude slower here.
    return np.array([float((d[:-k] * d[k:]).sum()) / denominator for k in range(1, lags + 1)])


def ljung_box_check(x: np.ndarray, lags: int) -> CheckResult | None:
    """Ljung-Box Q at ``lags`` lags on x in file order.

    Null hypothesis: the autocorrelations at lags 1..L are all zero (no
    serial correlation in file order).  Q = n (n + 2) sum_k r_k^2 / (n - k),
    chi-squared(L) under the null.  Reference: Ljung & Box (1978).  The
    formula is the one ``statsmodels.stats.diagnostic.acorr_ljungbox``
    evaluates (the tests compare both); it is written out here because
    ``acorr_ljungbox`` takes seconds per column on 10^5 rows.  Effect: the
    largest |r_k| over the lags.  Returns None when there are too few rows
    for one lag.
    """
    from preflight.checks._distributions import chi2_sf

    n = int(x.shape[0])
    used_lags = min(int(lags), n - 2)
    if used_lags < 1:
        return None
    r = autocorrelations(x, used_lags)
    k = np.arange(1, used_lags + 1)
    statistic = float(n * (n + 2.0) * np.sum(r * r / (n - k)))
    note = f"file order, {used_lags} lags"
    if used_lags < lags:
        note += f" (fewer than the {int(lags)} asked for: only {n} rows)"
    return CheckResult(
        name=f"ljung-box ({used_lags} lags)", statistic=statistic, p_value=float(chi2_sf(statistic, used_lags)),
        effect=float(np.max(np.abs(r))), effect_name="max |autocorrelation|", n=n, note=note,
    )


# ---------------------------------------------------------------- collinearity


@dataclass(frozen=True)
class DesignSpectrum:
    """Singular structure of the centred, unit-length-scaled design."""

    columns: tuple[int, ...]
    """Indices (into the original table) of the non-constant columns used."""
    singular_values: np.ndarray
    """Descending; squares are the eigenvalues of the correlation matrix."""
    right_vectors: np.ndarray
    """Rows are right singular vectors, aligned with ``singular_values``."""
    vif: np.ndarray
    """Variance inflation factor of each used column; inf under exact collinearity."""

    @property
    def condition_number(self) -> float:
        s = self.singular_values
        if s.size == 0:
            return 1.0
        return float(s[0] / s[-1]) if s[-1] > _SINGULAR_RELATIVE_TOL * s[0] else float("inf")


def design_spectrum(X: np.ndarray) -> DesignSpectrum:
    """Centre and scale the non-constant columns of X to unit length; their singular structure.

    With Z that design, Z'Z is the correlation matrix C, and
    VIF_j = (C^-1)_jj = sum_k V_jk^2 / s_k^2 (Belsley, Kuh & Welsch 1980,
    ch. 3).  Well-conditioned tables go through the eigen-decomposition of
    C; ill-conditioned ones through a QR factorisation then the SVD of R.
    """
    X = np.asarray(X, dtype=np.float64)
    keep = tuple(int(j) for j in range(X.shape[1]) if np.ptp(X[:, j]) > 0)
    if not keep:
        return DesignSpectrum(columns=(), singular_values=np.zeros(0), right_vectors=np.zeros((0, 0)),
                              vif=np.zeros(0))
    Z = X[:, keep] - X[:, keep].mean(axis=0)
    Z = Z / np.sqrt((Z * Z).sum(axis=0))
    k = len(keep)
    s = vt = None
    if Z.shape[0] > k:
        # The correlation matrix's eigenvalues are accurate to ~1e-16 of the
        # largest, so when the smallest is above 1e-8 of it the cheap route
        # keeps at least 8 digits of every VIF; otherwise (Longley) QR first.
        eigenvalues, vectors = np.linalg.eigh(Z.T @ Z)
        if eigenvalues[0] > 1e-8 * eigenvalues[-1]:
            s = np.sqrt(eigenvalues[::-1])
            vt = vectors[:, ::-1].T
        else:
            Z = np.linalg.qr(Z, mode="r")
    if s is None or vt is None:
        _, s, vt = np.linalg.svd(Z, full_matrices=True)
    s_full = np.zeros(k)
    s_full[: s.shape[0]] = s
    null = s_full <= _SINGULAR_RELATIVE_TOL * s_full[0]
    weights = np.where(null, 0.0, 1.0 / np.where(null, 1.0, s_full) ** 2)
    vif = (vt**2 * weights[:, None]).sum(axis=0)
    # A column with any weight on a null direction is an exact linear
    # combination of the others.
    on_null = (vt[null] ** 2 > 1e-12).any(axis=0) if null.any() else np.zeros(k, dtype=bool)
    vif = np.where(on_null, np.inf, vif)
    return DesignSpectrum(columns=keep, singular_values=s_full, right_vectors=vt, vif=vif)


def variance_inflation_factors(X) -> np.ndarray:
    """VIF of every column of X on all the others (with intercept); NaN for constant columns.

    Equals ``statsmodels.stats.outliers_influence.variance_inflation_factor``
    on the design with a constant column added.  Reference: Marquardt (1970).
    """
    X = as_matrix(X, name="X", min_n=3)
    out = np.full(X.shape[1], np.nan)
    spectrum = design_spectrum(X)
    if len(spectrum.columns) == 1:
        out[list(spectrum.columns)] = 1.0
    elif spectrum.columns:
        out[list(spectrum.columns)] = spectrum.vif
    return out


def vif_check(vif: float, n: int, policy: Policy, others: int) -> CheckResult:
    r_squared = 1.0 - 1.0 / vif if np.isfinite(vif) else 1.0
    return CheckResult(
        name="variance inflation factor", statistic=float(vif), p_value=None, effect=float(r_squared),
        effect_name="r-squared on the other columns", n=n,
        note=(f"regressed on the {others} other non-constant columns; collinear above {policy.vif_max:g}"
              + ("; exact linear dependence" if not np.isfinite(vif) else "")),
    )


def collinearity_check(X: np.ndarray, names: list[str], policy: Policy) -> CheckResult:
    """Condition number of the standardised design (table-wide, descriptive).

    The non-constant columns are centred and scaled to unit length; the
    condition number is the ratio of the largest to the smallest singular
    value (inf under exact linear dependence).  Centring keeps columns far
    from zero (years, temperatures in kelvin) from counting as collinear
    with the intercept.  The note names the columns whose coefficient
    variance is at least half owed to the smallest singular value, the
    variance-decomposition proportions of Belsley, Kuh & Welsch (1980).
    No null hypothesis; the policy threshold is ``condition_number_max``.
    """
    X = as_matrix(X, name="X", min_n=3)
    if len(names) != X.shape[1]:
        raise InputError(f"got {len(names)} names for {X.shape[1]} columns")
    n = int(X.shape[0])
    spectrum = design_spectrum(X)
    dropped = X.shape[1] - len(spectrum.columns)
    note_parts = [f"centred, unit-length columns; collinear above {policy.condition_number_max:g}"]
    if dropped:
        note_parts.append(f"{dropped} constant column(s) left out")
    if len(spectrum.columns) < 2:
        note_parts.append("fewer than two non-constant columns")
        return CheckResult(name="condition number", statistic=1.0, p_value=None, effect=1.0,
                           effect_name="condition number", n=n, note="; ".join(note_parts))
    cond = spectrum.condition_number
    s, vt = spectrum.singular_values, spectrum.right_vectors
    if np.isfinite(cond):
        parts = vt**2 / s[:, None] ** 2
        involved_mask = parts[-1] / parts.sum(axis=0) >= 0.5
    else:
        null = s <= _SINGULAR_RELATIVE_TOL * s[0]
        involved_mask = (vt[null] ** 2 > 1e-12).any(axis=0)
    involved = [names[spectrum.columns[k]] for k in np.flatnonzero(involved_mask)]
    if involved and cond > policy.condition_number_max:
        note_parts.append("near-dependence among: " + ", ".join(involved))
    return CheckResult(name="condition number", statistic=cond, p_value=None, effect=cond,
                       effect_name="condition number", n=n, note="; ".join(note_parts))


# ---------------------------------------------------------------- repeated rows


def duplicate_rows_check(X: np.ndarray, names: list[str], policy: Policy) -> CheckResult:
    """Rows that exactly repeat an earlier row over the analysed columns (table-wide, descriptive).

    No null hypothesis is tested.  The statistic is the number of rows equal,
    in every analysed column, to some earlier row (n minus the number of
    distinct rows, as ``pandas.DataFrame.duplicated`` counts them); the
    effect is that number's share of the rows.  Under i.i.d. sampling from a
    continuous distribution a whole-row repeat has probability 0, so repeats
    there are copies (a merge or an export that wrote rows twice): the rows
    are not i.i.d., and every test counts the copies as fresh evidence.
    Coarsely recorded data (counts, levels) repeat by chance, so the rule
    applies only when some column looks continuous: among the distinct rows,
    at least ``policy.duplicate_rows_continuous_min_distinct_share`` of its
    values are distinct (copies do not count against it).  Then the repeats
    are material when their share exceeds ``policy.duplicate_rows_max_share``
    (common practice for data-integrity screens; both thresholds are our
    own).  ``passed`` is False exactly then, True otherwise; the caller
    raises the global flag ``duplicate-rows`` on False.
    """
    X = as_matrix(X, name="X", min_n=1, allow_empty_columns=False)
    if len(names) != X.shape[1]:
        raise InputError(f"got {len(names)} names for {X.shape[1]} columns")
    n = int(X.shape[0])
    # Adding 0.0 maps -0.0 to 0.0: np.unique(axis=0) compares rows bytewise.
    distinct_rows = np.unique(X + 0.0, axis=0)
    m = int(distinct_rows.shape[0])
    count = n - m
    share = count / n
    distinct_shares = [np.unique(distinct_rows[:, j]).shape[0] / m for j in range(X.shape[1])]
    best = int(np.argmax(distinct_shares))
    continuous = distinct_shares[best] >= policy.duplicate_rows_continuous_min_distinct_share
    material = continuous and share > policy.duplicate_rows_max_share
    if continuous:
        why = (f"{names[best]} looks continuous ({distinct_shares[best]:.0%} of its values distinct among the "
               f"{m} distinct rows), so repeats are copies; material above {policy.duplicate_rows_max_share:g}")
    else:
        why = (f"no column looks continuous (at most {distinct_shares[best]:.0%} of values distinct among the "
               f"{m} distinct rows, below {policy.duplicate_rows_continuous_min_distinct_share:.0%}), "
               "so repeats may be chance coincidences of coarse values and are not judged")
    return CheckResult(
        name="duplicated rows", statistic=float(count), p_value=None, effect=share,
        effect_name="share of rows", n=n, passed=not material,
        note=f"rows equal to an earlier row in all {X.shape[1]} analysed columns; {why}",
    )


# ---------------------------------------------------------------- the screen


def screen_variables(X: np.ndarray, names: list[str], policy: Policy) -> list[VariableScreen]:
    """Screen every column of X (rows already cleaned of missing values).

    All columns are screened first; the Ljung-Box p-values are then adjusted
    across the variables (``policy.correction``) and the adjusted value is
    stored in the check's ``p_adjusted`` before the ``autocorrelated`` rule
    is applied.  See the module docstring for every rule.
    """
    from preflight.evidence import rejects, with_adjusted

    X = np.asarray(X, dtype=np.float64)
    if X.ndim != 2 or len(names) != X.shape[1]:
        raise InputError(f"got {len(names)} names for a table of shape {X.shape}")
    n = int(X.shape[0])
    columns = np.asfortranarray(X)  # contiguous columns for the per-column passes
    flags: list[list[str]] = []
    checks: list[list[CheckResult]] = []
    constant = []
    for j, name in enumerate(names):
        x = columns[:, j]
        column_flags: list[str] = []
        distinct = distinct_values_check(x, policy)
        column_checks = [distinct]
        is_const = is_constant(x)
        constant.append(is_const)
        if is_const:
            column_flags.append("constant")
        else:
            if (distinct.statistic <= policy.discrete_max_levels
                    or distinct.statistic < policy.discrete_min_distinct_share * n):
                column_flags.append("discrete")
            kurtosis = excess_kurtosis_check(x, policy)
            column_checks.append(kurtosis)
            if kurtosis.statistic > policy.heavy_tail_excess_kurtosis:
                column_flags.append("heavy-tailed")
            outliers = outlier_check(x, policy)
            column_checks.append(outliers)
            if outliers.statistic > 0:
                column_flags.append("outliers")
            if not policy.rows_unordered:
                lb = ljung_box_check(x, policy.autocorrelation_lags)
                if lb is not None:
                    column_checks.append(lb.identified(scope="variable", family="autocorrelation", variables=(name,)))
        flags.append(column_flags)
        checks.append(column_checks)

    # --- autocorrelation: adjust across variables, then the rule
    where = [(j, k) for j, cs in enumerate(checks) for k, c in enumerate(cs)
             if c.identity is not None and c.identity.family == "autocorrelation" and c.p_value is not None]
    for (j, k), lb in zip(where, with_adjusted([checks[j][k] for j, k in where], policy.correction)):
        checks[j][k] = lb
        if (rejects(lb.p_adjusted, policy.alpha) and lb.effect is not None
                and lb.effect >= policy.autocorrelation_min_effect):
            flags[j].append("autocorrelated")

    # --- collinearity among the non-constant columns
    varying = [j for j, c in enumerate(constant) if not c]
    if len(varying) >= 2:
        vif = variance_inflation_factors(X)
        for j in varying:
            checks[j].append(vif_check(float(vif[j]), n, policy, others=len(varying) - 1))
            if vif[j] > policy.vif_max:
                flags[j].append("collinear")

    return [VariableScreen(name=name, flags=tuple(flags[j]), checks=tuple(
        c if c.identity is not None else c.identified(scope="variable", variables=(name,)) for c in checks[j]))
        for j, name in enumerate(names)]
