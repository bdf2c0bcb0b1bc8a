"""Run the tasks of a study on Dask distributed.

By default an embedded :class:`distributed.LocalCluster` of worker *processes* on loopback,
sized by :func:`plan_workers`; with ``scheduler="tcp://HOST:PORT"`` the tasks go to an existing
cluster (its workers need orthoclimb installed). Tasks are submitted as futures with Dask's
``retries=`` and collected with ``as_completed``: no scheduler, pool or retry loop of our own.
Each finished task's row is written atomically by the driver as soon as it arrives
(:class:`~orthoclimb.studies.store.Store`), so a killed driver loses only the running tasks
(groups, below), and a worker that dies loses its running one, which Dask reschedules on
another worker.

Tasks that share an instance (the methods of one mixture, n and seed) go to Dask as one
future that samples it once (:func:`~orthoclimb.studies.tasks.instance_groups`; with fewer
instances than workers an instance's tasks are cut into as many groups as keep the workers
busy): sampling took 27 % of a three-method study's compute at n <= 300 when each task
sampled its own. The workers of the embedded cluster write each row of a group as its task
ends (:func:`~orthoclimb.studies.store.write_completed_row`; the driver's write of the same
row then finds it done), so a killed driver or worker loses only the running tasks; with an
external scheduler, whose workers may not see the study folder, a group's rows reach the
folder when the group ends, and a killed driver loses the running groups' finished tasks
too. A method that raises fails its own task only (without a retry), and a failed sampling
fails the group (after Dask's retries).

Thread sizing. Each worker process runs one task at a time (one Dask thread) and gives its
kernels ``rayon`` threads, with workers x dask_threads x rayon <= cores, so the two levels of
parallelism never oversubscribe the machine.
"""

from __future__ import annotations

import contextlib
import logging
import math
import os
import signal
import sys
import threading
import time
from collections.abc import Callable
from concurrent.futures import CancelledError
from dataclasses import dataclass
from typing import Any

from .._core import MAX_THREADS as _MAX_THREADS
from .external import (
    SchedulerLostError,
    foreign_code_notes,
    probe_scheduler,
    watch_workers,
)
from .grid import StudySpec
from .store import Store, sweep_lock
from .tasks import Task, instance_groups, run_instance_tasks

# imported by each worker process of the embedded cluster (replacements included)
WORKER_PRELOAD = "orthoclimb.studies.worker_signals"

__all__ = ["SweepOutcome", "WorkerPlan", "available_cores", "plan_workers", "run_study"]


@dataclass(frozen=True)
class WorkerPlan:
    """``workers`` processes x ``dask_threads`` tasks each x ``rayon_threads`` kernel threads."""

    workers: int
    dask_threads: int
    rayon_threads: int

    @property
    def cores_used(self) -> int:
        return self.workers * self.dask_threads * self.rayon_threads


