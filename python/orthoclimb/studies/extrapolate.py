"""Finite-size extrapolation of the mean energy per spin.

Model: E[e_n] = e_inf + a n^(-k), with k the exponent (default 2/3, the scale of the
fluctuations of the top of a random spectrum). With x_j = n_j^(-k), sample means m_j and their
standard errors s_j over seeds, the weighted least-squares fit minimizes
sum_j (m_j - e_inf - a x_j)^2 / s_j^2 (closed-form normal equations, :func:`_wls_line`).

Confidence interval: bootstrap over disorder samples. Each replicate resamples the seeds of
every size with replacement (independently per size), recomputes the means, and refits with
its own weights 1/s_j*^2, so the interval also carries the uncertainty of the estimated
weights; the resampled values are inflated by sqrt(m/(m-1)) around the sample mean (m = seeds
at that size) so their spread matches the unbiased variance. ``se`` is the standard deviation
of the replicates. With few seeds a percentile interval is still too narrow, as a normal
interval is where a Student t one is due, so its two arms (from e_inf to each percentile) are
stretched by t_nu(q) / z(q), q = (1 + level)/2, with nu the Welch-Satterthwaite degrees of
freedom of e_inf = sum_j c_j m_j (Satterthwaite 1946; Welch 1947):

    nu = (sum_j c_j^2 s_j^2)^2 / sum_j (c_j^2 s_j^2)^2 / (m_j - 1).

Below a level of ``SMALL_LEVEL`` the stretch is its limit as the level goes to 0, the ratio
of the densities at 0, phi(0) / f_nu(0) (both quantiles are (level/2) / density at 0, up to
terms of relative size level^2): q then rounds toward 1/2, and the quotient of the two
quantiles lost its digits and was 0/0, an interval [nan, nan], once q rounded to 1/2.

Measured coverage of the nominal 90% interval over 1500 synthetic studies per cell (n^(-2/3)
law, Gaussian noise; Monte Carlo s.e. 0.008), percentile interval -> stretched interval, for
2, 3, 5, 10, 20 seeds per size:

    2 sizes: 0.800 0.834 0.863 0.889 0.899  ->  0.953 0.923 0.917 0.908 0.907
    3 sizes: 0.936 0.890 0.879 0.893 0.884  ->  0.990 0.945 0.915 0.908 0.890
    4 sizes: 0.961 0.941 0.895 0.886 0.877  ->  0.991 0.967 0.919 0.901 0.887

At 20 seeds the stretch is 3 % and the rate stays about 0.01 short (the percentile interval of
a fit with estimated weights; accepted, common practice).

The interval covers statistical error only, under the assumed law. ``fit_p`` tests that law:
the probability, under the fitted line with Gaussian noise of the observed spreads, that a
study of the same shape gives a chi2 at least as large as the observed one (a parametric
bootstrap: means drawn from N(fit_j, s_j^2), variances from s_j^2 chi2_(m_j-1)/(m_j-1), refitted
with their own weights, so the estimated weights are accounted for; the chi2 distribution
itself, p = P(chi2_dof >= chi2), is below 0.05 in 11-23 % of studies where the law holds at
3 seeds per size, 41 % at 2 seeds and 5 sizes). Measured over the same cells with 3-5 sizes:
fit_p < 0.05 in 2.1-6.4 % of studies where the law holds. NaN without a degree of freedom left
(two sizes). ``fit_p`` is the law's own test: the report keeps a law whose fit_p is below 0.05
out of its verdicts (:mod:`.report`).

Pooled variances (``pooled=True``). The weights 1/s_j^2 come from each size's own sample
variance, which few distinct values make unreliable: paired differences of two methods that
often stop at the same point (ties, :mod:`.limit_difference`) had, at one size, 9 ties and one
difference of -0.0014 among 10 seeds, so that size took 99.5 % of the weight and the fit an
interval 18 times narrower than the two methods' own fits (a user trial). With ``pooled`` the
per-seed variances v_j follow a power law in n fitted to all sizes (least squares of log v_j
on log n_j, weights m_j - 1, over the sizes with spread; with fewer than three such sizes one
pooled value sum (m_j - 1) v_j / sum (m_j - 1)), so a size's weight no longer rests on its own
few values; the bootstrap refits that law in each replicate. Measured coverage of the nominal
90 % interval, own -> pooled variances (400 synthetic studies per row, n = 50, 100, 200, 400,
differences 0.005 + 0.3 n^(-2/3) + N(0, 0.09/n), each a tie (0) with probability p; Monte Carlo
s.e. 0.015): p = 0.85, 10 seeds: 0.585 -> 0.925 (median width 0.004 -> 0.012); p = 0.6, 10
seeds: 0.882 -> 0.907; p = 0.6, 20 seeds: 0.877 -> 0.880; no ties, 10 seeds: 0.897 -> 0.875.
The Student stretch still gives each size m_j - 1 degrees of freedom (Welch), more
conservative than pooled variances need.

Samples without spread. A size whose samples all agree (up to rounding: variance at most
(16 eps max|sample|)^2) has no noise to weigh by. Next to sizes with spread its variance is
floored at 1e-6 of the largest, so the line passes almost exactly through its mean. When every
size is like that the fit is plain least squares, the interval is the point [e_inf, e_inf]
with ``se`` = 0 (no error estimate), not a rounding-sized interval that excludes its own
estimate, and ``chi2`` and ``fit_p`` are NaN: nothing measures how well the law fits.
"""

