"""The study report: per-group statistics, finite-size extrapolation, comparison with theory.

Groups are (mixture, method, n). For each: the mean energy per spin over seeds, its standard
error s = sd/sqrt(count) (sd with ddof = 1) and the count. For each (mixture, method) with at
least two sizes: the extrapolation e_inf of the mean in n^(-k) (:mod:`.extrapolate`), set beside
ALG and the Parisi ground state GS of the mixture, with z = (e_inf - ALG)/se(e_inf) and
(e_inf - GS)/se(e_inf), the "difference in standard errors". The findings are sentences computed
from these numbers (what was measured, whatever it is). Every pair of methods is compared at
their largest common size on the same instances (paired seeds): by the mean difference and its
standard error, and by the sign test of :func:`paired_comparison` (one method higher on most
instances, two-sided binomial p < ``SIGN_LEVEL``), which detects a small but consistent edge.
The mean difference counts when the paired t-test (Student t with count - 1 degrees of
freedom) gives p < ``MEAN_LEVEL``. Each pair is tested on its own, with no correction for
multiple comparisons:
with many methods, expect an occasional edge by chance. All methods start from the seed's
random direction, so on an easy landscape they often stop at the same point: runs within
``TIE_RELATIVE`` GS of each other are ties, counted apart and left out of the sign test.
The interval of e_inf covers the noise of the means under the chosen law n^(-k), not the
choice of law; the finite-size correction of an optimizer's energy is not known (for the pure
3-spin ground state it is of order log(n)/n, from the extremal process of its critical points,
Subag and Zeitouni 2017, not n^(-2/3)). So each fit is repeated under the exponents
``OTHER_LAWS``, each law is tested (``fit_p``, :mod:`.extrapolate`), and the laws the data do
not reject at ``FIT_LEVEL`` are kept (all of them when every one is rejected, with a warning).
The range [``law_low``, ``law_high``] spans the kept laws' intervals; an exponent between
two kept ones fits too, so the gap between their intervals belongs to the range. The verdicts
against ALG and GS read it: "consistent with" when the target lies in the chosen law's
interval and that law is kept; "only under" another law when it lies elsewhere in the range;
"below"/"above" outside it. Measured over synthetic studies (400 per cell; 3 or 5 sizes from
50 to 800; 5, 20, 80 seeds; Gaussian noise of sd 0.5/sqrt(n) per seed), the range covered
e_inf in 0.90-0.97 of studies whose true correction was -10/n or -0.3 n^(-1/2) (the chosen
law's interval: 0.00-0.91), in 0.91-0.99 for -2 log(n)/n except with 80 seeds at 5 sizes:
0.54, where the data resolve that log(n)/n is no power law (the chosen law: 0.01); for
n^(-2/3) itself 0.96-1.00. A correction that changes sign between the sizes escapes every law
of this family.

The cost of the runs (median wall seconds per task at each n and the exponent b of t ~ n^b,
:mod:`.cost`) closes the report.

Files written into the study folder (atomically): ``report.md``, ``report.json``,
``energy_vs_n.png`` (mean +- s vs n^(-k), fitted lines, ALG and GS lines, e_inf with its
interval at n^(-k) = 0) and ``distribution.png`` (energies over seeds at each n).
"""

from __future__ import annotations

import itertools
import math
import os
from collections import Counter, defaultdict
from dataclasses import dataclass, field
from fractions import Fraction
from pathlib import Path
from typing import Any

import numpy as np

from ..fileio import save_figure_atomic, write_json_atomic, write_text_atomic
from .cost import cost_markdown, cost_table
from .engine import counted
from .extrapolate import Extrapolation, check_interval, extrapolate
from .grid import StudySpec
from .store import Store, read_config
from .tasks import theory_values

__all__ = ["Report", "build_report", "write_report"]

# |z| <= Z_CONSISTENT: "consistent with", only where a fit has no finite interval (the verdicts
# otherwise read the interval, so they are tests at 1 - level; see _verdict)
Z_CONSISTENT = 2.0
SIGN_LEVEL = 0.01  # a paired sign test below this: one method is higher on most instances
MEAN_LEVEL = 0.05  # a paired t-test below this: one method is higher on average
FIT_LEVEL = 0.05  # the law's test fit_p below this: the n^(-k) law fits poorly
# Two runs whose energies per spin differ by at most TIE_RELATIVE * GS stopped at the same
# point. Measured (pure 3-spin and xi = q^2 + q^4/16, n = 60 and 130, 60 gradient-ascent starts
# per instance): runs that reach the same maximum differ by at most 2.2e-14 per spin (3.75e-14
# between Hessian and gradient ascent in the demo), distinct maxima by at least 8.1e-5; 1e-9
# sits between them with four decades to spare on each side.
TIE_RELATIVE = 1e-9
# Exponents of the n^(-k) law under which every fit is repeated; with the chosen k they span
# the range of e_inf the verdicts read (see the module doc).
OTHER_LAWS = (0.5, 1.0)


