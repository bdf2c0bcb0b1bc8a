"""The study report's words, computed from its numbers (:mod:`.report`): the findings (one
sentence per theory verdict, extrapolation, comparison of methods, cost, and a caution for
each thing that weakens them), report.md's tables and text, and the caveat words of the
tables with their legend."""

from __future__ import annotations

import itertools
import math
from typing import TYPE_CHECKING, Any

from ..theory.parisi import DEFAULT_TOL
from .cost import above_degree, cost_markdown
from .engine import counted
from .grid import StudySpec
from .laws import (
    against_theory,
    fit_laws,
    is_rejected,
    kept_laws,
    law_test_text,
    over_text,
    power_text,
)
from .limit_difference import limit_difference_line, limit_difference_markdown
from .paired import TIE_RELATIVE, head_to_head
from .points import overlap_markdown

if TYPE_CHECKING:
    from .report import Report


#: What the tables' caveat words mean (the findings say each in full).
CAVEATS_LEGEND = (
    "'unchecked': no degree of freedom tests the law; 'no law fits' or a law 'rejected': the"
    " laws' chi2 tests; 'above GS': the interval lies above the ground state; 'mixed K': the"
    " default K at its floor or cap at some sizes only; 'n = N weighs W %': one size's"
    " unusually small spread gives it most of the fit's weight; the findings give each in full"
)


def caveats(f: dict[str, Any]) -> str:
    """The remarks of a fit's finding in a few words, for the tables (a trial read the z
    columns and missed them): 'unchecked', 'no law fits' or 'n^(-2/3) rejected', 'above GS',
    'mixed K', 'n = N weighs W %'; '' when there are none."""
    out = []
    if f["dof"] == 0:
        out.append("unchecked")
    elif all(is_rejected(law) for law in fit_laws(f)):
        out.append("no law fits")
    elif is_rejected(f):
        out.append(f"{power_text(f['exponent'])} rejected")
    if math.isfinite(f["gs"]) and math.isfinite(f["law_low"]) and f["law_low"] > f["gs"]:
        out.append("above GS")
    if f.get("steps_by_n"):
        out.append("mixed K")
    if f.get("heaviest"):
        n, share = f["heaviest"][:2]
        out.append(f"n = {n} weighs {100 * share:.0f} %")
    return ", ".join(out)


def left_out_text(left_out: list[list[int]]) -> str:
    """'; n = 50 left out (1 seed; a fit needs 2 per size)', or '' when none was."""
    if not left_out:
        return ""
    sizes = ", ".join(f"n = {n} ({c} seed{'s' if c != 1 else ''})" for n, c in left_out)
    return f"; left out: {sizes}, a fit needs 2 seeds per size"


# the tolerance of the ground states the report computes (theory_values: the default)
_GS_TOL = DEFAULT_TOL


def theory_finding(name: str, th: dict[str, Any]) -> str:
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
    if abs(gap) < _GS_TOL:  # unresolved by the solver (a user trial: 1.0e-07 "cannot close")
        return (
            f"{name}: the full-RSB criterion fails, but GS = {gs:.4f} and ALG = {alg:.4f} differ"
            f" by only {gap:+.1e}, within the Parisi solver's default tolerance ({_GS_TOL:.0e}):"
            " for this study they are one value."
        )
    size = f"{gap:.4f}" if gap >= 1e-4 else f"{gap:.1e}"
    return (
        f"{name}: the full-RSB criterion fails; GS = {gs:.4f} exceeds ALG = {alg:.4f} by"
        f" {size}, a gap that algorithms whose output is Lipschitz in the disorder "
        + (
            "cannot close (Huang-Sellke 2021, for mixtures of even degrees: gradient descent,"
            " approximate message passing and Langevin dynamics run for bounded time)."
            if th.get("even")
            else "are predicted not to close (proved for mixtures of even degrees only,"
            " Huang-Sellke 2021)."
        )
    )


#: The first version whose sampler takes ln, sin and cos from the compiled-in libm crate.
SAMPLER_CHANGED = (0, 2, 0)


