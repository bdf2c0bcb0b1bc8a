"""The study report: per-group statistics, finite-size extrapolation, comparison with theory.

Groups are (mixture, method, n). For each: the mean energy per spin over seeds, its standard
error s = sd/sqrt(count) (sd with ddof = 1) and the count. For each (mixture, method) with at
least two sizes: the extrapolation e_inf of the mean in n^(-k) (:mod:`.extrapolate`), repeated
under other exponents and set beside ALG and the Parisi ground state GS of the mixture
(:mod:`.laws`), with z = (e_inf - ALG)/se(e_inf) and (e_inf - GS)/se(e_inf), the "difference
in standard errors". Every pair of methods is compared on the same instances at their largest
common size with two paired seeds or more (:mod:`.paired`). The findings are sentences
computed from these numbers (what was measured, whatever it is; written by
:mod:`.report_text`, as is the markdown). The cost of the runs (median wall seconds per task
at each n and the exponent b of t ~ n^b, :mod:`.cost`) closes the report.

Files written into the study folder, or the folder ``out`` (``report --out``), atomically:
``report.md``, ``report.json``, ``energy_vs_n.png``, ``distribution.png`` and, with kept end
points, ``overlaps.png`` (:mod:`.report_plots`), and the tidy table of the rows,
``results.parquet`` and ``results.csv`` (in the study folder under the sweep's lock, see
:func:`write_report`).
"""

from __future__ import annotations

import contextlib
import itertools
import math
import os
from collections import Counter, defaultdict
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from ..fileio import ensure_folder, json_writer, refuse_folder, write_all_atomic
from .cost import cost_table
from .extrapolate import Extrapolation, check_interval, extrapolate
from .grid import LEGACY_START, StudySpec
from .laws import add_other_laws
from .limit_difference import limit_differences
from .paired import comparisons_per_size
from .points import (
    end_point_overlaps,
    field_directions,
    overlap_lines,
    overlap_summary,
    readable_end_points,
)
from .report_plots import PLOT_FILES, plot_files
from .report_text import (
    CAVEATS_LEGEND,
    caveats,
    left_out_text,
    level_text,
    mixed_code_text,
    mixed_versions_text,
    report_findings,
    report_markdown,
)
from .store import (
    ROWS_DIR,
    TABLE_FILES,
    Store,
    SweepRunningError,
    read_config,
    sweep_lock,
    table_files,
)
from .tasks import theory_values

