"""The process-wide thread setting of the Rust kernels.

One pool of worker threads serves every kernel call. Its size is ``ORTHOCLIMB_NUM_THREADS``
when that variable is set before the first kernel call, else the number of available cores;
:func:`set_num_threads` changes it at any time. Results do not depend on the thread count
(the work decomposition is fixed), only the speed does.
"""

from __future__ import annotations

import numpy as np

from . import _core


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
