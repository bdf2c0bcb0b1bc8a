"""Validation and conversion of the arrays users pass to the kernels."""

from __future__ import annotations

import reprlib

import numpy as np

from ..errors import NonFiniteError, ShapeError


def as_float_array(a: object, name: str) -> np.ndarray:
    """A C-contiguous float64 copy or view of `a`. Integers are converted; booleans, complex
    numbers and non-numeric data are refused with TypeError."""
    if isinstance(a, np.ma.MaskedArray):  # np.asarray would drop the mask silently
        raise TypeError(
            f"{name} is a masked array; pass a.filled(value) or a.data to say what masked"
            " entries mean"
        )
    try:
        arr = np.asarray(a)
    except (ValueError, TypeError) as exc:  # ragged nested lists and the like
        raise ShapeError(
            f"{name} is not a rectangular numeric array: {reprlib.repr(a)} ({exc})"
        ) from None
    kind = arr.dtype.kind
    if kind == "b":
        raise TypeError(f"{name} must be a real array, got a boolean array")
    if kind == "c":
        raise TypeError(f"{name} must be a real array, got complex dtype {arr.dtype}")
    if kind not in "fiu":
        raise TypeError(f"{name} must be a real numeric array, got dtype {arr.dtype}")
    arr = np.asarray(arr, dtype=np.float64, order="C")
    if not np.isfinite(arr).all():
        bad = np.argwhere(~np.isfinite(arr))[0]
        where = tuple(int(i) for i in bad)
        raise NonFiniteError(
            f"{name} holds a non-finite value {arr[where]} at index {where}"
            " (NaN and infinity are not allowed)"
        )
    return arr


def as_points(x: object, n: int, name: str = "x") -> np.ndarray:
    """x as shape (n,) or (b, n) float64, b >= 1."""
    arr = as_float_array(x, name)
    if arr.ndim == 1 and arr.shape[0] == n:
        return arr
    if arr.ndim == 2 and arr.shape[1] == n and arr.shape[0] >= 1:
        return arr
    raise ShapeError(f"{name} must have shape ({n},) or (b, {n}) with b >= 1, got {arr.shape}")


def as_point(x: object, n: int, name: str = "x") -> np.ndarray:
    """x as shape (n,) float64."""
    arr = as_float_array(x, name)
    if arr.shape != (n,):
        raise ShapeError(f"{name} must have shape ({n},), got {arr.shape}")
    return arr


def as_directions(v: object, n: int, name: str = "v") -> np.ndarray:
    """v as shape (n,) or (n, k) float64, k >= 1."""
    arr = as_float_array(v, name)
    if arr.shape == (n,) or (arr.ndim == 2 and arr.shape[0] == n and arr.shape[1] >= 1):
        return arr
    raise ShapeError(f"{name} must have shape ({n},) or ({n}, k) with k >= 1, got {arr.shape}")


def as_flag(value: object, name: str) -> bool:
    """``value`` as a bool; anything but True/False (say the string "no", which is truthy) is
    a TypeError naming it."""
    if not isinstance(value, (bool, np.bool_)):
        raise TypeError(f"{name} must be True or False, got {value!r}")
    return bool(value)
