"""Hessian ascent (Subag 2018, arXiv:1812.04588): climb from near the origin to the unit
sphere by orthogonal steps along the top eigenvector of the tangent Hessian.

Without a field (no p = 1 term). Start at x_0 of norm 1/sqrt(K): with a degree-2 term, along
the top eigenvector of Hess H(0) = 2A (the degree-2 matrix) with a seeded random sign, found
in the tangent space of a seeded random direction: there the top eigenvalue lies between the
two largest of Hess H(0) (interlacing), by a user trial up to 0.025 per spin below the top
one at n = 200-400 (a fraction of the gap to the second, which at the edge is of order
n^(-2/3)), and the direction overlaps the top eigenvector by 0.94-1.0;
without one (Hess H(0) = 0), in a seeded uniformly random direction. Along the top eigenvector
the start already gains (1/K) sqrt(xi''(0)) per spin, the first segment of E_path; a random
direction gains nothing there (a user trial): for xi = q^2 + q^4/16 at K = 25 the prediction
is sqrt(2)/25 = 0.057 per spin, and the top start ended 0.043-0.048 higher before the polish
(4 instances each at n = 100, 200, 400). ``start="random"`` keeps the random start.
Step i = 0..K-2, at x = x_i with u = x/|x|:

1. M = Hess H(x) (one pass of the Rust kernel), restricted to the tangent space u^perp: M_T =
   B^T M B for an orthonormal basis B of u^perp (see ``_eigen``);
2. v = top eigenvector of M_T by Lanczos (``eigsh``), warm-started from the previous step's v,
   stopped when its Rayleigh quotient is within delta n of the top eigenvalue (see ``_eigen``;
   a dense M_T of at most 200 dimensions is solved exactly by LAPACK instead);
3. flip v if <grad H(x), v> < 0;  x_{i+1} = x_i + v/sqrt(K).

The steps are orthogonal to x, so |x_{i+1}|^2 = |x_i|^2 + 1/K = (i + 2)/K and |x_{K-1}| = 1.
The step gains H(x + v/sqrt K) - H(x) ~ <grad H, v>/sqrt K + v.M v/(2K); with the top tangent
eigenvalue ~ 2 sqrt(xi''(q)) n (``hessian_edge``) the energy per spin follows
E_path(q) = int_0^q sqrt(xi''(s)) ds (``path_energy``) up to ALG at q = 1.

Scaling check (pure p = 2, gamma = 1): H(x) = x.A x with A symmetric, A_ii = a_ii of variance
n and A_ij = a_ij/2 of variance n/2 (i < j), so A is a Wigner matrix with semicircle radius
2 sqrt(n * n/2) = sqrt(2) n; Hess H = 2A, whose top eigenvalue per spin is 2 sqrt(2) =
2 sqrt(xi''(q)) with xi'' = 2: ``eigenvalue`` and ``predicted_edge`` share units (per spin, of
Hess H itself, not of H/n's Hessian times n). Verified numerically in the tests.

With a field (a p = 1 term). Let q_hat be the root of q xi''(q) = xi'(q)
(``algorithmic_threshold``). On the sphere of radius sqrt(q) the restricted polynomial has
mixture r -> xi(q r), whose maximum is the replica-symmetric value sqrt(q xi'(q)) for
q <= q_hat, and the landscape there is dominated by the field (from memory: a field with
xi_q''(1) <= xi_q'(1) leaves a single maximum up to lower-order effects). So stage 1 maximizes H on
the sphere of radius sqrt(q_hat) by Riemannian gradient ascent started from the field direction,
reaching about sqrt(q_hat xi'(q_hat)) = E_path(q_hat); stage 2 takes K - 1 Hessian steps of
length sqrt((1 - q_hat)/(K - 1)) from there to the unit sphere (the increments stay orthogonal to
x, so the last one lands on |x| = 1). The energy reached is compared with ALG in
``info["alg_gap_ascent"]`` (``info["alg_gap"]`` is that of the returned point, after the
polish, as for every method); at q = q_hat the restricted maximum is only marginally stable,
so stage 1 converges slowly and is capped (``first_stage_iter``), which costs a little energy
at finite n. When q_hat = 1 (a field strong enough) stage 1 ends on the sphere and no Hessian
step is taken. Stage 1 starts from the field direction, not from the seed, so with a field the
seed moves only Lanczos's first start vector (each step's sign follows the gradient): runs
with different seeds end at the same point to rounding (a user trial: overlap 1.0 on
1:0.2,2:1,3:0.5), and the config's ``start`` then records "random", the unused option's
value.

Cost. Each stage-2 step costs one Hessian pass plus O(n^2) for the projection and Lanczos's
dense matrix-vector products, each reading one triangle of the tangent matrix (``_eigen``;
on xi = q^2 + q^3/4 at n = 1000, 75-380 products a step, median 160, and 4.4 of a run's 13 s,
6.6 of 15 s while they read the whole matrix; 18 of 69 s at n = 1600). When at most one
degree >= 3 is present, the energy and the gradient are read off the same Hessian (exact Euler
identities, see ``_sphere``); with degrees <= 2 the Hessian is constant and computed once
(when it fits in memory, see below; else each product is a pass). Otherwise one extra
energy-and-gradient pass per step is needed. BLAS runs single-threaded during the loop
(``threadpoolctl``): the dense products of Lanczos are small, and OpenBLAS threads that
busy-wait after a call would otherwise steal the cores of the next Rust pass.

Finite n: how many steps. The edge 2 sqrt(xi''(q)) is the top tangent eigenvalue at a point
that does not depend on the disorder; the points of the path do. Measured on the pure 3-spin
model (this package, 3 seeds per cell), the top tangent eigenvalue at step i runs below the edge
by about 1-4 % for i < 5, 6-9 % for i ~ 20, 6.5-13 % for i >= 100 (n = 800 ... 200): consecutive
step directions overlap by 0.3-0.5 once i passes about n^(1/3), so the path keeps returning to
directions it has already used, and the top eigenvector lies mostly in their span. The
prediction assumes n -> infinity first, then K -> infinity (K/n -> 0). Steps forced orthogonal
to every earlier one (a trial, README "Known limitations") ended 0.05-0.26 lower before the
polish at n = 200-800: the reused directions are where the curvature is. Before polishing, the
energy reached falls slightly as K grows at these sizes (n = 400, two seeds: by 0.015-0.023 from
K = 25 to 400; the coarse steps cost about 1.2/K, the reused directions the rest); after
polishing it moves by 0.009-0.016 with no trend in K. At n = 800-1600 (17 paired instances,
README, Known limitations) the default K ended 0.011 +- 0.003 higher than K = 25 before
polishing and the same after it (+0.002 +- 0.002 for K = 25), while the cost is proportional to
K. The default K = ``auto_steps(n)`` = n/8 clamped to [25, 200] grows with n because the
n -> infinity limit needs K -> infinity; for polished energies alone ``steps=25`` is cheaper.

Hessian or Hessian-vector products (``hessian="auto"``). One HVP costs almost a Hessian pass
(measured at n = 800, p = 3: 0.07 s against 0.08 s on 2 cores), and Lanczos needs at least ten
products, so the dense Hessian is used whenever it fits: the kernel's accumulators
(``Hamiltonian.hessian_workspace_nbytes``) plus four working n x n copies at most half the
available memory. Beyond that the matrix-free ``hessian_operator`` is used (each Lanczos
iteration one pass; much slower).
"""

