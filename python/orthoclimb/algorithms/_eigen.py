"""The top eigenvector of the Hessian restricted to the tangent space: by Lanczos, or by a
dense solve in small spaces (see "Small spaces" below).

At x (u = x/|x|) the tangent space is u^perp, and each Hessian-ascent step needs the top
eigenpair of the Hessian M restricted to it. We work in an orthonormal basis B (n x (n-1)) of
u^perp, never formed: B = H[:, 1:] for the Householder reflector H = I - 2 w w^T that maps u to
-+e_1 (w = (u + s e_1)/|u + s e_1|, s = sign(u_1), which never cancels; Golub & Van Loan,
Matrix Computations, section 5.1). The restricted matrix B^T M B is the trailing (n-1) x (n-1) block
of H M H, formed in place with two rank-one updates (BLAS dger):

    H M H = M - w z^T - z w^T,   a = M w,   z = 2 a - 2 (w.a) w,

and as an operator B^T M B y = (H M H [0; y])[1:], O(n) besides the product with M. Working in
u^perp itself, not with the n x n matrix P M P (P = I - u u^T), matters when every tangent
eigenvalue is negative (small n, or late in a run): P M P has the extra eigenvalue 0 on u, and
Lanczos, whose vectors pick up a rounding-sized part along u, then converges to u instead.

Stopping rule. ARPACK (``scipy.sparse.linalg.eigsh``, which="LA") stops when the residual of the
Ritz pair satisfies |M_T y - theta y| <= tol_rel |theta|. A residual r bounds the distance from
theta to the spectrum by |r|, so passing tol_rel = delta n / |theta| gives a Rayleigh quotient
within delta n of an eigenvalue, the accuracy ``tol`` of ``hessian_ascent`` asks for, and no
more. |theta| is bounded by 1.25 times the
previous step's (the edge moves by O(1/K) per step); on the first step by the Frobenius norm
(dense) or, for the operator, by |grad H| + 1, which need not bound it: whenever the solved |theta|
exceeds the bound used, ``hessian_ascent`` solves again from the vector found with the tolerance
that |theta| gives, so every step's Rayleigh quotient is within delta n. The start vector is the
previous step's eigenvector projected on the new tangent space (warm start).

Which eigenvalue. A small residual says theta is near *an* eigenvalue, not that it is the top
one. Along a path the top two tangent eigenvalues trade places, and the warm start is then close
to the new second eigenvector; asked for one Ritz pair, ARPACK accepted that vector at once. In
24 runs of 40-50 steps (pure 3-spin and xi = q^2 + 0.09 q^4, n = 100-300) 4 of 1063 steps
stopped on the second eigenvalue, up to 0.035 per spin below the top (exact top from
``scipy.linalg.eigvalsh``), 35 times delta. Asking for the top two Ritz pairs (which="LA", k =
2) makes ARPACK iterate until both have converged, so the vector of the top one has to appear in
the Krylov space: 0 of the 1063 steps then missed, for about 45 % more time in the
eigen-solves, 5-19 % of a whole run (n = 600, pure 3-spin, 75 steps: 0.33-0.42 s against
0.50-0.60 s in a run of 1.4-1.7 s).
Lanczos certifies nothing about eigenvalues its space never saw, so this is a measured
safeguard, not a proof.

Small spaces. Dense tangent matrices of at most ``DIRECT_MAX`` = 200 dimensions are solved
exactly by ``scipy.linalg.eigh`` (LAPACK, the top eigenpair only), which has no tolerance and
no second-eigenvalue trap; an operator is formed as a matrix and solved so only up to
``OPERATOR_DIRECT_MAX`` = 16 dimensions (forming it takes a product per dimension).
ARPACK's Python round trip per product makes it the slower of the two there: runs with K =
100 (one BLAS thread, two alternating runs each, eigen-solve seconds per run) took 0.07
against 0.012-0.019 s at n = 40 (xi = q^2 + q^4/16), 0.15-0.25 against 0.08-0.13 s at n =
150 and 0.30-0.34 against 0.15-0.18 s at n = 220 (pure 3-spin), but 0.37 against 0.43-0.45 s
at n = 320 and 0.47-0.53 against 0.74 s at n = 400. The polished energies were the same in
all of these. Two such processes at once on two cores, as a study's workers run (one kernel
thread each, default K, four seeds, milliseconds per run, two rounds): 33-57 against 18-26
at n = 60, 36-62 against 23-37 at n = 100, 53-85 against 44-69 at n = 150, but 102-145
against 100-141 at n = 220 and 153-205 against 160-213 at n = 256; hence the limit 200.
Until December 2026 it was 16.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import scipy.linalg
from scipy.linalg.blas import dger, dsymv
from scipy.sparse.linalg import ArpackError, ArpackNoConvergence, LinearOperator, eigsh

from ._sphere import norm

__all__ = [
    "DIRECT_MAX",
    "OPERATOR_DIRECT_MAX",
    "TangentBasis",
    "solved_densely",
    "symmetric_operator",
    "top_tangent_eigenpair",
]

DIRECT_MAX = 200  # tangent dimensions solved by a dense eigh (module doc, "Small spaces")
# the same for an operator, whose matrix takes d products (each a pass over the instance)
OPERATOR_DIRECT_MAX = 16
# Ritz pairs ARPACK must converge (module doc, "Which eigenvalue"): the top two, not the top one
_RITZ_PAIRS = 2


class TangentBasis:
    """The orthonormal basis B = H[:, 1:] of u^perp (see the module doc) for a unit vector u,
    n >= 2: ``lift`` maps coordinates y (n - 1) to the tangent vector B y, ``coordinates`` maps
    a vector z to B^T z, and ``restrict_inplace`` turns a symmetric n x n matrix into B^T M B."""

    def __init__(self, u: np.ndarray):
        if u.size < 2:
            raise ValueError(f"a tangent space needs n >= 2, got n = {u.size}")
        w = np.array(u, dtype=np.float64)
        w[0] += 1.0 if w[0] >= 0.0 else -1.0
        self.w = w / norm(w)

    @property
    def dim(self) -> int:
        return self.w.size - 1

    def lift(self, y: np.ndarray) -> np.ndarray:
        """B y = H [0; y]: a vector of u^perp."""
        w = self.w
        z = np.empty(w.size)
        z[0] = 0.0
        z[1:] = y
        return z - (2.0 * float(w[1:] @ y)) * w

    def coordinates(self, z: np.ndarray) -> np.ndarray:
        """B^T z = (H z)[1:]."""
        w = self.w
        return z[1:] - (2.0 * float(w @ z)) * w[1:]

    def restrict_inplace(self, m: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
        """Overwrite the C-contiguous symmetric m with H m H; return its trailing block B^T m B
        as a C-contiguous array, ``out`` if given (reusing one buffer saves the page faults of
        a fresh one per step; a strided view instead would make NumPy copy it at every
        product: 4x slower Lanczos steps at n = 800, measured)."""
        w = self.w
        a = m @ w
        z = 2.0 * a - (2.0 * float(w @ a)) * w
        mt = m.T  # Fortran-ordered view: dger updates it in place
        dger(-1.0, w, z, a=mt, overwrite_a=1)
        dger(-1.0, z, w, a=mt, overwrite_a=1)
        if out is None:
            return np.ascontiguousarray(m[1:, 1:])
        np.copyto(out, m[1:, 1:])
        return out

    def restrict_operator(self, matvec: Callable[[np.ndarray], np.ndarray]) -> LinearOperator:
        """B^T M B as an operator on R^(n-1), given v -> M v on R^n."""
        d = self.dim

        def apply(y: np.ndarray) -> np.ndarray:
            return self.coordinates(matvec(self.lift(np.ravel(y))))

        return LinearOperator((d, d), matvec=apply, rmatvec=apply, dtype=np.float64)


def symmetric_operator(a: np.ndarray) -> LinearOperator:
    """The symmetric C-contiguous float64 matrix ``a`` as an operator whose products read one
    triangle (BLAS dsymv on the upper triangle, through the Fortran-ordered view ``a.T``, no
    copy): half the bytes of the general product NumPy's ``a @ y`` would stream. Lanczos on
    a tangent matrix of Hessian ascent is bound by those bytes once the matrix outgrows the
    core's L2 cache; on one BLAS thread at n = 1000 and 2000 a product took 0.16 and 0.63 ms
    against 0.27 and 1.1 ms for dgemv (Intel Xeon, AVX-512). The two triangles of a
    restricted matrix (``TangentBasis.restrict_inplace``) agree to rounding, so this is the
    same operator to within rounding of its entries. Any other array (float32, strided) is
    converted once here: handed to dsymv as it is, it would be copied at every product (2.5
    against 0.39 ms at n = 1500, a review)."""
    if not _dsymv_ready(a):
        a = np.ascontiguousarray(a, dtype=np.float64)
    at = a.T  # F-contiguous: dsymv's lower triangle of a.T is the upper triangle of a

    def apply(y: np.ndarray) -> np.ndarray:
        return dsymv(1.0, at, np.ravel(y), lower=1)

    return LinearOperator(a.shape, matvec=apply, rmatvec=apply, dtype=np.float64)


def solved_densely(dim: int, matrix: bool) -> bool:
    """Whether a tangent space of ``dim`` dimensions is solved exactly by a dense ``eigh``
    rather than by Lanczos (module doc, "Small spaces"): up to ``DIRECT_MAX`` dimensions for a
    ``matrix``, up to ``OPERATOR_DIRECT_MAX`` for an operator. The estimates price the solve
    and Hessian ascent decides whether its tolerance matters by the same rule."""
    return dim <= (DIRECT_MAX if matrix else OPERATOR_DIRECT_MAX)


def _dsymv_ready(op: object) -> bool:
    """True for a C-contiguous float64 square matrix, which :func:`symmetric_operator` hands
    to dsymv without a copy."""
    return (
        isinstance(op, np.ndarray)
        and op.dtype == np.float64
        and op.ndim == 2
        and op.shape[0] == op.shape[1]
        and op.flags.c_contiguous
    )


def _dense_top(a: np.ndarray) -> tuple[float, np.ndarray]:
    d = a.shape[0]
    # the upper triangle, as the Lanczos products read (symmetric_operator)
    vals, vecs = scipy.linalg.eigh(a, lower=False, subset_by_index=[d - 1, d - 1])
    return float(vals[0]), vecs[:, 0]


def top_tangent_eigenpair(
    op: np.ndarray | LinearOperator, basis: TangentBasis, v0: np.ndarray, rel_tol: float
) -> tuple[float, np.ndarray, bool]:
    """(theta, v, fallback): largest eigenvalue of ``op`` = B^T M B (a matrix or an operator
    on the tangent coordinates of ``basis``) and its unit eigenvector as a vector of u^perp.
    ``v0`` (a vector of R^n) starts Lanczos. ``fallback`` is True when ARPACK did not converge
    and the result came from its best Ritz pair (operator) or from a dense ``eigh`` (matrix)."""
    fallback = False
    d = basis.dim
    if solved_densely(d, isinstance(op, np.ndarray)):
        mat = op if isinstance(op, np.ndarray) else op.matmat(np.eye(d))
        theta, y = _dense_top(mat)  # eigh reads the upper triangle
    else:
        try:
            lanczos_op = symmetric_operator(op) if isinstance(op, np.ndarray) else op
            vals, vecs = eigsh(
                lanczos_op, k=_RITZ_PAIRS, which="LA", v0=basis.coordinates(v0), tol=rel_tol
            )
            top = int(np.argmax(vals))
            theta, y = float(vals[top]), vecs[:, top]
        except ArpackNoConvergence as exc:
            fallback = True
            if isinstance(op, np.ndarray):
                theta, y = _dense_top(op)
            elif exc.eigenvalues.size:  # the converged pairs: the largest of them
                top = int(np.argmax(exc.eigenvalues))
                theta, y = float(exc.eigenvalues[top]), exc.eigenvectors[:, top]
            else:
                raise
        except ArpackError:
            # ARPACK stops ("starting vector is zero") when op maps its start to 0: a zero
            # operator (a Hessian that vanishes, as for a polynomial of degree 1), where every
            # vector is a top eigenvector with eigenvalue 0. Anything else is raised.
            y = basis.coordinates(v0)
            probe = np.random.default_rng(0).standard_normal(d)
            if np.any(op @ y) or np.any(op @ probe):
                raise
            fallback = True
            theta = 0.0
    v = basis.lift(y)
    return theta, v / norm(v), fallback