def available_cores() -> int:
    """Cores this process may run on (CPU affinity where the OS reports it)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not Linux
        return max(1, os.cpu_count() or 1)


def plan_workers(
    cores: int,
    tasks: int | None = None,
    workers: int | None = None,
    memory_per_task: int | None = None,
    memory: int | None = None,
    worker_memory: int = 0,
) -> WorkerPlan:
    """Choose worker processes and threads for ``cores`` cores.

    Policy: one task per worker at a time (dask_threads = 1: the Python parts of an algorithm
    hold the GIL, so processes, not threads, give task parallelism); as many workers as cores
    (many small tasks scale best across processes), but no more than the number of ``tasks``,
    than ``workers`` if given, nor than ``memory // (2 memory_per_task + worker_memory)`` (each
    running task holds one instance plus working copies, and each worker process its own
    Python, NumPy and Dask, ``worker_memory``); the cores left go to rayon inside each task:
    rayon_threads = cores // workers. Always workers x dask_threads x rayon_threads <= cores.
    """
    if isinstance(cores, bool) or not isinstance(cores, int) or cores < 1:
        raise ValueError(f"cores must be a positive integer, got {cores!r}")
    limit = cores
    if workers is not None:
        if isinstance(workers, bool) or not isinstance(workers, int) or workers < 1:
            raise ValueError(f"--workers must be a positive integer, got {workers!r}")
        limit = min(limit, workers)
    if tasks is not None:
        limit = min(limit, max(1, int(tasks)))
    if memory_per_task and memory:
        per_worker = 2 * memory_per_task + max(0, worker_memory)
        limit = min(limit, max(1, int(memory // per_worker)))
    n_workers = max(1, limit)
    return WorkerPlan(n_workers, 1, max(1, cores // n_workers))


def counted(k: int, noun: str, plural: str | None = None) -> str:
    """``k`` and ``noun``, plural unless k is 1: "1 core", "2 cores" (``plural`` for nouns
    that take more than an s: "2 worker processes")."""
    return f"{k} {noun if k == 1 else plural or noun + 's'}"


def _reduced_requests(
    plan: WorkerPlan, workers: int | None, threads: int | None, cores: int, pending: int
) -> list[str]:
    """Notes for a ``--workers`` or ``--threads`` that :func:`plan_workers` lowered, so that a
    request is never overridden silently (the plan keeps workers x threads <= cores)."""
    notes = []
    if workers is not None and plan.workers < workers:
        bounds = [counted(cores, "core")] if cores < workers else []
        if pending < workers:
            bounds.append(f"{counted(pending, 'task')} to run")
        if plan.workers < min(cores, pending, workers):
            bounds.append("the memory for each worker process and two instances per running task")
        notes.append(
            f"note: --workers {workers} lowered to {plan.workers} (at most one worker per core,"
            f" per task and per memory share; here: {', '.join(bounds)})"
        )
    if threads is not None and plan.rayon_threads < threads:
        notes.append(
            f"note: --threads {threads} lowered to {plan.rayon_threads}, the share of each of "
            f"{counted(plan.workers, 'worker')} in {counted(cores, 'core')}"
        )
    return notes


@dataclass
class SweepOutcome:
    total: int
    skipped: int
    done: int
    failed: int
    seconds: float
    plan: WorkerPlan | None
    address: str | None
    replaced_workers: int = 0  # embedded cluster: worker processes that died and were replaced


@contextlib.contextmanager
def _interrupts_held():
    """Hold SIGINT while the embedded cluster starts its worker processes: a Ctrl-C that comes
    meanwhile is recorded and raised as KeyboardInterrupt when the block is left, after the
    start (so the caller has a cluster to close), not in the middle of it.

    Ctrl-C in a terminal signals the whole process group: the workers used to die printing
    about 70 lines of tracebacks while the sweep itself was already stopping them cleanly.
    SIGINT is blocked in the main thread, so the threads Dask creates now, and the worker
    processes they spawn, inherit it blocked; the preload module ``worker_signals`` then
    ignores it for good, which discards one still pending (a worker Dask starts later to
    replace a dead one ignores it from that import on). Threads that existed before (the
    kernels' pool, say) still take SIGINT, so the main thread's handler only records it
    during the start. Before, the sweep ignored SIGINT during the start, and a Ctrl-C in that
    second or two was lost: the sweep ran to its end and exited 0 (8 of 8 tries of a user
    review). Off the main thread, without pthread_sigmask (Windows) or where SIGINT is already
    ignored, nothing is done."""
    # already ignored (say, `orthoclimb sweep ... &` in a script): the workers inherit that,
    # and no Ctrl-C is to be counted
    ignored = signal.getsignal(signal.SIGINT) is signal.SIG_IGN
    main = threading.current_thread() is threading.main_thread()
    if not main or not hasattr(signal, "pthread_sigmask") or ignored:
        yield
        return
    # multiprocessing's resource tracker, started with the first spawned process, unblocks
    # SIGINT (SIG_UNBLOCK, not a restore) in the thread that starts it, and the workers then
    # started with SIGINT deliverable; started here first, it leaves the masks alone.
    from multiprocessing import resource_tracker

    resource_tracker.ensure_running()
    came: list[int] = []
    old_handler = signal.signal(signal.SIGINT, lambda signum, frame: came.append(signum))
    old_mask = signal.pthread_sigmask(signal.SIG_BLOCK, {signal.SIGINT})
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, old_mask)  # a pending one is recorded now
        signal.signal(signal.SIGINT, old_handler)
    if came:
        raise KeyboardInterrupt


def _close(bar, cluster, client, old_term, pending: BaseException | None) -> None:
    """Close the progress bar, the embedded cluster and the client, and give SIGTERM back its
    handler: every step runs, whatever the ones before it raised, and then the first error
    is raised; but while the sweep is already ending with ``pending`` (Ctrl-C, say), an
    ordinary error in closing is only warned about, so that the interruption goes on (a
    review: a close that timed out turned exit 130 into exit 1). The cluster first: closed
    the other way round, an interrupted sweep's scheduler could still be telling the closed
    client about results workers held, which Dask logs as CRITICAL with a traceback (6 runs
    of 8 once the workers imported orthoclimb at start-up; 0 of 8 in this order)."""
    steps = (
        lambda: bar is not None and bar.close(),
        lambda: cluster is not None and cluster.close(),
        lambda: client is not None and client.close(),
        lambda: old_term is not None and signal.signal(signal.SIGTERM, old_term),
    )
    first: BaseException | None = None
    for step in steps:
        try:
            step()
        except BaseException as exc:  # noqa: BLE001 - raised (or warned about) below
            first = exc if first is None else first
    if first is None:
        return
    if pending is not None and isinstance(first, Exception):
        import warnings

        warnings.warn(
            f"closing the sweep's cluster failed: {first!r}", RuntimeWarning, stacklevel=3
        )
        return
    raise first


def _write_table_after(store: Store, pending: BaseException | None) -> None:
    """Brings the study's table up to date at the end of a sweep. When the sweep is already
    ending with an exception (Ctrl-C, a lost scheduler), a table that cannot be written
    (a row file edited by hand, say) is reported as a warning, so that it does not replace
    that exception (exit 130 became exit 2, and the interruption went unreported)."""
    try:
        store.write_table()
    except (ValueError, OSError) as exc:
        if pending is None:
            raise
        import warnings

        warnings.warn(f"the results table was not updated: {exc}", RuntimeWarning, stacklevel=2)


def _connect(scheduler: str | None, plan: WorkerPlan, timeout: float):
    """A (client, cluster) pair; cluster is None for an external scheduler."""
    from distributed import Client, LocalCluster

    if scheduler is None:
        cluster = None
        try:
            with _interrupts_held():
                cluster = LocalCluster(
                    n_workers=plan.workers,
                    threads_per_worker=plan.dask_threads,
                    processes=True,
                    host="127.0.0.1",
                    dashboard_address=":0",
                    env={"ORTHOCLIMB_NUM_THREADS": str(plan.rayon_threads)},
                    preload=[WORKER_PRELOAD],
                    # a worker's heartbeat can fail while the cluster shuts down (1 in 12 Ctrl-C
                    # runs logged that as an ERROR with a traceback); task errors reach the sweep
                    # through their futures and dead workers are counted, so only CRITICAL shows
                    silence_logs=logging.CRITICAL,
                )
            return Client(cluster, timeout=timeout), cluster
        except BaseException:  # a Ctrl-C held during the start arrives here, among others
            if cluster is not None:
                cluster.close()
            raise
    # (run_study probed the scheduler before the folder was touched: not asked again here)
    try:
        client = Client(scheduler, timeout=timeout)
    except (OSError, TimeoutError) as exc:
        raise ValueError(
            f"cannot reach the Dask scheduler at {scheduler} within {timeout:g} s ({exc}); "
            "check the address, or give none (omit --scheduler; scheduler=None in Python) to"
            " use an embedded local cluster"
        ) from None
    except Exception as exc:  # Dask's own complaints, for a listener that is not a scheduler
        raise ValueError(
            f"cannot connect to a Dask scheduler at {scheduler}"
            f" ({type(exc).__name__}: {exc}); check the address"
        ) from None
    return client, None


def _check_largest_fits(spec: StudySpec, tasks: list[Task]) -> None:
    """Refuse, before anything starts, a study run on this machine whose largest instance
    alone needs more memory than is available: each of its tasks would fail after the
    cluster started (an external cluster's machines may be larger: not checked)."""
    from ..errors import InsufficientMemoryError
    from ..model import available_memory
    from ..model.memory import binding_limit, format_bytes
    from ..model.user_limit import ENV_VAR, resident_memory, user_headroom
    from .estimate import largest_instance

    need, name, n = largest_instance(spec, tasks)
    room, own = user_headroom(), resident_memory()
    if room is not None and need + own > room:
        raise InsufficientMemoryError(
            f"the study's largest instance ({name}, n = {n}) needs {format_bytes(need)} of"
            f" coefficients and a worker process about {format_bytes(own)} of its own (as much"
            f" as this one holds), but {ENV_VAR}={os.environ[ENV_VAR].strip()} leaves"
            f" {format_bytes(room)}; raise the limit or drop that size"
        )
    have = available_memory()
    if need > have:
        raise InsufficientMemoryError(
            f"the study's largest instance ({name}, n = {n}) needs {need} bytes"
            f" ({format_bytes(need)}) of coefficients, but only {have} bytes"
            f" ({format_bytes(have)}) are available on this machine{binding_limit(have)};"
            " drop that size, raise the limit that binds if one does, or run"
            " the study on a larger machine (--scheduler; scheduler= in Python)"
        )


def _worker_addresses(client: Any) -> set[str]:
    """Addresses of the workers the scheduler knows now (empty if it cannot say)."""
    try:
        return set(client.scheduler_info()["workers"])
    except Exception:  # noqa: BLE001 - only a remark in the summary depends on it
        return set()


def _inside_script_reimport() -> bool:
    """Whether this call comes from a script being imported again as ``__mp_main__``: what a
    worker process started by ``multiprocessing``'s spawn (as Dask's are) does with a script
    whose study call is not under ``if __name__ == "__main__":``. Only the module-level code
    of that import counts: a function of the script that a spawned pool calls later also
    lives in ``__mp_main__``, and is a correct use."""
    frame = sys._getframe(1)
    while frame is not None:
        if frame.f_code.co_name == "<module>" and frame.f_globals.get("__name__") == "__mp_main__":
            return True
        frame = frame.f_back
    return False


def checked_outcomes(group: list[Task], outcomes: Any) -> list[tuple[str, Any]]:
    """The outcomes of a group's future (:func:`~orthoclimb.studies.tasks.run_instance_tasks`),
    checked before the driver writes any: one ("row", dict) or ("error", str) per task of the
    group, or a ValueError, which the sweep records as the failure of every task without a row
    (a half-written group would otherwise stop the sweep midway, the other groups' results
    unread; an embedded cluster's worker has written the rows of the tasks it finished)."""
    ok = isinstance(outcomes, list) and len(outcomes) == len(group)
    ok = ok and all(
        isinstance(o, tuple)
        and len(o) == 2
        and (o[0] == "row" and isinstance(o[1], dict) or o[0] == "error" and isinstance(o[1], str))
        for o in outcomes
    )
    if not ok:
        got = f"{len(outcomes)} outcomes" if isinstance(outcomes, list) else type(outcomes).__name__
        raise ValueError(f"the worker returned {got} for a group of {len(group)} tasks")
    return outcomes


def _term_to_interrupt(signum, frame):  # pragma: no cover - exercised by a subprocess test
    raise KeyboardInterrupt


def run_study(
    spec: StudySpec,
    folder: str | os.PathLike,
    scheduler: str | None = None,
    workers: int | None = None,
    threads: int | None = None,
    retries: int = 2,
    timeout: float = 20.0,
    progress: bool | None = True,
    log: Callable[[str], Any] = print,
    on_start: Callable[[list, WorkerPlan | None], Any] | None = None,
    keep_points: bool = False,
) -> SweepOutcome:
    """Run the pending tasks of ``spec`` into the study folder; returns counts and time.

    ``workers``/``threads``: override the plan (embedded cluster) or set the kernel threads per
    task (external cluster; default 1). ``retries``: Dask retries of a task (a group) whose
    sampling raised; a method that raises fails its own task without a retry (the same seed
    would fail again). ``timeout``: seconds to reach the scheduler. ``on_start(pending, plan)``
    is called before the cluster starts with the pending tasks, also with none (and no plan)
    for a complete study; by default it passes to ``log`` the lines the command line prints
    there (:func:`.estimate.plan_lines`: the tasks, the memory of the largest instance, the
    workers and a time estimate, for which the kernels are timed first; ``on_start=lambda *a:
    None`` skips them).
    ``progress``: a tqdm bar (True), none (False), or one only when stderr is a terminal (None,
    what the command line uses, so logs get no redrawn bar).
    ``keep_points``: the tasks this sweep runs also keep their final unit vector, in
    ``points/<task_id>.npy`` (8 n bytes each; :mod:`.points` reads them and their overlaps);
    tasks done before are not rerun for it.

    From a script, call it under ``if __name__ == "__main__":``: the embedded cluster's worker
    processes import the script again, and a call made during that import is refused. Any
    other code at the script's top level runs again in every worker process too: keep costly
    work (sampling an instance, a long computation) under the same guard.
    """
    if _inside_script_reimport():
        # each worker would run the whole study again, in the same folder
        raise RuntimeError(
            "run_study was called while a worker process imported the calling script again;"
            ' put the call under `if __name__ == "__main__":` (Dask starts its worker'
            " processes by importing the main script)"
        )
    if isinstance(retries, bool) or not isinstance(retries, int) or retries < 0:
        raise ValueError(f"retries (--retries) must be an integer >= 0, got {retries!r}")
    if isinstance(timeout, bool) or not (
        isinstance(timeout, (int, float)) and math.isfinite(timeout) and timeout > 0
    ):
        raise ValueError(
            f"timeout (--timeout) must be a positive number of seconds, got {timeout!r}"
        )
    if threads is not None and (
        isinstance(threads, bool)
        or not isinstance(threads, int)
        or not 1 <= threads <= _MAX_THREADS
    ):
        raise ValueError(
            f"threads (--threads) must be an integer in 1..{_MAX_THREADS}, got {threads!r}"
        )
    if not isinstance(keep_points, bool):
        raise TypeError(f"keep_points must be True or False, got {keep_points!r}")
    if scheduler is not None:  # before the study folder is made and the plan times kernels:
        probe_scheduler(scheduler, timeout)  # the address's form, then who listens there
    tasks = spec.tasks()
    if scheduler is None:
        _check_largest_fits(spec, tasks)  # before the study folder is created
    if on_start is None:  # say what the sweep will take before it takes it

        def on_start(pending: list, plan: WorkerPlan | None) -> None:
            from .estimate import plan_lines

            for line in plan_lines(spec, str(folder), pending, plan, scheduler, threads):
                log(line)

    with sweep_lock(folder):  # one sweep per folder
        return _sweep(
            spec,
            tasks,
            folder,
            scheduler,
            (workers, threads, retries, timeout, keep_points),
            progress,
            log,
            on_start,
        )


def _sweep(
    spec: StudySpec,
    tasks: list[Task],
    folder: str | os.PathLike,
    scheduler: str | None,
    settings: tuple[int | None, int | None, int, float, bool],
    progress: bool | None,
    log: Callable[[str], Any],
    on_start: Callable[[list, WorkerPlan | None], Any] | None,
) -> SweepOutcome:
    """The sweep of :func:`run_study` once its arguments are checked and the folder is held."""
    from tqdm import tqdm

    workers, threads, retries, timeout, keep_points = settings
    # set up before the study is opened, and SIGTERM's handler inside the block that undoes
    # an unstarted study: a Ctrl-C that lands between that block and the one that closes the
    # cluster leaves a half-made study (more statements there made a test's interrupt hit it
    # in 1 run of 3)
    watch_stop = threading.Event()  # ends the external cluster's worker watch
    client_log = logging.getLogger("distributed.client")
    client_level = client_log.level
    done = failed = replaced = 0
    client = cluster = bar = old_term = None
    connected = False
    store = Store.open(folder, spec)
    try:  # until the cluster is reached, a failure undoes what Store.open did
        pending = store.pending(tasks)
        skipped = len(tasks) - len(pending)
        plan: WorkerPlan | None = None
        start = time.perf_counter()
        if not pending:
            if on_start is not None:  # a complete study: the caller may still say so
                on_start(pending, None)
            store.write_table()
            return SweepOutcome(len(tasks), skipped, 0, 0, 0.0, None, None)
        if scheduler is None:
            from ..model import available_memory
            from ..model.user_limit import resident_memory
            from .estimate import largest_instance

            biggest = largest_instance(spec, pending)[0]
            cores, memory = available_cores(), available_memory()
            # a worker holds about what this process holds before its tasks
            own = resident_memory()
            plan = plan_workers(cores, len(pending), workers, biggest, memory, own)
            if threads is not None:
                plan = WorkerPlan(plan.workers, 1, min(threads, plan.rayon_threads))
            for note in _reduced_requests(plan, workers, threads, cores, len(pending)):
                log(note)
        if on_start is not None:
            on_start(pending, plan)
        old_term = signal.getsignal(signal.SIGTERM)
        try:  # SIGTERM -> KeyboardInterrupt, so the cluster is shut down cleanly
            signal.signal(signal.SIGTERM, _term_to_interrupt)
        except ValueError:  # pragma: no cover - not the main thread
            old_term = None
    except BaseException:
        if old_term is not None:
            signal.signal(signal.SIGTERM, old_term)
        store.undo_open()
        raise
    try:
        # the client's own reconnect attempts after a lost scheduler logged some 35 lines of
        # ERROR and chained tracebacks before the sweep's one message (a review); the sweep
        # says what it means (SchedulerLostError, the watch's notes)
        client_log.setLevel(logging.CRITICAL)
        client, cluster = _connect(scheduler, plan or WorkerPlan(1, 1, 1), timeout)
        connected = True
        if cluster is None:
            for note in foreign_code_notes(client):
                log(note)
        task_threads = plan.rayon_threads if plan is not None else (threads or 1)
        from distributed import as_completed

        try:  # the workers' task slots: they decide the grouping and the "running" count
            slots = sum(client.nthreads().values())
        except Exception:  # noqa: BLE001 - unknown: one group per instance, uncut
            slots = 1
        by_key: dict[str, list[Task]] = {}
        futures = []
        # the embedded cluster's workers share this machine's folder: they write each row as
        # its task ends, so a Ctrl-C in the middle of a group keeps its finished tasks
        rows_folder = str(store.folder.resolve()) if cluster is not None else None
        for group in instance_groups(pending, slots):
            first = group[0].task_id
            fut = client.submit(
                run_instance_tasks,
                group,
                task_threads,
                keep_points,
                # a keyword, and only where it is used: an external worker with an earlier
                # release (no such parameter) still runs the group
                **({"rows_folder": rows_folder} if rows_folder is not None else {}),
                # one task alone keeps the key it always had
                key=f"orthoclimb-{first}" + (f"-and-{len(group) - 1}" if len(group) > 1 else ""),
                retries=retries,
                pure=False,
            )
            by_key[fut.key] = group
            futures.append(fut)
        bar = tqdm(
            total=len(tasks),
            initial=skipped,
            disable=None if progress is None else not progress,  # None: a terminal only
            unit="task",
            dynamic_ncols=True,
            smoothing=0.1,
            mininterval=0.5,
        )

        if cluster is None and slots == 0:
            # an external scheduler without workers holds the tasks until one joins: say so,
            # or a sweep outside a terminal (no bar) waits without a word (a review)
            log(
                f"the Dask scheduler at {scheduler} has no workers yet: the tasks wait until"
                " one joins (start one with `dask worker " + str(scheduler) + "`; Ctrl-C stops"
                " the sweep and keeps the rows written)"
            )
        first_workers = _worker_addresses(client) if cluster is not None else set()

        def show() -> None:
            try:  # tasks assigned to workers, at most one per worker thread is executing
                running = min(slots, sum(len(v) for v in client.processing().values()))
            except Exception:  # noqa: BLE001 - the count is cosmetic
                running = -1
            bar.set_postfix(done=skipped + done, running=running, failed=failed, refresh=True)

        show()
        if cluster is None:  # an external cluster can lose every worker: say so
            watch = threading.Thread(
                target=watch_workers,
                args=(client, scheduler, log, watch_stop, slots > 0),
                daemon=True,
            )
            watch.start()
        for fut in as_completed(futures):
            group = by_key[fut.key]
            # ask the future itself rather than its status: a result held by a worker that
            # dies after the task finished is "lost" for a moment, then computed again
            try:
                outcomes = checked_outcomes(group, fut.result())
            except CancelledError as exc:  # not the task's failure: nothing may run any more
                left = len(pending) - done - failed
                raise SchedulerLostError(
                    f"the sweep lost its Dask scheduler ({exc}); {counted(left, 'task')} did"
                    " not finish and none of them failed: rerun the same command to run them"
                    " (the rows written are kept)"
                ) from None
            except Exception as exc:  # noqa: BLE001 - the group's own error (its sampling)
                outcomes = [("error", f"{type(exc).__name__}: {exc}")] * len(group)
            for task, (kind, value) in zip(group, outcomes, strict=True):
                if kind == "error" and store.row_path(task.task_id).exists():
                    # the local worker wrote its row before the group failed (a worker killed
                    # in a later method): done, not failed (a review: a failure record stayed
                    # beside the row for good)
                    done += 1
                    continue
                if kind == "error":
                    store.write_failure(task.task_id, task.config(), value)
                    failed += 1
                    continue
                store.write_row(value)  # (and its point; the local worker may have written both)
                done += 1
            bar.update(len(group))
            show()
            fut.release()
        if cluster is not None:  # a dead worker's address is gone (its replacement gets a
            # new one, maybe not yet registered when the last task ends)
            replaced = len(first_workers - _worker_addresses(client))
    finally:
        watch_stop.set()
        try:
            _close(bar, cluster, client, old_term, sys.exc_info()[1])
        finally:  # also when closing failed: a user trial's interrupted sweeps ended 2 times
            # in 6 without a table, after 10 s in the cluster's close
            client_log.setLevel(client_level)  # (after the close, whose retries log too)
            # a sweep whose cluster never started takes back what it did to the folder (a
            # new study removed, an extension undone), so a rerun may differ; else the table
            # is brought up to date
            if connected or not store.undo_open():
                _write_table_after(store, sys.exc_info()[1])
    address = None if scheduler is None else scheduler
    return SweepOutcome(
        len(tasks), skipped, done, failed, time.perf_counter() - start, plan, address, replaced
    )
