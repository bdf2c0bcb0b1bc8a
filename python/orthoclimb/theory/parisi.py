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
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy.optimize import minimize

from ..model.arrays import as_float_array
from ..model.mixture import Mixture
from ..runtime import one_blas_thread
from ._checks import check_count, check_mixture, check_positive
from .algorithmic import algorithmic_energy
from .criterion import full_rsb

__all__ = ["TOL_FLOOR", "GroundState", "ground_state", "parisi_functional", "parisi_gradient"]

# The smallest tolerance of ground_state relative to s = sqrt(xi'(1)), the scale of GS. The
# solve's values carry rounding of about 1e-15 s, but its estimate of what moving a jump could
# gain stays near 2e-12 s: gammas of 1e50 and 1e100 (2:1,4:0.3 and 2:1,4:0.5 scaled) ran to
# 3000 pieces unconverged with a floor of 1e-13 s.
TOL_FLOOR = 1e-11

_B_FLOOR = 1e-8
_MAX_RESTARTS = 40
# A piece whose midpoint has D below -_D_THRESHOLD is split (units where xi'(1) = 1).
_D_THRESHOLD = 1e-12
# Increments below this fraction of 1 + max alpha are not treated as jumps.
_JUMP_RTOL = 1e-10
# A jump of alpha counts as isolated (see _jump_moves) when the increments on the grid points
# next to it are below this fraction of its height: a ramp of 1e-7 left behind a jump of 0.23
# (xi = 2.25 q + q^3) made it count as a step of a continuous part, so it was never moved and
# the solve reported converged 8e-10 above the optimum at tol 1e-11.
_RAMP_RATIO = 1e-3
# A jump of alpha (or its start, _start_later) moves this fraction of the way to its estimated
# best place, the first that lowers P: the estimate is first order in the jump's height.
_MOVE_FRACTIONS = (1.0, 0.5, 0.25, 0.125)
# Increments below this fraction of 1 + max alpha are candidates for removal by _tidy.
_TIDY_RTOL = 1e-6
# Numbers of freely placed jumps tried against the grid's alpha at the end (_few_jumps).
_FEW_JUMPS = (1, 2)
# Least first move of each coordinate in the jump fit's Nelder-Mead (_fit_jumps).
_SIMPLEX_STEP = 0.05
# Most steps added to a fitted alpha while each still lowers P by more than tol (_confirm_fit).
_CONFIRM_STEPS = 8
# Points per piece where D is sampled next to a step of a continuous part of alpha.
_COARSE_SAMPLES = np.arange(1, 8) / 8.0
# Points per piece where D is sampled next to an isolated jump, to find where it should move.
# Uniform over the piece, and geometrically closer to both ends, where a jump of alpha sits
# when it is a tiny distance from its optimal place (D < 0 then only in a narrow range there).
_JUMP_SAMPLES = np.unique(
    np.concatenate(
        (np.arange(1, 16) / 16.0, 2.0 ** -np.arange(5, 31), 1 - 2.0 ** -np.arange(5, 31))
    )
)
# The same samples strictly inside a piece (a new grid point must not round to an end).
_INNER_SAMPLES = _JUMP_SAMPLES[(_JUMP_SAMPLES > 1e-6) & (_JUMP_SAMPLES < 1.0 - 1e-6)]

# Series of log1p(x)/x and of (log1p(x) - x/(1+x))/x^2 for small x, where the direct formulas lose
# digits (the second one about eps/x^2). Both have alternating terms of size x^k, so 24 terms are
# exact to double precision for 0 <= x < 0.1.
_SMALL_X = 0.1
_K = np.arange(24)
_PHI_SERIES = (-1.0) ** _K / (_K + 1.0)
_PSI_SERIES = (-1.0) ** _K * (_K + 1.0) / (_K + 2.0)


def _series_or_closed(x: np.ndarray, series: np.ndarray, closed) -> np.ndarray:
    """The power series below _SMALL_X (where the closed form cancels), the closed form above."""
    x = np.asarray(x, dtype=np.float64)
    out = np.empty_like(x)
    small = x < _SMALL_X
    out[small] = np.polynomial.polynomial.polyval(x[small], series)
    out[~small] = closed(x[~small])
    return out


def _phi(x: np.ndarray) -> np.ndarray:
    """log1p(x) / x, with the value 1 at x = 0 (x >= 0)."""
    return _series_or_closed(x, _PHI_SERIES, lambda v: np.log1p(v) / v)


def _psi(x: np.ndarray) -> np.ndarray:
    """int_0^1 t / (1 + x t)^2 dt = (log1p(x) - x / (1 + x)) / x^2, with the value 1/2 at 0."""
    return _series_or_closed(x, _PSI_SERIES, lambda v: (np.log1p(v) - v / (1.0 + v)) / (v * v))


def _xi_increments(mixture: Mixture, q: np.ndarray) -> np.ndarray:
    """xi(q_j) - xi(q_{j-1}) for each piece, without cancellation: sum over p of
    c_p (q_j - q_{j-1}) sum_{k < p} q_j^k q_{j-1}^(p-1-k), a sum of nonnegative terms
    (q_j - q_{j-1} is exact in floating point for nearby q). The plain difference of xi values
    loses all its digits on a piece of width 1e-15 near 1, and a large alpha there (2.6e14)
    turned that rounding into a value 2e-3 below the ground state, which an upper bound must
    never be (a user review)."""
    right, left = q[1:], q[:-1]
    out = np.zeros(right.size)
    for p, c in mixture.xi_coefficients.items():
        powers = sum(right**k * left ** (p - 1 - k) for k in range(p))
        out += c * powers
    return out * (right - left)