__all__ = ["Report", "build_report", "write_report"]


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
    overlaps: list[dict[str, Any]] = field(default_factory=list)
    #: the overlap of every instance and pair of methods behind ``overlaps``
    overlaps_by_run: list[dict[str, Any]] = field(default_factory=list)
    #: the series of the groups and fits: the methods, then "<method> before polish"
    labels: list[str] = field(default_factory=list)
    #: paired comparisons of every pair of methods at every size (paired.comparisons_per_size)
    comparisons: list[dict[str, Any]] = field(default_factory=list)
    #: e_inf(a) - e_inf(b) of every pair of methods from paired differences (limit_difference)
    limit_differences: list[dict[str, Any]] = field(default_factory=list)
    #: the energies per (mixture, series, n), one per seed: what the figures draw
    energies: dict[tuple[str, str, int], np.ndarray] = field(default_factory=dict, repr=False)
    #: the rows read, one per completed task: the tidy table written beside the report
    rows: list[dict[str, Any]] = field(default_factory=list, repr=False)
    #: files in rows/ that are no row of the study's tasks, not read (Store.stray_files)
    stray_files: list[str] = field(default_factory=list)

    @property
    def before_polish(self) -> bool:
        """Whether the report holds a "<method> before polish" series."""
        return any(g["method"].endswith(BEFORE_POLISH) for g in self.groups)

    def table(self) -> str:
        """Plain-text table for the terminal (columns as wide as the longest mixture name, so
        a long one, from --xi say, keeps them aligned)."""
        w = max(
            [9, *(len(g["method"]) for g in self.groups), *(len(f["method"]) for f in self.fits)]
        )
        m = max([22, *(len(g["mixture"]) for g in self.groups)])
        m = max([m, *(len(f["mixture"]) for f in self.fits)])
        lines = [
            f"{'mixture':<{m}} {'method':<{w}} {'n':>5} {'mean':>8} {'s.e.':>7} {'count':>5}",
        ]
        for g in self.groups:
            se = f"{g['se']:>7.4f}" if math.isfinite(g["se"]) else f"{'--':>7}"  # one seed
            lines.append(
                f"{g['mixture']:<{m}} {g['method']:<{w}} {g['n']:>5} {g['mean']:>8.4f} "
                f"{se} {g['count']:>5}"
            )
        lines.append("")
        lvl = level_text(self.spec_level())
        lines.append(
            f"{'mixture':<{m}} {'method':<{w}} {'e_inf':>8} {f'{lvl}% interval':>19} "
            f"{'over laws':>19} {'ALG':>7} {'GS':>7} {'z(ALG)':>7} {'z(GS)':>7}  caveats"
        )
        for f in self.fits:
            if f.get("value") is None:
                lines.append(f"{f['mixture']:<{m}} {f['method']:<{w}} {'--':>8}  {f['note']}")
                continue
            lines.append(
                f"{f['mixture']:<{m}} {f['method']:<{w}} {f['value']:>8.4f} "
                f"[{f['low']:>8.4f},{f['high']:>8.4f}] [{f['law_low']:>8.4f},"
                f"{f['law_high']:>8.4f}] {f['alg']:>7.4f} {f['gs']:>7.4f} "
                f"{f['z_alg']:>7.1f} {f['z_gs']:>7.1f}  {caveats(f)}".rstrip()
            )
        lines.append(
            "(energies per spin H(x)/n on the unit sphere, maximized; s.e. = sd/sqrt(count);"
            " z in s.e. of e_inf; caveats: "
            + CAVEATS_LEGEND
            + (
                "; 'before polish': the runs' energies where the method ended, before its"
                " final polish"
                if self.before_polish
                else ""
            )
            + ")"
        )
        lines += overlap_lines(self.overlaps)
        return "\n".join(lines)

    def figures(self) -> list[str]:
        """The paths of the figures :func:`write_report` wrote, in order (none before it, or
        with plots off)."""
        others = ("markdown", "json", "parquet", "csv")
        return [path for name, path in self.files.items() if name not in others]

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
            "stray_row_files": self.stray_files,
            "cost": self.cost,
            "end_point_overlaps": self.overlaps,
            "end_point_overlaps_by_run": self.overlaps_by_run,
            "comparisons": self.comparisons,
            "limit_differences": self.limit_differences,
            "files": self.files,
            "units": "energy per spin H(x)/n on the unit sphere, maximization",
        }


# The series of a polishing method's energies before its polish: "<method> before polish".
BEFORE_POLISH = " before polish"


def _polished(spec: StudySpec) -> list[str]:
    """The methods of ``spec`` that end with a polish (hessian, anneal with polish on)."""
    return [m.name for m in spec.methods if dict(m.options).get("polish")]


def _labels(spec: StudySpec) -> list[str]:
    """The report's series: each method, then each polishing method before its polish."""
    return [m.name for m in spec.methods] + [m + BEFORE_POLISH for m in _polished(spec)]


