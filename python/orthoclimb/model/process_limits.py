"""The memory this process's own resource limits still allow it to map, if they limit it.

A batch system may cap a job's address space instead of (or besides) its cgroup: ``ulimit
-v`` in a job script, or a scheduler's virtual-memory limit, sets RLIMIT_AS, and RLIMIT_DATA
caps the data segment, which on Linux since 4.7 includes private anonymous mappings (where
large NumPy and Rust buffers live). Going over either does not get the job killed: the
allocation fails, late, after the work before it. Headroom under each limit (setrlimit(2),
proc(5)):

    RLIMIT_AS soft limit   - VmSize (the process's mapped virtual memory)
    RLIMIT_DATA soft limit - VmData

read from /proc/self/status. No limit, or a file that cannot be read, means "no limit
known". The virtual size counts reservations the process never touches (thread stacks,
allocator arenas), which is what the limit counts too.
"""

from __future__ import annotations

__all__ = ["address_space_headroom"]


def _status_bytes(field: str) -> int | None:
    """A "Vm..." line of /proc/self/status (in kB there) in bytes, or None."""
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith(field + ":"):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        return None
    return None


def address_space_headroom() -> int | None:
    """Bytes this process may still map under its RLIMIT_AS and RLIMIT_DATA soft limits (the
    smaller headroom), or None when neither is set or they cannot be read."""
    try:
        import resource
    except ImportError:  # pragma: no cover - non-POSIX
        return None
    rooms = []
    for limit, field in ((resource.RLIMIT_AS, "VmSize"), (resource.RLIMIT_DATA, "VmData")):
        try:
            soft, _ = resource.getrlimit(limit)
        except (OSError, ValueError):  # pragma: no cover - a platform without the limit
            continue
        if soft == resource.RLIM_INFINITY:
            continue
        used = _status_bytes(field)
        if used is not None:
            rooms.append(max(soft - used, 0))
    return min(rooms) if rooms else None
