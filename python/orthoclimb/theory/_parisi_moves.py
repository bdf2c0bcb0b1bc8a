"""Refining the grid of the Parisi solve: where to add grid points, and moving jumps of alpha.

Both use D(t), the first-order change of P from a small step of alpha at t (see
:mod:`orthoclimb.theory.parisi`): a piece where D dips below zero gets a new grid point, and an
isolated jump of alpha is moved toward where D is lowest.
"""

from __future__ import annotations

import numpy as np

from ._parisi_grid import _Grid

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