from __future__ import annotations

import math
import sys
from collections.abc import Sequence
from dataclasses import asdict, dataclass, replace
from typing import Any

import numpy as np
from scipy import stats

__all__ = ["Extrapolation", "check_interval", "extrapolate"]


@dataclass(frozen=True)
class Extrapolation:
    """e_inf (energy per spin) with its CI [low, high] at ``level`` and the bootstrap standard
    error ``se``; slope a; ``chi2`` over ``dof`` = sizes - 2 degrees of freedom and the law's
    test ``fit_p`` (NaN with dof = 0 or without spread); ``t_dof``, the Welch-Satterthwaite
    nu behind the interval's stretch (inf when the samples have no spread)."""

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
    fit_p: float = math.nan
    t_dof: float = math.inf

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


# Bootstrap draws made at once (int64 indices, then float64 values: about 50 MB in all).
BOOT_BLOCK = 1 << 21

# The most bootstrap replicates (the default 2000 puts a 90 % interval's ends within a few
# per cent of their limit; a million cost about a second per seed and size, and 16 MB per size).
MAX_BOOT = 1_000_000


def check_interval(level: Any, n_boot: Any) -> None:
    """The bootstrap interval's options: ``level`` in (0, 1) and ``n_boot`` an integer in
    [2, ``MAX_BOOT``] (NumPy numbers accepted, booleans not); a ValueError naming the bad
    value. The replicates' means and variances take n_boot x sizes numbers each: 1e12
    replicates asked NumPy for 29 TiB and ended in a MemoryError traceback (a review)."""
    if (
        isinstance(level, (bool, np.bool_))
        or not isinstance(level, (int, float, np.integer, np.floating))
        or not 0 < level < 1
    ):
        raise ValueError(f"level must be in (0, 1), got {level!r}")
    if (
        isinstance(n_boot, (bool, np.bool_))
        or not isinstance(n_boot, (int, np.integer))
        or not 2 <= n_boot <= MAX_BOOT
    ):
        raise ValueError(
            f"n_boot must be an integer in [2, {MAX_BOOT}] (bootstrap replicates), got {n_boot!r}"
        )


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
    arrays = []
    for n, s in zip(sizes, samples, strict=True):
        if np.asarray(s).dtype.kind == "b":
            raise ValueError(f"the samples at n = {n} are booleans, not energies")
        arrays.append(np.asarray(s, dtype=np.float64))
    for n, a in zip(sizes, arrays, strict=True):
        if a.ndim != 1 or a.size < 2:
            raise ValueError(f"extrapolation needs at least 2 seeds per size; n = {n} has {a.size}")
        if not np.all(np.isfinite(a)):
            raise ValueError(f"non-finite energy among the samples at n = {n}")
    x = np.asarray(sizes, dtype=np.float64) ** (-exponent)
    if np.any(x < sys.float_info.min):
        # n^(-exponent) below float64's normal range has lost its digits (0 beyond 5e-324),
        # and the line's normal equations then divided by zero: e_inf came out NaN
        n = int(sizes[int(np.argmax(x < sys.float_info.min))])
        raise ValueError(
            f"exponent {exponent} is too large for the sizes {list(sizes)}: n^(-exponent)"
            f" underflows float64 at n = {n} ({n}^(-{exponent}) is below"
            f" {sys.float_info.min:.3g})"
        )
    if 1.0 - x.min() / x.max() < MIN_SPREAD:
        # nearly equal x: the determinant cancels, and 1e-6 gave e_inf = 185034.9
        raise ValueError(
            f"exponent {exponent} is too small for the sizes {list(sizes)}: n^(-exponent)"
            f" changes by less than {MIN_SPREAD:g} of itself over them"
        )
    return arrays


