"""The one place where check functions validate array input."""

from __future__ import annotations

import numpy as np

from preflight.errors import InputError


def as_vector(values, name: str = "x", min_n: int = 3) -> np.ndarray:
    """Return ``values`` as a finite 1-D float64 array of length >= ``min_n``.

    A copy is made only when needed; callers must not write to the result.
    """
    arr = np.asarray(values, dtype=np.float64)
    if arr.ndim == 2 and 1 in arr.shape:
        arr = arr.reshape(-1)
    if arr.ndim != 1:
        raise InputError(f"{name} must be one-dimensional, got shape {arr.shape}")
    if arr.shape[0] < min_n:
        raise InputError(f"{name} needs at least {min_n} observations, got {arr.shape[0]}")
    if not np.all(np.isfinite(arr)):
        raise InputError(f"{name} contains NaN or infinite values")
    return arr


def as_matrix(values, name: str = "X", min_n: int = 3, allow_empty_columns: bool = True) -> np.ndarray:
    """Return ``values`` as a finite 2-D float64 array (n, k); a vector becomes (n, 1)."""
    arr = np.asarray(values, dtype=np.float64)
    if arr.ndim == 1:
        arr = arr.reshape(-1, 1)
    if arr.ndim != 2:
        raise InputError(f"{name} must be two-dimensional, got shape {arr.shape}")
    if arr.shape[0] < min_n:
        raise InputError(f"{name} needs at least {min_n} rows, got {arr.shape[0]}")
    if arr.shape[1] == 0 and not allow_empty_columns:
        raise InputError(f"{name} has no columns")
    if not np.all(np.isfinite(arr)):
        raise InputError(f"{name} contains NaN or infinite values")
    return arr


def same_length(*arrays: np.ndarray, names: tuple[str, ...] | None = None) -> int:
    lengths = {a.shape[0] for a in arrays}
    if len(lengths) != 1:
        label = ", ".join(names) if names else "inputs"
        raise InputError(f"{label} must have the same number of observations, got {sorted(lengths)}")
    return lengths.pop()


def unit_scaled(values: np.ndarray) -> np.ndarray:
    """``values`` times the power of two that brings its largest magnitude into [0.5, 1) (per column for 2-D).

    Exact in floating point (short of the subnormal range), so a check gives
    the same digits it would in the data's own units, while sums of squares
    of 1e-200 or 1e200 no longer underflow or overflow, and a relative
    tolerance against a magnitude of about 1 is the same in any units.
    """
    if values.size == 0:
        return values
    largest = np.abs(values).max(axis=0)
    exponents = np.where(largest > 0, np.frexp(largest)[1], 0)
    return np.ldexp(values, -exponents)
