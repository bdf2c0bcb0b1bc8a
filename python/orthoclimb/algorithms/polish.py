"""Polishing a point to a near-critical point of the energy on the unit sphere, and checking
whether it is a local maximum.

:func:`polish` runs the Riemannian gradient ascent of :mod:`._riemannian` (Barzilai-Borwein
steps, nonmonotone Armijo test, retraction x -> x/|x|) until |P grad H(x)|/n <= 0.01 s (or
``gtol`` if larger; s the power of two nearest the instance's energy scale, sqrt(xi(1)) of its
mixture), then damped Riemannian Newton steps (:mod:`._newton`: one Hessian pass and a dense
Cholesky solve each, the system shifted by a multiple of the identity where the point is not
near a maximum) until |P grad H(x)|/n <= gtol, when the dense Hessian fits in memory
(n <= 4000). If Newton stops short (no damped step raises the energy, or 40 steps), gradient
ascent continues; if it gains no energy beyond rounding (1e-12 relative) and ends with a larger
gradient than Newton's, Newton's point is returned with the gradient steps' status (an energy
scale far from 1 puts gtol below rounding: there they only wander in it). With gtol times c,
polishing c H makes the same steps as polishing H, bit for bit, when c is a power of two
(otherwise the hand-over can fall a step apart).

Gradient ascent alone converges linearly with a rate set by the tangent spectrum, which near
the marginal maxima that climbers reach extends close to zero. Until December 2026 the polish
handed over at 1e-3 and left Newton at its first indefinite Hessian, for gradient steps to
the end. Measured from the endpoints of default runs (gtol 1e-7, the check included,
2026-12-05), the old polish against this one, pure 3-spin model: after Hessian ascent 5.2
against 2.5 s for 20 seeds at n = 400 (92 against 32 mean passes, at most 406 against 86) and
17.5 against 9.3 s for 12 seeds at n = 800; after Langevin annealing 3.7 against 2.2 s for 20
seeds at n = 300 (142 against 69 passes); each of the 52 reached the same maximum either way.
The four slowest of 30 other polishes at n = 800 took 188-538 passes and 4.0-11.3 s before,
21-61 passes and 0.9-2.4 s now. Over more mixtures, a hand-over at 1e-3 against 1e-2 (both
with the shifted Newton; mean passes, total time, the check left out):

* Hessian ascent, pure 3-spin: n = 200, 30 seeds, 53.9 against 28.9 passes (at most 202
  against 52), 0.64 against 0.43 s; n = 400, 20 seeds, 68.4 against 31.9, 3.7 against 2.1 s;
* Hessian ascent, pure 4-spin at n = 150 (12 seeds): 59.7 against 44.8, 3.9 against 3.0 s;
  2:1,4:0.25 at n = 200 (10): 44.5 against 25.8, 6.1 against 3.6 s; 1:0.5,3:1 at n = 300
  (10): 47.9 against 27.6, 0.52 against 0.42 s;
* Langevin annealing, pure 3-spin at n = 300 (20 seeds): 112 against 69, 2.2 against 1.7 s.

Every one of these 102 polishes reached the maximum it reached with the hand-over at 1e-3
(energies equal to 4e-14). A later hand-over is faster still (21.0 and 32.5 mean passes at
0.1 after Hessian ascent at n = 400 and after annealing) but changes which maximum is reached:
after annealing, 1 of 20 runs at 0.03 and 6 of 20 at 0.1 ended elsewhere (up to 0.016 per spin
higher or lower), so 0.01 keeps a study's energies where they were. With the monotone line
search used before December 2026, gradient ascent alone took 201 iterations (8.6 s) at n = 800
against 25 iterations and 3 Newton steps (1.8 s) to the same point.

Local-maximum check (:func:`tangent_spectrum`). On the unit sphere the Riemannian Hessian of H at
x is the tangent restriction of

    Hess_S H(x) = P (Hess H(x) - (x . grad H(x)) I) P,     P = I - x x^T,

(the second term is the curvature of the sphere: along a geodesic x cos t + v sin t,
d^2/dt^2 H = v.Hess H v - x.grad H). x is a strict local maximum when all n - 1 tangent
eigenvalues are negative at a critical point, so the check reports how many are positive
(0 = local maximum) and the largest one per spin. It uses one Hessian pass and
``scipy.linalg.eigvalsh`` for n <= 3000 (all n - 1 eigenvalues) and otherwise ``eigsh``
(Lanczos, from a fixed start vector, each product reading one triangle: a check at n = 3001
took 0.79-0.80 s against 1.32-1.34 s with whole-matrix products) for the top 10 only, in
which case a count of 10 means "at least 10". The radial
direction is moved out of the way by giving it the eigenvalue -2 (|Hess H|_inf + |x.grad H|).
An eigenvalue counts as positive when it exceeds 1e-9 times |Hess H|_inf + |x.grad H| (the
max row sum: rounding in the kernels and in the eigen-solve scales with it), so the verdict does
not depend on the scale of xi. When the dense n x n work does not fit in half the available
memory, the check runs matrix-free instead: Lanczos on Hessian-vector products (one pass
each, typically a few hundred), with the Hessian's spectral radius (a first Lanczos run)
in place of the max row sum. Before, a run chosen for low memory ran to its end and then
failed in this check.

BLAS runs single-threaded during a polish (``threadpoolctl``), as in Hessian ascent's loop: the
dense work is small at the sizes that fit, and OpenBLAS's threads, which spin while they wait,
collapse when another process holds a core. Measured at n = 600 (pure 3-spin) with a compiler
running beside: a polish took 6.1 s with two BLAS threads and 1.8 s with one (one Cholesky
factor 0.85 s against 0.01 s); on a quiet machine 0.9-1.2 s either way. The price on a quiet
machine grows with n: the check's eigvalsh took 0.08-0.10 s against 0.11-0.14 at n = 1000,
0.59-0.71 against 0.78 at n = 2000 and 1.6 against 2.5 s at n = 3000 (two threads against one).
"""

