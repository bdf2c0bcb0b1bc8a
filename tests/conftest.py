"""Shared fixtures for the test suite."""

from __future__ import annotations

import json
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import Any

import numpy as np
import pytest

import orthoclimb as oc
from orthoclimb import _core


@pytest.fixture
def rng() -> np.random.Generator:
    """A fixed-seed generator: tests are reproducible, never flaky."""
    return np.random.default_rng(20261201)


@pytest.fixture
def blas_threads() -> Callable[[], list[int]]:
    """A function that lists the thread counts of the BLAS pools (threadpoolctl); the test is
    skipped where BLAS runs one thread anyway, since it could not see a limit then."""
    threadpoolctl = pytest.importorskip("threadpoolctl")

    def counts() -> list[int]:
        pools = threadpoolctl.threadpool_info()
        return [i["num_threads"] for i in pools if i["user_api"] == "blas"]

    if max(counts(), default=1) < 2:
        pytest.skip("BLAS runs one thread here anyway")
    return counts


def unit(v: np.ndarray) -> np.ndarray:
    return v / np.linalg.norm(v, axis=-1, keepdims=True)


def strict_json_loads(text: str) -> Any:
    """json.loads that refuses what RFC 8259 (section 6) leaves out of JSON and Python's json
    module accepts anyway: the bare tokens NaN, Infinity and -Infinity."""

    def refuse(token: str) -> Any:
        raise ValueError(f"{token} is not JSON (RFC 8259)")

    return json.loads(text, parse_constant=refuse)


@contextmanager
def every_call_on_the_pool() -> Iterator[Callable[[], None]]:
    """Sends every kernel call to the thread pool, however small (calls below the inline
    bound normally run on the calling thread, where the thread count does not split them),
    so that tests can compare thread counts. Yields a function that brings the default
    bound back early (to compare the inline path too); on exit the bound and the thread
    count are restored whatever happened."""
    threads = oc.get_num_threads()
    bound = _core._set_inline_passes(0)

    def inline_again() -> None:
        _core._set_inline_passes(bound)

    try:
        yield inline_again
    finally:
        oc.set_num_threads(threads)
        _core._set_inline_passes(bound)


@contextmanager
def thread_cluster(n_workers: int, **options: Any) -> Iterator[Any]:
    """An in-process Dask cluster (workers are threads of this process, so a monkeypatch
    reaches them) listening on a local TCP address, as an external scheduler would; closed on
    exit. ``options`` go to ``LocalCluster`` (``threads_per_worker``, say)."""
    from distributed import LocalCluster

    cluster = LocalCluster(
        n_workers=n_workers,
        processes=False,
        protocol="tcp://",
        host="127.0.0.1",
        dashboard_address=":0",
        **options,
    )
    try:
        yield cluster
    finally:
        cluster.close()


_FORK_WHILE_BUSY = """
import os, signal, sys, threading
{setup}
stop = threading.Event()

def busy():
    while not stop.is_set():
        {call}

worker = threading.Thread(target=busy)
worker.start()
hung = 0
for _ in range({forks}):
    pid = os.fork()
    if pid == 0:
        signal.alarm(3)  # a child that hangs is ended by SIGALRM
        {call}
        os._exit(0)
    _, status = os.waitpid(pid, 0)
    hung += int(os.WIFSIGNALED(status))
stop.set()
worker.join()
print(hung)
"""


def hung_forks(setup: str, call: str, forks: int) -> int:
    """How many of ``forks`` children, each forked while another thread repeats the one-line
    statement ``call`` and then running ``call`` once itself, hang (ended after 3 s); in a
    fresh interpreter that first runs ``setup``. A lock held by the busy thread at the fork
    stays locked in the child, where no thread will release it."""
    import subprocess
    import sys

    script = _FORK_WHILE_BUSY.format(setup=setup, call=call, forks=forks)
    command = [sys.executable, "-c", script]
    out = subprocess.run(command, capture_output=True, text=True, timeout=600)
    assert out.returncode == 0, out.stderr[-3000:]
    return int(out.stdout.strip().splitlines()[-1])
