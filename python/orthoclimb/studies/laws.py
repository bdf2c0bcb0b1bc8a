"""Which n^(-k) laws a study's data keep, and the verdicts against theory that read them.

The interval of an extrapolation e_inf (:mod:`.extrapolate`) covers the noise of the means under
the chosen law n^(-k), not the choice of law; the finite-size correction of an optimizer's
energy is not known (for the pure 3-spin ground state it is of order log(n)/n, from the
extremal process of its critical points, Subag and Zeitouni 2017, not n^(-2/3)). So each fit is
repeated under the exponents ``OTHER_LAWS`` (:func:`add_other_laws`), each law is tested
(``fit_p``, :mod:`.extrapolate`), and the laws the data do not reject at ``FIT_LEVEL`` are kept
(all of them when every one is rejected, with a warning). The range [``law_low``,
``law_high``] spans the kept laws' intervals; an exponent between two kept ones fits too, so
the gap between their intervals belongs to the range. The verdicts against ALG and GS read it:
"consistent with" when the target lies in the chosen law's interval and that law is kept
(naming any other kept law whose interval excludes it: "..., not under n^(-1)"); "only under"
another law when it lies elsewhere in the range; "below"/"above" outside it.
"Consistent" is thus a test at 1 - level, with no correction for the two targets compared.

Measured over synthetic studies (400 per cell; 3 or 5 sizes from 50 to 800; 5, 20, 80 seeds;
Gaussian noise of sd 0.5/sqrt(n) per seed), the range covered e_inf in 0.90-0.97 of studies
whose true correction was -10/n or -0.3 n^(-1/2) (the chosen law's interval: 0.00-0.91), in
0.91-0.99 for -2 log(n)/n except with 80 seeds at 5 sizes: 0.54, where the data resolve that
log(n)/n is no power law (the chosen law: 0.01); for n^(-2/3) itself 0.96-1.00. A correction
that changes sign between the sizes escapes every law of this family.

A fit is a dict: the fields of :meth:`.extrapolate.Extrapolation.to_dict` plus ``alg``,
``gs``, ``gs_equals_alg``, ``z_alg``, ``z_gs`` and those :func:`add_other_laws` sets.
"""

from __future__ import annotations

import itertools
import math
from fractions import Fraction
from typing import Any

import numpy as np

from .extrapolate import extrapolate
from .paired import TIE_RELATIVE

__all__ = [
    "FIT_LEVEL",
    "OTHER_LAWS",
    "Z_CONSISTENT",
    "add_other_laws",
    "against_theory",
    "excluded_by",
    "fit_laws",
    "is_rejected",
    "kept_laws",
    "law_regions",
    "law_span_text",
    "law_test_text",
    "over_text",
    "power_text",
    "powers_text",
    "region_span",
    "verdict",
    "z_text",
]

# |z| <= Z_CONSISTENT: "consistent with", only where a fit has no finite interval (the verdicts
# otherwise read the interval, so they are tests at 1 - level; see verdict)
Z_CONSISTENT = 2.0
FIT_LEVEL = 0.05  # the law's test fit_p below this: the n^(-k) law fits poorly
# Exponents of the n^(-k) law under which every fit is repeated; with the chosen k they span
# the range of e_inf the verdicts read (see the module doc).
OTHER_LAWS = (0.5, 1.0)


