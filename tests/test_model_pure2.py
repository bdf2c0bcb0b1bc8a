"""Pure p = 2: the maximum over the sphere is a top eigenvalue.

For H(x) = sum_{i<=j} a_ij x_i x_j the symmetric matrix M with M_ii = a_ii and
M_ij = M_ji = a_ij / 2 gives H(x) = x^T M x, so max_{|x|=1} H = lambda_max(M) (exact;
Rayleigh). In law M = sqrt(n) (J + J^T)/2, whose top eigenvalue is about sqrt(2) n for large
n (Wigner semicircle edge of the GOE, any random-matrix text).
"""

from __future__ import annotations

import math

import numpy as np
import scipy.linalg
from scipy.sparse.linalg import eigsh

import orthoclimb as oc


def matrix_from_coefficients(a: np.ndarray, n: int) -> np.ndarray:
    """Independent reconstruction: the packed order (README, Conventions) for p = 2 is
    np.triu_indices(n) row by row."""
    iu = np.triu_indices(n)
    m = np.zeros((n, n))
    m[iu] = a
    return (m + m.T) / 2  # off-diagonal a_ij / 2 on both sides, diagonal a_ii


def test_maximum_over_sphere_is_top_eigenvalue():
    n = 80
    ham = oc.Hamiltonian.sample(oc.Mixture({2: 1.0}), n, seed=8)
    m = matrix_from_coefficients(ham.coefficients(2), n)
    top = scipy.linalg.eigh(m, eigvals_only=True)[-1]

    # Lanczos on the Hessian-vector kernel (Hess = 2M at any point) finds the top eigenpair
    vals, vecs = eigsh(ham.hessian_operator(np.zeros(n)), k=1, which="LA", tol=1e-12)
    assert abs(vals[0] / 2 - top) < 1e-9 * abs(top)
    # the energy kernel at that unit vector attains the maximum (Rayleigh quotient)
    assert abs(ham.energy(vecs[:, 0]) - top) < 1e-9 * abs(top)
    # shifted power iteration driven by the gradient kernel climbs to the same value
    shift = 2 * np.abs(m).sum(axis=1).max()  # >= 2 |lambda_min|, so grad + shift x is monotone
    x = np.random.default_rng(0).standard_normal(n)
    x /= np.linalg.norm(x)
    for _ in range(3000):
        y = ham.gradient(x) + shift * x
        x = y / np.linalg.norm(y)
    assert top - 1e-6 * abs(top) < ham.energy(x) <= top + 1e-9 * abs(top)
    # and the Hessian kernel is 2 M
    np.testing.assert_allclose(ham.hessian(np.ones(n)), 2 * m, rtol=0, atol=1e-12 * n)


def test_top_eigenvalue_per_spin_near_sqrt2_at_n_1000():
    # Wigner semicircle edge: lambda_max(M)/n -> sqrt(2); at n = 1000 the Tracy-Widom
    # fluctuations and the bias are of order n^(-2/3) ~ 0.01, so 0.05 is a loose bound.
    n = 1000
    ham = oc.Hamiltonian.sample(oc.Mixture({2: 1.0}), n, seed=1)
    m = matrix_from_coefficients(ham.coefficients(2), n)
    top = scipy.linalg.eigh(m, eigvals_only=True, subset_by_index=[n - 1, n - 1])[0]
    assert abs(top / n - math.sqrt(2)) < 0.05
