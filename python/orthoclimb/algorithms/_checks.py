"""Input checks shared by the algorithms (every refusal names the bad value), and the memory
check of their dense n x n work."""

from __future__ import annotations

import math
import warnings
import weakref
from typing import Any

import numpy as np

from ..errors import ShapeError
from ..model import memory
from ..model.arrays import as_flag, as_float_array
from ..model.hamiltonian import Hamiltonian, _check_seed
from ._sphere import norm

__all__ = [
    "dense_work_fits",
    "check_count",
    "check_flag",
    "check_ham",
    "check_positive",
    "check_seed",
    "check_unit_start",
    "coefficient_scale",
    "energy_scale",
    "log_energy_scale",
    "warn_if_far_scale",
]


def check_ham(ham: Any, where: str) -> Hamiltonian:
    """``ham`` if it is a Hamiltonian of n >= 2 spins: at n = 1 the unit sphere is the two
    points -1 and +1, with no tangent direction to climb along or to check (compare
    ``ham.energy`` at both instead)."""
    if not isinstance(ham, Hamiltonian):
        raise TypeError(f"{where} needs an orthoclimb.Hamiltonian, got {type(ham).__name__}")
    if ham.n < 2:
        raise ValueError(
            f"{where} needs n >= 2: the sphere of n = {ham.n} is the two points -1 and +1, with"
            " no tangent direction to climb along (compare ham.energy at both instead)"
        )
    return ham


# The most steps of a Hessian-ascent path or an anneal. Each costs at least a pass over the
# coefficients (about 10 us at n = 20); 10^20 was taken, printed an estimate of 1.7e13 h and
# ran, and an anneal's schedule of 10^14 temperatures asked for 728 TiB (a review).
MAX_STEPS = 10**7


def check_count(value: Any, name: str, minimum: int = 1, maximum: int | None = None) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        raise TypeError(f"{name} must be an integer >= {minimum}, got {value!r}")
    if value < minimum:
        raise ValueError(f"{name} must be >= {minimum}, got {value}")
    if maximum is not None and value > maximum:
        raise ValueError(f"{name} must be at most {maximum:_}, got {value}")
    return int(value)


