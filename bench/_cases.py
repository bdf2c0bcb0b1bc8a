"""The benchmark cases: each samples (or reuses) an instance, measures a group of functions
with _timing.measure, and returns a JSON-ready dict with one row per measured function.

A row holds seconds per call (median, min, repeats, every sample), the bytes the function must
read, and where meaningful a ratio (its meaning is the case's ``ratio_meaning``), a roofline
fraction and the relative error against orthoclimb's result.
"""

from __future__ import annotations

import dataclasses
import math
import sys
import time
from collections.abc import Callable

import _env
import _peers
import _report
import _timing
import numpy as np

import orthoclimb as oc

SEED = 20240611
BATCH = 32
MEMORY_MARGIN = 1.15
MEMORY_RESERVE = 512 * 2**20

FULL_SIZES = {
    "overhead": 24,
    "dense3": 400,
    "dense4": 120,
    "roofline": 800,
    "float32": 800,
    "threads": 800,
    "batch": (800, 400),
    "wide": ((3, 300, 2048), (2, 4000, 1024)),
    "sampling": 400,
}
QUICK_SIZES = {
    "overhead": 12,
    "dense3": 48,
    "dense4": 20,
    "roofline": 160,
    "float32": 160,
    "threads": 160,
    "batch": (96,),
    "wide": ((3, 40, 600), (2, 400, 300)),
    "sampling": 100,
}


class MemoryRefused(RuntimeError):
    """A case needs more memory than oc.available_memory() reports."""


@dataclasses.dataclass
class Config:
    plan: _timing.Plan
    sizes: dict
    threads: int
    quick: bool
    torch_version: str | None
    blas_threads_by: str = ""
    others_at_start: float | None = None
    notes: list[str] = dataclasses.field(default_factory=list)


def log(message: str) -> None:
    """Progress on stderr, so that stdout carries only the tables."""
    print(message, file=sys.stderr, flush=True)


# -- instances, points, memory ----------------------------------------------------------


class Workspace:
    """Sampled instances kept across cases (sampling n = 800 takes seconds)."""

    def __init__(self):
        self._instances: dict[tuple, oc.Hamiltonian] = {}

    def extra_bytes(self, p: int, n: int, dtype: str) -> int:
        """Bytes a new instance would take (0 when it is already sampled)."""
        if (p, n, dtype) in self._instances:
            return 0
        return oc.estimate_memory(oc.Mixture({p: 1.0}), n, dtype)

    def instance(self, p: int, n: int, dtype: str = "float64") -> oc.Hamiltonian:
        key = (p, n, dtype)
        if key not in self._instances:
            start = time.perf_counter()
            self._instances[key] = oc.Hamiltonian.sample(oc.Mixture({p: 1.0}), n, SEED, dtype)
            log(f"   sampled p={p} n={n} {dtype} in {time.perf_counter() - start:.1f} s")
        return self._instances[key]


def unit_vector(n: int, stream: int) -> np.ndarray:
    """A reproducible random point of the unit sphere in R^n."""
    x = np.random.default_rng([SEED, stream]).standard_normal(n)
    return x / np.linalg.norm(x)


def points(b: int, n: int) -> np.ndarray:
    """b reproducible random unit vectors, shape (b, n)."""
    return np.stack([unit_vector(n, 100 + i) for i in range(b)])


def require(case: str, parts: dict[str, int]) -> dict:
    """Print what the case will allocate; raise MemoryRefused if it does not fit."""
    need = sum(parts.values())
    have = oc.available_memory()
    shown = " + ".join(f"{k} {_report.fmt_bytes(v)}" for k, v in parts.items() if v)
    log(
        f"[{case}] memory needed: {_report.fmt_bytes(need)} ({shown or 'nothing new'}); "
        f"available: {_report.fmt_bytes(have)}"
    )
    if need * MEMORY_MARGIN + MEMORY_RESERVE > have:
        raise MemoryRefused(
            f"needs about {_report.fmt_bytes(need)} (+15% and 512 MiB headroom) but only "
            f"{_report.fmt_bytes(have)} is available; free memory or deselect it with --cases"
        )
    return {"needed_bytes": need, "available_bytes": have, "parts_bytes": parts}


# -- rows -------------------------------------------------------------------------------


def make_row(kernel, impl, variant, stats, p, n, nbytes=None, **extra) -> dict:
    """One measured function as a JSON-ready dict (ratio/roofline filled in later)."""
    row = {"kernel": kernel, "impl": impl, "variant": variant, "p": p, "n": n}
    row.update(stats.to_dict())
    row.update(
        {
            "bytes": nbytes,
            "ratio": None,
            "ratio_min": None,
            "roofline": None,
            "roofline_min": None,
            "rel_err": None,
            "best": False,
            "target": None,
            "note": "",
        }
    )
    row.update(extra)
    return row


def set_ratio(row: dict, numerator: dict) -> None:
    """ratio = numerator's time / this row's time (median and min based)."""
    row["ratio"] = numerator["median_s"] / row["median_s"]
    row["ratio_min"] = numerator["min_s"] / row["min_s"]


def set_peer_ratio(row: dict, base: dict) -> None:
    """ratio = this (peer) row's time / the base (orthoclimb) row's time."""
    row["ratio"] = row["median_s"] / base["median_s"]
    row["ratio_min"] = row["min_s"] / base["min_s"]


