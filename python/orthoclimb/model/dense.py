"""Conversion between packed coefficients and dense symmetric tensors (small n only).

For a sorted multiset m with c(m) = p! / prod_i mult_i(m)! orderings, the dense symmetric
tensor of the same polynomial has T[any ordering of m] = a_m / c(m), and conversely
a_m = c(m) T[m].
"""

from __future__ import annotations

import itertools
import math

import numpy as np

from .. import _core
from ..errors import ShapeError
from .memory import format_bytes

DEFAULT_DENSE_LIMIT = 2**31
"""Default largest dense tensor, in bytes, that `to_dense` builds (2 GiB)."""


def multisets(n: int, p: int) -> np.ndarray:
    """All sorted index tuples of 0..n of length p in packed order, shape (C(n+p-1,p), p)."""
    return _core.multiset_table(n, p)


def orderings(idx: np.ndarray) -> np.ndarray:
    """c(m) for each sorted row of `idx` (number of distinct orderings), as float64."""
    count, p = idx.shape
    run = np.ones(count, dtype=np.int64)
    denom = np.ones(count, dtype=np.int64)
    for j in range(1, p):
        same = idx[:, j] == idx[:, j - 1]
        run = np.where(same, run + 1, 1)
        denom *= np.where(same, run, 1)
    return math.factorial(p) / denom.astype(np.float64)


def dense_nbytes(n: int, p: int) -> int:
    return 8 * n**p


def to_dense(coeffs: np.ndarray, n: int, p: int, max_bytes: int = DEFAULT_DENSE_LIMIT):
    """The symmetric (n,)*p float64 tensor with the polynomial of packed `coeffs`."""
    need = dense_nbytes(n, p)
    if need > max_bytes:
        raise ValueError(
            f"a dense degree-{p} tensor for n = {n} needs {need} bytes ({format_bytes(need)}),"
            f" above the limit max_bytes = {max_bytes}; raise max_bytes if you have the memory"
        )
    idx = multisets(n, p)
    values = coeffs / orderings(idx)
    tensor = np.zeros((n,) * p, dtype=np.float64)
    for perm in set(itertools.permutations(range(p))):
        tensor[tuple(idx[:, list(perm)].T)] = values
    return tensor


def max_asymmetry(tensor: np.ndarray) -> float:
    """Largest |T - T permuted| over all axis permutations."""
    worst = 0.0
    for perm in itertools.permutations(range(tensor.ndim)):
        worst = max(worst, float(np.max(np.abs(tensor - tensor.transpose(perm)))))
    return worst


def symmetrized(tensor: np.ndarray) -> np.ndarray:
    """Average of the tensor over all permutations of its axes."""
    perms = list(itertools.permutations(range(tensor.ndim)))
    total = np.zeros_like(tensor)
    for perm in perms:
        total += tensor.transpose(perm)
    return total / len(perms)


def pack(tensor: np.ndarray, p: int, symmetrize: bool, rtol: float = 1e-10) -> np.ndarray:
    """Packed coefficients a_m = c(m) T[m] of a dense tensor of shape (n,)*p.

    A tensor that is not symmetric (largest asymmetry above rtol * max|T|) is refused unless
    `symmetrize`, in which case it is first averaged over axis permutations (that keeps the
    polynomial T(x, ..., x) unchanged).
    """
    if tensor.ndim != p or len(set(tensor.shape)) != 1:
        raise ShapeError(f"a degree-{p} tensor must have shape (n,)*{p}, got {tensor.shape}")
    n = tensor.shape[0]
    if n < 1:
        raise ShapeError(f"a degree-{p} tensor must have n >= 1, got shape {tensor.shape}")
    if p >= 2:
        scale = float(np.max(np.abs(tensor))) if tensor.size else 0.0
        asym = max_asymmetry(tensor)
        if asym > rtol * max(scale, 1e-300):
            if not symmetrize:
                raise ValueError(
                    f"the degree-{p} tensor is not symmetric (largest difference under an "
                    f"axis permutation {asym:.3g}, largest entry {scale:.3g}); pass "
                    "symmetrize=True to average it over permutations"
                )
            tensor = symmetrized(tensor)
    idx = multisets(n, p)
    return np.ascontiguousarray(tensor[tuple(idx.T)] * orderings(idx))