def _by_seed(
    rows: list[dict[str, Any]], polished: Sequence[str] = ()
) -> dict[tuple[str, str, int], dict[int, float]]:
    """Energies by (mixture, series, n) and seed; with ``polished``, also those methods'
    energies before the polish (``energy_before_polish``), as the series
    "<method> before polish"."""
    acc: dict[tuple[str, str, int], dict[int, float]] = defaultdict(dict)
    for r in rows:
        acc[(r["mixture"], r["method"], int(r["n"]))][int(r["seed"])] = float(r["energy"])
        before = r.get("energy_before_polish")
        if r["method"] in polished and isinstance(before, (int, float)) and math.isfinite(before):
            series = r["method"] + BEFORE_POLISH
            acc[(r["mixture"], series, int(r["n"]))][int(r["seed"])] = float(before)
    return dict(acc)


def _median_steps(rows: list[dict[str, Any]]) -> dict[tuple[str, str, int], float]:
    """The median of the rows' ``steps`` (K for Hessian ascent, iterations for gradient
    ascent, Langevin steps) by (mixture, method, n), for both series of a method."""
    acc: dict[tuple[str, str, int], list[float]] = defaultdict(list)
    for r in rows:
        if isinstance(r.get("steps"), int):
            acc[(r["mixture"], r["method"], int(r["n"]))].append(r["steps"])
    out = {k: float(np.median(v)) for k, v in acc.items()}
    out.update({(m, me + BEFORE_POLISH, n): v for (m, me, n), v in out.items()})
    return out


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
    labels, polished = _labels(spec), _polished(spec)
    by_seed = _by_seed(rows, polished)
    data = {key: np.array(list(v.values())) for key, v in by_seed.items()}
    steps = _median_steps(rows)
    # runs whose end point failed the local-maximum check (an iteration cap reached early)
    unfinished = Counter(
        (r["mixture"], r["method"], r["n"]) for r in rows if r.get("local_max") is False
    )
    order = {m.name: i for i, m in enumerate(spec.mixtures)}
    morder = {label: i for i, label in enumerate(labels)}
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
                # before its polish, nothing checked the end point
                "not_local_max": None
                if method.endswith(BEFORE_POLISH)
                else unfinished[(mix, method, n)],
                "steps": steps.get((mix, method, n)),
            }
        )
    theory = {}
    for m in spec.mixtures:
        tv = theory_values(m.gammas)
        theory[m.name] = {
            "gammas": m.mixture.to_text(),
            "xi": m.mixture.xi_text(),
            "alg": tv.alg,
            "gs": tv.gs,
            "full_rsb": tv.full_rsb,
            "gs_equals_alg": tv.gs_equals_alg,
            "verdict": tv.verdict,
            "gap_gs_alg": tv.gs - tv.alg,
            "even": all(p % 2 == 0 for p in m.mixture.degrees),  # H(-x) = H(x)
        }
    fits = []
    methods = [me.name for me in spec.methods]
    # the series whose energies are Hessian ascent's path's own: before its polish, or the
    # run's without one (a review: the plan noted a study without polish, the report did not)
    hessian = dict(next((me.options for me in spec.methods if me.name == "hessian"), ()))
    path_series = {"hessian" + BEFORE_POLISH} if hessian.get("polish", True) else {"hessian"}
    for i, m in enumerate(spec.mixtures):
        for j, label in enumerate(labels):
            sizes = [n for (a, b, n) in keys if a == m.name and b == label]
            if label.endswith(BEFORE_POLISH) and not sizes:
                continue  # a series only where its method has rows
            # each fit's bootstrap seed: the methods keep the seeds they had before the
            # before-polish series came (their index over mixtures x methods); those follow
            if j < len(methods):
                seed = i * len(methods) + j
            else:
                extra = len(labels) - len(methods)
                seed = len(spec.mixtures) * len(methods) + i * extra + j - len(methods)
            th = theory[m.name]
            entry: dict[str, Any] = {
                "mixture": m.name,
                "method": label,
                "alg": th["alg"],
                "gs": th["gs"],
                "gs_equals_alg": th["gs_equals_alg"],
            }
            # a size with one seed (an interrupted sweep leaves some) has no spread to weigh
            # it by: it is left out of the fit, and said so, instead of sinking the whole fit
            counts = {n: len(data[(m.name, label, n)]) for n in sizes}
            left_out = [[n, c] for n, c in counts.items() if c < 2]
            sizes = [n for n, c in counts.items() if c >= 2]
            entry["left_out"] = left_out
            samples = [data[(m.name, label, n)] for n in sizes]
            try:
                ex: Extrapolation = extrapolate(sizes, samples, k, level, n_boot, seed=seed)
            except ValueError as exc:
                entry.update(value=None, note=str(exc) + left_out_text(left_out))
                fits.append(entry)
                continue
            entry.update(ex.to_dict())
            entry["sizes"] = list(ex.sizes)
            entry["heaviest"] = heaviest_size(sizes, samples)
            se = ex.se if ex.se > 0 else math.nan
            entry["z_alg"] = (ex.value - th["alg"]) / se
            entry["z_gs"] = (ex.value - th["gs"]) / se
            add_other_laws(entry, sizes, samples, level, n_boot, seed=seed)
            if hessian and label in path_series:
                _add_stepwise_limit(
                    entry,
                    m.mixture,
                    {n: steps.get((m.name, label, n)) for n in sizes},
                    hessian.get("start", LEGACY_START),
                )
            fits.append(entry)
    missing = len(spec.tasks()) - len(rows)
    degrees = {m.name: m.mixture.max_degree for m in spec.mixtures}
    rep = Report(spec, groups, fits, theory, [], missing, cost=cost_table(rows, degrees))
    rep.labels, rep.energies, rep.rows = labels, data, rows
    rep.stray_files = store.stray_files()
    points, unreadable = readable_end_points(Path(folder), rows)  # sweep --keep-points
    fields = {m.name: m.mixture.gammas[1] for m in spec.mixtures if m.mixture.has_field}
    by_run = end_point_overlaps(
        rows, points, [m.name for m in spec.methods], field_directions(rows, points, fields)
    )
    rep.overlaps_by_run = sorted(by_run, key=lambda o: (order[o["mixture"]], o["n"], o["seed"]))
    rep.overlaps = overlap_summary(by_run)
    seeds = {key: v for key, v in by_seed.items() if not key[1].endswith(BEFORE_POLISH)}
    rep.comparisons = [
        c
        for mix in theory
        for a, b in itertools.combinations([m.name for m in spec.methods], 2)
        for c in comparisons_per_size(mix, a, b, seeds, theory[mix])
    ]
    rep.limit_differences = limit_differences(
        [m.name for m in spec.mixtures], methods, seeds, theory, fits, k, level, n_boot
    )
    rep.findings = report_findings(rep, seeds)
    lacking = sum(
        1
        for r in rows
        if r["method"] in polished
        and not (
            isinstance(r.get("energy_before_polish"), (int, float))
            and math.isfinite(r["energy_before_polish"])
        )
    )
    if lacking:  # rows of an older version: the series stands on fewer runs than its method
        rep.findings.insert(  # after the theory's lines, before the extrapolations
            len(rep.theory),
            f"{lacking} rows of polishing methods lack energy_before_polish (written by an"
            " older version): the 'before polish' series leave those runs out.",
        )
    for mixed in (mixed_versions_text(rows), mixed_code_text(rows)):
        if mixed is not None:
            rep.findings.append(mixed)
    if unreadable:  # the rest of the report stands without them
        rep.findings.append(
            f"{len(unreadable)} of the end points kept by --keep-points cannot be read, and the"
            f" overlaps leave those runs out; the first: {unreadable[0]}"
        )
    return rep


