"""Cost of Hessian ascent against (K - 1) x one Hessian pass, measured in the same run.

    python bench/ascent.py                    # n = 800, p = 3, K = 200 (about 30 s on 2 cores)
    python bench/ascent.py --n 400 --steps 100 --json bench/results/ascent.json

Times one Hessian pass (after one untimed call, the median of 5 calls before the runs and of 5
after them; the pass time is the mean of those two medians, nothing else interleaved), runs
``hessian_ascent`` with and without polish, and prints the ratios
total / ((K - 1) x pass): a path of K points takes K - 1 Hessian steps. The machine is
shared: compare ratios, not absolute seconds.
"""

from __future__ import annotations

import argparse
import statistics
import time

import numpy as np

import orthoclimb as oc
from orthoclimb.fileio import write_json_atomic


def _pass_time(ham: oc.Hamiltonian, repeats: int = 5) -> float:
    x = np.random.default_rng(0).standard_normal(ham.n)
    x /= np.linalg.norm(x)
    ham.hessian(x)  # untimed: the first call after a pause runs slow (bench/README.md)
    times = []
    for _ in range(repeats):
        t = time.perf_counter()
        ham.hessian(x)
        times.append(time.perf_counter() - t)
    return statistics.median(times)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=800)
    ap.add_argument("--p", type=int, default=3)
    ap.add_argument("--steps", type=int, default=200, help="K, the points of the path (>= 2)")
    ap.add_argument("--json", default=None, help="also write the numbers to this JSON file")
    args = ap.parse_args()
    if args.steps < 2:
        ap.error(f"--steps must be at least 2 (K points, K - 1 steps), got {args.steps}")
    ham = oc.Hamiltonian.sample(oc.Mixture({args.p: 1.0}), args.n, seed=0)
    before = _pass_time(ham)
    # a random start: at p = 2 the default start along the top eigenvector of Hess H(0) would
    # add one eigen-solve to the K - 1 steps this measures
    bare = oc.hessian_ascent(ham, steps=args.steps, seed=1, polish=False, start="random")
    full = oc.hessian_ascent(ham, steps=args.steps, seed=1, polish=True, start="random")
    after = _pass_time(ham)
    one = 0.5 * (before + after)
    k = args.steps
    passes = k - 1  # Hessian steps between the K points of the path
    p = bare.path
    out = {
        "n": args.n,
        "p": args.p,
        "steps": k,
        "hessian_passes": passes,
        "threads": oc.get_num_threads(),
        "hessian_pass_s": one,
        "step_hessian_median_s": float(np.median(p["t_hessian"][:-1])),
        "step_eigen_median_s": float(np.median(p["t_eigen"][:-1])),
        "ascent_s": bare.seconds,
        "with_polish_s": full.seconds,
        "ratio_ascent": bare.seconds / (passes * one),
        "ratio_with_polish": full.seconds / (passes * one),
        "energy_ascent": bare.energy,
        "energy_polished": full.energy,
        "alg": bare.info["alg"],
        "polish_iterations": full.info["polish"]["iterations"],
    }
    for key, val in out.items():
        print(f"{key:24s} {val:.6g}" if isinstance(val, float) else f"{key:24s} {val}")
    if args.json:
        write_json_atomic(args.json, out)


if __name__ == "__main__":
    main()
