"""Regression core: least squares without model objects in hot loops.

Everything here is plain linear algebra on float64 arrays.  The reference
checks compare it with statsmodels OLS and the NIST StRD certified values.
"""

from __future__ import annotations

import math
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


def exactly_fitted(residual: np.ndarray, response: np.ndarray) -> bool:
    """Whether the regressors fit the response up to rounding (a duplicated or derived column), which leaves no
    noise to test: the residual's standard deviation is at most 1e-10 of the response's, the pair battery's
    criterion.  Rounding leaves a residual of about 1e-15 of the response's spread, whose tests would describe
    the arithmetic, not the data."""
    return bool(np.ptp(residual) == 0 or np.std(residual) <= 1e-10 * float(np.std(response)))


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
        yc = y - y_mean
    else:
        x_mean = np.zeros(X.shape[1])
        y_mean = 0.0
        yc = y
    if X.shape[1]:
        from scipy.linalg import lstsq

        # One centred, column-scaled copy (LAPACK takes another): a tall design is not held four times.
        scaled, scale = _centred_columns(X, x_mean)
        scale[scale == 0] = 1.0
        scaled /= scale
        # A relative cutoff so exact collinearity (a binary column and its
        # square) is seen as rank deficiency instead of fitted through round-off.
        beta_scaled, _, rank, _ = lstsq(scaled, yc, cond=1e-10, lapack_driver="gelsy", check_finite=False,
                                        overwrite_a=True)
        del scaled
        beta = beta_scaled / scale
        fitted_c = _centred_product(X, x_mean, beta)
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