@dataclass
class Report:
    spec: StudySpec
    groups: list[dict[str, Any]]
    fits: list[dict[str, Any]]
    theory: dict[str, dict[str, Any]]
    findings: list[str]
    missing: int
    files: dict[str, str] = field(default_factory=dict)
    cost: list[dict[str, Any]] = field(default_factory=list)

    def table(self) -> str:
        """Plain-text table for the terminal."""
        lines = [
            f"{'mixture':<22} {'method':<9} {'n':>5} {'mean':>8} {'s.e.':>7} {'count':>5}",
        ]
        for g in self.groups:
            lines.append(
                f"{g['mixture']:<22} {g['method']:<9} {g['n']:>5} {g['mean']:>8.4f} "
                f"{g['se']:>7.4f} {g['count']:>5}"
            )
        lines.append("")
        lvl = int(round(100 * self.spec_level()))
        lines.append(
            f"{'mixture':<22} {'method':<9} {'e_inf':>8} {f'{lvl}% interval':>19} "
            f"{'over laws':>19} {'ALG':>7} {'GS':>7} {'z(ALG)':>7} {'z(GS)':>7}"
        )
        for f in self.fits:
            if f.get("value") is None:
                lines.append(f"{f['mixture']:<22} {f['method']:<9} {'--':>8}  {f['note']}")
                continue
            lines.append(
                f"{f['mixture']:<22} {f['method']:<9} {f['value']:>8.4f} "
                f"[{f['low']:>8.4f},{f['high']:>8.4f}] [{f['law_low']:>8.4f},"
                f"{f['law_high']:>8.4f}] {f['alg']:>7.4f} {f['gs']:>7.4f} "
                f"{f['z_alg']:>7.1f} {f['z_gs']:>7.1f}"
            )
        return "\n".join(lines)

    def spec_level(self) -> float:
        for f in self.fits:
            if f.get("level") is not None:
                return float(f["level"])
        return 0.9

    def to_dict(self) -> dict[str, Any]:
        return {
            "config": self.spec.to_dict(),
            "groups": self.groups,
            "extrapolations": self.fits,
            "theory": self.theory,
            "findings": self.findings,
            "missing_tasks": self.missing,
            "cost": self.cost,
            "files": self.files,
            "units": "energy per spin H(x)/n on the unit sphere, maximization",
        }


def _by_seed(rows: list[dict[str, Any]]) -> dict[tuple[str, str, int], dict[int, float]]:
    acc: dict[tuple[str, str, int], dict[int, float]] = defaultdict(dict)
    for r in rows:
        acc[(r["mixture"], r["method"], int(r["n"]))][int(r["seed"])] = float(r["energy"])
    return dict(acc)


def _groups(rows: list[dict[str, Any]]) -> dict[tuple[str, str, int], np.ndarray]:
    return {k: np.array(list(v.values())) for k, v in _by_seed(rows).items()}