def check_positive(value: Any, name: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise TypeError(f"{name} must be a positive real number, got {value!r}")
    v = float(value)
    if not math.isfinite(v) or v <= 0.0:
        raise ValueError(f"{name} must be finite and > 0, got {value!r}")
    return v


FAR_SCALE = 1e4  # sqrt(xi(1)) beyond [1/FAR_SCALE, FAR_SCALE]: absolute tolerances mislead


def warn_if_far_scale(ham: Hamiltonian, where: str) -> None:
    """Warn when the instance's energy scale is far from 1: the optimizers' tolerances (gtol,
    tol, temperatures) are absolute, in energy per spin, so at gamma ~ 1e-20 a random start
    already "converges", and at 1e20 gtol lies below rounding (the step-size bounds and the
    polish's hand-over to Newton follow the scale, :func:`energy_scale`). The scale is sqrt(xi(1))
    for a sampled instance; for given coefficients, the estimate of it that
    :func:`coefficient_scale` reads off them. Energies scale with it: rescale instead."""
    mixture = ham.mixture
    log_scale = log_energy_scale(ham)
    if mixture is not None:
        what = f"sqrt(xi(1)) = {_scale_text(log_scale)}"
        fix = "rescale the mixture so that xi(1) is of order one"
    else:
        what = (
            f"{_scale_text(log_scale)} (sqrt(sum_p sum_m a_m^2 / n^(p+1)) of the given"
            " coefficients, an estimate of sqrt(xi(1)))"
        )
        fix = "rescale the coefficients so that it is of order one"
    # the zero polynomial (scale 0) is left alone: every point is a maximum, at any tolerance
    if math.isfinite(log_scale) and abs(log_scale) > math.log(FAR_SCALE):
        warnings.warn(
            f"{where}: the energy scale {what} is far from 1, but the tolerances are absolute"
            f" (energy per spin); {fix} (energies scale with it)",
            RuntimeWarning,
            stacklevel=3,
        )


def log_energy_scale(ham: Hamiltonian) -> float:
    """ln of the instance's energy scale: sqrt(xi(1)) of its mixture when sampled, else the
    estimate :func:`coefficient_scale` reads off its coefficients (-inf for the zero
    polynomial)."""
    mixture = ham.mixture
    if mixture is not None:
        xi1 = float(mixture.xi(1.0))
        return 0.5 * math.log(xi1) if xi1 > 0 else -math.inf
    return coefficient_scale(ham)


def energy_scale(ham: Hamiltonian) -> float:
    """The power of two nearest exp(:func:`log_energy_scale`), between 2^-960 and 2^960, and 1
    for the zero polynomial: a factor for step bounds and tolerances meant at scale 1. A power
    of two divides exactly, so a run at a scale within a factor sqrt(2) of 1 makes the same
    steps, bit for bit, as before these bounds followed the scale, a sampled instance the same
    as its copy from coefficients, and 2^k H the same as H (a review: dividing by 1.118 moved
    results at rounding level); the bound keeps 1e10 / scale finite."""
    log_scale = log_energy_scale(ham)
    if not math.isfinite(log_scale):
        return 1.0
    exponent = round(log_scale / math.log(2.0))
    return math.ldexp(1.0, min(max(exponent, -960), 960))


def _scale_text(log_scale: float) -> str:
    """exp(log_scale) as "1e-20" or "3.16": its digits, also beyond float64's range."""
    if not math.isfinite(log_scale):
        return "0" if log_scale < 0 else "inf"
    exponent = log_scale / math.log(10.0)
    if abs(exponent) < 300:
        return f"{math.exp(log_scale):.3g}"
    whole = math.floor(exponent)
    return f"{10 ** (exponent - whole):.3g}e{whole:+d}"


_SCALES: weakref.WeakKeyDictionary = weakref.WeakKeyDictionary()
_SLICE = 1 << 20


def coefficient_scale(ham: Hamiltonian) -> float:
    """ln of sqrt(sum_p sum_m a_m^2 / n^(p+1)), the energy scale of given coefficients.

    For a sampled instance it estimates sqrt(xi(1)): E a_m^2 = n gamma_p^2 c(m), and the
    multinomial counts c(m) of the degree-p monomials add up to n^p (exact identity), so
    E sum_m a_m^2 / n^(p+1) = gamma_p^2. Read in slices of 2^20 coefficients (one pass, once
    per instance), in logarithms so that no square overflows; -inf for all zeros."""
    if ham in _SCALES:
        return _SCALES[ham]
    from scipy.special import logsumexp

    n, terms = ham.n, []
    for p in ham.degrees:
        count = math.comb(n + p - 1, p)
        for start in range(0, count, _SLICE):
            size = norm(ham.coefficients(p, start, min(start + _SLICE, count)))
            if size > 0.0:
                terms.append(2.0 * math.log(size) - (p + 1) * math.log(n))
    value = 0.5 * float(logsumexp(terms)) if terms else -math.inf
    _SCALES[ham] = value
    return value


# ``value`` as a bool, or a TypeError naming it: the model's check, under this module's names.
check_flag = as_flag


def check_seed(seed: Any, name: str = "seed") -> int:
    """A start-point seed, in [0, 2^64) like the instance seeds (and the CLI's flags)."""
    return _check_seed(seed, name)


def check_unit_start(x: Any, n: int, name: str = "x") -> np.ndarray:
    """A float64 copy of a nonzero finite vector of length n, normalized to |x| = 1."""
    arr = as_float_array(x, name)  # refuses booleans and complex numbers; converts integers
    if arr.shape != (n,):
        raise ShapeError(f"{name} must have shape ({n},), got {arr.shape}")
    # scaled by its largest entry first: the norm of 1e200 * ones overflows to inf (and x/inf
    # is the zero vector), that of 1e-170 * ones underflows to 0
    big = float(np.max(np.abs(arr))) if arr.size else 0.0  # finite: as_float_array checked
    if big == 0.0:
        raise ValueError(f"{name} is the zero vector; it has no direction on the sphere")
    arr = arr / big
    return arr / norm(arr)


def dense_work_fits(ham: Hamiltonian, copies: int) -> bool:
    """Whether a dense method's work fits in half the available memory: the kernel's Hessian
    accumulators (:attr:`Hamiltonian.hessian_workspace_nbytes`) plus ``copies`` n x n float64
    arrays. Hessian ascent's dense mode, Newton's steps in the polish and the dense
    local-maximum check ask it; the other half is left to the rest of the process."""
    need, room = dense_work(ham, copies)
    return need <= room


def dense_work(ham: Hamiltonian, copies: int) -> tuple[int, int]:
    """(bytes, bytes): the dense work of :func:`dense_work_fits` and the room it has, half the
    memory available now (with ``ham`` already held)."""
    return ham.hessian_workspace_nbytes + copies * ham.n * ham.n * 8, memory.available_memory() // 2
