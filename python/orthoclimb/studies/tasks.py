"""One task of a study: (mixture, n, seed, method + options), run on a worker.

The task carries only its configuration; the worker regenerates the instance from the seed
(``Hamiltonian.sample(mixture, n, seed)`` is a pure function of the seed, see the README), so
no coefficient data travels. The same seed also seeds the algorithm's start point. Tasks that
differ only in their method share one instance; :func:`instance_groups` groups them so that a
worker samples it once for all of them (:func:`run_instance_tasks`).

The task id is the first 16 hex digits of SHA-256 of the canonical JSON of the configuration
(sorted keys, ``repr``-exact floats), so it is stable across runs, machines and Python versions.

Row fields (one row per task; energies per spin e = H(x)/n, maximization): ``task_id``,
``mixture`` (name), ``gammas`` (text p:gamma,...), ``n``, ``seed``, ``start_seed`` (the start
point's seed, equal to ``seed``), ``method``, ``options`` (JSON), ``steps`` (the work done: K
for Hessian ascent, iterations for gradient ascent, Langevin steps), ``dtype``, ``energy``,
``energy_before_polish`` (Hessian ascent, anneal), ``alg``, ``ground_state`` (Parisi GS; NaN in
memory, null in the row file and the table, when the solver does not converge), ``gap_alg`` =
energy - ALG, ``gap_gs`` = energy - GS, ``local_max``, ``grad_norm`` (|P grad H|/n),
``top_eigenvalue`` (the largest eigenvalue of the Riemannian Hessian at the end point, P Hess H
P - (x . grad H) I at |x| = 1, per spin: <= 0 at a local maximum, near 0 where it is marginal;
not the projected Hessian's of the path's ``eigenvalue`` column), ``seconds_sample``,
``seconds_run`` (wall seconds; ``seconds_sample`` is the instance's one sampling, the same in
each row of a group),
``sample_shared_by`` (the tasks that ran on that one sampling, this one included: 1 when it was
sampled for this task alone; the sampling compute of a row is ``seconds_sample /
sample_shared_by``), ``threads`` (rayon threads used), ``version`` (orthoclimb), ``code`` (the
digest of the code that ran it, :func:`orthoclimb.runtime.code_digest`), ``worker`` (host:pid),
``finished`` (UTC ISO time); with ``keep_point``, ``end_point_sha256`` (the kept end point's
digest, see :mod:`.points`).
"""

from __future__ import annotations

import functools
import hashlib
import json
import math
import os
import socket
import time
from dataclasses import dataclass
from datetime import datetime, timezone
from typing import Any, NamedTuple

import numpy as np

from .grid import LEGACY_START, MethodSpec, MixtureSpec, canonical_options

__all__ = [
    "Task",
    "TheoryValues",
    "instance_groups",
    "instance_key",
    "run_instance_tasks",
    "run_task",
    "theory_values",
]


@dataclass(frozen=True)
class Task:
    mixture: MixtureSpec
    n: int
    seed: int
    method: MethodSpec
    dtype: str = "float64"

    def config(self) -> dict[str, Any]:
        """The canonical configuration (what the id hashes)."""
        return {
            "gammas": [[p, g] for p, g in self.mixture.gammas],
            "n": self.n,
            "seed": self.seed,
            "method": self.method.name,
            "options": canonical_options(self.method, [self.mixture.mixture]),
            "dtype": self.dtype,
        }

    @property
    def task_id(self) -> str:
        text = json.dumps(self.config(), sort_keys=True, separators=(",", ":"))
        return hashlib.sha256(text.encode("utf-8")).hexdigest()[:16]


def instance_key(task: Task) -> tuple:
    """What fixes a task's instance: (gammas, n, seed, dtype); tasks with the same key differ
    only in their method and options."""
    return (task.mixture.gammas, task.n, task.seed, task.dtype)


