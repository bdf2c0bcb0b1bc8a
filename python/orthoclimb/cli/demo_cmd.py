"""``orthoclimb demo``: a short guided tour on two invented landscapes.

The scenario: a lab compares a "gentle" landscape, xi(q) = q^2 + q^4/16 (gamma_2 = 1,
gamma_4 = 1/4, inside the full-RSB phase since 1/16 <= 1/12), with a "rugged" one, the pure
3-spin model. For each it prints what the theory predicts (full-RSB verdict, ALG, ground
state, their gap), states the memory an instance needs before sampling it, samples one,
checks the kernels against exact identities, and times one pass of each kernel.
A JSON summary is written atomically to ``--out`` (default ``./orthoclimb-demo``).
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path

import numpy as np

from .. import __version__, get_num_threads, kernel_path
from ..fileio import write_json_atomic
from ..model import Hamiltonian, Mixture, estimate_memory
from ..model.memory import format_bytes, require_memory
from ..theory import algorithmic_energy, full_rsb, ground_state

SCENARIO = {
    "gentle (2+4, full RSB)": Mixture({2: 1.0, 4: 0.25}),
    "rugged (pure 3-spin)": Mixture({3: 1.0}),
}


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--quick", action="store_true", help="smaller sizes (about 10 s)")
    parser.add_argument(
        "--out", default="orthoclimb-demo", help="folder for the summary (default: %(default)s)"
    )
    parser.add_argument("--seed", type=int, default=2026, help="disorder seed")


def _best_of(fn, repeats: int = 3) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return min(times)


def _tour_one(name: str, mix: Mixture, n: int, seed: int) -> dict:
    verdict = full_rsb(mix)
    alg = algorithmic_energy(mix)
    gs = ground_state(mix)
    print(
        f"\n== {name}: xi(q) = "
        + " + ".join(f"{c:g} q^{p}" for p, c in mix.xi_coefficients.items())
    )
    print(
        f"   full-RSB criterion: {'holds' if verdict.holds else 'fails'}"
        + ("" if verdict.holds else f" on {verdict.failing_intervals}")
    )
    print(f"   ALG = {alg:.6f}   ground state = {gs.value:.6f}   gap = {gs.value - alg:.2e}")
    need = estimate_memory(mix, n)
    print(f"   sampling n = {n}: {format_bytes(need)} of coefficients", flush=True)
    require_memory(need, f"the demo instance of {name}")
    start = time.perf_counter()
    ham = Hamiltonian.sample(mix, n, seed=seed)
    t_sample = time.perf_counter() - start
    rng = np.random.default_rng(seed)
    x = rng.standard_normal(n)
    x /= np.linalg.norm(x)
    e, g = ham.energy_and_gradient(x)
    euler = abs(x @ g - _euler_sum(ham, x))
    times = {
        "sample": t_sample,
        "energy": _best_of(lambda: ham.energy(x)),
        "gradient": _best_of(lambda: ham.gradient(x)),
        "hvp": _best_of(lambda: ham.hvp(x, g)),
        "hessian": _best_of(lambda: ham.hessian(x)),
    }
    spread = np.sqrt(mix.xi(1.0) / n)
    print(
        f"   energy per spin at a random point: {e / n:+.4f} (standard deviation "
        f"sqrt(xi(1)/n) = {spread:.3f}; the maximum is near {gs.value:.3f})"
    )
    print(f"   Euler identity x.grad H = sum_p p H_p holds to {euler:.1e}")
    print("   one pass: " + ", ".join(f"{k} {v * 1e3:.1f} ms" for k, v in times.items()))
    return {
        "mixture": mix.to_dict(),
        "n": n,
        "seed": seed,
        "full_rsb": verdict.holds,
        "failing_intervals": verdict.failing_intervals,
        "alg": alg,
        "ground_state": gs.value,
        "gap": gs.value - alg,
        "energy_per_spin_random_point": e / n,
        "euler_residual": euler,
        "seconds": times,
        "nbytes": ham.nbytes,
    }


def _euler_sum(ham: Hamiltonian, x: np.ndarray) -> float:
    """sum_p p H_p(x), from one single-degree instance view per degree (exact identity)."""
    total = 0.0
    for p in ham.degrees:
        part = Hamiltonian.from_coefficients(ham.n, {p: ham.coefficients(p)})
        total += p * part.energy(x)
    return total


def run(args: argparse.Namespace) -> int:
    n_by_degree = {4: 40, 3: 120} if args.quick else {4: 70, 3: 300}
    print(f"orthoclimb {__version__}: {get_num_threads()} threads, kernels {kernel_path()}")
    summary = {"version": __version__, "threads": get_num_threads(), "cases": []}
    for name, mix in SCENARIO.items():
        n = n_by_degree[mix.max_degree]
        summary["cases"].append(_tour_one(name, mix, n, args.seed))
    out = write_json_atomic(Path(args.out) / "summary.json", summary)
    print(f"\nsummary written to {out}")
    return 0
