"""Geometry of the sphere of radius r in R^n, and derivatives read off one Hessian pass.

Tangent space at x (|x| = r): the orthogonal complement of u = x/|x|, with projector
P = I - u u^T. The retraction used everywhere is the metric projection R(y) = r y/|y|.

Reading the energy and the gradient off the Hessian (exact identities: Euler's theorem on
homogeneous functions). Write H = H_1 + H_2 + sum_{p >= 3} H_p. Then Hess H_1 = 0, Hess H_2 = C is
the constant matrix Hess H(0), and for each homogeneous part Hess H_p(x) x = (p - 1) grad H_p(x) and
x . grad H_p(x) = p H_p(x) (Euler). So when at most one degree p >= 3 is present,

    grad H(x) = h + C x + (Hess H(x) - C) x / (p - 1),
    H(x)      = h . x + x.C x / 2 + x.(Hess H(x) - C) x / (p (p - 1)),

with h = grad H_1 (the field coefficients, constant). The Hessian pass then also gives H and
grad H for free; with two or more degrees >= 3 one extra energy-and-gradient pass is needed.
"""

from __future__ import annotations

import math

import numpy as np

from ..model.hamiltonian import Hamiltonian

__all__ = [
    "HessianReader",
    "field_direction",
    "norm",
    "project_tangent",
    "quadratic_part",
    "random_unit",
    "retract",
]


def norm(a: np.ndarray) -> float:
    """|a|, the Euclidean norm (Frobenius for a matrix). NumPy sums the squares, which overflow
    for entries above about 1e154 and lose digits below about 1e-154. Where NumPy's value is
    finite and above 1e-140 it is returned, bit for bit (squares that underflowed there weigh
    under 1e-27 of the sum per entry); otherwise the norm is taken of a / max |a_i| and scaled
    back, which may differ from NumPy's in the last bit."""
    with np.errstate(over="ignore", under="ignore"):
        value = float(np.linalg.norm(a))
    if 1e-140 < value < math.inf:
        return value
    top = float(np.abs(a).max()) if a.size else 0.0
    if top == 0.0 or not math.isfinite(top):
        return value
    return top * float(np.linalg.norm(a / top))


def random_unit(n: int, rng: np.random.Generator) -> np.ndarray:
    """A uniformly random point of the unit sphere S^{n-1} (normalized standard Gaussian)."""
    while True:
        g = rng.standard_normal(n)
        size = norm(g)
        if size > 0.0:
            return g / size


def field_direction(h: np.ndarray) -> np.ndarray:
    """e = h/|h| for the degree-1 coefficients h (the field's direction), scaled by max |h_i|
    first: |h| overflows for n gamma_1 above about 1e154."""
    h = h / np.abs(h).max()
    return h / norm(h)


def project_tangent(v: np.ndarray, u: np.ndarray) -> np.ndarray:
    """P v = v - u (u . v) for a unit vector u (the tangent part of v at x = |x| u)."""
    return v - u * float(u @ v)


def retract(y: np.ndarray, radius: float = 1.0) -> np.ndarray:
    """Metric-projection retraction onto the sphere of the given radius: r y / |y|."""
    return (radius / norm(y)) * y


def quadratic_part(ham: Hamiltonian) -> Hamiltonian:
    """The degree-2 part of ``ham`` as an instance of its own (``ham`` itself when that is all
    it has), for Hess H(0) = C at the cost of its n(n+1)/2 coefficients instead of a pass over
    all of them. Its Hessian at 0 is the whole instance's bit for bit: at x = 0 every term of
    degree >= 3 adds exactly +-0 to each entry (each carries a factor x_i) and a field has no
    curvature, so each entry is the same single product of a degree-2 coefficient (whose
    float32 value float64 holds exactly). Its products C v are not: they sum n terms, split
    into work items by the instance's size, so they may differ in the last bit."""
    if set(ham.degrees) == {2}:
        return ham
    return Hamiltonian.from_coefficients(ham.n, {2: ham.coefficients(2)})


class HessianReader:
    """Energy and gradient of ``ham`` from its Hessian at the same point (see module doc).

    ``exact`` tells whether the identities apply (at most one degree >= 3); otherwise
    :meth:`energy_gradient` falls back to one ``ham.energy_and_gradient`` pass.
    """

    def __init__(self, ham: Hamiltonian):
        self.ham = ham
        degrees = ham.degrees
        high = [p for p in degrees if p >= 3]
        self.exact = len(high) <= 1
        self.high = high[0] if len(high) == 1 else None
        n = ham.n
        self.field = ham.coefficients(1) if 1 in degrees else None
        self.constant = (
            quadratic_part(ham).hessian(np.zeros(n)) if (2 in degrees and self.exact) else None
        )
        self.constant_only = max(degrees) <= 2

    def energy_gradient(self, x: np.ndarray, hess: np.ndarray) -> tuple[float, np.ndarray]:
        """(H(x), grad H(x)) given hess = Hess H(x) (full, unprojected)."""
        if not self.exact:
            return self.ham.energy_and_gradient(x)
        grad = np.zeros_like(x)
        energy = 0.0
        if self.field is not None:
            grad += self.field
            energy += float(self.field @ x)
        cx = None
        if self.constant is not None:
            cx = self.constant @ x
            grad += cx
            energy += 0.5 * float(x @ cx)
        if self.high is not None:
            p = self.high
            rx = hess @ x if cx is None else hess @ x - cx
            grad += rx / (p - 1)
            energy += float(x @ rx) / (p * (p - 1))
        return energy, grad
