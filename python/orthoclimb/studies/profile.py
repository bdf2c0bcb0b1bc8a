"""Kernel timings across sizes and the fitted exponent of time vs n.

For each n: sample the instance, then time (best of ``repeats``) one pass of ``energy``,
``energy_and_gradient``, ``hvp`` (one direction) and ``hessian`` at a fixed unit point. Each
pass reads all sum_p C(n+p-1, p) ~ n^P/P! coefficients once, so for large n the time grows like
n^b with b close to the largest degree P. The exponent b is the slope of the least-squares line
log t = log c + b log n (``numpy.polyfit``); with few or small sizes, fixed overheads pull b
below P. Two more figures show how far the sizes are from that regime: the slope between the
two largest sizes alone, log(t2/t1) / log(n2/n1), and the time per coefficient, t / N(n) in
nanoseconds, which levels off once a pass is bound by reading the coefficients (it rises
again where they outgrow the last-level cache). Times are wall seconds with the current
kernel thread count. Each b is read against the slope of the coefficient count N(n) over the
same sizes (``coefficient_exponent``; N grows like n^P only once n is well above P) and, for
the Hessian, against 2 (its n x n result); ``fit_spread`` is the largest factor between a time
and its fitted line, and ``notes`` says in words what these show (:func:`profile_notes`).
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from ..fileio import figure_writer, json_writer, save_figure_atomic, write_all_atomic

__all__ = [
    "KERNELS",
    "check_profile",
    "fit_exponents",
    "plot_profile",
    "profile_kernels",
    "profile_notes",
    "summarize",
]

KERNELS = ("energy", "energy_and_gradient", "hvp", "hessian")


# how a refused profile can go on (it has no switch past its memory check)
_NO_ROOM = "smaller sizes fit"


def best_time(fn, repeats: int = 2, warm_up: bool = True) -> float:
    """Shortest wall time of `repeats` calls of fn(), in seconds, after one untimed call with
    ``warm_up``: the first call after sampling pays for bringing the coefficients back (the
    profile's energy at n = 200 measured 0.27-0.67 ms, often slower than energy_and_gradient;
    a review)."""
    if warm_up:
        fn()
    out = math.inf
    for _ in range(repeats):
        t = time.perf_counter()
        fn()
        out = min(out, time.perf_counter() - t)
    return out


# The most timed calls per kernel and size: the best of 1000 is as good a time as any more
MAX_REPEATS = 1000


def check_profile(mixture: Any, sizes: Sequence[int], repeats: int) -> tuple[int, int]:
    """Refuse a profile that cannot run (fewer than 2 sizes or a size twice, ``repeats`` outside
    1..MAX_REPEATS, a largest instance that does not fit in memory with its Hessian's
    workspace) before anything is sampled; return the bytes of the largest instance and of
    that workspace.
    The Hessian's n x n accumulators were not counted, and for degree <= 2 they outweigh the
    coefficients: 1:1 at n = 100000 holds 0.8 MB but its Hessian needs 149 GiB, refused
    only after the other sizes had run (a review)."""
    from ..model import estimate_memory
    from ..model.memory import hessian_workspace_estimate, require_memory

    if len(sizes) < 2:
        raise ValueError("profile needs at least 2 sizes to fit an exponent")
    if len(set(sizes)) < len(sizes):
        raise ValueError(f"profile sizes must be distinct, got {list(sizes)}")
    if not 1 <= repeats <= MAX_REPEATS:  # 10^8 ran on without an end in sight (a user trial)
        raise ValueError(f"--repeats must be in 1..{MAX_REPEATS}, got {repeats}")
    biggest = max(sizes)
    need = estimate_memory(mixture, biggest)
    workspace = hessian_workspace_estimate(mixture, biggest)
    require_memory(need + workspace, f"an instance with n = {biggest} and its Hessian", _NO_ROOM)
    return need, workspace


def profile_kernels(
    mixture: Any,
    sizes: Sequence[int],
    repeats: int = 3,
    on_size: Callable[[dict[str, Any], int | None, float | None], Any] | None = None,
) -> dict[str, Any]:
    """Time the kernels of ``mixture`` at each n in ``sizes``; fit exponents (module doc).

    ``on_size(row, next_n, next_seconds)`` is called after each size with its row, the next
    size (None after the last) and a guess of the next size's seconds: this size's wall time
    scaled by the ratio of coefficient counts (the passes stream every coefficient)."""
    from ..model import Hamiltonian, estimate_memory
    from ..model.memory import coefficient_count, require_memory
    from ..runtime import get_num_threads

    check_profile(mixture, sizes, repeats)  # the largest n before any size is timed
    order = sorted(sizes)  # rows in increasing n, whatever the order given
    rows = []
    for i, n in enumerate(order):
        need = estimate_memory(mixture, n)
        require_memory(need, f"an instance with n = {n}", _NO_ROOM)
        t = time.perf_counter()
        ham = Hamiltonian.sample(mixture, n, seed=0)
        row: dict[str, Any] = {
            "n": int(n),
            "coefficients": int(ham.num_coefficients),
            "bytes": int(need),
            "sample": time.perf_counter() - t,
        }
        x = np.full(n, 1.0 / math.sqrt(n))
        v = np.random.default_rng(0).standard_normal(n)
        row["energy"] = best_time(lambda h=ham, x=x: h.energy(x), repeats)
        row["energy_and_gradient"] = best_time(lambda h=ham, x=x: h.energy_and_gradient(x), repeats)
        row["hvp"] = best_time(lambda h=ham, x=x, v=v: h.hvp(x, v), repeats)
        row["hessian"] = best_time(lambda h=ham, x=x: h.hessian(x), repeats)
        row["ns_per_coefficient"] = {
            k: 1e9 * row[k] / row["coefficients"] for k in (*KERNELS, "sample")
        }
        rows.append(row)
        del ham
        row["wall"] = time.perf_counter() - t  # sampling and every timed repeat
        if on_size is not None:
            nxt = order[i + 1] if i + 1 < len(order) else None
            guess = None
            if nxt is not None:
                guess = row["wall"] * coefficient_count(mixture.degrees, nxt) / row["coefficients"]
            on_size(row, nxt, guess)
    return summarize(rows, mixture, get_num_threads())


def summarize(rows: list[dict[str, Any]], mixture: Any, threads: int) -> dict[str, Any]:
    """The profile of ``rows`` (increasing n): exponents, the coefficient count's own
    exponents over the same sizes, how far the times lie off each fitted line, and the notes
    that read them (:func:`profile_notes`)."""
    exponents, last_pair = fit_exponents(rows)
    counts, counts_pair = _slopes(rows, lambda r: r["coefficients"])
    prof = {
        "mixture": mixture.to_text(),
        "max_degree": mixture.max_degree,
        "threads": threads,
        "rows": rows,
        "exponents": exponents,
        "exponents_largest_pair": last_pair,
        "coefficient_exponent": counts,
        "coefficient_exponent_largest_pair": counts_pair,
        "fit_spread": {k: _spread(rows, k, exponents[k]) for k in (*KERNELS, "sample")},
        "units": "wall seconds per pass; exponent b of t ~ n^b; ns per coefficient; fit_spread"
        " is the largest factor between a time and its fitted line",
    }
    prof["notes"] = profile_notes(prof)
    return prof


def _slopes(rows: Sequence[dict[str, Any]], value: Callable[[dict[str, Any]], float]):
    """(least-squares slope of log value against log n, slope between the two largest n)."""
    rows = sorted(rows, key=lambda r: r["n"])
    logn = np.log([r["n"] for r in rows])
    logv = np.log(np.maximum([value(r) for r in rows], 1e-9))
    fit = float(np.polyfit(logn, logv, 1)[0])
    return fit, float((logv[-1] - logv[-2]) / (logn[-1] - logn[-2]))


def _spread(rows: Sequence[dict[str, Any]], key: str, b: float) -> float:
    """The largest factor between a time and the fitted line c n^b (c by least squares in
    log space, as the fit's own intercept)."""
    logn = np.log([r["n"] for r in rows])
    logt = np.log(np.maximum([r[key] for r in rows], 1e-9))
    residual = logt - b * logn
    return float(np.exp(np.max(np.abs(residual - residual.mean()))))


def fit_exponents(rows: Sequence[dict[str, Any]]) -> tuple[dict[str, float], dict[str, float]]:
    """(b over all sizes by least squares, b between the two largest sizes) per kernel and
    for sampling, from rows holding ``n`` and a time per key (module doc)."""
    fit, pair = {}, {}
    for k in (*KERNELS, "sample"):
        fit[k], pair[k] = _slopes(rows, lambda r, k=k: r[k])
    return fit, pair


_TOUCHED = "what a pass touches (the coefficients; for the Hessian also its n x n matrix)"
LOOSE_FIT = 1.5  # a time this many times off its fitted line: one power law does not hold


def _reference(kernel: str, count_exponent: float) -> float:
    """The slope a kernel's time tends to: the coefficient count's, and at least 2 for the
    Hessian, which writes an n x n matrix whatever the degree."""
    return max(count_exponent, 2.0) if kernel == "hessian" else count_exponent


def _rise_note(where: str, kernels: list[str], before: dict, after: dict) -> str:
    """'b above that growth <where> (kernels): the time per coefficient rose (...), as when
    ... outgrows a cache'."""
    rises = ", ".join(f"{k} {before[k]:.3g} -> {after[k]:.3g} ns" for k in kernels)
    return (
        f"b above that growth {where} ({', '.join(kernels)}): the time per coefficient rose"
        f" ({rises}), as when {_TOUCHED} outgrows a cache"
    )


def profile_notes(prof: dict[str, Any]) -> list[str]:
    """What the exponents say, in sentences: each b is read against the growth of the
    coefficient count over the same sizes (n^P only once n is well above P: C(n+7, 8) grows
    like n^6.9 between n = 16 and 28), and against 2 for the Hessian."""
    p, rows = prof["max_degree"], prof["rows"]
    q, q_pair = prof["coefficient_exponent"], prof["coefficient_exponent_largest_pair"]
    b, b_pair = prof["exponents"], prof["exponents_largest_pair"]
    big = rows[-2]["n"], rows[-1]["n"]
    notes = [f"largest degree P = {p}; over these sizes the coefficient count grows like n^{q:.2f}"]
    if p < 2:
        notes[0] += "; the Hessian writes an n x n matrix, so its time grows like n^2 at least"
    below = [k for k in KERNELS if b[k] < _reference(k, q) - 0.5]
    if below:
        notes.append(
            f"b below that growth ({', '.join(below)}): fixed per-call costs (thread start-up,"
            " the result's memory) and caches still weigh at these sizes; larger sizes give the"
            " asymptotic slope"
        )
    above = [k for k in KERNELS if b_pair[k] > _reference(k, q_pair) + 0.5]
    lo, hi = rows[-2]["ns_per_coefficient"], rows[-1]["ns_per_coefficient"]
    if above:
        notes.append(
            _rise_note(f"between n = {big[0]} and {big[1]}", above, lo, hi)
            + " and the pass becomes bound by memory bandwidth; once both sizes are past it"
            " the slope returns to the count's growth"
        )
    rising = [k for k in KERNELS if b[k] > _reference(k, q) + 0.5 and k not in above]
    if rising:
        first = rows[0]["ns_per_coefficient"]
        notes.append(_rise_note("over all sizes", rising, first, hi))
    loose = {k: prof["fit_spread"][k] for k in KERNELS if prof["fit_spread"][k] > LOOSE_FIT}
    if loose:
        notes.append(
            "one power law fits these times loosely ("
            + ", ".join(f"{k} up to {f:.2f}x off its line" for k, f in loose.items())
            + "): the slope between the largest sizes and the time per coefficient tell more"
        )
    return notes


def plot_profile(prof: dict[str, Any], path: str | Path) -> Path:
    """Log-log plot of time vs n per kernel, with the fitted power laws, saved atomically."""
    return save_figure_atomic(_profile_figure(prof), path, dpi=110)


def _profile_figure(prof: dict[str, Any]) -> Any:
    """The figure of :func:`plot_profile`."""
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
    return fig


# The files a profile writes into its folder.
PROFILE_FILES = ("profile.json", "profile.png")


def write_profile(prof: dict[str, Any], folder: str | Path) -> dict[str, str]:
    """profile.json and profile.png in ``folder``, written together: both or neither (the
    JSON was written and the figure then refused by a folder at its path, after the whole
    run's timings: a review)."""
    folder = Path(folder)
    fig = _profile_figure(prof)
    json_path, png_path = (folder / name for name in PROFILE_FILES)
    write_all_atomic(
        [
            (json_path, json_writer(prof)),
            (png_path, figure_writer(fig, dpi=110)),
        ]
    )
    return {"json": str(json_path), "plot": str(png_path)}