def instance_groups(tasks: list[Task], slots: int) -> list[list[Task]]:
    """``tasks`` in groups that share one instance (each group in the order of ``tasks``, the
    groups in the order of their first task), for a sweep whose workers can run ``slots``
    tasks at once. With fewer instances than slots, instances are cut into groups of
    consecutive tasks (as even as they go, never empty) until there are min(slots, tasks)
    groups, one cut at a time over the instances in turn, so that every worker has a group
    and no instance is sampled more often than that needs: one instance with three methods
    on two workers runs as two methods on one sampling and one on another, not as one group
    leaving a worker idle."""
    groups: dict[tuple, list[Task]] = {}
    for task in tasks:
        groups.setdefault(instance_key(task), []).append(task)
    members = list(groups.values())
    target = min(max(1, int(slots)), len(tasks))
    parts = [1] * len(members)
    while sum(parts) < target:  # one more cut for each instance in turn that has tasks left
        for i, group in enumerate(members):
            if sum(parts) < target and parts[i] < len(group):
                parts[i] += 1
    out = []
    for group, k in zip(members, parts, strict=True):
        size, extra = divmod(len(group), k)
        start = 0
        for i in range(k):
            stop = start + size + (i < extra)
            out.append(group[start:stop])
            start = stop
    return out


class TheoryValues(NamedTuple):
    """What the theory says about a study's mixture (energies per spin)."""

    alg: float  # the algorithmic energy ALG
    gs: float  # the Parisi ground state; NaN when the solver fails
    full_rsb: bool  # the full-RSB criterion holds on (0, 1]
    gs_equals_alg: bool  # GS = ALG is predicted (with a field: the criterion on [q_hat, 1])
    verdict: str  # the criterion's verdict in words (FullRSBVerdict.describe)


@functools.lru_cache(maxsize=64)
def theory_values(gammas: tuple[tuple[int, float], ...]) -> TheoryValues:
    """ALG, GS and the full-RSB verdict of a mixture given as (p, gamma_p) pairs."""
    from ..model import Mixture
    from ..theory import algorithmic_energy, full_rsb, ground_state

    mix = Mixture(dict(gammas))
    alg = float(algorithmic_energy(mix))
    try:
        gs_res = ground_state(mix)
        gs = float(gs_res.value) if gs_res.converged else math.nan
    except (ValueError, RuntimeError):
        gs = math.nan
    verdict = full_rsb(mix)
    return TheoryValues(alg, gs, verdict.holds, verdict.gs_equals_alg, verdict.describe())


def run_task(task: Task, threads: int | None = None, keep_point: bool = False) -> dict[str, Any]:
    """Sample the instance of ``task`` from its seed, run its method, return its row.

    ``threads``: rayon threads for the kernels in this process (``orthoclimb.set_num_threads``);
    None keeps the current setting. BLAS inside the algorithms is already single-threaded.
    The row's ``steps`` is the work actually done: K for Hessian ascent (what "auto" resolved
    to at this n), the iterations for gradient ascent. ``keep_point``: the row also holds the
    final unit vector as ``end_point`` (float64, shape (n,); the driver writes it to its own
    file and drops it from the row) and its digest ``end_point_sha256``
    (:mod:`orthoclimb.studies.points`).
    """
    _set_threads(threads)
    ham, seconds = _sample(task)
    return _run_on(task, ham, seconds, 1, keep_point)


def run_instance_tasks(
    tasks: list[Task],
    threads: int | None = None,
    keep_point: bool = False,
    rows_folder: str | None = None,
) -> list[tuple[str, Any]]:
    """Run ``tasks``, which share one instance (:func:`instance_key`), on one sampling of it.

    Returns, per task and in order, ``("row", row)`` (the row of :func:`run_task`, with
    ``sample_shared_by = len(tasks)``) or ``("error", "Type: message")`` when its method
    raised: one method's failure is its task's alone, the others' rows are kept. A failure
    to sample raises, for every task (a sweep has Dask retry the group). ``threads`` and
    ``keep_point`` as in :func:`run_task`. ``rows_folder``: a study folder this process can
    write, into which each row (and its end point) goes as soon as its task ends
    (:func:`~orthoclimb.studies.store.write_completed_row`; a row returned after it was
    written there has no ``end_point``); a failed write is left to the caller, who writes
    the returned row again.
    """
    if not tasks:
        return []
    if len({instance_key(t) for t in tasks}) != 1:
        raise ValueError(
            "the tasks of one group must share their instance (mixture, n, seed, dtype), got "
            + ", ".join(t.task_id for t in tasks)
        )
    _set_threads(threads)
    ham, seconds = _sample(tasks[0])
    out: list[tuple[str, Any]] = []
    for task in tasks:
        try:
            row = _run_on(task, ham, seconds, len(tasks), keep_point)
        except Exception as exc:  # noqa: BLE001 - recorded as this task's failure
            out.append(("error", f"{type(exc).__name__}: {exc}"))
            continue
        if rows_folder is not None:
            _write_now(rows_folder, row)
        out.append(("row", row))
    return out


