"""Pure-NumPy dense implementation of the kernels, for tests and small n.

A polynomial is given as dense symmetric tensors {p: T_p} with H(x) = sum_p T_p(x, ..., x).
For symmetric T of degree p,

    grad H_p(x) = p T_p(x, ..., x, .),   Hess H_p(x) = p (p - 1) T_p(x, ..., x, ., .),

computed by contracting x into the last axes with matrix products. Memory is n^p numbers per
degree, so this is only for small n. It shares no code with the Rust kernels; building the
dense tensors of an instance (``dense_tensors``) goes through ``Hamiltonian.to_dense``, which
uses the core's table of packed index tuples (itself tested against ``itertools``).
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np


def _contract(tensor: np.ndarray, x: np.ndarray, times: int) -> np.ndarray:
    out = tensor
    for _ in range(times):
        out = out @ x
    return out


def energy(tensors: Mapping[int, np.ndarray], x: np.ndarray) -> float:
    """H(x) = sum_p T_p(x, ..., x)."""
    return float(sum(_contract(t, x, p) for p, t in tensors.items()))


def gradient(tensors: Mapping[int, np.ndarray], x: np.ndarray) -> np.ndarray:
    """grad H(x) = sum_p p T_p(x, ..., x, .) (tensors must be symmetric)."""
    n = x.shape[0]
    out = np.zeros(n)
    for p, t in tensors.items():
        out += p * _contract(t, x, p - 1)
    return out


def hessian(tensors: Mapping[int, np.ndarray], x: np.ndarray) -> np.ndarray:
    """Hess H(x) = sum_{p >= 2} p (p-1) T_p(x, ..., x, ., .) (tensors must be symmetric)."""
    n = x.shape[0]
    out = np.zeros((n, n))
    for p, t in tensors.items():
        if p >= 2:
            out += p * (p - 1) * _contract(t, x, p - 2)
    return out


def hvp(tensors: Mapping[int, np.ndarray], x: np.ndarray, v: np.ndarray) -> np.ndarray:
    """Hess H(x) v."""
    return hessian(tensors, x) @ v


def dense_tensors(ham, max_bytes: int | None = None) -> dict[int, np.ndarray]:
    """{p: ham.to_dense(p)} for every degree of a :class:`orthoclimb.Hamiltonian`."""
    kw = {} if max_bytes is None else {"max_bytes": max_bytes}
    return {p: ham.to_dense(p, **kw) for p in ham.degrees}