# The least relative spread of n^(-exponent) over the sizes that a fit takes (common practice:
# the normal equations lose about log10(1/spread^2) of the 16 digits).
MIN_SPREAD = 1e-4


# A sample variance at most (SPREADLESS * eps * max|sample|)^2 is rounding, not spread.
SPREADLESS = 16.0
# Replicates of the parametric bootstrap behind ``fit_p``.
FIT_TEST_REPLICATES = 2000


def _abscissae(sizes: Sequence[int], exponent: float) -> tuple[np.ndarray, int]:
    """(u, shift): u_j = n_j^(-exponent) 2^shift, the largest in [1/2, 1). The scaling by a
    power of two is exact, so the fit in u is the fit in x bit for bit, with the slope a
    times 2^(-shift); but the normal equations square u, and x squared fell out of float64's
    normal range (20^(-100) squared is 6e-261, 40^(-100) squared 4e-321)."""
    x = np.asarray(sizes, dtype=np.float64) ** (-exponent)
    shift = -math.frexp(float(x.max()))[1]
    return np.ldexp(x, shift), shift


def _slope_in_n(slope: float, shift: int, top: float, exponent: float) -> float:
    """The slope a in n^(-exponent) of the ``slope`` in u = n^(-exponent) 2^shift (the
    largest u is ``top``); a ValueError where a leaves float64's range."""
    out = math.ldexp(slope, shift)
    if not math.isfinite(out):
        raise ValueError(
            f"the slope a of e_inf + a n^(-{exponent}) leaves float64's range: n^(-{exponent})"
            f" is at most {math.ldexp(top, -shift):.3g} at these sizes, so |a| would exceed"
            f" {sys.float_info.max:.3g}"
        )
    return out


def _fit(
    x: np.ndarray, arrays: list[np.ndarray], log_n: np.ndarray | None = None
) -> tuple[float, float, float, np.ndarray]:
    """The weighted least-squares line through the means: (e_inf, a, chi2, s_j^2), with s_j^2
    = 0 at every size when no size has spread (then a plain least-squares fit and chi2 NaN).
    With ``log_n`` (log of the sizes), the variances are pooled (module doc)."""
    means = np.array([a.mean() for a in arrays])
    var = _spread(arrays)
    if not np.any(var > 0):
        value, slope = _wls_line(x, means, np.ones_like(means))
        return float(value), float(slope), math.nan, np.zeros_like(var)
    if log_n is not None:
        counts = np.array([a.size for a in arrays], dtype=np.float64)
        var = _pooled(log_n, var * counts, counts) / counts
    var = np.maximum(var, 1e-6 * float(np.max(var)))
    value, slope = _wls_line(x, means, 1.0 / var)
    chi2 = float(np.sum((means - value - slope * x) ** 2 / var))
    return float(value), float(slope), chi2, var


def _spread(arrays: list[np.ndarray]) -> np.ndarray:
    """s_j^2 = var(ddof=1)/m_j per size, 0 where the samples agree up to rounding."""
    var = np.array([a.var(ddof=1) / a.size for a in arrays])
    eps = np.finfo(np.float64).eps
    rounding = np.array([(SPREADLESS * eps * np.max(np.abs(a))) ** 2 / a.size for a in arrays])
    return np.where(var <= rounding, 0.0, var)