def _write_now(folder: str, row: dict[str, Any]) -> None:
    """Write ``row`` into the study folder now; on an OSError leave it whole to the caller
    (whose write of it then names the problem)."""
    from .store import write_completed_row

    try:
        write_completed_row(folder, row)
    except OSError:
        return
    row.pop("end_point", None)  # written: it need not travel back


def _set_threads(threads: int | None) -> None:
    from ..runtime import set_num_threads

    if threads is not None:
        set_num_threads(int(threads))


def _sample(task: Task):
    """The task's instance and the seconds its sampling took."""
    from ..model import Hamiltonian

    t0 = time.perf_counter()
    ham = Hamiltonian.sample(task.mixture.mixture, task.n, task.seed, dtype=task.dtype)
    return ham, time.perf_counter() - t0


def _run_on(task: Task, ham, seconds_sample: float, shared: int, keep_point: bool) -> dict:
    """Run the task's method on its instance ``ham`` (sampled in ``seconds_sample`` for
    ``shared`` tasks) and return its row."""
    from .. import __version__
    from ..algorithms import geometric_schedule, gradient_ascent, hessian_ascent, langevin_anneal
    from ..runtime import code_digest, get_num_threads

    mix = task.mixture.mixture
    opts = dict(task.method.options)
    t1 = time.perf_counter()
    if task.method.name == "hessian":
        res = hessian_ascent(
            ham,
            steps=None if opts["steps"] == "auto" else opts["steps"],
            tol=opts["tol"],
            seed=task.seed,
            polish=opts["polish"],
            start=opts.get("start", LEGACY_START),  # absent: a study made before the option
        )
        before = float(res.info.get("energy_ascent", res.energy))
        steps = int(res.config["steps"])  # K actually used ("auto" resolves per n)
    elif task.method.name == "gradient":
        res = gradient_ascent(ham, seed=task.seed, gtol=opts["gtol"], max_iter=opts["max_iter"])
        before = float(res.energy)
        steps = int(res.info["iterations"])
    elif task.method.name == "anneal":
        schedule = geometric_schedule(opts["t_start"], opts["t_end"], opts["steps"])
        res = langevin_anneal(
            ham, seed=task.seed, schedule=schedule, eta=opts["eta"], polish=opts["polish"]
        )
        before = float(res.info["energy_anneal"])
        steps = int(res.info["steps"])
    else:  # pragma: no cover - MethodSpec.make refuses other names
        raise ValueError(f"unknown method {task.method.name!r}")
    t2 = time.perf_counter()
    theory = theory_values(task.mixture.gammas)
    alg, gs = theory.alg, theory.gs
    energy = float(res.energy)
    local_max = res.info.get("local_max")
    row = {
        "task_id": task.task_id,
        "mixture": task.mixture.name,
        "gammas": mix.to_text(),
        "n": task.n,
        "seed": task.seed,
        "start_seed": task.seed,  # the start point's seed (climb --start-seed) is the seed
        "method": task.method.name,
        "options": json.dumps(opts, sort_keys=True),
        "steps": steps,
        "dtype": task.dtype,
        "energy": energy,
        "energy_before_polish": before,
        "alg": alg,
        "ground_state": gs,
        "gap_alg": energy - alg,
        "gap_gs": energy - gs,
        "local_max": None if local_max is None else bool(local_max),
        "grad_norm": float(res.info.get("grad_norm", math.nan)),
        # the largest Riemannian Hessian eigenvalue at the end point, per spin (the local-maximum
        # check's; NaN for a run without one: Hessian ascent or anneal with --no-polish)
        "top_eigenvalue": float(res.info.get("top_eigenvalue", math.nan)),
        "seconds_sample": seconds_sample,
        "sample_shared_by": shared,
        "seconds_run": t2 - t1,
        "threads": get_num_threads(),
        "version": __version__,
        "code": code_digest(),
        "worker": f"{socket.gethostname()}:{os.getpid()}",
        "finished": datetime.now(timezone.utc).isoformat(timespec="seconds"),
    }
    if keep_point:
        from ..algorithms.result import vector_digest

        row["end_point"] = np.array(res.x, dtype=np.float64)
        row["end_point_sha256"] = vector_digest(row["end_point"])
    return row
