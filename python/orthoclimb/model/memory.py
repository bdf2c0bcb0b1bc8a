"""How much memory an instance needs, and how much the machine has.

Storage is one number per sorted monomial: sum_p C(n+p-1, p) coefficients of 8 (float64) or
4 (float32) bytes. Kernels add O(n) per call, and the Hessian 1 to 64 n x n accumulators (plus
up to one per degree) fixed by the instance (``Hamiltonian.hessian_workspace_nbytes``),
whatever the thread count.
"""

from __future__ import annotations

import math
import os
from collections.abc import Iterable

import numpy as np

from .._text import format_bytes
from ..errors import InsufficientMemoryError
from .arrays import as_flag
from .cgroup_memory import cgroup_headroom
from .mixture import Mixture
from .process_limits import address_space_headroom
from .user_limit import ENV_VAR, resident_memory, user_headroom, user_memory_limit

DTYPES = {"float64": 8, "float32": 4}


def normalize_dtype(dtype: object) -> str:
    """'float64' or 'float32' from a string or NumPy dtype; anything else is a ValueError."""
    try:  # np.dtype(None) is float64: None is refused, not read as the default
        name = None if dtype is None else np.dtype(dtype).name  # type: ignore[call-overload]
    except TypeError:
        name = None
    if name not in DTYPES:
        raise ValueError(f"storage dtype must be 'float64' or 'float32', got {dtype!r}")
    return name


def estimate_memory(
    mixture: Mixture, n: int, dtype: object = "float64", *, hessian: bool = False
) -> int:
    """Bytes of coefficient storage for a sampled instance of `mixture` with n spins; with
    ``hessian=True`` plus the workspace of one :meth:`Hamiltonian.hessian` call (its n x n
    accumulators and result, :func:`hessian_workspace_bytes`), what a dense Hessian at n
    needs beside the instance."""
    if not isinstance(mixture, Mixture):
        raise TypeError(f"mixture must be an orthoclimb.Mixture, got {type(mixture).__name__}")
    n = check_size(n)
    itemsize = DTYPES[normalize_dtype(dtype)]
    # exact in Python integers, also where the core's 64-bit count overflows (n = 2^40 at
    # p = 3 needs about 1.6e36 bytes: a number, not an error)
    storage = coefficient_count(mixture.degrees, n) * itemsize
    if as_flag(hessian, "hessian"):
        storage += hessian_workspace_bytes(mixture.degrees, n)
    return storage


def pass_accumulators(degrees: Iterable[int], n: int, acc_len: int, single_point: bool) -> int:
    """The accumulators of ``acc_len`` numbers a kernel pass allocates (the groups of the
    core's plan: about its 1 to 64 pieces in all, each degree cut on its own), fixed by the
    instance. Past 2^40 coefficients (which no machine holds) the bound 64 + degrees."""
    from .. import _core

    degrees = sorted(degrees)
    if coefficient_count(degrees, n) > 2**40:
        return 64 + len(degrees)
    # the core counts in 64 bits: n^2 of a degree-1 instance with n > 2^32 does not fit, and
    # a longer accumulator only means fewer pieces (a review: OverflowError)
    return int(_core.pass_accumulators(n, degrees, min(acc_len, 2**63 - 1), single_point))


def hessian_workspace_bytes(degrees: Iterable[int], n: int) -> int:
    """Peak bytes a Hessian call allocates beside the coefficients: its n x n accumulators (a
    number fixed by the instance, see :func:`pass_accumulators`) and the result, 8 bytes per
    entry each."""
    return (pass_accumulators(degrees, n, n * n, True) + 1) * n * n * 8


def hvp_workspace_bytes(degrees: Iterable[int], n: int, k: int) -> int:
    """Peak bytes Hessian-vector products in k directions allocate beside the coefficients
    and the caller's directions: the core's copy of the directions (transposed, one row per
    direction) and the n x k result, and for the passes over chunks of c directions (k split
    into near-equal chunks of at most 32-256, ``_core.direction_chunk``) one n x c
    accumulator per group of a chunk's plan (:func:`pass_accumulators`; a narrower last
    chunk is cut as a full one), 8 bytes per entry."""
    from .. import _core

    if k < 1:
        return 0
    c = int(_core.direction_chunk(n, k))
    return (2 * k + pass_accumulators(degrees, n, n * c, False) * c) * n * 8


