"""What a study's runs cost: wall seconds per task against n, and the exponent b of t ~ n^b.

For each (mixture, method) and size: the median over seeds of ``seconds_run`` (the method's
wall time, sampling excluded) and of ``seconds_sample``. With two sizes or more, b is the slope
of the least-squares line log t = log c + b log n through the medians (``numpy.polyfit``).
A kernel pass reads every coefficient, N(n) ~ n^P/P!, so P (the largest degree) is the
reference: a method making a fixed number of passes has b near P once n is large; Hessian
ascent takes K = n/8 steps clamped to [25, 200] (a Hessian pass and Lanczos each), so b
reaches about P + 1 only between n = 200 and 1600, while per-call overheads and caches pull b
down at small n (the demo measures 1.5-2.2 for it). Times are wall seconds of the
workers, so they also carry the machine's load during the sweep.

A b below :data:`FIXED_COST_SLOPE` (1) marks the entry ``fixed_cost_bound``: every method
reads all ~n^P/P! coefficients at least once per step, so a run whose time grows more slowly
than n itself is timing its fixed costs (Python calls, eigen-solver set-up, thread hand-over),
not its passes, and b says nothing about how the method scales (the quick demo, n = 20-60,
measures b from -0.4 to 1.3).
"""

from __future__ import annotations

import math
from collections import defaultdict
from typing import Any

import numpy as np

__all__ = ["FIXED_COST_SLOPE", "cost_table", "cost_markdown"]

#: Slope of log time on log n below which a cost entry is marked ``fixed_cost_bound``.
FIXED_COST_SLOPE = 1.0


def cost_table(rows: list[dict[str, Any]], max_degree: dict[str, int]) -> list[dict[str, Any]]:
    """One entry per (mixture, method): sizes, median seconds per size, the exponent b (None
    with one size), ``fixed_cost_bound`` (b below :data:`FIXED_COST_SLOPE`) and the mixture's
    largest degree P."""
    acc: dict[tuple[str, str], dict[int, list[tuple[float, float]]]] = defaultdict(
        lambda: defaultdict(list)
    )
    for r in rows:
        run, sample = r.get("seconds_run"), r.get("seconds_sample")
        if not isinstance(run, (int, float)) or not math.isfinite(run) or run <= 0:
            continue  # a row without a usable time (older rows): left out
        if not isinstance(sample, (int, float)) or not math.isfinite(sample):
            sample = math.nan
        acc[(r["mixture"], r["method"])][int(r["n"])].append((float(run), float(sample)))
    out = []
    for (mix, method), by_n in acc.items():
        sizes = sorted(by_n)
        run = [float(np.median([t for t, _ in by_n[n]])) for n in sizes]
        sample = [float(np.median([s for _, s in by_n[n]])) for n in sizes]
        b = None
        if len(sizes) >= 2:
            b = float(np.polyfit(np.log(sizes), np.log(run), 1)[0])
        out.append(
            {
                "mixture": mix,
                "method": method,
                "sizes": sizes,
                "median_seconds_run": run,
                "median_seconds_sample": sample,
                "count": [len(by_n[n]) for n in sizes],
                "exponent": b,
                "fixed_cost_bound": b is not None and b < FIXED_COST_SLOPE,
                "max_degree": max_degree.get(mix),
            }
        )
    return out


def cost_markdown(cost: list[dict[str, Any]]) -> list[str]:
    """The report's "Cost" section (Markdown lines)."""
    lines = [
        "## Cost",
        "",
        "Median wall seconds per task over seeds (the method's run; sampling apart), and the "
        "exponent b of t ~ n^b through the medians; P is the largest degree (one kernel pass "
        "reads ~n^P/P! coefficients). A b in parentheses is below 1: at these sizes fixed "
        "per-run costs, not the kernel passes, set the time, and larger n are needed to "
        "measure the growth.",
        "",
        "| mixture | method | n | median s (run) | median s (sample) | b | P |",
        "| --- | --- | ---: | ---: | ---: | ---: | ---: |",
    ]
    for c in cost:
        b = "--" if c["exponent"] is None else f"{c['exponent']:.2f}"
        if c.get("fixed_cost_bound"):
            b = f"({b})"
        for i, n in enumerate(c["sizes"]):
            lines.append(
                f"| {c['mixture']} | {c['method']} | {n} | {c['median_seconds_run'][i]:.3g} | "
                f"{c['median_seconds_sample'][i]:.3g} | {b if i == 0 else ''} | "
                f"{c['max_degree'] if i == 0 else ''} |"
            )
    return lines
