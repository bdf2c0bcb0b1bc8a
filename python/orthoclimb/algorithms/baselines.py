"""Baselines a practitioner would try: Riemannian gradient ascent from a random start, and
Langevin dynamics with a cooling schedule.

Both work with the energy per spin e(x) = H(x)/n on the unit sphere and its Riemannian gradient
G(x) = P grad H(x)/n, P = I - x x^T.

* :func:`gradient_ascent`: x_0 uniform on the sphere (seeded) or the caller's ``x0``, then
  the Riemannian ascent of ``_riemannian`` (Barzilai-Borwein step, nonmonotone Armijo
  backtracking, retraction x -> x/|x|): nothing to tune.
* :func:`langevin_anneal`: the Langevin diffusion of the Gibbs measure exp(n e(x) / T) on the
  sphere, dx = G dt + sqrt(2 T / n) dB_S (B_S Brownian motion on the sphere), discretized by
  projected Euler-Maruyama with retraction,

      x_{k+1} = R(x_k + eta G(x_k) + sqrt(2 eta T_k / n) P xi_k),   xi_k ~ N(0, I_n),

  R(y) = y/|y|, one gradient pass per step, with temperatures T_k from ``schedule``; then
  :func:`orthoclimb.polish` climbs to the nearest near-critical point. The step ``eta`` (per-spin
  time units) must be small against 1/|Hess e|. The tangent Hessian of e is P (Hess e) P minus
  (x . grad e) P, with x . grad e = sum_p p e_p(x) (Euler's theorem), so its spectral radius is
  about 2 sqrt(xi''(1)) + |sum_p p e_p(x)|: about 10 at a local maximum of the pure 3-spin
  model (4.9 + 3 x 1.6; measured 9.6 at n = 300). The default 0.02 keeps eta |Hess e| near 0.2
  for mixtures of that scale.

  The discretization biases the law sampled by O(eta). Measured on one pure 2-spin instance at
  n = 400 against its exact Gibbs mean energy: with eta = 0.02 the mean energy per spin was
  0.3-0.8 % low at T = 0.5-2, and with eta = 0.005 within 0.5 %. On pure 3-spin at n = 200 and
  T = 2, averaged over time 50-200 of a run at constant T on three instances, it was
  0.4876-0.4894 at eta = 0.02 and 0.5017-0.5027 at eta = 0.005, against the annealed value
  xi(1)/T = 0.5: eta = 0.02 lowers it by about 0.013 (2.6 %), and the finite-n value itself
  lies slightly above 0.5 (a user trial, with shorter runs, saw 0.478 and 0.473: a run must
  be long against the relaxation time for such a comparison). That bias is harmless for
  annealing toward a maximum; for sampling at a fixed temperature use a smaller eta.
"""

from __future__ import annotations

import math
import time
import warnings
from collections.abc import Callable
from typing import Any

import numpy as np

from ..model.arrays import real_array
from ..model.hamiltonian import Hamiltonian
from ._checks import (
    MAX_STEPS,
    check_count,
    check_flag,
    check_ham,
    check_positive,
    check_seed,
    check_unit_start,
    energy_scale,
    warn_if_far_scale,
)
from ._config import base_config
from ._riemannian import sphere_ascent
from ._sphere import norm, project_tangent, random_unit, retract
from .polish import is_critical, local_max_info
from .polish import run_polish as polish_point
from .result import Result, vector_digest

__all__ = ["geometric_schedule", "gradient_ascent", "langevin_anneal"]


def geometric_schedule(t_start: float = 1.0, t_end: float = 0.01, steps: int = 400) -> np.ndarray:
    """Temperatures decreasing geometrically from ``t_start`` to ``t_end`` in ``steps`` steps
    (energy-per-spin units: the Gibbs weight is exp(n e / T)). ``t_end`` above ``t_start`` is
    refused (it would heat, not cool); equal ones give a constant temperature. Any other
    sequence of temperatures can go to :func:`langevin_anneal` as its ``schedule``."""
    t_start = check_positive(t_start, "t_start")
    t_end = check_positive(t_end, "t_end")
    steps = check_count(steps, "steps", maximum=MAX_STEPS)
    if t_end > t_start:
        raise ValueError(
            f"t_end = {t_end} is above t_start = {t_start}: a cooling schedule needs"
            " t_end <= t_start (pass your own temperatures as langevin_anneal's schedule to"
            " heat on purpose)"
        )
    return np.geomspace(t_start, t_end, steps)