def _add_stepwise_limit(
    entry: dict[str, Any], mixture: Any, k_at: dict[int, float | None], start: str
) -> None:
    """With the same K at every size of a Hessian-ascent fit before polish (``k_at``: n -> K),
    the n -> infinity energy its K points reach from the runs' ``start`` (``stepwise_limit``:
    the coarse steps' loss stays however large n) as ``e_k``, and the fit's distance to it in
    s.e. as ``z_k``. With the default K clamped at some sizes and differing across them,
    ``steps_by_n`` ([n, K] pairs) and ``mixed_k``, the sentence of
    :func:`~orthoclimb.studies.estimate.mixed_k_text`: one law over such sizes mixes limits."""
    from ..algorithms.hessian_ascent import stepwise_limit_if_short
    from .estimate import mixed_k_text

    ks = list(k_at.values())
    if not ks or any(k is None or k != int(k) for k in ks):
        return
    if len(set(ks)) > 1:  # the default K, clamped at some sizes (see mixed_k_text)
        k_int = {n: int(k) for n, k in k_at.items()}
        text = mixed_k_text(k_int, lambda k: stepwise_limit_if_short(mixture, k, start))
        if text is not None:
            entry.update(steps_by_n=[[n, k] for n, k in k_int.items()], mixed_k=text)
        return
    e_k = stepwise_limit_if_short(mixture, int(ks[0]), start)
    if e_k is None:
        return  # a field, or a path that reaches ALG anyway (pure 2-spin from the top start)
    se = entry["se"] if entry["se"] > 0 else math.nan
    entry.update(steps_k=int(ks[0]), e_k=e_k, z_k=(entry["value"] - e_k) / se)


