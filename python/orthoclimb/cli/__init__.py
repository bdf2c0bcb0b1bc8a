"""The ``orthoclimb`` command line.

Each subcommand lives in its own module with two functions: ``add_arguments(parser)`` and
``run(args) -> int``. Bad input (any ValueError/TypeError raised while running) is reported as
``orthoclimb: error: ...`` with exit code 2, like argparse's own usage errors (an output
folder that cannot be made too: OutputPathError is a ValueError); any other file-system
failure (OSError: a full disk, say) the same way with exit code 1. A warning raised in this
process while a command runs is printed as one line, ``orthoclimb COMMAND: warning: ...``,
without Python's file and source line (:func:`user_warnings`; callers of the library keep
Python's display, and so do a sweep's worker processes).
"""

from __future__ import annotations

import argparse
import contextlib
import os
import sys
import warnings
from collections.abc import Iterator, Sequence
from importlib import import_module
from typing import TYPE_CHECKING

from .._text import seconds_text  # noqa: F401  (the subcommands import it from here)
from ..fileio import undone_on_failure

if TYPE_CHECKING:
    from ..model.mixture import Mixture

# subcommand name -> (module under orthoclimb.cli, one-line help)
_COMMANDS: dict[str, tuple[str, str]] = {
    "demo": ("demo_cmd", "the main job: a small study on two landscapes, extrapolated vs theory"),
    "theory": ("theory_cmd", "what a mixture predicts: full-RSB verdict, ALG, ground state"),
    "climb": ("climb_cmd", "run Hessian ascent or a baseline on one instance, compare with theory"),
    "sweep": ("sweep_cmd", "run a study grid (mixtures x n x seeds x methods) on Dask, resumably"),
    "report": ("report_cmd", "statistics, n -> infinity extrapolation and plots of a study"),
    "profile": ("profile_cmd", "time the kernels at several n and fit the exponent of time vs n"),
}


class GivenOnce(argparse.Action):
    """Store an option's value and refuse it a second time: argparse keeps the last one
    silently, so ``--gammas 3:1 --gammas 2:1`` would study a mixture other than the first."""

    def __call__(self, parser, namespace, values, option_string=None):
        before = getattr(namespace, self.dest, None)
        if before is not None:
            parser.error(f"{option_string} given twice ({before!r} and {values!r}); give it once")
        setattr(namespace, self.dest, values)


def add_start_flag(parser: argparse.ArgumentParser, more: str = "") -> None:
    """``--start`` of ``climb`` and ``sweep``: Hessian ascent's first point (default None:
    the method's own default, auto); ``more`` ends its help."""
    parser.add_argument(
        "--start",
        choices=("auto", "top", "random"),
        default=None,
        help="hessian without a field: the first point along the top eigenvector of Hess H(0)"
        " (top, needs a degree-2 term) or in a random direction (random, as before December"
        " 2026); auto (default) is top where there is a degree-2 term" + more,
    )


def add_mixture_flags(parser: argparse.ArgumentParser) -> None:
    """The one mixture of ``theory``, ``climb`` and ``profile``: ``--gammas`` or ``--xi``,
    exactly one, given once (read back with :func:`mixture_from`)."""
    which = parser.add_mutually_exclusive_group(required=True)
    which.add_argument(
        "--gammas",
        action=GivenOnce,
        metavar="P:G,...",
        help="the mixture as p:gamma_p pairs, e.g. 2:1,4:0.3",
    )
    which.add_argument(
        "--xi",
        action=GivenOnce,
        metavar="P:C,...",
        help="the mixture as p:gamma_p^2 pairs (coefficients of xi), e.g. 2:1,4:0.09",
    )


def user_path(text: str) -> str:
    """An argparse type for paths: a leading ``~`` or ``~user`` is the home folder, as the
    shell would have made it (it does not after ``--out=``, and ``./~/runs`` was made while
    the summary pointed at the home folder, a review)."""
    return os.path.expanduser(text)


def out_folder(path: str | None) -> str | None:
    """The folder of a command's ``--out`` (None where it was not given), or a ValueError for
    an empty one, the same in every command: ``sweep`` and ``profile`` wrote into the working
    folder and ``demo`` took it as ".", while ``climb`` and ``report`` refused it."""
    if path is not None and not path.strip():
        raise ValueError("--out must name a folder, got an empty string")
    return path


def positive_number(text: str) -> float:
    """An argparse type: a positive finite number; the message quotes the text as given, so a
    value that underflows ("1e-400") is not reported as "0.0"."""
    import math

    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a positive number, got {text!r}") from None
    if not (math.isfinite(value) and value > 0):
        why = (
            " (it rounds to 0.0 in double precision)" if value == 0 and "e-" in text.lower() else ""
        )
        raise argparse.ArgumentTypeError(f"expected a positive finite number, got {text!r}{why}")
    return value


def exponent_value(text: str) -> float:
    """An argparse type: a positive finite-size exponent, as a number or a fraction ("2/3"),
    read by :func:`orthoclimb.studies.grid.parse_exponent` (as study files are)."""
    from ..studies.grid import parse_exponent

    try:
        return parse_exponent(text)
    except ValueError as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None


def threads_from(args: argparse.Namespace) -> str | None:
    """Apply ``--threads`` (when given) to the kernels' pool; returns a note when the thread
    count (``--threads``, or else ``ORTHOCLIMB_NUM_THREADS``) is more than the cores this
    process may use, as sweep notes a lowered request (here nothing is lowered: the caller
    asked for it)."""
    from ..runtime import get_num_threads, set_num_threads
    from ..studies.engine import available_cores, counted

    if args.threads is not None:
        try:
            set_num_threads(args.threads)
        except (ValueError, TypeError) as exc:  # the runtime's words, under the flag's name
            raise type(exc)(f"--threads: {exc}") from None
        what = f"--threads {args.threads}"
    elif os.environ.get("ORTHOCLIMB_NUM_THREADS"):
        what = f"ORTHOCLIMB_NUM_THREADS={get_num_threads()}"
    else:
        return None
    cores = available_cores()
    if get_num_threads() <= cores:
        return None
    return (
        f"note: {what} is more than the {counted(cores, 'core')} this process may use; the"
        " threads share them, which is no faster and makes timings noisier"
    )


