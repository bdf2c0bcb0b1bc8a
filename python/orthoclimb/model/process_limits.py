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


def status_bytes() -> dict[str, int]:
    """The "Vm..." lines of /proc/self/status (in kB there) in bytes, by field name; empty
    when the file cannot be read. Read as bytes: its Name line is the process's name as the
    kernel has it, which need not be ASCII or UTF-8 (a script named análisis.py)."""
    try:
        with open("/proc/self/status", "rb") as fh:
            text = fh.read()
    except OSError:
        return {}
    out = {}
    for line in text.splitlines():
        key, _, rest = line.partition(b":")
        parts = rest.split()
        if key.startswith(b"Vm") and parts and parts[0].isdigit():
            out[key.decode("ascii", "replace")] = int(parts[0]) * 1024
    return out


def address_space_headroom() -> int | None:
    """Bytes this process may still map under its RLIMIT_AS and RLIMIT_DATA soft limits (the
    smaller headroom), or None when neither is set or they cannot be read."""
    try:
        import resource
    except ImportError:  # pragma: no cover - non-POSIX
        return None
    limits = []
    for limit, field in ((resource.RLIMIT_AS, "VmSize"), (resource.RLIMIT_DATA, "VmData")):
        try:
            soft, _ = resource.getrlimit(limit)
        except (OSError, ValueError):  # pragma: no cover - a platform without the limit
            continue
        if soft != resource.RLIM_INFINITY:
            limits.append((soft, field))
    if not limits:
        return None  # the common case: /proc is not read at all
    used = status_bytes()
    rooms = [max(soft - used[field], 0) for soft, field in limits if field in used]
    return min(rooms) if rooms else None