from __future__ import annotations

import time
from typing import Any

import numpy as np
import scipy.linalg
from scipy.sparse.linalg import LinearOperator, eigsh

from ..model.hamiltonian import Hamiltonian
from ..runtime import one_blas_thread
from ._checks import (
    MAX_STEPS,
    check_count,
    check_flag,
    check_ham,
    check_positive,
    check_unit_start,
    dense_work_fits,
    energy_scale,
    warn_if_far_scale,
)
from ._config import base_config
from ._eigen import symmetric_operator
from ._newton import newton_refine, radial_shift, shifted_tangent_matrix
from ._riemannian import sphere_ascent
from ._sphere import norm
from .result import Result, vector_digest

__all__ = ["polish", "tangent_spectrum"]

DENSE_EIGVALS_MAX_N = 3000
NEWTON_MAX_N = 4000
NEWTON_START_GTOL = 1e-2  # per spin: gradient ascent hands over to Newton below this
NEWTON_MAX_STEPS = 40
# relative energy gain below which gradient steps after Newton found nothing (rounding: the
# energy sums many terms, so its noise is some times eps |E|)
_FLAT = 1e-12
LANCZOS_TOP = 10
POSITIVE_THRESHOLD = 1e-9  # relative to |Hess H|_inf + |x.grad H|


def tangent_spectrum(ham: Hamiltonian, x: Any) -> dict[str, Any]:
    """Local-maximum check at x (normalized to |x| = 1), see the module doc.

    Returns ``n_positive`` (positive tangent eigenvalues of the Riemannian Hessian; 0 means a
    local maximum when x is critical; the Riemannian Hessian is P Hess H P - (x . grad H) I on
    the tangent space at |x| = 1), ``top_eigenvalue`` (the largest, per spin),
    ``exhaustive`` (False when only the top ``LANCZOS_TOP`` were computed) and ``grad_norm``
    (|P grad H|/n).
    """
    ham = check_ham(ham, "tangent_spectrum")
    n = ham.n
    x = check_unit_start(x, n)
    _e, g = ham.energy_and_gradient(x)
    radial = float(x @ g)
    tangent_grad = g - radial * x
    if not dense_work_fits(ham, _CHECK_COPIES):
        vals, scale = _operator_spectrum(ham, x, radial)
        return {
            "n_positive": _positive_count(vals, scale),
            "top_eigenvalue": float(vals[0]) / n,
            "exhaustive": n <= _OPERATOR_DENSE_N,
            "grad_norm": norm(tangent_grad) / n,
        }
    hess, scale = shifted_tangent_matrix(ham.hessian(x), x, radial)
    if n <= DENSE_EIGVALS_MAX_N:
        vals = scipy.linalg.eigvalsh(hess)
        exhaustive = True
    else:
        vals = eigsh(
            symmetric_operator(hess),  # one triangle per product: half the bytes
            k=LANCZOS_TOP,
            which="LA",
            tol=1e-8,
            v0=_start(n),
            return_eigenvectors=False,
        )
        exhaustive = False
    vals = np.sort(vals)[::-1]
    return {
        "n_positive": _positive_count(vals, scale),
        "top_eigenvalue": float(vals[0]) / n,
        "exhaustive": exhaustive,
        "grad_norm": norm(tangent_grad) / n,
    }