class _Grid:
    """A grid 0 = q_0 < ... < q_K = 1 with the mixture quantities the functional needs."""

    def __init__(self, mixture: Mixture, q: np.ndarray, weight: float = 1.0):
        # ``weight`` multiplies xi: the solver works with xi / xi'(1), whose optimum has B, alpha
        # and the value of order 1 (P scales like sqrt of a factor on xi).
        self.mixture = mixture
        self.weight = weight
        self.q = q
        self.dq = np.diff(q)
        self.dxi = weight * _xi_increments(mixture, q)
        self.xi1 = weight * float(mixture.xi(1.0))
        self.dxi1 = weight * float(mixture.xi(1.0, 1))

    @property
    def size(self) -> int:
        return self.dq.size

    def pieces(self, m: np.ndarray, B: float):
        """C at the right and left end of each piece, and x = m Delta / C_right."""
        mass = m * self.dq
        # right end of piece j: B plus the mass of all later pieces
        later = np.concatenate((np.cumsum(mass[::-1])[::-1][1:], [0.0]))
        c_right = B + later
        c_left = c_right + mass
        return c_right, c_left, mass / c_right

    def value_and_gradient(
        self, theta: np.ndarray, gradient: bool = True
    ) -> tuple[float, np.ndarray | None]:
        """P(B, alpha) and its gradient in theta = (B, d_1, ..., d_K); with ``gradient=False``
        the value only (None for the gradient), whose 1/C^2 terms can overflow where P does
        not (B = 1e-300 warned of a division by zero)."""
        B = theta[0]
        m = np.cumsum(theta[1:])
        dq = self.dq
        c_right, c_left, x = self.pieces(m, B)
        inv_c = _phi(x) * dq / c_right  # int over each piece of dq / C
        value = 0.5 * (self.dxi1 * B + float(m @ self.dxi) + float(inv_c.sum()))
        if not gradient:
            return value, None
        j2 = dq / (c_left * c_right)  # int over each piece of dq / C^2
        before = np.concatenate(([0.0], np.cumsum(j2)[:-1]))  # sum over earlier pieces
        d_inv_c_dm = -(dq * before + (dq / c_right) ** 2 * _psi(x))
        grad_m = 0.5 * (self.dxi + d_inv_c_dm)
        grad = np.empty_like(theta)
        grad[0] = 0.5 * (self.dxi1 - float(j2.sum()))
        grad[1:] = np.cumsum(grad_m[::-1])[::-1]
        return value, grad

    def directional(self, theta: np.ndarray, t: np.ndarray, piece: np.ndarray) -> np.ndarray:
        """D(t) for points t, each inside the given piece index (see the module docstring)."""
        B = theta[0]
        m = np.cumsum(theta[1:])
        q, dq = self.q, self.dq
        c_right, c_left, x = self.pieces(m, B)
        j2 = dq / (c_left * c_right)
        w = (1.0 - q[1:]) * j2 + (dq / c_right) ** 2 * _psi(x)  # int over piece of (1-q)/C^2
        before = np.concatenate(([0.0], np.cumsum(j2)))  # sum of j2 over pieces < k
        after = np.concatenate((np.cumsum(w[::-1])[::-1], [0.0]))  # sum of w over pieces >= k
        k = piece
        right = q[k + 1]
        s = right - t
        c_t = c_right[k] + m[k] * s
        left_part = before[k] + (t - q[k]) / (c_left[k] * c_t)
        right_part = (
            (1.0 - right) * s / (c_t * c_right[k])
            + (s / c_right[k]) ** 2 * _psi(m[k] * s / c_right[k])
            + after[k + 1]
        )
        xi_t = self.weight * np.asarray(self.mixture.xi(t), dtype=np.float64)
        return self.xi1 - xi_t - (1.0 - t) * left_part - right_part


def _check_step_function(B: Any, breakpoints: Any, alpha: Any, where: str):
    B = check_positive(B, where, "B")
    q = as_float_array(breakpoints, f"{where}(): breakpoints")  # text, flag arrays, NaN: refused
    a = as_float_array(alpha, f"{where}(): alpha")
    if q.ndim != 1 or q.size < 2:
        raise ValueError(f"{where}(): breakpoints must be a 1-d array 0 = q_0 < ... < q_K = 1")
    if a.shape != (q.size - 1,):
        raise ValueError(
            f"{where}(): alpha needs one value per piece: {q.size - 1} for {q.size} breakpoints,"
            f" got shape {a.shape}"
        )
    for label, values in (("breakpoints", q), ("alpha", a)):
        if not np.all(np.isfinite(values)):
            bad = int(np.flatnonzero(~np.isfinite(values))[0])
            raise ValueError(
                f"{where}(): {label} must be finite, got {label}[{bad}] = {float(values[bad])}"
            )
    if q[0] != 0.0 or q[-1] != 1.0 or np.any(np.diff(q) <= 0.0):
        raise ValueError(
            f"{where}(): breakpoints must increase strictly from 0 to 1, got {q.tolist()!r}"
        )
    if np.any(a < 0.0) or np.any(np.diff(a) < 0.0):
        raise ValueError(f"{where}(): alpha must be nonnegative and nondecreasing, got {a!r}")
    return B, q, a