def _pooled(log_n: np.ndarray, v: np.ndarray, counts: np.ndarray) -> np.ndarray:
    """The per-seed variances ``v`` (last axis: sizes; earlier axes: bootstrap replicates) as a
    power law in n fitted to them, or their pooled value where fewer than three sizes have
    spread (module doc)."""
    dof = counts - 1
    spread = v > 0
    wt = dof * spread
    with np.errstate(divide="ignore", invalid="ignore"):  # det = 0 below three sizes: unused
        a, b = _wls_line(log_n, np.log(np.where(spread, v, 1.0)), wt)
        law = np.exp(a[..., None] + b[..., None] * log_n)
    flat = (dof * v).sum(-1, keepdims=True) / dof.sum()
    return np.where(spread.sum(-1, keepdims=True) >= 3, law, flat)


def _welch_dof(x: np.ndarray, var: np.ndarray, counts: np.ndarray) -> float:
    """nu of e_inf = sum_j c_j m_j, c_j = w_j (Sxx - Sx x_j) / det the weights of the intercept
    in the weighted line (see the module doc)."""
    w = 1.0 / var
    s0, sx, sxx = w.sum(), (w * x).sum(), (w * x * x).sum()
    c = w * (sxx - sx * x) / (s0 * sxx - sx * sx)
    part = c * c * var
    return float(part.sum() ** 2 / np.sum(part**2 / (counts - 1)))


def _fit_p(
    x: np.ndarray,
    counts: np.ndarray,
    value: float,
    slope: float,
    var: np.ndarray,
    chi2: float,
    rng: np.random.Generator,
    log_n: np.ndarray | None = None,
) -> float:
    """The parametric-bootstrap p-value of ``chi2`` under the fitted law (module doc); with
    ``log_n``, each replicate's variances are pooled as the fit's were."""
    reps = FIT_TEST_REPLICATES
    mean = value + slope * x + np.sqrt(var) * rng.standard_normal((reps, x.size))
    dof = counts - 1
    v = var * rng.chisquare(dof, size=(reps, x.size)) / dof
    if log_n is not None:
        v = _pooled(log_n, v * counts, counts) / counts
    v = np.maximum(v, 1e-6 * v.max(axis=1, keepdims=True))
    e, a = _wls_line(x, mean, 1.0 / v)
    chi2_rep = np.sum((mean - e[:, None] - a[:, None] * x) ** 2 / v, axis=1)
    return float((1 + np.count_nonzero(chi2_rep >= chi2)) / (reps + 1))


# The level below which the Student stretch is its limit as the level goes to 0: t_nu(q) /
# z(q) = phi(0) / f_nu(0) (1 + c level^2), c at most (pi^2 - pi)/12 = 0.56 (at nu = 1, the
# least Welch's nu can be), so within 6e-13 of it here, while the quantiles at q = (1 +
# level)/2 lose digits to q's rounding (3.7e-11 of the ratio at level 1e-6, nu = 1).
SMALL_LEVEL = 1e-6


def student_stretch(level: float, nu: float) -> float:
    """t_nu(q) / z(q), q = (1 + level)/2, the factor by which the interval's arms are
    stretched (module doc), for ``level`` in (0, 1) and ``nu`` >= 1; below ``SMALL_LEVEL``,
    its limit as the level goes to 0 (module doc)."""
    if level < SMALL_LEVEL:
        return float(stats.norm.pdf(0.0) / stats.t.pdf(0.0, nu))
    alpha = (1.0 - level) / 2.0
    if alpha >= SMALL_LEVEL:  # the quantiles as before, so intervals keep their bits
        return float(stats.t.ppf(1.0 - alpha, nu) / stats.norm.ppf(1.0 - alpha))
    # near level 1 the upper tails' quantiles: 1 - alpha loses alpha's digits (1e-4 of the
    # stretch at level 1 - 1e-12), and rounds to 1 above level 1 - 1.2e-16 (inf/inf)
    return float(stats.t.isf(alpha, nu) / stats.norm.isf(alpha))