def _positive_count(vals: np.ndarray, scale: float) -> int:
    """The eigenvalues above POSITIVE_THRESHOLD x ``scale``. A scale of 0 (Hess H = 0 and
    x.grad H = 0 at x: the zero polynomial) puts the radial direction at -2, as
    :func:`~._newton.radial_shift` does, so rounding is relative to 1 there: counted against
    0, the eigensolver's 1e-18 noise on the zero tangent eigenvalues made 14 of 29 of them
    "positive" (a user trial)."""
    return int(np.count_nonzero(vals > POSITIVE_THRESHOLD * (scale if scale > 0.0 else 1.0)))


# Dense n x n arrays the dense check holds at once besides the kernel's accumulators: the
# Hessian, two outer products and their sum, the symmetrized copy and eigvalsh's own copy.
_CHECK_COPIES = 5
# Below this n the matrix-free check forms its (small) matrix from products with the identity.
_OPERATOR_DENSE_N = 4 * LANCZOS_TOP


def _start(n: int) -> np.ndarray:
    """A fixed start vector for Lanczos, so that a check gives the same numbers every time
    (ARPACK's own start is random: three checks at n = 3001 differed in the 15th digit)."""
    return np.random.default_rng(0x5EED).standard_normal(n)


def _operator_spectrum(ham: Hamiltonian, x: np.ndarray, radial: float) -> tuple[np.ndarray, float]:
    """The top ``LANCZOS_TOP`` eigenvalues (descending) of the shifted tangent Hessian of the
    module doc, A = Hess - x w^T - w x^T + c x x^T - radial I with w = Hess x, from
    Hessian-vector products only, and the scale rho(Hess) + |radial| (rho: the spectral
    radius, which the max row sum of the dense check bounds from above)."""
    n = ham.n
    if max(ham.degrees) == 1:  # a linear H: Hess H = 0, every tangent eigenvalue is -radial
        count = n - 1 if n <= _OPERATOR_DENSE_N else LANCZOS_TOP  # as the two routes below
        return np.full(count, -radial), abs(radial)
    hop = ham.hessian_operator(x)
    rho = abs(float(eigsh(hop, k=1, which="LM", tol=1e-6, v0=_start(n))[0][0]))
    scale = rho + abs(radial)
    w = ham.hvp(x, x)
    c = radial_shift(float(x @ w), radial, scale)

    def apply(y: np.ndarray) -> np.ndarray:
        y = np.asarray(y, dtype=np.float64)
        flat = y.ndim == 1
        y2 = y[:, None] if flat else y
        xy, wy = x @ y2, w @ y2
        out = ham.hvp(x, y2) - np.outer(x, wy) - np.outer(w, xy) + c * np.outer(x, xy)
        out -= radial * y2
        return out[:, 0] if flat else out

    if n <= _OPERATOR_DENSE_N:  # too small for Lanczos' k + 1 vectors: all eigenvalues
        vals = scipy.linalg.eigvalsh(apply(np.eye(n)))
    else:
        op = LinearOperator((n, n), matvec=apply, matmat=apply, dtype=np.float64)
        vals = eigsh(
            op, k=LANCZOS_TOP, which="LA", tol=1e-8, v0=_start(n), return_eigenvectors=False
        )
    return np.sort(vals)[::-1], scale


