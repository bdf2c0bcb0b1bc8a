"""An external Dask cluster, as a sweep meets it (``scheduler="tcp://HOST:PORT"``).

Before the study folder is touched the address is checked and the scheduler probed: a TCP
connection, then Dask's ``identity`` message with a deadline (:func:`probe_scheduler`).
Once connected, the workers are asked which orthoclimb they run (:func:`foreign_code_notes`),
a thread says when the cluster has no workers left (:func:`watch_workers`), and futures
cancelled under the sweep (a lost scheduler) end it with :class:`SchedulerLostError` rather
than as failed tasks.
"""

from __future__ import annotations

import threading
from collections.abc import Callable
from typing import Any

__all__ = [
    "CODE_CHECK_SECONDS",
    "WORKER_WATCH_SECONDS",
    "SchedulerLostError",
    "check_scheduler_address",
    "foreign_code_notes",
    "probe_scheduler",
    "scheduler_identity",
    "task_slots",
    "watch_workers",
]

#: Seconds a plan waits for the scheduler to say how many workers it has.
SLOTS_SECONDS = 5.0


class SchedulerLostError(ValueError):
    """The sweep's tasks were cancelled under it: its connection to the Dask scheduler was
    lost (a user trial killed the scheduler: the unfinished tasks were recorded as failed,
    each with Dask's FutureCancelledError)."""


# How the refusals of a scheduler address name the option, and the form it takes.
_ADDRESS = "the scheduler (--scheduler; scheduler= in Python)"
_LIKE = f"{_ADDRESS} must be an address like tcp://HOST:PORT"


def check_scheduler_address(scheduler: Any) -> tuple[str, str, int]:
    """(scheme, host, port) of a Dask address tcp://HOST:PORT. A ValueError names a malformed
    address, and one of another scheme: inproc:// lives inside one process, and tls:// (or
    another transport) needs security settings the command line does not take; each failed
    inside Dask with its own message ("not enough values to unpack")."""
    if not isinstance(scheduler, str) or "://" not in scheduler:
        raise ValueError(f"{_LIKE}, got {scheduler!r}")
    scheme, _, rest = scheduler.partition("://")
    if scheme != "tcp":
        raise ValueError(
            f"{_ADDRESS} takes a tcp://HOST:PORT address, got {scheduler!r} (scheme"
            f" {scheme!r}): other transports are not supported"
        )
    from distributed.comm import parse_host_port

    try:
        host, port = parse_host_port(rest)
    except ValueError as exc:
        raise ValueError(f"{_LIKE}, got {scheduler!r} ({exc})") from None
    if not host or not 0 < int(port) < 65536:
        raise ValueError(f"{_LIKE} with a host and a port in 1..65535, got {scheduler!r}")
    return scheme, host, int(port)


def probe_scheduler(scheduler: str, timeout: float) -> None:
    """Fail at once when nothing listens at a tcp:// scheduler address (a refused connection
    is final; Dask's own client would keep retrying until ``timeout``)."""
    import socket

    _, host, port = check_scheduler_address(scheduler)
    try:
        with socket.create_connection((host, port), timeout=timeout):
            pass
    except OSError as exc:
        reason = "timed out" if isinstance(exc, TimeoutError) else (exc.strerror or str(exc))
        raise ValueError(
            f"cannot reach the Dask scheduler at {scheduler} ({reason}); check the address, "
            "or give none (omit --scheduler; scheduler=None in Python) to use an embedded"
            " local cluster"
        ) from None
    # something listens: ask it who it is. Dask's Client waited forever on a server that
    # accepts connections and never answers (another service on that port), its timeout
    # covering the connection only
    try:
        kind = scheduler_identity(scheduler, timeout).get("type")
    except Exception as exc:  # noqa: BLE001 - a timeout, a reply that is no Dask message, ...
        kind = f"no answer ({type(exc).__name__})"
    if kind != "Scheduler":
        raise ValueError(
            f"cannot reach the Dask scheduler at {scheduler}: something listens there, but it"
            f" does not answer as a Dask scheduler within {timeout:g} s ({kind}); check the"
            " address (the scheduler's port, not its dashboard's)"
        )