def _check_schedule(schedule: Any) -> np.ndarray:
    if schedule is None:
        return geometric_schedule()
    # booleans, complex numbers, text and masked arrays are refused ([True, False] ran at
    # temperatures 1 and 0: a review)
    temps = np.array(real_array(schedule, "schedule"), dtype=np.float64)
    if temps.ndim != 1 or temps.size == 0:
        raise ValueError(f"schedule must be a non-empty 1-D sequence, got shape {temps.shape}")
    if temps.size > MAX_STEPS:  # as steps= of geometric_schedule (a user trial ran 2 x 10^7)
        raise ValueError(
            f"schedule must have at most {MAX_STEPS:_} temperatures (one step each), got"
            f" {temps.size:_}"
        )
    bad = ~np.isfinite(temps) | (temps < 0.0)
    if np.any(bad):
        i = int(np.argmax(bad))
        raise ValueError(f"schedule temperatures must be finite and >= 0; entry {i} is {temps[i]}")
    return temps


def gradient_ascent(
    ham: Hamiltonian,
    seed: int = 0,
    gtol: float = 1e-7,
    max_iter: int = 2000,
    callback: Callable[[dict[str, Any]], Any] | None = None,
    check: bool = True,
    *,
    x0: Any = None,
) -> Result:
    """Riemannian gradient ascent from a uniformly random point of the sphere (``seed``), or
    from ``x0`` (any nonzero vector of length n, scaled to |x0| = 1; the config then records
    its ``start_sha256``, as :func:`~orthoclimb.polish` does, and ``seed`` is not used).

    Stops when |P grad H|/n <= ``gtol`` or after ``max_iter`` iterations (one energy-and-
    gradient pass each, plus one per backtracking halving). ``check`` runs the local-maximum
    check at the end. ``path`` columns: ``iteration``, ``energy`` (per spin), ``grad_norm``,
    ``alpha``. ``callback(row)`` is called after every iteration with the path's new row (a
    dict; the start's row, iteration 0, is not passed) and ``step`` (the iteration) and ``q``
    (1.0), the keys every method's rows share; its return value is ignored, and an exception
    it raises ends the run.
    """
    ham = check_ham(ham, "gradient_ascent")
    warn_if_far_scale(ham, "gradient_ascent")
    seed = check_seed(seed)
    check = check_flag(check, "check")
    gtol = check_positive(gtol, "gtol")
    # at least one step, as --max-iter and a study's max_iter (0 returned the random start as
    # a result, a user trial)
    max_iter = check_count(max_iter, "max_iter", minimum=1, maximum=MAX_STEPS)
    if callback is not None and not callable(callback):
        raise TypeError(f"callback must be callable or None, got {callback!r}")
    given = None if x0 is None else check_unit_start(x0, ham.n, "x0")
    start = time.perf_counter()
    first = random_unit(ham.n, np.random.default_rng(seed)) if given is None else given

    def cb(row: dict[str, Any]) -> None:
        if callback is not None:
            callback({"step": row["iteration"], "q": 1.0, **row})

    trace = sphere_ascent(
        ham, first, gtol=gtol, max_iter=max_iter, callback=cb, scale=energy_scale(ham)
    )
    info: dict[str, Any] = {
        "grad_norm": trace.grad_norm,
        "status": trace.status,
        "iterations": trace.iterations,
        "passes": trace.passes,
        # the path's row of the returned point (the last, unless stopped inside a dip)
        "returned_iteration": trace.returned_iteration,
    }
    if check:
        critical = is_critical(trace.grad_norm, gtol, trace.status, trace.energy)
        info.update(local_max_info(ham, trace.x, critical))
    _add_theory(ham, info, trace.energy)
    config = base_config(
        ham, "gradient", seed=seed, gtol=gtol, max_iter=max_iter, **_start_record(given)
    )
    path = {k: np.asarray(v) for k, v in trace.rows.items()}
    return Result(trace.x, trace.energy, path, config, time.perf_counter() - start, info)