def polish(
    ham: Hamiltonian,
    x: Any,
    gtol: float = 1e-7,
    max_iter: int = 2000,
    check: bool = True,
) -> Result:
    """Riemannian gradient ascent, then Newton steps, of e = H/n on the unit sphere from x to a
    near-critical point (see the module doc).

    ``gtol`` bounds the final tangent-gradient norm |P grad H(x)|/n (per-spin units);
    ``max_iter`` bounds the iterations (each costs one energy-and-gradient pass, plus one per
    backtracking halving). With ``check=True`` the local-maximum check of
    :func:`tangent_spectrum` is run at the end (one Hessian pass and an eigenvalue solve).

    The result's ``path`` has columns ``iteration``, ``energy`` (per spin), ``grad_norm`` and
    ``alpha`` (accepted step; NaN marks a Newton step), and ends at the returned point: a
    gradient stage that stops unconverged returns its best iterate, and the iterations after
    it (a dip of the energy) are left out of the path; ``info`` has ``grad_norm``, ``status``
    ("converged", "stalled" = no progress at rounding level, or "max_iter"), ``iterations``
    (gradient iterations made, those left out included), ``dropped_iterations`` (those left
    out), ``newton_steps``, ``newton_status`` ("converged", "no_progress", "max_steps" or "not
    used"), ``newton_shifted`` (Newton steps that needed a shift: not near a maximum yet),
    ``passes``, ``energy_start`` and, with the
    check, ``n_positive``, ``top_eigenvalue``, ``local_max``.

    ``gtol`` is absolute, in energy per spin (the hand-over to Newton and the step bounds
    follow the instance's energy scale): an instance whose energy scale is far from 1 gets a
    RuntimeWarning, as the other optimizers do (at a scale of 1e-12 a non-critical point
    passes gtol = 1e-7 at once; at 1e12 gtol lies below rounding, and the polish ends
    "stalled" after some hundred passes).
    """
    ham = check_ham(ham, "polish")
    warn_if_far_scale(ham, "polish")
    return run_polish(ham, x, gtol, max_iter, check)


def run_polish(
    ham: Hamiltonian, x: Any, gtol: float = 1e-7, max_iter: int = 2000, check: bool = True
) -> Result:
    """:func:`polish` without its scale warning, for the methods that end with a polish (they
    warned already)."""
    ham = check_ham(ham, "polish")
    x0 = check_unit_start(x, ham.n)
    check = check_flag(check, "check")
    gtol = check_positive(gtol, "gtol")
    max_iter = check_count(max_iter, "max_iter", minimum=0, maximum=MAX_STEPS)
    with one_blas_thread():  # see the module doc
        return _polish(ham, x0, gtol, max_iter, check)


def _polish(ham: Hamiltonian, x0: np.ndarray, gtol: float, max_iter: int, check: bool) -> Result:
    start = time.perf_counter()
    use_newton = _newton_fits(ham)
    # the hand-over in the instance's own units (a review: at gamma = 1e-20 an absolute 0.01
    # handed a random start straight to Newton, which climbed to another maximum)
    scale = energy_scale(ham)
    handover = NEWTON_START_GTOL * scale
    first_gtol = max(gtol, handover) if use_newton else gtol
    trace = sphere_ascent(ham, x0, gtol=first_gtol, max_iter=max_iter, scale=scale)
    # its first pass is at x0 (retracted, and another kernel: equal to rounding, 1e-15 per
    # spin absolute, not always to the last bit): no pass of its own for the start energy
    e_start = trace.rows["energy"][0]
    # the stages go on from, and the path ends at, the point a stage returns (the path's last
    # energy was above the result's after a dip, 3 runs in 160 at max_iter 3-13: a review)
    rows = {k: list(v[: trace.returned_iteration + 1]) for k, v in trace.rows.items()}
    dropped = trace.iterations - trace.returned_iteration
    x, energy, gnorm, status = trace.x, trace.energy, trace.grad_norm, trace.status
    iterations, passes = trace.iterations, trace.passes
    newton_steps, newton_status, newton_shifted = 0, "not used", 0
    if use_newton and gnorm > gtol and status != "max_iter":
        out = newton_refine(ham, x, gtol, max_steps=NEWTON_MAX_STEPS)
        newton_steps, newton_status, passes = out.steps, out.status, passes + out.passes
        newton_shifted = out.shifted
        for k, (e_k, g_k) in enumerate(out.history, start=1):
            rows["iteration"].append(iterations + k)
            rows["energy"].append(e_k)
            rows["grad_norm"].append(g_k)
            rows["alpha"].append(float("nan"))
        x, energy, gnorm = out.x, out.energy, out.grad_norm
        status = "converged" if out.status == "converged" else status
        if gnorm > gtol and iterations < max_iter:  # Newton stopped short: back to gradients
            rest = sphere_ascent(ham, x, gtol=gtol, max_iter=max_iter - iterations, scale=scale)
            iterations, passes = iterations + rest.iterations, passes + rest.passes
            if rest.energy <= energy + _FLAT * abs(energy) and rest.grad_norm > gnorm:
                # no gain beyond rounding and a larger gradient: the steps only wandered in
                # the rounding (gtol below it, an energy scale far from 1: Newton left 1e-15
                # relative, their best energy 3.6e-9). Newton's point stays, and its status
                # is the gradient steps' verdict on it ("stalled" there)
                dropped += rest.iterations
                status = rest.status
            else:  # a saddle or a flat region that the gradient steps climb out of
                dropped += rest.iterations - rest.returned_iteration
                for k in ("iteration", "energy", "grad_norm", "alpha"):
                    extra = rest.rows[k][1 : rest.returned_iteration + 1]
                    if k == "iteration":
                        extra = [rows["iteration"][-1] + i for i in extra]
                    rows[k].extend(extra)
                x, energy, gnorm, status = rest.x, rest.energy, rest.grad_norm, rest.status
    if gnorm > gtol and status == "converged":
        # stage 1 converged to its hand-over tolerance with the last allowed iteration and
        # Newton stopped short: the cap, not convergence, ended the polish
        status = "max_iter"
    info: dict[str, Any] = {
        "energy_start": e_start,
        "grad_norm": gnorm,
        "status": status,
        "iterations": iterations,
        "dropped_iterations": dropped,
        "newton_steps": newton_steps,
        "newton_status": newton_status,
        "newton_shifted": newton_shifted,
        "passes": passes,
    }
    if check:
        info.update(local_max_info(ham, x, is_critical(gnorm, gtol, status, energy)))
    # the start point is the caller's (too large for the config): its digest identifies it
    digest = vector_digest(x0)
    config = base_config(ham, "polish", gtol=gtol, max_iter=max_iter, start_sha256=digest)
    path = {k: np.asarray(v) for k, v in rows.items()}
    return Result(x, energy, path, config, time.perf_counter() - start, info)


