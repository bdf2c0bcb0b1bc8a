"""Input checks shared by the theory modules (private).

Every check raises a subclass of ValueError or TypeError whose message names the bad value.
"""

from __future__ import annotations

import math
import reprlib
from typing import Any

import numpy as np

from ..errors import NonFiniteError
from ..model.mixture import Mixture

# Entries shown of a long array in a message: the first and last _EDGE (array2string's
# summarization, for arrays of more than _SHOWN entries).
_EDGE = 3
_SHOWN = 8


def shown(values: Any) -> str:
    """An array as one line of text for a message: each entry as Python prints the float (all
    its digits: 0.9999999999999999 does not pass for 1), and of a long array only the first and
    last few entries, with ... between."""
    text = np.array2string(
        np.asarray(values, dtype=np.float64),
        separator=", ",
        threshold=_SHOWN,
        edgeitems=_EDGE,
        max_line_width=1 << 30,
        formatter={"float_kind": lambda v: repr(float(v))},
    )
    return text.replace("\n", "")


def given(value: Any) -> str:
    """Any value a caller passed, as short text for a message: a float array via
    :func:`shown`, anything else by ``reprlib`` (long lists and text cut short)."""
    if isinstance(value, np.ndarray) and value.dtype.kind == "f":
        return shown(value)
    return reprlib.repr(value)


def _where_in(arr: np.ndarray, mask: np.ndarray, name: str) -> str:
    """``name = value`` of the first entry flagged in ``mask``, with its index for arrays."""
    index = tuple(int(i) for i in np.argwhere(mask)[0])
    label = name if arr.ndim == 0 else f"{name}[{', '.join(map(str, index))}]"
    return f"{label} = {float(arr[index])!r}"


def check_mixture(mixture: Any, where: str) -> Mixture:
    """Return ``mixture`` if it is a :class:`Mixture`, else raise TypeError."""
    if not isinstance(mixture, Mixture):
        raise TypeError(
            f"{where}() takes an orthoclimb.Mixture, got {type(mixture).__name__} {mixture!r};"
            " build one with Mixture({p: gamma_p}) or Mixture.parse('2:1,4:0.3')"
        )
    return mixture


def check_overlap(q: Any, where: str, name: str = "q") -> np.ndarray:
    """Convert ``q`` to a float array and check that every entry is finite and in [0, 1].
    Booleans, text and None are refused (NumPy would read True as 1 and '0.5' as 0.5)."""
    as_array = None if q is None or isinstance(q, (str, bytes)) else np.asarray(q)
    kind = "" if as_array is None else as_array.dtype.kind
    if as_array is None or kind in "bUSc" or (kind == "O" and not _numeric_objects(as_array)):
        raise _not_real(q, where, name)
    try:
        arr = np.asarray(as_array, dtype=np.float64)
    except (TypeError, ValueError):
        raise _not_real(q, where, name) from None
    except OverflowError:  # an integer beyond float64 (not shown: it may be huge)
        raise ValueError(f"{where}(): {name} holds an integer beyond float64's range") from None
    if not np.all(np.isfinite(arr)):
        bad = _where_in(arr, ~np.isfinite(arr), name)
        raise NonFiniteError(f"{where}(): {name} must be finite, got {bad}")
    outside = (arr < 0.0) | (arr > 1.0)
    if np.any(outside):
        raise ValueError(
            f"{where}(): {name} must lie in [0, 1], got {_where_in(arr, outside, name)}"
        )
    return arr


def _not_real(q: Any, where: str, name: str) -> TypeError:
    return TypeError(f"{where}(): {name} must be a real number or an array of them, got {given(q)}")


def _numeric_objects(arr: np.ndarray) -> bool:
    """Whether an object array holds only real numbers, none of them a boolean."""
    return all(
        isinstance(v, (int, float, np.integer, np.floating)) and not isinstance(v, (bool, np.bool_))
        for v in arr.ravel()
    )


def check_positive(value: Any, where: str, name: str) -> float:
    """A finite real number > 0 (tolerances and similar); text such as "1e-3" is refused,
    as a text gamma is."""
    if isinstance(value, (bool, np.bool_, str, bytes)):
        raise _not_positive(value, where, name)
    try:
        out = float(value)
    except (TypeError, ValueError):
        raise _not_positive(value, where, name) from None
    except OverflowError:  # an integer beyond float64
        raise ValueError(f"{where}(): {name} is an integer beyond float64's range") from None
    if math.isnan(out) or math.isinf(out):
        raise NonFiniteError(f"{where}(): {name} must be finite, got {name} = {value!r}")
    if out <= 0.0:
        raise ValueError(f"{where}(): {name} must be > 0, got {name} = {value!r}")
    return out


def _not_positive(value: Any, where: str, name: str) -> TypeError:
    return TypeError(f"{where}(): {name} must be a positive number, got {given(value)}")


def check_count(value: Any, where: str, name: str, minimum: int) -> int:
    """An integer >= minimum."""
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        raise TypeError(f"{where}(): {name} must be an integer, got {given(value)}")
    if value < minimum:
        raise ValueError(f"{where}(): {name} must be >= {minimum}, got {name} = {value}")
    return int(value)


def scalar_or_array(arr: np.ndarray) -> Any:
    """A Python float for 0-d input, the array otherwise."""
    return float(arr) if arr.ndim == 0 else arr
