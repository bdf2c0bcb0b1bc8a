"""Kernel timings across sizes and the fitted exponent of time vs n.

For each n: sample the instance, then time (best of ``repeats``) one pass of ``energy``,
``energy_and_gradient``, ``hvp`` (one direction) and ``hessian`` at a fixed unit point. Each
pass reads all sum_p C(n+p-1, p) ~ n^P/P! coefficients once, so for large n the time grows like
n^b with b close to the largest degree P. The exponent b is the slope of the least-squares line
log t = log c + b log n (``numpy.polyfit``); with few or small sizes, fixed overheads pull b
below P. Times are wall seconds with the current kernel thread count.
"""

from __future__ import annotations

import math
import time
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np

from ..fileio import save_figure_atomic, write_json_atomic

__all__ = ["KERNELS", "plot_profile", "profile_kernels"]

KERNELS = ("energy", "energy_and_gradient", "hvp", "hessian")


def best_time(fn, repeats: int = 2) -> float:
    """Shortest wall time of `repeats` calls of fn(), in seconds."""
    out = math.inf
    for _ in range(repeats):
        t = time.perf_counter()
        fn()
        out = min(out, time.perf_counter() - t)
    return out


def profile_kernels(mixture: Any, sizes: Sequence[int], repeats: int = 3) -> dict[str, Any]:
    """Time the kernels of ``mixture`` at each n in ``sizes``; fit exponents (module doc)."""
    from ..model import Hamiltonian, estimate_memory
    from ..model.memory import require_memory
    from ..runtime import get_num_threads

    if len(sizes) < 2:
        raise ValueError("profile needs at least 2 sizes to fit an exponent")
    if repeats < 1:
        raise ValueError(f"--repeats must be >= 1, got {repeats}")
    rows = []
    for n in sizes:
        need = estimate_memory(mixture, n)
        require_memory(need, f"an instance with n = {n}")
        t = time.perf_counter()
        ham = Hamiltonian.sample(mixture, n, seed=0)
        row: dict[str, Any] = {"n": int(n), "bytes": int(need), "sample": time.perf_counter() - t}
        x = np.full(n, 1.0 / math.sqrt(n))
        v = np.random.default_rng(0).standard_normal(n)
        row["energy"] = best_time(lambda h=ham, x=x: h.energy(x), repeats)
        row["energy_and_gradient"] = best_time(lambda h=ham, x=x: h.energy_and_gradient(x), repeats)
        row["hvp"] = best_time(lambda h=ham, x=x, v=v: h.hvp(x, v), repeats)
        row["hessian"] = best_time(lambda h=ham, x=x: h.hessian(x), repeats)
        rows.append(row)
        del ham
    logn = np.log([r["n"] for r in rows])
    exponents = {}
    for k in (*KERNELS, "sample"):
        t = np.array([r[k] for r in rows])
        exponents[k] = float(np.polyfit(logn, np.log(np.maximum(t, 1e-9)), 1)[0])
    return {
        "mixture": mixture.to_text(),
        "max_degree": mixture.max_degree,
        "threads": get_num_threads(),
        "rows": rows,
        "exponents": exponents,
        "units": "wall seconds per pass; exponent b of t ~ n^b",
    }


def plot_profile(prof: dict[str, Any], path: str | Path) -> Path:
    """Log-log plot of time vs n per kernel, with the fitted power laws."""
    from matplotlib.figure import Figure

    fig = Figure(figsize=(6, 4.5), layout="constrained")
    ax = fig.subplots()
    n = np.array([r["n"] for r in prof["rows"]], float)
    for i, k in enumerate((*KERNELS, "sample")):
        t = np.array([r[k] for r in prof["rows"]])
        b = prof["exponents"][k]
        c = np.exp(np.mean(np.log(np.maximum(t, 1e-9)) - b * np.log(n)))
        ax.loglog(n, t, "o", color=f"C{i}", label=f"{k}: n^{b:.2f}")
        ax.loglog(n, c * n**b, "-", color=f"C{i}", lw=1)
    ax.set_xlabel("n")
    ax.set_ylabel("seconds per pass")
    ax.set_title(
        f"kernels of {prof['mixture']} (P = {prof['max_degree']}, {prof['threads']} threads)",
        fontsize=10,
    )
    ax.legend(fontsize=8)
    return save_figure_atomic(fig, path, dpi=110)


def write_profile(prof: dict[str, Any], folder: str | Path) -> dict[str, str]:
    folder = Path(folder)
    return {
        "json": str(write_json_atomic(folder / "profile.json", prof)),
        "plot": str(plot_profile(prof, folder / "profile.png")),
    }
