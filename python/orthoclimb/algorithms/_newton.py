"""Riemannian Newton steps on the unit sphere, for the last digits of a polish.

Near a non-degenerate local maximum x* of e = H/n on |x| = 1, gradient ascent converges only
linearly (its rate is set by the spread of the tangent Hessian's spectrum), while Newton's
method converges quadratically. One Newton step at x solves, in the tangent space,

    Hess_S d = -G,   Hess_S = P (Hess H(x) - (x . grad H(x)) I) P,   G = P grad H(x),

(the Riemannian Hessian and gradient of H on the sphere, as in :mod:`.polish`) and moves to
R(x + d) = (x + d)/|x + d|. To stay in the tangent space without a basis, the radial direction
gets the eigenvalue -big (big > the spectral radius): A = Hess_S - big x x^T is then negative
definite exactly when Hess_S is on the tangent space, and A d = -G has its solution d
orthogonal to x.

Away from a maximum (a saddle, or the flat regions near the marginal maxima that ascent
methods reach in spin glasses, where the tangent spectrum reaches close to zero) -A is not
positive definite and the plain step may descend. The step is then regularized by the
smallest shift tau >= 0 of the sequence of "Cholesky with added multiple of the identity"
(Nocedal and Wright 2006, Numerical Optimization, 2nd ed., Algorithm 3.3) for which
``scipy.linalg.cho_factor`` succeeds on -A + tau I:

    tau_0 = 0 if min_i (-A)_ii > 0, else beta - min_i (-A)_ii;   tau_{k+1} = max(2 tau_k, beta),

with beta = 1e-3 (|Hess H|_inf + |x.grad H|), relative to the Hessian's scale as the radial
shift is. Then (-A + tau I) d = G: d is an ascent direction (G.d > 0), between the Newton
step (tau = 0: quadratic convergence near a non-degenerate maximum) and a gradient step of
length |G|/tau. A step longer than 0.5 (about 29 degrees of arc) is shortened to 0.5, and the
step is damped (d, d/2, ..., d/32: the first that raises the energy is taken).

Until December 2026 a failed factorization ended Newton ("not a maximum") and gradient ascent
took over, for hundreds of iterations in such flat regions: the slowest polishes took 4-5
times as long as now, and 9 times the passes (measured in the polish module doc).

beta is relative to the max row sum, which bounds the spectral radius from above (by a
factor that grows like sqrt(n) for these random matrices: 6.3, 12.2 and 18.9 at n = 200, 800
and 2000), so the smallest shift tried is a little larger, relative to the spectrum, at
large n; it keeps the sequence's bound (11 doublings pass the spectral radius) simple. Each
step after a shifted one starts its sequence, past tau = 0, at a quarter of the last shift
taken, which saves the refused factorizations of the doublings up to it.

Cost per step: one Hessian pass, one energy-and-gradient pass per damping trial and a dense
n x n Cholesky per shift tried (n^3/3 multiply-adds: about 9 ms at n = 800 on the one BLAS
thread a polish uses).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import scipy.linalg

from ..model.hamiltonian import Hamiltonian
from ._sphere import norm, retract

__all__ = ["NewtonOutcome", "newton_refine", "shifted_tangent_matrix"]

_DAMPING = (1.0, 0.5, 0.25, 0.125, 0.0625, 0.03125)
_ROUNDING = 1e-15  # relative energy change below which a step is no progress
_MAX_STEP = 0.5  # longest step (tangent length) tried
_SHIFT_FLOOR = 1e-3  # beta of the module doc, relative to the Hessian's scale
# per step: from beta = 1e-3 scale, doubling passes the spectral radius (<= scale) in 11 tries
_MAX_FACTORIZATIONS = 80


@dataclass
class NewtonOutcome:
    x: np.ndarray
    energy: float  # per spin
    grad_norm: float  # |P grad H|/n
    steps: int  # accepted Newton steps
    passes: int  # kernel passes spent (Hessian and energy-and-gradient)
    status: str  # "converged", "no_progress" or "max_steps"
    shifted: int = 0  # accepted steps that needed a shift tau > 0 (not near a maximum)
    factorizations: int = 0  # Cholesky factorizations tried
    history: list[tuple[float, float]] = field(default_factory=list)  # (energy, grad_norm)


def _tangent_state(ham: Hamiltonian, x: np.ndarray) -> tuple[float, np.ndarray, float]:
    e, g = ham.energy_and_gradient(x)
    radial = float(x @ g)
    return e / ham.n, g - radial * x, radial


def radial_shift(a: float, radial: float, scale: float) -> float:
    """The c of A = Hess - x w^T - w x^T + c x x^T - radial I (a = x^T Hess x), which moves the
    radial direction to -2 scale, below every tangent eigenvalue (|lambda| <= scale). The shift
    is relative: an absolute one would swamp a Hessian of scale 1e-20 in the solve's rounding."""
    big = 2.0 * scale if scale > 0.0 else 1.0
    return a - big + radial


