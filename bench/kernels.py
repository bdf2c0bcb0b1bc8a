"""Benchmark orthoclimb's kernels against dense peers and against the streaming roofline.

Run ``python bench/kernels.py`` (``--quick`` for a smoke run, ``--help`` for options). It
prints one table per case and writes JSON (default ``bench/results/kernels.json``, written
atomically) with every sample; ``--markdown FILE`` also writes the tables as Markdown.

What is measured, all in one run and as ratios only (never absolute timed assertions):

* dense3 / dense4 / overhead: energy, gradient, Hessian and HVP of orthoclimb against the same
  polynomial as a dense symmetric float64 tensor, with NumPy (best of a matmul, a tensordot
  chain and ``einsum(optimize=True)``), opt_einsum and PyTorch CPU autograd (gradient, HVP);
  ratio = peer seconds / orthoclimb seconds.
* roofline: kernel seconds against the time to read the same number of bytes at the read
  bandwidth measured in the same run (fastest of ``numpy.sum`` and BLAS matrix-vector
  products in two shapes, over an array of the same size); roofline fraction =
  (bytes / bandwidth) / seconds.
* float32: float32 against float64 coefficient storage; ratio = float64 s / float32 s.
* threads: one worker thread against all of them; ratio = 1-thread s / K-thread s.
* batch: energy of b points in one call against b single calls; ratio = singles s / batch s.
  A BLAS matrix product timed alongside gives the multiply-add ceiling of that ratio, and
  a BLAS product of the batch's own shape and work (a dense matrix of the coefficients' size
  times the n x b points) is its peer: ratio = product s / batch s.
* sampling: ``Hamiltonian.sample`` against NumPy's ``standard_normal`` drawing as many
  Gaussians on one thread; ratio = NumPy s / orthoclimb s.

Times are seconds per call: median of repeats after a warm-up (min and repeat count kept).
"""

from __future__ import annotations

import argparse
import dataclasses
import json
import os
import sys
import tempfile
import time
import traceback
from pathlib import Path

import _cases
import _env
import _peers
import _report
import _targets
import _timing

import orthoclimb as oc

DEFAULT_OUT = Path(__file__).resolve().parent / "results" / "kernels.json"
SCHEMA = "orthoclimb.bench.kernels/1"


def run_case(name: str, cfg: _cases.Config, ws: _cases.Workspace) -> dict:
    """Run one case; a case refused for memory becomes a 'refused' entry, one that raised a
    'failed' entry with its error (the traceback is logged). Records the wall
    time and the average number of cores other processes used meanwhile."""
    _cases.log(f"[{name}] starting")
    start = time.perf_counter()
    others = _env.OtherLoad()
    others.start()
    try:
        case = _cases.CASES[name](cfg, ws)
    except _cases.MemoryRefused as exc:
        _cases.log(f"[{name}] REFUSED: {exc}")
        case = {"name": name, "title": "not run", "status": "refused", "reason": str(exc)}
        case["rows"] = []
    except Exception as exc:  # noqa: BLE001 - one broken case must not lose the others' rows
        _cases.log(f"[{name}] FAILED:\n{traceback.format_exc()}")
        reason = f"{type(exc).__name__}: {exc}"
        case = {"name": name, "title": "failed", "status": "failed", "reason": reason}
        case["rows"] = []
    case["elapsed_s"] = time.perf_counter() - start
    case["other_processes_cores"] = others.stop()
    _cases.log(f"[{name}] done in {case['elapsed_s']:.1f} s")
    return case


def setup(args) -> _cases.Config:
    """Thread counts, sizes and plan from the options; returns the run configuration."""
    threads = args.threads or oc.get_num_threads()
    oc.set_num_threads(threads)
    cfg = _cases.Config(
        plan=_timing.QUICK_PLAN if args.quick else _timing.Plan(),
        sizes=_cases.QUICK_SIZES if args.quick else _cases.FULL_SIZES,
        threads=threads,
        quick=args.quick,
        torch_version=_peers.torch_available(),
    )
    cfg.blas_threads_by = _env.set_blas_threads(threads)
    if not cfg.blas_threads_by:
        cfg.notes.append("could not set the BLAS thread count; BLAS uses its default")
    if args.quick:
        cfg.notes.append("--quick: small sizes and few repeats; targets are 'info' only")
    note = _env.slowing_vars_note()
    if note:
        cfg.notes.append(note)
    if args.wait_quiet:
        _cases.log(f"waiting up to {args.wait_quiet:g} s for other processes to quieten")
        _env.wait_until_quiet(args.wait_quiet)
    cfg.others_at_start = _env.others_busy(1.0)
    if cfg.others_at_start is not None and cfg.others_at_start > 0.3:
        cfg.notes.append(
            f"other processes were using {cfg.others_at_start:.1f} of {os.cpu_count()} cores "
            "at start: timings are noisy (medians are reported; see each case's header)"
        )
    return cfg


