"""``orthoclimb theory``: what the theory predicts for one mixture.

Prints xi, the full-RSB verdict (with the intervals where xi''^(-1/2) is not concave), ALG (and
q_hat with a field), the Parisi ground state GS, the gap GS - ALG, and for pure models with p >= 3
the threshold energy E_thr and the zero of the complexity. ``--json`` prints the same as JSON;
``--plot FILE.png`` draws xi''^(-1/2), the predicted path curve and the Parisi alpha.
All energies are per spin, maximization convention.
"""

from __future__ import annotations

import argparse
import math
import os
from pathlib import Path
from typing import Any

import numpy as np

from ..fileio import json_text, save_figure_atomic
from ..model.mixture import Mixture
from ..theory import (
    algorithmic_energy,
    algorithmic_threshold,
    complexity_ground_state,
    full_rsb,
    ground_state,
    path_energy,
    threshold_energy,
)
from . import add_mixture_flags, mixture_from, positive_number, user_path

__all__ = ["add_arguments", "run"]


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_mixture_flags(parser)
    parser.add_argument(
        "--tol",
        type=positive_number,
        default=1e-6,
        help="tolerance of the ground-state solver (default 1e-6)",
    )
    parser.add_argument("--json", action="store_true", help="print JSON instead of a table")
    parser.add_argument(
        "--plot",
        type=user_path,
        metavar="FILE.png",
        help="also draw xi''^(-1/2), the path curve and the Parisi alpha into this PNG file",
    )


def _pure(mixture: Mixture, gs_value: float) -> dict[str, Any] | None:
    """Complexity cross-check for a pure model with p >= 3 (energies scale with gamma_p)."""
    if len(mixture.degrees) != 1 or mixture.degrees[0] < 3:
        return None
    p = mixture.degrees[0]
    gamma = mixture.gammas[p]
    zero = gamma * complexity_ground_state(p)
    return {
        "p": p,
        "gamma": gamma,
        "threshold_energy": gamma * threshold_energy(p),
        "complexity_ground_state": zero,
        "parisi_minus_complexity": gs_value - zero,
    }


def _report(mixture: Mixture, tol: float) -> dict[str, Any]:
    verdict = full_rsb(mixture)
    gs = ground_state(mixture, tol=tol)
    return {
        "mixture": {"gammas": mixture.to_dict(), "xi": mixture.xi_text()},
        "full_rsb": {
            "holds": verdict.holds,
            "failing_intervals": [list(iv) for iv in verdict.failing_intervals],
            "q_hat": verdict.q_hat,
            "gs_equals_alg": verdict.gs_equals_alg,
            "linear": verdict.linear,
            "verdict": verdict.describe(),
        },
        "alg": algorithmic_energy(mixture),
        "q_hat": algorithmic_threshold(mixture),
        "ground_state": gs.to_dict(),
        "gap": gs.gap,
        "pure": _pure(mixture, gs.value),
        "units": "energy per spin H(x)/n on the unit sphere, maximization",
    }


def _energy(value: float, resolution: float | None = None) -> str:
    """An energy per spin: decimals down to ``resolution`` (ten for the exact values, None,
    fewer for the Parisi solver's GS, whose error is up to its tolerance: an independent check
    found GS of 1:0.3,3:1 5e-7 high at tol 1e-6, printed to ten decimals), at the usual scales
    (xi(1) of order one); in exponent form for a mixture scaled far from them, eleven
    significant digits for exact values and those down to ``resolution`` (at least two) for
    GS (gammas of 1e-8 at tol 1e-6 printed 11 digits of which none held, a trial)."""
    if value == 0.0 or 1e-3 <= abs(value) < 1e6:
        if resolution is None:
            return f"{value:.10f}"
        decimals = min(10, max(4, math.ceil(-math.log10(resolution))))
        return f"{value:.{decimals}f}"
    digits = 11
    if resolution is not None:
        digits = min(11, max(2, math.floor(math.log10(abs(value) / resolution)) + 1))
    return f"{value:.{digits - 1}e}"


def _alpha_text(alpha: list[float]) -> str:
    """The Parisi alpha in words: its nonzero levels ("alpha = 0" is replica symmetric)."""
    levels = sum(1 for a in alpha if a > 0.0)
    if levels == 0:
        return "alpha = 0, replica symmetric"
    return f"alpha with {levels} nonzero level{'s' if levels > 1 else ''}"


