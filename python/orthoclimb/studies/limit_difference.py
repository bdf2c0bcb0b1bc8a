"""The difference of two methods' n -> infinity limits, extrapolated from their paired runs.

Two methods a and b run on the same instances (the same seeds) at each size, so their limits'
difference e_inf(a) - e_inf(b) is extrapolated from the differences d_s = e_a(s) - e_b(s),
seed by seed (paired), under the same n^(-k) law as the energies: if E[e_n] = e_inf + c n^(-k)
for both methods, E[d_n] = (e_inf(a) - e_inf(b)) + (c_a - c_b) n^(-k) follows it too. Pairing
takes out the spread from instance to instance that each method's own fit carries (a hard
instance is hard for both), so the interval is narrower than the two fits' intervals combined;
the report gives both, and the two fits' difference with its s.e., sqrt(se_a^2 + se_b^2),
beside it. Differences within the tie width of :mod:`.paired` count as 0 (both runs stopped at
the same point). Sizes with fewer than two paired seeds are left out, as in the energies' fits.
Ties make a size's own variance unreliable (9 ties and one small difference among 10 seeds gave
one size 99.5 % of the weight and an interval 18 times too narrow, a user trial), so the sizes
are weighed by variances pooled over n (``pooled`` in :func:`.extrapolate.extrapolate`), and
the finding gives the ties at each size.

As with the energies (:mod:`.laws`), the fit is repeated under ``OTHER_LAWS``, each law is
tested, and the reading uses the laws the data keep: "the limits differ" when 0 lies outside
every kept law's interval, "consistent with equal limits" when 0 lies in the chosen law's
interval and the data keep that law (naming, with "not under", a kept law whose interval
excludes 0), "equal only under" another law otherwise.
"""

from __future__ import annotations

import itertools
import math
from typing import Any

import numpy as np

from .extrapolate import extrapolate
from .laws import (
    _laws_holding,
    add_other_laws,
    excluded_by,
    kept_laws,
    law_regions,
    over_text,
    power_text,
    powers_text,
    region_span,
)
from .paired import common_sizes, paired_differences, paired_seeds, tie_width

__all__ = [
    "limit_difference",
    "limit_difference_line",
    "limit_difference_markdown",
    "limit_differences",
]

# The bootstrap seeds of these fits start here, apart from the energies' fits (whose seeds
# count from 0 over mixtures and series), so adding a pair shifts none of those.
SEED_BASE = 1_000_000


def limit_difference(
    mix: str,
    a: str,
    b: str,
    seeds: dict,
    th: dict[str, Any],
    exponent: float,
    level: float,
    n_boot: int,
    seed: int,
    fits: dict[str, dict[str, Any]] | None = None,
) -> dict[str, Any] | None:
    """The extrapolated e_inf(a) - e_inf(b) on ``mix`` from the per-seed differences (module
    doc), or None when the methods share fewer than two sizes. ``seeds`` maps (mixture,
    method, n) to {seed: energy per spin}; ``th`` is the mixture's theory record (its GS sets
    the tie width); ``fits``, the methods' own extrapolations by name, adds ``separate`` (their
    difference) and ``separate_se`` (sqrt(se_a^2 + se_b^2)). The record holds the fields of
    :class:`.extrapolate.Extrapolation`, those :func:`.laws.add_other_laws` sets,
    ``mixture``, ``a``, ``b``, ``seeds`` (paired seeds per size), ``left_out`` ([n, paired
    seeds] of the sizes left out) and ``z0`` = value / se; or ``value`` None and a ``note``
    when no fit could be made."""
    sizes = common_sizes(mix, a, b, seeds)
    if len(sizes) < 2:
        return None
    tie = tie_width(th)
    counts = {n: len(paired_seeds(mix, a, b, n, seeds)) for n in sizes}
    kept = [n for n in sizes if counts[n] >= 2]
    entry: dict[str, Any] = {
        "mixture": mix,
        "a": a,
        "b": b,
        "left_out": [[n, counts[n]] for n in sizes if counts[n] < 2],
        "seeds": [counts[n] for n in kept],
    }
    samples = []
    for n in kept:
        d = paired_differences(mix, a, b, n, seeds)
        samples.append(np.where(np.abs(d) <= tie, 0.0, d))  # ties count 0, as in paired.py
    try:
        ex = extrapolate(kept, samples, exponent, level, n_boot, seed=seed, pooled=True)
    except ValueError as exc:
        entry.update(value=None, note=str(exc))
        return entry
    entry.update(ex.to_dict())
    entry["sizes"] = list(ex.sizes)
    entry["z0"] = ex.value / ex.se if ex.se > 0 else math.nan
    entry["ties"] = [int(s.size - np.count_nonzero(s)) for s in samples]
    entry["all_ties"] = all(not np.any(s) for s in samples)
    entry["even"] = bool(th.get("even"))  # H(-x) = H(x): a tie may be the mirror point
    add_other_laws(entry, kept, samples, level, n_boot, seed=seed, pooled=True)
    if fits and all(fits.get(m, {}).get("value") is not None for m in (a, b)):
        fa, fb = fits[a], fits[b]
        entry["separate"] = fa["value"] - fb["value"]
        entry["separate_se"] = math.hypot(fa["se"], fb["se"])
    return entry