def add_other_laws(
    entry: dict[str, Any],
    sizes: list[int],
    samples: list[np.ndarray],
    level: float,
    n_boot: int,
    seed: int,
    pooled: bool = False,
) -> None:
    """Repeat the fit ``entry`` under each of ``OTHER_LAWS`` other than its own exponent (with
    variances ``pooled`` over the sizes as the fit's, :func:`.extrapolate.extrapolate`) and
    set ``other_laws`` (each law's exponent, value, interval, chi2 and fit_p), ``laws_kept``
    (the exponents :func:`kept_laws` keeps), ``law_regions`` (the span of each run of
    neighbours, :func:`law_regions`) and ``law_low``/``law_high`` (the span of them all)."""
    others = [
        extrapolate(sizes, samples, e, level, n_boot, seed=seed, pooled=pooled)
        for e in OTHER_LAWS
        if abs(e - entry["exponent"]) > 1e-9
    ]
    entry["other_laws"] = [
        {
            "exponent": o.exponent,
            "value": o.value,
            "low": o.low,
            "high": o.high,
            "chi2": o.chi2,
            "fit_p": o.fit_p,
        }
        for o in others
    ]
    entry["laws_kept"] = [law["exponent"] for law in kept_laws(entry)]
    # usually one region; two when the data reject the law between two kept ones
    regions = [region_span(run) for run in law_regions(entry)]
    entry["law_regions"] = [list(r) for r in regions]
    entry["law_low"] = min(lo for lo, _ in regions)
    entry["law_high"] = max(hi for _, hi in regions)


def fit_laws(f: dict[str, Any]) -> list[dict[str, Any]]:
    """The fit's laws, the chosen one first: exponent, interval and the law's test fit_p."""
    return [f, *(f.get("other_laws") or [])]


def is_rejected(law: dict[str, Any]) -> bool:
    """The law's own test rejects it (fit_p < FIT_LEVEL; NaN, with no degree of freedom or
    no spread, rejects nothing)."""
    p = law.get("fit_p", math.nan)
    return p is not None and math.isfinite(p) and p < FIT_LEVEL


def kept_laws(f: dict[str, Any]) -> list[dict[str, Any]]:
    """The laws the verdicts read: those the data do not reject, or all when every one is."""
    laws = fit_laws(f)
    return [law for law in laws if not is_rejected(law)] or laws


def powers_text(laws: list[dict[str, Any]]) -> str:
    """Laws as text: "n^(-1)", "n^(-1/2) and n^(-1)", "n^(-1/2), n^(-2/3) and n^(-1)"."""
    names = [power_text(law["exponent"]) for law in sorted(laws, key=lambda law: law["exponent"])]
    return names[0] if len(names) == 1 else f"{', '.join(names[:-1])} and {names[-1]}"


def law_regions(f: dict[str, Any]) -> list[list[dict[str, Any]]]:
    """The kept laws in runs of neighbours (in exponent order, no rejected law between them).
    An exponent between two neighbours that both fit fits too, so a run's region is the span
    of its laws' intervals; a rejected law between two kept ones splits them."""
    kept = kept_laws(f)
    runs: list[list[dict[str, Any]]] = [[]]
    for law in sorted(fit_laws(f), key=lambda law: law["exponent"]):
        if any(law is k for k in kept):
            runs[-1].append(law)
        elif runs[-1]:
            runs.append([])
    return [run for run in runs if run]


def region_span(run: list[dict[str, Any]]) -> tuple[float, float]:
    return min(law["low"] for law in run), max(law["high"] for law in run)


def law_span_text(f: dict[str, Any]) -> str:
    """The exponents of the laws kept, as text: "n^(-1/2) to n^(-1)", "n^(-1)"."""
    regions = law_regions(f)
    if len(regions) > 1:
        return powers_text([law for run in regions for law in run])
    ks = [law["exponent"] for law in regions[0]]
    return power_text(ks[0]) if len(ks) == 1 else f"{power_text(ks[0])} to {power_text(ks[-1])}"


def over_text(f: dict[str, Any]) -> str:
    """The range the verdicts read, for the finding: "over n^(-1/2) to n^(-1): a, b"."""
    spans = [region_span(run) for run in law_regions(f)]
    form = "[{:.4f}, {:.4f}]" if len(spans) > 1 else "{:.4f}, {:.4f}"
    return f"over {law_span_text(f)}: " + " and ".join(form.format(*span) for span in spans)


def power_text(k: float) -> str:
    """n^(-k) as text, a simple fraction where k is one: "n^(-2/3)", "n^(-1)", "n^(-0.55)"."""
    frac = Fraction(k).limit_denominator(12)
    if abs(float(frac) - k) > 1e-9:
        return f"n^(-{k:.3g})"
    return f"n^(-{frac})"