def _difference(value: float, scale: float) -> str:
    """A difference of two energies per spin; one of rounding size (|d| <= 1e-14 scale) is 0."""
    if abs(value) <= 1e-14 * scale:
        return "0 (to rounding)"
    return f"{value:.3e}"


def _table(report: dict[str, Any]) -> str:
    gs = report["ground_state"]
    rows = [
        ("mixture", "xi(q) = " + report["mixture"]["xi"]),
        ("full RSB", report["full_rsb"]["verdict"]),
    ]
    if report["q_hat"] > 0.0:
        rows.append(("q_hat", f"{report['q_hat']:.10g}"))
    rows.append(("ALG", _energy(report["alg"])))
    status = "converged" if gs["converged"] else "NOT converged"
    if gs.get("looser_tol") is not None:  # the solve at ten times tol ended lower
        status += f", from the lower solve at tol {gs['looser_tol']:.0e}"
    resolution = max(gs["tol"], gs["change"], gs["jump_gain"])
    rows.append(
        (
            "GS (Parisi)",
            f"{_energy(gs['value'], resolution)}   ({_alpha_text(gs['alpha'])}; grid"
            f" {gs['grid_size']}, {status}, last change {gs['change']:.1e}, tol {gs['tol']:.0e};"
            " digits to the tolerance)",
        )
    )
    scale = max(abs(report["alg"]), 1e-300)
    gap = _difference(report["gap"], scale)
    if not report["full_rsb"]["gs_equals_alg"] and abs(report["gap"]) <= 10 * resolution:
        # a gap is predicted, and the solver's resolution is a sizeable part of it
        gap += f"   (GS to about {resolution:.0e}, the solver's tolerance; --tol for more digits)"
    elif report["full_rsb"]["gs_equals_alg"] and "to rounding" not in gap:
        # a trial read 3.4e-10 as a gap: the two are equal here (full RSB, or a field that
        # leaves the model replica symmetric)
        gap += "   (0 in theory, GS = ALG here: the solver's error)"
    rows.append(("GS - ALG", gap))
    # GS is stationary in its minimizer B, so B's error is about the square root of GS's
    # (xi = q^2 + q^4/16: 0.6030329 against xi''(1)^(-1/2) = 0.6030227 at tol 1e-6, a user
    # trial): four digits, with the reason
    rows.append(("Parisi B", f"{gs['B']:.4g}   (the minimizer: fewer correct digits than GS)"))
    pure = report["pure"]
    if pure is not None:
        # E_thr, not E_inf: the reports' e_inf is the extrapolated n -> infinity limit (a user
        # trial read one for the other)
        rows.append(("threshold E_thr", _energy(pure["threshold_energy"])))
        rows.append(("1RSB GS", _energy(pure["complexity_ground_state"]) + "   (complexity zero)"))
        rows.append(("GS - 1RSB GS", _difference(pure["parisi_minus_complexity"], scale)))
    width = max(len(k) for k, _ in rows)
    lines = [f"{k.ljust(width)}  {v}" for k, v in rows]
    lines.append("(energies per spin, maximization convention)")
    return "\n".join(lines)


def _check_plot_path(path: str) -> None:
    """Refuse, before any work starts, a plot whose folder does not exist or whose suffix names
    a format matplotlib cannot write (no suffix: PNG)."""
    from matplotlib.figure import Figure

    folder = os.path.dirname(os.path.abspath(path))
    if os.path.isdir(path):
        raise ValueError(f"cannot write the plot {path!r}: it is a folder; give a file name")
    if not os.path.isdir(folder):
        chain = (Path(folder), *Path(folder).parents)
        blocker = next((f for f in chain if os.path.lexists(f)), None)
        if blocker is not None and not blocker.is_dir():
            raise ValueError(
                f"cannot write the plot {path!r}: {str(blocker)!r} is a file, not a folder"
            )
        raise ValueError(f"cannot write the plot {path!r}: folder {folder!r} does not exist")
    suffix = os.path.splitext(path)[1].lstrip(".").lower()
    formats = Figure().canvas.get_supported_filetypes()
    if suffix and suffix not in formats:
        raise ValueError(
            f"cannot write the plot {path!r}: matplotlib has no format {suffix!r}; use one of"
            f" {', '.join(sorted(formats))}"
        )


