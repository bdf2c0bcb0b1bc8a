"""Timing primitives for the kernel benchmarks.

Every time here is wall-clock seconds per call, from ``time.perf_counter``. Functions of one
group are measured in interleaved rounds (each round takes a short block of consecutive
samples of every function, in a rotated order), so that slow drifts in the load of a shared
machine hit all of them alike and their ratios stay meaningful. Before each block the process
sleeps a little, so that worker threads left spinning by the previous function (OpenBLAS
busy-waits after a call) have parked and do not steal a core from the next one. Then it calls
the block's function, untimed, for a short while: on the virtual machines we measure on, the
first 30-45 ms of work after such a pause run 1.5-2 times slower (the samples of a block
without this show it: the first several are slow, then they drop to a steady level). A call
of a few milliseconds would otherwise spend half its block in that ramp, while a 70 ms peer
spends one sample in it; both now are timed at their steady pace.

The warm-up also counts calls. A dense peer streams hundreds of megabytes, which pushes the
next function's data out of the last-level cache, and on the Xeon we measure on that data
only comes back gradually: the first call after a 512 MB peer ran 4-5 times slower than the
steady pace, and calls kept getting faster for 30-40 calls (the same for a BLAS
matrix-vector product over an array of the same size, so it is the cache, not the kernel).
A block therefore warms for at least ``warm_calls`` calls as well, up to ``warm_max_s``
seconds, which covers that for the kernels and costs the 25 ms peers a dozen extra calls.
Users call the kernels many times in a row on one instance; the steady pace is theirs.

Samples are spread over five rounds. On the shared Xeon we measure on, the host's memory
system has slow phases of one to a few seconds, several times a minute: the energy at p = 3
then read its 85 MB of L3-resident coefficients at 14 instead of 40-45 GB/s, while a pass
from main memory slowed from 22 to 14 GB/s, so our L3-bound kernels lose 3x and the dense
peers 1.6x. A block that falls into such a phase is slow throughout. The median of all of a
function's samples stays at the steady pace as long as fewer than half of its blocks were hit;
with five blocks that is less likely than with three (if a fifth of the time is slow, about 6
in 100 against 10 in 100 per function).
"""

from __future__ import annotations

import gc
import math
import statistics
import time
from collections.abc import Callable, Hashable, Mapping
from dataclasses import dataclass, field

import numpy as np

GEMV_COLUMNS = 16384
"""Row length of the matrix view used by the 'gemv' bandwidth probe."""
WIDE_ROWS = 128
"""Row count of the matrix view used by the 'gemv-wide' bandwidth probe."""


@dataclass(frozen=True)
class Plan:
    """How hard to measure.

    Each function gets at least ``min_repeats`` samples (``min_slow_repeats`` when one sample
    takes longer than ``slow_s`` seconds) and, when it is cheap, more, up to ``max_repeats``,
    within about ``budget_s`` seconds of sampling. A sample is ``number`` back-to-back calls,
    with ``number`` chosen so that a sample lasts at least ``min_sample_s``. Samples are spread
    over ``rounds`` interleaved rounds, with a pause of ``settle_s`` before each block and then
    untimed calls of the block's function: at least one, for at least ``warm_s`` seconds, and
    then on until ``warm_calls`` calls were made or ``warm_max_s`` seconds have passed.
    """

    min_repeats: int = 7
    min_slow_repeats: int = 5
    slow_s: float = 0.25
    max_repeats: int = 41
    budget_s: float = 1.5
    rounds: int = 5
    settle_s: float = 0.1
    warm_s: float = 0.08
    warm_calls: int = 40
    warm_max_s: float = 0.4
    min_sample_s: float = 1e-3


QUICK_PLAN = Plan(
    min_repeats=3,
    min_slow_repeats=3,
    max_repeats=7,
    budget_s=0.15,
    rounds=1,
    settle_s=0.005,
    warm_s=0.005,
    warm_calls=1,
    warm_max_s=0.005,
    min_sample_s=2e-4,
)


UNSTEADY_SPREAD = 1.5
"""Block medians further apart than this (largest / smallest) mark a function's timing as
unsteady: some of its blocks ran in a slow phase of the host (see the module docstring)."""


@dataclass
class Stats:
    """Samples of one function: seconds per call, each averaged over ``number`` calls.
    ``blocks`` holds the number of samples of each block, in order (they sum to the number of
    samples; empty when the block structure is not known)."""

    samples: list[float]
    number: int
    blocks: list[int] = field(default_factory=list)

    @property
    def block_medians(self) -> list[float]:
        """The median of each block's samples."""
        out, start = [], 0
        for count in self.blocks:
            out.append(statistics.median(self.samples[start : start + count]))
            start += count
        return out

    @property
    def block_spread(self) -> float | None:
        """Largest over smallest block median (None with fewer than two blocks)."""
        medians = self.block_medians
        return max(medians) / min(medians) if len(medians) > 1 else None

    @property
    def median(self) -> float:
        return statistics.median(self.samples)

    @property
    def min(self) -> float:
        return min(self.samples)

    @property
    def repeats(self) -> int:
        return len(self.samples)

    def to_dict(self) -> dict:
        return {
            "median_s": self.median,
            "min_s": self.min,
            "repeats": self.repeats,
            "number": self.number,
            "samples_s": self.samples,
            "block_medians_s": self.block_medians,
            "block_spread": self.block_spread,
        }


def _time_calls(fn: Callable[[], object], number: int) -> float:
    """Seconds per call of ``number`` back-to-back calls of fn."""
    start = time.perf_counter()
    for _ in range(number):
        fn()
    return (time.perf_counter() - start) / number