def _theta(B: float, alpha: np.ndarray) -> np.ndarray:
    return np.concatenate(([B], np.diff(alpha, prepend=0.0)))


def parisi_functional(mixture: Mixture, B: float, breakpoints: Any, alpha: Any) -> float:
    """The Chen-Sen functional P(B, alpha) for a step function alpha, in closed form.

    ``alpha[j]`` is the value on [breakpoints[j], breakpoints[j+1]); breakpoints increase from 0 to
    1; alpha is nonnegative and nondecreasing; B > 0. Any such (B, alpha) gives an upper bound on
    the ground-state energy per spin.
    """
    mixture = check_mixture(mixture, "parisi_functional")
    B, q, a = _check_step_function(B, breakpoints, alpha, "parisi_functional")
    value, _ = _Grid(mixture, q).value_and_gradient(_theta(B, a), gradient=False)
    return float(value)


def parisi_gradient(mixture: Mixture, B: float, breakpoints: Any, alpha: Any) -> np.ndarray:
    """Exact gradient of :func:`parisi_functional` with respect to (B, d_1, ..., d_K), where
    d_j = alpha[j] - alpha[j-1] (alpha[-1] = 0) are the increments the solver works with."""
    mixture = check_mixture(mixture, "parisi_gradient")
    B, q, a = _check_step_function(B, breakpoints, alpha, "parisi_gradient")
    _, grad = _Grid(mixture, q).value_and_gradient(_theta(B, a))
    return grad


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
            also when a step added where D is lowest gains at most ``tol`` (``_confirm_fit``).
        change: |last round's value - the value of the round before| (grid values).
        jump_gain: first-order estimate of the energy still to gain by moving a jump of alpha
            inside its neighbouring pieces (0 for a continuous alpha without interior jumps).
        tol: the tolerance used: the requested one, or ``TOL_FLOOR`` s if larger.
        alg: ALG for the same mixture.
        gap: value - alg (>= 0 up to tolerances; about 0 for full-RSB mixtures).
        history: (grid_size, value) for each round of the grid (before the jump fit).
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
        }


def _solve(grid: _Grid, theta0: np.ndarray) -> np.ndarray:
    """Minimize P on the grid with L-BFGS-B, restarted from its own result until the value stops
    decreasing (the problem is ill-conditioned in the increments d: a restart with a fresh
    curvature memory keeps making progress where a single run stalls)."""
    # With xi normalized to xi'(1) = 1 the optimal B is of order 1; the lower bound only keeps
    # the line search away from B = 0, where P is infinite.
    bounds = [(_B_FLOOR, None)] + [(0.0, None)] * grid.size
    theta = theta0
    best = math.inf
    for _restart in range(_MAX_RESTARTS):
        res = minimize(
            grid.value_and_gradient,
            theta,
            jac=True,
            method="L-BFGS-B",
            bounds=bounds,
            options={"maxiter": 50_000, "maxfun": 100_000, "ftol": 0.0, "gtol": 0.0, "maxcor": 50},
        )
        theta = np.asarray(res.x, dtype=np.float64)
        if not best - float(res.fun) > 1e-15 * max(1.0, abs(best) if math.isfinite(best) else 1.0):
            break
        best = float(res.fun)
    return theta


def _jump_moves(
    grid: _Grid, theta: np.ndarray, jumps: np.ndarray, refine_above: float
) -> tuple[float, np.ndarray, np.ndarray, np.ndarray]:
    """What moving the jumps of alpha could still gain, and where the isolated ones should go.

    Moving a jump of height d from its breakpoint b to a nearby t changes P by about
    (d/2) (D(t) - D(b)): a step of height d removed at b and added at t. D(b) = 0 at the exact
    optimum, but L-BFGS-B can stop with D(b) of order 1e-9 where the problem is flat, and the
    estimate (d/2) D(t) then missed a gain of 6e-10 for xi = 0.04 q + 0.25 q^2 + q^4 at
    tol 1e-10. A jump sits on a grid point while its best place may lie between
    grid points, so D is sampled over the two pieces next to each jump. An *isolated* jump (no
    other jump on either neighbouring grid point: a real jump of alpha, not one step of a
    continuous part) is sampled densely (``_JUMP_SAMPLES``, geometric near the jump) and, where
    that shows a gain above ``refine_above``, refined with Brent's method; the caller may then
    move its grid point. The steps of a continuous part keep the coarse estimate
    (``_COARSE_SAMPLES``): there refining the grid is what helps, and moving single steps does
    not (measured: not one of 11-20 such moves lowered P, while the rounds went on).
    Returns (sum of (d/2) max(0, D(b) - min D), the place of each minimum, the gain of each
    jump, which jumps are isolated).
    """
    if jumps.size == 0:
        return 0.0, np.empty(0), np.empty(0), np.zeros(0, dtype=bool)
    d = theta[1:]
    near = _RAMP_RATIO * d[jumps]
    step_before = d[jumps - 1] > near
    step_after = np.array([j + 1 < d.size and d[j + 1] > near[i] for i, j in enumerate(jumps)])
    isolated = ~(step_before | step_after)
    places = np.empty(jumps.size)
    low_d = np.empty(jumps.size)
    rows = np.empty(jumps.size, dtype=np.int64)
    for mask, samples in ((isolated, _JUMP_SAMPLES), (~isolated, _COARSE_SAMPLES)):
        if np.any(mask):
            places[mask], low_d[mask], rows[mask] = _sampled_minimum(
                grid, theta, jumps[mask], samples
            )
    at = grid.directional(theta, grid.q[jumps], jumps)  # D at each jump, 0 at the exact optimum
    gains = 0.5 * d[jumps] * np.maximum(0.0, at - low_d)
    for i in np.flatnonzero(isolated & (gains > refine_above)):
        places[i], low_d[i] = _lowest_d(grid, theta, int(rows[i]), places[i], low_d[i])
        gains[i] = 0.5 * d[jumps[i]] * max(0.0, at[i] - low_d[i])
    return float(gains.sum()), places, gains, isolated


