"""The step-function grid of the Parisi functional and its minimization on one grid.

P(B, alpha), its gradient and the directional derivative D(t) for alpha constant on each piece
of a grid, every integral in closed form (the formulas are in :mod:`orthoclimb.theory.parisi`),
and L-BFGS-B over (B, increments of alpha) with restarts.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.optimize import minimize

from ..model.mixture import Mixture

# Series of log1p(x)/x and of (log1p(x) - x/(1+x))/x^2 for small x, where the direct formulas lose
# digits (the second one about eps/x^2). Both have alternating terms of size x^k, so 24 terms are
# exact to double precision for 0 <= x < 0.1.
_SMALL_X = 0.1
_K = np.arange(24)
_PHI_SERIES = (-1.0) ** _K / (_K + 1.0)
_PSI_SERIES = (-1.0) ** _K * (_K + 1.0) / (_K + 2.0)

# Pieces whose C at the right end is this much smaller than the piece (x = m Delta / C_right or
# Delta / C_right above it) are "far" (_far_pieces): there x, Delta / C_right or its square can
# overflow and phi(x) Delta underflow (B = 5e-324 gave a NaN value, B = 1e-308 a NaN gradient from
# inf * 0), so their integrals are written with m instead. The solver, with B of order 1, never
# comes near, and keeps the plain forms' arithmetic.
_FAR = 1e100

# The lower bound on B in the L-BFGS-B solve, and its most restarts (_solve).
_B_FLOOR = 1e-8
_MAX_RESTARTS = 40


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


def _far_pieces(dq: np.ndarray, c_right: np.ndarray, x: np.ndarray) -> np.ndarray | None:
    """The pieces where x >= _SMALL_X and x or Delta / C_right exceeds _FAR, or None when there
    is none (the usual case, told by three reductions)."""
    if not (x.max() > _FAR or dq.max() > _FAR * c_right.min()):
        return None
    far = (x >= _SMALL_X) & ((x > _FAR) | (dq > _FAR * c_right))
    return far if far.any() else None


def _log1p_x(mass: np.ndarray, c_right: np.ndarray, x: np.ndarray) -> np.ndarray:
    """log1p(x) = log(C_left / C_right), x = mass / C_right, also where that ratio overflowed
    (then log1p(x) = log(mass) - log(C_right) to within 1/x < 1e-308)."""
    return np.where(np.isinf(x), np.log(mass) - np.log(c_right), np.log1p(x))


def _half_inv_c(dq, m, c_right, x, far) -> np.ndarray:
    """Half the integral over each piece of dq / C: (Delta / (2 C_right)) log1p(x) / x, and on
    the ``far`` pieces (m > 0 there) the same as log1p(x) / (2 m)."""
    out = _phi(x) * (0.5 * dq) / c_right
    if far is not None:
        out[far] = 0.5 * _log1p_x(m[far] * dq[far], c_right[far], x[far]) / m[far]
    return out


def _half_inv_c2(dq, m, c_right, c_left, x, far) -> tuple[np.ndarray, np.ndarray]:
    """Half the integrals over each piece [q_{j-1}, q_j) of dq / C^2 = Delta / (C_left C_right)
    and of (q_j - q) dq / C^2 = (Delta / C_right)^2 psi(x); on the ``far`` pieces the latter as
    (log1p(x) - x / (1 + x)) / m^2 (x / (1 + x) = 1 / (1 + 1/x), 1 also for x = inf). Halved
    first: at B = 3e-309 the first is 3.3e308 = inf, its half 1.7e308."""
    half_dq = 0.5 * dq
    j2 = half_dq / (c_left * c_right)
    ratio = dq / c_right
    own = (0.5 * ratio) * ratio * _psi(x)  # halved before the square (B = 6e-155: 2.8e308)
    if far is not None:
        mf, cr, xf = m[far], c_right[far], x[far]
        j2[far] = half_dq[far] / c_left[far] / cr
        log1p_x = _log1p_x(mf * dq[far], cr, xf)
        own[far] = 0.5 * (log1p_x - 1.0 / (1.0 + 1.0 / xf)) / mf / mf
    return j2, own


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
        not (B = 1e-300 warned of a division by zero).

        Every term is halved before the terms are added (the same arithmetic as halving the sum,
        bar subnormals), so that a sum which only its double would overflow stays finite: at
        B = 1e308 and xi'(1) = 3, xi'(1) B = inf while P = 1.5e308. Where C is tiny against a
        piece, see _far_pieces. Non-finite results (a true overflow, say) are the callers' to
        check, and their warnings to silence."""
        (b_term, a_term, c_term), (m, c_right, c_left, x, far) = self._halves(theta)
        value = b_term + a_term + c_term
        if not gradient:
            return value, None
        dq = self.dq
        half_j2, half_own = _half_inv_c2(dq, m, c_right, c_left, x, far)
        before = np.concatenate(([0.0], np.cumsum(half_j2)[:-1]))  # sum over earlier pieces
        grad_m = 0.5 * self.dxi - (dq * before + half_own)
        grad = np.empty_like(theta)
        grad[0] = 0.5 * self.dxi1 - float(half_j2.sum())
        grad[1:] = np.cumsum(grad_m[::-1])[::-1]
        return value, grad

    def half_terms(self, theta: np.ndarray) -> tuple[float, float, float]:
        """The three terms of P(B, alpha) apart: xi'(1) B / 2, int_0^1 xi' alpha / 2 and
        int_0^1 dq / (2 C) (to name the one that overflows; the caller silences the warnings)."""
        return self._halves(theta)[0]

    def _halves(self, theta: np.ndarray) -> tuple[tuple[float, float, float], tuple]:
        """The three terms of P (half_terms), and the quantities the gradient needs: m, C at
        the right and left end of each piece, x, the far pieces (_far_pieces)."""
        B = theta[0]
        m = np.cumsum(theta[1:])
        c_right, c_left, x = self.pieces(m, B)
        far = _far_pieces(self.dq, c_right, x)
        half_inv_c = _half_inv_c(self.dq, m, c_right, x, far)
        terms = (0.5 * self.dxi1 * B, float((0.5 * m) @ self.dxi), float(half_inv_c.sum()))
        return terms, (m, c_right, c_left, x, far)

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