def z_text(f: dict[str, Any], z: float) -> str:
    """z in standard errors, with the Student t degrees of freedom when they are few."""
    nu = f.get("t_dof")
    few = nu is not None and math.isfinite(nu) and nu < 10
    return f"{z:+.1f} s.e." + (f" with {nu:.1f} degrees of freedom" if few else "")


def verdict(f: dict[str, Any], target: float, z: float, what: str) -> str:
    """The fit ``f`` against ``target``, reading the laws kept (:func:`kept_laws`) in their
    regions (:func:`law_regions`): "consistent with" when ``target`` lies in the printed interval
    of the chosen law and the data do not reject that law (a test at 1 - level; with ", not
    under ..." when a kept law's interval excludes it, :func:`excluded_by`); "only under"
    another law when it lies in a region (naming the kept laws whose intervals hold it, or
    "a law between" the two neighbours whose intervals it falls between); "below" or "above"
    outside every region, measured from the chosen law's value when it is kept, else from the
    nearest kept law's. Without a finite interval, |z| <= Z_CONSISTENT decides."""
    value, low, high = f["value"], f["low"], f["high"]
    if not math.isfinite(z):
        return f"compared with {what} {target:.4f}: no error estimate"
    zt = z_text(f, z)
    if not (math.isfinite(low) and math.isfinite(high)):
        if abs(z) <= Z_CONSISTENT:
            return f"consistent with {what} = {target:.4f} ({zt})"
        side = "below" if value < target else "above"
        return f"{abs(value - target):.4f} {side} {what} = {target:.4f} ({zt})"
    kept = kept_laws(f)
    chosen_kept = any(law is f for law in kept)
    chosen = power_text(f["exponent"])
    rejected = "" if chosen_kept else ", which the data reject"
    if chosen_kept and low <= target <= high:
        return f"consistent with {what} = {target:.4f} ({zt}){excluded_by(f, kept, target)}"
    for run in law_regions(f):
        lo, hi = region_span(run)
        if not lo <= target <= hi:
            continue
        under = _laws_holding(run, target)
        return (
            f"consistent with {what} = {target:.4f} only under {under} ({zt} under"
            f" {chosen}{rejected})"
        )
    if chosen_kept:
        side = "below" if value < target else "above"
        others = [law for law in kept if law is not f]
        plural = "s" if len(others) > 1 else ""
        beyond = f"; outside the interval{plural} under {powers_text(others)} too" if others else ""
        return (
            f"{abs(value - target):.4f} {side} {what} = {target:.4f} ({zt} under {chosen}{beyond})"
        )
    near = min(kept, key=lambda law: abs(law["value"] - target))
    side = "below" if near["value"] < target else "above"
    return (
        f"{abs(near['value'] - target):.4f} {side} {what} = {target:.4f} under"
        f" {power_text(near['exponent'])}, the nearest law the data keep (the rejected {chosen}"
        f" gives {value:.4f}, {zt})"
    )


def excluded_by(f: dict[str, Any], kept: list[dict[str, Any]], target: float) -> str:
    """ ", not under n^(-1), which the data also keep" when the intervals of other kept laws
    than the chosen ``f`` exclude ``target`` (a user trial: an anneal read "consistent with
    ALG" while the kept n^(-1) law's interval lay below ALG), else ""."""
    # when every law is rejected, kept_laws falls back to all of them: none is "kept" then
    others = [
        law
        for law in kept
        if law is not f
        and not is_rejected(law)
        and math.isfinite(law["low"])
        and math.isfinite(law["high"])
        and not law["low"] <= target <= law["high"]
    ]
    if not others:
        return ""
    return f", not under {powers_text(others)}, which the data also keep"


