"""Dense reference implementations of the four kernels, for a symmetric tensor T of degree p.

    energy    H(x)       = T(x, ..., x)
    gradient  grad H(x)  = p T(x, ..., x, .)
    Hessian   Hess H(x)  = p (p-1) T(x, ..., x, ., .)
    HVP       Hess H(x) v = p (p-1) T(v, x, ..., x, .)

Each kernel is "contract these vectors into T, leave `free` axes, scale". The peers are
NumPy (a single matrix-vector product with the outer product of the vectors, a chain of
tensordots, and ``np.einsum(..., optimize=True)``), opt_einsum (``contract_expression``,
path found once) and, when importable, PyTorch CPU autograd for the gradient and the HVP.
All of them read the n^p float64 entries of T at least once per call.
"""

from __future__ import annotations

import string
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

KERNELS = ("energy", "gradient", "hessian", "hvp")


@dataclass(frozen=True)
class Contraction:
    """Contract ``vectors`` into the leading axes of T, keep ``free`` axes, times ``scale``."""

    vectors: tuple[np.ndarray, ...]
    free: int
    scale: float


def contraction(kernel: str, p: int, x: np.ndarray, v: np.ndarray) -> Contraction:
    """The contraction that computes `kernel` of T(x, ..., x) (v is the HVP direction)."""
    if kernel == "energy":
        return Contraction((x,) * p, 0, 1.0)
    if kernel == "gradient":
        return Contraction((x,) * (p - 1), 1, float(p))
    if kernel == "hessian":
        return Contraction((x,) * (p - 2), 2, float(p * (p - 1)))
    if kernel == "hvp":
        return Contraction((v,) + (x,) * (p - 2), 1, float(p * (p - 1)))
    raise ValueError(f"unknown kernel {kernel!r}")


def outer(vectors: Sequence[np.ndarray]) -> np.ndarray:
    """Flattened outer product v1 (x) v2 (x) ... (length n^k); [1.0] for no vectors."""
    out = np.ones(1)
    for vec in vectors:
        out = np.multiply.outer(out, vec).ravel()
    return out


def numpy_matmul(tensor: np.ndarray, c: Contraction) -> Callable[[], object]:
    """One BLAS matrix-vector product of T, viewed as n^(p-k) x n^k, with the outer product of
    the k contracted vectors (energy: the gradient's product, then a dot with x)."""
    n = tensor.shape[0]
    head = c.vectors[:-1] if c.free == 0 else c.vectors
    keep = tensor.ndim - len(head)
    matrix = tensor.reshape(n**keep, -1)

    def run():
        out = matrix @ outer(head)
        if c.free == 0:
            return c.scale * float(out @ c.vectors[-1])
        return c.scale * out.reshape((n,) * c.free)

    return run


def numpy_tensordot(tensor: np.ndarray, c: Contraction) -> Callable[[], object]:
    """A chain of ``np.tensordot`` calls, each contracting one leading axis with a vector."""

    def run():
        out = tensor
        for vec in c.vectors:
            out = np.tensordot(vec, out, axes=(0, 0))
        return c.scale * (float(out) if c.free == 0 else out)

    return run


def einsum_subscripts(p: int, c: Contraction) -> str:
    """E.g. 'abc,a,b->c' for the gradient at p = 3."""
    letters = string.ascii_letters[:p]
    k = len(c.vectors)
    return f"{letters}," + ",".join(letters[:k]) + "->" + letters[k:]


def numpy_einsum(tensor: np.ndarray, c: Contraction) -> Callable[[], object]:
    """``np.einsum(subscripts, T, *vectors, optimize=True)``."""
    subs = einsum_subscripts(tensor.ndim, c)

    def run():
        out = np.einsum(subs, tensor, *c.vectors, optimize=True)
        return c.scale * (float(out) if c.free == 0 else out)

    return run


def opt_einsum_contract(tensor: np.ndarray, c: Contraction) -> Callable[[], object]:
    """``opt_einsum.contract_expression`` built once for the shapes, then called."""
    import opt_einsum

    subs = einsum_subscripts(tensor.ndim, c)
    expr = opt_einsum.contract_expression(subs, tensor.shape, *(v.shape for v in c.vectors))

    def run():
        out = expr(tensor, *c.vectors)
        return c.scale * (float(out) if c.free == 0 else out)

    return run


NUMPY_VARIANTS = {
    "matmul": numpy_matmul,
    "tensordot": numpy_tensordot,
    "einsum": numpy_einsum,
}


def numpy_peers(tensor, p, x, v, kernel) -> dict[str, Callable[[], object]]:
    """variant -> zero-argument function computing `kernel` with NumPy on the dense T."""
    c = contraction(kernel, p, x, v)
    return {name: make(tensor, c) for name, make in NUMPY_VARIANTS.items()}


def torch_available() -> str | None:
    """torch's version when it can be imported, else None (it is never installed here)."""
    try:
        import torch
    except Exception:
        return None
    return str(torch.__version__)


def torch_peers(tensor, p, x, v, threads) -> dict[str, Callable[[], object]]:
    """kernel -> function for 'gradient' and 'hvp' by PyTorch CPU autograd of
    H(z) = (T viewed as n x n^(p-1)) @ (z (x) ... (x) z) . z, on T shared with NumPy."""
    import torch

    torch.set_num_threads(threads)
    n = tensor.shape[0]
    matrix = torch.from_numpy(tensor).reshape(n, -1)
    xt, vt = torch.from_numpy(x.copy()), torch.from_numpy(v.copy())

    def energy(z):
        w = z
        for _ in range(p - 2):
            w = torch.outer(w, z).reshape(-1)
        return (matrix @ w) @ z

    def gradient():
        z = xt.detach().requires_grad_(True)
        (g,) = torch.autograd.grad(energy(z), z)
        return g.numpy()

    def hvp():
        z = xt.detach().requires_grad_(True)
        (g,) = torch.autograd.grad(energy(z), z, create_graph=True)
        (hv,) = torch.autograd.grad(g, z, grad_outputs=vt)
        return hv.numpy()

    return {"gradient": gradient, "hvp": hvp}


def relative_error(value, reference) -> float:
    """|value - reference| / |reference| in the Euclidean (Frobenius) norm."""
    a = np.asarray(value, dtype=np.float64)
    b = np.asarray(reference, dtype=np.float64)
    scale = float(np.linalg.norm(b))
    return float(np.linalg.norm(a - b)) / (scale if scale > 0 else 1.0)
