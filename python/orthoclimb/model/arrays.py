"""Validation and conversion of the arrays users pass to the kernels."""

from __future__ import annotations

import math
import reprlib

import numpy as np

from ..errors import NonFiniteError, ShapeError


def digits(value: int) -> int:
    """About how many decimal digits ``value`` has, without str() (Python refuses to convert
    integers of over 4300 digits to text)."""
    return int(abs(value).bit_length() * math.log10(2)) + 1


def real_array(a: object, name: str) -> np.ndarray:
    """``a`` as a NumPy array of a real dtype (float, int or uint, not converted), or the
    exception that names what it is: TypeError for masked arrays (np.asarray would drop the
    mask), booleans, complex numbers and non-numeric data (strings, dates, None), ShapeError
    for ragged nesting, ValueError for an integer beyond float64's range. Python integers
    too large for int64 (an object array) are converted to float64."""
    if isinstance(a, np.ma.MaskedArray):
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
    if kind == "O" and all(type(v) is int for v in arr.flat):  # ints beyond int64
        try:
            return np.asarray(arr, dtype=np.float64)
        except OverflowError:
            top = int(np.finfo(np.float64).max)
            big = max((v for v in arr.flat), key=abs) if arr.size else 0
            big = big if abs(big) > top else top
            raise ValueError(
                f"{name} holds an integer beyond float64's range (about {digits(big)} digits)"
            ) from None
    if kind == "b":
        raise TypeError(f"{name} must be a real array, got a boolean array")
    if kind == "c":
        raise TypeError(f"{name} must be a real array, got complex dtype {arr.dtype}")
    if kind not in "fiu":
        raise TypeError(
            f"{name} must be a real numeric array, got {reprlib.repr(a)} (dtype {arr.dtype})"
        )
    return arr


_CHECKED_COPY = 1 << 26
"""Bytes above which :func:`as_float_array` checks the available memory before a copy."""


def as_float_array(a: object, name: str) -> np.ndarray:
    """A C-contiguous, aligned float64 copy or view of `a`, finite. Integers are converted
    (and an unaligned view copied); the rest of :func:`real_array`'s refusals apply, and a
    value that is finite but beyond float64's range (a long double) is named as such rather
    than as the infinity it would become. A copy of more than ``_CHECKED_COPY`` bytes (a
    broadcast view of a large batch, say) is refused first when it does not fit in the
    available memory."""
    arr = real_array(a, name)
    copy_bytes = 8 * arr.size
    if copy_bytes > _CHECKED_COPY and not (arr.dtype == np.float64 and arr.flags.c_contiguous):
        from .memory import require_memory  # (memory imports this module)

        require_memory(
            copy_bytes,
            f"a float64 copy of {name} (shape {arr.shape}, dtype {arr.dtype})",
            skip="pass a float64 C-contiguous array to avoid the copy, or a smaller one",
        )
    if arr.dtype.kind == "f" and arr.dtype.itemsize > 8:  # a long double may overflow here
        with np.errstate(over="ignore"):
            out = np.asarray(arr, dtype=np.float64, order="C")
    else:  # (no errstate on the common path: it costs about 1 us a call)
        out = np.asarray(arr, dtype=np.float64, order="C")
    if not out.flags.aligned:  # a view at an odd byte offset: the core reads aligned slices
        out = out.copy()
    if not np.isfinite(out).all():
        bad = np.argwhere(~np.isfinite(out))[0]
        where = tuple(int(i) for i in bad)
        if np.isfinite(arr[where]):
            raise ValueError(
                f"{name} holds {arr[where]!r} at index {where}, beyond float64's range"
            )
        raise NonFiniteError(
            f"{name} holds a non-finite value {out[where]} at index {where}"
            " (NaN and infinity are not allowed)"
        )
    return out


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
