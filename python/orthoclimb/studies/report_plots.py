"""The report's figures: energy_vs_n.png and distribution.png, written with the report.

energy_vs_n: per mixture, the mean energy per spin +- its standard error against n^(-k), each
series' fitted line, e_inf with its interval at n^(-k) = 0 (the x label says which bar is
which), and the ALG and GS lines (one "ALG = GS" line where they agree).
distribution: per mixture, the energies per spin over seeds at each n (bar: their mean).
overlaps (only for a study swept with --keep-points): per mixture, the overlap R = <x_a, x_b> of
two methods' end points on each instance against n, per pair of methods, beside +-1 (the same
point, its mirror) and +- the mean |R| of unrelated directions (about sqrt(2/(pi n))); with a
field, the field's share <x_a, e><x_b, e> (:mod:`.points`).
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import IO, TYPE_CHECKING

import numpy as np

from ..fileio import figure_writer

if TYPE_CHECKING:
    from .report import Report

__all__ = ["PLOT_FILES", "plot_files"]

# The report's figures, by file name (the last only with kept end points).
PLOT_FILES = ("energy_vs_n.png", "distribution.png", "overlaps.png")


def plot_files(
    rep: Report, data: dict, folder: Path
) -> list[tuple[str, Path, Callable[[IO[bytes]], None]]]:
    """Draw the figures; returns (name, path in ``folder``, writer) for each, which the
    report writes together with its text files, all or none."""
    from matplotlib.figure import Figure

    from .report_text import level_text

    mixtures = list(rep.theory)
    methods = rep.labels or [m.name for m in rep.spec.methods]  # with "... before polish"
    colors = {m: f"C{i}" for i, m in enumerate(methods)}
    k = next((f["exponent"] for f in rep.fits if f.get("exponent")), rep.spec.exponent)
    fig = Figure(figsize=(5.2 * len(mixtures), 4.2), layout="constrained")
    axes = fig.subplots(1, len(mixtures), squeeze=False)[0]
    for ax, mix in zip(axes, mixtures, strict=True):
        th = rep.theory[mix]
        xmax = 0.0
        for meth in methods:
            gs_ = [g for g in rep.groups if g["mixture"] == mix and g["method"] == meth]
            if not gs_:
                continue
            x = np.array([g["n"] for g in gs_], float) ** (-k)
            xmax = max(xmax, float(x.max()))
            ax.errorbar(
                x,
                [g["mean"] for g in gs_],
                yerr=[g["se"] for g in gs_],
                fmt="o",
                color=colors[meth],
                label=meth,
                capsize=3,
            )
            fit = next(
                (
                    f
                    for f in rep.fits
                    if f["mixture"] == mix and f["method"] == meth and f.get("value") is not None
                ),
                None,
            )
            if fit:
                xs = np.linspace(0, x.max(), 50)
                ax.plot(xs, fit["value"] + fit["slope"] * xs, "-", color=colors[meth], lw=1)
                ax.errorbar(
                    [0],
                    [fit["value"]],
                    yerr=[[fit["value"] - fit["low"]], [fit["high"] - fit["value"]]],
                    fmt="s",
                    color=colors[meth],
                    capsize=4,
                    mfc="white",
                )
        equal = abs(th["gap_gs_alg"]) <= 1e-4  # one line for GS = ALG (full RSB)
        alg_label = f"{'ALG = GS' if equal else 'ALG'} {th['alg']:.4f}"
        ax.axhline(th["alg"], color="k", ls="--", lw=1, label=alg_label)
        if not equal:
            ax.axhline(th["gs"], color="0.4", ls=":", lw=1.5, label=f"GS {th['gs']:.4f}")
        ax.set_xlim(-0.03 * max(xmax, 1e-3), 1.05 * max(xmax, 1e-3))
        ax.set_xlabel(
            f"n^(-{k:.3g})   (bars: mean +- 1 s.e.; at 0: e_inf and its"
            f" {level_text(rep.spec_level())}% interval)",
            fontsize=9,
        )
        ax.set_ylabel("energy per spin H(x)/n")
        ax.set_title(f"{mix}  (gammas {th['gammas']})", fontsize=10)
        ax.legend(fontsize=8)
    out = [("energy_vs_n", folder / PLOT_FILES[0], figure_writer(fig, dpi=110))]

    fig = Figure(figsize=(5.2 * len(mixtures), 4.2), layout="constrained")
    axes = fig.subplots(1, len(mixtures), squeeze=False)[0]
    rng = np.random.default_rng(0)
    for ax, mix in zip(axes, mixtures, strict=True):
        sizes = sorted({n for (m, _, n) in data if m == mix})
        width = 0.8 / max(1, len(methods))
        for j, meth in enumerate(methods):
            labelled = False  # at the series' first plotted size (it may miss the smallest)
            for i, n in enumerate(sizes):
                v = data.get((mix, meth, n))
                if v is None:
                    continue
                pos = i + (j - (len(methods) - 1) / 2) * width
                ax.scatter(
                    pos + rng.uniform(-0.3, 0.3, v.size) * width,
                    v,
                    s=10,
                    color=colors[meth],
                    alpha=0.6,
                    label=None if labelled else meth,
                )
                labelled = True
                ax.hlines(v.mean(), pos - 0.4 * width, pos + 0.4 * width, color="k", lw=1.5)
        th = rep.theory[mix]
        equal = abs(th["gap_gs_alg"]) <= 1e-4
        ax.axhline(th["alg"], color="k", ls="--", lw=1, label="ALG = GS" if equal else "ALG")
        if not equal:
            ax.axhline(th["gs"], color="0.4", ls=":", lw=1.5, label="GS")
        ax.set_xticks(range(len(sizes)), [str(n) for n in sizes])
        ax.set_xlabel("n")
        ax.set_ylabel("energy per spin over seeds (bar: mean)")
        ax.set_title(mix, fontsize=10)
        ax.legend(fontsize=8)
    out.append(("distribution", folder / PLOT_FILES[1], figure_writer(fig, dpi=110)))
    if rep.overlaps_by_run:
        out.append(("overlaps", folder / PLOT_FILES[2], _overlap_writer(rep)))
    return out


def _overlap_writer(rep: Report) -> Callable[[IO[bytes]], None]:
    """The overlaps figure (module doc): a panel per mixture that has kept end points."""
    from matplotlib.figure import Figure

    from .points import unrelated_overlap

    mixtures = [m for m in rep.theory if any(o["mixture"] == m for o in rep.overlaps_by_run)]
    pairs = list(dict.fromkeys((o["method_a"], o["method_b"]) for o in rep.overlaps_by_run))
    fig = Figure(figsize=(5.2 * len(mixtures), 4.2), layout="constrained")
    axes = fig.subplots(1, len(mixtures), squeeze=False)[0]
    rng = np.random.default_rng(0)
    for ax, mix in zip(axes, mixtures, strict=True):
        runs = [o for o in rep.overlaps_by_run if o["mixture"] == mix]
        sizes = sorted({o["n"] for o in runs})
        width = 0.8 / len(pairs)
        for j, (a, b) in enumerate(pairs):
            mine = [o for o in runs if (o["method_a"], o["method_b"]) == (a, b)]
            if not mine:
                continue
            pos = np.array([sizes.index(o["n"]) for o in mine], float)
            pos += (j - (len(pairs) - 1) / 2) * width + rng.uniform(-0.3, 0.3, pos.size) * width
            r = [o["overlap"] for o in mine]
            ax.scatter(pos, r, s=12, color=f"C{j}", alpha=0.7, label=f"{a} vs {b}")
            shares = [
                (sizes.index(s["n"]), s["field_share"])
                for s in rep.overlaps
                if (s["mixture"], s["method_a"], s["method_b"]) == (mix, a, b)
                and s.get("field_share") is not None
            ]
            if shares:  # with a field: what the field's direction alone gives
                at, share = np.array(shares).T
                ax.hlines(share, at - 0.45, at + 0.45, colors=f"C{j}", linestyles="-.", lw=1)
                ax.plot([], [], "-.", color=f"C{j}", lw=1, label="<x_a, e><x_b, e>, e: field")
        ref = np.array([unrelated_overlap(n) for n in sizes])
        ticks = np.arange(len(sizes))
        for sign in (1.0, -1.0):  # a short bar at each size, the sizes being categories
            ax.hlines(sign * ref, ticks - 0.45, ticks + 0.45, colors="k", linestyles=":", lw=1)
        ax.plot([], [], "k:", lw=1, label="+- mean |R|, unrelated directions")
        for level in (-1.0, 1.0):
            ax.axhline(level, color="0.6", lw=0.8)
        ax.set_xticks(ticks, [str(n) for n in sizes])
        ax.set_ylim(-1.08, 1.08)
        ax.set_xlabel("n   (R = 1: the same point; R = -1: its mirror -x)")
        ax.set_ylabel("end-point overlap R = <x_a, x_b>")
        ax.set_title(mix, fontsize=10)
        ax.legend(fontsize=8)
    return figure_writer(fig, dpi=110)
