"""The memory a Linux control group (cgroup) still allows this process, if it limits it.

On a batch system (Slurm, Kubernetes, a container with ``--memory``) the job's limit is often
far below what the machine reports as available (MemAvailable in /proc/meminfo), and going
over it gets the job killed rather than refused. Headroom of one cgroup:

    limit - (usage - inactive file cache)

(the inactive file pages are reclaimed before the limit bites; common practice, the "working
set" of container tools). Limits of the enclosing cgroups apply too, so every level from the
process's cgroup up to the mount point is read and the smallest headroom wins.

* cgroup v2: ``memory.max`` ("max" = no limit), ``memory.current``, ``inactive_file`` in
  ``memory.stat``;
* cgroup v1 (memory controller): ``memory.limit_in_bytes`` (a huge value = no limit),
  ``memory.usage_in_bytes``, ``total_inactive_file`` in ``memory.stat``.

The mounts come from /proc/self/mountinfo and the process's cgroup paths from
/proc/self/cgroup (proc(5), cgroups(7)). Anything missing or unreadable means "no limit known".
"""

from __future__ import annotations

from pathlib import Path

__all__ = ["cgroup_headroom"]

# v1 reports "no limit" as the largest page-aligned 64-bit value, e.g. 9223372036854771712
_V1_UNLIMITED = 2**62


def _read(path: Path) -> str | None:
    # mountinfo lists every mount, whose paths may be any bytes (a "Données" folder): decode
    # them as the file system does rather than lose the whole file
    try:
        return path.read_text(encoding="utf-8", errors="surrogateescape").strip()
    except OSError:
        return None


def _stat_value(path: Path, key: str) -> int:
    text = _read(path) or ""
    for line in text.splitlines():
        name, _, value = line.partition(" ")
        if name == key and value.strip().isdigit():
            return int(value)
    return 0


def _level_headroom(folder: Path, v2: bool) -> int | None:
    """Headroom of one cgroup folder, or None when it sets no limit (or cannot be read)."""
    names = (
        ("memory.max", "memory.current", "inactive_file")
        if v2
        else ("memory.limit_in_bytes", "memory.usage_in_bytes", "total_inactive_file")
    )
    limit, usage = _read(folder / names[0]), _read(folder / names[1])
    if limit is None or usage is None or not limit.isdigit() or not usage.isdigit():
        return None  # "max", absent or unreadable: no limit at this level
    if int(limit) >= _V1_UNLIMITED:
        return None
    inactive = _stat_value(folder / "memory.stat", names[2])
    return max(0, int(limit) - max(0, int(usage) - inactive))


def _mounts(proc: Path) -> list[tuple[Path, str, bool]]:
    """(mount point, root of the mount inside the hierarchy, is v2) of the memory cgroups."""
    out = []
    for line in (_read(proc / "mountinfo") or "").splitlines():
        left, sep, right = line.partition(" - ")
        fields, tail = left.split(), right.split()
        if not sep or len(fields) < 5 or len(tail) < 3:
            continue
        if tail[0] == "cgroup2":
            out.append((Path(fields[4]), fields[3], True))
        elif tail[0] == "cgroup" and "memory" in tail[2].split(","):
            out.append((Path(fields[4]), fields[3], False))
    return out


def cgroup_headroom(proc: Path = Path("/proc/self")) -> int | None:
    """Bytes this process may still allocate under its cgroup memory limits (module doc), or
    None when no limit applies or none can be read."""
    paths: dict[bool, str] = {}
    for line in (_read(proc / "cgroup") or "").splitlines():
        parts = line.split(":", 2)
        if len(parts) != 3:
            continue
        if parts[0] == "0" and parts[1] == "":
            paths[True] = parts[2]
        elif "memory" in parts[1].split(","):
            paths[False] = parts[2]
    best: int | None = None
    for mount, root, v2 in _mounts(proc):
        path = paths.get(v2)
        if path is None:
            continue
        under = root == "/" or path == root or path.startswith(root.rstrip("/") + "/")
        if not under:
            continue  # the process's cgroup is outside what this mount shows
        rel = path[len(root) :] if root != "/" else path
        folder = mount / rel.lstrip("/")
        if not folder.is_dir():
            folder = mount  # a namespaced container sees its own cgroup at the mount point
        while True:
            room = _level_headroom(folder, v2)
            if room is not None and (best is None or room < best):
                best = room
            if folder == mount or mount not in folder.parents:
                break
            folder = folder.parent
    return best
