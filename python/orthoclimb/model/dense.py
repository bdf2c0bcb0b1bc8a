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
from .memory import format_bytes, require_memory

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


def check_dense_size(n: int, p: int, max_bytes: int) -> None:
    """ValueError unless the (n,)*p float64 tensor takes at most ``max_bytes``, and
    InsufficientMemoryError when it does not fit in the memory available now."""
    need = dense_nbytes(n, p)
    if need > max_bytes:
        raise ValueError(
            f"a dense degree-{p} tensor for n = {n} needs {need} bytes ({format_bytes(need)}),"
            f" above the limit max_bytes = {max_bytes}; raise max_bytes if you have the memory"
        )
    require_memory(
        need,
        f"a dense degree-{p} tensor for n = {n}",
        skip="the packed kernels need no dense tensor",
    )


def to_dense(coeffs: np.ndarray, n: int, p: int, max_bytes: int = DEFAULT_DENSE_LIMIT):
    """The symmetric (n,)*p float64 tensor with the polynomial of packed `coeffs`."""
    check_dense_size(n, p, max_bytes)
    idx = multisets(n, p)
    values = coeffs / orderings(idx)
    tensor = np.zeros((n,) * p, dtype=np.float64)
    for perm in set(itertools.permutations(range(p))):
        tensor[tuple(idx[:, list(perm)].T)] = values
    return tensor


def _swap(p: int, i: int, j: int) -> list[int]:
    """The axis order of (n,)*p that exchanges axes i and j."""
    perm = list(range(p))
    perm[i], perm[j] = j, i
    return perm


def max_asymmetry(tensor: np.ndarray) -> float:
    """Largest |T - T with two adjacent axes exchanged|. It is zero exactly when T is
    symmetric, since the adjacent exchanges generate every permutation of the axes, and it
    takes p - 1 comparisons instead of p! (p = 8, n = 4: 6 s before)."""
    p = tensor.ndim
    worst = 0.0
    with np.errstate(over="ignore"):  # a difference beyond float64 is inf: as asymmetric
        for i in range(p - 1):
            swapped = tensor.transpose(_swap(p, i, i + 1))
            worst = max(worst, float(np.max(np.abs(tensor - swapped))))
    return worst


def symmetrized(tensor: np.ndarray) -> np.ndarray:
    """Average of the tensor over all p! permutations of its axes, in p(p-1)/2 exchanges:
    the transpositions (j, k) with j < k and the identity represent the cosets of the
    permutations of the first k axes among those of the first k + 1, so averaging over them
    for k = 1, .., p - 1 in turn averages over the whole group."""
    p = tensor.ndim
    out = np.array(tensor, dtype=np.float64, copy=True)
    # sums of up to p <= 8 entries near float64's top overflow before the division; there the
    # tensor is averaged at 2^-8 of its size (exact but for subnormal entries) and scaled back
    big = out.size > 0 and float(np.abs(out).max()) > 2.0**1015
    if big:
        out *= 2.0**-8
    for k in range(1, p):
        total = out.copy()
        for j in range(k):
            total += out.transpose(_swap(p, j, k))
        out = total / (k + 1)
    if big:
        out *= 2.0**8
    return out


def asymmetry_problem(tensor: np.ndarray, rtol: float = 1e-10) -> str | None:
    """None for a symmetric tensor, else what is wrong. Not symmetric means a difference under
    some axis permutation above rtol * max|T|; since any permutation is at most p(p-1)/2
    adjacent exchanges, a difference under one adjacent exchange above that bound divided by
    p(p-1)/2 is refused."""
    p = tensor.ndim
    if p < 2 or tensor.size == 0:
        return None
    scale = float(np.max(np.abs(tensor)))
    asym = max_asymmetry(tensor)
    if asym <= rtol * max(scale, 1e-300) / (p * (p - 1) // 2):
        return None
    return (
        f"the degree-{p} tensor is not symmetric (largest difference under an exchange of"
        f" two adjacent axes {asym:.3g}, largest entry {scale:.3g})"
    )


def require_symmetric(tensor: np.ndarray, rtol: float = 1e-10, advice: str = "") -> None:
    """ValueError (with ``advice`` appended after a semicolon) unless the tensor is
    symmetric in the sense of :func:`asymmetry_problem`."""
    problem = asymmetry_problem(tensor, rtol)
    if problem is not None:
        raise ValueError(problem + (";" + advice if advice else ""))


def pack(tensor: np.ndarray, p: int, symmetrize: bool, rtol: float = 1e-10) -> np.ndarray:
    """Packed coefficients a_m = c(m) T[m] of a dense tensor of shape (n,)*p.

    A tensor that is not symmetric (:func:`asymmetry_problem`) is refused unless `symmetrize`,
    in which case it is first averaged over axis permutations (that keeps the polynomial
    T(x, ..., x) unchanged).
    """
    if tensor.ndim != p or len(set(tensor.shape)) != 1:
        raise ShapeError(f"a degree-{p} tensor must have shape (n,)*{p}, got {tensor.shape}")
    n = tensor.shape[0]
    if n < 1:
        raise ShapeError(f"a degree-{p} tensor must have n >= 1, got shape {tensor.shape}")
    if symmetrize:
        if asymmetry_problem(tensor, rtol) is not None:
            tensor = symmetrized(tensor)
    else:
        require_symmetric(tensor, rtol, " pass symmetrize=True to average it over permutations")
    idx = multisets(n, p)
    with np.errstate(over="ignore"):
        packed = np.ascontiguousarray(tensor[tuple(idx.T)] * orderings(idx))
    if not np.all(np.isfinite(packed)):  # a finite entry times its count c(m) overflowed
        i = int(np.flatnonzero(~np.isfinite(packed))[0])
        raise ValueError(
            f"the degree-{p} tensor's entry at {tuple(int(v) for v in idx[i])} times its"
            f" number of orderings c(m) = {int(orderings(idx[i : i + 1])[0])} overflows float64"
            " (the packed coefficient a_m = c(m) T[m]); scale the tensor down"
        )
    return packed
