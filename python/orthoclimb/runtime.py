"""The process-wide thread setting of the Rust kernels.

One pool of worker threads serves every kernel call. Its size is ``ORTHOCLIMB_NUM_THREADS``
when that variable is set before the first kernel call, else the number of available cores;
:func:`set_num_threads` changes it at any time. Results do not depend on the thread count
(the work decomposition is fixed), only the speed does.
"""

from __future__ import annotations

import contextlib
import threading
from collections.abc import Iterator
from typing import Any

import numpy as np

from . import _core

_blas_lock = threading.Lock()
_blas_users = 0
_blas_limits: Any = None  # threadpoolctl's limiter while a block runs (imported on first use)


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

    'avx2+fma+avx512f': AVX2 kernels, and a 512-bit tile for batches of 9 or more points (5
    with gradients; same bits as the AVX2 tile); 'avx2+fma': AVX2 kernels; 'baseline': portable
    code. All three give the same results up to rounding (AVX2 and AVX-512 paths bit for bit
    alike).
    """
    return str(_core.kernel_path())


@contextlib.contextmanager
def one_blas_thread() -> Iterator[None]:
    """Run the block with BLAS (NumPy's and SciPy's) on one thread, safely from any number of
    Python threads at once.

    Hessian ascent, polish and the Parisi solver make many small dense solves, which BLAS
    threads slow down. threadpoolctl's limits are process-wide: entered from two threads
    directly, the first to leave restored the old count while the second still ran, and the
    second then "restored" the single thread it had found, which stayed for the rest of the
    process. Here the first thread in sets the limit and the last one out restores it.
    """
    from threadpoolctl import threadpool_limits

    global _blas_users, _blas_limits
    with _blas_lock:
        if _blas_users == 0:
            _blas_limits = threadpool_limits(limits=1, user_api="blas")
        _blas_users += 1
    try:
        yield
    finally:
        with _blas_lock:
            _blas_users -= 1
            if _blas_users == 0 and _blas_limits is not None:
                _blas_limits.restore_original_limits()
                _blas_limits = None
