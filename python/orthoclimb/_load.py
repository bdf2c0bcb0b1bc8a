"""How busy the machine is with other processes' work, for time estimates made on it.

A time estimate times kernels on this machine; while other processes keep its cores busy, the
run shares the cores with them (and the timings, best of a few calls, carry little of their
load: see :func:`busy_note`). :class:`OtherLoad` measures that load, in
cores, over a stretch of this process's own work: the machine's busy CPU time (``/proc/stat``,
Linux) less this process's own, over the wall time. Both clocks count in ticks of about 10
ms, so a stretch shorter than :data:`MIN_WINDOW` measures nothing (None), and a caller may wait
out the rest of a window (``stop(settle=...)``). Elsewhere it measures nothing.
"""

from __future__ import annotations

import os
import time
from pathlib import Path

__all__ = ["BUSY_CORES", "MIN_WINDOW", "OtherLoad", "busy_note"]

#: Cores of other work from which an estimate says it was timed under load.
BUSY_CORES = 0.5
#: Shortest stretch measured (seconds): 20 ticks of 10 ms, so that one tick is 0.05 cores (a
#: review: over the 2-36 ms a plan's timing takes, readings were 0 or 5-10 "cores").
MIN_WINDOW = 0.2


def _cpu_ticks() -> tuple[float, float] | None:
    """(busy, total) CPU seconds of the whole machine since boot, from /proc/stat. Busy leaves
    out idle, iowait and steal (time the hypervisor gave to other virtual machines: it is not
    work of this machine's processes)."""
    try:
        first = Path("/proc/stat").read_text().splitlines()[0].split()
        values = [int(v) for v in first[1:9]]  # user nice system idle iowait irq softirq steal
        tick = os.sysconf("SC_CLK_TCK")
    except (OSError, IndexError, ValueError, AttributeError):
        return None
    total = sum(values) / tick
    return total - (values[3] + values[4] + values[7]) / tick, total


def _own_cpu() -> float:
    t = os.times()
    return t.user + t.system


class OtherLoad:
    """Average number of cores used by *other* processes between start() and stop(): the
    machine's busy CPU time minus this process's own, over the wall time, at most the
    machine's core count (None where /proc/stat cannot be read, or over a stretch shorter than
    :data:`MIN_WINDOW`)."""

    def start(self) -> OtherLoad:
        self._t0 = (time.monotonic(), _cpu_ticks(), _own_cpu())
        return self

    def stop(self, settle: float = 0.0) -> float | None:
        """The reading; with ``settle``, first waits (sleeping, so this process adds nothing)
        until that many seconds have passed since start()."""
        wall0, ticks0, own0 = self._t0
        if ticks0 is None:
            return None
        rest = settle - (time.monotonic() - wall0)
        if rest > 0:
            time.sleep(rest)
        ticks1 = _cpu_ticks()
        wall = time.monotonic() - wall0
        if ticks1 is None or wall < MIN_WINDOW:
            return None
        cores = max(0.0, ((ticks1[0] - ticks0[0]) - (_own_cpu() - own0)) / wall)
        total = os.cpu_count()
        return min(cores, float(total)) if total else cores


def busy_note(
    cores: float | None, what: str = "the estimate", threads: int | None = None
) -> str | None:
    """A sentence for an estimate timed while other processes kept ``cores`` cores busy (None
    below :data:`BUSY_CORES` or when unmeasured). The timings keep the best of a few calls,
    which dodge the load, so the estimate is one for free cores: a user trial's sweep under
    one core of other load took 41 s against 24 s estimated. Sharing N cores fairly with
    that work, a run on ``threads`` of them (default: all) takes max(1, (threads + cores)/N)
    times as long while it lasts, which the sentence names from 1.05 on (1.5 there)."""
    if cores is None or cores < BUSY_CORES:
        return None
    total = os.cpu_count()
    of = f" of this machine's {total} cores" if total else " cores"
    factor = max(1.0, ((threads or total) + cores) / total) if total else None
    longer = f" (about {factor:.1f} times as long)" if factor and factor >= 1.05 else ""
    return (
        f"other processes kept {cores:.1f}{of} busy while the kernels were timed: {what}"
        f" is for free cores, and the run takes longer{longer} while that work goes on"
    )
