"""End points of a study's runs (``sweep --keep-points``) and their overlaps.

A task run with ``keep_points`` returns its final unit vector x with its row; the driver writes
it to ``points/<task_id>.npy`` (NumPy ``.npy``, little-endian float64, shape (n,), atomically)
before the row, and the row records ``end_point_sha256``, the SHA-256 of x's little-endian
float64 bytes. A point is read only through its row and must match that digest, so a point file
left by a killed attempt, edited or truncated is never taken for a result. A study keeps 8 n
bytes per task this way (n = 1000: 8 kB).

The overlap of two runs on the same instance (same mixture, n and seed) is
R = <x_a, x_b>, in [-1, 1] since both are unit vectors: 1 for the same point, about
n^(-1/2) in size for unrelated directions. The methods start from the same seeded random
direction (see the README; Hessian ascent with a degree-2 term and no field along the top
eigenvector of Hess H(0) instead), so R mostly measures how far apart they end from a common
start.

With a field (a p = 1 term, H_1(x) = <h, x>) every good end point leans toward the field's
direction e = h/|h|: x = alpha e + (the rest), so two end points that are otherwise unrelated
still have R about alpha_a alpha_b, which can be far above n^(-1/2) (a user trial: 0.145 of a
mean R of 0.161 at n = 400 for xi = q/4 + q^3). For such mixtures each overlap record carries
alpha_a = <x_a, e> and alpha_b (``field_a``, ``field_b``; e is regenerated from the instance's
seed, the Gaussians of degree 1 being a function of the seed alone) and the summary their
product's mean, the ``field_share`` to set the others' overlaps beside.
"""

from __future__ import annotations

import io
import math
import os
from collections import defaultdict
from pathlib import Path
from typing import Any

import numpy as np

from ..algorithms.result import vector_digest
from ..fileio import write_atomic
from .store import POINTS_DIR, row_file

__all__ = [
    "end_point_overlaps",
    "field_directions",
    "load_end_points",
    "readable_end_points",
    "overlap_lines",
    "overlap_markdown",
    "overlap_summary",
    "unrelated_overlap",
    "point_path",
    "write_point",
]


def point_path(folder: str | os.PathLike, task_id: str) -> Path:
    return Path(folder) / POINTS_DIR / f"{task_id}.npy"


def write_point(folder: str | os.PathLike, task_id: str, x: np.ndarray) -> Path:
    """Write the end point of task ``task_id`` atomically (see the module doc)."""
    data = np.ascontiguousarray(x, dtype="<f8")
    return write_atomic(
        point_path(folder, task_id), lambda fh: np.save(fh, data, allow_pickle=False)
    )


def _read_point(folder: Path, row: dict[str, Any]) -> np.ndarray:
    """The end point of ``row``, checked against the row's shape and digest."""
    path = point_path(folder, row["task_id"])
    row_name = str(row_file(folder, row["task_id"]))
    redo = (
        f"; to keep it again, delete {str(path)!r} and {row_name!r} and rerun the sweep with"
        " --keep-points"
    )
    try:
        x = np.load(io.BytesIO(path.read_bytes()), allow_pickle=False)
    except FileNotFoundError:
        raise ValueError(
            f"the end point {str(path)!r} of a row that kept one is missing; to keep it again,"
            f" delete {row_name!r} and rerun the sweep with --keep-points"
        ) from None
    except (OSError, ValueError, EOFError) as exc:
        raise ValueError(f"cannot read the end point {str(path)!r}: {exc}{redo}") from None
    if not isinstance(x, np.ndarray):  # an .npz archive saved under that name
        raise ValueError(
            f"the end point {str(path)!r} is not an .npy array but a {type(x).__name__}{redo}"
        )
    n = int(row["n"])
    if x.shape != (n,) or x.dtype != np.float64:
        raise ValueError(
            f"the end point {str(path)!r} has shape {x.shape} and dtype {x.dtype}, expected"
            f" ({n},) float64{redo}"
        )
    if vector_digest(x) != row["end_point_sha256"]:
        raise ValueError(f"the end point {str(path)!r} does not match its row's digest{redo}")
    return x


def load_end_points(folder: str | os.PathLike, rows: list[dict[str, Any]] | None = None):
    """``{task_id: x}`` for the rows of the study in ``folder`` that kept their end point
    (``sweep --keep-points``); rows without one are left out. Each point is checked against
    its row (shape, SHA-256); a ValueError names every unusable file (up to ten)."""
    from .store import Store, combined_error, read_config

    folder = Path(folder)
    if rows is None:
        rows = Store(folder, read_config(folder)).rows()
    out, bad = readable_end_points(folder, rows)
    if bad:
        raise combined_error(bad, "end points")
    return out


