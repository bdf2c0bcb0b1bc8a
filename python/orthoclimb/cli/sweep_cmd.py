"""``orthoclimb sweep``: run a study grid on Dask into a resumable study folder.

    orthoclimb sweep --gammas 3:1 --n 100,200,400 --seeds 0-19 --methods hessian,gradient \\
        --out study/
    orthoclimb sweep study.toml --out study/          # the grid from a TOML file
    orthoclimb sweep ... --scheduler tcp://HOST:PORT  # an existing Dask cluster

Before it starts it prints the number of tasks, the memory of the largest instance and a rough
time estimate; a progress bar shows done / running / failed and the time left. Each result is
written as it arrives; rerunning the same command skips completed tasks, and rerunning it with
more seeds or sizes extends the study (only the new tasks run). At the end the report
(``orthoclimb report``) is written into the folder. Energies are per spin, maximized.
"""

from __future__ import annotations

import argparse
import sys
import time
from collections import Counter
from pathlib import Path
from typing import Any

from ..studies.grid import (
    DEFAULT_EXPONENT,
    TOML_EXAMPLE,
    StudySpec,
    method_names,
    spec_from_flags,
    spec_from_toml,
)
from . import add_start_flag, exponent_value, out_folder, positive_number, user_path

EPILOG = "A study TOML file (the grid, instead of the flags):\n\n" + TOML_EXAMPLE

__all__ = ["add_arguments", "execute", "run"]


def add_engine_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "--scheduler",
        metavar="tcp://HOST:PORT",
        default=None,
        help="submit to an existing Dask scheduler (default: embedded cluster)",
    )
    parser.add_argument(
        "--workers",
        type=int,
        default=None,
        help="worker processes of the embedded cluster (default: sized to cores)",
    )
    parser.add_argument(
        "--threads",
        type=int,
        default=None,
        help="kernel threads per task (default: cores / workers; 1 on an external cluster)",
    )
    parser.add_argument(
        "--retries",
        type=int,
        default=2,
        help="Dask retries of a task (or group of tasks on one instance) whose sampling failed,"
        " default 2; a method that raises fails its task at once (with the same seed it would"
        " fail again)",
    )
    parser.add_argument(
        "--timeout",
        type=positive_number,
        default=20.0,
        help="seconds to reach the scheduler (default 20)",
    )
    parser.add_argument(
        "--no-progress",
        action="store_true",
        help="no progress bar (there is none anyway when stderr is not a terminal, e.g. a log)",
    )
    parser.add_argument(
        "--plan-only",
        action="store_true",
        help="print the tasks, the memory of the largest instance, the methods with their"
        " options, the workers and the time estimate, then stop: nothing runs, and the output"
        " folder is left as it was",
    )


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "spec", nargs="?", type=user_path, default=None, help="study TOML file (instead of flags)"
    )
    parser.add_argument(
        "--gammas",
        action="append",
        metavar="P:G,...",
        help="a mixture as p:gamma_p pairs; repeat for several mixtures",
    )
    parser.add_argument(
        "--xi",
        action="append",
        metavar="P:C,...",
        help="a mixture as p:gamma_p^2 pairs; repeatable",
    )
    parser.add_argument(
        "--n", dest="sizes", default=None, help="numbers of spins, e.g. 100,200,400 (each >= 2)"
    )
    parser.add_argument(
        "--seeds", default=None, help="disorder seeds, e.g. 0-19 or 1,5,9 (required with flags)"
    )
    parser.add_argument(
        "--methods",
        default="hessian,gradient",
        help="methods: hessian,gradient,anneal (default hessian,gradient; anneal's eta and"
        " temperatures in a TOML file)",
    )
    parser.add_argument(
        "--steps",
        type=int,
        default=None,
        help="hessian: K, the points of the path (K - 1 Hessian steps; default n/8 clamped to"
        " [25, 200], per size); anneal: Langevin steps (default 400); as in climb",
    )
    parser.add_argument(
        "--tol",
        type=positive_number,
        default=None,
        help="hessian: eigen tolerance delta, per spin: each step's direction is within delta"
        " of the top tangent eigenvalue (default 1e-3)",
    )
    parser.add_argument(
        "--no-polish", action="store_true", help="hessian and anneal: skip the final polish"
    )
    add_start_flag(parser, "; as in climb")
    parser.add_argument(
        "--max-iter", type=int, default=None, help="gradient: iteration cap (default 2000)"
    )
    parser.add_argument(
        "--exponent",
        type=exponent_value,
        default=None,
        help="finite-size exponent k of e_inf + a n^(-k), a number or a fraction such as 2/3"
        " (default 2/3)",
    )
    parser.add_argument(
        "--dtype",
        choices=("float64", "float32"),
        default=None,
        help="coefficient storage of every instance (default float64; float32 halves the"
        " memory, the arithmetic stays float64)",
    )
    parser.add_argument("--out", type=user_path, required=True, help="study folder")
    parser.add_argument("--no-report", action="store_true", help="skip the report at the end")
    parser.add_argument(
        "--keep-points",
        action="store_true",
        help="also keep each run's final point, in OUT/points/ (8 n bytes per task), for the"
        " report's overlaps between methods; tasks already done are not rerun for it",
    )
    add_engine_arguments(parser)


