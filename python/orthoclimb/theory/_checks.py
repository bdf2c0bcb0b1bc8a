"""Input checks shared by the theory modules (private).

Every check raises a subclass of ValueError or TypeError whose message names the bad value.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from ..errors import NonFiniteError
from ..model.mixture import Mixture


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
    given = None if q is None or isinstance(q, (str, bytes)) else np.asarray(q)
    kind = "" if given is None else given.dtype.kind
    if given is None or kind in "bUSc" or (kind == "O" and not _numeric_objects(given)):
        raise TypeError(f"{where}(): {name} must be a real number or an array of them, got {q!r}")
    try:
        arr = np.asarray(given, dtype=np.float64)
    except (TypeError, ValueError):
        raise TypeError(
            f"{where}(): {name} must be a real number or an array of them, got {q!r}"
        ) from None
    except OverflowError:  # an integer beyond float64 (not shown: it may be huge)
        raise ValueError(f"{where}(): {name} holds an integer beyond float64's range") from None
    if not np.all(np.isfinite(arr)):
        bad = float(arr[~np.isfinite(arr)].flat[0])
        raise NonFiniteError(f"{where}(): {name} must be finite, got {name} = {bad!r}")
    outside = (arr < 0.0) | (arr > 1.0)
    if np.any(outside):
        bad = float(arr[outside].flat[0])
        raise ValueError(f"{where}(): {name} must lie in [0, 1], got {name} = {bad!r}")
    return arr


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
        raise TypeError(f"{where}(): {name} must be a positive number, got {value!r}")
    try:
        out = float(value)
    except (TypeError, ValueError):
        raise TypeError(f"{where}(): {name} must be a positive number, got {value!r}") from None
    except OverflowError:  # an integer beyond float64
        raise ValueError(f"{where}(): {name} is an integer beyond float64's range") from None
    if math.isnan(out) or math.isinf(out):
        raise NonFiniteError(f"{where}(): {name} must be finite, got {name} = {value!r}")
    if out <= 0.0:
        raise ValueError(f"{where}(): {name} must be > 0, got {name} = {value!r}")
    return out


def check_count(value: Any, where: str, name: str, minimum: int) -> int:
    """An integer >= minimum."""
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        raise TypeError(f"{where}(): {name} must be an integer, got {value!r}")
    if value < minimum:
        raise ValueError(f"{where}(): {name} must be >= {minimum}, got {name} = {value}")
    return int(value)


def scalar_or_array(arr: np.ndarray) -> Any:
    """A Python float for 0-d input, the array otherwise."""
    return float(arr) if arr.ndim == 0 else arr
