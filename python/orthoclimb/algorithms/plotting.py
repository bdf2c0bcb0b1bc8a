"""The figure of a run: energy along the path against the prediction, and the top tangent
eigenvalue against the predicted edge (matplotlib Figure API, no global state; Agg backend)."""

from __future__ import annotations

import os

import numpy as np

from ..fileio import save_figure_atomic
from .result import Result

__all__ = ["plot_result"]


def plot_result(result: Result, path: str | os.PathLike) -> None:
    """Write a PNG: for Hessian ascent, energy per spin vs q with E_path(q) and ALG, and the
    top tangent eigenvalue per spin vs q with 2 sqrt(xi''(q)); for the baselines, energy per
    spin and |P grad H|/n (or the temperature) against the iteration."""
    from matplotlib.figure import Figure

    fig = Figure(figsize=(11, 4.2), dpi=110, layout="constrained")
    ax1, ax2 = fig.subplots(1, 2)
    p = result.path
    alg = result.info.get("alg")
    cfg = result.config
    mix = cfg.get("mixture")
    if isinstance(mix, dict):  # {"3": 1.0} -> 3:1.0, the text form the CLI takes
        mix = ",".join(f"{p}:{g:g}" for p, g in mix.items())
    fig.suptitle(
        f"{result.method}: mixture {mix}, n = {cfg.get('n')}, "
        f"seed = {cfg.get('disorder_seed')}; final energy per spin {result.energy:.6g}",
        fontsize=11,
    )
    if result.method == "hessian":
        q = p["q"]
        ax1.plot(q, p["energy"], ".", ms=3, color="C0", label="measured H(x)/n")
        ax1.plot(q, p["predicted_energy"], color="C1", label="predicted E_path(q)")
        if "predicted_energy_steps" in p:  # results saved before the column existed lack it
            ax1.plot(
                q, p["predicted_energy_steps"], "--", color="C1", lw=1, label="with K coarse steps"
            )
        ax1.set_xlabel("q = |x|^2")
        ax2.plot(q, p["eigenvalue"], ".", ms=3, color="C0", label="top tangent eigenvalue / n")
        ax2.plot(q, p["predicted_edge"], color="C1", label="predicted 2 sqrt(xi''(q))")
        ax2.set_xlabel("q = |x|^2")
        ax2.set_ylabel("per spin")
        ax2.set_title("top eigenvalue of the tangent Hessian")
    else:
        it = p["step"] if "step" in p else p["iteration"]
        ax1.plot(it, p["energy"], color="C0", label="H(x)/n")
        ax1.set_xlabel("iteration")
        if "temperature" in p:
            ax2.plot(it, p["temperature"], color="C2", label="temperature T")
        ax2.semilogy(it, np.maximum(p["grad_norm"], 1e-300), color="C0", label="|P grad H|/n")
        ax2.set_xlabel("iteration")
        ax2.set_title("tangent gradient" + (" and temperature" if "temperature" in p else ""))
    if alg is not None:
        ax1.axhline(alg, color="C2", ls="--", lw=1, label=f"ALG = {alg:.6g}")
    polished = "polish" in result.info  # hessian and anneal runs that polished
    final = "final (polished)" if polished else "final"
    ax1.axhline(result.energy, color="C3", ls=":", lw=1, label=final)
    ax1.set_ylabel("energy per spin")
    ax1.set_title("energy along the run")
    ax1.legend(loc="lower right", fontsize=8)
    ax2.legend(loc="best", fontsize=8)
    save_figure_atomic(fig, path, format="png")