def warm_up(fn: Callable[[], object]) -> tuple[float, object]:
    """Call fn once (twice when it is fast); return the seconds and the result of the last
    call."""
    for attempt in range(2):
        start = time.perf_counter()
        value = fn()
        seconds = time.perf_counter() - start
        if seconds > 0.2 or attempt == 1:
            break
    return seconds, value


def _calls_per_sample(seconds: float, plan: Plan) -> int:
    return max(1, min(10_000, math.ceil(plan.min_sample_s / max(seconds, 1e-9))))


def _repeats(sample_s: float, plan: Plan) -> int:
    floor = plan.min_slow_repeats if sample_s > plan.slow_s else plan.min_repeats
    return max(floor, min(plan.max_repeats, int(plan.budget_s / max(sample_s, 1e-9))))


def _warm_block(fn: Callable[[], object], plan: Plan) -> int:
    """Call fn, untimed: at least once and for ``plan.warm_s`` seconds, then on until
    ``plan.warm_calls`` calls were made or ``plan.warm_max_s`` seconds have passed. Returns
    the number of calls."""
    start = time.perf_counter()
    calls = 0
    while True:
        fn()
        calls += 1
        elapsed = time.perf_counter() - start
        if elapsed >= plan.warm_s and (calls >= plan.warm_calls or elapsed >= plan.warm_max_s):
            return calls


def _sample_block(fn: Callable[[], object], number: int, count: int) -> list[float]:
    """``count`` samples of fn with the garbage collector off."""
    enabled = gc.isenabled()
    gc.disable()
    try:
        return [_time_calls(fn, number) for _ in range(count)]
    finally:
        if enabled:
            gc.enable()


def round_share(wanted: int, r: int, rounds: int) -> int:
    """Samples of round ``r`` when ``wanted`` samples are spread over ``rounds`` rounds as
    evenly as they go (counts differ by at most one; the larger ones come last). Filling the
    first rounds first left a peer of 7 samples out of the last round, so it and the kernel it
    was compared with were not measured over the same phases of the host."""
    return wanted * (r + 1) // rounds - wanted * r // rounds


def measure(
    fns: Mapping[Hashable, Callable[[], object]],
    plan: Plan,
    on_warm: Callable[[Hashable, object], None] | None = None,
) -> dict[Hashable, Stats]:
    """Warm every function up, then sample all of them in interleaved rounds.

    ``on_warm(key, result)`` is called with each function's warm-up result (to check it).
    Returns seconds-per-call statistics keyed like ``fns``.
    """
    names = list(fns)
    number, wanted = {}, {}
    for name in names:
        seconds, value = warm_up(fns[name])
        if on_warm is not None:
            on_warm(name, value)
        number[name] = _calls_per_sample(seconds, plan)
        wanted[name] = _repeats(seconds * number[name], plan)
    samples: dict[Hashable, list[float]] = {name: [] for name in names}
    blocks: dict[Hashable, list[int]] = {name: [] for name in names}
    for r in range(plan.rounds):
        shift = r % len(names) if names else 0
        for name in names[shift:] + names[:shift]:
            count = round_share(wanted[name], r, plan.rounds)
            if count <= 0:
                continue
            time.sleep(plan.settle_s)
            _warm_block(fns[name], plan)
            samples[name] += _sample_block(fns[name], number[name], count)
            blocks[name].append(count)
    return {name: Stats(samples[name], number[name], blocks[name]) for name in names}


def bandwidth_probes(flat: np.ndarray) -> dict[str, tuple[Callable[[], object], int]]:
    """Read-bandwidth probes over the 1-D float array ``flat``: (function, bytes read).

    'sum' is ``numpy.sum`` over all of it (one thread, vectorized). 'gemv' and 'gemv-wide'
    are BLAS matrix-vector products (all BLAS threads) over it viewed as rows of
    GEMV_COLUMNS numbers, and as WIDE_ROWS long rows: OpenBLAS streams the two shapes at
    different speeds, and the faster one counts.
    """
    probes = {"sum": (flat.sum, flat.nbytes)}
    for name, rows in (("gemv", flat.size // GEMV_COLUMNS), ("gemv-wide", WIDE_ROWS)):
        rows = max(1, min(rows, flat.size))
        cols = flat.size // rows
        matrix = flat[: rows * cols].reshape(rows, cols)
        ones = np.ones(cols, dtype=flat.dtype)
        probes[name] = (lambda m=matrix, o=ones: m @ o, matrix.nbytes)
    return probes


def bandwidth(stats: Mapping[str, Stats], nbytes: Mapping[str, int]) -> dict:
    """Read bandwidth in bytes per second from probe statistics: each probe's bytes over its
    median (and over its min), and the best probe by median."""
    per_probe = {
        name: {
            "bytes": nbytes[name],
            "median_Bps": nbytes[name] / s.median,
            "max_Bps": nbytes[name] / s.min,
        }
        for name, s in stats.items()
    }
    best = max(per_probe, key=lambda k: per_probe[k]["median_Bps"])
    return {
        "probes": per_probe,
        "best_probe": best,
        "Bps": per_probe[best]["median_Bps"],
        "max_Bps": max(p["max_Bps"] for p in per_probe.values()),
    }


def roofline_fraction(nbytes: int, bytes_per_s: float, seconds: float) -> float:
    """(bytes / bandwidth) / kernel time: 1.0 means the kernel streams its data at the
    measured read bandwidth."""
    return (nbytes / bytes_per_s) / seconds
