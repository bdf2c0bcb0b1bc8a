"""1,000 calls of each kernel do not grow the resident memory of the process.

A child process warms each kernel up (so allocator pools, the Rust scratch cache and the
thread pool reach their steady size), reads its resident set size (RSS, psutil), makes 1,000
more calls on random points and random small instances, and reads RSS again.

Why the bound can catch a leak: every call below moves at least 8 KiB through the binding
(an input or output array of >= 1,024 float64, a Hessian of >= 40 x 40, or a sampled
instance of >= 10,000 coefficients), so a call that leaked even one of its arrays, or one
instance, would grow RSS by >= 8 MiB over 1,000 calls, four times the bound of 2 MiB. The
bound leaves room for allocator noise (glibc keeps freed blocks in its arenas; common
practice); the growth measured here without a leak is below 0.7 MiB. The positive control (a
loop that keeps every output) shows that the measurement sees a leak of that size.

The child runs with glibc's malloc thresholds fixed. By default glibc raises its mmap
threshold (up to 32 MiB) whenever a large block is freed, so after a call that freed a few
MiB, later allocations land in that freed heap memory and a leak of 8 MiB showed as 3 MiB;
setting the thresholds turns that adjustment off (mallopt(3), M_MMAP_THRESHOLD). Small calls
run on the calling thread, so kernel outputs share the main heap with that freed memory.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import textwrap

import pytest

BOUND = 2 * 2**20  # bytes of RSS growth allowed per 1,000 calls after warm-up
CALLS = 1000
WARMUP = 100

CHILD = textwrap.dedent(
    """
    import gc, json, sys
    import numpy as np
    import psutil
    import orthoclimb as oc

    CALLS, WARMUP = int(sys.argv[1]), int(sys.argv[2])
    proc = psutil.Process()
    rng = np.random.default_rng(5)

    def unit(v):
        return v / np.linalg.norm(v, axis=-1, keepdims=True)

    # a few random small instances; each call picks one at random
    wide = [oc.Hamiltonian.sample(oc.Mixture({1: 0.3, 2: 1.0}), int(n), seed=i)
            for i, n in enumerate(rng.integers(1024, 1100, size=3))]
    wide.append(oc.Hamiltonian.sample(oc.Mixture({1: 0.3, 2: 1.0}), 1050, 9, dtype="float32"))
    cubic = [oc.Hamiltonian.sample(oc.Mixture({2: 1.0, 3: 0.7}), int(n), seed=i)
             for i, n in enumerate(rng.integers(40, 64, size=3))]
    kept = []

    def pick(hams):
        return hams[int(rng.integers(len(hams)))]

    def energy():
        h = pick(wide); h.energy(unit(rng.standard_normal(h.n)))
    def gradient():
        h = pick(wide); h.gradient(unit(rng.standard_normal(h.n)))
    def energy_and_gradient():
        h = pick(wide); h.energy_and_gradient(unit(rng.standard_normal(h.n)))
    def hessian():
        h = pick(cubic); h.hessian(unit(rng.standard_normal(h.n)))
    def hvp_one():
        h = pick(wide); h.hvp(unit(rng.standard_normal(h.n)), rng.standard_normal(h.n))
    def hvp_many():
        h = pick(wide)
        h.hvp(unit(rng.standard_normal(h.n)), rng.standard_normal((h.n, int(rng.integers(2, 5)))))
    def energy_batch():
        h = pick(wide); h.energy(unit(rng.standard_normal((int(rng.integers(2, 7)), h.n))))
    def gradient_batch():
        h = pick(wide); h.energy_and_gradient(unit(rng.standard_normal((4, h.n))))
    def sample():
        n = int(rng.integers(40, 56))  # C(n+2, 3) >= 11,480 coefficients
        oc.Hamiltonian.sample(oc.Mixture({2: 1.0, 3: 0.5}), n, seed=int(rng.integers(2**63)))
    def coefficients():
        pick(wide).coefficients(2)
    def control_keeps_outputs():
        h = pick(wide); kept.append(h.gradient(unit(rng.standard_normal(h.n))))

    out = {}
    for f in (energy, gradient, energy_and_gradient, hessian, hvp_one, hvp_many, energy_batch,
              gradient_batch, sample, coefficients, control_keeps_outputs):
        for _ in range(WARMUP):
            f()
        kept.clear()
        gc.collect()
        before = proc.memory_info().rss
        for _ in range(CALLS):
            f()
        gc.collect()
        out[f.__name__] = proc.memory_info().rss - before
        kept.clear()
    print(json.dumps(out))
    """
)

KERNELS = [
    "energy",
    "gradient",
    "energy_and_gradient",
    "hessian",
    "hvp_one",
    "hvp_many",
    "energy_batch",
    "gradient_batch",
    "sample",
    "coefficients",
]


@pytest.fixture(scope="module")
def growth():
    env = dict(os.environ, MALLOC_MMAP_THRESHOLD_="131072", MALLOC_TRIM_THRESHOLD_="262144")
    proc = subprocess.run(
        [sys.executable, "-c", CHILD, str(CALLS), str(WARMUP)],
        capture_output=True,
        text=True,
        timeout=300,
        env=env,
    )
    assert proc.returncode == 0, proc.stderr[-3000:]
    return json.loads(proc.stdout.strip().splitlines()[-1])


@pytest.mark.parametrize("kernel", KERNELS)
def test_no_growth(growth, kernel):
    assert growth[kernel] <= BOUND, f"{kernel}: RSS grew by {growth[kernel]} bytes"


def test_the_measurement_sees_a_leak(growth):
    # keeping one gradient (>= 1,024 float64 = 8 KiB) per call, 8 MiB in all, must show;
    # some of it lands in memory freed during the warm-up, so ask for twice the bound only
    assert growth["control_keeps_outputs"] >= 2 * BOUND, growth


CACHE_CHILD = textwrap.dedent(
    """
    import gc, json
    import numpy as np
    import psutil
    import orthoclimb as oc

    proc = psutil.Process()
    before = proc.memory_info().rss
    for n in (6000, 5800):  # one n x n accumulator each (288 and 269 MB) goes back to the core
        ham = oc.Hamiltonian.sample(oc.Mixture({1: 1.0, 2: 1.0}), n, seed=1, dtype="float32")
        hess = ham.hessian(np.ones(n) / np.sqrt(n))
        del ham, hess
        gc.collect()
    print(json.dumps(proc.memory_info().rss - before))
    """
)


def test_hessians_over_large_sizes_do_not_pin_their_accumulators():
    # The core's cache of accumulator buffers kept up to 16 of any length, so each large n
    # left its n x n buffer (here 288 and 269 MB) resident for the life of the process. It now
    # keeps 256 MiB in all and no buffer longer than that; the bound leaves 64 MiB for the
    # allocator (common practice, as above).
    env = dict(os.environ, MALLOC_MMAP_THRESHOLD_="131072", MALLOC_TRIM_THRESHOLD_="262144")
    proc = subprocess.run(
        [sys.executable, "-c", CACHE_CHILD], capture_output=True, text=True, timeout=300, env=env
    )
    assert proc.returncode == 0, proc.stderr[-3000:]
    grown = json.loads(proc.stdout.strip().splitlines()[-1])
    assert grown <= 64 * 2**20, f"resident memory grew by {grown / 2**20:.0f} MiB"