def build_report(
    folder: str | os.PathLike,
    exponent: float | None = None,
    level: float = 0.9,
    n_boot: int = 2000,
) -> Report:
    """Read the rows of the study in ``folder`` and compute the report (no files written)."""
    check_interval(level, n_boot)  # here, since each fit turns extrapolate's errors into notes
    if exponent is not None and not (
        isinstance(exponent, (int, float))
        and not isinstance(exponent, bool)
        and math.isfinite(exponent)
        and exponent > 0
    ):
        raise ValueError(f"exponent must be a positive number, got {exponent!r}")
    spec = read_config(folder)
    store = Store(folder, spec)
    rows = store.rows()
    if not rows:
        raise ValueError(f"the study in {str(folder)!r} has no completed tasks yet")
    k = spec.exponent if exponent is None else float(exponent)  # both checked positive
    data = _groups(rows)
    # runs whose end point failed the local-maximum check (an iteration cap reached early)
    unfinished = Counter(
        (r["mixture"], r["method"], r["n"]) for r in rows if r.get("local_max") is False
    )
    order = {m.name: i for i, m in enumerate(spec.mixtures)}
    morder = {m.name: i for i, m in enumerate(spec.methods)}
    keys = sorted(data, key=lambda t: (order.get(t[0], 99), morder.get(t[1], 99), t[2]))
    groups = []
    for mix, method, n in keys:
        a = data[(mix, method, n)]
        se = float(a.std(ddof=1) / math.sqrt(a.size)) if a.size > 1 else math.nan
        groups.append(
            {
                "mixture": mix,
                "method": method,
                "n": n,
                "mean": float(a.mean()),
                "se": se,
                "count": int(a.size),
                "sd": float(a.std(ddof=1)) if a.size > 1 else math.nan,
                "not_local_max": unfinished[(mix, method, n)],
            }
        )
    theory = {}
    for m in spec.mixtures:
        tv = theory_values(m.gammas)
        theory[m.name] = {
            "gammas": m.mixture.to_text(),
            "alg": tv.alg,
            "gs": tv.gs,
            "full_rsb": tv.full_rsb,
            "gs_equals_alg": tv.gs_equals_alg,
            "verdict": tv.verdict,
            "gap_gs_alg": tv.gs - tv.alg,
        }
    fits = []
    for m in spec.mixtures:
        for meth in spec.methods:
            sizes = [n for (a, b, n) in keys if a == m.name and b == meth.name]
            th = theory[m.name]
            entry: dict[str, Any] = {
                "mixture": m.name,
                "method": meth.name,
                "alg": th["alg"],
                "gs": th["gs"],
                "gs_equals_alg": th["gs_equals_alg"],
            }
            samples = [data[(m.name, meth.name, n)] for n in sizes]
            try:
                ex: Extrapolation = extrapolate(sizes, samples, k, level, n_boot, seed=len(fits))
            except ValueError as exc:
                entry.update(value=None, note=str(exc))
                fits.append(entry)
                continue
            entry.update(ex.to_dict())
            entry["sizes"] = list(ex.sizes)
            se = ex.se if ex.se > 0 else math.nan
            entry["z_alg"] = (ex.value - th["alg"]) / se
            entry["z_gs"] = (ex.value - th["gs"]) / se
            others = [
                extrapolate(sizes, samples, e, level, n_boot, seed=len(fits))
                for e in OTHER_LAWS
                if abs(e - k) > 1e-9
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
            entry["laws_kept"] = [law["exponent"] for law in _kept_laws(entry)]
            # usually one region; two when the data reject the law between two kept ones
            regions = [_span(run) for run in _regions(entry)]
            entry["law_regions"] = [list(r) for r in regions]
            entry["law_low"] = min(lo for lo, _ in regions)
            entry["law_high"] = max(hi for _, hi in regions)
            fits.append(entry)
    missing = len(spec.tasks()) - len(rows)
    degrees = {m.name: m.mixture.max_degree for m in spec.mixtures}
    rep = Report(spec, groups, fits, theory, [], missing, cost=cost_table(rows, degrees))
    rep.findings = _findings(rep, _by_seed(rows))
    return rep


def _laws(f: dict[str, Any]) -> list[dict[str, Any]]:
    """The fit's laws, the chosen one first: exponent, interval and the law's test fit_p."""
    return [f, *(f.get("other_laws") or [])]


def _rejected(law: dict[str, Any]) -> bool:
    """The law's own test rejects it (fit_p < FIT_LEVEL; NaN, with no degree of freedom or
    no spread, rejects nothing)."""
    p = law.get("fit_p", math.nan)
    return p is not None and math.isfinite(p) and p < FIT_LEVEL


def _kept_laws(f: dict[str, Any]) -> list[dict[str, Any]]:
    """The laws the verdicts read: those the data do not reject, or all when every one is."""
    laws = _laws(f)
    return [law for law in laws if not _rejected(law)] or laws


def _powers(laws: list[dict[str, Any]]) -> str:
    """Laws as text: "n^(-1)", "n^(-1/2) and n^(-1)", "n^(-1/2), n^(-2/3) and n^(-1)"."""
    names = [_power(law["exponent"]) for law in sorted(laws, key=lambda law: law["exponent"])]
    return names[0] if len(names) == 1 else f"{', '.join(names[:-1])} and {names[-1]}"


def _regions(f: dict[str, Any]) -> list[list[dict[str, Any]]]:
    """The kept laws in runs of neighbours (in exponent order, no rejected law between them).
    An exponent between two neighbours that both fit fits too, so a run's region is the span
    of its laws' intervals; a rejected law between two kept ones splits them."""
    kept = _kept_laws(f)
    runs: list[list[dict[str, Any]]] = [[]]
    for law in sorted(_laws(f), key=lambda law: law["exponent"]):
        if any(law is k for k in kept):
            runs[-1].append(law)
        elif runs[-1]:
            runs.append([])
    return [run for run in runs if run]


def _span(run: list[dict[str, Any]]) -> tuple[float, float]:
    return min(law["low"] for law in run), max(law["high"] for law in run)


def _law_span(f: dict[str, Any]) -> str:
    """The exponents of the laws kept, as text: "n^(-1/2) to n^(-1)", "n^(-1)"."""
    regions = _regions(f)
    if len(regions) > 1:
        return _powers([law for run in regions for law in run])
    ks = [law["exponent"] for law in regions[0]]
    return _power(ks[0]) if len(ks) == 1 else f"{_power(ks[0])} to {_power(ks[-1])}"


def _over_text(f: dict[str, Any]) -> str:
    """The range the verdicts read, for the finding: "over n^(-1/2) to n^(-1): a, b"."""
    spans = [_span(run) for run in _regions(f)]
    form = "[{:.4f}, {:.4f}]" if len(spans) > 1 else "{:.4f}, {:.4f}"
    return f"over {_law_span(f)}: " + " and ".join(form.format(*span) for span in spans)


def _power(k: float) -> str:
    """n^(-k) as text, a simple fraction where k is one: "n^(-2/3)", "n^(-1)", "n^(-0.55)"."""
    frac = Fraction(k).limit_denominator(12)
    if abs(float(frac) - k) > 1e-9:
        return f"n^(-{k:.3g})"
    return f"n^(-{frac})"


def _z_text(f: dict[str, Any], z: float) -> str:
    """z in standard errors, with the Student t degrees of freedom when they are few."""
    nu = f.get("t_dof")
    few = nu is not None and math.isfinite(nu) and nu < 10
    return f"{z:+.1f} s.e." + (f" with {nu:.1f} degrees of freedom" if few else "")


def _verdict(f: dict[str, Any], target: float, z: float, what: str) -> str:
    """The fit ``f`` against ``target``, reading the laws kept (:func:`_kept_laws`) in their
    regions (:func:`_regions`): "consistent with" when ``target`` lies in the printed interval
    of the chosen law and the data do not reject that law (a test at 1 - level); "only under"
    another law when it lies in a region (naming the kept laws whose intervals hold it, or
    "a law between" the two neighbours whose intervals it falls between); "below" or "above"
    outside every region, measured from the chosen law's value when it is kept, else from the
    nearest kept law's. Without a finite interval, |z| <= Z_CONSISTENT decides."""
    value, low, high = f["value"], f["low"], f["high"]
    if not math.isfinite(z):
        return f"compared with {what} {target:.4f}: no error estimate"
    zt = _z_text(f, z)
    if not (math.isfinite(low) and math.isfinite(high)):
        if abs(z) <= Z_CONSISTENT:
            return f"consistent with {what} = {target:.4f} ({zt})"
        side = "below" if value < target else "above"
        return f"{abs(value - target):.4f} {side} {what} = {target:.4f} ({zt})"
    kept = _kept_laws(f)
    chosen_kept = any(law is f for law in kept)
    chosen = _power(f["exponent"])
    rejected = "" if chosen_kept else ", which the data reject"
    if chosen_kept and low <= target <= high:
        return f"consistent with {what} = {target:.4f} ({zt})"
    for run in _regions(f):
        lo, hi = _span(run)
        if not lo <= target <= hi:
            continue
        holding = [law for law in run if law["low"] <= target <= law["high"]]
        if holding:
            under = _powers(holding)
        else:  # between two neighbours' intervals: an exponent between them fits
            pairs = (list(pair) for pair in itertools.pairwise(run))
            pair = next(p for p in pairs if _span(p)[0] <= target <= _span(p)[1])
            under = f"a law between {_powers(pair)}"
        return (
            f"consistent with {what} = {target:.4f} only under {under} ({zt} under"
            f" {chosen}{rejected})"
        )
    if chosen_kept:
        side = "below" if value < target else "above"
        others = [law for law in kept if law is not f]
        plural = "s" if len(others) > 1 else ""
        beyond = f"; outside the interval{plural} under {_powers(others)} too" if others else ""
        return (
            f"{abs(value - target):.4f} {side} {what} = {target:.4f} ({zt} under {chosen}{beyond})"
        )
    near = min(kept, key=lambda law: abs(law["value"] - target))
    side = "below" if near["value"] < target else "above"
    return (
        f"{abs(near['value'] - target):.4f} {side} {what} = {target:.4f} under"
        f" {_power(near['exponent'])}, the nearest law the data keep (the rejected {chosen}"
        f" gives {value:.4f}, {zt})"
    )


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


def _against_theory(f: dict[str, Any]) -> str:
    """The fit's value set beside ALG and GS. Beyond :func:`_verdict` on ALG: when the mixture
    has a gap GS > ALG (none is predicted where GS = ALG, whatever the solver's last digits),
    the fit has an error estimate and one region of kept laws (:func:`_regions`) holds both,
    the data cannot tell them apart; and a point estimate above GS is named, since GS bounds
    every n -> infinity energy (for the chosen law when the data keep it)."""
    value, low, high, alg, gs = f["value"], f["low"], f["high"], f["alg"], f["gs"]
    finite = math.isfinite(low) and math.isfinite(high) and math.isfinite(gs)
    finite = finite and math.isfinite(f["z_alg"])
    gap = finite and not f.get("gs_equals_alg", False) and gs - alg > TIE_RELATIVE * abs(gs)
    chosen_kept = any(law is f for law in _kept_laws(f))
    region = next((r for r in _regions(f) if _span(r)[0] <= alg and gs <= _span(r)[1]), None)
    if gap and region is not None:
        both = [law for law in region if law["low"] <= alg and gs <= law["high"]]
        if chosen_kept and any(law is f for law in both):
            where = "the interval"
        elif both:
            where = f"the interval under {_powers(both)}"
        else:
            where = f"the intervals under {_powers(region)}"
        text = (
            f"cannot tell ALG = {alg:.4f} ({_z_text(f, f['z_alg'])}) from GS = {gs:.4f} "
            f"({_z_text(f, f['z_gs'])}): both lie inside {where}"
        )
    else:
        text = _verdict(f, alg, f["z_alg"], "ALG")
    if finite and chosen_kept and value > gs and low <= gs:
        text += (
            f"; the point estimate lies above GS = {gs:.4f}, which bounds every n -> infinity"
            f" energy, so the value lies in [{low:.4f}, {gs:.4f}]"
        )
    return text


def _law_test_text(f: dict[str, Any]) -> str:
    """What the laws' own tests say, for the finding (empty when every law passes)."""
    if f["dof"] == 0:
        return ""
    if not math.isfinite(f["chi2"]):
        return (
            "; the samples have no spread, so nothing measures how well the"
            f" {_power(f['exponent'])} law fits"
        )
    laws = _laws(f)
    rejected = [law for law in laws if _rejected(law)]
    if not rejected:
        return ""
    tests = "; ".join(
        f"{_power(law['exponent'])}: chi2 = {law['chi2']:.1f}, p = {law['fit_p']:.2g}"
        for law in rejected
    )
    if len(rejected) == len(laws):
        return (
            f"; no law from {_power(min(law['exponent'] for law in laws))} to"
            f" {_power(max(law['exponent'] for law in laws))} fits ({tests}; {f['dof']} degree(s)"
            " of freedom), so every interval understates the uncertainty"
        )
    return (
        f"; the data reject {_powers(rejected)} ({tests}; {f['dof']} degree(s) of freedom),"
        f" so the verdicts read {_powers(_kept_laws(f))}"
    )


def _theory_finding(name: str, th: dict[str, Any]) -> str:
    """What the theory predicts for one mixture, in a sentence."""
    alg, gs, gap = th["alg"], th["gs"], th["gap_gs_alg"]
    solver = f"Parisi solver: GS - ALG = {gap:.1e}" if math.isfinite(gs) else "no Parisi GS"
    if th["full_rsb"]:
        return f"{name}: the full-RSB criterion holds, so GS = ALG = {alg:.4f} ({solver})."
    if th.get("gs_equals_alg"):
        return f"{name}: GS = ALG = {alg:.4f} predicted ({th['verdict']}; {solver})."
    if not math.isfinite(gs):
        return (
            f"{name}: the full-RSB criterion fails, so GS > ALG = {alg:.4f} is predicted; the"
            " Parisi solver gave no ground state to measure the gap."
        )
    size = f"{gap:.4f}" if gap >= 1e-4 else f"{gap:.1e}"
    return (
        f"{name}: the full-RSB criterion fails; GS = {gs:.4f} exceeds ALG = {alg:.4f} by"
        f" {size}, a gap no algorithm of this kind is predicted to close."
    )


def _findings(rep: Report, seeds: dict) -> list[str]:
    out = []
    for name, th in rep.theory.items():
        out.append(_theory_finding(name, th))
    out.extend(_unfinished_runs(rep.groups))
    for f in rep.fits:
        if f.get("value") is None:
            out.append(f"{f['mixture']}, {f['method']}: no extrapolation ({f['note']}).")
            continue
        lvl = int(round(100 * f["level"]))
        kept = _kept_laws(f)
        over = ""
        if len(kept) > 1 or kept[0] is not f:
            over = "; " + _over_text(f)
        text = (
            f"{f['mixture']}, {f['method']}: e_inf = {f['value']:.4f} "
            f"[{lvl}%: {f['low']:.4f}, {f['high']:.4f}{over}] from n = "
            f"{', '.join(str(n) for n in f['sizes'])}; " + _against_theory(f)
        )
        text += _law_test_text(f)
        if f["dof"] == 0:
            text += (
                f"; with {len(f['sizes'])} sizes the fit has no degree of freedom left, so"
                f" nothing checks the {_power(f['exponent'])} law"
            )
        gs = f["gs"]
        if math.isfinite(gs) and math.isfinite(f["law_low"]) and f["law_low"] > gs:
            text += (
                f"; WARNING: the whole interval lies above the ground state GS = {gs:.4f}, which"
                " bounds every n -> infinity energy: the sizes are too small (or too few) for"
                " this extrapolation"
            )
        out.append(text + ".")
    # head-to-head at the largest common size, per mixture and pair of methods
    methods = [m.name for m in rep.spec.methods]
    for mix, th in rep.theory.items():
        for a, b in itertools.combinations(methods, 2):
            line = _head_to_head(mix, a, b, seeds, th)
            if line is not None:
                out.append(line)
    for c in rep.cost:
        if c["exponent"] is not None:
            ends = c["median_seconds_run"]
            sizes = f"{c['sizes'][0]}..{c['sizes'][-1]}"
            span = f"over n = {sizes} ({ends[0]:.3g} s to {ends[-1]:.3g} s"
            if c.get("fixed_cost_bound"):
                trend = "falls as n grows" if c["exponent"] < 0 else "grows more slowly than n"
                out.append(
                    f"{c['mixture']}, {c['method']}: a run's median time {trend}"
                    f" (n^{c['exponent']:.2f}) {span}): at these sizes fixed per-run costs,"
                    " not the kernel passes, set it; larger n are needed to measure how the"
                    " method scales."
                )
            else:
                se = c.get("exponent_se")
                pm = f" +- {se:.2f}" if se is not None else ""
                text = (
                    f"{c['mixture']}, {c['method']}: a run's median time grows like "
                    f"n^{c['exponent']:.2f}{pm} {span}; largest degree P = {c['max_degree']})"
                )
                if c.get("rising"):
                    text += (
                        f"; the slope rises with n (n^{c['exponent_last']:.2f} between the two"
                        " largest sizes): fixed per-run costs still weigh at the smaller sizes,"
                        " so the exponent at large n is likely higher than this fit"
                    )
                out.append(text + ".")
    if rep.missing:
        out.append(f"{rep.missing} task(s) of the study have no result yet; rerun the sweep.")
    return out


def _unfinished_runs(groups: list[dict[str, Any]]) -> list[str]:
    """A warning per (mixture, method) whose runs include end points that are no local
    maximum: their energies sit below the maximum the method was heading for, so means,
    extrapolation and comparisons of that method are biased low."""
    out = []
    for (mix, method), members in itertools.groupby(
        groups, key=lambda g: (g["mixture"], g["method"])
    ):
        members = list(members)
        bad = sum(g["not_local_max"] for g in members)
        if bad:
            total = sum(g["count"] for g in members)
            where = ", ".join(
                f"{g['not_local_max']} at n = {g['n']}" for g in members if g["not_local_max"]
            )
            out.append(
                f"{mix}, {method}: WARNING: {bad} of {total} runs ended at no local maximum"
                f" ({where}); their energies are below the maximum the method was heading for,"
                " so this method's means and e_inf are biased low. Give it more iterations"
                " (gradient: --max-iter) or keep its final polish on, and rerun."
            )
    return out


def _head_to_head(mix: str, a: str, b: str, seeds: dict, th: dict[str, Any]) -> str | None:
    """Methods a and b on the same instances of ``mix`` at their largest common size (paired
    over seeds; both start from each seed's random direction), or None without two seeds."""
    common = sorted(n for (m1, me, n) in seeds if m1 == mix and me == a and (mix, b, n) in seeds)
    if not common:
        return None
    n = common[-1]
    pa_, pb_ = seeds[(mix, a, n)], seeds[(mix, b, n)]
    both = sorted(set(pa_) & set(pb_))
    if len(both) < 2:
        return None
    scale = th["gs"] if math.isfinite(th["gs"]) else th["alg"]  # GS is NaN if unsolved
    tie = TIE_RELATIVE * abs(scale)
    c = paired_comparison([pa_[s] - pb_[s] for s in both], tie)
    diff, z = c["diff"], c["z"]
    if c["nonzero"] == 0:
        return (
            f"{mix}, n = {n}: {a} and {b} stopped at the same point (energies within "
            f"{tie:.0e} per spin) on all {len(both)} paired seeds."
        )
    sign = (
        f"{a} higher on {c['higher']}, {b} on {c['lower']}, the same point on "
        f"{c['ties']} (sign test over the {c['nonzero']} that differ: p = {c['sign_p']:.2g})"
    )
    by_mean = math.isfinite(c["t_p"]) and c["t_p"] < MEAN_LEVEL
    by_sign = math.isfinite(c["sign_p"]) and c["sign_p"] < SIGN_LEVEL
    if c["se"] > 0:
        mean = f"{z:+.1f} s.e., paired t-test over {len(both)} seeds: p = {c['t_p']:.2g}"
    else:
        mean = f"the same difference on each of the {len(both)} paired seeds"
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


def _grid_line(spec: StudySpec) -> str:
    """The study grid in one sentence: sizes (a mixture's own, where it has them), seeds,
    storage type and methods with their options."""
    own = [m for m in spec.mixtures if m.sizes and tuple(m.sizes) != tuple(spec.sizes)]
    sizes = f"Sizes {list(spec.sizes)}"
    if own:
        if len(own) == len(spec.mixtures):
            sizes = "Sizes"
        sizes += "".join(f"; {m.name}: {list(m.sizes)}" for m in own)
    methods = ", ".join(
        f"{m.name} ({', '.join(f'{k}={v}' for k, v in m.options)})" for m in spec.methods
    )
    storage = "float32 storage (float64 arithmetic)" if spec.dtype == "float32" else "float64"
    return f"{sizes}; {counted(len(spec.seeds), 'seed')}; {storage}; methods {methods}."


def _markdown(rep: Report) -> str:
    spec = rep.spec
    lvl = int(round(100 * rep.spec_level()))
    lines = [
        "# orthoclimb study report",
        "",
        "Energies are per spin, H(x)/n on the unit sphere, maximized. Mean over seeds and its "
        "standard error s.e. = sd/sqrt(count). Extrapolation: weighted least squares of the "
        f"mean in n^(-{_exp_text(rep)}) (by default k = 2/3, the scale on which the top of a "
        "random spectrum fluctuates (Tracy-Widom); for an optimizer's energy a working "
        f"assumption), {lvl}% bootstrap interval over seeds (stretched by Student t for few "
        "seeds); z = (e_inf - theory)/s.e.(e_inf). That interval is statistical only: the "
        "fit is repeated under the exponents of the last column, each law is tested (p, a "
        "parametric bootstrap of chi2), and 'over laws' spans the intervals of the laws the "
        "data do not reject (when it rejects a law between two kept ones, the findings give "
        "the two ranges apart); a theory value outside the interval but inside that range is "
        "consistent only under another law. Head-to-head comparisons pair the methods "
        "seed by seed (paired t-test on the mean, sign test on the counts): on each instance "
        "both start from the same seeded random direction, and runs whose energies differ "
        f"by at most {TIE_RELATIVE:.0e} x GS count as the same point (a tie).",
        "",
        _grid_line(spec),
        "",
        "## Findings",
        "",
        *[f"- {f}" for f in rep.findings],
        "",
        "## Theory",
        "",
        "| mixture | gammas | full RSB | GS = ALG predicted | ALG | GS | GS - ALG |",
        "| --- | --- | --- | --- | ---: | ---: | ---: |",
    ]
    for name, th in rep.theory.items():
        lines.append(
            f"| {name} | {th['gammas']} | {'holds' if th['full_rsb'] else 'fails'} | "
            f"{'yes' if th.get('gs_equals_alg', th['full_rsb']) else 'no'} | "
            f"{th['alg']:.6f} | {th['gs']:.6f} | {th['gap_gs_alg']:.2e} |"
        )
    lines += [
        "",
        "## Extrapolation",
        "",
        f"| mixture | method | e_inf | {lvl}% interval | over laws | s.e. | ALG | z(ALG) | GS |"
        " z(GS) | chi2/dof (p) | e_inf, other laws |",
        "| --- | --- | ---: | --- | --- | ---: | ---: | ---: | ---: | ---: | ---: | --- |",
    ]
    for f in rep.fits:
        if f.get("value") is None:
            lines.append(f"| {f['mixture']} | {f['method']} | -- | {f['note']} | | | | | | | | |")
            continue
        lines.append(
            f"| {f['mixture']} | {f['method']} | {f['value']:.4f} | [{f['low']:.4f}, "
            f"{f['high']:.4f}] | [{f['law_low']:.4f}, {f['law_high']:.4f}] | {f['se']:.4f} | "
            f"{f['alg']:.4f} | {f['z_alg']:+.1f} | {f['gs']:.4f} | {f['z_gs']:+.1f} | "
            f"{f['chi2']:.1f}/{f['dof']} ({_p_text(f['fit_p'])}) | "
            + ", ".join(f"{o['value']:.4f} (k = {o['exponent']:.3g})" for o in f["other_laws"])
            + " |"
        )
    lines += [
        "",
        *cost_markdown(rep.cost),
        "",
        "## Per size",
        "",
        "| mixture | method | n | mean | s.e. | count |",
        "| --- | --- | ---: | ---: | ---: | ---: |",
    ]
    for g in rep.groups:
        lines.append(
            f"| {g['mixture']} | {g['method']} | {g['n']} | {g['mean']:.4f} | {g['se']:.4f} "
            f"| {g['count']} |"
        )
    if rep.files:
        lines += ["", "## Files", ""] + [f"- {k}: `{v}`" for k, v in rep.files.items()]
    return "\n".join(lines) + "\n"


def _p_text(p: float) -> str:
    return "--" if not math.isfinite(p) else f"p = {p:.2g}"


def _exp_text(rep: Report) -> str:
    for f in rep.fits:
        if f.get("exponent") is not None:
            k = float(f["exponent"])
            return "2/3" if abs(k - 2 / 3) < 1e-12 else f"{k:.4g}"
    return "k"


def _plots(rep: Report, data: dict, folder: Path) -> dict[str, str]:
    from matplotlib.figure import Figure

    mixtures = list(rep.theory)
    methods = [m.name for m in rep.spec.methods]
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
        ax.axhline(th["alg"], color="k", ls="--", lw=1, label=f"ALG {th['alg']:.4f}")
        if abs(th["gap_gs_alg"]) > 1e-4:
            ax.axhline(th["gs"], color="0.4", ls=":", lw=1.5, label=f"GS {th['gs']:.4f}")
        ax.set_xlim(-0.03 * max(xmax, 1e-3), 1.05 * max(xmax, 1e-3))
        ax.set_xlabel(f"n^(-{k:.3g})")
        ax.set_ylabel("energy per spin H(x)/n")
        ax.set_title(f"{mix}  (gammas {th['gammas']})", fontsize=10)
        ax.legend(fontsize=8)
    out = {"energy_vs_n": str(save_figure_atomic(fig, folder / "energy_vs_n.png", dpi=110))}

    fig = Figure(figsize=(5.2 * len(mixtures), 4.2), layout="constrained")
    axes = fig.subplots(1, len(mixtures), squeeze=False)[0]
    rng = np.random.default_rng(0)
    for ax, mix in zip(axes, mixtures, strict=True):
        sizes = sorted({n for (m, _, n) in data if m == mix})
        width = 0.8 / max(1, len(methods))
        for j, meth in enumerate(methods):
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
                    label=meth if i == 0 else None,
                )
                ax.hlines(v.mean(), pos - 0.4 * width, pos + 0.4 * width, color="k", lw=1.5)
        th = rep.theory[mix]
        ax.axhline(th["alg"], color="k", ls="--", lw=1, label="ALG")
        if abs(th["gap_gs_alg"]) > 1e-4:
            ax.axhline(th["gs"], color="0.4", ls=":", lw=1.5, label="GS")
        ax.set_xticks(range(len(sizes)), [str(n) for n in sizes])
        ax.set_xlabel("n")
        ax.set_ylabel("energy per spin over seeds (bar: mean)")
        ax.set_title(mix, fontsize=10)
        ax.legend(fontsize=8)
    out["distribution"] = str(save_figure_atomic(fig, folder / "distribution.png", dpi=110))
    return out


def write_report(
    folder: str | os.PathLike,
    exponent: float | None = None,
    level: float = 0.9,
    n_boot: int = 2000,
    plots: bool = True,
) -> Report:
    """Compute the report and write report.md, report.json and the plots into ``folder``."""
    folder = Path(folder)
    rep = build_report(folder, exponent, level, n_boot)
    data = _groups(Store(folder, rep.spec).rows())
    if plots:
        rep.files.update(_plots(rep, data, folder))
    rep.files["markdown"] = str(folder / "report.md")
    rep.files["json"] = str(folder / "report.json")
    write_text_atomic(folder / "report.md", _markdown(rep))
    write_json_atomic(folder / "report.json", rep.to_dict())
    return rep
