"""Upper-tail probabilities of the chi-squared, t, F and normal distributions.

``scipy.stats.<dist>.sf`` spends some 20 microseconds per call parsing,
validating and broadcasting its arguments before it reaches the
``scipy.special`` function that does the work (about 2 microseconds), and a
check makes hundreds of such calls on scalars.
These functions call the same ``scipy.special`` kernels
(``chi2._sf`` is ``chdtrc(df, x)``, ``t._sf`` is ``stdtr(df, -x)``,
``f._sf`` is ``fdtrc(dfn, dfd, x)``, ``norm._sf`` is ``ndtr(-x)``) and
reproduce the handling of ``rv_continuous.sf`` around them: NaN for a
non-positive or NaN shape parameter or a NaN x, 1 at or below the lower end
of the support, 0 at +inf.  The values are therefore bit for bit those of
``scipy.stats``; tests/test_fast_distributions.py checks that on a grid of
edge cases for the installed SciPy.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import special


def _survival(kernel, x, lower: float, shapes: tuple):
    """``rv_continuous.sf`` with loc 0 and scale 1 around ``kernel``, which takes the reduced x last."""
    if isinstance(x, (float, int)) and all(isinstance(s, (float, int)) for s in shapes):
        x = float(x)
        if not all(s > 0 for s in shapes) or math.isnan(x):
            return np.float64(math.nan)
        if x <= lower:
            return np.float64(1.0)
        if x == math.inf:
            return np.float64(0.0)
        return np.float64(kernel(*shapes, x))
    x = np.asarray(x, dtype=np.float64)
    shape_arrays = [np.asarray(s) for s in shapes]
    valid = np.ones(np.broadcast(x, *shape_arrays).shape, dtype=bool)
    for s in shape_arrays:
        valid &= s > 0
    with np.errstate(invalid="ignore"):
        inside = valid & (x > lower) & (x < math.inf)
        below = valid & (x <= lower)
    out = np.zeros(valid.shape)
    out[~valid | np.isnan(np.broadcast_to(x, valid.shape))] = math.nan
    out[below] = 1.0
    if inside.any():
        # Evaluated only where scipy.stats evaluates it, so no kernel warning
        # appears that scipy.stats would not raise.
        broadcast = [np.broadcast_to(s, valid.shape)[inside] for s in shape_arrays]
        out[inside] = kernel(*broadcast, np.broadcast_to(x, valid.shape)[inside])
    return out[()] if out.ndim == 0 else out


def _t_kernel(df, x):
    return special.stdtr(df, -x)


def _norm_kernel(x):
    return special.ndtr(-x)


def chi2_sf(x, df):
    """``scipy.stats.chi2.sf(x, df)``."""
    return _survival(special.chdtrc, x, 0.0, (df,))


def t_sf(x, df):
    """``scipy.stats.t.sf(x, df)``."""
    return _survival(_t_kernel, x, -math.inf, (df,))


def f_sf(x, dfn, dfd):
    """``scipy.stats.f.sf(x, dfn, dfd)``."""
    return _survival(special.fdtrc, x, 0.0, (dfn, dfd))


def norm_sf(x):
    """``scipy.stats.norm.sf(x)``."""
    return _survival(_norm_kernel, x, -math.inf, ())
