"""Rough up-front cost of a study: memory of its largest instance and a time estimate.

Time model (seconds, per task): sampling the instance (once per group of tasks sharing it,
:func:`~orthoclimb.studies.tasks.instance_groups`) and a kernel pass at size n cost their time
at a calibration size n0 times (n/n0)^P, both timed on the driver at n0 in the study's storage
type (the largest of the mixture's sizes whose instance takes at most 64 MB, at most 400; when
none does, the largest n below its sizes that does), P the largest degree. The cost per
coefficient falls as n grows (per-segment overheads), so n0 is taken as large as that allows.
The pass counts are means measured over 5-20 seeds of four mixtures (3:1, 4:1, 2:1,3:1 and
2:1,4:0.25; n = 50-800, degree 4 to n = 240; study defaults, 2026-12-04), fitted as a + b ln n,
since a study adds its tasks up:

* Hessian ascent: K - 1 Hessian steps (none when the first stage ends on the sphere,
  ``hessian_moves``; one more for a start along the top eigenvector of Hess H(0)), each a
  Hessian pass plus Lanczos, and its polish. Lanczos costs 6e-4 s + 10 t_mv + m (t_mv +
  1.2e-5 s) per step: m = 44 ln n - 171 products with the dense tangent matrix (at least 40; the
  means per step of default runs, pure 3-spin, were 62, 84, 111, 133 and 141 at n = 200, 400,
  800, 1000 and 1200), 1.2e-5 s of ARPACK and Python per product, and ten products' worth for
  restricting the Hessian to the tangent space (measured: 9.4-12 at n = 400-3000). t_mv, one
  product of the symmetric n x n tangent matrix with a vector on one BLAS thread (one triangle
  read, as Lanczos does), is timed on the driver at each size (:func:`matvec_seconds`), since it
  grows faster than n^2 once the matrix leaves the caches: 0.23, 0.41, 0.62 and 1.17 ms at
  n = 1200, 1600, 2000 and 2800 on the Intel Xeon (2026-12-05; products of the whole matrix took
  0.37, 0.68, 1.06 and 2.27 ms in the same minutes, and 0.19-0.23, 0.71, 1.47 and 3.3 ms on an
  earlier day's host, in-run and timed apart), where a fixed a + b n^2 per step (6e-4 + 1.1e-8
  n^2 s, fitted to n <= 1000) had put a step at 44 ms against 255 ms measured at n = 2000 (pure
  2-spin) and 16 against 31 ms at n = 1200 (pure 3-spin). Where the dense Hessian does not fit
  (:func:`dense_lanczos`; n of order 10^4 and more) t_mv is a Hessian-vector product, timed at
  the calibration size and scaled as a pass. Pure 2-spin runs make fewer products (90 and 102
  per step at n = 1000 and 1500), so the model is 1.2-1.5 times their time there. At n - 1
  <= DIRECT_MAX = 200 the step solves its tangent space densely instead (``_eigen``): 6e-5 s +
  4.2e-8 (n - 1)^2 s besides the restriction (measured: 0.14, 0.32, 1.19 and 2.77 ms at
  n - 1 = 40, 80, 160 and 256).
  With a field, its first stage (an ascent to radius sqrt(q_hat)) adds 36 ln n - 74
  energy-and-gradient passes (at least 30): 60-113 at n = 50-400 for 1:0.5,3:1 and 78-177
  for 1:0.3,2:1,4:0.25 (one seed each; a user trial found it missing, 0.46 s of a 1.26 s
  run at n = 400).
* Gradient ascent: 80 ln n - 234 energy-and-gradient passes (at least 40; 79 at n = 50, 301
  at 800), about 1.08 per iteration, capped at 1.1 x max_iter; the four mixtures' own fits
  lie within 32 % of it at n = 100-800 (2:1,4:0.25 lowest, 3:1 highest). It was 150
  iterations x 1.5 passes = 225 before, 1.3-3.3 times too many at n <= 200 and 0.66-0.92
  times the measured mean at 400-800.
* Langevin annealing: one pass per step, and its polish.
* A polish (:func:`~orthoclimb.polish`: gradient steps, then Newton steps) takes, after
  Hessian ascent, 15 + 1.7 ln n energy-and-gradient passes (at least 20; 22 at n = 50, 26 at
  800), 0.86 ln n - 0.6 Newton steps, each a Hessian pass (at least 2; 2.8 at n = 50, 5.2 at
  800), and 1.04 ln n - 1.0 Cholesky factorizations (at least 2; about 1.7e-11 n^3 s each);
  after Langevin annealing 25 ln n - 78 passes (at least 20; 72 at n = 400), 2.1 ln n - 5.7
  Newton steps and 2.6 ln n - 7.4 factorizations. These means were measured on 2026-12-05
  (the polish of that day, which hands over to Newton at |P grad H|/n <= 0.01) over 6-8 seeds
  of the four mixtures at n = 50-800 (degree 4 to 240) after Hessian ascent, and of 3:1 (to
  n = 400) and 2:1,4:0.25 (to 200) after annealing; the polish before it took 22 ln n - 61
  and 56 ln n - 179 passes. The means count the pass the polish then made for its start's
  energy, which it no longer makes: the model counts about one pass (4 %) too many, well
  inside its factor of 2, and is kept as measured. It ends with the local-maximum check: one
  more Hessian pass and all n - 1 tangent eigenvalues by scipy.linalg.eigvalsh, about 1e-3 +
  7e-11 n^3 s on one thread (5.5, 37 and 122 ms at n = 400, 800 and 1200 against 7.7, 36 and
  101 ms measured). Gradient ascent ends with the same check, with one Hessian and one
  energy-and-gradient pass of its own.

The pooled polish fits are low for pure 4-spin instances (0.45-0.5 of their means at n = 150
and 160: 47-52 passes against 24), which the Hessian steps' cost outweighs there. Single runs
spread widely around these means: a polish took up to 91 passes and 19 Newton
steps after Hessian ascent (pure 4-spin, n = 160; twice the mean there) and up to 135 passes
after annealing, and one gradient run may take 2-3 times the mean. Each task also costs
about 0.02 s of Dask round trip and row writing, and an embedded cluster about 2 s to start
(its worker processes start and import the package before their first task). Measured for
``demo --quick`` (72 small tasks, 2 workers): the sweep took 4.1 s, of which its tasks' own
sampling and running were 3.2 s over the two workers; a cluster started in 0.6 s and ran its
first task, importing the package, in 1.2-1.3 s; 200 empty tasks took 0.9 s. The total of
the tasks is divided by the number of workers. It is a rough guide (a factor of 2 either
way), printed before a sweep starts.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field

import numpy as np

from ..algorithms._eigen import solved_densely, symmetric_operator
from ..algorithms.hessian_ascent import auto_steps, eigen_solves, stepwise_limit_if_short
from .grid import LEGACY_START, StudySpec
from .profile import best_time
from .tasks import instance_groups, instance_key

__all__ = [
    "CHECK_SECONDS",
    "GRADIENT_PASSES",
    "LANCZOS_MATVECS",
    "POLISH_PASSES",
    "Calibration",
    "calibrate",
    "fixed_path_notes",
    "check_seconds",
    "dense_lanczos",
    "dense_lanczos_memory",
    "matrix_free_note",
    "estimate_from",
    "first_stage_passes",
    "estimate_seconds",
    "gradient_passes",
    "largest_instance",
    "lanczos_seconds",
    "largest_size_within",
    "matvec_seconds",
    "methods_line",
    "plan_lines",
    "polish_extra",
    "polish_passes",
    "run_seconds",
]

_CAL_BYTES = 64 * 2**20
# Lanczos per Hessian-ascent step (module doc): products with the tangent matrix, a + b ln n
# with a floor; seconds per solve and per product besides the product itself; the products'
# worth of restricting the Hessian to the tangent space
LANCZOS_MATVECS = (-171.0, 44.0, 40.0)
LANCZOS_SOLVE = 6e-4
LANCZOS_ITERATION = 1.2e-5
# restricting: two rank-one updates, a product and a copy of the whole matrix, 9.4-12 times
# one one-triangle product at n = 400-3000 (2026-12-05; 3 was fitted to whole-matrix products)
RESTRICT_MATVECS = 10
# the dense solve of a tangent space of d <= DIRECT_MAX dimensions (scipy.linalg.eigh, top
# pair, one BLAS thread): a + b d^2 seconds, 0.14, 0.32, 1.19 and 2.77 ms at d = 40, 80, 160
# and 256 (2026-12-05; the d^3 of the reduction does not show yet at these sizes)
DENSE_SOLVE = (6e-5, 4.2e-8)
# one product of a cached n x n matrix with a vector, per entry: the model's t_mv where no
# timing is given (0.16 ns: measured at n = 1200, 2026-12-05)
MATVEC_PER_ENTRY = 1.6e-10
_MATVEC_TIMED_BYTES = 64 * 2**20  # larger matrices: timed at this size, scaled by n^2
# products of the matrix-free local-maximum check (two Lanczos runs on Hessian-vector
# products: "typically a few hundred", the polish module)
OPERATOR_CHECK_PRODUCTS = 300
# seconds of the local-maximum check's dense eigenvalues: a + b n^3 (module doc)
CHECK_SECONDS = (1e-3, 7e-11)
CHOLESKY_SECONDS = 1.7e-11  # x n^3: one Cholesky factorization of a Newton step (module doc)
# energy-and-gradient passes, a + b ln n, and the floor at small n (module doc)
GRADIENT_PASSES = (-234.0, 80.0, 40.0)
POLISH_PASSES = {"hessian": (15.0, 1.7, 20.0), "anneal": (-78.0, 25.0, 20.0)}
# the polish's Newton steps (one Hessian pass each) and Cholesky factorizations (module doc)
NEWTON_STEPS = {"hessian": (-0.6, 0.86, 2.0), "anneal": (-5.7, 2.1, 2.0)}
FACTORIZATIONS = {"hessian": (-1.0, 1.04, 2.0), "anneal": (-7.4, 2.6, 2.0)}
FIRST_STAGE_PASSES = (-74.0, 36.0, 30.0)  # Hessian ascent with a field (module doc)
PASSES_PER_ITERATION = 1.1  # gradient ascent, backtracking included: at most this per iteration
_TASK_OVERHEAD = 0.02  # seconds per task: Dask round trip and the row's atomic write
_CLUSTER_START = 2.0  # seconds: an embedded cluster's processes start and import the package


def _log_fit(n: int, fit: tuple[float, float, float]) -> float:
    a, b, floor = fit
    return max(floor, a + b * math.log(n))


def gradient_passes(n: int, max_iter: int) -> float:
    """Mean energy-and-gradient passes of gradient ascent at n (module doc), capped by
    ``max_iter`` iterations."""
    return min(_log_fit(n, GRADIENT_PASSES), PASSES_PER_ITERATION * max_iter)


def polish_passes(n: int, after: str) -> float:
    """Mean energy-and-gradient passes of the polish that ends ``after`` ('hessian' or
    'anneal') at n (module doc)."""
    return _log_fit(n, POLISH_PASSES[after])


def first_stage_passes(n: int) -> float:
    """Mean energy-and-gradient passes of Hessian ascent's first stage at n, for a mixture
    with a field (module doc)."""
    return _log_fit(n, FIRST_STAGE_PASSES)


def check_seconds(n: int) -> float:
    """Seconds of the dense local-maximum check at n (module doc)."""
    return CHECK_SECONDS[0] + CHECK_SECONDS[1] * n**3


def lanczos_seconds(n: int, matvec: float | None = None, dense: bool = True) -> float:
    """Seconds of one Hessian-ascent step's eigen-solve at n (module doc): Lanczos, with
    ``matvec`` seconds per product of the n x n tangent matrix with a vector (None:
    MATVEC_PER_ENTRY n^2), or below ``DIRECT_MAX`` tangent dimensions LAPACK's dense solve;
    not ``dense``: the products are Hessian-vector products and nothing is restricted."""
    t_mv = MATVEC_PER_ENTRY * n * n if matvec is None else matvec
    restrict = RESTRICT_MATVECS * t_mv if dense else 0.0
    if dense and solved_densely(n - 1, matrix=True):
        return DENSE_SOLVE[0] + DENSE_SOLVE[1] * (n - 1) ** 2 + restrict
    products = _log_fit(n, LANCZOS_MATVECS)
    return LANCZOS_SOLVE + products * (t_mv + LANCZOS_ITERATION) + restrict


_MATVEC_CACHE: dict[int, float] = {}


def timing_budget(nbytes: int) -> int:
    """Bytes a timing instance or matrix on the driver may take: ``nbytes``, or half the
    available memory where that is less (under a tight ORTHOCLIMB_MEMORY_LIMIT a plan's
    64 MiB timing instance was refused, though the plan samples nothing of the run's own: a
    user trial)."""
    from ..model import available_memory

    return max(0, min(nbytes, available_memory() // 2))


def matvec_seconds(n: int) -> float:
    """Seconds of one product of a dense symmetric n x n float64 matrix with a vector on one
    BLAS thread, as Lanczos makes them (reading one triangle, ``symmetric_operator``; best of
    3 after one untimed product; cached for the process). A
    matrix above 64 MiB (n > 2896; the calibration's own instances hold at most that) is timed
    at 64 MiB (or what :func:`timing_budget` allows) and the time scaled by n^2: that large,
    the product streams it from memory."""
    side = max(2, min(n, math.isqrt(timing_budget(_MATVEC_TIMED_BYTES) // 8)))
    if side not in _MATVEC_CACHE:
        from ..runtime import one_blas_thread

        product = symmetric_operator(np.full((side, side), 0.5)).matvec
        v = np.full(side, 0.25)
        with one_blas_thread():
            _MATVEC_CACHE[side] = best_time(lambda: product(v), repeats=3)
    return _MATVEC_CACHE[side] * (n / side) ** 2


def dense_lanczos(mixture, n: int, dtype: str = "float64") -> bool:
    """Whether Hessian ascent on an instance of ``mixture`` at n stored as ``dtype`` runs
    Lanczos on the dense Hessian here, as its "auto" mode decides once the instance is sampled:
    the kernel's accumulators and its working n x n copies in half the memory the instance
    leaves available. Otherwise each product is a Hessian-vector product, a pass over the
    coefficients, and the polish has no Newton steps (its own n x n copies are as many)."""
    need, room = dense_lanczos_memory(mixture, n, dtype)
    return need <= room


def dense_lanczos_memory(mixture, n: int, dtype: str = "float64") -> tuple[int, int]:
    """(bytes, bytes): what Hessian ascent's dense mode needs at n (the kernel's accumulators
    and its working n x n copies, float64 whatever the storage) and what
    :func:`dense_lanczos` lets it take, half the memory available beside the ``dtype``
    instance (negative where the instance itself does not fit)."""
    from ..algorithms.hessian_ascent import _WORKING_COPIES
    from ..model import estimate_memory
    from ..model.memory import available_memory, hessian_workspace_estimate

    need = hessian_workspace_estimate(mixture, n) + _WORKING_COPIES * n * n * 8
    return need, (available_memory() - estimate_memory(mixture, n, dtype)) // 2


def polish_extra(n: int, hessian_pass: float, after: str = "hessian") -> float:
    """Seconds the polish that ends ``after`` ('hessian' or 'anneal') adds at n besides its
    energy-and-gradient passes: its Newton steps' Hessian passes and the check's one
    (``hessian_pass`` seconds each), its Cholesky factorizations and the dense local-maximum
    check's eigenvalues (module doc)."""
    hessians = _log_fit(n, NEWTON_STEPS[after]) + 1.0
    factorizations = _log_fit(n, FACTORIZATIONS[after])
    return hessians * hessian_pass + factorizations * CHOLESKY_SECONDS * n**3 + check_seconds(n)


