"""Rows needed: how many rows Jarque-Bera needs to see a given noise shape."""

from __future__ import annotations

import functools
import math

from preflight.errors import InputError


def rows_needed(skewness: float, excess_kurtosis: float, alpha: float = 0.05, power: float = 0.8) -> int | None:
    """Rows the Jarque-Bera test needs to detect this skewness and excess kurtosis.

    Under a fixed alternative, JB = n (g1^2/6 + g2^2/24) is approximately
    noncentral chi-squared with 2 degrees of freedom and noncentrality
    lambda = n (skew^2/6 + exkurt^2/24) (the local-alternative
    approximation; Jarque & Bera 1987).  The function finds the lambda at
    which ``scipy.stats.ncx2`` gives ``power`` beyond the chi-squared(2)
    critical value at ``alpha`` and returns ceil(lambda / (skew^2/6 +
    exkurt^2/24)), at least 3.  None when both effects are 0 (no finite n).
    The approximation ignores that the moments' variance also changes under
    the alternative, so treat it as an order of magnitude.
    """
    for label, value in (("skewness", skewness), ("excess_kurtosis", excess_kurtosis)):
        if value is None or not math.isfinite(float(value)):
            raise InputError(f"{label} must be a finite number, got {value!r}")
    if not 0.0 < alpha < 1.0:
        raise InputError(f"alpha must lie in (0, 1), got {alpha}")
    if not alpha < power < 1.0:
        raise InputError(f"power must lie in (alpha, 1), got {power}")
    per_row = float(skewness) ** 2 / 6.0 + float(excess_kurtosis) ** 2 / 24.0
    if per_row == 0.0:
        return None
    rows = math.ceil(_noncentrality_for_power(float(alpha), float(power)) / per_row)
    return int(max(rows, 3))


@functools.lru_cache(maxsize=16)
def _noncentrality_for_power(alpha: float, power: float) -> float:
    """The lambda at which chi-squared(2, lambda) exceeds its null alpha critical value with probability ``power``.

    It depends on alpha and power only, and a report asks for it once per
    variable with the same two, so the root search (some 16 noncentral
    chi-squared evaluations) runs once per process.
    """
    from scipy import optimize, stats

    critical = stats.chi2.isf(alpha, 2)

    def shortfall(lam: float) -> float:
        return float(stats.ncx2.sf(critical, 2, lam)) - power

    upper = 1.0
    while shortfall(upper) < 0:
        upper *= 2.0
    return optimize.brentq(shortfall, 0.0, upper, xtol=1e-10)