#: A size whose share of the weights 1/s_j^2 exceeds HEAVY_SHARE while its own variance is
#: below OUTLYING times the trend of the other sizes' is flagged (common practice would pool
#: the variances; the flag keeps the fit and says what it rests on).
HEAVY_SHARE = 0.75
OUTLYING = 1.0 / 3.0


def heaviest_size(sizes: list[int], samples: list) -> list | None:
    """[n, share, ratio, seeds] for the size whose weight 1/s_j^2 (s_j^2 = sample variance /
    seeds, 0 at rounding level, as :mod:`.extrapolate` weighs) takes more than HEAVY_SHARE of
    the weights of a fit over three sizes or more because its own per-seed variance is below
    OUTLYING times the power law in n through the other sizes' (``ratio``); else None. A
    user trial's 8 seeds gave n = 190 a spread 3-4 times smaller than its neighbours' and 82 %
    of the weight, and 8 more seeds moved e_inf by 2.75 of its standard errors. A share alone
    would flag honest studies too: variances falling like n^-2 give the largest of n =
    50-400 75 % (a review: 47 % of simulated such studies crossed 0.75). Sizes without spread
    are left to the fit's own rule (:mod:`.extrapolate`): None."""
    from .extrapolate import _spread

    if len(sizes) < 3:
        return None
    arrays = [np.asarray(a, dtype=float) for a in samples]
    if not all(np.isfinite(a).all() for a in arrays):
        return None
    var = _spread(arrays)
    if not np.all(var > 0.0):
        return None
    w = 1.0 / var
    top = int(np.argmax(w))
    share = float(w[top] / w.sum())
    if share <= HEAVY_SHARE:
        return None
    counts = np.array([a.size for a in arrays], dtype=float)
    per_seed = var * counts
    others = [k for k in range(len(sizes)) if k != top]
    log_n = np.log(np.asarray(sizes, dtype=float))
    slope, icept = np.polyfit(
        log_n[others], np.log(per_seed[others]), 1, w=np.sqrt(counts[others] - 1.0)
    )
    ratio = float(per_seed[top] / math.exp(icept + slope * log_n[top]))
    if ratio >= OUTLYING:
        return None
    return [int(sizes[top]), share, ratio, int(counts[top])]


# The text files a report writes into its folder (PLOT_FILES: its figures).
REPORT_FILES = ("report.md", "report.json")