def _laws_holding(run: list[dict[str, Any]], target: float) -> str:
    """The laws of a region whose intervals hold ``target``, as text ("n^(-1)"), or "a law
    between" the two neighbours whose intervals it falls between (an exponent between two
    kept ones fits too). ``target`` must lie in the region's span."""
    holding = [law for law in run if law["low"] <= target <= law["high"]]
    if holding:
        return powers_text(holding)
    pairs = (list(pair) for pair in itertools.pairwise(run))
    pair = next(p for p in pairs if region_span(p)[0] <= target <= region_span(p)[1])
    return f"a law between {powers_text(pair)}"


def against_theory(f: dict[str, Any]) -> str:
    """The fit's value set beside ALG and GS. Beyond :func:`verdict` on ALG: when the mixture
    has a gap GS > ALG (none is predicted where GS = ALG, whatever the solver's last digits),
    the fit has an error estimate and one region of kept laws (:func:`law_regions`) holds both,
    the data cannot tell them apart; and a point estimate above GS is named, since GS bounds
    every n -> infinity energy (for the chosen law when the data keep it)."""
    value, low, high, alg, gs = f["value"], f["low"], f["high"], f["alg"], f["gs"]
    finite = math.isfinite(low) and math.isfinite(high) and math.isfinite(gs)
    finite = finite and math.isfinite(f["z_alg"])
    gap = finite and not f.get("gs_equals_alg", False) and gs - alg > TIE_RELATIVE * abs(gs)
    chosen_kept = any(law is f for law in kept_laws(f))
    region = next(
        (r for r in law_regions(f) if region_span(r)[0] <= alg and gs <= region_span(r)[1]), None
    )
    if gap and region is not None:
        both = [law for law in region if law["low"] <= alg and gs <= law["high"]]
        if chosen_kept and any(law is f for law in both):
            where = "both lie inside the interval"
        elif both:
            where = f"both lie inside the interval under {powers_text(both)}"
        else:  # no one interval holds both: say which law holds each
            lo, hi = region_span(region)
            ends = sorted({law["exponent"] for law in region})
            over = power_text(ends[0]) + (f" to {power_text(ends[-1])}" if len(ends) > 1 else "")
            where = (
                f"both lie in the range [{lo:.4f}, {hi:.4f}] over {over}, ALG"
                f" under {_laws_holding(region, alg)} and GS under {_laws_holding(region, gs)}"
            )
        text = (
            f"cannot tell ALG = {alg:.4f} ({z_text(f, f['z_alg'])}) from GS = {gs:.4f} "
            f"({z_text(f, f['z_gs'])}): {where}"
        )
    else:
        text = verdict(f, alg, f["z_alg"], "ALG")
    if finite and chosen_kept and value > gs and low <= gs:
        # no interval is cut at GS here: the truncated one contradicted the range above
        text += (
            f"; the point estimate lies above GS = {gs:.4f}, which bounds every n -> infinity"
            " energy: at these sizes the extrapolation overshoots"
        )
    return text


def law_test_text(f: dict[str, Any]) -> str:
    """What the laws' own tests say, for the finding (empty when every law passes)."""
    if f["dof"] == 0:
        return ""
    if not math.isfinite(f["chi2"]):
        return (
            "; the samples have no spread, so nothing measures how well the"
            f" {power_text(f['exponent'])} law fits"
        )
    laws = fit_laws(f)
    rejected = [law for law in laws if is_rejected(law)]
    if not rejected:
        return ""
    tests = "; ".join(
        f"{power_text(law['exponent'])}: chi2 = {law['chi2']:.1f}, p = {law['fit_p']:.2g}"
        for law in rejected
    )
    if len(rejected) == len(laws):
        return (
            f"; no law from {power_text(min(law['exponent'] for law in laws))} to"
            f" {power_text(max(law['exponent'] for law in laws))} fits ({tests};"
            f" {f['dof']} degree(s) of freedom), so every interval understates the uncertainty"
        )
    return (
        f"; the data reject {powers_text(rejected)} ({tests}; {f['dof']} degree(s) of freedom),"
        f" so the verdicts read {powers_text(kept_laws(f))}"
    )