def _centred_columns(X: np.ndarray, mean: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """X - mean as a new column-major array (for LAPACK to overwrite without a copy of its own) and the norms
    of its columns."""
    centred = np.empty(X.shape, order="F")
    np.subtract(X, mean, out=centred)
    return centred, np.sqrt(np.einsum("ij,ij->j", centred, centred))


_PRODUCT_ROWS = 65536
"""Rows per block of :func:`_centred_product`."""


def _centred_product(X: np.ndarray, x_mean: np.ndarray, beta: np.ndarray) -> np.ndarray:
    """(X - x_mean) @ beta in blocks of rows: the centred design is never held whole, and centring before the
    product keeps the digits that X @ beta - x_mean @ beta would cancel (NIST Longley)."""
    out = np.empty(X.shape[0])
    for start in range(0, X.shape[0], _PRODUCT_ROWS):
        block = slice(start, start + _PRODUCT_ROWS)
        out[block] = (X[block] - x_mean) @ beta
    return out


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


def leverage(X: np.ndarray) -> np.ndarray:
    """Hat values h_ii of the least-squares fit on [1, X] (Hoaglin and Welsch 1978).

    h_ii = 1/n + the squared norm of row i of Q, Q an orthonormal basis of
    the centred columns; it orders the rows as the Mahalanobis distance of
    their regressor values from the centre does.  Columns repeating a
    direction add nothing (pivoted QR, :func:`full_rank_columns`).
    """
    X = np.asarray(X, dtype=np.float64)
    if X.ndim == 1:
        X = X[:, None]
    n = X.shape[0]
    columns = full_rank_columns(X)
    if columns.shape[1] == 0:
        return np.full(n, 1.0 / n)
    q, _ = np.linalg.qr(columns - columns.mean(axis=0), mode="reduced")
    return 1.0 / n + np.einsum("ij,ij->i", q, q)


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


def bspline_basis(x: np.ndarray, df: int, degree: int = 3) -> np.ndarray:
    """Cubic B-spline basis with ``df`` columns and interior knots at quantiles of x.

    The columns sum to one, so the basis spans the constant; callers fitting
    with an intercept drop the first column.  A check that fits several
    splines on one regressor takes them from a :class:`RegressorDesigns`
    instead of calling this again.
    """
    return _bspline_basis(np.asarray(x, dtype=np.float64), df, degree)


def full_rank_columns(X: np.ndarray, tolerance: float = 1e-10) -> np.ndarray:
    """The columns of X that are linearly independent of the intercept and of each other.

    A pivoted QR of the centred, unit-norm columns keeps a column while its
    pivot exceeds ``tolerance`` times the largest.  :func:`ols`'s least-squares
    driver does not detect exact collinearity (a binary regressor and its
    square, a spline basis on tied x) and then returns a wrong RSS and rank,
    so designs that can repeat a direction are screened here first.
    """
    from scipy.linalg import qr

    X = np.asarray(X, dtype=np.float64)
    if X.ndim == 1:
        X = X[:, None]
    # Centred and scaled in one column-major array that the QR overwrites, so a tall design is held twice at
    # most (the caller's and this one), not four times.
    unit, norms = _centred_columns(X, X.mean(axis=0))
    scale = norms.max() if norms.size else 0.0
    candidates = np.flatnonzero(norms > tolerance * max(scale, np.finfo(float).tiny))
    if candidates.size == 0:
        return X[:, :0]
    if candidates.size < X.shape[1]:
        unit = np.asfortranarray(unit[:, candidates])
    unit /= norms[candidates]
    # mode="raw" runs the same pivoted factorisation as "economic" and
    # returns the same R and pivots, without forming the unused Q.
    _, r, pivots = qr(unit, mode="raw", pivoting=True, overwrite_a=True)
    del unit
    diagonal = np.abs(np.diag(r))
    kept = pivots[: int(np.sum(diagonal > tolerance * diagonal[0]))]
    return X[:, np.sort(candidates[kept])]


def white_design(regressors: np.ndarray) -> np.ndarray:
    """Levels, squares and pairwise cross-products of the columns (no constant)."""
    Z = np.asarray(regressors, dtype=np.float64)
    if Z.ndim == 1:
        Z = Z[:, None]
    k = Z.shape[1]
    first, second = np.triu_indices(k)
    return np.column_stack([Z, Z[:, first] * Z[:, second]])


class RegressorDesigns:
    """The designs that checks fit on one regressor, each built on first use and then kept by this object.

    One direction of a pair fits several models on the same regressor: the
    spline F-test, the spread of the spline residual and the report's plot
    use the same spline fit, and White's test runs on the straight-line
    residual and on the spline residual with the same design [1, x, x^2].
    The caller that owns the regressor builds one ``RegressorDesigns`` and
    hands it to each of those checks, as a fitted model is handed to its
    diagnostics; nothing is remembered anywhere else, so two checks running
    at once share nothing.

    Every array returned is read-only (a writeable copy is one ``.copy()``
    away) and has the memory layout the direct computation gives, so least
    squares on it rounds exactly as on a freshly built design.
    """

    __slots__ = ("values", "_built", "_spline_fits")

    def __init__(self, x: np.ndarray):
        x = np.asarray(x, dtype=np.float64)
        if x.ndim != 1:
            raise ValueError(f"a regressor is one-dimensional, got shape {x.shape}")
        self.values = x
        """The regressor the designs are built from (not copied: the owner must not write to it)."""
        self._built: dict[tuple, np.ndarray] = {}
        self._spline_fits: dict[int, tuple[np.ndarray, LinearFit]] = {}

    @classmethod
    def of(cls, x: np.ndarray, designs: RegressorDesigns | None = None) -> RegressorDesigns:
        """``designs`` when given, after checking they were built from the values of x; else new ones for x."""
        if designs is None:
            return cls(x)
        if not (x is designs.values or (x.shape == designs.values.shape and np.array_equal(x, designs.values))):
            raise ValueError("the designs handed to a check were built from another regressor")
        return designs

    def _kept(self, key: tuple, build) -> np.ndarray:
        value = self._built.get(key)
        if value is None:
            value = self._built[key] = _read_only(build())
        return value

    def spline_basis(self, df: int, degree: int = 3) -> np.ndarray:
        """:func:`bspline_basis` of the regressor."""
        return self._kept(("spline basis", int(df), int(degree)),
                          lambda: _bspline_basis(self.values, int(df), int(degree)))

    def spline_design(self, df: int, tolerance: float = 1e-10) -> np.ndarray:
        """:func:`full_rank_columns` of the cubic spline basis without its first column (the intercept's stand-in)."""
        return self._kept(("spline design", int(df), float(tolerance)),
                          lambda: full_rank_columns(self.spline_basis(df)[:, 1:], tolerance))

    def white_design(self) -> np.ndarray:
        """:func:`full_rank_columns` of White's design [x, x^2] of the regressor."""
        return self._kept(("white design",), lambda: full_rank_columns(white_design(self.values)))

    def spline_fit(self, df: int, response: np.ndarray) -> LinearFit:
        """:func:`ols` of ``response`` on :meth:`spline_design`, kept for the last response it was asked for.

        The response is recognised by identity (the same array object), so a
        fit is never handed out for other values; its residuals are read-only.
        """
        kept = self._spline_fits.get(int(df))
        if kept is not None and kept[0] is response:
            return kept[1]
        fit = ols(self.spline_design(df), response)
        fit.residuals.flags.writeable = False
        self._spline_fits[int(df)] = (response, fit)
        return fit


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