def set_roofline(row: dict, bw: dict) -> None:
    """Roofline fraction of the row's bytes at the measured bandwidth (median; best case)."""
    row["roofline"] = _timing.roofline_fraction(row["bytes"], bw["Bps"], row["median_s"])
    row["roofline_min"] = _timing.roofline_fraction(row["bytes"], bw["max_Bps"], row["min_s"])


def probe_rows(stats: dict, bw: dict, label: str, p: int, n: int) -> list[dict]:
    rows = []
    for name, info in bw["probes"].items():
        row = make_row(
            "read", "probe", f"{name} {label}", stats[("probe", label, name)], p, n, info["bytes"]
        )
        row["note"] = _report.fmt_rate(info["median_Bps"]) + (
            " (best)" if name == bw["best_probe"] else ""
        )
        rows.append(row)
    return rows


def add_probes(fns: dict, flat: np.ndarray, label: str) -> dict[str, int]:
    """Put the bandwidth probes over `flat` into the measured group; returns their bytes."""
    nbytes = {}
    for name, (fn, size) in _timing.bandwidth_probes(flat).items():
        fns[("probe", label, name)] = fn
        nbytes[name] = size
    return nbytes


def probe_bandwidth(stats: dict, label: str, nbytes: dict[str, int]) -> dict:
    return _timing.bandwidth({k: stats[("probe", label, k)] for k in nbytes}, nbytes)


HOST_PROBE_SIZE = 256
"""Side of the small matrix product timed beside the kernels of each case (see add_host_probe)."""


def add_host_probe(fns: dict) -> None:
    """Put a small float64 matrix product (HOST_PROBE_SIZE^3 multiply-adds, operands in cache)
    into the measured group. Its samples interleave with the case's, and its rate depends only
    on what else the host runs: the processes of this machine show in the load figures, but
    other virtual machines sharing the host's cores do not. A case whose probe ran well below
    the run's best (see host_check) was measured on a busy host."""
    fns[("probe", "host", "dgemm")] = gemm_probe(HOST_PROBE_SIZE)


def host_probe_row(stats: dict, p: int, n: int) -> dict:
    """The host probe's row; `host_rate` is its median rate in multiply-adds per second."""
    st = stats[("probe", "host", "dgemm")]
    rate = HOST_PROBE_SIZE**3 / st.median
    row = make_row("compute", "probe", f"host dgemm {HOST_PROBE_SIZE}^3", st, p, n)
    row["host_rate"] = rate
    row["note"] = f"{rate / 1e9:.1f} G multiply-adds/s"
    return row


def host_check(cases: list[dict], fraction: float = 0.9) -> dict:
    """Each case's host-probe rate as a fraction of the best over the run, and the busy cases:
    those below `fraction` of it, and those whose own probe was unsteady (block medians more
    than UNSTEADY_SPREAD apart), which the first test cannot see when a run has one case or
    every case was slowed alike (a dgemm probe 40x slower than usual read 1.00 in a run of one
    case, a review). Busy cases' ratios against memory-bound peers are likely understated."""
    probes = {}
    for c in cases:
        own = [r for r in c.get("rows", []) if "host_rate" in r]
        for r in own:  # a case measured at several sizes (batch) has a probe per size
            probes[c["name"] if len(own) == 1 else f"{c['name']} n={r['n']}"] = r
    if not probes:
        return {"fractions": {}, "busy": []}
    best = max(r["host_rate"] for r in probes.values())
    fractions = {name: r["host_rate"] / best for name, r in probes.items()}
    busy = [name for name, f in fractions.items() if f < fraction]
    spreads = {name: r.get("block_spread") for name, r in probes.items()}
    unsteady = {
        name: s
        for name, s in spreads.items()
        if s is not None and s > _timing.UNSTEADY_SPREAD and name not in busy
    }
    return {
        "fractions": fractions,
        "busy": busy + list(unsteady),
        "unsteady": unsteady,
        "threshold": fraction,
        "single_case": len(probes) == 1,
    }