def extrapolate(
    sizes: Sequence[int],
    samples: Sequence[Sequence[float]],
    exponent: float = 2.0 / 3.0,
    level: float = 0.9,
    n_boot: int = 2000,
    seed: int = 0,
    pooled: bool = False,
) -> Extrapolation:
    """Extrapolate the mean of ``samples[j]`` (energies per spin at size ``sizes[j]``) to
    n -> infinity (see the module doc). Needs >= 2 sizes and >= 2 samples per size.
    ``pooled``: weigh the sizes by variances pooled over them (module doc)."""
    arrays = _checked(sizes, samples, exponent)
    check_interval(level, n_boot)
    if isinstance(seed, (bool, np.bool_)) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise ValueError(f"seed must be an integer >= 0 (the bootstrap's), got {seed!r}")
    # samples far from order one are fitted divided by a power of two (exact): 1e308 gave
    # NaN fits and 1e-200 weights beyond float64 (a user trial); the results are multiplied
    # back. Samples within 2^-500..2^500 are fitted as given, so they keep every bit (the
    # pooled law's logarithms would not)
    top = max(float(np.abs(a).max()) for a in arrays)
    far = top > 0 and not 2.0**-500 <= top <= 2.0**500
    scale = math.ldexp(1.0, math.frexp(top)[1] - 1) if far else 1.0  # <= top: never inf
    ex = _extrapolate([a / scale for a in arrays], sizes, exponent, level, n_boot, seed, pooled)
    if scale == 1.0:
        return ex
    scaled = ("value", "low", "high", "se", "slope")  # the fields in units of energy
    out = replace(ex, **{k: getattr(ex, k) * scale for k in scaled})
    if not all(math.isfinite(getattr(out, k)) for k in scaled):
        raise ValueError(
            f"the extrapolation of samples as large as {top:.3g} leaves float64's range"
        )
    return out


def _extrapolate(
    arrays: list[np.ndarray],
    sizes: Sequence[int],
    exponent: float,
    level: float,
    n_boot: int,
    seed: int,
    pooled: bool,
) -> Extrapolation:
    """:func:`extrapolate` of checked samples ``arrays``."""
    x, shift = _abscissae(sizes, exponent)
    log_n = np.log(np.asarray(sizes, dtype=np.float64)) if pooled else None
    value, slope, chi2, var = _fit(x, arrays, log_n)  # slope: in u = n^(-exponent) 2^shift
    shape = dict(
        slope=_slope_in_n(slope, shift, float(x.max()), exponent),
        chi2=chi2,
        dof=len(arrays) - 2,
        level=float(level),
        exponent=float(exponent),
        sizes=tuple(int(n) for n in sizes),
    )
    if not np.any(var > 0):  # no spread anywhere: no error estimate
        return Extrapolation(value, value, value, 0.0, **shape)
    rng = np.random.default_rng(seed)
    boot_m = np.empty((n_boot, len(arrays)))
    boot_v = np.empty_like(boot_m)
    for j, a in enumerate(arrays):
        m = a.size
        # replicates in blocks of at most BOOT_BLOCK draws: one n_boot x m block asked for
        # 22 GiB at n_boot = 1e6 and 3000 seeds. NumPy fills a block row by row from the
        # stream, so the draws are the same for any block size.
        rows = max(1, BOOT_BLOCK // m)
        for r in range(0, n_boot, rows):
            part = slice(r, min(r + rows, n_boot))
            draw = a[rng.integers(0, m, size=(part.stop - r, m))]
            draw = a.mean() + math.sqrt(m / (m - 1)) * (draw - a.mean())
            boot_m[part, j] = draw.mean(axis=1)
            # refit with each replicate's own weights (floored at 1% of the observed variance
            # so a replicate of identical draws does not get infinite weight)
            boot_v[part, j] = draw.var(axis=1, ddof=1) / m
    if log_n is not None:  # each replicate's own pooled law
        counts = np.array([a.size for a in arrays], dtype=np.float64)
        boot_v = _pooled(log_n, boot_v * counts, counts) / counts
    boot_v = np.maximum(boot_v, 0.01 * var)
    reps, _ = _wls_line(x, boot_m, 1.0 / boot_v)
    alpha = (1.0 - level) / 2.0
    q_low, q_high = np.quantile(reps, [alpha, 1.0 - alpha])
    counts = np.array([a.size for a in arrays], dtype=np.float64)
    nu = _welch_dof(x, var, counts)
    stretch = student_stretch(level, nu)
    low = value - stretch * max(value - float(q_low), 0.0)
    high = value + stretch * max(float(q_high) - value, 0.0)
    fit_p = _fit_p(x, counts, value, slope, var, chi2, rng, log_n) if len(arrays) > 2 else math.nan
    return Extrapolation(value, low, high, float(reps.std(ddof=1)), **shape, fit_p=fit_p, t_dof=nu)
