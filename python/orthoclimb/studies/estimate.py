"""Rough up-front cost of a study: memory of its largest instance and a time estimate.

Time model (seconds, per task): sampling the instance and a kernel pass at size n cost
their time at a calibration size n0 times (n/n0)^P, both timed on the driver at n0 (the
largest of the mixture's sizes whose instance takes at most 64 MB, at most 400; when none
does, the largest n below its sizes that does), P the largest degree. The cost per
coefficient falls as n grows (per-segment overheads), so n0 is taken as large as that
allows. Hessian ascent: K x (a Hessian pass plus Lanczos, about 6e-4 + 1.1e-8
n^2 s: medians per step on one thread 0.7, 1.4 and 1.8 ms at n = 100, 220 and 320 for the
pure 3-spin model, 3.9 and 10.4 ms at n = 600 and 1000 for the pure 2-spin one) plus, when it
polishes, about 150 energy-and-gradient passes; gradient ascent: about 150 iterations x 1.5
passes for backtracking, capped by max_iter (its iteration count is not known in advance: the
demo's grids took 60-200, about 75-330 passes). Each task also costs about 0.02 s of Dask round
trip and row writing, and an embedded cluster about 2 s to start (its worker processes start and
import the package before their first task). Measured for ``demo --quick`` (72 small tasks, 2
workers): the sweep took 4.1 s, of which its tasks' own sampling and running were 3.2 s over
the two workers; a cluster started in 0.6 s and ran its first task, importing the package, in
1.2-1.3 s; 200 empty tasks took 0.9 s. The total of the tasks is divided by the number of
workers. It is a rough guide (a factor of 2 either way), printed before a sweep starts. For
the demo (55 s) it gave 101 s with n0 at most 120 and a Lanczos term of 1e-7 n^2 + 2e-3 s
(ten times the measured one); it now gives 67-68 s (the whole demo then took 58-59 s), and
4 s for ``demo --quick`` (whole runs of 3.3-6 s).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

import numpy as np

from ..algorithms.hessian_ascent import auto_steps
from .grid import StudySpec
from .profile import best_time

__all__ = [
    "BACKTRACK_PASSES",
    "GRADIENT_ITERATIONS",
    "LANCZOS_SECONDS",
    "POLISH_PASSES",
    "Calibration",
    "calibrate",
    "estimate_from",
    "estimate_seconds",
    "largest_instance",
    "largest_size_within",
]

_CAL_BYTES = 64 * 2**20
# seconds of Lanczos per Hessian-ascent step: a + b n^2 (module doc)
LANCZOS_SECONDS = (6e-4, 1.1e-8)
POLISH_PASSES = 150  # energy-and-gradient passes of a polish (module doc)
GRADIENT_ITERATIONS = 150  # typical iterations of gradient ascent (module doc)
BACKTRACK_PASSES = 1.5  # passes per gradient iteration, with its backtracking
_TASK_OVERHEAD = 0.02  # seconds per task: Dask round trip and the row's atomic write
_CLUSTER_START = 2.0  # seconds: an embedded cluster's processes start and import the package


@dataclass(frozen=True)
class Calibration:
    """Timings of one mixture at the calibration size ``n0`` (seconds, on the driver)."""

    n0: int
    sampling: float
    hessian: float
    energy_and_gradient: float
    degree: int


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


def largest_size_within(mixture, below: int, nbytes: int, dtype: str = "float64") -> int:
    """The largest n <= ``below`` whose instance takes at most ``nbytes`` (bisection; n = 1
    holds one coefficient per degree). The calibration uses it when none of a mixture's sizes
    fits 64 MB: sampling the smallest of them on the driver asked for 130 GiB for 6:1 at
    n = 150, a study meant for a larger external cluster (a review); climb, for the instance
    it times sampling on."""
    from ..model import estimate_memory

    lo, hi = 1, below  # estimate_memory(lo) fits, estimate_memory(hi) may not
    while lo < hi:
        mid = (lo + hi + 1) // 2
        if estimate_memory(mixture, mid, dtype) <= nbytes:
            lo = mid
        else:
            hi = mid - 1
    return lo


def calibrate(spec: StudySpec, threads: int = 1) -> dict[str, Calibration]:
    """Time sampling, a Hessian and an energy-and-gradient pass per mixture of ``spec`` at its
    calibration size, with ``threads`` kernel threads (see the module doc). The passes are
    timed without a warm-up call, as a task's first passes after its sampling run."""
    from ..model import Hamiltonian, estimate_memory
    from ..runtime import get_num_threads, set_num_threads

    old = get_num_threads()
    set_num_threads(max(1, threads))
    try:
        cal: dict[str, Calibration] = {}
        for m in spec.mixtures:
            mix = m.mixture
            sizes = m.sizes if m.sizes is not None else spec.sizes  # the mixture's own sizes
            fits = [n for n in sizes if estimate_memory(mix, n) <= _CAL_BYTES]
            n0 = max(fits) if fits else largest_size_within(mix, min(sizes), _CAL_BYTES)
            n0 = min(n0, 400)
            started = time.perf_counter()
            ham = Hamiltonian.sample(mix, n0, seed=0)
            sampling = time.perf_counter() - started
            x = np.full(n0, 1.0 / math.sqrt(n0))
            cal[m.name] = Calibration(
                n0,
                sampling,
                best_time(lambda h=ham, v=x: h.hessian(v), warm_up=False),
                best_time(lambda h=ham, v=x: h.energy_and_gradient(v), warm_up=False),
                mix.max_degree,
            )
    finally:
        set_num_threads(old)
    return cal


def estimate_from(cal: dict[str, Calibration], tasks, workers: int, embedded: bool = True) -> float:
    """Seconds for ``tasks`` on ``workers`` workers from the timings ``cal`` (module doc);
    ``embedded`` adds the start of an embedded cluster."""
    if not tasks:
        return 0.0
    total = 0.0
    for t in tasks:
        c = cal[t.mixture.name]
        scale = (t.n / c.n0) ** c.degree
        opts = dict(t.method.options)
        total += scale * c.sampling + _TASK_OVERHEAD
        polish = POLISH_PASSES if opts.get("polish") else 0  # hessian and anneal polish
        if t.method.name == "hessian":
            eigen = LANCZOS_SECONDS[0] + LANCZOS_SECONDS[1] * t.n**2  # per step
            k = auto_steps(t.n) if opts["steps"] == "auto" else opts["steps"]
            total += scale * (k * c.hessian + polish * c.energy_and_gradient) + eigen * k
        elif t.method.name == "anneal":  # one pass per step, then the polish's
            total += scale * (opts["steps"] + polish) * c.energy_and_gradient
        else:
            iters = min(GRADIENT_ITERATIONS, opts["max_iter"])
            total += scale * iters * c.energy_and_gradient * BACKTRACK_PASSES
    return total / max(1, workers) + (_CLUSTER_START if embedded else 0.0)


def estimate_seconds(
    spec: StudySpec, tasks, workers: int, threads: int = 1, embedded: bool = True
) -> float:
    """Rough wall-clock seconds for ``tasks`` on ``workers`` workers (see the module doc):
    :func:`calibrate` then :func:`estimate_from`."""
    if not tasks:
        return 0.0
    return estimate_from(calibrate(spec, threads), tasks, workers, embedded)
