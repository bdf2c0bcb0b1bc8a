"""What a study's runs cost: wall seconds per task against n, and the exponent b of t ~ n^b.

For each (mixture, method) and size: the median over seeds of ``seconds_run`` (the method's
wall time, sampling excluded) and of ``seconds_sample``. With two sizes or more, b is the slope
of the least-squares line log t = log c + b log n through the medians (``numpy.polyfit``),
with three sizes or more its standard error se(b) = sqrt(RSS / (k - 2) / Sxx) (k sizes, Sxx the
sum of squares of log n about its mean; Draper and Smith, Applied Regression Analysis, ch. 1),
and the slope ``exponent_last`` between the two largest sizes. Fixed per-run costs flatten
the curve at small n, so b through all sizes is biased low (synthetic t = c0 + c n^3 over
n = 100..320: b = 2.82, 2.44, 1.72 when c0 is 20, 50, 80 % of the time at n = 100) and the
slope rises with n. se(b) measures how far the medians stray from a line, curvature and noise
alike, so it cannot tell the two apart; the noise alone is measured by a bootstrap over seeds
(each size's times resampled with replacement, ``RISING_REPLICATES`` times, seeded): the entry
is marked ``rising`` when the last slope exceeds b by more than ``RISING_MIN`` and by more
than twice the bootstrap spread of (last - b). b is then a lower bound of the exponent the
method has at large n. A median resampled from one or two values has next to no spread, so
``rising`` needs at least ``RISING_SEEDS`` seeds at every size (measured under a pure n^3 law
with 10-30 % lognormal noise, 3-4 sizes: false alarms in 31-42 % of studies with 1 seed,
15-18 % with 2, 1-5 % with 3 or more).
A kernel pass reads every coefficient, N(n) ~ n^P/P!, so P (the largest degree) is the
reference: a method making a fixed number of passes has b near P once n is large; Hessian
ascent takes K = n/8 steps clamped to [25, 200] (a Hessian pass and Lanczos each), so b
reaches about P + 1 only between n = 200 and 1600, while per-call overheads and caches pull b
down at small n (the demo measures 1.5-2.2 for it). Times are wall seconds of the
workers, so they also carry the machine's load during the sweep.

The time of one step sets how a run scales apart from how many steps it takes: the same fit
through the medians of ``seconds_run / steps`` (``steps``: K for Hessian ascent, the
iterations of gradient ascent, the Langevin steps of anneal, as the row records them) gives
``exponent_per_step``, which tends to P where one step's kernel pass dominates (a Hessian
step is one Hessian pass and a Lanczos solve, ~n^2) and stays below it while fixed costs or
the Lanczos solve weigh; b - b_step is then the growth of the step count (about 1 for K = n/8,
0 where K is clamped). The polish and the end check (~n^3, once per run) are spread over the
steps and raise b_step at small K.

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
#: How far above P the exponent per step must lie for :func:`above_degree`.
ABOVE_DEGREE = 0.5
#: The least excess of the last pair's slope over b that marks an entry ``rising``.
RISING_MIN = 0.1
#: Bootstrap replicates (over seeds) behind ``rising``, and the seeds it needs at every size.
RISING_REPLICATES = 400
RISING_SEEDS = 3


def cost_table(rows: list[dict[str, Any]], max_degree: dict[str, int]) -> list[dict[str, Any]]:
    """One entry per (mixture, method): sizes, median seconds per size, the exponent b (None
    with one size), ``fixed_cost_bound`` (b below :data:`FIXED_COST_SLOPE`) and the mixture's
    largest degree P."""
    acc: dict[tuple[str, str], dict[int, list[tuple[float, float, float]]]] = defaultdict(
        lambda: defaultdict(list)
    )
    for r in rows:
        run, sample, steps = r.get("seconds_run"), r.get("seconds_sample"), r.get("steps")
        if not isinstance(run, (int, float)) or not math.isfinite(run) or run <= 0:
            continue  # a row without a usable time (older rows): left out
        if not isinstance(sample, (int, float)) or not math.isfinite(sample):
            sample = math.nan
        # seconds per step; NaN for a row without a step count (older rows) or with none
        ok = isinstance(steps, int) and not isinstance(steps, bool) and steps > 0
        per_step = float(run) / steps if ok else math.nan
        acc[(r["mixture"], r["method"])][int(r["n"])].append((float(run), float(sample), per_step))
    out = []
    for (mix, method), by_n in acc.items():
        sizes = sorted(by_n)
        run = [float(np.median([t[0] for t in by_n[n]])) for n in sizes]
        # a row without a sampling time leaves out only itself (NaN only if every row lacks it;
        # np.nanmedian would warn there)
        sample = [_median_of_known([t[1] for t in by_n[n]]) for n in sizes]
        per_step = [_median_of_known([t[2] for t in by_n[n]]) for n in sizes]
        b, se, last = _slopes(sizes, run)
        b_step, se_step = (
            (None, None) if any(map(math.isnan, per_step)) else _slopes(sizes, per_step)[:2]
        )
        rising = len(sizes) >= 3 and _rises(
            sizes, [[t[0] for t in by_n[n]] for n in sizes], b, last
        )
        out.append(
            {
                "mixture": mix,
                "method": method,
                "sizes": sizes,
                "median_seconds_run": run,
                "median_seconds_sample": sample,
                "median_seconds_per_step": per_step,
                "count": [len(by_n[n]) for n in sizes],
                "exponent": b,
                "exponent_se": se,
                "exponent_last": last,
                "exponent_per_step": b_step,
                "exponent_per_step_se": se_step,
                "rising": rising,
                "fixed_cost_bound": b is not None and b < FIXED_COST_SLOPE,
                "max_degree": max_degree.get(mix),
            }
        )
    return out


def _median_of_known(values: list[float]) -> float:
    """The median of the values that are not NaN; NaN when none is."""
    known = [v for v in values if not math.isnan(v)]
    return float(np.median(known)) if known else math.nan


def _slopes(sizes: list[int], times: list[float]) -> tuple[Any, Any, Any]:
    """(b, se(b), last-pair slope) of log t on log n; None where there are too few sizes."""
    if len(sizes) < 2:
        return None, None, None
    x, y = np.log(np.asarray(sizes, dtype=np.float64)), np.log(np.asarray(times))
    b, c = np.polyfit(x, y, 1)
    last = float((y[-1] - y[-2]) / (x[-1] - x[-2]))
    if len(sizes) < 3:
        return float(b), None, last
    rss = float(np.sum((y - (b * x + c)) ** 2))
    sxx = float(np.sum((x - x.mean()) ** 2))
    return float(b), math.sqrt(rss / (len(sizes) - 2) / sxx), last


def _rises(sizes: list[int], times: list[list[float]], b: float, last: float) -> bool:
    """Whether the last pair's slope exceeds b beyond RISING_MIN and beyond twice the spread
    of (last - b) over a bootstrap of the seeds (see the module doc)."""
    excess = last - b
    if excess <= RISING_MIN or min(len(t) for t in times) < RISING_SEEDS:
        return False
    rng = np.random.default_rng(0)
    y = np.empty((RISING_REPLICATES, len(sizes)))
    for j, t in enumerate(times):
        draws = np.asarray(t)[rng.integers(0, len(t), size=(RISING_REPLICATES, len(t)))]
        y[:, j] = np.log(np.median(draws, axis=1))
    x = np.log(np.asarray(sizes, dtype=np.float64))
    xc = x - x.mean()
    b_rep = (y - y.mean(axis=1, keepdims=True)) @ xc / float(xc @ xc)
    last_rep = (y[:, -1] - y[:, -2]) / (x[-1] - x[-2])
    return bool(excess > 2.0 * float(np.std(last_rep - b_rep, ddof=1)))


def _exponent_text(b: float | None, se: float | None) -> str:
    """An exponent for the cost table: "--" when none, with its s.e. when known, and in
    parentheses below :data:`FIXED_COST_SLOPE` (fixed costs set the time there)."""
    if b is None:
        return "--"
    text = f"{b:.2f}" + (f" +- {se:.2f}" if se is not None else "")
    return f"({text})" if b < FIXED_COST_SLOPE else text


def above_degree(c: dict[str, Any]) -> bool:
    """Whether one step's time grows clearly faster than a kernel pass can make it: b (step)
    above max(P, 3) + :data:`ABOVE_DEGREE` (and beyond twice its s.e. when known). A step
    makes a fixed number of passes over ~n^P/P! coefficients plus work in n^2 (Lanczos,
    hessian) or less, so such a slope comes from elsewhere: the coefficients outgrowing a
    cache between the sizes, or other work on the machine during the sweep (a user trial
    measured b (step) 4.1-4.8 for the 3-spin model at n = 300-400 on a busy host)."""
    b, p = c.get("exponent_per_step"), c.get("max_degree")
    if b is None or p is None:
        return False
    se = c.get("exponent_per_step_se") or 0.0
    # at P = 2 the once-per-run n^3 work (the end check's eigenvalues, the polish) spread over
    # the steps can itself lift b (step) towards 3
    return b - max(p, 3) > max(ABOVE_DEGREE, 2.0 * se)


def cost_markdown(cost: list[dict[str, Any]]) -> list[str]:
    """The report's "Cost" section (Markdown lines)."""
    lines = [
        "## Cost",
        "",
        "Median wall seconds per task over seeds (the method's run; sampling apart), and the "
        "exponent b of t ~ n^b through the medians with its standard error, and b between the "
        "two largest sizes (last); P is the largest degree (one kernel pass "
        "reads ~n^P/P! coefficients). A b in parentheses is below 1: at these sizes fixed "
        "per-run costs, not the kernel passes, set the time, and larger n are needed to "
        "measure the growth. b (step) is the exponent of the median seconds per step (K for "
        "hessian, iterations for gradient, Langevin steps for anneal: `steps` in the rows), "
        "the cost of one step whatever the step count does; it tends to P where one step's "
        "kernel pass dominates, and a b (step) marked ! lies well above it (above max(P, 3)): "
        "caches or other work on the machine, not the method, set that growth.",
        "",
        "| mixture | method | n | median s (run) | median s (sample) | b | b (last) | b (step)"
        " | P |",
        "| --- | --- | ---: | ---: | ---: | ---: | ---: | ---: | ---: |",
    ]
    for c in cost:
        b = _exponent_text(c["exponent"], c.get("exponent_se"))
        last = "--" if c.get("exponent_last") is None else f"{c['exponent_last']:.2f}"
        step = _exponent_text(c.get("exponent_per_step"), c.get("exponent_per_step_se"))
        if above_degree(c):
            step += " !"
        for i, n in enumerate(c["sizes"]):
            first = i == 0
            lines.append(
                f"| {c['mixture']} | {c['method']} | {n} | {c['median_seconds_run'][i]:.3g} | "
                f"{c['median_seconds_sample'][i]:.3g} | {b if first else ''} | "
                f"{last if first else ''} | {step if first else ''} | "
                f"{c['max_degree'] if first else ''} |"
            )
    return lines
