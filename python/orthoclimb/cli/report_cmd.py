"""``orthoclimb report STUDY_DIR``: statistics, extrapolation and plots of a study.

Per (mixture, method, n): mean energy per spin, standard error and count; per (mixture,
method): e_inf of the fit e_inf + a n^(-k) (weighted least squares, bootstrap interval) beside
ALG and GS with the difference in standard errors. Writes report.md, report.json,
energy_vs_n.png, distribution.png (and overlaps.png for a study swept with --keep-points) and
the tidy table (results.parquet, results.csv) into the study folder (or ``--out FOLDER``) and
prints the table.
"""

from __future__ import annotations

import argparse

from ..fileio import json_text
from . import exponent_value, out_folder, user_path

__all__ = ["add_arguments", "run"]


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("study", type=user_path, help="study folder written by `orthoclimb sweep`")
    parser.add_argument(
        "--exponent",
        type=exponent_value,
        default=None,
        help="finite-size exponent k of e_inf + a n^(-k), a number or a fraction such as 2/3"
        " (default: the study's, 2/3)",
    )
    parser.add_argument(
        "--level",
        type=float,
        default=0.9,
        help="confidence level of the intervals, in (0, 1) (default 0.9)",
    )
    parser.add_argument(
        "--bootstrap",
        type=int,
        default=2000,
        help="bootstrap replicates, 100 to 1000000 (default 2000)",
    )
    parser.add_argument(
        "--out",
        type=user_path,
        default=None,
        help="folder for report.md, report.json, the plots and the tidy table (default: the"
        " study folder)",
    )
    parser.add_argument("--no-plots", action="store_true", help="skip the PNG plots")
    parser.add_argument("--json", action="store_true", help="print the report as JSON")


def run(args: argparse.Namespace) -> int:
    from ..studies.report import write_report

    if not 0 < args.level < 1:
        raise ValueError(f"--level must be in (0, 1), got {args.level}")
    from ..studies.extrapolate import MAX_BOOT

    if not 100 <= args.bootstrap <= MAX_BOOT:
        raise ValueError(f"--bootstrap must be in [100, {MAX_BOOT}], got {args.bootstrap}")
    out_folder(args.out)
    if not args.study.strip():  # "" reported on the working folder (".")
        raise ValueError("the study folder must be named, got an empty string")
    rep = write_report(
        args.study,
        args.exponent,
        args.level,
        args.bootstrap,
        plots=not args.no_plots,
        out=args.out,
    )
    if args.json:
        print(json_text(rep.to_dict()))
        return 0
    print(rep.table())
    print()
    for f in rep.findings:
        print(f"- {f}")
    plots = rep.figures()
    print(f"report: {rep.files['markdown']}" + (f"; plots: {', '.join(plots)}" if plots else ""))
    return 0