def langevin_anneal(
    ham: Hamiltonian,
    seed: int = 0,
    schedule: Any = None,
    eta: float = 0.02,
    polish: bool = True,
    callback: Callable[[dict[str, Any]], Any] | None = None,
    *,
    x0: Any = None,
) -> Result:
    """Langevin dynamics on the unit sphere with the temperatures of ``schedule`` (one step per
    entry; default ``geometric_schedule()``: 400 steps from T = 1 to 0.01), started uniformly at
    random (``seed`` drives the start and the noise) or at ``x0`` (any nonzero vector of
    length n, scaled to |x0| = 1; ``seed`` then drives the noise alone, and the config records
    the start's ``start_sha256``), then polished (see the module doc).

    ``path`` columns: ``step``, ``temperature``, ``energy`` (per spin, before the step's
    update), ``grad_norm`` (|P grad H|/n). ``callback(row)`` is called after every step with
    the path's row of that step (a dict) and ``q`` (1.0), the keys every method's rows share;
    its return value is ignored, and an exception it raises ends the run.
    """
    ham = check_ham(ham, "langevin_anneal")
    warn_if_far_scale(ham, "langevin_anneal")
    seed = check_seed(seed)
    temps = _check_schedule(schedule)
    eta = check_positive(eta, "eta")
    polish = check_flag(polish, "polish")
    _warn_if_eta_too_large(ham, eta)
    if callback is not None and not callable(callback):
        raise TypeError(f"callback must be callable or None, got {callback!r}")
    given = None if x0 is None else check_unit_start(x0, ham.n, "x0")
    start = time.perf_counter()
    n = ham.n
    rng = np.random.default_rng(seed)
    x = random_unit(n, rng)  # drawn either way, so that the noise is the seed's
    if given is not None:
        x = given
    rows: dict[str, list] = {"step": [], "temperature": [], "energy": [], "grad_norm": []}
    for k, temp in enumerate(temps):
        e, g = ham.energy_and_gradient(x)
        gr = project_tangent(g, x) / n
        rows["step"].append(k)
        rows["temperature"].append(float(temp))
        rows["energy"].append(e / n)
        rows["grad_norm"].append(norm(gr))
        noise = project_tangent(rng.standard_normal(n), x)
        with np.errstate(over="ignore", invalid="ignore"):  # checked just below
            y = x + eta * gr + math.sqrt(2.0 * eta * float(temp) / n) * noise
            size = norm(y)
        if not (math.isfinite(size) and size > 0.0):  # absurd options: name them
            # (before: NumPy overflow warnings, then "x holds a non-finite value nan")
            raise ValueError(
                f"the Langevin step {k} overflowed float64 with eta = {eta!r} and temperature"
                f" T = {float(temp)!r} (the step is eta * gradient + sqrt(2 eta T / n) * noise);"
                " use a smaller eta or temperature"
            )
        x = retract(y)  # the same division by |y|, of a finite nonzero y
        if callback is not None:
            callback({"q": 1.0, **{c: column[-1] for c, column in rows.items()}})
    energy = ham.energy(x) / n
    info: dict[str, Any] = {"energy_anneal": energy, "steps": int(temps.size)}
    if polish:
        pol = polish_point(ham, x, check=True)
        x, energy = pol.x, pol.energy
        info["polish"] = pol.info
        for key in ("grad_norm", "n_positive", "top_eigenvalue", "local_max"):
            info[key] = pol.info[key]
    _add_theory(ham, info, energy)
    config = base_config(
        ham,
        "anneal",
        seed=seed,
        steps=int(temps.size),
        eta=eta,
        t_start=float(temps[0]),
        t_end=float(temps[-1]),
        schedule=temps.tolist(),
        polish=bool(polish),
        **_start_record(given),
    )
    path = {k: np.asarray(v) for k, v in rows.items()}
    path["step"] = path["step"].astype(np.int64)
    return Result(x, energy, path, config, time.perf_counter() - start, info)


def _start_record(given: np.ndarray | None) -> dict[str, str]:
    """The config's record of a caller's start: its digest (the point itself is too large for
    a config; keep it to rerun), or nothing for the seeded random start."""
    return {} if given is None else {"start_sha256": vector_digest(given)}


def _warn_if_eta_too_large(ham: Hamiltonian, eta: float) -> None:
    """Warn when the step eta times the curvature scale 2 sqrt(xi''(1)) (the edge of the
    tangent spectrum per spin, Hessian ascent's module doc) exceeds 1: the gradient part of a
    step then overshoots. Measured on pure 3-spin instances (n = 150, 400 steps, no polish):
    the energy per gamma stayed at 1.54-1.56 for eta 2 sqrt(xi''(1)) = 0.1 to 0.98 and fell
    to 0.80 at 1.96 and 0.18 at 4.9. (Given coefficients carry no mixture: not checked.)"""
    if ham.mixture is None:
        return
    edge = 2.0 * math.sqrt(float(ham.mixture.xi(1.0, 2)))
    if eta * edge > 1.0:
        warnings.warn(
            f"langevin_anneal: eta = {eta!r} is large for this mixture: eta 2 sqrt(xi''(1)) ="
            f" {eta * edge:.3g} > 1, so each step overshoots; use eta <= {1.0 / edge:.3g}",
            RuntimeWarning,
            stacklevel=3,
        )


def _add_theory(ham: Hamiltonian, info: dict[str, Any], energy: float) -> None:
    if ham.mixture is not None:
        from ..theory import algorithmic_energy

        alg = algorithmic_energy(ham.mixture)
        info["alg"] = alg
        info["alg_gap"] = energy - alg
