"""The top eigenvector of the Hessian restricted to the tangent space, by Lanczos.

The tangent Hessian at x (u = x/|x|, P = I - u u^T) is M_T = P M P, a symmetric matrix whose
restriction to u^perp is the object of SPEC section 5; u itself is an eigenvector of M_T with
eigenvalue 0, which lies inside the spectrum of the tangent block at every q > 0, so "the largest
eigenvalue of M_T" is the largest tangent one. Formed in place with two rank-one updates:

    P M P = M - u z^T - z u^T,   w = M u,   z = w - (u.w / 2) u      (BLAS dger).

Stopping rule. ARPACK (``scipy.sparse.linalg.eigsh``, which="LA") stops when the residual of the
Ritz pair satisfies |M_T y - theta y| <= tol_rel |theta|. A residual r bounds the distance from
theta to the spectrum by |r|, so passing tol_rel = delta n / |theta| gives a Rayleigh quotient
within delta n of an eigenvalue (the top one, since Lanczos with "LA" converges to it first), the
accuracy SPEC section 5 asks for, and no more. |theta| is taken from the previous step (the edge
moves by O(1/K) per step); on the first step from the Frobenius norm, an upper bound, so the
first tolerance is only stricter. The start vector is the previous step's eigenvector projected on
the new tangent space (warm start).
"""

from __future__ import annotations

import numpy as np
import scipy.linalg
from scipy.linalg.blas import dger
from scipy.sparse.linalg import ArpackNoConvergence, LinearOperator, eigsh

__all__ = ["project_matrix_inplace", "top_tangent_eigenpair"]


def project_matrix_inplace(m: np.ndarray, u: np.ndarray) -> np.ndarray:
    """Overwrite the C-contiguous symmetric m with P m P (P = I - u u^T, |u| = 1)."""
    w = m @ u
    z = w - (0.5 * float(u @ w)) * u
    mt = m.T  # Fortran-ordered view: dger updates it in place
    dger(-1.0, u, z, a=mt, overwrite_a=1)
    dger(-1.0, z, u, a=mt, overwrite_a=1)
    return m


def top_tangent_eigenpair(
    op: np.ndarray | LinearOperator, u: np.ndarray, v0: np.ndarray, rel_tol: float
) -> tuple[float, np.ndarray, bool]:
    """(theta, v, fallback): largest eigenvalue of the tangent operator ``op`` (already
    projected) and its unit eigenvector, projected on u^perp. ``fallback`` is True when ARPACK
    did not converge and the result came from its best Ritz pair (operator) or from a dense
    ``eigh`` of the top eigenvalue (matrix)."""
    fallback = False
    try:
        vals, vecs = eigsh(op, k=1, which="LA", v0=v0, tol=rel_tol)
        theta, v = float(vals[0]), vecs[:, 0]
    except ArpackNoConvergence as exc:
        fallback = True
        if isinstance(op, np.ndarray):
            n = op.shape[0]
            vals, vecs = scipy.linalg.eigh(op, subset_by_index=[n - 1, n - 1])
            theta, v = float(vals[0]), vecs[:, 0]
        elif exc.eigenvalues.size:
            theta, v = float(exc.eigenvalues[0]), exc.eigenvectors[:, 0]
        else:
            raise
    v = v - u * float(u @ v)
    norm = float(np.linalg.norm(v))
    if norm == 0.0:  # only if the tangent block were <= 0 and Lanczos returned u itself
        v = v0 - u * float(u @ v0)
        norm = float(np.linalg.norm(v))
    return theta, v / norm, fallback
