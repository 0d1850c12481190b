"""Regression core: least squares without model objects in hot loops.

Everything here is plain linear algebra on float64 arrays.  The reference
checks compare it with statsmodels OLS and the NIST StRD certified values.
"""

from __future__ import annotations

import math
import zlib
from collections import OrderedDict
from dataclasses import dataclass

import numpy as np
from scipy.interpolate import BSpline


@dataclass(frozen=True)
class LinearFit:
    """Least-squares fit of y on [1, X]."""

    coef: np.ndarray
    """Intercept first, then one coefficient per column of X."""
    residuals: np.ndarray
    rss: float
    tss: float
    n: int
    rank: int

    @property
    def r_squared(self) -> float:
        return 1.0 - self.rss / self.tss if self.tss > 0 else 0.0

    @property
    def df_resid(self) -> int:
        return self.n - self.rank


def add_intercept(X: np.ndarray) -> np.ndarray:
    X = np.asarray(X, dtype=np.float64)
    if X.ndim == 1:
        X = X[:, None]
    return np.column_stack([np.ones(X.shape[0]), X])


def ols(X: np.ndarray, y: np.ndarray, intercept: bool = True) -> LinearFit:
    """Least squares via a pivoted QR factorisation (LAPACK ``gelsy`` through lstsq).

    The columns are centred and scaled before solving so that badly scaled
    designs such as NIST Longley keep their digits; coefficients are mapped
    back afterwards.
    """
    y = np.asarray(y, dtype=np.float64)
    X = np.asarray(X, dtype=np.float64)
    if X.ndim == 1:
        X = X[:, None]
    n = y.shape[0]
    if intercept:
        x_mean = X.mean(axis=0)
        y_mean = y.mean()
        Xc = X - x_mean
        yc = y - y_mean
    else:
        x_mean = np.zeros(X.shape[1])
        y_mean = 0.0
        Xc, yc = X, y
    scale = np.sqrt((Xc**2).sum(axis=0))
    scale[scale == 0] = 1.0
    if Xc.shape[1]:
        from scipy.linalg import lstsq

        # A relative cutoff so exact collinearity (a binary column and its
        # square) is seen as rank deficiency instead of fitted through round-off.
        beta_scaled, _, rank, _ = lstsq(Xc / scale, yc, cond=1e-10, lapack_driver="gelsy", check_finite=False)
        beta = beta_scaled / scale
        fitted_c = Xc @ beta
    else:
        beta = np.zeros(0)
        rank = 0
        fitted_c = np.zeros(n)
    residuals = yc - fitted_c
    if intercept:
        residuals = residuals - residuals.mean()  # removes round-off, exact in theory
        coef = np.concatenate([[y_mean - x_mean @ beta], beta])
        rank += 1
        tss = float(yc @ yc)
    else:
        coef = beta
        tss = float(y @ y)
    rss = float(residuals @ residuals)
    return LinearFit(coef=coef, residuals=residuals, rss=rss, tss=tss, n=n, rank=int(rank))


def coefficient_standard_errors(X: np.ndarray, fit: LinearFit, intercept: bool = True) -> np.ndarray:
    """Classical OLS standard errors sqrt(diag(sigma^2 (X'X)^-1)), via the QR of the scaled design."""
    design = add_intercept(X) if intercept else np.asarray(X, dtype=np.float64)
    scale = np.sqrt((design**2).sum(axis=0))
    scale[scale == 0] = 1.0
    _, r = np.linalg.qr(design / scale, mode="reduced")
    r_inv = np.linalg.solve(r, np.eye(r.shape[0]))
    cov_unit = (r_inv @ r_inv.T) / np.outer(scale, scale)
    sigma2 = fit.rss / fit.df_resid
    return np.sqrt(np.diag(cov_unit) * sigma2)


def residualize(Y: np.ndarray, Z: np.ndarray | None) -> np.ndarray:
    """Residuals of every column of Y regressed on [1, Z] (centred Y when Z is empty)."""
    Y = np.asarray(Y, dtype=np.float64)
    squeeze = Y.ndim == 1
    if squeeze:
        Y = Y[:, None]
    Yc = Y - Y.mean(axis=0)
    if Z is None or np.asarray(Z).size == 0:
        out = Yc
    else:
        Z = np.asarray(Z, dtype=np.float64)
        if Z.ndim == 1:
            Z = Z[:, None]
        Zc = Z - Z.mean(axis=0)
        q, r = np.linalg.qr(Zc, mode="reduced")
        keep = np.abs(np.diag(r)) > 1e-10 * max(1.0, float(np.abs(r).max()))
        q = q[:, keep]
        out = Yc - q @ (q.T @ Yc)
    return out[:, 0] if squeeze else out


def simple_slope(x: np.ndarray, y: np.ndarray) -> tuple[float, np.ndarray]:
    """Slope of y on x (both centred inside) and the residual of y."""
    xc = x - x.mean()
    yc = y - y.mean()
    sxx = float(xc @ xc)
    slope = float(xc @ yc) / sxx if sxx > 0 else 0.0
    return slope, yc - slope * xc


def spline_df(n: int, max_df: int = 10) -> int:
    """Degrees of freedom of the regression spline: round(n ** 0.2) + 2, within [4, max_df].

    Grows slowly with n so the spline can follow a smooth curve on large
    samples without chasing noise on small ones (n=200 -> 5, n=1000 -> 6,
    n=10^5 -> 12 capped at 10).
    """
    return int(min(max(round(n**0.2) + 2, 4), max_df))


_MEMO: OrderedDict = OrderedDict()
"""(shape, CRC of the values) -> _Remembered, least recently used first."""
_MEMO_ENTRIES = 16
_MEMO_BYTES = 64 * 2**20


