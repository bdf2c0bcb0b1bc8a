"""What the benchmark ran on: versions, CPU, BLAS, thread counts, load, relevant env vars.

BLAS details come from threadpoolctl when it is importable, else from
``numpy.show_config(mode="dicts")`` plus a read-only ctypes probe of the OpenBLAS library
that NumPy loaded (its core name, build configuration and thread count).
"""

from __future__ import annotations

import ctypes
import datetime
import hashlib
import os
import platform
import subprocess
import time
from pathlib import Path

import numpy as np
import scipy

import orthoclimb as oc
from orthoclimb import _load

ENV_VARS = (
    "OPENBLAS_CORETYPE",
    "OPENBLAS_L2_SIZE",
    "OPENBLAS_NUM_THREADS",
    "OMP_NUM_THREADS",
    "MKL_NUM_THREADS",
    "ORTHOCLIMB_NUM_THREADS",
)
SLOWING_VARS = ("OPENBLAS_CORETYPE", "OPENBLAS_L2_SIZE")
_LIMITS = []  # keeps a threadpoolctl limit object alive for the whole run


def cpu_info() -> dict:
    """Model name, family/model numbers and SIMD flags from /proc/cpuinfo; core counts."""
    info: dict = {"logical_cpus": os.cpu_count()}
    if hasattr(os, "sched_getaffinity"):
        info["usable_cpus"] = len(os.sched_getaffinity(0))
    try:
        text = Path("/proc/cpuinfo").read_text(encoding="ascii", errors="replace")
    except OSError:
        info["model"] = platform.processor() or platform.machine()
        return info
    fields = {}
    for line in text.splitlines():
        key, _, value = line.partition(":")
        fields.setdefault(key.strip(), value.strip())
    info["model"] = fields.get("model name", platform.machine())
    info["family"] = fields.get("cpu family")
    info["model_number"] = fields.get("model")
    flags = set(fields.get("flags", "").split())
    info["simd"] = [f for f in ("sse4_2", "avx", "avx2", "fma", "avx512f") if f in flags]
    return info


def _openblas_paths() -> list[str]:
    """Paths of the OpenBLAS shared libraries mapped into this process."""
    try:
        lines = Path("/proc/self/maps").read_text().splitlines()
    except OSError:
        return []
    paths = {line.split()[-1] for line in lines if "openblas" in line.lower()}
    return sorted(p for p in paths if ".so" in p)


def _openblas_function(lib: ctypes.CDLL, stem: str):
    """The symbol ``stem`` under the prefixes/suffixes OpenBLAS builds use, or None."""
    for prefix in ("", "scipy_"):
        for suffix in ("", "64_"):
            fn = getattr(lib, f"{prefix}{stem}{suffix}", None)
            if fn is not None:
                return fn
    return None


def _openblas_libs() -> list[tuple[str, ctypes.CDLL]]:
    out = []
    for path in _openblas_paths():
        try:
            out.append((path, ctypes.CDLL(path)))
        except OSError:
            continue
    return out


def openblas_runtime() -> list[dict]:
    """Core name, configuration string and thread count of each loaded OpenBLAS."""
    report = []
    for path, lib in _openblas_libs():
        entry: dict = {"path": path}
        for key, stem in (("corename", "openblas_get_corename"), ("config", "openblas_get_config")):
            fn = _openblas_function(lib, stem)
            if fn is not None:
                fn.restype = ctypes.c_char_p
                entry[key] = fn().decode(errors="replace")
        fn = _openblas_function(lib, "openblas_get_num_threads")
        if fn is not None:
            fn.restype = ctypes.c_int
            entry["num_threads"] = int(fn())
        report.append(entry)
    return report


def blas_info() -> dict:
    """BLAS description: threadpoolctl's view if available, else NumPy's build config plus the
    OpenBLAS runtime probe."""
    try:
        import threadpoolctl
    except ImportError:
        threadpoolctl = None
    if threadpoolctl is not None:
        return {"source": "threadpoolctl", "libraries": threadpoolctl.threadpool_info()}
    try:
        config = np.show_config(mode="dicts").get("Build Dependencies", {})
    except TypeError:  # NumPy without mode=
        config = {}
    return {"source": "numpy.show_config", "build": config, "runtime": openblas_runtime()}