@dataclass(frozen=True)
class Calibration:
    """Timings of one mixture at the calibration size ``n0`` (seconds, on the driver)."""

    n0: int
    sampling: float
    hessian: float
    energy_and_gradient: float
    degree: int
    # seconds of one tangent product at each size of the mixture (:func:`matvec_seconds`, or
    # a Hessian-vector product's pass where the dense Hessian does not fit; empty: the
    # model's MATVEC_PER_ENTRY n^2). Left out of hashing and comparison (a dict).
    matvec: dict[int, float] = field(default_factory=dict, hash=False, compare=False)


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

    hessian_methods = any(meth.name == "hessian" for meth in spec.methods)
    old = get_num_threads()
    set_num_threads(max(1, threads))
    try:
        cal: dict[str, Calibration] = {}
        for m in spec.mixtures:
            mix = m.mixture
            sizes = m.sizes if m.sizes is not None else spec.sizes  # the mixture's own sizes
            budget = timing_budget(_CAL_BYTES)
            fits = [n for n in sizes if estimate_memory(mix, n, spec.dtype) <= budget]
            below = largest_size_within(mix, min(sizes), budget, spec.dtype)
            n0 = min(max(fits) if fits else max(2, below), 400)
            started = time.perf_counter()
            ham = Hamiltonian.sample(mix, n0, seed=0, dtype=spec.dtype)
            sampling = time.perf_counter() - started
            x = np.full(n0, 1.0 / math.sqrt(n0))
            cal[m.name] = Calibration(
                n0,
                sampling,
                best_time(lambda h=ham, v=x: h.hessian(v), warm_up=False),
                best_time(lambda h=ham, v=x: h.energy_and_gradient(v), warm_up=False),
                mix.max_degree,
                _products(mix, sizes, n0, lambda h=ham, v=x: h.hvp(v, v), spec.dtype)
                if hessian_methods
                else {},
            )
    finally:
        set_num_threads(old)
    return cal