class _Remembered:
    """Read-only arrays computed from one vector's values alone, by name."""

    __slots__ = ("raw", "arrays", "nbytes")

    def __init__(self, raw: bytes):
        self.raw = raw
        self.arrays: dict = {}
        self.nbytes = len(raw)


def remembered(x: np.ndarray, name, build) -> np.ndarray:
    """``build(x)`` for a vector x, remembered read-only for the last few vectors seen.

    ``name`` identifies the computation; ``build`` must return a new array
    that depends on the values of x only (not on its memory layout).  A check computes the same
    function of the same regressor many times: every pair a variable
    belongs to, and the spline F-test and the spread of the spline residual
    within a pair.  The entry is found by a CRC of the values and confirmed
    by the bytes themselves, so a collision costs a recomputation, never a
    wrong result.  At most ``_MEMO_ENTRIES`` vectors and ``_MEMO_BYTES``
    bytes are kept.
    """
    x = np.asarray(x, dtype=np.float64)
    raw = x.tobytes()
    key = (x.shape, zlib.crc32(raw))
    entry = _MEMO.get(key)
    if entry is None or entry.raw != raw:
        entry = _MEMO[key] = _Remembered(raw)
    _MEMO.move_to_end(key)
    value = entry.arrays.get(name)
    if value is None:
        value = _read_only(build(x))
        _keep(entry, name, value)
    return value


def _keep(entry: _Remembered, name, value: np.ndarray) -> None:
    entry.arrays[name] = value
    entry.nbytes += value.nbytes
    while len(_MEMO) > _MEMO_ENTRIES or sum(e.nbytes for e in _MEMO.values()) > _MEMO_BYTES:
        _MEMO.popitem(last=False)


def bspline_basis(x: np.ndarray, df: int, degree: int = 3) -> np.ndarray:
    """Cubic B-spline basis with ``df`` columns and interior knots at quantiles of x.

    The columns sum to one, so the basis spans the constant; callers fitting
    with an intercept drop the first column.

    The result is read-only: it is :func:`remembered`, because one pair's
    battery builds the same basis for the spline F-test and for the spread
    of the spline residual, and a variable is the regressor of every pair
    it belongs to.  Copy it before writing to it.
    """
    return remembered(x, ("bspline basis", int(df), int(degree)), lambda v: _bspline_basis(v, df, degree))


def _holding(array: np.ndarray):
    """The (entry, name) under which ``array`` itself is remembered, or (None, None)."""
    for entry in reversed(_MEMO.values()):
        for name, value in entry.arrays.items():
            if value is array:
                return entry, name
    return None, None


def derived_from_basis(basis: np.ndarray, name: str, build) -> np.ndarray:
    """``build()``, an array computed from ``basis`` alone, remembered with the basis while it is remembered.

    ``basis`` is an array returned by :func:`bspline_basis` and ``build``
    returns a new array.  The basis is looked
    up by identity, which is sound: the memo holds the object, so no other
    array can be it, and it is read-only, so its values cannot have changed.
    A basis no longer (or never) remembered gets ``build()`` computed afresh.
    """
    entry, basis_name = _holding(basis)
    if entry is None:
        return build()
    derived_name = (basis_name, name)
    value = entry.arrays.get(derived_name)
    if value is None:
        value = _read_only(build())
        _keep(entry, derived_name, value)
    return value


def basis_of_tail(view: np.ndarray) -> np.ndarray | None:
    """The remembered basis of which ``view`` is exactly ``basis[:, 1:]``, or None.

    ``basis[:, 1:]`` is the design of a fit with intercept.
    """
    owner = view.base
    if owner is None or owner.flags.writeable or view.ndim != 2:
        return None
    start = view.__array_interface__["data"][0]
    for entry in reversed(_MEMO.values()):
        for name, basis in entry.arrays.items():
            if (name[0] == "bspline basis" and basis.base is owner
                    and view.shape == (basis.shape[0], basis.shape[1] - 1) and view.strides == basis.strides
                    and start == basis.__array_interface__["data"][0] + basis.itemsize):
                return basis
    return None


def _read_only(array: np.ndarray) -> np.ndarray:
    """A read-only view of an array that owns its data and that nothing else can write to."""
    if array.base is not None:
        # order="K" keeps the memory layout, on which the round-off of later
        # reductions over the array depends.
        array = array.copy(order="K")
    array.flags.writeable = False
    # A view of the read-only owner cannot be made writeable again, the
    # owner itself could.
    return array.view()


def _bspline_basis(x: np.ndarray, df: int, degree: int) -> np.ndarray:
    n_interior = df - degree - 1
    if n_interior < 0:
        raise ValueError("df must be at least degree + 1")
    lo, hi = float(x.min()), float(x.max())
    if n_interior:
        interior = np.quantile(x, np.linspace(0, 1, n_interior + 2)[1:-1])
        # Knots must lie strictly inside (lo, hi): with heavy ties a quantile
        # can sit on an end, and the basis rows would stop summing to one.
        interior = np.unique(interior[(interior > lo) & (interior < hi)])
    else:
        interior = np.array([])
    knots = np.concatenate([[lo] * (degree + 1), interior, [hi] * (degree + 1)])
    # With finite ends every clipped x lies within the knots, where SciPy's
    # interval search is the same with or without extrapolation; only
    # without it does design_matrix first scan x with Python's min and max,
    # which took half its time.  Non-finite values keep the checked path.
    in_knots = math.isfinite(lo) and math.isfinite(hi)
    basis = BSpline.design_matrix(np.clip(x, lo, hi), knots, degree, extrapolate=in_knots)
    return basis.toarray()