def limit_differences(
    mixtures: list[str],
    methods: list[str],
    seeds: dict,
    theory: dict[str, dict[str, Any]],
    fits: list[dict[str, Any]],
    exponent: float,
    level: float,
    n_boot: int,
) -> list[dict[str, Any]]:
    """:func:`limit_difference` for every mixture and pair of methods (in the order given),
    with bootstrap seeds from ``SEED_BASE`` on; pairs with fewer than two common sizes are
    left out."""
    out = []
    pairs = list(itertools.combinations(methods, 2))
    for i, mix in enumerate(mixtures):
        own = {f["method"]: f for f in fits if f["mixture"] == mix}
        for j, (a, b) in enumerate(pairs):
            seed = SEED_BASE + i * len(pairs) + j
            rec = limit_difference(
                mix, a, b, seeds, theory[mix], exponent, level, n_boot, seed, own
            )
            if rec is not None:
                out.append(rec)
    return out


def _reading(f: dict[str, Any]) -> str:
    """What the fit ``f`` says about the two limits, reading the kept laws (module doc)."""
    if not f["se"] > 0:
        return "the differences have no spread, so there is no error estimate"
    z = f"{f['z0']:+.1f} s.e."
    kept = kept_laws(f)
    chosen_kept = any(law is f for law in kept)
    chosen = power_text(f["exponent"]) + ("" if chosen_kept else ", which the data reject")
    if chosen_kept and f["low"] <= 0.0 <= f["high"]:
        return f"consistent with equal limits ({z}){excluded_by(f, kept, 0.0)}"
    for run in law_regions(f):
        lo, hi = region_span(run)
        if lo <= 0.0 <= hi:
            return f"equal limits only under {_laws_holding(run, 0.0)} ({z} under {chosen})"
    if f["law_low"] < 0.0 < f["law_high"]:  # 0 falls between two regions: laws disagree
        return (
            f"the laws the data keep disagree on which limit is higher ({z} under {chosen};"
            f" {over_text(f)})"
        )
    lead = f["a"] if f["law_low"] > 0 else f["b"]
    return (
        f"the limits differ: {lead} reaches the higher energy as n -> infinity ({z}; 0 lies"
        f" outside the interval of every law the data keep, {powers_text(kept)})"
    )


def limit_difference_line(f: dict[str, Any]) -> str:
    """The finding of one record of :func:`limit_differences`, a sentence."""
    head = f"{f['mixture']}: {f['a']} - {f['b']} as n -> infinity"
    left = ""
    if f["left_out"]:
        left = "; left out: " + ", ".join(
            f"n = {n} ({c} paired seed{'s' if c != 1 else ''})" for n, c in f["left_out"]
        )
    if f.get("value") is None:
        return f"{head}: no extrapolation ({f['note']}{left})."
    sizes = ", ".join(str(n) for n in f["sizes"])
    if f["all_ties"]:
        same = "the same point or its mirror -x" if f["even"] else "the same point"
        return (
            f"{head}: no difference; the two stopped at {same} on every paired seed at"
            f" n = {sizes}{left}."
        )
    lvl = f"{round(100 * f['level'], 6):g}"
    kept = kept_laws(f)
    over = "; " + over_text(f) if len(kept) > 1 or kept[0] is not f else ""
    ties = ""
    if any(f.get("ties", [])):
        counts = ", ".join(f"{t}/{m}" for t, m in zip(f["ties"], f["seeds"], strict=True))
        same = "the same point or its mirror" if f["even"] else "the same point"
        ties = f" (ties, {same}: {counts})"
    text = (
        f"{head}: {f['value']:+.4f} [{lvl}%: {f['low']:+.4f}, {f['high']:+.4f}{over}] from the"
        f" per-seed differences at n = {sizes}{ties}{left}; {_reading(f)}"
    )
    if f.get("separate") is not None and f["se"] > 0:
        text += (
            f" (the two fits apart give {f['separate']:+.4f} +- {f['separate_se']:.4f}; paired,"
            f" +- {f['se']:.4f})"
        )
    return text + "."


def limit_difference_markdown(records: list[dict[str, Any]]) -> list[str]:
    """The report's table of the limits' differences, ending in a blank line; none without a
    pair of methods at two sizes."""
    if not records:
        return []
    lines = [
        "## Difference of limits",
        "",
        "e_inf(a) - e_inf(b), extrapolated from the per-seed differences a - b on the same"
        " instances (paired; the energies' laws and interval, with the sizes weighed by"
        " variances pooled over n, since ties make a size's own unreliable); 'apart': the two"
        " fits' difference, +- sqrt(s.e.(a)^2 + s.e.(b)^2).",
        "",
        "| mixture | a - b | sizes | difference | interval | over laws | s.e. | z(0) |"
        " chi2/dof (p) | apart |",
        "| --- | --- | --- | ---: | --- | --- | ---: | ---: | ---: | ---: |",
    ]
    for f in records:
        pair = f"{f['a']} - {f['b']}"
        if f.get("value") is None:
            lines.append(f"| {f['mixture']} | {pair} | | -- | {f['note']} | | | | | |")
            continue
        se = f"{f['se']:.4f}" if f["se"] > 0 else "--"
        z0 = f"{f['z0']:+.1f}" if math.isfinite(f["z0"]) else "--"
        fit = f"{f['chi2']:.1f}/{f['dof']}" + (
            f" (p = {f['fit_p']:.2g})" if math.isfinite(f["fit_p"]) else ""
        )
        apart = (
            f"{f['separate']:+.4f} +- {f['separate_se']:.4f}"
            if f.get("separate") is not None
            else "--"
        )
        lines.append(
            f"| {f['mixture']} | {pair} | {', '.join(str(n) for n in f['sizes'])} |"
            f" {f['value']:+.4f} | [{f['low']:+.4f}, {f['high']:+.4f}] |"
            f" [{f['law_low']:+.4f}, {f['law_high']:+.4f}] | {se} | {z0} | {fit} | {apart} |"
        )
    return [*lines, ""]
