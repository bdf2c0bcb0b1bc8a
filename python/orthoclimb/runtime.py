"""The process-wide thread setting of the Rust kernels.

One pool of worker threads serves every kernel call. Its size is ``ORTHOCLIMB_NUM_THREADS``
when that variable is set (to something other than blanks) before the first kernel call, else
the number of available cores;
:func:`set_num_threads` changes it at any time. Results do not depend on the thread count
(the work decomposition is fixed), only the speed does.
"""

from __future__ import annotations

import contextlib
import functools
import hashlib
import os
import threading
import warnings
from collections.abc import Callable, Iterator
from typing import Any

import numpy as np
from threadpoolctl import threadpool_limits

from . import _core

_blas_lock = threading.Lock()
_blas_users = 0
_blas_limits: Any = None  # threadpoolctl's limiter while a block runs


def set_num_threads(k: int) -> None:
    """Use k worker threads (1 <= k <= MAX_THREADS = 1024) for all subsequent kernel calls."""
    if isinstance(k, bool) or not isinstance(k, (int, np.integer)):
        raise TypeError(f"thread count must be a positive integer, got {k!r}")
    if not 1 <= k <= _core.MAX_THREADS:
        raise ValueError(f"thread count must be in 1..{_core.MAX_THREADS}, got {k}")
    _core.set_num_threads(int(k))


def get_num_threads() -> int:
    """The number of worker threads kernels use (raises ValueError when
    ORTHOCLIMB_NUM_THREADS holds something other than a positive integer)."""
    return int(_core.get_num_threads())


def kernel_path() -> str:
    """Instruction-set path the kernels take here.

    'avx2+fma+avx512f': AVX2 kernels (compiled with AVX-512's 32 vector registers where the
    processor has AVX-512VL too), and a 512-bit tile for batches of 9 or more points (5 with
    gradients; same bits as the AVX2 tile); 'avx2+fma': AVX2 kernels; 'baseline': portable
    code. All three give the same results up to rounding (AVX2 and AVX-512 paths bit for bit
    alike).
    """
    return str(_core.kernel_path())


@contextlib.contextmanager
def one_blas_thread() -> Iterator[None]:
    """Run the block with BLAS (NumPy's and SciPy's) on one thread, safely from any number of
    Python threads at once.

    Hessian ascent, polish and the Parisi solver make many small dense solves, which BLAS
    threads slow down. A loop of your own that mixes NumPy products with kernel calls gains from
    it too: OpenBLAS's threads spin for a while after each call and take the cores from the next
    pass (on two cores, a 300 x 300 product and a p = 3, n = 400 gradient in turn took 4.1-4.5
    ms a round, against 2.4 ms for the two timed apart and 3.2-3.6 ms inside this block, where
    the product runs on one thread). threadpoolctl's limits are process-wide: entered from two
    threads directly, the first to leave restored the old count while the second still ran, and
    the second then "restored" the single thread it had found, which stayed for the rest of the
    process. Here the first thread in sets the limit and the last one out restores it. The limit
    is only a speed-up: if threadpoolctl fails to set or restore it, a RuntimeWarning says so
    and the work goes on. A process forked while a block runs starts with no users (see
    :func:`_blas_after_fork`).
    """
    global _blas_users, _blas_limits
    with _blas_lock:
        if _blas_users == 0:
            _blas_limits = _blas_call("limit", _limit_blas_to_one)
        _blas_users += 1
    try:
        yield
    finally:
        with _blas_lock:
            _blas_users -= 1
            limits = _blas_limits if _blas_users == 0 else None
            if _blas_users == 0:
                _blas_limits = None  # cleared first: a failed restore must not linger
            if limits is not None:
                _blas_call("restore", limits.restore_original_limits)


def _limit_blas_to_one() -> Any:
    # threadpoolctl is imported with the module, not here: an import statement takes the
    # module's import lock even when the module is loaded, and a child forked while another
    # thread held it hung on it (1 child in 60 in a test)
    return threadpool_limits(limits=1, user_api="blas")


def _blas_call(what: str, call: Callable[[], Any]) -> Any:
    """``call()``, or None with a RuntimeWarning when threadpoolctl fails."""
    try:
        return call()
    except Exception as exc:
        warnings.warn(
            f"could not {what} the BLAS thread count ({type(exc).__name__}: {exc});"
            " the results are the same, only the speed may differ",
            RuntimeWarning,
            stacklevel=4,
        )
        return None


def _blas_after_fork() -> None:
    """In a forked child: a fresh lock and no users. A thread of the parent may have held the
    lock, or been inside a block, at the fork; neither thread exists in the child, so the old
    lock would never be released and the count never fall to zero (15 of 57 children hung
    in a review). The child keeps the BLAS setting it inherited."""
    global _blas_lock, _blas_users, _blas_limits
    _blas_lock = threading.Lock()
    _blas_users = 0
    _blas_limits = None


_fork_held: Any = None  # the lock the fork hook took, to give back in the parent


def _blas_before_fork() -> None:
    """Before a fork: wait until no thread is inside threadpoolctl's calls, which run under
    the lock. Forked in the middle of one, a child inherited OpenBLAS's own lock taken and
    hung at its first ``openblas_set_num_threads`` (1 child in 1500, forked while another
    thread entered and left blocks, under load; seen with faulthandler). The wait is
    bounded: a thread that forks while holding the lock itself goes on after 5 s, as before."""
    global _fork_held
    lock = _blas_lock
    _fork_held = lock if lock.acquire(timeout=5.0) else None


def _blas_after_fork_in_parent() -> None:
    global _fork_held
    held, _fork_held = _fork_held, None
    if held is not None:
        held.release()


if hasattr(os, "register_at_fork"):
    os.register_at_fork(
        before=_blas_before_fork,
        after_in_parent=_blas_after_fork_in_parent,
        after_in_child=_blas_after_fork,
    )


@functools.lru_cache(maxsize=1)
def code_digest() -> str:
    """The first 16 hex digits of a SHA-256 over the package's own code, as loaded: every
    Python file under the package (path and bytes, in sorted order) and the compiled core.
    Results and study rows record it (``code``) beside ``version``, which an editable install
    or an unreleased change leaves as it was: two results with the same digest came from the
    same code (a user trial could not tell which of two versions of the code wrote a result).
    Computed once per process (about 5 ms)."""
    from pathlib import Path

    return tree_digest(Path(__file__).resolve().parent, Path(_core.__file__))


def tree_digest(root: Any, *extra: Any) -> str:
    """:func:`code_digest`'s hash of the ``*.py`` files under the folder ``root`` (relative
    path and bytes, sorted by path) and of the files ``extra`` (bytes)."""
    from pathlib import Path

    root = Path(root)
    digest = hashlib.sha256()
    for path in sorted(root.rglob("*.py")):
        digest.update(path.relative_to(root).as_posix().encode("utf-8") + b"\0")
        digest.update(hashlib.sha256(path.read_bytes()).digest())
    for path in extra:
        digest.update(hashlib.sha256(Path(path).read_bytes()).digest())
    return digest.hexdigest()[:16]
