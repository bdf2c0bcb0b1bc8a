"""``orthoclimb climb``: run one algorithm on one sampled instance and compare with the theory.

Before sampling it prints the memory the instance needs and, for an instance above 256 MiB, how
long sampling will take (timed on an instance of at most 64 MiB and scaled by the number of
coefficients); after sampling it times the kernel passes on the instance and prints an estimate
of the run time (the model of :mod:`orthoclimb.studies.estimate`: steps x a pass, the polish's
passes, and for gradient ascent its typical iteration count, with the time at its cap). On a
terminal, tqdm progress bars count the coefficients while sampling takes more than half a
second, then show step, q = |x|^2 and the energy per spin (none in a log). At the end it
prints the energy per spin, ALG, the Parisi ground state GS (when the solver converges), the
gaps, the local-maximum check and the time, and writes into ``--out``: ``result.json`` and
``result.npz`` (see :meth:`orthoclimb.Result.save`) and ``path.png`` (energy along the path vs
the predicted curve, top tangent eigenvalue vs the predicted edge). ``--json`` prints the summary
as JSON instead of the table. Energies are per spin, maximization convention.
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from typing import Any

import numpy as np

from .._load import OtherLoad, busy_note
from ..algorithms._checks import MAX_STEPS, check_count
from ..fileio import (
    ensure_folder,
    json_text,
    output_pair_paths,
    refuse_folder,
    require_writable,
)
from ..model import Hamiltonian, Mixture, estimate_memory
from ..model.hamiltonian import _check_seed
from ..model.memory import format_bytes, require_memory
from ..runtime import get_num_threads, kernel_path
from ..studies.engine import counted
from ..studies.estimate import (
    PASSES_PER_ITERATION,
    dense_lanczos_memory,
    gradient_passes,
    largest_size_within,
    matvec_seconds,
    run_seconds,
    timing_budget,
)
from ..studies.grid import start_used
from . import (
    add_mixture_flags,
    add_start_flag,
    mixture_from,
    out_folder,
    positive_number,
    seconds_text,
    threads_from,
    user_path,
)

__all__ = ["add_arguments", "run"]

METHODS = ("hessian", "gradient", "anneal")


# how a refused climb can go on: the command has no switch past its memory check
_SMALLER = "a smaller --n fits"
_NO_ROOM = f"{_SMALLER}; --plan-only prints the plan, timing a small instance that fits"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_mixture_flags(parser)
    parser.add_argument("--n", type=int, required=True, help="number of spins")
    parser.add_argument("--seed", type=int, default=0, help="disorder seed (default 0)")
    parser.add_argument(
        "--start-seed",
        type=int,
        default=0,
        help="seed of the start point / noise (default 0; a sweep starts each run from its"
        " disorder seed, so --start-seed equal to --seed reruns a sweep's row made with the"
        " default method options and the same --dtype)",
    )
    parser.add_argument("--method", choices=METHODS, default="hessian", help="default hessian")
    parser.add_argument(
        "--steps",
        type=int,
        default=None,
        help="hessian: K, the number of points on the path (K - 1 Hessian steps; default n/8"
        " clamped to [25, 200]); anneal: Langevin steps (default 400)",
    )
    parser.add_argument(
        "--max-iter",
        type=int,
        default=None,
        help="gradient: iteration cap (default 2000; the same flag as in sweep)",
    )
    parser.add_argument(
        "--tol",
        type=positive_number,
        default=None,
        help="hessian: eigen tolerance delta (default 1e-3)",
    )
    parser.add_argument("--no-polish", action="store_true", help="skip the final polish")
    add_start_flag(parser, "; random reruns a row of an older sweep")
    parser.add_argument(
        "--dtype",
        choices=("float64", "float32"),
        default="float64",
        help="coefficient storage (default float64; float32 halves the memory, the arithmetic"
        " stays float64)",
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
        default="orthoclimb-climb",
        help="output folder (default ./orthoclimb-climb; its result files are replaced)",
    )
    parser.add_argument("--json", action="store_true", help="print the summary as JSON")
    parser.add_argument("--no-progress", action="store_true", help="no progress bar")
    parser.add_argument(
        "--plan-only",
        action="store_true",
        help="print the memory and the sampling and run times, estimated on an instance of at"
        " most 64 MiB (the only one sampled), then stop; nothing is written",
    )


_SAMPLING_TIMED_ABOVE = 256 * 2**20  # bytes: larger instances get a sampling-time estimate
_SAMPLING_PROBE = 64 * 2**20  # bytes: the largest instance timed for it


def _time_pass(ham: Hamiltonian, method: str) -> float:
    x = np.full(ham.n, 1.0 / math.sqrt(ham.n))
    calls = {"hessian": ham.hessian, "hvp": lambda v: ham.hvp(v, v)}
    fn = calls.get(method, ham.energy_and_gradient)
    best = math.inf
    for _ in range(2):
        t = time.perf_counter()
        fn(x)
        best = min(best, time.perf_counter() - t)
    return best


def _probe(mixture: Mixture, n: int, dtype: str) -> tuple[Hamiltonian, float]:
    """An instance of the mixture with at most 64 MiB of coefficients, or half the available
    memory where that is less (the largest n' <= n that fits, at least 2), and the seconds its
    sampling took."""
    n0 = max(2, largest_size_within(mixture, n, timing_budget(_SAMPLING_PROBE), dtype))
    started = time.perf_counter()
    probe = Hamiltonian.sample(mixture, n0, 0, dtype=dtype)
    return probe, time.perf_counter() - started


def _sampling_estimate(mixture: Mixture, n: int, dtype: str, need: int) -> str | None:
    """How long sampling ``n`` spins will take, for an instance above 256 MiB: an instance of
    at most 64 MiB is sampled and timed (:func:`_probe`), and the time scaled by the bytes
    (one Gaussian per coefficient). None for smaller instances, which sample in well under a
    second."""
    if need <= _SAMPLING_TIMED_ABOVE:
        return None
    return _sampling_text(*_probe(mixture, n, dtype), need)


def _sampling_text(probe: Hamiltonian, seconds: float, need: int) -> str:
    """The sampling time of ``need`` bytes, scaled from the probe's ``seconds``."""
    return f"sampling: about {seconds_text(seconds * need / probe.nbytes)} (timed at n = {probe.n})"


def _run_estimate(
    ham: Hamiltonian,
    method: str,
    steps: int,
    polish: bool,
    n: int | None = None,
    scale=1.0,
    start: str = "auto",
) -> tuple[str, float | None]:
    """(the line to print, the seconds) of the run's time from timed passes, by the sweep's
    model (orthoclimb.studies.estimate):
    K - 1 Hessian passes plus Lanczos for hessian (none when the first stage ends on the
    sphere), ``steps`` passes for anneal, the mean pass count of gradient ascent at n (with its
    time at the cap), and a polish's passes, Newton steps and local-maximum check. For a run at
    ``n`` timed on a smaller instance ``ham``, ``scale`` is the ratio of their coefficient bytes
    (a pass reads each coefficient once). Whether Lanczos runs on the dense Hessian is decided
    as the run decides it: for the run's own instance with the memory available now (it is
    held), for a plan from the memory the instance at n would leave."""
    from ..algorithms._checks import dense_work
    from ..algorithms.hessian_ascent import _WORKING_COPIES, eigen_solves, hessian_moves

    held = n is None  # the run's own instance, not a smaller one timed for a plan
    n = ham.n if n is None else n
    grad = scale * _time_pass(ham, "gradient")
    moves = eigen_solves(ham.mixture, steps, start) if method == "hessian" else 0
    needs_hessian = moves > 0 or polish or method == "gradient"
    hess = scale * _time_pass(ham, "hessian") if needs_hessian else 0.0
    field = ham.mixture is not None and ham.mixture.has_field
    matvec, dense, note = None, True, ""
    if moves > 0:  # a dense product, or a Hessian-vector product's pass where that won't fit
        if held:
            need, room = dense_work(ham, _WORKING_COPIES)
        elif ham.mixture is not None:
            need, room = dense_lanczos_memory(ham.mixture, n, ham.dtype)
        else:  # given coefficients have no plan (no mixture to size an instance at n)
            need, room = 0, 0
        dense = need <= room
        matvec = matvec_seconds(n) if dense else scale * _time_pass(ham, "hvp")
        if not dense:
            note = "\n" + _matrix_free_note(n, need, room, matvec, ham.dtype)
    run = run_seconds(method, n, steps, polish, (grad, hess), moves, field, matvec, dense)
    if method == "hessian":
        steps_taken = hessian_moves(ham.mixture, steps)
        what = ("the field stage, " if field else "") + f"{steps_taken} Hessian steps"
        if moves > steps_taken:
            what = "the start along the top eigenvector of Hess H(0), " + what
        what += " and the polish" if polish else ""
        if moves == 0:
            why = "--steps 1 has none" if steps == 1 else "the field stage ends on the sphere"
            parts = [p for p, on in (("the field stage", field), ("the polish", polish)) if on]
            if not parts:
                return f"no Hessian step: {why}", None
            verb = "takes" if len(parts) == 1 else "take"
            text = f"no Hessian step: {why}; {' and '.join(parts)} {verb} about"
            return f"{text} {seconds_text(run)}", run
        text = (
            f"one Hessian pass: {seconds_text(hess)}; estimated run time about"
            f" {seconds_text(run)} ({what})"
        )
        return text + note, run
    if method == "anneal":
        what = f"{steps} Langevin steps" + (" and the polish" if polish else "")
        return (
            f"one gradient pass: {seconds_text(grad)}; estimated run time about"
            f" {seconds_text(run)} ({what})"
        ), run
    passes = gradient_passes(n, steps)
    cap = run + (PASSES_PER_ITERATION * steps - passes) * grad  # every iteration to max_iter
    return (
        f"one gradient pass: {seconds_text(grad)}; estimated run time about"
        f" {seconds_text(run)} (typically {passes:.0f} passes at this n; at most"
        f" {seconds_text(cap)} if it runs to --max-iter {steps})"
    ), run


def _matrix_free_note(n: int, need: int, room: int, product: float, dtype: str) -> str:
    """Why a run's Hessian steps run Lanczos on Hessian-vector products (each a pass over the
    coefficients, ``product`` seconds) instead of the dense Hessian, which makes them far
    slower: the dense work (``need`` bytes) does not fit in half the memory left beside the
    ``dtype`` instance (``room`` bytes)."""
    left = (
        f"half of what this machine leaves beside the instance ({format_bytes(room)})"
        if room > 0
        else "this machine, which cannot hold the instance itself"
    )
    halves = " (or with --dtype float32, which halves the instance)" if dtype == "float64" else ""
    return (
        f"note: matrix-free Lanczos: the dense Hessian's work at n = {n} ({format_bytes(need)})"
        f" does not fit in {left}, so every Lanczos product is a Hessian-vector product, a pass"
        f" over the coefficients ({seconds_text(product)} each); with that memory free{halves}"
        " the steps run on the dense Hessian, far faster"
    )


def _ground_state(mixture: Mixture) -> float | None:
    from ..theory import ground_state

    try:
        gs = ground_state(mixture)
    except (ValueError, RuntimeError):
        return None
    return float(gs.value) if gs.converged else None


def _summary(
    result: Any, problem: dict[str, Any], gs: float | None, files: dict[str, str]
) -> dict[str, Any]:
    """The run's summary: ``problem`` (gammas, n, seed, start seed, dtype) first, so that a
    saved ``--json`` output says which instance it is about."""
    info = result.info
    out = {
        **problem,
        "method": result.method,
        "energy": result.energy,
        "alg": info.get("alg"),
        "ground_state": gs,
        "gap_alg": result.energy - info["alg"] if info.get("alg") is not None else None,
        "gap_gs": result.energy - gs if gs is not None else None,
        "local_max": info.get("local_max"),
        "n_positive": info.get("n_positive"),
        "grad_norm": info.get("grad_norm"),
        "top_eigenvalue": info.get("top_eigenvalue"),  # Riemannian Hessian at x, per spin
        "seconds": result.seconds,
        "files": files,
        "units": "energy per spin H(x)/n on the unit sphere, maximization",
    }
    before = {"hessian": "energy_ascent", "anneal": "energy_anneal"}.get(result.method)
    if before is not None and result.config.get("polish"):  # no line equal to the energy
        out["energy_before_polish"] = info[before]
    if result.method == "hessian":
        out["q_hat"] = info.get("q_hat")
    return out


def _table(s: dict[str, Any]) -> str:
    # six decimals for energies of order one; six significant digits where the instance's
    # scale is far from it (gammas of 1e-100 printed every energy as 0.000000: a user trial)
    finite = [abs(v) for v in (s["energy"], s["alg"]) if v is not None and math.isfinite(v)]
    scale = max(finite, default=0.0)
    form = ".6f" if scale == 0 or 1e-3 <= scale < 1e7 else ".6e"

    def num(v: Any) -> str:
        return "unknown" if v is None else format(v, form)

    rows = [("method", s["method"]), ("energy per spin", num(s["energy"]))]
    if "energy_before_polish" in s:
        rows.append(("  before polish", num(s["energy_before_polish"])))
    rows += [
        ("ALG", num(s["alg"])),
        ("GS (Parisi)", num(s["ground_state"])),
        ("energy - ALG", num(s["gap_alg"])),
        ("energy - GS", num(s["gap_gs"])),
    ]
    if s["local_max"] is not None:
        if s["local_max"]:
            verdict = "yes"
        elif s["n_positive"]:
            verdict = f"no ({s['n_positive']} positive tangent eigenvalues)"
        else:  # no positive eigenvalue, but the gradient is above the run's tolerance
            verdict = "no (not a critical point: the run stopped before its gradient tolerance)"
        rows.append(("local maximum", f"{verdict}; |P grad H|/n = {s['grad_norm']:.1e}"))
    if s.get("top_eigenvalue") is not None:
        # the Riemannian Hessian's (P Hess P - (x . grad H) I at |x| = 1), not the
        # projected Hessian's of the path's eigenvalue column (a user trial read one for the
        # other: -0.059 here, 4.70 there, at the same point)
        rows.append(("top Riemannian eigenvalue", f"{num(s['top_eigenvalue'])} per spin"))
    sampling, estimated = s.get("seconds_sampling"), s.get("seconds_estimated")
    notes = [f"estimated {seconds_text(estimated)}"] if estimated is not None else []
    notes += [f"sampling {sampling:.2f} s before it"] if sampling is not None else []
    took = f" ({'; '.join(notes)})" if notes else ""
    rows.append(("time", f"{s['seconds']:.2f} s{took}"))
    for k, v in s["files"].items():
        rows.append((k, v))
    width = max(len(k) for k, _ in rows)
    return "\n".join(f"{k.ljust(width)}  {v}" for k, v in rows)


def run(args: argparse.Namespace) -> int:
    from ..algorithms import (
        auto_steps,
        gradient_ascent,
        hessian_ascent,
        hessian_moves,
        langevin_anneal,
    )
    from ..algorithms.baselines import geometric_schedule
    from ..algorithms.plotting import plot_result

    mixture = mixture_from(args)
    threads_note = threads_from(args)
    if args.n < 2:  # before sampling, not after (every method refuses n = 1)
        why = " (the sphere of n = 1 is the two points -1 and +1)" if args.n == 1 else ""
        raise ValueError(f"--n must be >= 2, got {args.n}{why}")
    for flag, seed in (("--seed", args.seed), ("--start-seed", args.start_seed)):
        _check_seed(seed, flag)  # the library's rule, before anything is printed or sampled
    if args.method == "gradient" and args.steps is not None:
        raise ValueError(
            "--steps applies to --method hessian or anneal; gradient's iteration cap is"
            " --max-iter (as in sweep)"
        )
    if args.method != "gradient" and args.max_iter is not None:
        raise ValueError(f"--max-iter applies to --method gradient only, not {args.method}")
    flag, given = (
        ("--max-iter", args.max_iter) if args.method == "gradient" else ("--steps", args.steps)
    )
    default_steps = {"hessian": auto_steps(args.n), "gradient": 2000, "anneal": 400}[args.method]
    steps = default_steps if given is None else given
    # refused before the estimate is printed, with the methods' own bound on steps
    check_count(steps, flag, maximum=MAX_STEPS)
    if args.tol is not None and args.method != "hessian":
        raise ValueError(f"--tol applies to --method hessian only, not {args.method}")
    if args.start is not None and args.method != "hessian":
        raise ValueError(f"--start applies to --method hessian only, not {args.method}")
    start = "auto" if args.start is None else args.start
    start_used(start, mixture)  # --start top without a degree-2 term: refused before the work
    if args.no_polish and args.method == "gradient":
        raise ValueError(
            "--no-polish applies to --method hessian or anneal; gradient does not polish"
        )
    tol = 1e-3 if args.tol is None else args.tol
    if not (math.isfinite(tol) and tol > 0):
        raise ValueError(f"--tol must be a positive number, got {tol!r}")
    out_folder(args.out)
    # before the run, so that a bad --out fails at once (a plan writes nothing)
    out = None if args.plan_only else ensure_folder(args.out)
    if out is not None:  # and its files can be written: checked again only after the run
        output_pair_paths(out / "result", "result")
        refuse_folder(out / "path.png", "remove it or give another --out")
        require_writable(out)
    say = (lambda *a: None) if args.json else print
    if threads_note is not None:
        say(threads_note)
    need = estimate_memory(mixture, args.n, args.dtype)
    say(
        f"instance: {mixture!r}, n = {args.n}, seed = {args.seed}, {args.dtype}: "
        f"{format_bytes(need)} of coefficients; {counted(get_num_threads(), 'thread')},"
        f" {kernel_path()}"
    )
    if args.plan_only and args.json:
        raise ValueError("--plan-only prints its plan as text; give it without --json")
    polish = not args.no_polish and args.method != "gradient"
    if args.plan_only:  # before the memory check: a plan may be for a bigger machine
        load = OtherLoad().start()
        try:
            probe, seconds = _probe(mixture, args.n, args.dtype)
        except MemoryError as exc:  # not even a small instance to time fits (a review)
            load.stop()
            say(f"no time estimate: the kernels could not be timed here: {exc}")
        else:
            say(_sampling_text(probe, seconds, need))
            scale = need / probe.nbytes
            say(_run_estimate(probe, args.method, steps, polish, args.n, scale, start)[0])
            del probe  # freed before the memory check, which counts this process's memory
            # a trial's plans varied 3-5x under load; a plan's timing takes milliseconds, so
            # the load is read over half a second (the plan waits out the rest)
            busy = busy_note(load.stop(settle=0.5), "the plan", get_num_threads())
            if busy is not None:
                say(f"note: {busy}")
        try:
            require_memory(need, f"an instance of {mixture!r} with n = {args.n}", _SMALLER)
        except MemoryError as exc:
            say(f"note: {exc}")
        say("plan only: no run, nothing written")
        return 0
    require_memory(need, f"an instance of {mixture!r} with n = {args.n}", _NO_ROOM)
    sampling = _sampling_estimate(mixture, args.n, args.dtype, need)
    if sampling is not None:
        say(sampling)
    quiet = args.no_progress or args.json
    bars = not quiet and sys.stderr.isatty()  # no bar frames in a log
    started = time.perf_counter()
    load = OtherLoad().start()  # over sampling and timing: long enough only for big instances
    ham = Hamiltonian.sample(mixture, args.n, args.seed, dtype=args.dtype, progress=bars)
    sampling_seconds = time.perf_counter() - started
    estimate_text, estimated = _run_estimate(ham, args.method, steps, polish, start=start)
    say(estimate_text)
    busy = busy_note(load.stop(), threads=get_num_threads())
    if busy is not None:
        say(f"note: {busy}")

    from tqdm import tqdm

    total = steps
    if args.method == "hessian":
        total = hessian_moves(mixture, steps)
    bar = tqdm(
        total=total, disable=True if quiet else None, unit="step", leave=False
    )  # None: tty only
    if polish and total == 0 and not mixture.has_field:  # polish: never for gradient
        bar.set_description_str("polishing", refresh=True)  # no step: the polish runs first

    def progress(row: dict[str, Any]) -> None:
        bar.update(1)
        bar.set_postfix(step=row["step"], q=f"{row['q']:.3f}", energy=f"{row['energy']:.4f}")
        if polish and bar.n >= total:  # the polish starts now
            bar.set_description_str("polishing", refresh=True)

    try:
        if args.method == "hessian":
            result = hessian_ascent(
                ham,
                steps=steps,
                tol=tol,
                seed=args.start_seed,
                polish=polish,
                callback=progress,
                start=start,
            )
        elif args.method == "gradient":
            result = gradient_ascent(ham, seed=args.start_seed, max_iter=steps, callback=progress)
        else:
            result = langevin_anneal(
                ham,
                seed=args.start_seed,
                schedule=geometric_schedule(1.0, 0.01, steps),
                polish=polish,
                callback=progress,
            )
    finally:
        bar.close()
    json_path, npz_path = result.save(out / "result")
    png = out / "path.png"
    plot_result(result, png)
    files = {"result": str(json_path), "x": str(npz_path), "plot": str(png)}
    problem = {
        "gammas": mixture.to_text(),
        "n": args.n,
        "seed": args.seed,
        "start_seed": args.start_seed,
        "dtype": args.dtype,
    }
    summary = _summary(result, problem, _ground_state(mixture), files)
    summary["seconds_sampling"] = sampling_seconds  # to set beside the estimate printed first
    summary["seconds_estimated"] = estimated  # the run's time printed before it (a trial's wish)
    if args.json:
        print(json_text(summary))
    else:
        print(_table(summary))
        print("(energies per spin, maximization convention)")
    return 0
