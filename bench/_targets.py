"""The performance targets of the kernels (issue 2), checked against measured rows.

A target names a case, the row it concerns and a threshold on that row's ratio or roofline
fraction. It is PASS or MISS only at its own sizes (p, n); at other sizes (``--quick``) the
nearest row is annotated with status 'info'.
"""

from __future__ import annotations

import dataclasses

from _cases import BATCH


@dataclasses.dataclass(frozen=True)
class Target:
    """A goal on one row: ``metric`` ('ratio' or 'roofline') of the row matching ``match``
    in case ``case`` must reach ``threshold``; it counts only at the sizes in ``match``."""

    case: str
    description: str
    match: dict
    metric: str
    threshold: float


def _targets() -> list[Target]:
    out = []
    for p, n, x in ((3, 400, 5.0), (4, 120, 18.0)):
        for k in ("gradient", "hessian", "hvp"):
            out.append(
                Target(
                    f"dense{p}",
                    f"{k} vs NumPy dense, p={p} n={n}",
                    {"kernel": k, "impl": "numpy", "best": True, "p": p, "n": n},
                    "ratio",
                    x,
                )
            )
    # the specification's roofline and float32 lines name no kernel: each is checked for
    # every kernel the case measures, the Hessian included
    for k in ("energy", "gradient", "hvp", "hessian"):
        out.append(
            Target(
                "roofline",
                f"{k} roofline fraction, p=3 n=800",
                {"kernel": k, "impl": "orthoclimb", "p": 3, "n": 800},
                "roofline",
                0.75,
            )
        )
    for k in ("energy", "gradient", "hvp", "hessian"):
        out.append(
            Target(
                "float32",
                f"{k} float32 vs float64, p=3 n=800",
                {"kernel": k, "variant": "float32", "p": 3, "n": 800},
                "ratio",
                1.8,
            )
        )
    for n in (800, 400):
        out.append(
            Target(
                "batch",
                f"batch energy of {BATCH} vs {BATCH} single calls, n={n}",
                {"kernel": "energy", "variant": f"batch b={BATCH}", "p": 3, "n": n},
                "ratio",
                10.0,
            )
        )
    return out


TARGETS = _targets()
SIZE_KEYS = ("p", "n")


def _matches(row: dict, match: dict, with_size: bool) -> bool:
    return all(row.get(k) == v for k, v in match.items() if with_size or k not in SIZE_KEYS)


def evaluate_targets(case: dict) -> list[dict]:
    """Attach every target of this case to its row; returns the evaluated targets.

    Status is PASS or MISS at the target's own sizes; at other sizes (``--quick``) the row
    is still annotated, with status 'info'."""
    out = []
    for t in (t for t in TARGETS if t.case == case["name"]):
        exact = [r for r in case.get("rows", []) if _matches(r, t.match, True)]
        loose = [r for r in case.get("rows", []) if _matches(r, t.match, False)]
        row = (exact or loose or [None])[0]
        value = None if row is None else row[t.metric]
        if value is None:
            status = "n/a"
        elif not exact:
            status = "info"
        else:
            status = "PASS" if value >= t.threshold else "MISS"
        description = t.description
        if row is not None and not exact:  # say where the value was measured (--quick)
            where = ", ".join(f"{k}={row[k]}" for k in SIZE_KEYS if k in row)
            description += f" (measured at {where})"
        result = {
            "case": t.case,
            "description": description,
            "metric": t.metric,
            "threshold": t.threshold,
            "value": value,
            "status": status,
        }
        if row is not None and (exact or row["target"] is None):
            row["target"] = {"metric": t.metric, "threshold": t.threshold, "status": status}
        out.append(result)
    return out