from __future__ import annotations

import math
import time
import warnings
from collections.abc import Callable
from typing import Any

import numpy as np
from scipy.sparse.linalg import LinearOperator

from ..model.hamiltonian import Hamiltonian
from ..model.mixture import Mixture
from ..runtime import one_blas_thread
from ..theory import algorithmic_energy, algorithmic_threshold, hessian_edge, path_energy
from ..theory._checks import check_mixture
from ._checks import (
    MAX_STEPS,
    check_count,
    check_flag,
    check_ham,
    check_positive,
    check_seed,
    dense_work_fits,
    energy_scale,
    warn_if_far_scale,
)
from ._config import base_config
from ._eigen import TangentBasis, solved_densely, top_tangent_eigenpair
from ._riemannian import sphere_ascent
from ._sphere import HessianReader, field_direction, norm, quadratic_part, random_unit
from .polish import run_polish as polish_point
from .result import Result

__all__ = [
    "auto_steps",
    "eigen_solves",
    "hessian_ascent",
    "hessian_moves",
    "resolve_start",
    "stepwise_limit",
    "stepwise_limit_if_short",
]

HESSIAN_MODES = ("auto", "dense", "operator")
START_MODES = ("auto", "top", "random")
_WORKING_COPIES = 4  # projected copy, eigen-solver workspace, slack
_SCALE_HEADROOM = 1.25  # next |theta| <= 1.25 |theta| (the edge moves by O(1/K) per step)
_ON_SPHERE = 1e-12  # |x|^2 within this of 1 counts as on the unit sphere
_COLUMNS = (
    "step",
    "stage",
    "q",
    "energy",
    "eigenvalue",
    "first_order",
    "predicted_energy",
    "predicted_energy_steps",
    "predicted_edge",
    "t_hessian",
    "t_gradient",
    "t_eigen",
)


