"""A memory limit of the user's own: the environment variable ``ORTHOCLIMB_MEMORY_LIMIT``.

On a shared machine the memory the kernel reports as available (MemAvailable) is everyone's;
a user who means to leave most of it to others sets ``ORTHOCLIMB_MEMORY_LIMIT`` to the most
this process may hold, as bytes or with a unit: ``8GiB``, ``500MB``, ``2e9`` (units as
:func:`dask.utils.parse_bytes` reads them: kB/MB/GB are powers of 1000, KiB/MiB/GiB powers of
1024). The headroom under it is

    limit - VmRSS      (this process's resident memory, from /proc/self/status)

and every memory check (:func:`orthoclimb.model.memory.available_memory`) takes the smallest
of it and the machine's and job's own limits. The variable is read at each check, so setting
``os.environ`` from Python takes effect at once; unset or blank means no limit of the user's.
The limit is per process: a sweep's local workers inherit it, each held to it on its own, and
the sweep plans no more of them than fit within the driver's headroom together (each counted
with as much memory of its own as the driver holds, besides two instances per running task).
"""

from __future__ import annotations

import os

from .process_limits import status_bytes

__all__ = ["ENV_VAR", "resident_memory", "user_headroom", "user_memory_limit"]

ENV_VAR = "ORTHOCLIMB_MEMORY_LIMIT"


def user_memory_limit() -> int | None:
    """Bytes ``ORTHOCLIMB_MEMORY_LIMIT`` allows (None when unset or blank); a ValueError naming
    the value when it is not a positive size."""
    text = os.environ.get(ENV_VAR, "")
    if not text.strip():
        return None
    from dask.utils import parse_bytes  # dask is a dependency; imported only when set

    try:
        limit = parse_bytes(text)
    except (ValueError, TypeError, OverflowError):  # 1e400: float inf, then int() overflows
        limit = None
    if not isinstance(limit, int) or limit < 1:
        raise ValueError(
            f"{ENV_VAR} must be a positive size in bytes such as 8GiB, 500MB or 2e9, got {text!r}"
        )
    return limit


def resident_memory() -> int:
    """This process's resident memory in bytes (VmRSS), or 0 where it cannot be read."""
    return status_bytes().get("VmRSS", 0)


def user_headroom() -> int | None:
    """Bytes this process may still take under ``ORTHOCLIMB_MEMORY_LIMIT``: the limit minus
    its resident memory (at least 0), or None when no limit is set. Where the resident memory
    cannot be read (no /proc), the whole limit."""
    limit = user_memory_limit()
    if limit is None:
        return None
    return max(limit - resident_memory(), 0)
