"""Alternatives to the refined grid's alpha that the Parisi solve tries: a few freely placed
jumps fitted by Nelder-Mead, a jump placed where D is lowest, and, where GS = ALG, the explicit
continuous alpha of the full-RSB solution (see :mod:`orthoclimb.theory.parisi`).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import numpy as np
from scipy.optimize import minimize

from ..model.mixture import Mixture
from ._parisi_grid import _Grid, _solve, _split
from ._parisi_moves import _D_THRESHOLD, _INNER_SAMPLES, _lowest_d, _past_last_jump, _piece_samples
from .criterion import full_rsb

# Numbers of freely placed jumps tried against the grid's alpha at the end (_few_jumps).
_FEW_JUMPS = (1, 2)

# Least first move of each coordinate in the jump fit's Nelder-Mead (_fit_jumps).
_SIMPLEX_STEP = 0.05

# Most steps added to a fitted alpha while each still lowers P by more than tol (_confirm_fit).
_CONFIRM_STEPS = 8


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