def auto_steps(n: int) -> int:
    """The default number of steps K for n spins: n // 8, at least 25 and at most 200 (see
    "Finite n" in the module doc for the measurements behind it)."""
    n = check_count(n, "n", minimum=1)
    return int(min(200, max(25, n // 8)))


def hessian_moves(mixture: Mixture | None, steps: int) -> int:
    """The number of Hessian steps (each a Hessian pass and an eigen-solve) in a run of
    ``steps`` path points: steps - 1, or 0 when the first stage already ends on the unit sphere
    (1 - q_hat <= 1e-12: a pure field, or a field strong enough; see the module doc). Without a
    mixture (given coefficients) there is no first stage, so steps - 1. ``steps`` is an
    integer >= 1 (for hessian_ascent's default, pass ``auto_steps(n)``)."""
    if isinstance(steps, (bool, np.bool_)) or not isinstance(steps, (int, np.integer)):
        raise TypeError(
            f"steps must be an integer >= 1 (auto_steps(n) gives the default), got {steps!r}"
        )
    if steps < 1:
        raise ValueError(f"steps must be >= 1, got {steps}")
    if mixture is not None and _ends_on_sphere(algorithmic_threshold(mixture)):
        return 0
    return steps - 1


def _ends_on_sphere(q_hat: float) -> bool:
    """Whether the first stage, on the sphere of radius sqrt(q_hat), is on the unit sphere."""
    return 1.0 - q_hat <= _ON_SPHERE


def stepwise_limit(mixture: Mixture, steps: int, start: str = "auto") -> float | None:
    """The predicted energy per spin, as n -> infinity, at the end of a path of ``steps`` = K
    points (a second-order prediction, each step's gain taken at the Hessian's predicted edge,
    not a proved limit): the steps' own sum E_K(1) of :func:`_stepwise_energy` over the
    radii^2 q_i = (i + 1)/K, i = 0..K-1, the run's (``path["predicted_energy_steps"]``' last
    value), from the start ``start`` resolves to (:func:`hessian_ascent`): along the top
    eigenvector of Hess H(0) it gains (1/K) sqrt(xi''(0)), at random nothing. It falls short
    of ALG = int_0^1 f, f = sqrt(xi''), by about (f(1) - f(0)) / (2K) (the left Riemann sum),
    plus int_0^{1/K} f from a random start: 1.32/K at K = 25 and 1.27/K at K = 100 for the
    pure 3-spin model (where f(0) = 0 and both starts agree), 0.0048 at K = 25 for xi = q^2 +
    q^4/16 (0.061 from a random start), a loss a larger n does not remove. None for a mixture
    with a field, whose first stage ends at q_hat > 0 instead."""
    mixture = check_mixture(mixture, "stepwise_limit")
    k = check_count(steps, "steps", minimum=1)
    if algorithmic_threshold(mixture) > 0.0:
        return None
    q = np.arange(1, k + 1) / k
    first = _start_energy(mixture, q[0], resolve_start(start, mixture.degrees, False))
    return float(_stepwise_energy(mixture, q, first)[-1])


def stepwise_limit_if_short(mixture: Mixture, steps: int, start: str = "auto") -> float | None:
    """:func:`stepwise_limit` where it falls short of ALG (by more than 1e-9 of it): the
    energy a study with K fixed is set beside. None with a field, and where the path reaches
    ALG anyway (pure 2-spin from the top eigenvector: E_K = sqrt(2) = ALG)."""
    e_k = stepwise_limit(mixture, steps, start)
    alg = algorithmic_energy(mixture)
    return None if e_k is None or alg - e_k <= 1e-9 * abs(alg) else e_k


def resolve_start(start: str, degrees: tuple[int, ...], field: bool) -> str:
    """The start :func:`hessian_ascent` makes, "top" or "random", for ``start`` (one of
    START_MODES) on a polynomial of these ``degrees``: "auto" is "top" where Hess H(0) is not
    0 (a degree-2 term) and no first stage runs (no ``field``), else "random". "top" without a
    degree-2 term is refused; with a field the first stage sets the start and ``start`` is not
    used ("random" is returned, the value the option had before it existed)."""
    if start not in START_MODES:
        raise ValueError(f"start must be one of {START_MODES}, got {start!r}")
    if start == "top" and 2 not in degrees:  # refused with a field too, as everywhere
        raise ValueError(
            "start='top' needs a degree-2 term: without one Hess H(0) = 0 has no top"
            f" eigenvector (degrees {list(degrees)})"
        )
    if field:
        return "random"
    return "top" if start == "top" or (start == "auto" and 2 in degrees) else "random"


def eigen_solves(mixture: Mixture | None, steps: int, start: str = "auto") -> int:
    """The Hessian passes with an eigen-solve a run makes (the time estimates' unit):
    :func:`hessian_moves` steps, and one more for a start along the top eigenvector of
    Hess H(0) (:func:`resolve_start`; none without a mixture, whose start is then random or
    top by its coefficients' degrees, not known here)."""
    moves = hessian_moves(mixture, steps)
    if mixture is None:
        return moves
    return moves + (resolve_start(start, mixture.degrees, mixture.has_field) == "top")


def _start_energy(mixture: Mixture, q0: float, start: str) -> float:
    """The predicted energy per spin at the start of radius^2 ``q0``: q0 sqrt(xi''(0)) along
    the top eigenvector of Hess H(0) (a step from 0, at second order), 0 at random."""
    return q0 * math.sqrt(float(mixture.xi(0.0, derivative=2))) if start == "top" else 0.0


def _stepwise_energy(mixture: Mixture, q: np.ndarray, start: float) -> np.ndarray:
    """The energy per spin the path's own steps predict at each of its points q_0 < q_1 < ...:

        E_K(q_0) = start,   E_K(q_{i+1}) = E_K(q_i) + (q_{i+1} - q_i) sqrt(xi''(q_i)).

    A step of length eps along a top eigenvector gains eps^2 lambda / 2 per spin at second
    order, with lambda = 2 sqrt(xi''(q_i)) (``hessian_edge``) and eps^2 = q_{i+1} - q_i: the
    left Riemann sum of E_path(q) = int sqrt(xi''), which K - 1 equal steps from q_0 to 1 fall
    short of by about (1 - q_0)(f(1) - f(q_0)) / (2 (K - 1)), f = sqrt(xi'') ((f(1) - f(1/K))/(2K)
    from a random start at q_0 = 1/K), plus the part of E_path below q_0 that a random start
    (``start`` = 0) does not have. Comparing a run with E_K rather than E_path leaves the
    finite-n effects alone."""
    q = np.asarray(q, dtype=np.float64)
    gains = np.diff(q) * np.sqrt(np.asarray(mixture.xi(q[:-1], derivative=2), dtype=np.float64))
    return start + np.concatenate(([0.0], np.cumsum(gains)))


def _choose_mode(ham: Hamiltonian, mode: str) -> str:
    if mode not in HESSIAN_MODES:
        raise ValueError(f"hessian must be one of {HESSIAN_MODES}, got {mode!r}")
    if mode != "auto":
        return mode
    return "dense" if dense_work_fits(ham, _WORKING_COPIES) else "operator"


def _top_start(
    ham: Hamiltonian,
    mode: str,
    rng: np.random.Generator,
    delta: float,
    constant: np.ndarray | None = None,
) -> tuple[np.ndarray, float]:
    """(v, theta/n): a unit top eigenvector of Hess H(0) with a random sign, and its
    eigenvalue per spin. Found in the tangent space of a random direction u (the machinery of
    every step), within delta n: the top eigenpair there, whose eigenvalue lies between the top
    two of Hess H(0) (interlacing; see the module doc). In dense mode Hess H(0) is
    ``constant`` when the caller has it, else the degree-2 part's (:func:`quadratic_part`:
    the same bits, without a pass over every coefficient). The operator's products stay
    passes over the whole instance: the degree-2 part's differ from them in the last bit
    (its work is split otherwise), and a start moved by that would end elsewhere."""
    n = ham.n
    zero = np.zeros(n)
    basis = TangentBasis(random_unit(n, rng))
    if mode == "dense":
        h0 = constant.copy() if constant is not None else quadratic_part(ham).hessian(zero)
        op = basis.restrict_inplace(h0, np.empty((n - 1, n - 1)))
        scale = norm(op)
    else:
        op = _tangent_operator(ham, zero, basis)
        # |Hess v| of a random unit v is the root mean square eigenvalue, half the top one of a
        # semicircle: three times it bounds the top, so rel_tol below is not too loose
        scale = 3.0 * norm(ham.hvp(zero, random_unit(n, rng))) + 1e-300
    rel_tol = min(0.1, delta * n / max(scale, 1e-300))
    theta, v, _ = top_tangent_eigenpair(op, basis, random_unit(n, rng), rel_tol)
    return (v if rng.random() < 0.5 else -v), theta / n


def _tangent_operator(ham: Hamiltonian, x: np.ndarray, basis: TangentBasis) -> LinearOperator:
    """B^T Hess H(x) B on the tangent coordinates, one HVP pass per product."""
    return basis.restrict_operator(lambda v: ham.hvp(x, v))


def _predictions(
    mixture: Mixture, qs: np.ndarray, q_hat: float, start: str, last_only: bool = False
) -> dict[str, np.ndarray]:
    """The predicted columns of the path rows at radii^2 ``qs`` (in [0, 1]): E_path(q), the
    run's own steps' prediction and the edge 2 sqrt(xi''(q)) (see :func:`hessian_ascent`);
    with ``last_only`` those of the last row alone (the callback's, one integral per step).
    ``start``: "top" or "random", the resolved start without a field."""
    at = qs[-1:] if last_only else qs
    energy = np.asarray(path_energy(mixture, np.concatenate((qs[:1], at))), dtype=np.float64)
    # stage 1 ends near its predicted maximum E_path(q_hat); a start gains _start_energy
    if q_hat > 0.0:
        start = float(energy[0])
    else:
        start = _start_energy(mixture, float(qs[0]), start)
    return {
        "predicted_energy": energy[1:],
        "predicted_energy_steps": _stepwise_energy(mixture, qs, start)[-at.size :],
        "predicted_edge": np.asarray(hessian_edge(mixture, at), dtype=np.float64),
    }


# Share of ALG above which the most a run may lose to its eigen tolerance, tol/2, is warned of.
_COARSE_SHARE = 0.01


def _warn_if_coarse(mixture: Mixture | None, delta: float) -> None:
    """Warn when tol/2, the energy per spin a run may lose to inexact eigenvectors, exceeds
    1 % of ALG: tol is absolute, so at gamma = 1e-3 (pure 3-spin) the default 1e-3 is 31 % of
    ALG, and the energy reached per gamma fell by about 2 % (a review)."""
    if mixture is None:
        return
    alg = float(algorithmic_energy(mixture))
    share = (delta / 2.0) / alg  # 50 * delta / alg overflowed to "inf %" at tol = 1e308
    if share > _COARSE_SHARE:
        part = f"{share:.3g} times" if share >= 1.0 else f"{100 * share:.3g} % of"
        if math.isinf(share):  # past float64 (tol = 1e308): written from the logarithms
            lg = math.log10(delta / 2.0) - math.log10(alg)
            mantissa, power = round(10 ** (lg % 1), 2), math.floor(lg)
            if mantissa >= 10.0:  # 9.996 rounds up to the next power of ten
                mantissa, power = mantissa / 10.0, power + 1
            part = f"{mantissa:.3g}e+{power} times"
        warnings.warn(
            f"hessian_ascent: tol = {delta:.3g} lets the run lose up to tol/2 ="
            f" {delta / 2:.3g} energy per spin, {part} ALG = {alg:.3g};"
            f" tol is absolute: pass one in proportion to the mixture's scale (tol ="
            f" {2 * _COARSE_SHARE * alg:.2g} for 1 %)",
            RuntimeWarning,
            stacklevel=3,
        )


def _edge_growth(mixture: Mixture | None, q: float, q_next: float) -> float:
    """hessian_edge(q_next) / hessian_edge(q), at least 1 (1 without a mixture or edge)."""
    if mixture is None:
        return 1.0
    now = float(hessian_edge(mixture, min(q, 1.0)))
    later = float(hessian_edge(mixture, min(q_next, 1.0)))
    return max(1.0, later / now) if now > 0.0 else 1.0


def _first_stage(ham: Hamiltonian, q_hat: float, max_iter: int) -> tuple[np.ndarray, dict]:
    """Maximize H on |x| = sqrt(q_hat) from the field direction (see the module doc)."""
    start = field_direction(ham.coefficients(1))
    trace = sphere_ascent(
        ham, start, radius=math.sqrt(q_hat), gtol=1e-8, max_iter=max_iter, scale=energy_scale(ham)
    )
    return trace.x, {
        "q_hat": q_hat,
        "energy": trace.energy,
        "grad_norm": trace.grad_norm,
        "iterations": trace.iterations,
        "passes": trace.passes,
        "status": trace.status,
        "seconds": trace.seconds,
    }


def hessian_ascent(
    ham: Hamiltonian,
    steps: int | None = None,
    tol: float = 1e-3,
    seed: int = 0,
    polish: bool = True,
    callback: Callable[[dict[str, Any]], Any] | None = None,
    hessian: str = "auto",
    first_stage_iter: int = 400,
    start: str = "auto",
) -> Result:
    """Run Hessian ascent on ``ham`` with K = ``steps`` and eigen tolerance delta = ``tol``.

    Parameters: ``steps`` K >= 1 (K - 1 Hessian steps; default ``auto_steps(n)`` = n/8 clamped
    to [25, 200]); ``tol`` delta > 0, the accepted gap
    between the Rayleigh quotient of the step direction and the top tangent eigenvalue, per spin
    (each step then loses at most delta/(2K) energy per spin, the whole run at most delta/2,
    as long as Lanczos finds the top eigenvalue, which it does not certify: a review saw 1
    step in 3324 stop on the second, see ``_eigen``; a warning says when delta/2 exceeds 1 %
    of ALG, since delta is absolute; dense tangent spaces of at most 200 dimensions, n <= 201,
    are solved exactly and delta plays no part there);
    ``seed`` the start direction (and the first Lanczos start vector); ``polish`` finish with
    :func:`orthoclimb.polish` and the local-maximum check; ``callback(row)`` is called after
    every step with the path row (a dict); ``hessian`` "auto", "dense" or "operator" (see the
    module doc); ``first_stage_iter`` caps stage 1 with a field; ``start`` without a field:
    "top" along the top eigenvector of Hess H(0) (needs a degree-2 term), "random" in a
    random direction, "auto" (default) "top" where there is a degree-2 term, else "random"
    (see the module doc; the config records the one used, and ``info["start_eigenvalue"]`` the
    eigenvalue per spin of the start direction: the top one of Hess H(0) restricted to a random
    hyperplane, between its top two eigenvalues; the top one is predicted at 2 sqrt(xi''(0))).

    Returns a :class:`Result`: ``energy`` per spin at the final (polished) point, ``path`` with
    one row per visited point: ``step``, ``stage`` (1 = field stage, 2 = Hessian steps), ``q`` =
    |x|^2, ``energy`` H(x)/n, ``eigenvalue`` (top eigenvalue of Hess H(x) projected on the
    tangent space, P Hess H P, per spin, beside the edge 2 sqrt(xi''(q)); the end point's
    ``top_eigenvalue`` in ``info`` is the Riemannian Hessian's instead, which subtracts x . grad
    H), ``first_order`` <grad H(x), v>/n after the sign choice, ``predicted_energy`` E_path(q),
    ``predicted_energy_steps`` what the run's own steps predict, E_path less the coarse steps'
    loss (the sum of (q_{i+1} - q_i) sqrt(xi''(q_i)) over the steps so far, from E_path(q_hat)
    after stage 1, from (1/K) sqrt(xi''(0)) along the top eigenvector of Hess H(0), or from 0
    at a random start), ``predicted_edge`` 2 sqrt(xi''(q)), and the
    seconds of the Hessian pass (``t_hessian``), the extra gradient pass if any
    (``t_gradient``) and the eigen-solve (``t_eigen``). The last row is the end point (no
    eigen-solve there: NaN).
    """
    ham = check_ham(ham, "hessian_ascent")
    warn_if_far_scale(ham, "hessian_ascent")
    k = auto_steps(ham.n) if steps is None else check_count(steps, "steps", maximum=MAX_STEPS)
    delta = check_positive(tol, "tol")
    seed = check_seed(seed)
    polish = check_flag(polish, "polish")
    if callback is not None and not callable(callback):
        raise TypeError(f"callback must be callable or None, got {callback!r}")
    first_stage_iter = check_count(
        first_stage_iter, "first_stage_iter", minimum=0, maximum=MAX_STEPS
    )
    mode = _choose_mode(ham, hessian)
    n = ham.n
    # tol only matters where there are Hessian steps, solved by Lanczos (small dense tangent
    # spaces are solved exactly, see _eigen)
    exact = mode == "dense" and solved_densely(n - 1, matrix=True)
    if hessian_moves(ham.mixture, k) > 0 and not exact:
        _warn_if_coarse(ham.mixture, delta)
    mixture = ham.mixture
    t_start = time.perf_counter()
    rng = np.random.default_rng(seed)
    reader = HessianReader(ham) if mode == "dense" else None
    constant = reader.constant if (reader is not None and reader.constant_only) else None
    if constant is None and reader is not None and max(ham.degrees) <= 2:
        constant = np.zeros((n, n))  # a pure field: Hess H = 0

    info: dict[str, Any] = {"hessian_mode": mode}
    q_hat = algorithmic_threshold(mixture) if mixture is not None else 0.0
    begin = resolve_start(start, ham.degrees if mixture is None else mixture.degrees, q_hat > 0)
    if 1 in ham.degrees and mixture is None:
        info["note"] = "given coefficients: no mixture, so no q_hat and no first stage"
        where = "along the top eigenvector of Hess H(0)" if begin == "top" else "at a random point"
        warnings.warn(
            "hessian_ascent: these coefficients have a field (p = 1) but no mixture, so q_hat"
            f" is unknown and the field stage is skipped: the path starts {where}, which"
            " with a field ends lower (sample the instance from its Mixture instead)",
            RuntimeWarning,
            stacklevel=2,
        )
    rows: dict[str, list] = {c: [] for c in _COLUMNS}

    def add_row(**row: Any) -> None:
        for c in _COLUMNS:
            rows[c].append(row.get(c, math.nan))

    if q_hat > 0.0:
        x, info["first_stage"] = _first_stage(ham, q_hat, first_stage_iter)
        info["first_stage"]["predicted"] = float(path_energy(mixture, q_hat))
        stage = 1
    elif begin == "top":
        with one_blas_thread():
            known = reader.constant if reader is not None else None
            direction, info["start_eigenvalue"] = _top_start(ham, mode, rng, delta, known)
        x = direction / math.sqrt(k)
        stage = 2
    else:
        x = random_unit(n, rng) / math.sqrt(k)
        stage = 2
    n_moves = hessian_moves(mixture, k)
    if _ends_on_sphere(q_hat):
        # stage 1 already ended on the sphere: a Hessian step of length 0 would cost a pass
        # and an eigen-solve for nothing
        info["note"] = "q_hat = 1: the first stage ends on the sphere, no Hessian steps"
    eps = math.sqrt(max(1.0 - float(x @ x), 0.0) / n_moves) if n_moves > 0 else 0.0
    v_prev = None
    tangent_buf = None  # the restricted Hessian, one buffer for every step
    theta_scale = None
    fallbacks = 0
    with one_blas_thread():
        for i in range(n_moves + 1):
            if i == n_moves:  # the end point: its energy only (one pass, no Hessian)
                add_row(step=i, stage=stage, q=float(x @ x), energy=ham.energy(x) / n)
                break
            t0 = time.perf_counter()
            t_grad = 0.0
            if mode == "dense":
                hess = constant.copy() if constant is not None else ham.hessian(x)
                t1 = time.perf_counter()
                energy, grad = reader.energy_gradient(x, hess)
                t_grad = time.perf_counter() - t1
            t_hess = time.perf_counter() - t0 - t_grad
            if mode != "dense":
                t1 = time.perf_counter()
                energy, grad = ham.energy_and_gradient(x)
                t_grad = time.perf_counter() - t1
            u = x / norm(x)
            basis = TangentBasis(u)
            t2 = time.perf_counter()
            if mode == "dense":
                if tangent_buf is None:
                    tangent_buf = np.empty((n - 1, n - 1))
                op = basis.restrict_inplace(hess, tangent_buf)
                if theta_scale is None:
                    theta_scale = norm(op)
            else:
                op = _tangent_operator(ham, x, basis)
                if theta_scale is None:
                    theta_scale = norm(grad) + 1.0
            v0 = random_unit(n, rng) if v_prev is None else v_prev
            rel_tol = min(0.1, delta * n / max(theta_scale, 1e-300))
            theta, v, fell_back = top_tangent_eigenpair(op, basis, v0, rel_tol)
            if abs(theta) > theta_scale and rel_tol > delta * n / abs(theta):
                # the scale was no bound (the operator's first step, or a grown edge): the
                # residual may exceed delta n, so solve again from v with the right tolerance
                rel_tol = min(0.1, delta * n / abs(theta))
                theta, v, again = top_tangent_eigenpair(op, basis, v, rel_tol)
                fell_back = fell_back or again
            t_eig = time.perf_counter() - t2
            fallbacks += fell_back
            # headroom: the edge grows along the path, and the next tolerance must come from a
            # bound on the next |theta|, or the re-solve above would run at every step. The
            # predicted edge 2 sqrt(xi''(q)) grows fastest early (x sqrt 2 from the first to the
            # second step of a pure 3-spin path), so its growth to the next q is added.
            growth = _edge_growth(mixture, float(x @ x), float(x @ x) + eps * eps)
            theta_scale = max(_SCALE_HEADROOM * growth * abs(theta), 1e-12 * n)
            first = float(grad @ v)
            if first < 0.0:
                v, first = -v, -first
            add_row(
                step=i,
                stage=stage,
                q=float(x @ x),
                energy=energy / n,
                eigenvalue=theta / n,
                first_order=first / n,
                t_hessian=t_hess,
                t_gradient=t_grad,
                t_eigen=t_eig,
            )
            if callback is not None:
                row = {c: rows[c][-1] for c in _COLUMNS}
                row["q"] = min(max(row["q"], 0.0), 1.0)  # clipped as in the Result's path
                if mixture is not None:  # the path's predictions, as the Result will have them
                    qs = np.clip(np.asarray(rows["q"], dtype=np.float64), 0.0, 1.0)
                    last = _predictions(mixture, qs, q_hat, begin, last_only=True)
                    row.update({c: float(v[0]) for c, v in last.items()})
                callback(row)
            x = x + eps * v
            v_prev = v
            stage = 2
    ascent_seconds = time.perf_counter() - t_start

    path = {c: np.asarray(rows[c], dtype=np.float64) for c in _COLUMNS}
    path["step"] = path["step"].astype(np.int64)
    path["stage"] = path["stage"].astype(np.int64)
    path["q"] = np.clip(path["q"], 0.0, 1.0)  # |x|^2 rounds to 1 + 2e-16 on the sphere
    if mixture is not None:
        path.update(_predictions(mixture, path["q"], q_hat, begin))
    size = norm(x)
    x = x / size
    e_ascent = float(path["energy"][-1])
    if abs(size - 1.0) > _ON_SPHERE:
        # the path stopped inside the ball (steps = 1 with q_hat < 1): the point returned is
        # the end point scaled to the sphere, so its energy is measured there again
        e_ascent = ham.energy(x) / n
    info.update(
        {
            "energy_ascent": e_ascent,
            "final_norm": size,
            "eigen_fallbacks": fallbacks,
            "ascent_seconds": ascent_seconds,
            "hessian_seconds": float(np.sum(path["t_hessian"][:-1])),
            "gradient_seconds": float(np.sum(path["t_gradient"][:-1])),
            "eigen_seconds": float(np.sum(path["t_eigen"][:-1])),
            "energy_gradient_from_hessian": bool(reader is not None and reader.exact),
        }
    )
    if mixture is not None:
        alg = algorithmic_energy(mixture)
        info["alg"] = alg
        info["q_hat"] = q_hat
        info["alg_gap_ascent"] = e_ascent - alg
    energy = e_ascent
    if polish:
        pol = polish_point(ham, x, check=True)
        x, energy = pol.x, pol.energy
        info["polish"] = pol.info
        info.update({k_: pol.info[k_] for k_ in ("n_positive", "top_eigenvalue", "local_max")})
        info["grad_norm"] = pol.info["grad_norm"]
    if mixture is not None:
        info["alg_gap"] = energy - info["alg"]  # of the point returned, as in the baselines
    config = base_config(
        ham,
        "hessian",
        steps=k,
        tol=delta,
        seed=seed,
        polish=bool(polish),
        hessian=hessian,
        first_stage_iter=first_stage_iter,
        start=begin,
    )
    return Result(x, energy, path, config, time.perf_counter() - t_start, info)
