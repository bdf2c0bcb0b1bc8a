"""The cgroup memory headroom, on fake /proc and cgroup trees (file layouts of cgroups(7) and
proc(5)): v2 and v1, nested limits, no limit, a namespaced container."""

from __future__ import annotations

from pathlib import Path

import orthoclimb.model.memory as memory
from orthoclimb.model.cgroup_memory import cgroup_headroom

GiB, MiB = 2**30, 2**20


def _write(folder: Path, files: dict[str, str]) -> None:
    folder.mkdir(parents=True, exist_ok=True)
    for name, text in files.items():
        (folder / name).write_text(text)


def _proc(tmp: Path, mountinfo: str, cgroup: str) -> Path:
    proc = tmp / "proc"
    _write(proc, {"mountinfo": mountinfo, "cgroup": cgroup})
    return proc


def test_v2_takes_the_tightest_enclosing_limit_less_the_working_set(tmp_path):
    # the job's folder sets the limit, its step folder none ("max"): headroom = 1 GiB -
    # (300 MiB used - 100 MiB of inactive file cache, reclaimable)
    mount = tmp_path / "cg2"
    _write(mount / "job" / "step", {"memory.max": "max\n", "memory.current": "5\n"})
    stat = "anon 1\ninactive_file 104857600\nactive_file 7\n"
    _write(mount / "job", {"memory.max": f"{GiB}\n", "memory.current": f"{300 * MiB}\n"})
    (mount / "job" / "memory.stat").write_text(stat)
    proc = _proc(
        tmp_path,
        f"30 23 0:26 / {mount} rw,nosuid - cgroup2 cgroup2 rw,nsdelegate\n",
        "0::/job/step\n",
    )
    assert cgroup_headroom(proc) == GiB - (300 * MiB - 100 * MiB)


def test_v1_memory_controller_and_its_unlimited_value(tmp_path):
    mount = tmp_path / "memory"
    unlimited = "9223372036854771712\n"  # v1's "no limit"
    _write(mount, {"memory.limit_in_bytes": unlimited, "memory.usage_in_bytes": "1\n"})
    _write(
        mount / "slurm" / "job1",
        {
            "memory.limit_in_bytes": f"{2 * GiB}\n",
            "memory.usage_in_bytes": f"{GiB}\n",
            "memory.stat": "cache 5\ntotal_inactive_file 0\n",
        },
    )
    mountinfo = (
        f"32 31 0:29 / {tmp_path / 'cpu'} rw,relatime - cgroup cgroup rw,cpu\n"
        f"35 31 0:32 / {mount} rw,relatime - cgroup cgroup rw,memory\n"
    )
    proc = _proc(tmp_path, mountinfo, "8:pids:/\n4:memory:/slurm/job1\n1:cpu:/\n")
    assert cgroup_headroom(proc) == GiB
    # the same tree without the job's limit: nothing limits the process
    (mount / "slurm" / "job1" / "memory.limit_in_bytes").write_text(unlimited)
    assert cgroup_headroom(proc) is None


def test_no_cgroup_files_mean_no_known_limit(tmp_path):
    assert cgroup_headroom(tmp_path / "nothing") is None
    proc = _proc(tmp_path, "31 23 0:28 / /sys/fs/cgroup rw - tmpfs tmpfs rw\n", "0::/\n")
    assert cgroup_headroom(proc) is None


def test_a_namespaced_container_reads_its_limit_at_the_mount_point(tmp_path):
    # inside a cgroup namespace /proc/self/cgroup may name a host path that is not mounted
    mount = tmp_path / "cg2"
    _write(mount, {"memory.max": f"{4 * GiB}\n", "memory.current": f"{GiB}\n"})
    proc = _proc(tmp_path, f"30 23 0:26 / {mount} rw - cgroup2 cgroup2 rw\n", "0::/host/a/b\n")
    assert cgroup_headroom(proc) == 3 * GiB


def test_available_memory_is_the_smaller_of_machine_and_cgroup(monkeypatch):
    monkeypatch.setattr(memory, "machine_available_memory", lambda: 8 * GiB)
    monkeypatch.setattr(memory, "cgroup_headroom", lambda: 12345)
    assert memory.available_memory() == 12345
    monkeypatch.setattr(memory, "cgroup_headroom", lambda: None)
    assert memory.available_memory() == 8 * GiB
    monkeypatch.setattr(memory, "cgroup_headroom", lambda: 2**62)
    assert memory.available_memory() == 8 * GiB


def test_a_mount_with_a_non_ascii_path_does_not_hide_the_limit(tmp_path):
    # mountinfo lists every mount of the machine; one folder named in UTF-8 (or any bytes)
    # must not make the whole file unreadable
    mount = tmp_path / "memory"
    _write(mount / "job", {"memory.limit_in_bytes": f"{GiB}\n", "memory.usage_in_bytes": "0\n"})
    mountinfo = (
        "50 31 0:45 / /media/u/Donn\u00e9es rw - ext4 /dev/sdb1 rw\n"
        f"35 31 0:32 / {mount} rw,relatime - cgroup cgroup rw,memory\n"
    )
    proc = tmp_path / "proc"
    proc.mkdir()
    (proc / "mountinfo").write_bytes(
        mountinfo.encode("utf-8") + b"51 31 0:46 / /mnt/\xff rw - x y rw\n"
    )
    (proc / "cgroup").write_text("4:memory:/job\n")
    assert cgroup_headroom(proc) == GiB


def test_a_mount_root_matches_whole_path_components_only(tmp_path):
    # a mount whose root is /job shows /job and below; the process in /jobX is not in it, so
    # the mount's limit (of /job) must not be applied; /job/a is, at the mount's folder "a"
    mount = tmp_path / "cg2"
    _write(mount, {"memory.max": f"{8 * GiB}\n", "memory.current": "0\n"})
    _write(mount / "a", {"memory.max": f"{2 * GiB}\n", "memory.current": "0\n"})
    mountinfo = f"30 23 0:26 /job {mount} rw - cgroup2 cgroup2 rw\n"
    assert cgroup_headroom(_proc(tmp_path, mountinfo, "0::/jobX\n")) is None
    assert cgroup_headroom(_proc(tmp_path, mountinfo, "0::/job/a\n")) == 2 * GiB
