"""Pure-NumPy dense implementation of the kernels, for tests and small n.

A polynomial is given as dense symmetric tensors {p: T_p} with H(x) = sum_p T_p(x, ..., x).
For symmetric T of degree p,

    grad H_p(x) = p T_p(x, ..., x, .),   Hess H_p(x) = p (p - 1) T_p(x, ..., x, ., .),

computed by contracting x into the last axes with matrix products. Memory is n^p numbers per
degree, so this is only for small n. It shares no code with the Rust kernels; building the
dense tensors of an instance (``dense_tensors``) goes through ``Hamiltonian.to_dense``, which
uses the core's table of packed index tuples (itself tested against ``itertools``).

Inputs are checked as the kernels check theirs (shapes, finite values, degrees 1..8), and a
tensor that is not symmetric is refused: the formulas above would silently give the gradient
and Hessian of its symmetrization with entries exchanged.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from .errors import ShapeError
from .model.arrays import as_directions, as_float_array, as_point
from .model.dense import require_symmetric
from .model.mixture import _check_degree


def _checked(tensors: object, x: object) -> tuple[dict[int, np.ndarray], np.ndarray]:
    """The tensors as float64 arrays and x as a float64 point, after the checks every kernel
    of the package makes: degrees 1..8, shapes (n,)*p with one n, finite entries, symmetric
    tensors (the formulas of the module doc hold for symmetric ones only; a non-symmetric T
    gave a gradient with its entries exchanged), and x of shape (n,)."""
    if not isinstance(tensors, Mapping) or not tensors:
        raise TypeError(
            f"tensors must be a non-empty mapping degree -> dense tensor, got {type(tensors)}"
        )
    out: dict[int, np.ndarray] = {}
    n = None
    for p, t in tensors.items():
        p = _check_degree(p)  # the Mixture's own check: the same words for a bad degree
        arr = as_float_array(t, f"the degree-{p} tensor")
        if (
            arr.ndim != p
            or len(set(arr.shape)) != 1
            or arr.shape[0] < 1
            or n not in (None, arr.shape[0])
        ):
            same = "" if n is None else f" with n = {n}, as for the other degrees"
            raise ShapeError(
                f"the degree-{p} tensor must have shape (n,)*{p}, n >= 1{same}; got {arr.shape}"
            )
        n = arr.shape[0]
        require_symmetric(arr, advice=" symmetrize it first (the formulas need a symmetric T)")
        out[p] = arr
    return out, as_point(x, n)


def _contract(tensor: np.ndarray, x: np.ndarray, times: int) -> np.ndarray:
    out = tensor
    for _ in range(times):
        out = out @ x
    return out


def energy(tensors: Mapping[int, np.ndarray], x: np.ndarray) -> float:
    """H(x) = sum_p T_p(x, ..., x)."""
    tensors, x = _checked(tensors, x)
    return float(sum(_contract(t, x, p) for p, t in tensors.items()))


def gradient(tensors: Mapping[int, np.ndarray], x: np.ndarray) -> np.ndarray:
    """grad H(x) = sum_p p T_p(x, ..., x, .) (tensors must be symmetric)."""
    tensors, x = _checked(tensors, x)
    n = x.shape[0]
    out = np.zeros(n)
    for p, t in tensors.items():
        out += p * _contract(t, x, p - 1)
    return out


def hessian(tensors: Mapping[int, np.ndarray], x: np.ndarray) -> np.ndarray:
    """Hess H(x) = sum_{p >= 2} p (p-1) T_p(x, ..., x, ., .) (tensors must be symmetric)."""
    tensors, x = _checked(tensors, x)
    n = x.shape[0]
    out = np.zeros((n, n))
    for p, t in tensors.items():
        if p >= 2:
            out += p * (p - 1) * _contract(t, x, p - 2)
    return out


def hvp(tensors: Mapping[int, np.ndarray], x: np.ndarray, v: np.ndarray) -> np.ndarray:
    """Hess H(x) v, for v of shape (n,) or (n, k)."""
    hess = hessian(tensors, x)
    return hess @ as_directions(v, hess.shape[0])


def dense_tensors(ham, max_bytes: int | None = None) -> dict[int, np.ndarray]:
    """{p: ham.to_dense(p)} for every degree of a :class:`orthoclimb.Hamiltonian`."""
    kw = {} if max_bytes is None else {"max_bytes": max_bytes}
    return {p: ham.to_dense(p, **kw) for p in ham.degrees}
