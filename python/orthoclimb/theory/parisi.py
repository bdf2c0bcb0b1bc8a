"""The ground-state energy from the zero-temperature Parisi formula (Chen-Sen form).

Units and sign: energy per spin on the unit sphere, maximization (GS = lim max_x H(x)/n).

Chen and Sen (arXiv:1512.08492) write the ground-state energy of a spherical mixture as an
infimum over a number L and a nondecreasing function alpha >= 0 on [0, 1) with L > int_0^1 alpha,
of xi'(1) L - int_0^1 xi''(q) (int_0^q alpha) dq + int_0^1 dq / (L - int_0^q alpha), halved
(their form is restated here from memory; the checks below and in the tests confirm it). Putting
B = L - int_0^1 alpha > 0 and integrating the xi'' term by parts gives the form we use:

    GS = inf over B > 0 and nondecreasing alpha >= 0 of P(B, alpha),

    P(B, alpha) = 1/2 [ xi'(1) B + int_0^1 xi'(q) alpha(q) dq + int_0^1 dq / C(q) ],
    C(q) = B + int_q^1 alpha(s) ds.

Note the direction of the inner integral: C(q) collects alpha from q up to 1, so C(1) = B and C
decreases. (The other direction, B + int_0^q alpha, which a restatement can slip into, cannot
reproduce GS = ALG for full-RSB mixtures, while this one gives back, from its stationarity
conditions, both the full-RSB criterion and the ALG formula with q_hat. A constant alpha gives the
same value in both versions, which is why the one-step solution of pure models does not tell them
apart. For xi = q^2 + 0.05 q^4, which satisfies the criterion, that version's minimum over 32 steps
is 1.4820897 while ALG = 1.4820407; this version gives ALG to 1e-10.)

Why this form is convenient. P is convex in (B, alpha) jointly: two linear terms plus the integral
of 1 / (a positive linear function). We take alpha constant, alpha = m_j, on each piece
[q_{j-1}, q_j) of a grid 0 = q_0 < ... < q_K = 1 and write m_j = d_1 + ... + d_j with increments
d_j >= 0, so that "nondecreasing and nonnegative" becomes simple bounds and the minimization over
(B, d) is a smooth convex bound-constrained problem, solved by SciPy's L-BFGS-B with the exact
gradient. Every integral is exact in closed form:

    int_0^1 xi'(q) alpha(q) dq = sum_j m_j (xi(q_j) - xi(q_{j-1})),
    C_j = C(q_j) = B + sum_{i > j} m_i (q_i - q_{i-1}),
    int over piece j of dq / C = log(C_{j-1} / C_j) / m_j = (Delta_j / C_j) log1p(x_j) / x_j,
        with x_j = m_j Delta_j / C_j (the limit Delta_j / C_j when m_j = 0),
    int over piece j of dq / C^2 = Delta_j / (C_{j-1} C_j).

Any step function is an admissible alpha, so the value returned is an upper bound on GS (up to the
optimizer's tolerance). The grid is refined where alpha changes until two successive values agree
to ``tol`` and moving any jump of alpha could not gain more than ``tol`` (see below); a jump that
could gain more has its grid point moved toward its best place, off the dyadic grid.

Optimality check. Adding a small step of height e at t (alpha -> alpha + e 1_{[t, 1)}) changes P
by e D(t) / 2 + O(e^2), with

    D(t) = xi(1) - xi(t) - int_0^1 (1 - max(q, t)) / C(q)^2 dq.

At the optimum D >= 0 everywhere with D = 0 where alpha increases. Since
D'(t) = -xi'(t) + int_0^t C^(-2) dq, on a full-RSB interval D = 0 forces C(q) = xi''(q)^(-1/2),
hence alpha = -d/dq xi''^(-1/2), which is nondecreasing exactly when xi''^(-1/2) is concave (the
criterion of arXiv:1812.04588); the value then equals ALG. With a field, D'(0) = -xi'(0) < 0, so
alpha = 0 near 0, and the full-RSB part can start only where xi'(q) = q xi''(q): at q_hat. Both
facts are what the tests check numerically. D is evaluated in closed form too; the solver uses it
to decide where to refine and to estimate what moving a jump of alpha would still gain.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from ..errors import NonFiniteError
from ..model.arrays import as_float_array
from ..model.mixture import Mixture
from ..runtime import one_blas_thread
from ._checks import check_count, check_mixture, check_positive, shown
from ._parisi_fits import _confirm_fit, _explicit_start, _few_jumps
from ._parisi_grid import _Grid, _solve, _split
from ._parisi_moves import (
    _D_THRESHOLD,
    _JUMP_RTOL,
    _jump_moves,
    _level_at_zero,
    _move_jumps,
    _new_steps,
    _start_later,
    _tidy,
)
from .algorithmic import algorithmic_energy

__all__ = [
    "DEFAULT_TOL",
    "TOL_FLOOR",
    "GroundState",
    "ground_state",
    "parisi_functional",
    "parisi_gradient",
]

# ground_state's tolerance unless told otherwise (absolute, energy per spin); the studies'
# reports compute GS to it
DEFAULT_TOL = 1e-6


# The smallest tolerance of ground_state relative to s = sqrt(xi'(1)), the scale of GS. The
# solve's values carry rounding of about 1e-15 s, but its estimate of what moving a jump could
# gain stays near 2e-12 s: gammas of 1e50 and 1e100 (2:1,4:0.3 and 2:1,4:0.5 scaled) ran to
# 3000 pieces unconverged with a floor of 1e-13 s.
TOL_FLOOR = 1e-11


def _check_step_function(B: Any, breakpoints: Any, alpha: Any, where: str):
    B = check_positive(B, where, "B")
    # text, flags and non-finite entries are refused here, with the entry named
    q = as_float_array(breakpoints, f"{where}(): breakpoints")
    a = as_float_array(alpha, f"{where}(): alpha")
    _check_breakpoints(q, where)
    _check_alpha(a, q.size, where)
    return B, q, a


def _check_breakpoints(q: np.ndarray, where: str) -> None:
    """0 = q_0 < q_1 < ... < q_K = 1 with K >= 1; the message says what is wrong, shows q."""
    if q.ndim != 1 or q.size < 2:
        count = f"{q.size} entr{'y' if q.size == 1 else 'ies'}, at least 2 needed"
        wrong = f"shape {q.shape}" if q.ndim != 1 else count
    elif q[0] != 0.0:
        wrong = f"breakpoints[0] = {float(q[0])!r} is not 0"
    elif q[-1] != 1.0:
        wrong = f"breakpoints[{q.size - 1}] = {float(q[-1])!r}, the last, is not 1"
    elif np.any(np.diff(q) <= 0.0):
        k = int(np.flatnonzero(np.diff(q) <= 0.0)[0]) + 1
        wrong = (
            f"breakpoints[{k}] = {float(q[k])!r} is not above"
            f" breakpoints[{k - 1}] = {float(q[k - 1])!r}"
        )
    else:
        return
    raise ValueError(
        f"{where}(): breakpoints must increase strictly from 0 to 1 (a 1-d array"
        f" 0 = q_0 < ... < q_K = 1, K >= 1), got {shown(q)}: {wrong}"
    )


def _check_alpha(a: np.ndarray, size: int, where: str) -> None:
    """One value per piece (``size`` - 1 of them), nonnegative and nondecreasing."""
    if a.shape != (size - 1,):
        raise ValueError(
            f"{where}(): alpha needs one value per piece: {size - 1} for {size} breakpoints,"
            f" got shape {a.shape}: alpha = {shown(a)}"
        )
    if a[0] < 0.0:
        wrong = f"alpha[0] = {float(a[0])!r} is negative"
    elif np.any(np.diff(a) < 0.0):
        k = int(np.flatnonzero(np.diff(a) < 0.0)[0]) + 1
        wrong = f"alpha[{k}] = {float(a[k])!r} is below alpha[{k - 1}] = {float(a[k - 1])!r}"
    else:
        return
    raise ValueError(
        f"{where}(): alpha must be nonnegative and nondecreasing, got {shown(a)}: {wrong}"
    )


def _theta(B: float, alpha: np.ndarray) -> np.ndarray:
    return np.concatenate(([B], np.diff(alpha, prepend=0.0)))


def parisi_functional(mixture: Mixture, B: float, breakpoints: Any, alpha: Any) -> float:
    """The Chen-Sen functional P(B, alpha) for a step function alpha, in closed form.

    ``alpha[j]`` is the value on [breakpoints[j], breakpoints[j+1]); breakpoints increase from 0 to
    1; alpha is nonnegative and nondecreasing; B > 0. Any such (B, alpha) gives an upper bound on
    the ground-state energy per spin.

    P = xi'(1) B / 2 + int_0^1 xi'(q) alpha(q) dq / 2 + int_0^1 dq / (2 C(q)), C(q) = B +
    int_q^1 alpha, grows without bound as B -> infinity (like xi'(1) B / 2) and, unless alpha
    ends above 0, as B -> 0 (like 1 / (2 B)); it is computed for every finite B > 0 without
    overflow in between, down to B = 5e-324. Where P itself exceeds float64's range (1.8e308),
    NonFiniteError names B and the term that overflows: B above 2 * 1.8e308 / xi'(1), or B
    below about 1e-308 with alpha near 0 at q = 1, or alpha above 2 * 1.8e308 / xi(1).
    """
    mixture = check_mixture(mixture, "parisi_functional")
    B, q, a = _check_step_function(B, breakpoints, alpha, "parisi_functional")
    grid = _Grid(mixture, q)
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        value, _ = grid.value_and_gradient(_theta(B, a), gradient=False)
    if not math.isfinite(value):
        raise _functional_overflow("parisi_functional", grid, B, a)
    return float(value)


def parisi_gradient(mixture: Mixture, B: float, breakpoints: Any, alpha: Any) -> np.ndarray:
    """Exact gradient of :func:`parisi_functional` with respect to (B, d_1, ..., d_K), where
    d_j = alpha[j] - alpha[j-1] (alpha[-1] = 0) are the increments the solver works with.

    dP/dB = (xi'(1) - int_0^1 dq / C(q)^2) / 2 and dP/dd_k = D(q_(k-1)) / 2 (D of the module
    docstring); the 1/C^2 integrals are at most 1 / B^2, so every component is finite for
    B >= 1e-153 whatever alpha, and is computed without overflow in between. For smaller B a
    component may exceed float64's range (dP/dB = -5e322 at B = 5e-324 when alpha ends at 2);
    NonFiniteError then names B and the components.
    """
    mixture = check_mixture(mixture, "parisi_gradient")
    B, q, a = _check_step_function(B, breakpoints, alpha, "parisi_gradient")
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        _, grad = _Grid(mixture, q).value_and_gradient(_theta(B, a))
    if not np.all(np.isfinite(grad)):
        raise _gradient_overflow("parisi_gradient", B, q, a, grad)
    return grad


# float64's largest value, and the smallest B for which the 1/C terms of P and of its gradient
# cannot overflow whatever alpha: int_0^1 dq / (2 C) <= 1 / (2 B) and int_0^1 dq / C^2 <= 1 / B^2
# (C >= B), with a margin for the other terms (and B^2 not subnormal).
_MAX = float(np.finfo(np.float64).max)
_B_VALUE_FLOOR = 1e-308
_B_GRADIENT_FLOOR = 1e-153


def _functional_overflow(where: str, grid: _Grid, B: float, a: np.ndarray) -> NonFiniteError:
    """The error for a P(B, alpha) beyond float64's range: its three terms, and for each one
    that overflows by itself what keeps it finite."""
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        b_term, a_term, c_term = grid.half_terms(_theta(B, a))
    hints = []
    if math.isinf(b_term):
        hints.append(f"B must be below 2 * {_MAX:.5g} / xi'(1) = {2.0 * (_MAX / grid.dxi1):.4g}")
    if math.isinf(a_term):
        top = 2.0 * (_MAX / grid.xi1)
        hints.append(
            f"alpha (up to {float(a[-1])!r}) must stay below 2 * {_MAX:.5g} / xi(1) = {top:.4g}"
        )
    if math.isinf(c_term):
        hints.append(
            f"C(q) = B + int_q^1 alpha(s) ds >= B is too small near q = 1: B >= {_B_VALUE_FLOOR:g}"
            " keeps that term finite whatever alpha (it is at most 1 / (2 B))"
        )
    if not hints:
        hints.append(f"their sum exceeds {_MAX:.5g}: lower B or alpha")
    return NonFiniteError(
        f"{where}(): P(B, alpha) overflows float64 at B = {B!r} with alpha = {shown(a)}:"
        f" xi'(1) B / 2 = {b_term:.4g}, int_0^1 xi'(q) alpha(q) dq / 2 = {a_term:.4g},"
        f" int_0^1 dq / (2 C(q)) = {c_term:.4g}; " + "; ".join(hints)
    )


def _gradient_overflow(
    where: str, B: float, q: np.ndarray, a: np.ndarray, grad: np.ndarray
) -> NonFiniteError:
    """The error for a gradient of P beyond float64's range, which only a small B can cause."""
    bad = np.flatnonzero(~np.isfinite(grad))
    return NonFiniteError(
        f"{where}(): the gradient of P overflows float64 at B = {B!r} with breakpoints ="
        f" {shown(q)} and alpha = {shown(a)}: component(s) {bad.tolist()} (0 for B, k for d_k)"
        f" = {shown(grad[bad])}: each is a xi term minus half an integral over [0, 1] of at most"
        f" 1 / C(q)^2, C(q) = B + int_q^1 alpha(s) ds >= B; B >= {_B_GRADIENT_FLOOR:g} keeps"
        " every component finite whatever alpha"
    )


@dataclass(frozen=True, eq=False)
class GroundState:
    """Result of :func:`ground_state`.

    Attributes:
        value: the Parisi functional at the returned (B, alpha); an upper bound on GS, within
            about ``change`` of it when ``converged``. The lower of the last round's grid
            solution and a fit of one or two freely placed jumps (``_few_jumps``), which wins
            where alpha has isolated jumps.
        B: the optimal B.
        breakpoints: 0 = q_0 < ... < q_K = 1 (neighbouring pieces with equal alpha merged).
        alpha: alpha on [q_{j-1}, q_j), nondecreasing.
        n_steps: K, the number of constant pieces of alpha (1 for a one-step solution).
        grid_size: number of pieces of the grid of the returned alpha (before merging; k + 1
            when the fit of k jumps won, plus the steps its check added).
        rounds: number of grid refinements solved.
        converged: True when two successive values differed by at most ``tol`` and moving the
            jumps of alpha could not gain more than ``tol`` (``jump_gain``); when the fit won,
            also when a step added where D is lowest gains at most ``tol`` (``_confirm_fit``);
            when the grid's solution stands (and GS = ALG is not known in closed form), also
            when a solve of the last grid from a fresh start gains at most ``tol``
            (``_fresh_check``): a larger gain means the rounds' solves had stalled, and they go
            on from the fresh solution with every piece split (at most ``_MAX_RESUMES`` times,
            within ``max_steps`` and ``max_rounds``); where they cannot, converged is False.
            Rounds that end at their limits are checked by a fresh start too (its solution
            kept where lower), and then compared with a solve at ten times the tolerance
            (``looser_tol``).
        change: |last round's value - the value of the round before| (grid values), or what
            the fresh start gained when that exceeded ``tol`` and the rounds could not go on.
        jump_gain: first-order estimate of the energy still to gain by moving a jump of alpha
            inside its neighbouring pieces (0 for a continuous alpha without interior jumps), for
            the last round's solution, or for the fresh start's when that won by more than
            ``tol``.
        tol: the tolerance used: the requested one, or ``TOL_FLOOR`` s if larger.
        alg: ALG for the same mixture.
        gap: value - alg (>= 0 up to tolerances; about 0 for full-RSB mixtures).
        history: (grid_size, value) for each round of the grid (before the jump fit and the
            fresh start, so ``value`` can lie below the last entry).
        looser_tol: None, or, where a solve that did not converge ended above a solve at ten
            times its tolerance, that tolerance: the result (value, B, alpha, change, history,
            ...) is then the looser solve's, with ``converged`` False and ``tol`` the one
            asked for.
    """

    value: float
    B: float
    breakpoints: np.ndarray
    alpha: np.ndarray
    n_steps: int
    grid_size: int
    rounds: int
    converged: bool
    change: float
    jump_gain: float
    tol: float
    alg: float
    gap: float
    history: tuple[tuple[int, float], ...] = field(default=())
    looser_tol: float | None = None

    def __repr__(self) -> str:
        # the arrays (up to the solver's grid size) and the history are left to the fields
        state = "converged" if self.converged else "NOT converged"
        return (
            f"GroundState(value={self.value:.10g}, gap to ALG={self.gap:.3g}, {state},"
            f" n_steps={self.n_steps}, B={self.B:.6g}, grid_size={self.grid_size},"
            f" change={self.change:.2g}, tol={self.tol:.2g})"
        )

    def to_dict(self) -> dict[str, Any]:
        """JSON-friendly form."""
        return {
            "value": self.value,
            "B": self.B,
            "breakpoints": self.breakpoints.tolist(),
            "alpha": self.alpha.tolist(),
            "n_steps": self.n_steps,
            "grid_size": self.grid_size,
            "rounds": self.rounds,
            "converged": self.converged,
            "change": self.change,
            "jump_gain": self.jump_gain,
            "tol": self.tol,
            "alg": self.alg,
            "gap": self.gap,
            "looser_tol": self.looser_tol,
        }


def ground_state(
    mixture: Mixture,
    tol: float = DEFAULT_TOL,
    *,
    initial_steps: int = 8,
    max_steps: int = 4096,
    max_rounds: int = 40,
) -> GroundState:
    """Ground-state energy per spin from the zero-temperature Parisi formula (Chen-Sen form).

    Minimizes P(B, alpha) (module docstring) over B > 0 and nondecreasing step functions alpha on
    a grid, starting from ``initial_steps`` equal pieces and splitting, after each solve, the
    pieces where alpha changes (and any piece where adding a step would still lower P). It stops
    when two successive values differ by at most ``tol`` and ``jump_gain`` (below) is at most
    ``tol`` (``converged = True``), or when the grid
    would exceed ``max_steps`` pieces or ``max_rounds`` rounds (``converged = False``). When nothing
    needs splitting, every piece is split once to confirm the value.

    For pure p-spin models the optimum has one step (alpha constant on [0, 1)) and is exact on any
    grid. For full-RSB mixtures alpha is continuous and the error falls quickly with the spacing
    (we observe about h^4: a 16-piece grid is within 1e-9 of ALG for xi = q^2 + 0.05 q^4); where
    GS = ALG each round also starts from the optimum known in closed form (_explicit_start). Where
    alpha jumps inside (0, 1), the error is quadratic in the distance of the jump from its optimal
    place; ``jump_gain`` estimates it and refinement goes on until it is below ``tol`` too.

    L-BFGS-B, warm-started round after round, can stall on this ill-conditioned problem (2:1,6:0.3
    at tol 1e-10 stopped 7e-10 above the optimum with two rounds agreeing to the last bit), so a
    converged grid solution is checked by a solve of the last grid from a fresh start; when that
    gains more than ``tol`` the rounds go on from its solution with every piece split, and where
    they cannot (limits), the lower value is returned with ``converged = False``.

    ``tol`` is absolute, in energy per spin, as every tolerance of the package; GS scales like
    s = sqrt(xi'(1)) (gammas times c: GS times c). Below ``TOL_FLOOR`` s, which the solver's
    estimates cannot resolve, it is raised to that (for gammas of 1e50 a tol of 1e-6 would
    ask for 1e-56 relative and never converge); ``GroundState.tol`` is the one used. For tiny
    gammas an absolute tol is loose relative to GS: pass a tol in proportion.

    The solve runs with one BLAS thread (``threadpoolctl``): L-BFGS-B's small dense products
    gain nothing from more, and busy-waiting OpenBLAS threads made a solve 7-20 times slower on
    a loaded two-core machine (a review: 1.3 s against 0.08 s for xi = q^2 + 0.05 q^4).

    Returns a :class:`GroundState` (value per spin, B, alpha, steps, convergence, gap to ALG).
    """
    mixture = check_mixture(mixture, "ground_state")
    tol = check_positive(tol, "ground_state", "tol")
    initial_steps = check_count(initial_steps, "ground_state", "initial_steps", 1)
    max_steps = check_count(max_steps, "ground_state", "max_steps", initial_steps)
    max_rounds = check_count(max_rounds, "ground_state", "max_rounds", 1)
    with one_blas_thread():
        result = _ground_state(mixture, tol, initial_steps, max_steps, max_rounds)
        if result.converged:
            return result
        # Every value is P at an admissible (B, alpha), an upper bound on GS, so the lower of
        # two solves is the better answer. A solve at a tolerance it could not reach ran its
        # grid full on a stalled path and could end above a solve at ten times the tolerance
        # (2:1,6:0.3 at 1e-11: 8.0e-11 above the 1e-10 solve, a trial): that solve is tried
        # too, and kept, still not converged, where it is lower.
        looser = _ground_state(mixture, 10.0 * result.tol, initial_steps, max_steps, max_rounds)
        if looser.value < result.value:
            return replace(looser, converged=False, tol=result.tol, looser_tol=looser.tol)
        return result


# Times the rounds go on from a fresh start's solution after it showed them stalled.
_MAX_RESUMES = 2


def _even_start(size: int) -> np.ndarray:
    """B~ = 1 and alpha~ rising evenly to 1 over the pieces: every increment inside its bound."""
    return np.concatenate(([1.0], np.full(size, 1.0 / size)))


def _fresh_check(
    grid: _Grid, theta: np.ndarray, value: float, tol: float
) -> tuple[np.ndarray, float, float]:
    """The rounds' solution checked against a solve of the same grid from a fresh start.

    Each round starts from the last solution, in which the new pieces begin with increments at
    their bound 0, and L-BFGS-B can stall there in this ill-conditioned problem: for 2:1,6:0.3 at
    tol 1e-10 two rounds agreed to the last bit while a solve of the same grid from
    :func:`_even_start` went 7.3e-10 lower (2:1,5:0.3: 4.0e-10; a user trial found it with a
    uniform grid of its own). Returns the lower of the two solutions, its value and what the
    fresh start gained (0 when it did not go lower). A gain above ``tol`` (in the normalized
    units of the solve) means the rounds had stalled; they then go on from the fresh solution,
    warm again: a fresh start can stall too (a finer grid solved from one came out above the
    coarser grid's value in a review), so it does not certify a value by itself.
    """
    fresh = _solve(grid, _even_start(grid.size))
    fresh_value, _ = grid.value_and_gradient(fresh, False)
    if not fresh_value < value:
        return theta, value, 0.0
    theta, lower = _tidy(grid, fresh, fresh_value)
    return theta, lower, value - lower


def _jump_gain(grid: _Grid, theta: np.ndarray, tol: float) -> tuple:
    """The first-order estimates of what moving alpha's jumps (``_jump_moves``) and its start
    (``_level_at_zero``) could still gain, in the normalized units of the solve: (gain, the
    jumps, their best places, their gains, which are isolated, the level's gain, its place).
    The level's estimate is first order in its height, which is not small: near the threshold
    it came out about 5 % low (1:0.00513,3:1 at tol 1e-10 stopped 1.02e-10 above the one-jump
    optimum), so it counts twice, toward convergence and the move."""
    d = theta[1:]
    jumps = np.flatnonzero(d[1:] > _JUMP_RTOL * (1.0 + float(d.sum()))) + 1
    gain, places, gains, isolated = _jump_moves(grid, theta, jumps, tol)
    zero_gain, zero_place = _level_at_zero(grid, theta, tol)
    zero_gain *= 2.0
    return gain + zero_gain, jumps, places, gains, isolated, zero_gain, zero_place


def _ground_state(
    mixture: Mixture, tol: float, initial_steps: int, max_steps: int, max_rounds: int
) -> GroundState:
    q = np.linspace(0.0, 1.0, initial_steps + 1)
    # Solve for xi / xi'(1); GS, B and alpha for xi follow by scaling with s = sqrt(xi'(1)):
    # GS = s GS~, B = B~ / s, alpha = alpha~ / s.
    s = math.sqrt(mixture.xi(1.0, 1))
    weight = 1.0 / (s * s)
    tol = max(tol, TOL_FLOOR * s)
    # Start from the replica-symmetric optimum B~ = 1 with a constant alpha~, or from the
    # optimum known in closed form where there is one (on every round's grid, see
    # _explicit_start).
    theta = np.zeros(initial_steps + 1)
    theta[0] = 1.0
    theta[1] = 0.5
    explicit = _explicit_start(mixture, s)
    history: list[tuple[int, float]] = []
    previous = math.inf
    change = math.inf
    gain = math.inf
    converged = False
    tried = False  # grid points were put where a new step of alpha might go (_new_steps)
    resumed = 0  # times the rounds went on after _fresh_check
    while True:
        for _round in range(max_rounds - len(history)):
            grid = _Grid(mixture, q, weight)
            if explicit is not None:
                known = explicit(q)
                if (
                    grid.value_and_gradient(known, False)[0]
                    < grid.value_and_gradient(theta, False)[0]
                ):
                    theta = known
            theta = _solve(grid, theta)
            value, _ = grid.value_and_gradient(theta, False)
            solved_grid, solved_theta = grid, theta
            history.append((grid.size, s * value))
            change = s * abs(previous - value)
            previous = value
            gain, jumps, places, gains, isolated, zero_gain, zero_place = _jump_gain(
                grid, theta, tol / s
            )
            gain *= s
            # past alpha's last jump, D is sampled densely: a new step of alpha may belong there.
            # Grid points put there on the last round and a change within tol since: they did not
            # help (at a continuous top, D keeps its discretization error there), so they do not
            # hold the solve up again
            new_steps = _new_steps(grid, theta)
            if change <= tol and gain <= tol and (not new_steps or tried):
                converged = True
                break
            # Split any piece where adding a step at its midpoint would lower P (D < 0 there), and
            # both pieces next to every interior jump of alpha, unless the jump can move: then its
            # grid point goes toward where D is lowest (splitting alone can leave a jump stranded a
            # fraction of a piece from its optimum, which L-BFGS-B then never shifts: measured for
            # xi = 0.04 q + q^4, 3.8e-9 above the optimum while the value had stopped changing).
            mids = 0.5 * (q[:-1] + q[1:])
            flag = grid.directional(theta, mids, np.arange(grid.size)) < -_D_THRESHOLD
            q, moving = _move_jumps(grid, theta, value, jumps, places, isolated & (s * gains > tol))
            still = jumps[~moving]
            flag[still - 1] = True
            flag[still] = True
            later = None
            if s * zero_gain > tol:  # alpha should start inside the first piece: start it there
                later = _start_later(_Grid(mixture, q, weight), theta, value, zero_place)
                flag[0] = flag[0] and later is None
            if later is not None:
                new_steps = {}  # found again on the next grid, after alpha's start has moved
            # only points actually put on the grid count as tried (_move_jumps leaves the pieces
            # past alpha's last jump alone, so each point is still inside its piece)
            tried = bool(new_steps)
            for k in new_steps:  # split there at the lowest sample of D, not at the midpoint
                flag[k] = False
            if not np.any(flag) and not np.any(moving) and later is None and not new_steps:
                flag[:] = True
            if grid.size + int(flag.sum()) + (later is not None) + len(new_steps) > max_steps:
                break
            if later is not None:
                q, theta = later
                flag = np.concatenate(([False], flag))
            q, theta = _split(q, theta, flag, new_steps)

        solved_theta, value = _tidy(solved_grid, solved_theta, value)
        fitted = _few_jumps(solved_grid, solved_theta, value, tol / s)
        if fitted[0] is not solved_grid:  # the fit won: check it as the rounds checked the grid
            solved_grid, solved_theta, value, fit_gain = _confirm_fit(*fitted, tol / s)
            converged = converged and bool(s * fit_gain <= tol)
            break
        if explicit is not None:
            break
        # the grid's solution stands: check that the rounds did not stall (where the
        # closed-form optimum starts every round they cannot, and it costs a solve of the whole
        # grid). Rounds that ended at their limits are checked too, and keep what the check
        # gains: stalled rounds that still saw a jump to move split on until the grid was
        # full, 1.0e-10 above the fresh start's value (1:0.1,2:1,5:0.3 at tol 1e-11, a trial)
        solved_theta, value, gained = _fresh_check(solved_grid, solved_theta, value, tol / s)
        if not converged:
            if gained > 0.0:
                change = s * gained
                gain = s * _jump_gain(solved_grid, solved_theta, tol / s)[0]
            break
        if s * gained <= tol:
            break
        # they had: go on from the fresh start's solution with every piece split, which the
        # next round solves warm and compares with it (within the same limits); where they
        # cannot, the result is the fresh solution's, not converged
        converged = False
        limits = resumed == _MAX_RESUMES or len(history) >= max_rounds
        if limits or 2 * solved_grid.size > max_steps:
            change = s * gained
            gain = s * _jump_gain(solved_grid, solved_theta, tol / s)[0]
            break
        resumed += 1
        q, theta = _split(solved_grid.q, solved_theta, np.ones(solved_grid.size, dtype=bool))
        previous = value
        tried = False
    B = float(solved_theta[0]) / s
    d = solved_theta[1:]
    m = np.cumsum(d) / s
    keep = np.concatenate(([True], d[1:] > 0.0))  # a new constant piece starts where alpha jumps
    starts = np.flatnonzero(keep)
    breakpoints = np.concatenate((solved_grid.q[starts], [1.0]))
    alpha = m[starts]
    alg = algorithmic_energy(mixture)
    value *= s
    return GroundState(
        value=float(value),
        B=B,
        breakpoints=breakpoints,
        alpha=alpha,
        n_steps=int(alpha.size),
        grid_size=solved_grid.size,
        rounds=len(history),
        converged=bool(converged),  # a NumPy bool failed json.dumps (theory --json)
        change=float(change),
        jump_gain=float(gain),
        tol=tol,
        alg=alg,
        gap=float(value) - alg,
        history=tuple(history),
    )