def run_seconds(
    method: str,
    n: int,
    steps: int,
    polish: bool,
    passes: tuple[float, float],
    moves: int = 0,
    field: bool = False,
    matvec: float | None = None,
    dense: bool = True,
) -> float:
    """Seconds of one run of ``method`` at n (module doc) from ``passes`` = (one energy-and-
    gradient pass, one Hessian pass) in seconds at n: ``moves`` Hessian steps (hessian, after
    its first stage when the mixture has a ``field``), ``steps`` Langevin steps (anneal) or at
    most ``steps`` = max_iter iterations (gradient), plus the polish when ``polish`` (hessian,
    anneal); ``matvec``: seconds of one tangent product at n for Lanczos
    (:func:`lanczos_seconds`). Not ``dense`` (:func:`dense_lanczos`, for hessian and its
    polish): each step is an energy-and-gradient pass and Lanczos on Hessian-vector products
    (``matvec`` each), and the polish has no Newton steps: gradient ascent's mean passes
    (a stand-in, unmeasured at such sizes) and a matrix-free check of
    OPERATOR_CHECK_PRODUCTS products. Used by the sweep and by climb."""
    eg, hess = passes
    if method == "gradient":  # and its local-maximum check: a Hessian, a pass, the eigenvalues
        return (gradient_passes(n, steps) + 1) * eg + hess + check_seconds(n)
    if not polish:
        finish = 0.0
    elif dense or matvec is None:
        finish = polish_passes(n, method) * eg + polish_extra(n, hess, method)
    else:
        finish = (gradient_passes(n, 2000) + 1) * eg + OPERATOR_CHECK_PRODUCTS * matvec
    if method == "hessian":  # each step a Hessian pass (dense) and Lanczos
        first = first_stage_passes(n) * eg if field else 0.0
        step = (hess if dense else eg) + lanczos_seconds(n, matvec, dense)
        return first + moves * step + finish
    return steps * eg + finish  # anneal: one pass per step


