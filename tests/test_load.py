"""The machine-load measure behind the time estimates' busy-machine note."""

from __future__ import annotations

import subprocess
import sys
import time
from pathlib import Path

import pytest

from orthoclimb._load import BUSY_CORES, OtherLoad, busy_note

linux_only = pytest.mark.skipif(
    not Path("/proc/stat").exists(), reason="the measure reads /proc/stat (Linux)"
)


@linux_only
def test_another_process_spinning_counts_as_other_load():
    # a child in a busy loop keeps about one core busy; this process sleeps meanwhile. The
    # reading is CPU time from /proc/stat, not a timing of anything, so a slow machine
    # changes it only if the child gets less than half a core
    child = subprocess.Popen([sys.executable, "-c", "while True: pass"])
    try:
        time.sleep(0.3)  # the child is running its loop
        load = OtherLoad().start()
        time.sleep(1.0)
        cores = load.stop()
    finally:
        child.kill()
        child.wait()
    assert cores is not None and cores >= BUSY_CORES


@linux_only
def test_this_process_own_work_is_not_other_load():
    # the measure subtracts this process's own CPU time: a second of our own busy loop is
    # not counted as someone else's (a quiet machine reads about 0; up to half a core of
    # others' work is tolerated, so that a shared CI machine does not fail it)
    load = OtherLoad().start()
    end = time.monotonic() + 1.0
    while time.monotonic() < end:
        pass
    cores = load.stop()
    assert cores is not None and cores < 0.9


def test_busy_note_only_from_half_a_core():
    assert busy_note(None) is None and busy_note(0.49) is None
    note = busy_note(1.6, "the plan")
    assert note is not None and note.startswith("other processes kept 1.6 of this machine's")
    assert "the plan includes their load, and holds only while it lasts" in note