def mixed_versions_text(rows: list[dict[str, Any]]) -> str | None:
    """A finding when the rows were written by more than one version of orthoclimb (a study
    extended after an upgrade), None otherwise; it says when they straddle 0.2.0, whose
    sampler gives other last bits (so the same seed is a slightly different instance)."""
    counts: dict[str, int] = {}
    for r in rows:
        v = r.get("version")
        key = v if isinstance(v, str) and v else "no version recorded"
        counts[key] = counts.get(key, 0) + 1
    if len(counts) < 2:
        return None

    def parsed(v: str) -> tuple[int, ...] | None:
        try:
            return tuple(int(part) for part in v.split(".")[:3])
        except ValueError:
            return None  # no version recorded, or a development version string

    versions = {v: parsed(v) for v in counts}
    # in version order (0.10.0 after 0.2.0), the unparsed ones first
    order = sorted(counts, key=lambda v: (versions[v] is not None, versions[v] or (), v))
    listed = ", ".join(f"{v}: {counts[v]} rows" for v in order)
    text = f"the rows were written by {len(counts)} versions of orthoclimb ({listed})"
    known = [p for p in versions.values() if p is not None]
    if any(p < SAMPLER_CHANGED for p in known) and any(p >= SAMPLER_CHANGED for p in known):
        text += (
            "; instances sampled before 0.2.0 differ from later ones in the last bit of about"
            " 6 % of their coefficients (the sampler's math library changed), far below the"
            " spread over seeds, but the same seed is not bitwise the same instance"
        )
    return text + "."


def mixed_code_text(rows: list[dict[str, Any]]) -> str | None:
    """A finding when rows of one version of orthoclimb were written by different code (their
    ``code`` digests differ: an editable install edited between runs, or a worker of an
    external cluster importing another copy of the package), None otherwise. A user trial's
    worker ran a copy whose gradient ascent started elsewhere: 4 of 16 rows came from it, 2
    energies moved by up to 0.08 per spin, and nothing said so (the versions were equal)."""
    digests: dict[str, dict[str, int]] = {}
    for r in rows:
        version, code = r.get("version"), r.get("code")
        if isinstance(version, str) and isinstance(code, str) and code:
            counts = digests.setdefault(version, {})
            counts[code] = counts.get(code, 0) + 1
    parts = [
        f"{version}: " + ", ".join(f"{c} ({k} rows)" for c, k in sorted(counts.items()))
        for version, counts in sorted(digests.items())
        if len(counts) > 1
    ]
    if not parts:
        return None
    return (
        "rows of the same version of orthoclimb were written by different code (the rows' code"
        f" digests: {'; '.join(parts)}): an edited or rebuilt package, or a worker importing"
        " another copy of it; if that code changed what a method computes, its runs are not"
        " comparable (the table's worker column says where each row ran)."
    )