def _products(mixture, sizes, n0: int, hvp, dtype: str = "float64") -> dict[int, float]:
    """Seconds of one Lanczos product at each of ``sizes``: a dense one where the dense Hessian
    fits beside a ``dtype`` instance (:func:`dense_lanczos`), else a Hessian-vector product, a
    pass scaled from the time of ``hvp()`` at the calibration size n0 as (n/n0)^P (timed only
    when needed, without a warm-up call, as the other passes)."""
    out: dict[int, float] = {}
    at_n0 = None
    for n in sizes:
        if dense_lanczos(mixture, n, dtype):
            out[n] = matvec_seconds(n)
            continue
        at_n0 = best_time(hvp, warm_up=False) if at_n0 is None else at_n0
        out[n] = at_n0 * (n / n0) ** mixture.max_degree
    return out


def estimate_from(cal: dict[str, Calibration], tasks, workers: int, embedded: bool = True) -> float:
    """Seconds for ``tasks`` on ``workers`` workers from the timings ``cal`` (module doc);
    ``embedded`` adds the start of an embedded cluster."""
    if not tasks:
        return 0.0
    total = 0.0
    for group in instance_groups(list(tasks), workers):  # as the sweep submits them
        c = cal[group[0].mixture.name]
        total += (group[0].n / c.n0) ** c.degree * c.sampling + _TASK_OVERHEAD
    dense_at: dict[tuple[str, int, str], bool] = {}
    for t in tasks:
        c = cal[t.mixture.name]
        scale = (t.n / c.n0) ** c.degree
        opts = dict(t.method.options)
        eg, hess = scale * c.energy_and_gradient, scale * c.hessian  # one pass each at n
        moves = _eigen_solves_of(t)
        steps = opts["max_iter"] if t.method.name == "gradient" else opts["steps"]
        polish = bool(opts.get("polish"))
        field = t.mixture.mixture.has_field
        matvec = c.matvec.get(t.n)
        dense = True
        if t.method.name == "hessian" and matvec is not None:
            key = (t.mixture.name, t.n, t.dtype)
            if key not in dense_at:
                dense_at[key] = dense_lanczos(t.mixture.mixture, t.n, t.dtype)
            dense = dense_at[key]
        args = (steps, polish, (eg, hess), moves, field, matvec, dense)
        total += run_seconds(t.method.name, t.n, *args)
    return total / max(1, workers) + (_CLUSTER_START if embedded else 0.0)


