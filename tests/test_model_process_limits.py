"""The memory headroom under the process's own limits (RLIMIT_AS and RLIMIT_DATA, setrlimit(2);
VmSize and VmData of /proc/self/status, proc(5)), checked in child processes that set them."""

from __future__ import annotations

import resource
import subprocess
import sys

import pytest

import orthoclimb.model.memory as memory
from orthoclimb.model.process_limits import address_space_headroom

MiB = 2**20

# a child sets a limit `room` MiB above its own current size, then reports what we read
_CHILD = """
import resource
import orthoclimb as oc
from orthoclimb.model.process_limits import address_space_headroom, status_bytes
limit, field, room = resource.{limit}, "{field}", {room} * 2**20
resource.setrlimit(limit, (status_bytes()[field] + room, resource.RLIM_INFINITY))
print(address_space_headroom(), oc.available_memory(), room)
{extra}
"""


def _child(limit: str, field: str, room_mib: int, extra: str = "") -> list[str]:
    code = _CHILD.format(limit=limit, field=field, room=room_mib, extra=extra)
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr[-2000:]
    return proc.stdout.splitlines()


@pytest.mark.parametrize(("limit", "field"), [("RLIMIT_AS", "VmSize"), ("RLIMIT_DATA", "VmData")])
def test_the_headroom_is_the_limit_less_what_the_process_has_mapped(limit, field):
    # set 300 MiB above the current size: what is read afterwards is that, less what the
    # process mapped in between (a few MiB of imports), and the available memory follows it
    headroom, available, room = map(int, _child(limit, field, 300)[0].split())
    assert room - 64 * MiB < headroom <= room
    assert available == headroom


def test_a_process_named_in_other_bytes_than_ascii_still_reads_its_limits():
    # /proc/self/status starts with the process's name as the kernel has it (a script named
    # an\xc3\xa1lisis.py, or a renamed process): read as ASCII, the whole file failed and the
    # limit was ignored (a review). The child renames itself (prctl PR_SET_NAME = 15, prctl(2))
    # to a name that is not even UTF-8
    rename = (
        "import ctypes\n"
        "ctypes.CDLL(None).prctl(15, b'py\\xff\\xc3th', 0, 0, 0)\n"
        "assert open('/proc/self/status', 'rb').readline().startswith(b'Name:\\tpy\\xff')\n"
    )
    code = rename + _CHILD.format(limit="RLIMIT_AS", field="VmSize", room=300, extra="")
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr[-2000:]
    headroom, available, room = map(int, proc.stdout.split())
    assert room - 64 * MiB < headroom <= room and available == headroom


def test_without_limits_there_is_no_headroom_to_report():
    soft_as = resource.getrlimit(resource.RLIMIT_AS)[0]
    soft_data = resource.getrlimit(resource.RLIMIT_DATA)[0]
    if soft_as != resource.RLIM_INFINITY or soft_data != resource.RLIM_INFINITY:
        pytest.skip("this test process runs under an address-space or data limit")
    assert address_space_headroom() is None


def test_an_instance_beyond_ulimit_v_is_refused_before_sampling_and_the_message_says_why():
    # 438 MiB of degree-3 coefficients (n = 700) under an address-space limit 300 MiB above
    # the process: refused by the memory check, which names the limit, not by a failed
    # allocation once sampling has started (before: "could not allocate ...")
    extra = (
        "try:\n"
        "    oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 700, seed=0)\n"
        "except oc.errors.InsufficientMemoryError as exc:\n"
        "    print('refused:', exc)\n"
    )
    lines = _child("RLIMIT_AS", "VmSize", 300, extra)
    assert len(lines) == 2, lines
    assert lines[1].startswith("refused: an instance of Mixture({3: 1.0}) with n = 700 needs")
    assert "under this process's address-space or data limit (ulimit -v or -d)" in lines[1]


def test_available_memory_is_the_smallest_of_machine_cgroup_and_process_limits(monkeypatch):
    monkeypatch.setattr(memory, "machine_available_memory", lambda: 8 * 2**30)
    monkeypatch.setattr(memory, "cgroup_headroom", lambda: 5 * 2**30)
    monkeypatch.setattr(memory, "address_space_headroom", lambda: 3 * 2**30)
    assert memory.available_memory() == 3 * 2**30
    assert memory.binding_limit(3 * 2**30) == (
        " under this process's address-space or data limit (ulimit -v or -d)"
    )
    monkeypatch.setattr(memory, "address_space_headroom", lambda: None)
    assert memory.available_memory() == 5 * 2**30
    assert memory.binding_limit(5 * 2**30) == " under this job's cgroup memory limit"
    monkeypatch.setattr(memory, "cgroup_headroom", lambda: None)
    assert memory.available_memory() == 8 * 2**30
    assert memory.binding_limit(8 * 2**30) == ""