def report_findings(rep: Report, seeds: dict) -> list[str]:
    out = []
    for name, th in rep.theory.items():
        out.append(theory_finding(name, th))
    out.extend(_unfinished_runs(rep.groups))
    for f in rep.fits:
        if f.get("value") is None:
            out.append(f"{f['mixture']}, {f['method']}: no extrapolation ({f['note']}).")
            continue
        lvl = level_text(f["level"])
        kept = kept_laws(f)
        over = ""
        if len(kept) > 1 or kept[0] is not f:
            over = "; " + over_text(f)
        text = (
            f"{f['mixture']}, {f['method']}: e_inf = {f['value']:.4f} "
            f"[{lvl}%: {f['low']:.4f}, {f['high']:.4f}{over}] from n = "
            f"{', '.join(str(n) for n in f['sizes'])}"
            f"{left_out_text(f.get('left_out', []))}; " + against_theory(f)
        )
        if f.get("e_k") is not None:
            text += (
                f"; K = {f['steps_k']} at every size, and a path of K points is predicted to"
                f" reach E_K = {f['e_k']:.4f} as n -> infinity (its coarse steps fall short of"
                f" ALG by {f['alg'] - f['e_k']:.4f} however large n; a second-order prediction,"
                f" not a proved limit): {f['z_k']:+.1f} s.e. from it"
            )
            if abs(f["z_k"]) >= 3.0:  # a user trial: -4.7 s.e., and no conclusion drawn
                text += (
                    "; that far off, either these sizes are short of the n -> infinity regime"
                    " or the prediction is: read this series' extrapolation with caution"
                )
        if f.get("mixed_k"):
            text += "; " + f["mixed_k"]
        if f.get("heaviest"):
            n, share, ratio, count = f["heaviest"]
            text += (
                f"; n = {n} carries {100 * share:.0f} % of the fit's weights 1/s^2, its {count}"
                f" seeds' variance {ratio:.2f} of the other sizes' trend in n: the line is held"
                " to its mean on the strength of that one small spread, and more seeds there"
                " would show whether it is real"
            )
        text += law_test_text(f)
        if f["dof"] == 0:
            text += (
                f"; with {len(f['sizes'])} sizes the fit has no degree of freedom left, so"
                f" nothing checks the {power_text(f['exponent'])} law"
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
            pair = [c for c in rep.comparisons if (c["mixture"], c["a"], c["b"]) == (mix, a, b)]
            line = head_to_head(mix, a, b, seeds, th, records=pair)
            if line is not None:
                out.append(line)
            for d in rep.limit_differences:
                if (d["mixture"], d["a"], d["b"]) == (mix, a, b):
                    out.append(limit_difference_line(d))
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
                step = c.get("exponent_per_step")
                if step is not None and abs(step - c["exponent"]) >= 0.005:  # else the same
                    # steps at every size (a fixed K): the run's exponent says it already
                    text += f", one step's like n^{step:.2f}"
                if above_degree(c):
                    text += (
                        f"; one step grows faster than its kernel passes can make it (P ="
                        f" {c['max_degree']}; steps also do n^2 and, once per run, n^3 work):"
                        " the coefficients outgrowing a cache between these"
                        " sizes, or other work on the machine during the sweep, set that"
                        " growth, not the method"
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
    if rep.stray_files:
        shown = ", ".join(rep.stray_files[:3]) + (", ..." if len(rep.stray_files) > 3 else "")
        out.append(
            f"{len(rep.stray_files)} file(s) in rows/ are no row of this study's tasks and were"
            f" not read ({shown}): a row of another study or configuration, or a file put"
            " there by hand."
        )
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
        bad = sum(g["not_local_max"] or 0 for g in members)  # None: never checked
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


def grid_line(spec: StudySpec) -> str:
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


def level_text(level: float) -> str:
    """A confidence level as a percentage without rounding it off: 0.9 -> "90", 0.996 ->
    "99.6" (int(round()) printed 0.996 as a "100%" interval)."""
    return f"{100 * level:.6g}"


def report_markdown(rep: Report) -> str:
    spec = rep.spec
    lvl = level_text(rep.spec_level())
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
        "consistent only under another law, and one inside it but outside a kept law's "
        "interval is named with that law ('not under'). Head-to-head comparisons pair the methods "
        "seed by seed (paired t-test on the mean, sign test on the counts): on each instance "
        "the methods start from the same seeded random direction (Hessian ascent with a"
        " degree-2 term and no field along the top eigenvector of Hess H(0)), and runs whose"
        " energies differ "
        f"by at most {TIE_RELATIVE:.0e} x GS count as the same point (a tie; for a mixture of"
        " even degrees only, H(-x) = H(x), so a tie may be the mirror point -x)."
        + (
            " A method that ends with a polish (a local ascent to a checked local maximum) is"
            " also reported as '<method> before polish': the runs' energies where the method"
            " itself ended (for Hessian ascent, the point ALG describes); the polish may carry"
            " two methods to the same local maximum."
            if rep.before_polish
            else ""
        ),
        "",
        grid_line(spec),
        "",
        "## Findings",
        "",
        *[f"- {f}" for f in rep.findings],
        "",
        "## Theory",
        "",
        "| mixture | gammas | xi(q) | full RSB | GS = ALG predicted | ALG | GS | GS - ALG |",
        "| --- | --- | --- | --- | --- | ---: | ---: | ---: |",
    ]
    for name, th in rep.theory.items():
        lines.append(
            f"| {name} | {th['gammas']} | {th['xi']} | {'holds' if th['full_rsb'] else 'fails'} | "
            f"{'yes' if th.get('gs_equals_alg', th['full_rsb']) else 'no'} | "
            f"{th['alg']:.6f} | {th['gs']:.6f} | {th['gap_gs_alg']:.2e} |"
        )
    lines += [
        "",
        "## Extrapolation",
        "",
        f"| mixture | method | e_inf | {lvl}% interval | over laws | s.e. | ALG | z(ALG) | GS |"
        " z(GS) | chi2/dof (p) | e_inf, other laws | caveats |",
        "| --- | --- | ---: | --- | --- | ---: | ---: | ---: | ---: | ---: | ---: | --- | --- |",
    ]
    for f in rep.fits:
        if f.get("value") is None:
            lines.append(f"| {f['mixture']} | {f['method']} | -- | {f['note']} | | | | | | | | | |")
            continue
        lines.append(
            f"| {f['mixture']} | {f['method']} | {f['value']:.4f} | [{f['low']:.4f}, "
            f"{f['high']:.4f}] | [{f['law_low']:.4f}, {f['law_high']:.4f}] | {f['se']:.4f} | "
            f"{f['alg']:.4f} | {f['z_alg']:+.1f} | {f['gs']:.4f} | {f['z_gs']:+.1f} | "
            f"{f['chi2']:.1f}/{f['dof']} ({_p_text(f['fit_p'])}) | "
            + ", ".join(f"{o['value']:.4f} (k = {o['exponent']:.3g})" for o in f["other_laws"])
            + f" | {caveats(f)} |"
        )
    lines += [
        "",
        f"Caveats: {CAVEATS_LEGEND}.",
        "",
        *cost_markdown(rep.cost),
        "",
        *_comparison_markdown(rep.comparisons),
        *limit_difference_markdown(rep.limit_differences),
        *overlap_markdown(rep.overlaps),
        "## Per size",
        "",
        "Steps: the median of the runs' K (Hessian ascent), iterations (gradient ascent) or"
        " Langevin steps (anneal).",
        "",
        "| mixture | method | n | mean | s.e. | count | steps |",
        "| --- | --- | ---: | ---: | ---: | ---: | ---: |",
    ]
    for g in rep.groups:
        se = f"{g['se']:.4f}" if math.isfinite(g["se"]) else "--"  # one seed
        steps = "--" if g.get("steps") is None else f"{g['steps']:.10g}"  # 1000000, not 1e+06
        lines.append(
            f"| {g['mixture']} | {g['method']} | {g['n']} | {g['mean']:.4f} | {se} |"
            f" {g['count']} | {steps} |"
        )
    if rep.files:
        lines += ["", "## Files", ""] + [f"- {k}: `{v}`" for k, v in rep.files.items()]
    return "\n".join(lines) + "\n"


def _comparison_markdown(comparisons: list[dict[str, Any]]) -> list[str]:
    """The head-to-head table at every size (the findings name the largest), ending in a
    blank line; none without a pair of methods."""
    if not comparisons:
        return []
    lines = [
        "## Head-to-head per size",
        "",
        "a - b per spin on the same instances: mean difference, its s.e. and the paired t-test;"
        " a higher / b higher / ties, and the sign test over the seeds that differ.",
        "",
        "| mixture | n | a - b | mean | s.e. | t-test p | a higher | b higher | ties |"
        " sign test p |",
        "| --- | ---: | --- | ---: | ---: | ---: | ---: | ---: | ---: | ---: |",
    ]
    for c in comparisons:
        se = f"{c['se']:.4f}" if c["se"] > 0 else "--"
        lines.append(
            f"| {c['mixture']} | {c['n']} | {c['a']} - {c['b']} | {c['diff']:+.4f} | {se} |"
            f" {_p_text(c['t_p'])} | {c['higher']} | {c['lower']} | {c['ties']} |"
            f" {_p_text(c['sign_p'])} |"
        )
    return [*lines, ""]


def _p_text(p: float) -> str:
    return "--" if not math.isfinite(p) else f"p = {p:.2g}"


def _exp_text(rep: Report) -> str:
    for f in rep.fits:
        if f.get("exponent") is not None:
            k = float(f["exponent"])
            return "2/3" if abs(k - 2 / 3) < 1e-12 else f"{k:.4g}"
    return "k"