def estimate_seconds(
    spec: StudySpec, tasks, workers: int, threads: int = 1, embedded: bool = True
) -> float:
    """Rough wall-clock seconds for ``tasks`` on ``workers`` workers (see the module doc):
    :func:`calibrate` then :func:`estimate_from`."""
    if not tasks:
        return 0.0
    return estimate_from(calibrate(spec, threads), tasks, workers, embedded)


def mixed_k_text(k_at: dict[int, int], e_k) -> str | None:
    """For Hessian ascent's default K over a study's sizes (``k_at``: n -> K), a sentence when
    K is clamped (n // 8 below 25 or above 200) at some sizes and differs across them; None
    otherwise: K = n/8 at every size makes the coarse steps' loss (about 1.3/K) a 1/n
    correction whose limit is ALG, and one K at every size is the fixed-K note's case.
    ``e_k(K)``: the n -> infinity energy of a path of K points (None: no sentence)."""
    if len(set(k_at.values())) < 2 or any(k != auto_steps(n) for n, k in k_at.items()):
        return None  # one K, or not the default's K at some size
    floor = sorted(n for n, k in k_at.items() if n // 8 < k)
    cap = sorted(n for n, k in k_at.items() if n // 8 > k)
    grows = sorted(n for n, k in k_at.items() if n // 8 == k)
    if not floor and not cap:  # K = n/8 everywhere (a review: the note fired there too)
        return None
    parts, advice = [], []
    for ns, what, where in ((floor, "floor", "from n = 200 on"), (cap, "cap", "below n = 1608")):
        if not ns:
            continue
        k = k_at[ns[0]]
        limit = e_k(k)
        if limit is None:
            return None
        parts.append(
            f"K = {k}, its {what}, at n = {', '.join(map(str, ns))}, where the path tends to"
            f" E_{k} = {limit:.4f} however large n"
        )
        advice.append(where)
    if grows:
        parts.append(
            f"K = n/8 at n = {', '.join(map(str, grows))}, where its loss shrinks like 1/n"
        )
    return (
        "K differs across the sizes (" + "; ".join(parts) + "), so one finite-size law over"
        f" these sizes mixes a fixed shortfall with a vanishing one: sizes {' and '.join(advice)}"
        " keep K = n/8, and a fixed step count (steps = K) compares all sizes at one K"
    )


def _eigen_solves_of(task) -> int:
    """The Lanczos solves of a task's run: Hessian ascent's (``eigen_solves`` with its K and
    start), none for the other methods."""
    if task.method.name != "hessian":
        return 0
    opts = dict(task.method.options)
    k = auto_steps(task.n) if opts["steps"] == "auto" else opts["steps"]
    return eigen_solves(task.mixture.mixture, k, opts.get("start", LEGACY_START))


def matrix_free_note(tasks) -> str | None:
    """A note naming the mixtures and sizes whose Hessian-ascent steps would run Lanczos
    matrix-free on this machine (:func:`dense_lanczos`: the dense Hessian's work does not fit
    in half the memory beside the instance), each product then a pass over the coefficients,
    which the estimate counts; None where every such task runs dense. Printed with the plan
    of an embedded cluster (an external one's workers have their own memory)."""
    free: dict[tuple[str, int], bool] = {}
    for t in tasks:
        key = (t.mixture.name, t.n)
        if t.method.name != "hessian" or key in free:
            continue
        if _eigen_solves_of(t) > 0:
            free[key] = not dense_lanczos(t.mixture.mixture, t.n, t.dtype)
    where = [f"{name} at n = {n}" for (name, n), matrix_free in sorted(free.items()) if matrix_free]
    if not where:
        return None
    return (
        f"note: Hessian ascent's Lanczos runs matrix-free for {', '.join(where)}: the dense"
        " Hessian's work does not fit in half the memory this machine leaves beside the"
        " instance, so each product is a pass over the coefficients, far slower (the estimate"
        " counts it)"
    )


def fixed_path_notes(spec: StudySpec) -> list[str]:
    """A note per Hessian-ascent method and mixture whose path has the same number of points
    K at every size of the study (K = n/8 clamped to [25, 200] is 25 for every n < 208, and
    ``steps`` fixes it): its energy before the polish then tends to E_K
    (:func:`~orthoclimb.algorithms.hessian_ascent.stepwise_limit`) as n -> infinity, short of
    ALG by a loss no n removes, so the study cannot show that series reach ALG. Where the
    default K sits at its floor or cap at some sizes and is n/8 at others, the note of
    :func:`mixed_k_text`. None for a mixture with one size, or with a field (no E_K). Printed
    with the plan."""
    from ..theory.algorithmic import algorithmic_energy

    out = []
    for method in spec.methods:
        if method.name != "hessian":
            continue
        opts = dict(method.options)
        given = opts["steps"]
        energy = "before its polish" if opts["polish"] else "its energy"
        series = energy + " it" if opts["polish"] else energy
        start = opts.get("start", LEGACY_START)
        for m in spec.mixtures:
            sizes = m.sizes or spec.sizes
            k_at = {n: auto_steps(n) if given == "auto" else given for n in sizes}
            ks = set(k_at.values())
            if len(sizes) < 2:
                continue
            if len(ks) > 1:  # the default K, clamped at some sizes and not at others
                mixed = mixed_k_text(
                    k_at, lambda k, m=m, s=start: stepwise_limit_if_short(m.mixture, k, s)
                )
                if mixed is not None:
                    out.append(f"note: {method.label} on {m.name} ({energy}): {mixed}")
                continue
            k = ks.pop()
            e_k = stepwise_limit_if_short(m.mixture, k, start)
            if e_k is None:
                continue
            alg = algorithmic_energy(m.mixture)
            why = "n/8 clamped to [25, 200]" if given == "auto" else "set by steps"
            if given != "auto":
                grow = "a K that grows with n lets it approach ALG"
            elif k == auto_steps(1):  # the floor, 25, below n = 208
                grow = "sizes from n = 208 on, where K grows, let it approach ALG"
            else:  # the cap, 200, from n = 1600 on: K no longer grows with n
                grow = "K stays at its cap from n = 1600 on: a larger steps lets it approach ALG"
            out.append(
                f"note: {method.label} takes K = {k} path points at every size of {m.name}"
                f" ({why}): {series} tends to E_K = {e_k:.4f} as n -> infinity,"
                f" {alg - e_k:.4f} short of ALG = {alg:.4f} however large n; {grow}"
            )
    return out


def grouping_text(pending: list, slots: int) -> str | None:
    """What the sweep's plan says of :func:`~orthoclimb.studies.tasks.instance_groups` for
    ``slots`` workers of the embedded cluster (whose workers write each task's row as it
    ends): None when every instance has one task (nothing to share)."""
    from .engine import counted

    instances = len({instance_key(t) for t in pending})
    if instances == len(pending):
        return None
    groups = instance_groups(pending, slots)
    head = f"{counted(len(pending), 'task')} on {counted(instances, 'instance')}"
    if len(groups) == len(pending):  # at least as many workers as tasks: every task alone
        return (
            f"{head} run apart, each sampling its instance:"
            f" {counted(slots, 'worker')} for {counted(len(pending), 'task')}"
        )
    if len(groups) == instances:
        return (
            f"{head}: each instance is sampled once for all its tasks, which run in turn (each"
            " row is written as its task ends)"
        )
    return (
        f"{head}: in {counted(len(groups), 'group')} of tasks on one instance (cut so that"
        " every worker has one), and each group samples its instance once"
    )


def methods_line(spec: StudySpec) -> str:
    """The methods and every option they run with, for the plan: "methods: hessian (steps =
    40, tol = 0.001, ...); anneal (steps = 40, ...)" (a user trial did not see that --steps
    had set anneal's Langevin steps as well as Hessian ascent's K)."""
    parts = []
    for m in spec.methods:
        opts = ", ".join(f"{k} = {v}" for k, v in m.options)
        parts.append(f"{m.name} ({opts})" if opts else m.name)
    return "methods: " + "; ".join(parts)


def _external_where(cluster: tuple[int, int] | None) -> str:
    """How a plan's time estimate applies to an external cluster of ``cluster`` = (task slots,
    workers) (:func:`~orthoclimb.studies.external.task_slots`; None: not known)."""
    if cluster is None:
        return " for one worker of the external cluster (it did not say how many it has)"
    slots, workers = cluster
    if slots == 0:
        return " for one worker of the external cluster (it has none yet)"
    from .engine import counted

    return (
        f" on the external cluster's {counted(slots, 'task slot')} ({counted(workers, 'worker')}"
        " now) at this machine's speed per task"
    )


def plan_lines(
    spec: StudySpec,
    folder: str,
    pending: list,
    plan,
    scheduler: str | None = None,
    threads: int | None = None,
) -> list[str]:
    """What a sweep says before it starts (the command line prints it, and so does
    :func:`~orthoclimb.studies.run_study` by default): the tasks to run, the memory of the
    largest instance, the methods with every option they run with (:func:`methods_line`), the
    workers (``plan``, a :class:`~orthoclimb.studies.engine.WorkerPlan`,
    or None on the external ``scheduler``, where a task takes ``threads`` kernel threads), the
    time estimate (:func:`estimate_seconds`, which times the kernels first) and the notes of
    :func:`fixed_path_notes`. With no task pending, one line saying so."""
    from .._load import OtherLoad, busy_note
    from .._text import seconds_text
    from ..model.memory import format_bytes
    from .engine import counted

    total = len(spec.tasks())
    if not pending:  # a complete study: nothing to plan
        return [f"study: {total} tasks, all done already, in {folder}"]
    nbytes, mix, n = largest_instance(spec, pending)
    lines = [
        f"study: {total} tasks ({total - len(pending)} already done, {len(pending)} to run)"
        f" in {folder}",
        f"largest instance: {mix}, n = {n}: {format_bytes(nbytes)} of coefficients per running"
        " task (or group of tasks on one instance)",
        methods_line(spec),
    ]
    cluster: tuple[int, int] | None = None  # an external cluster's (task slots, workers)
    if plan is not None:
        shared = grouping_text(pending, plan.workers)
        if shared is not None:
            lines.append(shared)
        lines.append(
            "embedded Dask cluster: "
            f"{counted(plan.workers, 'worker process', 'worker processes')} x "
            f"{plan.dask_threads} task x {counted(plan.rayon_threads, 'kernel thread')} = "
            f"{counted(plan.cores_used, 'core')}"
        )
        workers, threads = plan.workers, plan.rayon_threads
    else:
        from ..model.user_limit import ENV_VAR, user_memory_limit
        from .external import task_slots

        lines.append(f"Dask scheduler: {scheduler}")
        cluster = task_slots(scheduler) if scheduler is not None else None
        # its workers' threads run tasks side by side, each task on `threads` kernel threads
        workers, threads = (cluster[0] if cluster else 0) or 1, threads or 1
        if user_memory_limit() is not None:  # a user trial expected it to hold the workers
            lines.append(
                f"note: {ENV_VAR} holds this process only; the external cluster's workers"
                " follow their own environment (set it where they start)"
            )
    load = OtherLoad().start()
    from ..errors import InsufficientMemoryError

    try:
        est = estimate_seconds(spec, pending, workers, threads, embedded=plan is not None)
    except InsufficientMemoryError as exc:  # no room on the driver for a timing instance
        load.stop()
        lines.append(f"rough time estimate: none, the kernels could not be timed here: {exc}")
        return lines + fixed_path_notes(spec)
    # timing a small study takes milliseconds: the load is read over half a second
    busy = busy_note(load.stop(settle=0.5), threads=plan.cores_used if plan else None)
    where = "" if plan is not None else _external_where(cluster)
    # timed on this machine as it is now; other work started later slows the run (a review
    # measured 80 s for an estimate of 30 s with a load of 4 on two cores)
    lines.append(
        f"rough time estimate: {seconds_text(est)}{where}, if the cores stay free of other work"
    )
    if busy is not None:  # and work already running is in the timings
        lines.append(f"note: {busy}")
    free = matrix_free_note(pending) if plan is not None else None
    if free is not None:
        lines.append(free)
    return lines + fixed_path_notes(spec)