def _piece_samples(
    grid: _Grid, theta: np.ndarray, pieces: np.ndarray, samples: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """D at the fractions ``samples`` of each of ``pieces``: (places, values), one row per
    piece."""
    k = np.repeat(pieces, samples.size)
    t = (grid.q[k] + np.tile(samples, pieces.size) * grid.dq[k]).reshape(pieces.size, -1)
    return t, grid.directional(theta, t.ravel(), k).reshape(t.shape)


def _sampled_minimum(
    grid: _Grid, theta: np.ndarray, jumps: np.ndarray, samples: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """For each jump, the lowest sample of D over its two neighbouring pieces: (place, D there,
    the piece it lies in)."""
    pieces = np.concatenate((jumps - 1, jumps))
    t, vals = _piece_samples(grid, theta, pieces, samples)
    lowest = vals.argmin(axis=1)
    side = np.where(vals[: jumps.size].min(axis=1) <= vals[jumps.size :].min(axis=1), 0, 1)
    row = side * jumps.size + np.arange(jumps.size)  # the side of each jump where D is lower
    return t[row, lowest[row]], vals[row, lowest[row]], pieces[row]


def _lowest_d(grid: _Grid, theta: np.ndarray, k: int, t0: float, d0: float) -> tuple[float, float]:
    """(t, D(t)) at the minimum of D in piece k near the sample t0 (where D = d0): bounded
    Brent (``scipy.optimize.minimize_scalar``) between the samples on either side of t0."""
    from scipy.optimize import minimize_scalar

    lo, width = float(grid.q[k]), float(grid.dq[k])
    samples = lo + _JUMP_SAMPLES * width
    at = np.searchsorted(samples, t0)
    ends = np.concatenate(([lo], samples, [lo + width]))
    res = minimize_scalar(
        lambda u: float(grid.directional(theta, np.array([u]), np.array([k]))[0]),
        bounds=(float(ends[at]), float(ends[at + 2])),
        method="bounded",
        options={"xatol": 1e-9 * (float(ends[at + 2]) - float(ends[at]))},
    )
    if float(res.fun) < d0:
        return float(res.x), float(res.fun)
    return t0, d0


def _move_jumps(
    grid: _Grid,
    theta: np.ndarray,
    value: float,
    jumps: np.ndarray,
    places: np.ndarray,
    wanted: np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:
    """Move the grid point of each wanted jump toward its place, keeping alpha's increments:
    the full way, or a half, quarter or eighth of it, whichever first lowers P (the (d/2) D(t)
    estimate is first order in the jump's height, which is not small). Returns the new grid
    and which jumps moved; P never rises, and the next solve lowers it further."""
    q = grid.q.copy()
    moved = np.zeros(jumps.size, dtype=bool)
    for i in np.flatnonzero(wanted):  # in order, so neighbours that moved are respected
        j = jumps[i]
        margin = 1e-6 * (q[j + 1] - q[j - 1])
        for frac in _MOVE_FRACTIONS:
            t = q[j] + frac * (places[i] - q[j])
            if not q[j - 1] + margin < t < q[j + 1] - margin:
                continue
            trial = q.copy()
            trial[j] = t
            trial_value, _ = _Grid(grid.mixture, trial, grid.weight).value_and_gradient(
                theta, False
            )
            if trial_value < value:
                q, value, moved[i] = trial, trial_value, True
                break
    return q, moved


def _level_at_zero(grid: _Grid, theta: np.ndarray, refine_above: float) -> tuple[float, float]:
    """What starting alpha later than q = 0 could still gain, and where it should start.

    alpha's level on the first piece is a jump at q = 0 (from 0 below it). Moving that jump to
    t inside the first piece (alpha = 0 on [0, t)) changes P by about (d_1/2) (D(t) - D(0)), as
    for an interior jump, and D is sampled the same way (``_JUMP_SAMPLES``, refined with Brent's
    method above ``refine_above``). With a field, D'(0) = -xi'(0) < 0, so the optimum always
    has alpha = 0 near 0 (module docstring); when its start t lies inside the first piece the
    midpoint test can miss the narrow range where D < 0 (for xi = 0.01 q + q^3, t is near
    0.009 on a first piece of 1/16 and the solve stopped 1.4e-5 above the optimum, reporting
    converged). As with interior jumps, only an isolated level counts (no step of alpha on the
    next grid point, ``_RAMP_RATIO``): the first step of a continuous part is left to the
    refinement (moving it took xi = q^2 + 0.09 q^5 at tol 1e-10 from 31 to 239 pieces).
    Returns (gain, place), (0, 0) when alpha is 0 on the first piece or its level is not an
    isolated jump.
    """
    d = theta[1:]
    if not d[0] > _JUMP_RTOL * (1.0 + float(d.sum())):
        return 0.0, 0.0
    if d.size > 1 and d[1] > _RAMP_RATIO * d[0]:
        return 0.0, 0.0  # the first step of a continuous part, not an isolated jump
    t = np.concatenate(([0.0], grid.q[0] + _JUMP_SAMPLES * grid.dq[0]))
    vals = grid.directional(theta, t, np.zeros(t.size, dtype=np.int64))
    at = float(vals[0])  # D(0), as D at a jump in _jump_moves
    i = int(vals[1:].argmin()) + 1
    place, low = float(t[i]), float(vals[i])
    gain = 0.5 * d[0] * max(0.0, at - low)
    if gain > refine_above:
        place, low = _lowest_d(grid, theta, 0, place, low)
        gain = 0.5 * d[0] * max(0.0, at - low)
    return gain, place


def _start_later(grid: _Grid, theta: np.ndarray, value: float, place: float):
    """The grid and theta with alpha = 0 on [0, t) and alpha's first level from t on, for t the
    place found by :func:`_level_at_zero` or a half, quarter or eighth of it, whichever first
    lowers P; None when none does (then the first piece is split as usual)."""
    q1 = float(grid.q[1])
    for frac in _MOVE_FRACTIONS:
        t = frac * place
        if not 1e-6 * q1 < t < (1.0 - 1e-6) * q1:
            continue
        q = np.concatenate(([0.0, t], grid.q[1:]))
        trial = np.concatenate(([theta[0], 0.0], theta[1:]))
        trial_value, _ = _Grid(grid.mixture, q, grid.weight).value_and_gradient(trial, False)
        if trial_value < value:
            return q, trial
    return None


def _tidy(grid: _Grid, theta: np.ndarray, value: float) -> tuple[np.ndarray, float]:
    """Drop increments of alpha that are tiny and do not matter for the value.

    Where P is flat in alpha (for instance xi = q^2, whose optimum is alpha = 0) the optimizer can
    leave increments of order 1e-8 that change P by less than rounding; they would show up as
    spurious steps. They are removed when that raises P by at most 1e-14. That includes a tiny
    level of alpha at q = 0, which L-BFGS-B leaves (8e-10 for 1:0.01,3:1) after alpha's start
    moved into the first piece, where alpha is 0 at the optimum.
    """
    d = theta[1:]
    small = (d > 0.0) & (d < _TIDY_RTOL * (1.0 + float(d.sum())))
    if not np.any(small):
        return theta, value
    trial = theta.copy()
    trial[1:][small] = 0.0
    trial_value, _ = grid.value_and_gradient(trial, False)
    if trial_value <= value + 1e-14:
        return trial, trial_value
    return theta, value


def _past_last_jump(grid: _Grid, theta: np.ndarray) -> np.ndarray:
    """The pieces after the one where alpha last jumps (all of them when alpha = 0). The
    piece of the jump is left to _jump_moves: D < 0 next to a jump says the jump should move,
    not that a new step belongs there."""
    d = theta[1:]
    jumps = np.flatnonzero(d > _JUMP_RTOL * (1.0 + float(d.sum())))
    first = int(jumps[-1]) + 1 if jumps.size else 0
    return np.arange(first, grid.size)


def _new_steps(grid: _Grid, theta: np.ndarray) -> dict[int, float]:
    """Where a new step of alpha, after its last jump, would lower P: {piece: t}.

    Past the last jump of alpha (or everywhere, when alpha = 0) the refinement has nothing to
    follow, and the midpoint test misses a narrow range where D < 0 next to q = 1, where D and
    D' vanish at the optimum over B, and D''(1) = 1/B^2 - xi''(1). With a field and q_hat
    near 1 the optimal alpha is 0 up to about 0.98 and then jumps, while alpha = 0 everywhere
    (the replica-symmetric value) has D < 0 only on that last stretch: 1:6.5,8:1 stopped there
    6.6e-5 above the optimum, reporting converged (a review). So D is sampled at
    ``_JUMP_SAMPLES`` of every piece after the one where alpha last jumps, and a piece
    whose lowest sample lies below -``_D_THRESHOLD`` gets a grid point there. At an optimum
    D >= 0 on that stretch (D = 0 only where alpha increases). Only this stretch is sampled:
    inside a continuous part of alpha, increments below ``_JUMP_RTOL`` look flat while D sits
    at its discretization error (-1e-9 for xi = q^2 + 0.3 q^4 on 2000 pieces), which refining
    removes anyway."""
    pieces = _past_last_jump(grid, theta)
    if pieces.size == 0:
        return {}
    t, vals = _piece_samples(grid, theta, pieces, _INNER_SAMPLES)
    low = vals.argmin(axis=1)
    rows = np.flatnonzero(vals[np.arange(pieces.size), low] < -_D_THRESHOLD)
    out = {int(pieces[r]): float(t[r, low[r]]) for r in rows}
    # a piece too narrow for a point strictly inside it is left alone
    return {k: v for k, v in out.items() if grid.q[k] < v < grid.q[k + 1]}


def _few_jumps(
    grid: _Grid, theta: np.ndarray, value: float, margin: float
) -> tuple[_Grid, np.ndarray, float]:
    """The solved alpha, or an alpha of ``_FEW_JUMPS`` jumps placed freely if that is lower.

    With a field and an isolated jump of alpha, the grid solve can spread the jump over a
    ramp of nearby steps and stop above the one-jump optimum: 3.8e-10 for 1:1.5,3:1 at tol
    1e-11, 2.4e-9 for 1:6.5,8:1 at tol 1e-10 (a ramp of 233 steps). So the steps are grouped
    (one group; two, split at the widest gap between steps), each group becomes one jump at
    its mass-weighted place with its total height, and P is minimized over B, the heights and
    the places (Nelder-Mead on log B, log heights and the places' logits, as the tests' own
    one-jump reference). Any step function is admissible, so a lower value is a better upper
    bound; it replaces the grid's when it is lower by more than ``margin`` (the tolerance).
    Within the tolerance the grid's alpha stays: where alpha has a continuous part (a
    full-RSB mixture with a field, whose alpha rises on [q_hat, 1]), a coarse grid can lose
    to two jumps by less than tol (1:0.3,2:1,4:0.2236 at tol 1e-6: by 1.3e-7), and two jumps
    would misdraw alpha. Measured by a review over about 1200 solves: the fit's time has a
    median of 6-19 ms and a maximum of 0.2 s; the value never rose. Since then up to three
    one-jump fits from where D is lowest (:func:`_jump_where_d_is_lowest`) come on top."""
    d = theta[1:]
    steps = np.flatnonzero(d > 0.0)
    best = (grid, theta, value)

    def better(trial: tuple[_Grid, np.ndarray, float] | None) -> bool:
        floor = max(margin, 1e-15 * max(1.0, abs(best[2])))
        return trial is not None and trial[2] < best[2] - floor

    place, height = grid.q[steps], d[steps]
    for k in _FEW_JUMPS:
        if steps.size < k:
            break
        cuts = np.sort(np.argsort(np.diff(place))[len(place) - k :]) + 1 if k > 1 else []
        groups = np.split(np.arange(steps.size), cuts)
        t0 = np.array([np.average(place[g], weights=height[g]) for g in groups])
        h0 = np.array([height[g].sum() for g in groups])
        trial = _fit_jumps(grid, float(theta[0]), t0, h0)
        if better(trial):
            best = trial
    trial = _jump_where_d_is_lowest(grid, theta)
    if better(trial):
        best = trial
    return best


def _jump_where_d_is_lowest(
    grid: _Grid, theta: np.ndarray
) -> tuple[_Grid, np.ndarray, float] | None:
    """A one-jump fit (:func:`_fit_jumps`) started where D is lowest, with the height a
    continuous alpha would have there, -f'(t) = xi'''(t) / (2 xi''(t)^(3/2)) for
    f = xi''^(-1/2) (units of the grid's xi); None where D >= -``_D_THRESHOLD`` everywhere
    (no step lowers P) or xi'' vanishes there.

    The grid's own steps are no start when the solve left a needed jump at a tiny height:
    with a field and q_hat within about 2e-3 of 1 the optimal alpha is 0 up to q_hat and
    then jumps by an amount of order one, but L-BFGS-B moved a new step's increment only to
    1.8e-8 and stopped (P changes by 1e-8 over the whole move), so the grid kept the
    replica-symmetric value and reported converged: 1:6.9,8:1 at tol 1e-10 1.77e-8 above
    the one-jump optimum, and scaled by 100 (gammas 689.19 and 100) 3.8e-6 above it at the
    default tol (a review). Started from a height of order one, the fit reaches it."""
    pieces = _past_last_jump(grid, theta)
    if pieces.size == 0:
        return None
    t, vals = _piece_samples(grid, theta, pieces, _INNER_SAMPLES)
    row, col = np.unravel_index(int(vals.argmin()), vals.shape)
    k = int(pieces[row])
    place, low = _lowest_d(grid, theta, k, float(t[row, col]), float(vals[row, col]))
    if not low < -_D_THRESHOLD:
        return None
    best = None
    # Nelder-Mead on this flat surface (P changes by 1e-8) stops short from some starts
    # (1:6.9,8:1 from t = 0.99757: 7.2e-9 above the optimum at 0.99883), so it starts from
    # the lowest D and from two places nearer 1, and the lowest fit is kept
    for start in (place, 1.0 - (1.0 - place) / 2.0, 1.0 - (1.0 - place) / 4.0):
        curvature = grid.weight * float(grid.mixture.xi(start, 2))
        if not curvature > 0.0:
            continue
        height = grid.weight * float(grid.mixture.xi(start, 3)) / (2.0 * curvature**1.5)
        if not (math.isfinite(height) and height > 0.0):
            continue
        trial = _fit_jumps(grid, float(theta[0]), np.array([start]), np.array([height]))
        if trial is not None and (best is None or trial[2] < best[2]):
            best = trial
    return best


def _confirm_fit(
    grid: _Grid, theta: np.ndarray, value: float, tol: float
) -> tuple[_Grid, np.ndarray, float, float]:
    """Check a fitted alpha (``_few_jumps``) the way the grid's rounds check theirs, and lower it
    where the check fails: returns (grid, theta, value, gain), gain being what the last step
    added gained (0 when D >= -``_D_THRESHOLD`` everywhere, i.e. no step can lower P).

    The fit places its jumps optimally for its number of jumps, but the true alpha may need
    more (or a continuous part), and the grid's convergence says nothing about the fit. So D is
    sampled over every piece (``_INNER_SAMPLES``, refined with Brent's method at the lowest
    sample), a grid point is put where D is lowest, and P is minimized again on the new grid;
    this repeats while a step lowers P by more than ``tol`` (at most ``_CONFIRM_STEPS`` times).
    A negative D alone says little about the energy (D = -1e-8 where a step gains under 1e-16:
    the gain is second order in D), so the gain of the re-solve is what counts. Measured at
    tol 1e-10: 1:0.1,2:1,6:0.8, whose two-jump fit the grid's rounds had called converged, is
    lowered by 4.2e-10 with one added step (the next gains nothing); 2:1,6:1 (not converged)
    by 4.4e-9 over three; one-jump optima (1:1.5,3:1, 1:6.5,8:1) gain nothing."""
    gain = 0.0
    for _ in range(_CONFIRM_STEPS):
        t, vals = _piece_samples(grid, theta, np.arange(grid.size), _INNER_SAMPLES)
        row, col = np.unravel_index(int(vals.argmin()), vals.shape)
        place, low = _lowest_d(grid, theta, int(row), float(t[row, col]), float(vals[row, col]))
        if not low < -_D_THRESHOLD:
            return grid, theta, value, 0.0
        q, trial = _split(grid.q, theta, np.zeros(grid.size, dtype=bool), {int(row): place})
        if q.size == grid.q.size:  # the piece is too narrow to split
            return grid, theta, value, 0.0
        new_grid = _Grid(grid.mixture, q, grid.weight)
        trial = _solve(new_grid, trial)
        new_value, _ = new_grid.value_and_gradient(trial, False)
        gain = max(0.0, float(value - new_value))
        if new_value < value:
            grid, theta, value = new_grid, trial, new_value
        if gain <= tol:
            break
    return grid, theta, value, gain


def _fit_jumps(
    grid: _Grid, b0: float, t0: np.ndarray, h0: np.ndarray
) -> tuple[_Grid, np.ndarray, float] | None:
    """Minimize P over B and k jumps (places t_1 < ... < t_k in (0, 1), heights > 0) from the
    start (b0, t0, h0); the grid, theta and value of the optimum, None if it is degenerate.
    P of so few pieces is written out in floats (the module doc's closed forms), which is
    about 15 times faster per value than a _Grid, for Nelder-Mead's thousands of values (the
    plain differences of xi lose digits next to q = 1; the value kept is a _Grid's)."""
    k = t0.size
    t0 = np.clip(t0, 1e-9, 1.0 - 1e-9)
    # places as nested fractions: t_j = t_{j-1} + (1 - t_{j-1}) sigmoid(u_j), so they increase
    left = np.concatenate(([0.0], t0[:-1]))
    frac = np.clip((t0 - left) / (1.0 - left), 1e-12, 1.0 - 1e-12)
    z0 = np.concatenate(([math.log(b0)], np.log(h0), np.log(frac / (1.0 - frac))))
    coeffs = [(p, grid.weight * c) for p, c in grid.mixture.xi_coefficients.items()]

    def xi(q: float) -> float:
        return sum(c * q**p for p, c in coeffs)

    dxi1 = grid.dxi1

    def unpack(z) -> tuple[float, list[float], list[float]] | None:
        t, prev = [], 0.0
        for j in range(k):
            prev = prev + (1.0 - prev) / (1.0 + math.exp(-min(max(z[1 + k + j], -700.0), 700.0)))
            t.append(prev)
        if not (0.0 < t[0] and all(t[j] < t[j + 1] for j in range(k - 1)) and t[-1] < 1.0):
            return None
        heights = [math.exp(min(v, 700.0)) for v in z[1 : 1 + k]]
        return math.exp(min(z[0], 700.0)), t, heights

    def value(B: float, t: list[float], heights: list[float]) -> float:
        # pieces [0, t_1) with alpha = 0, then [t_j, t_{j+1}) with alpha = h_1 + ... + h_j
        q = [0.0, *t, 1.0]
        m = [0.0]
        for h in heights:
            m.append(m[-1] + h)
        total, c_right = 0.5 * dxi1 * B, B
        for j in range(k, -1, -1):  # from the last piece down: C grows by m_j (q_j+1 - q_j)
            width = q[j + 1] - q[j]
            x = m[j] * width / c_right
            total += 0.5 * (width / c_right) * (math.log1p(x) / x if x > 0.0 else 1.0)
            c_right += m[j] * width
        xs = [xi(v) for v in q]
        total += 0.5 * sum(m[j] * (xs[j + 1] - xs[j]) for j in range(1, k + 1))
        return total if math.isfinite(total) else math.inf

    def objective(z: np.ndarray) -> float:
        parts = unpack(z)
        return math.inf if parts is None else value(*parts)

    # SciPy's own first simplex moves each coordinate by 5 % of its value, which for log B
    # near 0 (B of order one in these units, the usual case) is no move at all: from
    # B = 1 - 6e-12 the simplex had no extent in B and the fit ran off to a place of 1 (a
    # review: 1:6.9,8:1). Each coordinate moves by at least _SIMPLEX_STEP instead.
    steps = np.maximum(0.05 * np.abs(z0), _SIMPLEX_STEP)
    simplex = np.vstack((z0, z0 + np.diag(steps)))
    opts = {
        "xatol": 1e-12,
        "fatol": 1e-16,
        "maxiter": 4000 * k,
        "maxfev": 4000 * k,
        "initial_simplex": simplex,
    }
    res = minimize(objective, z0, method="Nelder-Mead", options=opts)
    parts = unpack(res.x)
    if parts is None or not math.isfinite(float(res.fun)):
        return None
    B, t, heights = parts
    q = np.array([0.0, *t, 1.0])
    th = np.array([B, 0.0, *heights])
    fitted = _Grid(grid.mixture, q, grid.weight)  # the value as the solver computes it
    return fitted, th, fitted.value_and_gradient(th, False)[0]


def _explicit_start(mixture: Mixture, s: float) -> Callable[[np.ndarray], np.ndarray] | None:
    """Where GS = ALG (:func:`~orthoclimb.theory.full_rsb`), the optimum known in closed form
    as a function of the grid: q -> theta on q, in units of xi / xi'(1). It is B = f(1) and
    alpha = 0 on [0, q_hat), alpha = -f' on [q_hat, 1], with f = xi''^(-1/2) (module doc of
    :mod:`~orthoclimb.theory.criterion`), alpha averaged over each piece (exact differences
    of f). None elsewhere, and where q_hat = 1 (replica symmetric: the usual start is exact).

    Each round starts from it when it is lower than the last round's alpha split onto the new
    grid. From that split alpha, L-BFGS-B stalled on the ill-conditioned increments of a
    continuous alpha, 1e-10 to 6e-10 s above the grid's optimum, and the rounds' change cannot
    see a stall: 2:1,7:0.1319 reported converged at tol 1.5e-11 5.8e-10 above ALG, and
    2:1e5,8:2.1e4 at the default tol 9.5e-5 above it (a review). On a uniform grid of 256
    pieces this start is 1.3e-12 above ALG for 2:1,8:0.1, and the solve lowers it to 2e-13."""
    verdict = full_rsb(mixture)
    q_hat = verdict.q_hat
    if not verdict.gs_equals_alg or verdict.linear or not q_hat < 1.0:
        return None

    def f(t: Any) -> Any:  # xi~''^(-1/2) for xi~ = xi / s^2
        return s / np.sqrt(np.asarray(mixture.xi(t, 2), dtype=np.float64))

    def on(q: np.ndarray) -> np.ndarray:
        with np.errstate(all="ignore"):
            f_right = f(q[1:])
            f_left = np.where(q[:-1] < q_hat, f(q_hat), f(q[:-1]))
            alpha = np.where(q[1:] > q_hat, (f_left - f_right) / np.diff(q), 0.0)
        d = np.maximum(np.diff(alpha, prepend=0.0), 0.0)  # alpha is nondecreasing: f concave
        return np.concatenate(([float(f(1.0))], d))

    with np.errstate(all="ignore"):
        usable = bool(np.all(np.isfinite(on(np.linspace(0.0, 1.0, 9)))))
    return on if usable and float(f(1.0)) > 0.0 else None


def _split(q: np.ndarray, theta: np.ndarray, which: np.ndarray, at: dict[int, float] | None = None):
    """Split the pieces flagged in ``which`` at their midpoints, and each piece k of ``at`` at
    at[k], keeping the same alpha. A piece too narrow to hold a point strictly inside it (two
    ulps wide: its midpoint rounds to an end) stays whole; splitting it made two equal
    breakpoints, which parisi_functional then refused (a review: gammas of 1e100, and tol at
    its floor)."""
    at = at or {}
    new_q = [q[0]]
    new_d = []
    d = theta[1:]
    for j in range(q.size - 1):
        t = at.get(j, 0.5 * (q[j] + q[j + 1]))
        if (which[j] or j in at) and q[j] < t < q[j + 1]:
            new_q.extend((t, q[j + 1]))
            new_d.extend((d[j], 0.0))
        else:
            new_q.append(q[j + 1])
            new_d.append(d[j])
    return np.array(new_q), np.concatenate(([theta[0]], new_d))


def ground_state(
    mixture: Mixture,
    tol: float = 1e-6,
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
        return _ground_state(mixture, tol, initial_steps, max_steps, max_rounds)


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
    for _round in range(max_rounds):
        grid = _Grid(mixture, q, weight)
        if explicit is not None:
            known = explicit(q)
            if grid.value_and_gradient(known, False)[0] < grid.value_and_gradient(theta, False)[0]:
                theta = known
        theta = _solve(grid, theta)
        value, _ = grid.value_and_gradient(theta, False)
        solved_grid, solved_theta = grid, theta
        history.append((grid.size, s * value))
        change = s * abs(previous - value)
        previous = value
        d = theta[1:]
        jumps = np.flatnonzero(d[1:] > _JUMP_RTOL * (1.0 + float(d.sum()))) + 1
        gain, places, gains, isolated = _jump_moves(grid, theta, jumps, tol / s)
        zero_gain, zero_place = _level_at_zero(grid, theta, tol / s)
        # the estimate is first order in the level's height, which is not small: near the
        # threshold it came out about 5 % low (1:0.00513,3:1 at tol 1e-10 stopped 1.02e-10
        # above the one-jump optimum), so it counts twice, toward convergence and the move
        zero_gain *= 2.0
        gain = s * (gain + zero_gain)
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