def set_blas_threads(k: int) -> str:
    """Limit BLAS to k threads; returns how that was done ('' when it could not be)."""
    try:
        import threadpoolctl
    except ImportError:
        threadpoolctl = None
    if threadpoolctl is not None:
        _LIMITS.append(threadpoolctl.threadpool_limits(limits=k, user_api="blas"))
        return "threadpoolctl"
    done = ""
    for _, lib in _openblas_libs():
        fn = _openblas_function(lib, "openblas_set_num_threads")
        if fn is not None:
            fn.argtypes = [ctypes.c_int]
            fn(k)
            done = "openblas_set_num_threads (ctypes)"
    return done


def package_version(module: str) -> str | None:
    try:
        mod = __import__(module)
    except Exception:
        return None
    return str(getattr(mod, "__version__", "unknown"))


def git_commit() -> str | None:
    """HEAD of the repository holding this file (read-only ``git rev-parse``)."""
    try:
        out = subprocess.run(
            ["git", "rev-parse", "HEAD"],
            cwd=Path(__file__).resolve().parent,
            capture_output=True,
            text=True,
            timeout=10,
            check=False,
        )
    except (OSError, subprocess.SubprocessError):
        return None
    return out.stdout.strip() or None


def extension_info() -> dict:
    """Path, size, modification time and SHA-256 of the loaded orthoclimb extension (it is
    rebuilt in place during development, so this says which build was measured)."""
    path = Path(oc._core.__file__)
    try:
        data = path.read_bytes()
        stat = path.stat()
    except OSError:
        return {"path": str(path)}
    mtime = datetime.datetime.fromtimestamp(stat.st_mtime, datetime.timezone.utc)
    return {
        "path": str(path),
        "bytes": stat.st_size,
        "mtime_utc": mtime.isoformat(timespec="seconds"),
        "sha256": hashlib.sha256(data).hexdigest(),
    }


# the machine's load from other processes: the package's own measure, which its time
# estimates use too
OtherLoad = _load.OtherLoad


def others_busy(seconds: float = 1.0) -> float | None:
    """Cores used by other processes over the next `seconds` (this process sleeps)."""
    probe = OtherLoad()
    probe.start()
    time.sleep(seconds)
    return probe.stop()


def wait_until_quiet(limit_s: float, threshold: float = 0.3) -> float | None:
    """Poll others_busy() until other processes use under `threshold` cores or `limit_s`
    seconds have passed; returns the last reading."""
    deadline = time.monotonic() + limit_s
    reading = others_busy()
    while reading is not None and reading > threshold and time.monotonic() < deadline:
        reading = others_busy(2.0)
    return reading


def load_average() -> list[float] | None:
    """1, 5 and 15 minute load averages (runnable processes), or None."""
    try:
        return [round(v, 2) for v in os.getloadavg()]
    except OSError:
        return None


def torch_threads() -> int | None:
    """PyTorch's intra-op thread count now (None without torch); the dense cases set it to
    the run's threads, so the run records it after them."""
    try:
        import torch
    except ImportError:
        return None
    return int(torch.get_num_threads())


def environment(threads: int, blas_threads_by: str, torch_version: str | None) -> dict:
    """Everything recorded under "meta" in the JSON, besides the run options."""
    return {
        "date_utc": datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds"),
        "platform": platform.platform(),
        "python": platform.python_version(),
        "cpu": cpu_info(),
        "memory_available_bytes": oc.available_memory(),
        "load_average_start": load_average(),
        "threads": threads,
        "orthoclimb_threads": oc.get_num_threads(),
        "blas_threads_set_by": blas_threads_by or None,
        "torch_threads": torch_threads() if torch_version else None,
        "kernel_path": oc.kernel_path(),
        "versions": {
            "orthoclimb": oc.__version__,
            "numpy": np.__version__,
            "scipy": scipy.__version__,
            "opt_einsum": package_version("opt_einsum"),
            "torch": torch_version,
        },
        "git_commit": git_commit(),
        "extension": extension_info(),
        "blas": blas_info(),
        "env": {name: os.environ.get(name) for name in ENV_VARS},
    }


def slowing_vars_note() -> str | None:
    """A note when OPENBLAS_CORETYPE / OPENBLAS_L2_SIZE are set (they are left as they are)."""
    found = {name: os.environ[name] for name in SLOWING_VARS if name in os.environ}
    if not found:
        return None
    shown = ", ".join(f"{k}={v}" for k, v in found.items())
    return (
        f"{shown} is set; it can slow current NumPy's BLAS (the NumPy/opt_einsum peers and "
        "the gemv bandwidth probe). It is left unchanged here; to compare, run once with "
        "`env -u OPENBLAS_CORETYPE -u OPENBLAS_L2_SIZE python bench/kernels.py` and check "
        "which kernel OpenBLAS reports in the JSON (meta.blas)."
    )