# n x n arrays a Newton step holds at once: the Hessian, two outer products and their sum
# (tracemalloc: 4.0 n^2 8 bytes at n = 1000, a review; 3.0 since -A is formed in place;
# 3 were counted before that, and 4 are kept, as Hessian ascent's dense mode counts)
_NEWTON_COPIES = 4


def _newton_fits(ham: Hamiltonian) -> bool:
    """Whether Newton's dense n x n work (the kernel's Hessian accumulators, the Hessian and
    its Cholesky factor) fits in half the available memory, for n <= NEWTON_MAX_N."""
    return 2 <= ham.n <= NEWTON_MAX_N and dense_work_fits(ham, _NEWTON_COPIES)


# A stalled run is critical when its tangent gradient (per spin) is within this fraction of
# the energy's scale: sqrt(machine epsilon), the gradient a stall at rounding level leaves.
STALL_GRADIENT = float(np.sqrt(np.finfo(float).eps))


def is_critical(grad_norm: float, gtol: float, status: str, energy: float) -> bool:
    """Whether a run ended at a critical point: |P grad H|/n <= gtol, or a stall (no progress
    at rounding level) with |P grad H|/n <= STALL_GRADIENT max(1, |energy per spin|). gtol
    is absolute, so at gamma = 1e4 gradient ascent stalls at 2.7e-7 > gtol = 1e-7 (the bound
    there: 2.4e-4). A stall alone is not enough: on a quadratic built with a top eigenvalue
    gap of 0.01 and one of -1e6, the nonmonotone line search stalled at 8.6e-4, 1.85e-5
    below the maximum (a review)."""
    if grad_norm <= gtol:
        return True
    return status == "stalled" and grad_norm <= STALL_GRADIENT * max(1.0, abs(energy))


def local_max_info(ham: Hamiltonian, x: np.ndarray, critical: bool) -> dict[str, Any]:
    """The :func:`tangent_spectrum` fields plus ``local_max``: the run found x ``critical``
    (:func:`is_critical`) and no tangent eigenvalue is positive. A point stopped by an
    iteration cap on a slope has no positive eigenvalue either, but is no maximum."""
    spec = tangent_spectrum(ham, x)
    return {
        "n_positive": spec["n_positive"],
        "top_eigenvalue": spec["top_eigenvalue"],
        "spectrum_exhaustive": spec["exhaustive"],
        "local_max": spec["n_positive"] == 0 and bool(critical),
    }