def measure_all(args) -> dict:
    """Run the selected cases, printing each table as it completes; returns the results."""
    cfg = setup(args)
    meta = _env.environment(cfg.threads, cfg.blas_threads_by, cfg.torch_version)
    meta["other_processes_cores_start"] = cfg.others_at_start
    meta["options"] = {
        "quick": args.quick,
        "cases": args.cases,
        "threads": cfg.threads,
        "plan": dataclasses.asdict(cfg.plan),
        "sizes": {k: list(v) if isinstance(v, tuple) else v for k, v in cfg.sizes.items()},
    }
    print(_report.meta_text(meta))
    for note in cfg.notes:
        print(f"note: {note}")
    ws = _cases.Workspace()
    results = {"schema": SCHEMA, "meta": meta, "notes": cfg.notes, "cases": [], "targets": []}
    start = time.perf_counter()
    for name in args.cases:
        try:
            case = run_case(name, cfg, ws)
        except KeyboardInterrupt:  # the finished cases are still written
            _cases.log(f"[{name}] interrupted: the cases finished before it are kept")
            results["interrupted"] = name
            break
        results["targets"] += _targets.evaluate_targets(case)
        results["cases"].append(case)
        print()
        print(_report.case_text(case), flush=True)
    meta["load_average_end"] = _env.load_average()
    if cfg.torch_version:  # as the dense cases set it (torch_peers), not as at start-up
        meta["torch_threads"] = _env.torch_threads()
    meta["elapsed_s"] = time.perf_counter() - start
    results["host_check"] = _cases.host_check(results["cases"])
    return results


def write_atomic(path: Path, text: str) -> None:
    """Write text to path via a temporary file in the same folder and os.replace."""
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)  # mkstemp creates 0600; give it the usual mode
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def parse_args(argv=None) -> argparse.Namespace:
    """Command-line options (see --help)."""
    ap = argparse.ArgumentParser(
        description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter
    )
    ap.add_argument(
        "--quick",
        action="store_true",
        help="small sizes and few repeats (smoke run, well under 30 s)",
    )
    ap.add_argument(
        "--threads",
        type=int,
        default=None,
        help="worker threads for orthoclimb, BLAS and torch (default: orthoclimb's)",
    )
    ap.add_argument(
        "--cases",
        default=",".join(_cases.CASES),
        help=f"comma-separated subset of: {', '.join(_cases.CASES)} (default: all)",
    )
    ap.add_argument("--out", type=Path, default=DEFAULT_OUT, help="JSON output path")
    ap.add_argument("--markdown", type=Path, default=None, help="also write Markdown tables")
    ap.add_argument(
        "--wait-quiet",
        type=float,
        default=0.0,
        metavar="SECONDS",
        help="first wait up to SECONDS for other processes to use under 0.3 cores",
    )
    ap.add_argument(
        "--from-json",
        type=Path,
        default=None,
        help="render an existing JSON result (with --markdown) instead of measuring",
    )
    args = ap.parse_args(argv)
    args.cases = [c.strip() for c in args.cases.split(",") if c.strip()]
    unknown = [c for c in args.cases if c not in _cases.CASES]
    if unknown:
        ap.error(f"unknown case(s) {unknown}; choose from {list(_cases.CASES)}")
    if args.threads is not None and args.threads < 1:
        ap.error("--threads must be >= 1")
    return args


def main(argv=None) -> int:
    """Measure (or re-render with --from-json), print, write JSON/Markdown. Exit status 1 when
    a case was refused for lack of memory or failed, 130 after a Ctrl-C (the cases finished
    before it are written)."""
    args = parse_args(argv)
    if args.from_json:
        results = json.loads(args.from_json.read_text(encoding="utf-8"))
        for case in results["cases"]:
            print(_report.case_text(case) + "\n")
    else:
        results = measure_all(args)
        write_atomic(args.out, json.dumps(results, indent=1, default=str) + "\n")
        _cases.log(f"wrote {args.out}")
    print()
    print(_report.targets_text(results["targets"]))
    if results.get("host_check"):
        print(_report.host_check_text(results["host_check"]))
    print(_report.unsteady_text(results))
    if args.markdown:
        write_atomic(args.markdown, _report.render_markdown(results) + "\n")
        _cases.log(f"wrote {args.markdown}")
    if results.get("interrupted"):
        return 130
    not_run = [c["name"] for c in results["cases"] if c.get("status") in ("refused", "failed")]
    return 1 if not_run else 0


if __name__ == "__main__":
    sys.exit(main())
