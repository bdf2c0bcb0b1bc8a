"""Finite-size extrapolation of the mean energy per spin.

Model: E[e_n] = e_inf + a n^(-k), with k the exponent (default 2/3, the scale of the
fluctuations of the top of a random spectrum). With x_j = n_j^(-k), sample means m_j and their
standard errors s_j over seeds, the weighted least-squares fit minimizes
sum_j (m_j - e_inf - a x_j)^2 / s_j^2 (closed-form normal equations, :func:`_wls_line`).

Confidence interval: bootstrap over disorder samples. Each replicate resamples the seeds of
every size with replacement (independently per size), recomputes the means, and refits with the
original weights; the interval is the central ``level`` percentile range of the replicate
e_inf values. Each replicate is refitted with its own weights 1/s_j*^2, so the interval also
carries the uncertainty of the estimated weights, and the resampled values are inflated by
sqrt(m/(m-1)) around the sample mean (m = seeds at that size) so their spread matches the
unbiased variance; without these two a bootstrap over few seeds is too narrow (measured
coverage of a nominal 90% interval with 5 seeds per size: 0.76 without; with them 0.893 over
10,000 synthetic studies, 0.887-0.908 across generator seeds, still a little short at 5 seeds).
``se`` is the standard deviation of the replicates.
The interval covers statistical error only; ``chi2``/``dof`` of the fit flag a wrong law.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import asdict, dataclass
from typing import Any

import numpy as np

__all__ = ["Extrapolation", "check_interval", "e_inf_under", "extrapolate"]


@dataclass(frozen=True)
class Extrapolation:
    """e_inf (energy per spin) with its bootstrap CI [low, high] at ``level``; slope a."""

    value: float
    low: float
    high: float
    se: float
    slope: float
    chi2: float
    dof: int
    level: float
    exponent: float
    sizes: tuple[int, ...]

    def to_dict(self) -> dict:
        return asdict(self)


def _wls_line(x: np.ndarray, m: np.ndarray, wt: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Closed-form weighted least squares of m ~ e_inf + a x with weights wt = 1/s^2
    (the normal equations of a straight line); the last axis runs over sizes, so rows of
    ``m``/``wt`` may be bootstrap replicates. Returns (e_inf, a)."""
    s0 = wt.sum(-1)
    sx = (wt * x).sum(-1)
    sy = (wt * m).sum(-1)
    sxx = (wt * x * x).sum(-1)
    sxy = (wt * x * m).sum(-1)
    det = s0 * sxx - sx * sx
    return (sxx * sy - sx * sxy) / det, (s0 * sxy - sx * sy) / det


def check_interval(level: Any, n_boot: Any) -> None:
    """The bootstrap interval's options: ``level`` in (0, 1) and ``n_boot`` an integer >= 2
    (NumPy numbers accepted, booleans not); a ValueError naming the bad value."""
    if (
        isinstance(level, (bool, np.bool_))
        or not isinstance(level, (int, float, np.integer, np.floating))
        or not 0 < level < 1
    ):
        raise ValueError(f"level must be in (0, 1), got {level!r}")
    if (
        isinstance(n_boot, (bool, np.bool_))
        or not isinstance(n_boot, (int, np.integer))
        or n_boot < 2
    ):
        raise ValueError(f"n_boot must be an integer >= 2 (bootstrap replicates), got {n_boot!r}")


def _checked(
    sizes: Sequence[int], samples: Sequence[Sequence[float]], exponent: float
) -> list[np.ndarray]:
    if len(sizes) != len(samples):
        raise ValueError("sizes and samples must have the same length")
    if len(sizes) < 2:
        raise ValueError(f"extrapolation needs at least 2 sizes, got {len(sizes)}")
    if not (math.isfinite(exponent) and exponent > 0):
        raise ValueError(f"exponent must be positive, got {exponent}")
    for n in sizes:
        if isinstance(n, (bool, np.bool_)) or not isinstance(n, (int, np.integer)) or n < 1:
            raise ValueError(f"sizes must be integers >= 1, got {n!r} (sizes, then samples)")
    if len(set(int(n) for n in sizes)) != len(sizes):
        raise ValueError(
            f"sizes must be distinct, got {list(sizes)}: pool the samples of a repeated size"
        )
    arrays = [np.asarray(s, dtype=np.float64) for s in samples]
    for n, a in zip(sizes, arrays, strict=True):
        if a.ndim != 1 or a.size < 2:
            raise ValueError(f"extrapolation needs at least 2 seeds per size; n = {n} has {a.size}")
        if not np.all(np.isfinite(a)):
            raise ValueError(f"non-finite energy among the samples at n = {n}")
    return arrays


def _fit(x: np.ndarray, arrays: list[np.ndarray]) -> tuple[float, float, float, np.ndarray]:
    """The weighted least-squares line through the means: (e_inf, a, chi2, s_j^2)."""
    means = np.array([a.mean() for a in arrays])
    var = np.array([a.var(ddof=1) / a.size for a in arrays])  # s_j^2
    if np.all(var == 0):
        var = np.ones_like(var)  # identical samples: plain least squares, zero-width interval
    floor = 1e-6 * float(np.max(var))
    var = np.maximum(var, floor)
    value, slope = _wls_line(x, means, 1.0 / var)
    chi2 = float(np.sum((means - value - slope * x) ** 2 / var))
    return float(value), float(slope), chi2, var


def e_inf_under(sizes: Sequence[int], samples: Sequence[Sequence[float]], exponent: float) -> float:
    """The point estimate e_inf of :func:`extrapolate` under the law n^(-``exponent``), without
    an interval: the report sets it beside the chosen law's value to show how much the law
    (not the noise) moves the extrapolation."""
    arrays = _checked(sizes, samples, exponent)
    return _fit(np.asarray(sizes, dtype=np.float64) ** (-exponent), arrays)[0]


def extrapolate(
    sizes: Sequence[int],
    samples: Sequence[Sequence[float]],
    exponent: float = 2.0 / 3.0,
    level: float = 0.9,
    n_boot: int = 2000,
    seed: int = 0,
) -> Extrapolation:
    """Extrapolate the mean of ``samples[j]`` (energies per spin at size ``sizes[j]``) to
    n -> infinity (see the module doc). Needs >= 2 sizes and >= 2 samples per size."""
    arrays = _checked(sizes, samples, exponent)
    check_interval(level, n_boot)
    x = np.asarray(sizes, dtype=np.float64) ** (-exponent)
    value, slope, chi2, var = _fit(x, arrays)
    rng = np.random.default_rng(seed)
    boot_m = np.empty((n_boot, len(arrays)))
    boot_v = np.empty_like(boot_m)
    for j, a in enumerate(arrays):
        m = a.size
        draw = a[rng.integers(0, m, size=(n_boot, m))]
        draw = a.mean() + math.sqrt(m / (m - 1)) * (draw - a.mean())
        boot_m[:, j] = draw.mean(axis=1)
        # refit with each replicate's own weights (floored at 1% of the observed variance so a
        # replicate of identical draws does not get infinite weight)
        boot_v[:, j] = np.maximum(draw.var(axis=1, ddof=1) / m, 0.01 * var[j])
    reps, _ = _wls_line(x, boot_m, 1.0 / boot_v)
    alpha = (1.0 - level) / 2.0
    low, high = np.quantile(reps, [alpha, 1.0 - alpha])
    return Extrapolation(
        float(value),
        float(low),
        float(high),
        float(reps.std(ddof=1)),
        float(slope),
        chi2,
        len(arrays) - 2,
        float(level),
        float(exponent),
        tuple(int(n) for n in sizes),
    )