def _spec(args: argparse.Namespace) -> StudySpec:
    flags = [args.gammas, args.xi, args.sizes, args.seeds, args.steps, args.tol, args.start]
    flags += [args.max_iter, args.dtype]  # every flag of the grid, beside a TOML file
    if args.spec is not None:
        if any(f is not None for f in flags) or args.no_polish:
            raise ValueError("give the study either as a TOML file or as flags, not both")
        spec = spec_from_toml(args.spec)
        if args.exponent is not None:
            raise ValueError("set the exponent inside the TOML file (key 'exponent')")
        return spec
    missing = [flag for flag, v in (("--n", args.sizes), ("--seeds", args.seeds)) if v is None]
    if len(missing) == 2:
        raise ValueError("give --n and --seeds (and --gammas), or a study TOML file")
    if missing:  # a trial: the message named --n although it was given
        raise ValueError(f"give {missing[0]} too (or a study TOML file instead)")
    # each flag goes to the methods of the study that take it, as in climb; a flag that no
    # method of the study takes is a mistake, refused
    chosen = set(method_names(args.methods))
    given = (
        ("--steps", "steps", args.steps, ("hessian", "anneal")),
        ("--tol", "tol", args.tol, ("hessian",)),
        ("--start", "start", args.start, ("hessian",)),
        ("--no-polish", "polish", False if args.no_polish else None, ("hessian", "anneal")),
        ("--max-iter", "max_iter", args.max_iter, ("gradient",)),
    )
    opts: dict[str, dict[str, Any]] = {}
    unused = []
    for flag, key, value, takers in given:
        if value is None:
            continue
        hit = [m for m in takers if m in chosen]
        if not hit:
            unused.append((flag, takers))
        for m in hit:
            opts.setdefault(m, {})[key] = value
    if unused:
        flags = ", ".join(flag for flag, _ in unused)
        takers = sorted({m for _, t in unused for m in t})
        verb = "applies" if len(unused) == 1 else "apply"
        raise ValueError(
            f"{flags} {verb} to the method{'s' if len(takers) > 1 else ''}"
            f" {' and '.join(takers)}, not in --methods {args.methods}"
        )
    exponent = DEFAULT_EXPONENT if args.exponent is None else args.exponent
    return spec_from_flags(
        args.gammas,
        args.xi,
        args.sizes,
        args.seeds,
        args.methods,
        opts,
        exponent,
        args.dtype or "float64",
    )


class _PlanShown(Exception):
    """Raised after the plan is printed under --plan-only: the sweep takes back what it did to
    the folder (as for a cluster that never started) and nothing runs."""


def execute(
    spec: StudySpec, out: str, args: argparse.Namespace, report: bool = True, say=print
) -> tuple[Any, Any]:
    """Run ``spec`` into ``out`` with the engine flags of ``args``; then write the report.
    With ``args.plan_only``, print the plan and return (None, None) without running."""
    from ..studies.engine import counted, run_study
    from ..studies.estimate import plan_lines
    from ..studies.report import write_report
    from ..studies.store import Store

    plan_only = getattr(args, "plan_only", False)

    def on_start(pending: list, plan) -> None:
        for line in plan_lines(spec, out, pending, plan, args.scheduler, args.threads):
            say(line, flush=True)
        if plan_only:
            raise _PlanShown

    stale = (
        f"note: the report in {out} (report.md, report.json, plots) predates this sweep's new"
        f" rows; `orthoclimb report {out}` brings it up to date"
    )
    had_report = (Path(out) / "report.md").is_file()
    done_before = Store(out, spec).completed_ids()
    start = time.perf_counter()
    try:
        outcome = run_study(
            spec,
            out,
            scheduler=args.scheduler,
            workers=args.workers,
            threads=args.threads,
            retries=args.retries,
            timeout=args.timeout,
            progress=None if not args.no_progress else False,  # None: a bar on a terminal only
            log=say,
            on_start=on_start,
            keep_points=getattr(args, "keep_points", False),
        )
    except KeyboardInterrupt:  # rows written before the interrupt are not in the old report
        if had_report and Store(out, spec).completed_ids() - done_before:
            print(stale, file=sys.stderr)
        raise
    except _PlanShown:
        from ..fileio import remove_made_folders

        remove_made_folders()  # the sweep took back its study files; the folder goes too
        say("plan only: nothing was run")
        return None, None
    say(
        f"sweep: {outcome.done} tasks run, {outcome.skipped} skipped (already done), "
        f"{outcome.failed} failed, {time.perf_counter() - start:.1f} s"
    )
    if outcome.replaced_workers:
        say(
            f"note: {outcome.replaced_workers} worker process(es) died during the sweep (a crash"
            " or an out-of-memory kill) and were replaced; Dask ran their tasks again, so every"
            " task counted as run has its row"
        )
    if outcome.failed:
        say(f"failed tasks are listed in {out}/failed/; rerun the same command to retry them")
        reasons = Counter(
            (str(record.get("error", "")).strip().splitlines() or ["(no message)"])[0]
            for record in Store(out, spec).failures()
        )
        for reason, count in reasons.most_common(5):
            say(f"  {counted(count, 'task')}: {reason}")
    rep = write_report(out) if report else None
    if rep is None and had_report and outcome.done:
        say(stale)
    return outcome, rep


def run(args: argparse.Namespace) -> int:
    out_folder(args.out)
    spec = _spec(args)
    outcome, rep = execute(spec, args.out, args, report=not args.no_report)
    if outcome is None:  # --plan-only
        return 0
    if rep is not None:  # the table and the verdicts, as `orthoclimb report` prints them
        print(rep.table())
        print()
        for finding in rep.findings:
            print(f"- {finding}")
        plots = rep.figures()
        print(
            f"report: {rep.files['markdown']}" + (f"; plots: {', '.join(plots)}" if plots else "")
        )
    return 1 if outcome.failed else 0