def probe_array(nbytes: int) -> np.ndarray:
    """A touched float64 array of about `nbytes` bytes, for the bandwidth probes."""
    return np.ones(max(1, nbytes // 8))


# -- orthoclimb kernels ------------------------------------------------------------------


def oc_kernels(h: oc.Hamiltonian, x: np.ndarray, v: np.ndarray) -> dict[str, Callable]:
    """kernel -> zero-argument call of the orthoclimb kernel at x (direction v for the HVP)."""
    return {
        "energy": lambda: h.energy(x),
        "gradient": lambda: h.gradient(x),
        "energy_and_gradient": lambda: h.energy_and_gradient(x),
        "hessian": lambda: h.hessian(x),
        "hvp": lambda: h.hvp(x, v),
    }


# -- dense comparison cases ---------------------------------------------------------------


def dense_memory(ws: Workspace, p: int, n: int) -> dict[str, int]:
    count = math.comb(n + p - 1, p)
    return {
        "coefficients": ws.extra_bytes(p, n, "float64"),
        "dense tensor": 8 * n**p,
        "to_dense index tables (transient)": 8 * count * (2 * p + 3),
        "bandwidth probe": 8 * count,
        "peer temporaries": 3 * 8 * n ** (p - 1),
    }


def dense_functions(cfg: Config, h, tensor, x, v) -> tuple[dict, list[str]]:
    """Measured functions keyed (impl, variant, kernel), and notes about skipped peers."""
    p, notes = tensor.ndim, []
    fns = {}
    oc_fns = oc_kernels(h, x, v)
    for kernel in _peers.KERNELS:
        fns[("orthoclimb", "", kernel)] = oc_fns[kernel]
        for variant, fn in _peers.numpy_peers(tensor, p, x, v, kernel).items():
            fns[("numpy", variant, kernel)] = fn
    if _env.package_version("opt_einsum"):
        for kernel in _peers.KERNELS:
            c = _peers.contraction(kernel, p, x, v)
            fns[("opt_einsum", "contract", kernel)] = _peers.opt_einsum_contract(tensor, c)
    else:
        notes.append("opt_einsum not importable: skipped (pip install opt_einsum)")
    if cfg.torch_version:
        try:
            torch_fns = _peers.torch_peers(tensor, p, x, v, cfg.threads)
            for kernel, fn in torch_fns.items():
                fn()  # fail here, not in the middle of the measurement
                fns[("torch", "autograd", kernel)] = fn
        except Exception as exc:
            notes.append(f"torch peers failed, skipped: {exc!r}")
    else:
        notes.append("PyTorch not importable: torch autograd peers skipped (not installed)")
    return fns, notes


def dense_rows(stats, errors, h, tensor, bws) -> list[dict]:
    """Rows of a dense case, grouped by kernel: orthoclimb first, then the peers."""
    p, n = tensor.ndim, tensor.shape[0]
    rows = []
    for kernel in _peers.KERNELS:
        base = make_row(kernel, "orthoclimb", "", stats[("orthoclimb", "", kernel)], p, n, h.nbytes)
        if bws:
            set_roofline(base, bws["coefficients"])
        group = [base]
        for key, st in stats.items():
            if key[2] != kernel or key[0] in ("orthoclimb", "probe"):
                continue
            row = make_row(kernel, key[0], key[1], st, p, n, tensor.nbytes, rel_err=errors.get(key))
            set_peer_ratio(row, base)
            if bws:
                set_roofline(row, bws["dense tensor"])
            group.append(row)
        for row in group[1:]:
            if row["rel_err"] is not None and not row["rel_err"] <= PEER_TOL:  # NaN too
                wrong = f"WRONG result (differs from orthoclimb by {row['rel_err']:.1e})"
                row["note"] = " ".join(s for s in (wrong, row["note"]) if s)
        numpy_rows = [
            r for r in group if r["impl"] == "numpy" and (r["rel_err"] or 0.0) <= PEER_TOL
        ]
        if numpy_rows:  # none right: the targets on the best NumPy row read "n/a"
            min(numpy_rows, key=lambda r: r["median_s"])["best"] = True
        rows += group
    return rows


# A peer whose result differs from orthoclimb's by more than this (relative, common practice
# for float64 results of sums of millions of terms) computes something else: it is flagged,
# and never the best NumPy row a target reads.
PEER_TOL = 1e-8


def check_against(refs: dict, errors: dict, tol: float = PEER_TOL):
    """A warm-up hook recording each peer's relative error against orthoclimb's result for
    the same kernel (keys are (impl, variant, kernel)); warns above `tol`."""

    def hook(key, value):
        if key[0] in ("orthoclimb", "probe"):
            return
        errors[key] = _peers.relative_error(value, refs[key[2]])
        if not errors[key] <= tol:  # a NaN result is wrong too
            log(f"   WARNING: {key} differs from orthoclimb by {errors[key]:.2e}")

    return hook


def run_dense(
    name: str, title: str, p: int, n: int, cfg: Config, ws: Workspace, probes: bool = True
) -> dict:
    """orthoclimb against dense peers on the same degree-p polynomial (float64); with
    `probes`, also the read bandwidth over arrays the size of the coefficients and of T."""
    memory = require(name, dense_memory(ws, p, n))
    h = ws.instance(p, n)
    start = time.perf_counter()
    tensor = h.to_dense(p, max_bytes=8 * n**p + 1)
    build_s = time.perf_counter() - start
    log(f"   dense tensor {_report.fmt_bytes(tensor.nbytes)} built in {build_s:.1f} s")
    x, v = unit_vector(n, 0), unit_vector(n, 1)
    fns, notes = dense_functions(cfg, h, tensor, x, v)
    refs = {k: fn() for k, fn in oc_kernels(h, x, v).items()}
    packed = probe_array(h.nbytes if probes else 8)
    probe_bytes = {}
    if probes:
        probe_bytes["coefficients"] = add_probes(fns, packed, "coefficients")
        probe_bytes["dense tensor"] = add_probes(fns, tensor.reshape(-1), "dense tensor")
        add_host_probe(fns)
    errors: dict = {}
    log(f"   measuring {len(fns)} functions")
    stats = _timing.measure(fns, cfg.plan, check_against(refs, errors))
    bws = {label: probe_bandwidth(stats, label, nb) for label, nb in probe_bytes.items()}
    rows = dense_rows(stats, errors, h, tensor, bws)
    for label in probe_bytes:
        rows += probe_rows(stats, bws[label], label, p, n)
    if probes:
        rows.append(host_probe_row(stats, p, n))
    fns.clear()  # the peers' closures hold the dense tensor
    del tensor, packed
    return {
        "name": name,
        "title": title,
        "status": "ok",
        "params": {"p": p, "n": n},
        "ratio_meaning": "peer median / orthoclimb median (higher: orthoclimb faster)",
        "memory": memory,
        "setup_s": {"to_dense": build_s},
        "bandwidth": bws,
        "rows": rows,
        "notes": notes,
    }


def overhead_extras(cfg: Config, h, x, v) -> dict:
    """Where the fixed cost goes: the extension called directly (no Python-side checks) and
    the wrapper with one worker thread (no cross-thread hand-off). Timed after the case's
    interleaved rounds, each group on its own (one thread is a process-wide setting), so
    their ratios to the default calls are informational."""
    fns = {}
    core = getattr(h, "_core", None)
    if core is not None:
        direct = {
            "energy": lambda: core.energy(x),
            "gradient": lambda: core.energy_gradient(x),
            "hessian": lambda: core.hessian(x),
            "hvp": lambda: core.hvp(x, v),
        }
        fns.update({("extension direct", k): fn for k, fn in direct.items()})
    stats = _timing.measure(fns, cfg.plan) if fns else {}
    oc.set_num_threads(1)
    try:
        one = oc_kernels(h, x, v)
        stats.update(_timing.measure({("1 thread", k): one[k] for k in _peers.KERNELS}, cfg.plan))
    finally:
        oc.set_num_threads(cfg.threads)
    return stats


def case_overhead(cfg, ws):
    """Per-call time at a size where the work is negligible: what a call costs in itself."""
    n = cfg.sizes["overhead"]
    title = f"fixed per-call cost at tiny size (p=3, n={n})"
    case = run_dense("overhead", title, 3, n, cfg, ws, probes=False)
    h, x, v = ws.instance(3, n), unit_vector(n, 0), unit_vector(n, 1)
    base = {r["kernel"]: r for r in case["rows"] if r["impl"] == "orthoclimb"}
    for (variant, kernel), st in overhead_extras(cfg, h, x, v).items():
        row = make_row(kernel, "orthoclimb", variant, st, 3, n, h.nbytes)
        set_ratio(row, base[kernel])
        row["note"] = "ratio = default call / this"
        case["rows"].append(row)
    floor = _timing.measure({"dot": lambda: np.dot(x, x)}, cfg.plan)["dot"]
    row = make_row("floor", "numpy", "dot(x, x)", floor, 3, n)
    row["note"] = "Python->C call floor"
    case["rows"].append(row)
    return case


def case_dense3(cfg, ws):
    n = cfg.sizes["dense3"]
    return run_dense("dense3", f"vs dense peers, p=3, n={n}, float64", 3, n, cfg, ws)


def case_dense4(cfg, ws):
    n = cfg.sizes["dense4"]
    return run_dense("dense4", f"vs dense peers, p=4, n={n}, float64", 4, n, cfg, ws)


# -- roofline, float32, threads, batch ------------------------------------------------------


def case_roofline(cfg, ws):
    """Each kernel against the time to read its coefficients at the measured bandwidth."""
    p, n = 3, cfg.sizes["roofline"]
    nbytes = oc.estimate_memory(oc.Mixture({p: 1.0}), n)
    memory = require(
        "roofline", {"coefficients": ws.extra_bytes(p, n, "float64"), "bandwidth probe": nbytes}
    )
    h = ws.instance(p, n)
    fns = {
        ("orthoclimb", "", k): fn
        for k, fn in oc_kernels(h, unit_vector(n, 0), unit_vector(n, 1)).items()
    }
    packed = probe_array(h.nbytes)
    probe_bytes = add_probes(fns, packed, "coefficients")
    add_host_probe(fns)
    log(f"   measuring {len(fns)} functions")
    stats = _timing.measure(fns, cfg.plan)
    bw = probe_bandwidth(stats, "coefficients", probe_bytes)
    rows = []
    for key, st in stats.items():
        if key[0] == "orthoclimb":
            row = make_row(key[2], "orthoclimb", "", st, p, n, h.nbytes)
            set_roofline(row, bw)
            row["note"] = _report.fmt_rate(h.nbytes / st.median)
            rows.append(row)
    rows += probe_rows(stats, bw, "coefficients", p, n)
    rows.append(host_probe_row(stats, p, n))
    del packed
    return {
        "name": "roofline",
        "title": f"streaming roofline, p={p}, n={n}, float64",
        "status": "ok",
        "params": {"p": p, "n": n},
        "ratio_meaning": "(none); roofline = (coefficient bytes / bandwidth) / kernel time",
        "memory": memory,
        "bandwidth": {"coefficients": bw},
        "rows": rows,
        "notes": [],
    }


def case_float32(cfg, ws):
    """float32 against float64 storage at the same n (kernels accumulate in float64)."""
    p, n = 3, cfg.sizes["float32"]
    dtypes = ("float64", "float32")
    sizes = {d: oc.estimate_memory(oc.Mixture({p: 1.0}), n, d) for d in dtypes}
    parts = {f"{d} coefficients": ws.extra_bytes(p, n, d) for d in dtypes}
    parts.update({f"{d}-size probe": sizes[d] for d in dtypes})
    memory = require("float32", parts)
    x, v = unit_vector(n, 0), unit_vector(n, 1)
    fns, hs, probe_bytes, arrays = {}, {}, {}, []
    for d in dtypes:
        hs[d] = ws.instance(p, n, d)
        kernels = oc_kernels(hs[d], x, v)
        for k in ("energy", "gradient", "hvp", "hessian"):
            fns[("orthoclimb", d, k)] = kernels[k]
        arrays.append(probe_array(sizes[d]))
        probe_bytes[d] = add_probes(fns, arrays[-1], f"{d} size")
    refs = {k: fn() for k, fn in oc_kernels(hs["float64"], x, v).items()}
    add_host_probe(fns)
    log(f"   measuring {len(fns)} functions")
    stats = _timing.measure(fns, cfg.plan)
    bws = {f"{d} size": probe_bandwidth(stats, f"{d} size", probe_bytes[d]) for d in dtypes}
    rows = []
    for k in ("energy", "gradient", "hvp", "hessian"):
        r64, r32 = (
            make_row(k, "orthoclimb", d, stats[("orthoclimb", d, k)], p, n, hs[d].nbytes)
            for d in dtypes
        )
        for r, d in ((r64, "float64"), (r32, "float32")):
            set_roofline(r, bws[f"{d} size"])
        set_ratio(r32, r64)
        r32["rel_err"] = _peers.relative_error(fns[("orthoclimb", "float32", k)](), refs[k])
        rows += [r64, r32]
    for d in dtypes:
        rows += probe_rows(stats, bws[f"{d} size"], f"{d} size", p, n)
    rows.append(host_probe_row(stats, p, n))
    del arrays
    return {
        "name": "float32",
        "title": f"float32 vs float64 storage, p={p}, n={n}",
        "status": "ok",
        "params": {"p": p, "n": n},
        "ratio_meaning": "float64 median / float32 median; rel.err = float32 vs float64 result",
        "memory": memory,
        "bandwidth": bws,
        "rows": rows,
        "notes": [],
    }


def alternate_threads(fns: dict, counts: tuple[int, ...], plan: _timing.Plan) -> dict:
    """Measure fns under each thread count in turn, once per round of `plan`, so that load
    changes hit every count alike; returns stats keyed (threads, *key)."""
    per_round = dataclasses.replace(
        plan,
        rounds=1,
        min_repeats=math.ceil(plan.min_repeats / plan.rounds),
        min_slow_repeats=math.ceil(plan.min_slow_repeats / plan.rounds),
        max_repeats=math.ceil(plan.max_repeats / plan.rounds),
        budget_s=plan.budget_s / plan.rounds,
    )
    stats: dict = {}
    for _ in range(plan.rounds):
        for threads in counts:
            oc.set_num_threads(threads)
            for key, st in _timing.measure(fns, per_round).items():
                merged = stats.setdefault((threads, *key), _timing.Stats([], st.number))
                # each round picks its own calls per sample: keep the largest (the samples
                # are per-call means either way)
                merged.number = max(merged.number, st.number)
                merged.samples += st.samples
                merged.blocks += st.blocks
    return stats


def case_threads(cfg, ws):
    """One worker thread against cfg.threads; bandwidth achieved by each."""
    p, n, k = 3, cfg.sizes["threads"], cfg.threads
    base = {
        "name": "threads",
        "title": f"1 vs {k} threads, p={p}, n={n}",
        "params": {"p": p, "n": n, "threads": k},
        "ratio_meaning": "1-thread median / K-thread median",
    }
    if k < 2:
        return {**base, "status": "skipped", "reason": "needs --threads >= 2", "rows": []}
    parts = {f"{d} coefficients": ws.extra_bytes(p, n, d) for d in ("float64", "float32")}
    memory = require("threads", parts)
    x = unit_vector(n, 0)
    fns = {}
    for d in ("float64", "float32"):
        h = ws.instance(p, n, d)
        fns[(d, "energy")] = (lambda h=h: h.energy(x), h.nbytes)
        fns[(d, "gradient")] = (lambda h=h: h.gradient(x), h.nbytes)
    log(f"   measuring {len(fns)} functions, alternating 1 and {k} threads")
    stats = alternate_threads({key: f for key, (f, _) in fns.items()}, (1, k), cfg.plan)
    oc.set_num_threads(k)
    rows = []
    for (d, kernel), (_, nbytes) in fns.items():
        one, many = (
            make_row(kernel, "orthoclimb", f"{d} {t}T", stats[(t, d, kernel)], p, n, nbytes)
            for t in (1, k)
        )
        for r in (one, many):
            r["note"] = _report.fmt_rate(nbytes / r["median_s"])
        set_ratio(many, one)
        rows += [one, many]
    return {**base, "status": "ok", "memory": memory, "rows": rows, "notes": []}


def batch_functions(h, xs: np.ndarray, extras: bool) -> dict:
    """Batch-energy functions keyed (kernel, variant); with `extras`, also the
    energy-and-gradient pair and a scan of batch sizes."""
    b = xs.shape[0]
    fns = {
        ("energy", f"{b} single calls"): lambda: [h.energy(row) for row in xs],
        ("energy", f"batch b={b}"): lambda: h.energy(xs),
    }
    if extras:
        fns[("energy_and_gradient", f"{b} single calls")] = lambda: [
            h.energy_and_gradient(row) for row in xs
        ]
        fns[("energy_and_gradient", f"batch b={b}")] = lambda: h.energy_and_gradient(xs)
        fns[("energy", "single call")] = lambda: h.energy(xs[0])
        for k in (2, 4, 8, 16):
            fns[("energy", f"batch b={k}")] = lambda k=k: h.energy(xs[:k])
    return fns


def batch_error(h, xs: np.ndarray, kernel: str) -> float:
    """Relative error of one batch call over the points ``xs`` against single calls: the
    energies, and with ``kernel`` 'energy_and_gradient' the gradients too."""
    if kernel == "energy":
        return _peers.relative_error(h.energy(xs), [h.energy(x) for x in xs])
    e, g = h.energy_and_gradient(xs)
    singles = [h.energy_and_gradient(x) for x in xs]
    value = np.concatenate([e, g.ravel()])
    reference = np.concatenate([[s[0] for s in singles], np.ravel([s[1] for s in singles])])
    return _peers.relative_error(value, reference)


def per_coefficient_note(row: dict, h, points_per_call: int) -> str:
    """Nanoseconds per (coefficient x point) of a row: the batch kernel's inner-loop cost."""
    ns = 1e9 * row["median_s"] / (h.num_coefficients * points_per_call)
    return f"{ns:.3f} ns/coef/point"


def batch_rows(stats: dict, h, xs: np.ndarray, p: int, n: int) -> list[dict]:
    """Rows with ratio = time of b single calls / time of one batch call."""
    b = xs.shape[0]
    rows = []
    for kernel in ("energy", "energy_and_gradient"):
        singles = stats.get((kernel, f"{b} single calls"))
        if singles is None:
            continue
        s_row = make_row(kernel, "orthoclimb", f"{b} single calls", singles, p, n, h.nbytes * b)
        batch = stats[(kernel, f"batch b={b}")]
        b_row = make_row(kernel, "orthoclimb", f"batch b={b}", batch, p, n, h.nbytes)
        set_ratio(b_row, s_row)
        s_row["note"] = per_coefficient_note(s_row, h, b)
        b_row["note"] = per_coefficient_note(b_row, h, b)
        rows += [s_row, b_row]
    single = stats.get(("energy", "single call"))
    if single is None:
        return rows
    one = make_row("energy", "orthoclimb", "single call", single, p, n, h.nbytes)
    one["note"] = per_coefficient_note(one, h, 1)
    rows.append(one)
    for k in (2, 4, 8, 16):
        row = make_row(
            "energy",
            "orthoclimb",
            f"batch b={k}",
            stats[("energy", f"batch b={k}")],
            p,
            n,
            h.nbytes,
        )
        row["ratio"] = k * one["median_s"] / row["median_s"]
        row["ratio_min"] = k * one["min_s"] / row["min_s"]
        row["note"] = f"ratio vs {k} single calls; " + per_coefficient_note(row, h, k)
        rows.append(row)
    return rows


GEMM_SIZE = 2048


def gemm_probe(size: int = GEMM_SIZE) -> Callable[[], object]:
    """A float64 matrix product of two size-square matrices through NumPy's BLAS (all its
    threads): size**3 multiply-adds, at GEMM_SIZE close to the machine's peak rate."""
    rng = np.random.default_rng(SEED)
    a, b = rng.standard_normal((2, size, size))
    return lambda: a @ b


def same_shape_products(h, b: int) -> dict:
    """The batch energy's work as NumPy matrix products (BLAS, all its threads): a dense
    float64 matrix A of ceil(C / n) x n entries (C coefficients, so about the coefficient
    bytes, read from the same cache level) against n x b points, one multiply-add per entry
    and point, as the batch needs per coefficient and point. Both orientations, A X and
    X^T A^T; the faster one is the peer."""
    rng = np.random.default_rng(SEED)
    a = rng.random((same_shape_rows(h), h.n))
    x = rng.random((h.n, b))
    xt = np.ascontiguousarray(x.T)
    return {
        ("compute", "probe:same shape A X"): lambda: a @ x,
        ("compute", "probe:same shape X^T A^T"): lambda: xt @ a.T,
    }


def same_shape_rows(h) -> int:
    """Rows of the same-shape matrix: ceil(C / n)."""
    return -(-h.num_coefficients // h.n)


def same_shape_peer(stats: dict, rows: list[dict], h, b: int) -> tuple[dict, str]:
    """The faster same-shape product's row, with its ratio to the batch (its time / batch
    time), and a note with both multiply-add rates."""
    m = same_shape_rows(h)
    work = m * h.n * b
    name, st = min(
        ((k[1], v) for k, v in stats.items() if k[1].startswith("probe:same shape")),
        key=lambda kv: kv[1].median,
    )
    shape = f"{m}x{h.n} @ {h.n}x{b}"
    row = make_row("compute", name, shape, st, None, h.n)
    batch = next(r for r in rows if r["kernel"] == "energy" and r["variant"] == f"batch b={b}")
    set_peer_ratio(row, batch)
    ours = h.num_coefficients * b / batch["median_s"]
    row["note"] = (
        f"{work / st.median / 1e9:.1f} G multiply-adds/s (median); ratio = its time / batch time"
    )
    note = (
        f"n={h.n}: NumPy's BLAS on the same shape and work ({shape}, the faster orientation) "
        f"runs at {work / st.median / 1e9:.1f} G multiply-adds/s, the batch at "
        f"{ours / 1e9:.1f} (medians): its time / the batch's time = {row['ratio']:.2f}x"
    )
    return row, note


def compute_ceiling(stats: dict, rows: list[dict], h, b: int) -> tuple[dict, str]:
    """The probe's row and a note: the best multiply-add rate of the matrix product, the batch's
    fraction of it (the energy needs one multiply-add per coefficient and point), and the
    largest batch ratio that rate allows against the measured single calls."""
    st = stats[("compute", "probe:dgemm")]
    rate = GEMM_SIZE**3 / st.min  # the fastest repeat: a ceiling must not be understated
    probe = make_row("compute", "probe:dgemm", f"{GEMM_SIZE}^3", st, None, None)
    probe["note"] = f"{rate / 1e9:.1f} G multiply-adds/s"
    batch = next(r for r in rows if r["kernel"] == "energy" and r["variant"] == f"batch b={b}")
    singles = next(
        r for r in rows if r["kernel"] == "energy" and r["variant"] == f"{b} single calls"
    )
    work = h.num_coefficients * b
    fraction = work / batch["median_s"] / rate
    batch["note"] += f"; {fraction:.2f} of the dgemm rate"
    best = singles["median_s"] / (work / rate)
    note = (
        f"n={h.n}: at the dgemm rate ({rate / 1e9:.1f} G multiply-adds/s) one multiply-add per "
        f"coefficient and point bounds the batch-of-{b} ratio at {best:.1f}x; measured "
        f"{batch['ratio']:.2f}x ({fraction:.2f} of that rate)"
    )
    return probe, note


def batch_cost_fit(rows: list[dict], h) -> dict | None:
    """Least-squares fit of the batch-energy median time over b (b = 2..32) as
    t(b) = fixed + per_point * b, in nanoseconds per coefficient."""
    pts = [
        (int(r["variant"].split("=")[1]), r["median_s"])
        for r in rows
        if r["kernel"] == "energy" and r["variant"].startswith("batch b=")
    ]
    if len(pts) < 3:
        return None
    b, t = np.array(pts, dtype=float).T
    slope, intercept = np.polyfit(b, t, 1)
    per = 1e9 / h.num_coefficients
    return {"n": h.n, "fixed_ns_per_coef": intercept * per, "per_point_ns_per_coef": slope * per}


def case_batch(cfg, ws):
    """Energy of b points in one pass against b single calls, at each configured n."""
    p, sizes = 3, cfg.sizes["batch"]
    parts = {f"n={n} coefficients": ws.extra_bytes(p, n, "float64") for n in sizes}
    # the same-shape matrix of the largest n, held only while its n is measured
    parts["same-shape matrix"] = max(oc.estimate_memory(oc.Mixture({p: 1.0}), n) for n in sizes)
    memory = require("batch", parts)
    rows, notes, fits = [], [], []
    for n in sizes:
        h = ws.instance(p, n)
        xs = points(BATCH, n)
        fns = batch_functions(h, xs, extras=(n == min(sizes)))
        fns[("compute", "probe:dgemm")] = gemm_probe()
        fns.update(same_shape_products(h, BATCH))
        add_host_probe(fns)  # the batch rows missed at n = 400 with no word on the host
        log(f"   measuring {len(fns)} functions at n={n}")
        stats = _timing.measure(fns, cfg.plan)
        del fns  # the same-shape matrix
        new = batch_rows(stats, h, xs, p, n)
        for row in new:
            if row["variant"].startswith("batch b="):
                k = int(row["variant"].split("=")[1])
                row["rel_err"] = batch_error(h, xs[:k], row["kernel"])
        probe, ceiling = compute_ceiling(stats, new, h, BATCH)
        peer, versus = same_shape_peer(stats, new, h, BATCH)
        rows += new + [probe, peer, host_probe_row(stats, p, n)]
        notes += [ceiling, versus]
        fit = batch_cost_fit(new, h)
        if fit:
            fits.append(fit)
            single = next(r for r in new if r["variant"] == "single call")
            notes.append(
                f"n={n}: batch energy time ~ {fit['fixed_ns_per_coef']:.2f} + "
                f"{fit['per_point_ns_per_coef']:.3f} * b ns per coefficient (fit over b=2..32); "
                f"a single call costs {per_coefficient_note(single, h, 1)}"
            )
    return {
        "name": "batch",
        "title": f"batch of {BATCH} points vs {BATCH} single calls, p={p}",
        "status": "ok",
        "params": {"p": p, "n": list(sizes)},
        "ratio_meaning": "time of b single calls / time of one batch call",
        "memory": memory,
        "rows": rows,
        "fits": fits,
        "notes": notes,
    }


def case_wide(cfg, ws):
    """Many points (or directions) in one call against the same ones in calls of BATCH each.

    Batches and the multi-direction HVP run as passes over chunks of 32-256 points or
    directions (by n); before, one pass took all of them, and 1024 gradients at p = 2, n =
    4000 ran about 20 times slower per point than batches of 32. A ratio near 1 or above means a
    wide call costs no more per point. The HVP is timed where ``hvp`` takes the
    multi-direction pass (degree 2 at n = 4000, whose Hessian is too large to form); at
    p = 3, n = 300 it forms the Hessian once per call instead."""
    shapes = cfg.sizes["wide"]
    parts = {f"p={p} n={n} coefficients": ws.extra_bytes(p, n, "float64") for p, n, _ in shapes}
    # the points, the binding's copy and the gradients of the widest call
    parts["points and gradients"] = max(3 * 8 * b * n for _, n, b in shapes)
    memory = require("wide", parts)
    rows = []
    for p, n, b in shapes:
        h = ws.instance(p, n)
        xs = points(b, n)
        kernels = {"energy": h.energy, "energy_and_gradient": h.energy_and_gradient}
        if not h._hessian_route(b):
            at = xs[0]
            kernels["hvp"] = lambda vs, at=at, h=h: h.hvp(at, vs.T)
        fns = {}
        for kernel, fn in kernels.items():
            fns[(kernel, f"batch b={b}")] = lambda fn=fn, xs=xs: fn(xs)
            fns[(kernel, f"calls of {BATCH}")] = lambda fn=fn, xs=xs: [
                fn(xs[i : i + BATCH]) for i in range(0, len(xs), BATCH)
            ]
        log(f"   measuring {len(fns)} functions at p={p} n={n} b={b}")
        stats = _timing.measure(fns, cfg.plan)
        calls = b // BATCH + (b % BATCH > 0)
        for kernel in kernels:
            loop = stats[(kernel, f"calls of {BATCH}")]
            peer = make_row(kernel, "orthoclimb", f"{b} in calls of {BATCH}", loop, p, n)
            peer["bytes"] = h.nbytes * calls
            wide = make_row(kernel, "orthoclimb", f"b={b}", stats[(kernel, f"batch b={b}")], p, n)
            set_ratio(wide, peer)
            for row in (peer, wide):
                row["note"] = f"{1e6 * row['median_s'] / b:.3g} us per point"
            if kernel == "hvp":
                vs = xs[:: max(1, b // 64)]
                reference = np.stack([h.hvp(xs[0], v) for v in vs])
                wide["rel_err"] = _peers.relative_error(h.hvp(xs[0], vs.T).T, reference)
            else:
                wide["rel_err"] = batch_error(h, xs[:: max(1, b // 64)], kernel)
            rows += [peer, wide]
    return {
        "name": "wide",
        "title": f"wide batches and HVPs vs the same points in calls of {BATCH}",
        "status": "ok",
        "params": {"shapes": [list(s) for s in shapes]},
        "ratio_meaning": f"time of the calls of {BATCH} points / time of one wide call",
        "memory": memory,
        "rows": rows,
        "notes": [],
    }


def case_sampling(cfg, ws):
    """Hamiltonian.sample at p=3, the whole call (the Gaussians, their scaling by sqrt(n c(m)),
    the storage type's conversion and the allocation), against NumPy drawing as many standard
    Gaussians (``Generator.standard_normal``, PCG64 and the ziggurat, one thread). Runs on the
    thread count kernels.py set (``cfg.threads``)."""
    p, n = 3, cfg.sizes["sampling"]
    mix = oc.Mixture({p: 1.0})
    count = math.comb(n + p - 1, p)
    dtypes = ("float64", "float32")
    parts = {f"{d} instance": oc.estimate_memory(mix, n, d) for d in dtypes}
    parts["NumPy draws"] = 8 * count
    memory = require("sampling", parts)
    fns = {("orthoclimb", d): lambda d=d: oc.Hamiltonian.sample(mix, n, SEED, d) for d in dtypes}
    fns[("numpy", "float64")] = lambda: np.random.default_rng(SEED).standard_normal(count)
    log(f"   measuring {len(fns)} functions, {count} Gaussians a call")
    stats = _timing.measure(fns, cfg.plan)
    rows = []
    for (impl, d), st in stats.items():
        kernel = "sample" if impl == "orthoclimb" else "standard_normal"
        row = make_row(kernel, impl, d, st, p, n, count * (8 if d == "float64" else 4))
        row["note"] = f"{count / row['median_s'] / 1e6:.0f} M/s"
        rows.append(row)
    peer = rows[-1]
    for row in rows[:-1]:
        set_ratio(row, peer)
    return {
        "name": "sampling",
        "title": f"sampling p={p}, n={n} ({count} coefficients) against NumPy's Gaussians",
        "status": "ok",
        "params": {"p": p, "n": n, "count": count, "threads": cfg.threads},
        "ratio_meaning": "NumPy standard_normal median / orthoclimb median (M/s: per second)",
        "memory": memory,
        "rows": rows,
        "notes": [f"orthoclimb samples on {cfg.threads} thread(s); NumPy's generator runs on one"],
    }


CASES = {
    "overhead": case_overhead,
    "dense3": case_dense3,
    "dense4": case_dense4,
    "roofline": case_roofline,
    "float32": case_float32,
    "threads": case_threads,
    "batch": case_batch,
    "wide": case_wide,
    "sampling": case_sampling,
}