def hessian_workspace_estimate(mixture: Mixture, n: int) -> int:
    """:func:`hessian_workspace_bytes` of the instance of ``mixture`` at n, without sampling
    it."""
    return hessian_workspace_bytes(mixture.degrees, n)


def coefficient_count(degrees: Iterable[int], n: int) -> int:
    """N(n) = sum_p C(n+p-1, p) over ``degrees``: the coefficients an instance stores (exact)."""
    return sum(math.comb(n + p - 1, p) for p in degrees)


def check_size(n: object) -> int:
    """n as a Python int >= 1, or a ValueError/TypeError naming the bad value."""
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)):
        raise TypeError(f"number of spins n must be an integer, got {n!r}")
    if n < 1:
        raise ValueError(f"number of spins n must be >= 1, got {n}")
    if n >= 2**63:  # the Rust core counts in 64-bit integers
        raise ValueError(f"number of spins n must be below 2^63, got {n}")
    return int(n)


def available_memory() -> int:
    """Bytes available for new allocations: what the kernel reports for the machine
    (MemAvailable on Linux), or less where a limit allows less: the headroom under this
    process's cgroup memory limit (a batch job's or container's limit; see ``cgroup_memory``)
    and under its address-space and data limits (``ulimit -v``; see ``process_limits``), and
    the headroom under the user's own ``ORTHOCLIMB_MEMORY_LIMIT`` (see ``user_limit``)."""
    rooms = [
        machine_available_memory(),
        cgroup_headroom(),
        address_space_headroom(),
        user_headroom(),
    ]
    return min(room for room in rooms if room is not None)


def machine_available_memory() -> int:
    """Bytes the kernel reports as available for new allocations (MemAvailable on Linux)."""
    try:
        with open("/proc/meminfo", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    try:
        return os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
    except (ValueError, OSError, AttributeError):  # pragma: no cover - non-POSIX
        return 2**63 - 1


def require_memory(
    needed: int, what: str, skip: str = "in Python, check_memory=False skips this check"
) -> None:
    """Raise InsufficientMemoryError when `needed` bytes exceed the available memory; the
    message ends with `skip`, how the caller can skip the check."""
    have = available_memory()
    if needed > have:
        if have == 0:  # nothing fits: a hint such as "a smaller n fits" would be wrong
            skip = "nothing fits until the limit that binds is raised"
        raise InsufficientMemoryError(
            f"{what} needs {needed} bytes ({format_bytes(needed)}) but only {have} bytes "
            f"({format_bytes(have)}) are available{binding_limit(have)} ({skip})"
        )


def binding_limit(have: int) -> str:
    """Which limit leaves only ``have`` bytes, as words for a message (" under this job's
    cgroup memory limit"), or "" when it is the machine's own memory. The user's own limit is
    named first where several leave the same room."""
    room, limit = user_headroom(), user_memory_limit()
    if room is not None and limit is not None and room <= have:
        text, held = os.environ[ENV_VAR].strip(), resident_memory()
        if text.isdigit():  # a limit written in bytes: say it in units too
            text += f" ({format_bytes(limit)})"
        if held >= limit:  # (limit - room would say the limit itself: a user trial)
            return (
                f" under {ENV_VAR}={text}: this process already holds {format_bytes(held)},"
                " more than the limit"
            )
        return f" under {ENV_VAR}={text}, of which this process holds {format_bytes(held)}"
    room = address_space_headroom()
    if room is not None and room <= have:
        return " under this process's address-space or data limit (ulimit -v or -d)"
    room = cgroup_headroom()
    if room is not None and room <= have:
        return " under this job's cgroup memory limit"
    return ""