def shifted_tangent_matrix(
    hess: np.ndarray, x: np.ndarray, radial: float
) -> tuple[np.ndarray, float]:
    """(A, scale) at the unit vector x from its Hessian ``hess`` (overwritten) and radial =
    x.grad H: A = P (Hess - radial I) P - big x x^T = Hess - x w^T - w x^T + c x x^T - radial I
    with w = Hess x, symmetrized, and scale = |Hess H|_inf + |radial| (the max row sum), which
    sets big = 2 scale (:func:`radial_shift`: relative, since an added 1 swamped a Hessian of
    scale 1e-20). Newton's steps and the local-maximum check both work with A."""
    w = hess @ x
    scale = float(np.abs(hess).sum(axis=1).max()) + abs(radial)
    c = radial_shift(float(x @ w), radial, scale)
    hess -= np.outer(x, w) + np.outer(w, x) - c * np.outer(x, x)
    hess[np.diag_indices(hess.shape[0])] -= radial
    return 0.5 * (hess + hess.T), scale


def newton_refine(
    ham: Hamiltonian, x: np.ndarray, gtol: float, max_steps: int = 8
) -> NewtonOutcome:
    """Newton steps from the unit vector ``x`` until |P grad H|/n <= ``gtol`` (see module doc)."""
    n = ham.n
    x = retract(np.asarray(x, dtype=np.float64))
    e, tg, radial = _tangent_state(ham, x)
    passes, steps, shifted, factorizations = 1, 0, 0, 0
    hint = 0.0  # where a refused unshifted factorization resumes (module doc)
    history = []
    status = "max_steps"
    for _ in range(max_steps + 1):
        gnorm = norm(tg) / n
        if gnorm <= gtol:
            status = "converged"
            break
        if steps == max_steps:
            break
        hess = ham.hessian(x)
        passes += 1
        hess, scale = shifted_tangent_matrix(hess, x, radial)
        np.negative(hess, out=hess)  # -A, in place of A: one n x n copy fewer
        factor, tau, tried = _shifted_cholesky(hess, _SHIFT_FLOOR * scale, hint)
        factorizations += tried
        if factor is None:  # not finite, or no shift made it positive definite
            status = "no_progress"
            break
        d = scipy.linalg.cho_solve(factor, tg, check_finite=False)  # (-A + tau I) d = G
        if not np.isfinite(d).all():  # a factor of a (numerically) singular matrix
            status = "no_progress"
            break
        d -= x * float(x @ d)  # exact arithmetic keeps d tangent; remove rounding drift
        length = norm(d)
        if length > _MAX_STEP:
            d *= _MAX_STEP / length
        # damped: the full step, else halves of it, the first one that raises the energy
        for damping in _DAMPING:
            y = retract(x + damping * d)
            e_y, tg_y, radial_y = _tangent_state(ham, y)
            passes += 1
            if e_y > e + _ROUNDING * abs(e):  # relative: 1.0 stopped every step at 1e-20
                break
        else:
            status = "no_progress"
            break
        x, e, tg, radial = y, e_y, tg_y, radial_y
        steps += 1
        shifted += tau > 0.0
        hint = 0.25 * tau
        history.append((e, norm(tg) / n))
    return NewtonOutcome(
        x, e, norm(tg) / n, steps, passes, status, shifted, factorizations, history
    )


def _shifted_cholesky(m: np.ndarray, beta: float, hint: float = 0.0):
    """(factor of m + tau I, tau, factorizations tried) for the first tau of the module doc's
    sequence at which the Cholesky factorization succeeds, the doubling taking at least
    ``hint`` after its first refusal; (None, tau, tried) when none succeeds (a matrix with
    NaN, or ``_MAX_FACTORIZATIONS`` shifts). ``m`` is overwritten."""
    low = float(np.diag(m).min())
    if not np.isfinite(low):
        return None, 0.0, 0
    beta = beta if beta > 0.0 else 1.0  # H = 0: any positive shift
    tau = 0.0 if low > 0.0 else beta - low
    diag = np.diag_indices(m.shape[0])
    added = 0.0  # the shift m holds now
    for tried in range(1, _MAX_FACTORIZATIONS + 1):
        m[diag] += tau - added
        added = tau
        try:  # a failed attempt leaves m untouched (overwrite_a=False)
            return scipy.linalg.cho_factor(m, check_finite=False), tau, tried
        except np.linalg.LinAlgError:
            tau = max(2.0 * tau, beta, hint)
    return None, tau, _MAX_FACTORIZATIONS