def scheduler_identity(scheduler: str, timeout: float) -> dict:
    """The scheduler's reply to Dask's ``identity`` message (its "type", its workers, ...),
    waited for at most ``timeout`` seconds, in a thread of its own (so that a caller inside a
    running event loop, a notebook, can call this too)."""
    import asyncio
    from concurrent.futures import ThreadPoolExecutor

    from distributed.core import rpc

    async def ask() -> dict:
        remote = rpc(scheduler)
        try:
            return await asyncio.wait_for(remote.identity(), timeout)
        finally:
            await remote.close_rpc()

    with ThreadPoolExecutor(1) as pool:
        return pool.submit(asyncio.run, ask()).result()


def task_slots(scheduler: str, timeout: float = SLOTS_SECONDS) -> tuple[int, int] | None:
    """(task slots, workers) of the external cluster now: the workers' threads in all (a
    worker with k threads runs k tasks at once) and the worker count, from the scheduler's
    ``identity``; None when it does not answer that within ``timeout`` seconds."""
    try:
        identity = scheduler_identity(scheduler, timeout)
        workers = identity.get("workers") or {}
        slots = sum(int(w.get("nthreads", 0)) for w in workers.values())
    except Exception:  # noqa: BLE001 - the count only refines an estimate
        return None
    return slots, len(workers)


#: Seconds the sweep waits for the workers of an external cluster to name their code.
CODE_CHECK_SECONDS = 20.0

#: Seconds between two looks of :func:`watch_workers` at an external cluster's workers.
WORKER_WATCH_SECONDS = 10.0


def watch_workers(
    client: Any, scheduler: str, log: Callable, stop: threading.Event, had: bool = True
) -> None:
    """Until ``stop`` is set, look every WORKER_WATCH_SECONDS at the workers of the external
    cluster and say when it has none left (and when some come back): a user trial's only
    worker died on its first task and the sweep waited without a word until it was killed,
    the "no workers yet" note being printed only at the start. ``had``: whether it had
    workers at the start (the start's own note covers a cluster without)."""
    while not stop.wait(WORKER_WATCH_SECONDS):
        try:
            now = len(client.scheduler_info()["workers"])
        except Exception:  # noqa: BLE001 - the note is a courtesy; the sweep goes on
            continue
        if had and now == 0:
            log(
                f"note: the Dask cluster at {scheduler} has no workers now: the tasks wait"
                " until one joins (Ctrl-C stops the sweep and keeps the rows written)"
            )
        elif not had and now > 0:
            from .engine import counted

            log(f"note: {counted(now, 'worker')} in the cluster again")
        had = now > 0


def foreign_code_notes(client: Any) -> list[str]:
    """Notes for the workers of an external cluster whose orthoclimb is other code than this
    process's (another :func:`~orthoclimb.runtime.code_digest`: another version, an edited
    copy, a worker started where another copy of the package is imported first). A user
    trial's worker ran a copy with one line changed: 4 of 16 rows came from it and two
    energies moved by up to 0.08 per spin, without a word. Workers that join later are not
    asked; the report points out rows of one version from different code."""
    from ..runtime import code_digest

    answer: dict[str, Any] = {}

    def ask() -> None:
        try:  # per worker: its digest, or the exception it raised (no orthoclimb there)
            answer.update(client.run(code_digest, on_error="return"))
        except Exception:  # noqa: BLE001 - the notes are a courtesy
            pass

    asker = threading.Thread(target=ask, daemon=True)  # Client.run has no deadline of its own
    asker.start()
    asker.join(CODE_CHECK_SECONDS)
    if asker.is_alive():
        return [
            f"note: the workers did not say within {CODE_CHECK_SECONDS:g} s which orthoclimb"
            " they run (not checked)"
        ]
    ours, notes = code_digest(), []
    for address, digest in sorted(answer.items()):
        if isinstance(digest, BaseException):
            notes.append(
                f"note: the worker {address} cannot run orthoclimb"
                f" ({type(digest).__name__}: {digest}): its tasks will fail"
            )
        elif digest != ours:
            notes.append(
                f"note: the worker {address} runs other orthoclimb code (digest {digest}) than"
                f" this process ({ours}): its rows may differ from this code's; install the"
                " same code on every worker"
            )
    return notes