def readable_end_points(
    folder: Path, rows: list[dict[str, Any]]
) -> tuple[dict[str, np.ndarray], list[ValueError]]:
    """The end points of ``rows`` that can be read, and the errors of those that cannot (the
    report leaves those runs out of its overlaps and says so, instead of failing)."""
    out, bad = {}, []
    for row in rows:
        if isinstance(row.get("end_point_sha256"), str):
            try:
                out[row["task_id"]] = _read_point(Path(folder), row)
            except ValueError as exc:
                bad.append(exc)
    return out, bad


def field_directions(
    rows: list[dict[str, Any]], points: dict[str, np.ndarray], fields: dict[str, float]
) -> dict[tuple[str, int, int], np.ndarray]:
    """The unit field direction e = h/|h| of every instance (mixture, n, seed) with a kept
    point whose mixture has a field, ``fields`` mapping those mixtures' names to gamma_1:
    the degree-1 coefficients of Hamiltonian.sample(Mixture({1: gamma_1}), n, seed), which
    are the instance's own (module doc; float64, where a float32 instance rounds them)."""
    from ..algorithms._sphere import field_direction
    from ..model.hamiltonian import Hamiltonian
    from ..model.mixture import Mixture

    out = {}
    for r in rows:
        key = (r["mixture"], int(r["n"]), int(r["seed"]))
        if r["task_id"] in points and r["mixture"] in fields and key not in out:
            field = Mixture({1: fields[r["mixture"]]})
            h = Hamiltonian.sample(field, key[1], seed=key[2]).coefficients(1)
            out[key] = field_direction(h)  # the first stage's own start direction
    return out


def end_point_overlaps(
    rows: list[dict[str, Any]],
    points: dict[str, np.ndarray],
    methods: list[str],
    fields: dict[tuple[str, int, int], np.ndarray] | None = None,
) -> list[dict[str, Any]]:
    """One record per instance (mixture, n, seed) and pair of methods (in the order
    ``methods``) that both kept their end point: ``overlap`` R = <x_a, x_b>, and the two
    runs' energies per spin ``energy_a`` and ``energy_b`` (the report writes these records to
    report.json as ``end_point_overlaps_by_run``); with the instance's field direction e in
    ``fields`` (:func:`field_directions`), ``field_a`` = <x_a, e> and ``field_b``."""
    by_instance: dict[tuple[str, int, int], dict[str, tuple[np.ndarray, float]]]
    by_instance = defaultdict(dict)
    for r in rows:
        if r["task_id"] in points:
            key = (r["mixture"], int(r["n"]), int(r["seed"]))
            by_instance[key][r["method"]] = (points[r["task_id"]], float(r["energy"]))
    out = []
    for (mixture, n, seed), xs in by_instance.items():
        kept = [m for m in methods if m in xs]
        for i, a in enumerate(kept):
            for b in kept[i + 1 :]:
                (xa, ea), (xb, eb) = xs[a], xs[b]
                rec = {
                    "mixture": mixture,
                    "n": n,
                    "seed": seed,
                    "method_a": a,
                    "method_b": b,
                    "overlap": float(np.dot(xa, xb)),
                    "energy_a": ea,
                    "energy_b": eb,
                }
                e = (fields or {}).get((mixture, n, seed))
                if e is not None:
                    rec.update(field_a=float(np.dot(xa, e)), field_b=float(np.dot(xb, e)))
                out.append(rec)
    return out


SAME_POINT = 0.999  # R above this: the same point; below minus this: the mirror point -x


