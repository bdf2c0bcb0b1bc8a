"""Rough up-front cost of a study: memory of its largest instance and a time estimate.

Time model (seconds, per task): sampling the instance and a kernel pass at size n cost
their time at a calibration size n0 times (n/n0)^P, both timed on the driver at n0 (the
largest size whose instance takes at most 64 MB, at most 120), P the largest degree. Hessian
ascent: K x (a Hessian pass plus Lanczos, about 1e-7 n^2 + 2e-3 s) plus about 150
energy-and-gradient passes for the polish; gradient ascent: about 150 iterations x 1.5 passes
for backtracking, capped by max_iter (its iteration count is not known in advance: the demo's
grids took 60-200, about 75-330 passes). The total is divided by the number of workers. It is
a rough guide (a factor of 2 either way), printed before a sweep starts.
"""

from __future__ import annotations

import math
import time

import numpy as np

from ..algorithms.hessian_ascent import auto_steps
from .grid import StudySpec
from .profile import best_time

__all__ = ["estimate_seconds", "largest_instance"]

_CAL_BYTES = 64 * 2**20


def largest_instance(spec: StudySpec, tasks=None) -> tuple[int, str, int]:
    """(bytes, mixture name, n) of the largest instance among ``tasks`` (default: all)."""
    from ..model import estimate_memory

    tasks = spec.tasks() if tasks is None else tasks
    best = (0, "", 0)
    for t in tasks:
        b = estimate_memory(t.mixture.mixture, t.n, t.dtype)
        if b > best[0]:
            best = (b, t.mixture.name, t.n)
    return best


def estimate_seconds(spec: StudySpec, tasks, workers: int, threads: int = 1) -> float:
    """Rough wall-clock seconds for ``tasks`` on ``workers`` workers (see the module doc)."""
    from ..model import Hamiltonian, estimate_memory
    from ..runtime import get_num_threads, set_num_threads

    if not tasks:
        return 0.0
    old = get_num_threads()
    set_num_threads(max(1, threads))
    try:
        cal: dict[str, tuple[int, float, float, float, int]] = {}
        for m in spec.mixtures:
            mix = m.mixture
            fits = [n for n in spec.sizes if estimate_memory(mix, n) <= _CAL_BYTES]
            n0 = max(fits) if fits else min(spec.sizes)
            n0 = min(n0, 120)
            started = time.perf_counter()
            ham = Hamiltonian.sample(mix, n0, seed=0)
            sampling = time.perf_counter() - started
            x = np.full(n0, 1.0 / math.sqrt(n0))
            cal[m.name] = (
                n0,
                sampling,
                best_time(lambda h=ham, v=x: h.hessian(v)),
                best_time(lambda h=ham, v=x: h.energy_and_gradient(v)),
                mix.max_degree,
            )
    finally:
        set_num_threads(old)
    total = 0.0
    for t in tasks:
        n0, ts, th, tg, p = cal[t.mixture.name]
        scale = (t.n / n0) ** p
        opts = dict(t.method.options)
        total += scale * ts
        if t.method.name == "hessian":
            eigen = 1e-7 * t.n**2 + 2e-3  # Lanczos on the n x n tangent Hessian, per step
            k = auto_steps(t.n) if opts["steps"] == "auto" else opts["steps"]
            total += scale * (k * th + 150 * tg) + eigen * k
        else:
            total += scale * min(150, opts["max_iter"]) * tg * 1.5
    return total / max(1, workers)