def mixture_from(args: argparse.Namespace) -> Mixture:
    """The :class:`~orthoclimb.Mixture` of the flags :func:`add_mixture_flags` added."""
    from ..model.mixture import Mixture

    text = args.gammas if args.gammas is not None else args.xi
    return Mixture.parse(text, squared=args.xi is not None)


_ENVIRONMENT = """environment:
  ORTHOCLIMB_NUM_THREADS   kernel threads (default: all cores; --threads overrides)
  ORTHOCLIMB_MEMORY_LIMIT  the most memory a run may hold, e.g. 8GiB or 500MB (default: what
                           the machine, the job's cgroup and ulimit -v leave)"""


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="orthoclimb",
        description="Random polynomials on the sphere: sample, evaluate, optimize, compare "
        "with the theory.",
        epilog=_ENVIRONMENT,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    from .. import __version__

    parser.add_argument("--version", action="version", version=f"orthoclimb {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True
    for name, (module, help_text) in _COMMANDS.items():
        mod = import_module(f"{__name__}.{module}")
        epilog = getattr(mod, "EPILOG", None)  # shown verbatim after the options
        cmd = sub.add_parser(
            name,
            help=help_text,
            description=help_text,
            epilog=epilog,
            formatter_class=argparse.RawDescriptionHelpFormatter,
        )
        mod.add_arguments(cmd)
        cmd.set_defaults(_run=mod.run, _parser=cmd)
    return parser


def _parse(parser: argparse.ArgumentParser, argv: Sequence[str] | None) -> argparse.Namespace:
    """parse_args, but an unknown option is reported by its subcommand's parser (its usage,
    ``orthoclimb theory: error: ...``), with the closest option it has, if any."""
    import difflib

    args, extra = parser.parse_known_args(argv)
    if extra:
        sub: argparse.ArgumentParser = args._parser
        known = [o for action in sub._actions for o in action.option_strings]
        hint = ""
        for item in extra:
            if item == "--":
                continue
            close = difflib.get_close_matches(item.split("=")[0], known, n=1)
            if item.startswith("-") and close:
                hint = f" (did you mean {close[0]}?)"
                break
        sub.error(f"unrecognized arguments: {' '.join(extra)}{hint}")
    return args


@contextlib.contextmanager
def user_warnings(command: str) -> Iterator[None]:
    """While a command runs, print each warning as ``orthoclimb COMMAND: warning: MESSAGE``
    on stderr: Python's own display added the file path and the source line of the call that
    raised it (``climb_cmd.py:443: RuntimeWarning: ...`` and ``result = hessian_ascent(``),
    meant for a programmer. The filters (which warnings show, and how often) are Python's;
    the display before is put back afterwards."""

    def show(message, category, filename, lineno, file=None, line=None) -> None:
        stream = sys.stderr if file is None else file
        try:
            stream.write(f"orthoclimb {command}: warning: {message}\n")
        except (AttributeError, OSError):  # no stderr (pythonw), or it went away: as Python
            pass

    with warnings.catch_warnings():
        warnings.showwarning = show
        yield


def main(argv: Sequence[str] | None = None) -> int:
    try:  # building the parser imports SciPy and more: a second or two where Ctrl-C is likely
        parser = build_parser()
        args = _parse(parser, argv)
    except KeyboardInterrupt:
        print("orthoclimb: interrupted", file=sys.stderr)
        return 130
    try:
        # a failed command leaves no empty output folder
        with undone_on_failure(), user_warnings(args.command):
            return int(args._run(args) or 0)
    except BrokenPipeError:  # the reader went away (say `| head`): stop quietly, like POSIX tools
        try:  # so the interpreter's final flush cannot fail again
            os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        except (OSError, ValueError):  # stdout without a file descriptor (io.UnsupportedOperation)
            pass
        return 141  # 128 + SIGPIPE, as a shell reports a tool stopped by the broken pipe
    except (ValueError, TypeError) as exc:
        print(f"orthoclimb {args.command}: error: {exc}", file=sys.stderr)
        return 2
    except OSError as exc:  # a folder that cannot be made, a full disk: no traceback
        where = f" ({exc.filename!r})" if exc.filename else ""
        print(f"orthoclimb {args.command}: error: {exc.strerror or exc}{where}", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        print(f"orthoclimb {args.command}: interrupted", file=sys.stderr)
        return 130


def console_main() -> int:
    """The ``orthoclimb`` program: :func:`main`, and then a Ctrl-C while the interpreter shuts
    down ends the process at once with the command's own status (closing a sweep's cluster
    takes a few tenths of a second after its last line: a Ctrl-C there turned a finished
    study's exit status 0 into a silent 130, a user trial; ignoring SIGINT instead would
    leave no way out of a shutdown that hangs, a review). Not in :func:`main` itself, which
    callers in Python (tests, notebooks) keep using."""
    import signal

    code = main()

    def finished(signum: int, frame: object) -> None:
        for stream in (sys.stdout, sys.stderr):
            try:
                stream.flush()
            except (OSError, ValueError):
                pass
        os._exit(code)

    try:
        signal.signal(signal.SIGINT, finished)
    except ValueError:  # pragma: no cover - not the main thread
        pass
    return code


if __name__ == "__main__":  # pragma: no cover
    sys.exit(console_main())