def overlap_summary(overlaps: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """Per mixture, n and pair of methods: count, mean of R, mean of |R| and its standard
    error sd(|R|)/sqrt(count) (NaN for one seed), smallest and largest R; ``same``, the pairs
    with R > SAME_POINT, ``mirror`` those with R < -SAME_POINT (for a mixture of even degrees
    only, H(-x) = H(x): the same configuration), and ``mean_abs_other``, the mean |R| of the
    rest (NaN when none); ``unrelated``, the mean |R| of two independent uniform directions:
    E|x_1| on the unit sphere of R^n = Gamma(n/2) / (sqrt(pi) Gamma((n+1)/2)) (exact; about
    sqrt(2 / (pi n)) for large n); ``field_share``, the mean of field_a field_b over the same
    rest, when the records carry them (a field, module doc; NaN when no pair is in the rest),
    else None."""
    groups: dict[tuple[str, int, str, str], list[dict[str, Any]]] = defaultdict(list)
    for o in overlaps:
        groups[(o["mixture"], o["n"], o["method_a"], o["method_b"])].append(o)
    out = []
    for (mixture, n, a, b), records in groups.items():
        r = np.array([o["overlap"] for o in records])
        shares = [
            o["field_a"] * o["field_b"]
            for o in records
            if "field_a" in o and abs(o["overlap"]) <= SAME_POINT
        ]
        with_field = any("field_a" in o for o in records)
        size = np.abs(r)
        se = float(size.std(ddof=1) / math.sqrt(r.size)) if r.size > 1 else math.nan
        other = size[size <= SAME_POINT]
        same = int(np.count_nonzero(r > SAME_POINT))
        out.append(
            {
                "mixture": mixture,
                "n": n,
                "method_a": a,
                "method_b": b,
                "count": int(r.size),
                "mean": float(r.mean()),
                "mean_abs": float(size.mean()),
                "se_abs": se,
                "min": float(r.min()),
                "max": float(r.max()),
                "same": same,
                "mirror": int(r.size - other.size) - same,
                "mean_abs_other": float(other.mean()) if other.size else math.nan,
                "unrelated": unrelated_overlap(n),
                "field_share": (float(np.mean(shares)) if shares else math.nan)
                if with_field
                else None,
            }
        )
    return out


def unrelated_overlap(n: int) -> float:
    """E|R| for two independent uniform unit vectors of R^n: Gamma(n/2) / (sqrt(pi)
    Gamma((n+1)/2)) (the first coordinate of a uniform point of the sphere; exact identity)."""
    from scipy.special import gammaln

    return math.exp(gammaln(n / 2) - gammaln((n + 1) / 2)) / math.sqrt(math.pi)


def _cell(value: float) -> str:
    return f"{value:.4f}" if math.isfinite(value) else "--"


def overlap_markdown(summary: list[dict[str, Any]]) -> list[str]:
    """The report's section on end-point overlaps, ending in a blank line; no lines when no
    point was kept."""
    if not summary:
        return []
    lines = [
        "## Overlaps of end points",
        "",
        "R = <x_a, x_b> between two methods' end points on the same instance, both unit"
        " vectors started from the same seeded random direction (Hessian ascent with a degree-2"
        " term and no field: along the top eigenvector of Hess H(0)). Same: pairs with R >"
        f" {SAME_POINT}; mirror: R < -{SAME_POINT} (for a mixture of even degrees only, where"
        " H(-x) = H(x), the same configuration, and only |R| means anything); the mean |R| of"
        " the other pairs is set beside its value for unrelated directions (Gamma(n/2) /"
        " (sqrt(pi) Gamma((n+1)/2)), about sqrt(2/(pi n))). s.e. is that of the mean |R|."
        " With a field (p = 1) every good end point leans toward the field's direction e, so"
        " even otherwise unrelated end points have R about <x_a, e><x_b, e>: the field share,"
        " the mean of that product, is the value to set the others beside.",
        "",
        "| mixture | n | methods | mean R | mean abs R | s.e. | same | mirror |"
        " mean abs R, others | unrelated | field share | min R | max R | count |",
        "| --- | ---: | --- | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: |"
        " ---: | ---: |",
    ]
    for s in summary:
        share = s.get("field_share")
        lines.append(
            f"| {s['mixture']} | {s['n']} | {s['method_a']} / {s['method_b']} | {s['mean']:.4f}"
            f" | {s['mean_abs']:.4f} | {_cell(s['se_abs'])} | {s['same']} | {s['mirror']} |"
            f" {_cell(s['mean_abs_other'])} | {s['unrelated']:.4f} |"
            f" {'--' if share is None else _cell(share)} | {s['min']:.4f} |"
            f" {s['max']:.4f} | {s['count']} |"
        )
    return [*lines, ""]


def overlap_lines(summary: list[dict[str, Any]]) -> list[str]:
    """The overlaps for the terminal: one line per mixture, n and pair of methods."""
    if not summary:
        return []
    out = [
        "",
        f"end-point overlaps R = <x_a, x_b> (same point: R > {SAME_POINT}; mirror point -x:"
        f" R < -{SAME_POINT}; unrelated directions: mean |R| about sqrt(2/(pi n))):",
    ]
    for s in summary:
        mirror = f", its mirror on {s['mirror']}" if s["mirror"] else ""
        out.append(
            f"  {s['mixture']}, n = {s['n']}, {s['method_a']} / {s['method_b']}: the same point"
            f" on {s['same']}{mirror} of {s['count']}; mean |R| of the others"
            f" {_cell(s['mean_abs_other'])} (unrelated {s['unrelated']:.4f}"
            + (
                ""
                if s.get("field_share") is None
                else f"; with the field, <x_a, e><x_b, e> = {_cell(s['field_share'])}"
            )
            + ")"
        )
    return out