def _plot(mixture: Mixture, report: dict[str, Any], path: str) -> None:
    from matplotlib.figure import Figure

    gs = report["ground_state"]
    verdict = report["full_rsb"]
    q_hat = report["q_hat"]
    fig = Figure(figsize=(15, 4.6), dpi=110, layout="constrained")
    ax1, ax2, ax3 = fig.subplots(1, 3)
    fig.suptitle(f"xi(q) = {report['mixture']['xi']}", fontsize=12)

    # Panel 1: xi''^(-1/2) with the non-concave region shaded.
    q = np.linspace(0.0, 1.0, 801)[1:]
    second = np.asarray(mixture.xi(q, 2), dtype=np.float64)
    if verdict["linear"]:
        ax1.text(0.5, 0.5, "xi'' = 0 (linear polynomial)", ha="center", transform=ax1.transAxes)
    else:
        f = second**-0.5
        ax1.plot(q, f, color="C0", label="xi''(q)^(-1/2)")
        # f decreases; when xi''(0) = 0 it blows up at 0, so cut the axis at q = 0.1.
        top = float(f[0]) if mixture.xi(0.0, 2) > 0 else float(f[q >= 0.1][0])
        ax1.set_ylim(0.0, 1.15 * top)
    for k, (lo, hi) in enumerate(verdict["failing_intervals"]):
        ax1.axvspan(lo, hi, color="C3", alpha=0.18, label="not concave" if k == 0 else None)
    if 0.0 < q_hat < 1.0:
        ax1.axvline(q_hat, color="0.4", ls="--", lw=1, label=f"q_hat = {q_hat:.3g}")
    ax1.set_xlim(0.0, 1.0)
    ax1.set_xlabel("q")
    state = "holds" if verdict["holds"] else "fails"
    if verdict["linear"]:  # as the text output says: there is nothing to be concave
        state = "no full-RSB region (linear xi)"
    ax1.set_title("full-RSB criterion: " + state)
    if ax1.get_legend_handles_labels()[0]:
        ax1.legend(loc="best", fontsize=9)

    # Panel 2: predicted path curve with ALG and GS.
    qq = np.linspace(0.0, 1.0, 201)
    ax2.plot(qq, path_energy(mixture, qq), color="C0", label="path energy E_path(q)")
    ax2.axhline(report["alg"], color="C2", ls="--", lw=1.2, label=f"ALG = {report['alg']:.7g}")
    ax2.axhline(gs["value"], color="C3", ls=":", lw=1.5, label=f"GS = {gs['value']:.7g}")
    ax2.set_xlim(0.0, 1.0)
    ax2.set_xlabel("q = |x|^2")
    ax2.set_ylabel("energy per spin")
    ax2.set_title("predicted ascent")
    ax2.legend(loc="lower right", fontsize=9)

    # Panel 3: the Parisi alpha (steps) and the full-RSB formula -d/dq xi''^(-1/2) for reference.
    breaks = np.asarray(gs["breakpoints"])
    alpha = np.asarray(gs["alpha"])
    ax3.stairs(alpha, breaks, color="C0", lw=2, label=f"Parisi alpha ({_alpha_text(gs['alpha'])})")
    peak = float(alpha.max()) if alpha.size else 0.0
    if not verdict["linear"]:
        # (third / second) / sqrt(second): no power of xi'' to over- or underflow at scaled gammas
        third = np.asarray(mixture.xi(q, 3), dtype=np.float64)
        ref = 0.5 * (third / second) / np.sqrt(second)
        shown = q >= q_hat
        ax3.plot(q[shown], ref[shown], color="C1", ls="--", lw=1, label="-d/dq xi''(q)^(-1/2)")
    ax3.set_ylim(0.0, 1.3 * peak if peak > 0 else 1.0)
    ax3.set_xlim(0.0, 1.0)
    ax3.set_xlabel("q")
    ax3.set_title(f"zero-temperature Parisi alpha, B = {gs['B']:.4g}")
    ax3.legend(loc="best", fontsize=9)

    save_figure_atomic(fig, path)  # the format follows the suffix (PNG without one)


def run(args: argparse.Namespace) -> int:
    mixture = mixture_from(args)
    if not (math.isfinite(args.tol) and args.tol > 0):
        raise ValueError(f"--tol must be a positive number, got {args.tol!r}")
    if args.plot is not None and not args.plot.strip():  # "" was ignored without a word
        raise ValueError(f"--plot must name a file, got {args.plot!r}")
    if args.plot:
        _check_plot_path(args.plot)
    report = _report(mixture, args.tol)
    if args.plot:
        _plot(mixture, report, args.plot)
        report["plot"] = args.plot
    if args.json:
        print(json_text(report))
    else:
        print(_table(report))
        if args.plot:
            print(f"plot written to {args.plot}")
    return 0
