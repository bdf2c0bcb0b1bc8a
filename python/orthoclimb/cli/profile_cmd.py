"""``orthoclimb profile --gammas 3:1 --n 100,200,400,800``: time the kernels at each n.

Prints one line per n (seconds per pass of energy, energy+gradient, one HVP, the Hessian), the
same per coefficient in nanoseconds, and the exponent b of t ~ n^b per kernel, fitted over all
sizes and between the two largest (close to the largest degree P for large n), and writes
profile.json and profile.png into ``--out``.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from . import (
    add_mixture_flags,
    mixture_from,
    out_folder,
    seconds_text,
    threads_from,
    user_path,
)

__all__ = ["add_arguments", "run"]


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_mixture_flags(parser)
    parser.add_argument(
        "--n", dest="sizes", required=True, help="numbers of spins, e.g. 100,200,400 (each >= 2)"
    )
    parser.add_argument(
        "--repeats",
        type=int,
        default=3,
        help="timed calls per kernel and size, best kept (default 3, at most 1000)",
    )
    parser.add_argument(
        "--threads",
        type=int,
        default=None,
        help="kernel worker threads (default: ORTHOCLIMB_NUM_THREADS, or all cores)",
    )
    parser.add_argument(
        "--out",
        type=user_path,
        default="orthoclimb-profile",
        help="output folder (default ./orthoclimb-profile)",
    )
    parser.add_argument("--json", action="store_true", help="print JSON")


def _stderr(text: str) -> None:
    print(text, file=sys.stderr, flush=True)


def run(args: argparse.Namespace) -> int:
    from ..fileio import ensure_folder, json_text, refuse_folder
    from ..model import available_memory
    from ..model.memory import coefficient_count, format_bytes
    from ..studies.grid import parse_sizes
    from ..studies.profile import (
        KERNELS,
        PROFILE_FILES,
        check_profile,
        profile_kernels,
        write_profile,
    )

    mix = mixture_from(args)
    out_folder(args.out)
    threads_note = threads_from(args)
    sizes = parse_sizes(args.sizes)
    ensure_folder(args.out)  # before the timings: a bad --out fails at once
    for name in PROFILE_FILES:  # and so does a folder where a file goes
        refuse_folder(Path(args.out) / name, "remove it or give another --out")
    need, workspace = check_profile(mix, sizes, args.repeats)  # before the plan is printed
    say = _stderr if not args.json else lambda _text: None
    if threads_note is not None:
        say(threads_note)
    biggest = max(sizes)
    most = coefficient_count(mix.degrees, biggest)
    growth = most / coefficient_count(mix.degrees, min(sizes))
    say(
        f"profile: n = {', '.join(map(str, sorted(sizes)))}; the largest instance (n = {biggest})"
        f" holds {most:,} coefficients, {format_bytes(need)}, and its Hessian takes"
        f" {format_bytes(workspace)} more, of {format_bytes(available_memory())} available;"
        " each size is sampled once and each"
        f" kernel timed {args.repeats} time{'' if args.repeats == 1 else 's'}. Time grows like"
        " the coefficient count: the"
        f" largest size has {growth:.3g} times the smallest's; an estimate for each next size"
        " follows the one before."
    )

    def progress(row, nxt, guess) -> None:
        text = f"n = {row['n']}: done in {seconds_text(row['wall'])}"
        if nxt is not None:
            text += f"; next n = {nxt}: about {seconds_text(guess)}"
        say(text)

    prof = profile_kernels(mix, sizes, args.repeats, on_size=progress)
    files = write_profile(prof, args.out)
    if args.json:
        print(json_text({**prof, "files": files}))
        return 0
    print("seconds per call (best of the repeats):")
    print(f"{'n':>6} " + " ".join(f"{k:>20}" for k in KERNELS))
    for r in prof["rows"]:  # one fixed format per table: 3.8e-05, not 3.808e-05s beside 0.0035s
        print(f"{r['n']:>6} " + " ".join(f"{r[k]:>20.3e}" for k in KERNELS))
    print("nanoseconds per coefficient:")
    for r in prof["rows"]:
        per = r["ns_per_coefficient"]
        print(f"{r['n']:>6} " + " ".join(f"{per[k]:>20.3g}" for k in KERNELS))
    big = prof["rows"][-2]["n"], prof["rows"][-1]["n"]
    for label, key in (
        ("all sizes", "exponents"),
        (f"n = {big[0]} to {big[1]}", "exponents_largest_pair"),
    ):
        print(
            f"exponent b (t ~ n^b), {label}: "
            + ", ".join(f"{k} {prof[key][k]:.2f}" for k in KERNELS)
        )
    for note in prof["notes"]:
        print(note)
    print(f"wrote {files['json']} and {files['plot']}")
    return 0
