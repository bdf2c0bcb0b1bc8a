"""Two methods compared on the same instances, seed by seed.

Every pair of methods is compared at their largest common size on the same instances (paired
seeds): by the mean difference and its standard error, with the paired t-test (Student t with
count - 1 degrees of freedom, p < ``MEAN_LEVEL``), and by the sign test of
:func:`paired_comparison` (one method higher on most instances, two-sided binomial p <
``SIGN_LEVEL``), which detects a small but consistent edge. Each pair is tested on its own,
with no correction for multiple comparisons: with many methods, expect an occasional edge by
chance. The methods start from the seed's random direction (Hessian ascent, where there is a
degree-2 term and no field, along the top eigenvector of Hess H(0) instead), so on an easy
landscape they often stop at the same point: runs within ``TIE_RELATIVE`` GS of each other
are ties, counted apart and left out of the sign test.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

__all__ = [
    "MEAN_LEVEL",
    "SIGN_LEVEL",
    "TIE_RELATIVE",
    "common_sizes",
    "comparisons_per_size",
    "head_to_head",
    "paired_comparison",
    "paired_differences",
    "paired_seeds",
    "tie_width",
]

SIGN_LEVEL = 0.01  # a paired sign test below this: one method is higher on most instances
MEAN_LEVEL = 0.05  # a paired t-test below this: one method is higher on average
# Two runs whose energies per spin differ by at most TIE_RELATIVE * GS stopped at the same
# point. Measured (pure 3-spin and xi = q^2 + q^4/16, n = 60 and 130, 60 gradient-ascent starts
# per instance): runs that reach the same maximum differ by at most 2.2e-14 per spin (3.75e-14
# between Hessian and gradient ascent in the demo), distinct maxima by at least 8.1e-5; 1e-9
# sits between them with four decades to spare on each side.
TIE_RELATIVE = 1e-9


def paired_comparison(d: Any, tie: float = 0.0) -> dict[str, float]:
    """Two methods on the same instances: ``d`` holds method a minus method b, seed by seed.

    Differences with |d| <= ``tie`` are ties: both runs stopped at the same point, and what
    separates them is rounding (see ``TIE_RELATIVE``); they count as 0 in the mean. Returns
    the mean difference ``diff``, its standard error ``se``, ``z = diff/se`` and the paired
    t-test's two-sided p-value ``t_p`` (Student t, size - 1 degrees of freedom), the counts
    ``higher`` (a above b), ``lower`` and ``ties``, and the sign test over the ``nonzero`` =
    higher + lower seeds that differ: the two-sided binomial p-value ``sign_p`` of ``higher``
    under "each is higher with probability 1/2" (``scipy.stats.binomtest``). The sign test sees
    a small but consistent edge that the mean's standard error, inflated by instance-to-
    instance spread, hides.
    """
    from scipy.stats import binomtest
    from scipy.stats import t as student_t

    d = np.asarray(d, dtype=np.float64)
    if d.ndim != 1 or d.size < 2:
        raise ValueError(f"a paired comparison needs at least 2 seeds, got {d.size}")
    if not np.all(np.isfinite(d)):  # a NaN made se NaN, and that read as "a certain edge"
        i = int(np.flatnonzero(~np.isfinite(d))[0])
        raise ValueError(f"the differences must be finite, got {d[i]} at index {i}")
    if not (math.isfinite(tie) and tie >= 0):
        raise ValueError(f"tie must be a finite number >= 0, got {tie}")
    d = np.where(np.abs(d) <= tie, 0.0, d)
    diff = float(d.mean())
    se = float(d.std(ddof=1) / math.sqrt(d.size))
    # the paired t-test's two-sided p-value, Student t with count - 1 degrees of freedom
    # (0 when every seed differs by the same nonzero amount: no spread, a certain edge)
    if se > 0:
        t_p = float(2.0 * student_t.sf(abs(diff / se), d.size - 1))
    else:
        t_p = 0.0 if diff != 0 else math.nan
    higher, lower = int(np.count_nonzero(d > 0)), int(np.count_nonzero(d < 0))
    nonzero = higher + lower
    return {
        "diff": diff,
        "se": se,
        "z": diff / se if se > 0 else math.nan,
        "t_p": t_p,
        "higher": higher,
        "lower": lower,
        "ties": int(d.size) - nonzero,
        "nonzero": nonzero,
        "sign_p": float(binomtest(higher, nonzero).pvalue) if nonzero else math.nan,
    }


def tie_width(th: dict[str, Any]) -> float:
    """The tie width of a mixture's comparisons: TIE_RELATIVE times |GS| (|ALG| when the
    Parisi solver gave no GS, which is NaN then)."""
    return TIE_RELATIVE * abs(th["gs"] if math.isfinite(th["gs"]) else th["alg"])


def paired_seeds(mix: str, a: str, b: str, n: int, seeds: dict) -> list[int]:
    """The seeds both methods ran at size n."""
    return sorted(set(seeds[(mix, a, n)]) & set(seeds[(mix, b, n)]))


def paired_differences(mix: str, a: str, b: str, n: int, seeds: dict) -> np.ndarray:
    """Method a's energy minus method b's on each seed both ran at size n (in the order of
    :func:`paired_seeds`)."""
    ea, eb = seeds[(mix, a, n)], seeds[(mix, b, n)]
    return np.array([ea[s] - eb[s] for s in paired_seeds(mix, a, b, n, seeds)])


def common_sizes(mix: str, a: str, b: str, seeds: dict) -> list[int]:
    """The sizes at which both methods ran on ``mix``."""
    return sorted(n for (m1, me, n) in seeds if m1 == mix and me == a and (mix, b, n) in seeds)


def comparisons_per_size(
    mix: str, a: str, b: str, seeds: dict, th: dict[str, Any]
) -> list[dict[str, Any]]:
    """The paired comparison of methods a and b on ``mix`` at every size with two or more
    paired seeds (the report's table; its findings speak of the largest size): one record per
    size with the fields of :func:`paired_comparison` and ``mixture``, ``n``, ``a``, ``b``,
    ``seeds``."""
    out = []
    for n in common_sizes(mix, a, b, seeds):
        d = paired_differences(mix, a, b, n, seeds)
        if d.size >= 2:
            c = paired_comparison(d, tie_width(th))
            out.append({"mixture": mix, "n": n, "a": a, "b": b, "seeds": int(d.size), **c})
    return out


def head_to_head(
    mix: str,
    a: str,
    b: str,
    seeds: dict,
    th: dict[str, Any],
    records: list[dict[str, Any]] | None = None,
) -> str | None:
    """Methods a and b on the same instances of ``mix`` at their largest common size with two
    or more paired seeds (paired over seeds, each instance's runs seeded alike), or
    None without one. A larger size with fewer paired seeds (an interrupted sweep) is named,
    not allowed to hide the comparison. ``records``: the pair's
    :func:`comparisons_per_size`, when the caller has them already."""
    if records is None:
        records = comparisons_per_size(mix, a, b, seeds, th)
    if not records:
        return None
    last = records[-1]
    skipped = []
    for n in reversed(common_sizes(mix, a, b, seeds)):
        if n <= last["n"]:
            break
        k = len(paired_seeds(mix, a, b, n, seeds))
        skipped.append(f"n = {n} has {k} paired seed{'s' if k != 1 else ''}")
    line = _compare_line(last, th)
    return line if not skipped else f"{line[:-1]} ({'; '.join(skipped)})."


def _compare_line(c: dict[str, Any], th: dict[str, Any]) -> str:
    """The comparison sentence of :func:`head_to_head` from its record ``c`` (one of
    :func:`comparisons_per_size`)."""
    mix, a, b, n, paired = c["mixture"], c["a"], c["b"], c["n"], c["seeds"]
    diff, z = c["diff"], c["z"]
    # a mixture of even degrees only has H(-x) = H(x): equal energies may be mirror points
    same = "the same point or its mirror -x" if th.get("even") else "the same point"
    scale = "GS" if math.isfinite(th["gs"]) else "ALG"  # as tie_width takes it
    if c["nonzero"] == 0:
        return (
            f"{mix}, n = {n}: {a} and {b} stopped at {same} (energies within "
            f"{tie_width(th):.2g} per spin, {TIE_RELATIVE:g} of |{scale}|) on all {paired}"
            " paired seeds."
        )
    sign = (
        f"{a} higher on {c['higher']}, {b} on {c['lower']}, {same} on "
        f"{c['ties']} (sign test over the {c['nonzero']} that differ: p = {c['sign_p']:.2g})"
    )
    by_mean = math.isfinite(c["t_p"]) and c["t_p"] < MEAN_LEVEL
    by_sign = math.isfinite(c["sign_p"]) and c["sign_p"] < SIGN_LEVEL
    if c["se"] > 0:
        mean = f"{z:+.1f} s.e., paired t-test over {paired} seeds: p = {c['t_p']:.2g}"
    else:
        mean = f"the same difference on each of the {paired} paired seeds"
    if by_mean:
        lead = f"{a} is ahead of {b}" if diff > 0 else f"{b} is ahead of {a}"
        return f"{mix}, n = {n}: {lead} by {abs(diff):.4f} per spin on average ({mean}); {sign}."
    if by_sign:  # a consistent edge the mean does not show (one large loss, say)
        lead = a if c["higher"] > c["lower"] else b
        return (
            f"{mix}, n = {n}: {lead} is higher on most instances ({sign}), though the mean"
            f" difference {a} - {b} = {diff:+.4f} per spin is not distinguishable ({mean})."
        )
    return (
        f"{mix}, n = {n}: {a} - {b} = {diff:+.4f} per spin, not distinguishable in "
        f"the mean ({mean}); {sign}."
    )