def write_report(
    folder: str | os.PathLike,
    exponent: float | None = None,
    level: float = 0.9,
    n_boot: int = 2000,
    plots: bool = True,
    out: str | os.PathLike | None = None,
) -> Report:
    """Compute the report and write report.md, report.json, the plots and the tidy table of
    the rows in the study folder (results.parquet, results.csv) into ``out`` (default: the
    study ``folder``; a study on a read-only medium needs another). A sweep writes the table
    when it ends; a driver killed outright (kill -9, out of memory) left it behind its row
    files, which the report brings it back in step with (a user trial). In the study folder
    the report writes under the sweep's lock: while a sweep runs there it leaves the table to
    that sweep (and says so), and rows that came after its reading go into the table too, so
    a report never puts back an older table. An ``out`` that holds another study is refused."""
    from ..errors import OutputPathError

    folder = Path(folder)
    target = folder if out is None else Path(out)
    if out is not None:  # a bad --out fails before the work, not after the bootstrap
        ensure_folder(target, "the report's folder")
        if (target / "study.json").exists() and target.resolve() != folder.resolve():
            raise OutputPathError(
                f"--out {str(target)!r} holds another study (its study.json), whose report and"
                " table this report would replace; give another folder"
            )
    names = REPORT_FILES + TABLE_FILES + (PLOT_FILES if plots else ())
    for name in names:  # so does a folder standing where a file goes
        refuse_folder(target / name, "remove it or give --out FOLDER (out= in Python)")
    rep = build_report(folder, exponent, level, n_boot)
    with contextlib.ExitStack() as stack:
        rows: list[dict[str, Any]] | None = rep.rows
        if target == folder:
            rows = _rows_to_table(stack, folder, rep)
        _write_report_files(rep, target, plots, rows, folder / ROWS_DIR, reraise=out is not None)
    return rep


def _rows_to_table(
    stack: contextlib.ExitStack, folder: Path, rep: Report
) -> list[dict[str, Any]] | None:
    """The rows whose table goes into the study folder, with the sweep's lock taken on
    ``stack``: ``rep.rows``, or a fresh reading where rows came since; None, with a finding
    added, while a sweep holds the folder (it writes the table when it ends)."""
    try:
        stack.enter_context(sweep_lock(folder))
    except SweepRunningError:
        rep.findings.append(
            "The tidy table (results.parquet, results.csv) was left as it is: a sweep is"
            " running in this folder and writes it when it ends."
        )
        return None
    store = Store(folder, rep.spec)
    wanted = {t.task_id for t in rep.spec.tasks()}
    if store.completed_ids() & wanted != {r["task_id"] for r in rep.rows}:
        return store.rows()  # a sweep ended between the reading and now
    return rep.rows


def _write_report_files(
    rep: Report,
    target: Path,
    plots: bool,
    rows: list[dict[str, Any]] | None,
    rows_dir: Path,
    reraise: bool,
) -> None:
    """Stage the report's files (plots, the table of ``rows`` unless None, report.md,
    report.json) in ``target`` and rename them all at once."""
    from ..errors import OutputPathError

    # every file staged first and renamed only when all are written: a folder standing at
    # report.json left a new report.md and plots beside the old report.json (a review)
    files = []
    # the energies build_report read: the row files are not read and checked again
    for name, path, writer in plot_files(rep, rep.energies, target) if plots else []:
        rep.files[name] = str(path)
        files.append((path, writer))
    tables = table_files(rows, target, rows_dir).items() if rows is not None else []
    for name, (path, writer) in tables:
        rep.files[name] = str(path)
        files.append((path, writer))
    rep.files["markdown"] = str(target / "report.md")
    rep.files["json"] = str(target / "report.json")
    text = report_markdown(rep).encode("utf-8")
    files.append((target / "report.md", lambda fh: fh.write(text)))
    files.append((target / "report.json", json_writer(rep.to_dict())))
    try:
        write_all_atomic(files)
    except OutputPathError as exc:
        if reraise:
            raise
        raise OutputPathError(
            f"{exc}; give --out FOLDER (out= in Python) to write the report elsewhere"
        ) from None
