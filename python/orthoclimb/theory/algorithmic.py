"""The algorithmic energy ALG, the predicted path curve and the predicted Hessian edge.

Units and sign: energies are per spin, e = H(x)/n, for points x of the unit ball; we maximize.

Without a field (no p = 1 term) the predicted energy reached at radius sqrt(q) by an ascent that
always steps along the top eigenvector of the tangent Hessian is

    E_path(q) = int_0^q sqrt(xi''(s)) ds,        ALG = E_path(1).

The reason: at radius sqrt(q) the top tangent eigenvalue of the Hessian, per spin, is close to
2 sqrt(xi''(q)) (see :func:`hessian_edge`); a step whose squared length is dq gains about half that
times dq.

With a field, the ascent first moves in the direction the field points to. Let q_hat be the root of
q xi''(q) = xi'(q) in (0, 1] (q_hat = 1 when xi''(1) <= xi'(1)); then

    ALG = sqrt(q_hat xi'(q_hat)) + int_{q_hat}^1 sqrt(xi''(q)) dq.

(The field rule is recalled from memory of the spherical case of arXiv:2110.07847 and is checked
numerically against the Parisi ground state in the tests.) Without a field q_hat = 0 and the two
formulas agree.
"""

from __future__ import annotations

import functools
import math
from typing import Any

import numpy as np
from scipy.integrate import quad_vec
from scipy.optimize import brentq

from ..model.mixture import Mixture
from ._checks import check_mixture, check_overlap, scalar_or_array

__all__ = [
    "algorithmic_energy",
    "algorithmic_threshold",
    "hessian_edge",
    "path_energy",
]


def algorithmic_threshold(mixture: Mixture) -> float:
    """The overlap q_hat where the field-driven first stage of the ascent ends.

    q_hat is the root in (0, 1] of g(q) = q xi''(q) - xi'(q). Without a field g(0) = 0 and
    q_hat = 0. With a field g(0) = -gamma_1^2 < 0 and g is nondecreasing (g' = q xi''' >= 0), so
    the root is unique when g(1) >= 0; when g(1) < 0, i.e. xi''(1) < xi'(1), q_hat = 1 and the
    whole path is field-driven (ALG = sqrt(xi'(1)), the replica-symmetric value).
    """
    mixture = check_mixture(mixture, "algorithmic_threshold")
    if not mixture.has_field:
        return 0.0

    def g(q: float) -> float:
        return q * mixture.xi(q, 2) - mixture.xi(q, 1)

    if g(1.0) <= 0.0:
        return 1.0
    # to relative precision: an absolute xtol of 1e-15 left q_hat of a field of 1e-12 wrong by
    # 1.3e-6 of itself and returned 0.0 for fields below about 1e-20 (a trial). The bracket
    # shrinks by factors of 1000 first, so that a root near 1e-150 is not left to some 500
    # bisections. Below fields of about 1e-154 gamma_1^2 is subnormal and the root loses
    # digits; below about 1e-162 it underflows to 0 and so does q_hat.
    tiny, hi = np.finfo(float).tiny, 1.0
    while hi > 1e3 * tiny and g(hi * 1e-3) > 0.0:
        hi *= 1e-3
    lo = hi * 1e-3 if hi > 1e3 * tiny else 0.0
    eps = np.finfo(float).eps
    return float(brentq(g, lo, hi, xtol=tiny, rtol=4 * eps, maxiter=200))


def _sqrt_curvature_integral(mixture: Mixture, q: np.ndarray) -> np.ndarray:
    """F(q) = int_0^q sqrt(xi''(s)) ds for every entry of the 1-d array ``q``.

    Substituting s = q t^2 gives F(q) = int_0^1 2 q t sqrt(xi''(q t^2)) dt. When the lowest degree
    with p >= 2 is k, xi''(s) = s^(k-2) R(s) with R(0) > 0, so the new integrand is
    t^(k-1) sqrt(R(q t^2)) times constants: smooth, with no square-root cusp at t = 0. SciPy's
    adaptive ``quad_vec`` integrates all q at once.
    """
    if q.size == 0:
        return np.zeros_like(q)

    def integrand(t: float) -> np.ndarray:
        s = q * (t * t)
        return 2.0 * q * t * np.sqrt(np.maximum(mixture.xi(s, 2), 0.0))

    # The error bound is relative to the largest F(q), which q sqrt(xi''(q)) bounds from above
    # (xi'' increases): an absolute 1e-14 stopped early for tiny gammas (1.6e-10 relative at
    # gammas of 1e-20), and none at all never stopped where F underflows (6 s to return 0 at
    # q = 1e-300, at quad_vec's limit of 10,000 intervals).
    top = float(np.max(q * np.sqrt(np.maximum(mixture.xi(q, 2), 0.0))))
    if not top > 0.0:
        return np.zeros_like(q)
    value, _err = quad_vec(integrand, 0.0, 1.0, epsabs=1e-15 * top, epsrel=1e-13, norm="max")
    return np.asarray(value, dtype=np.float64)


def path_energy(mixture: Mixture, q: Any) -> Any:
    """Predicted energy per spin reached at radius sqrt(q), for q in [0, 1] (vectorized).

    It is the algorithmic energy of the same random polynomial restricted to the sphere of radius
    sqrt(q), whose mixture is r -> xi(q r):

        E_path(q) = sqrt(q xi'(q))                                   for q <= q_hat,
        E_path(q) = sqrt(q_hat xi'(q_hat)) + int_{q_hat}^q sqrt(xi''(s)) ds   for q >= q_hat,

    with q_hat from :func:`algorithmic_threshold` (q_hat = 0 without a field, so the first line
    never applies and E_path(q) = int_0^q sqrt(xi''(s)) ds). E_path(1) = ALG. Returns a float for
    scalar ``q``, an array of the same shape otherwise.
    """
    mixture = check_mixture(mixture, "path_energy")
    q_arr = check_overlap(q, "path_energy")
    flat = q_arr.ravel()
    q_hat = algorithmic_threshold(mixture)
    out = np.empty_like(flat)
    low = flat <= q_hat
    if np.any(low):  # sqrt(q) sqrt(xi'(q)): q xi'(q) underflowed to 0 at q = 5e-324
        out[low] = np.sqrt(flat[low]) * np.sqrt(mixture.xi(flat[low], 1))
    high = ~low
    if np.any(high):
        upper = _sqrt_curvature_integral(mixture, flat[high])
        if q_hat > 0.0:
            start = math.sqrt(q_hat * mixture.xi(q_hat, 1))
            base = _sqrt_curvature_integral(mixture, np.array([q_hat]))[0]
            upper = start + (upper - base)
        out[high] = upper
    return scalar_or_array(out.reshape(q_arr.shape))


def algorithmic_energy(mixture: Mixture) -> float:
    """ALG: the energy per spin the best known efficient ascent reaches on the sphere: Hessian
    ascent attains it (Subag 2018, arXiv:1812.04588), and no algorithm whose output is
    Lipschitz in the disorder exceeds it (Huang and Sellke 2021, arXiv:2110.07847, where the
    field version is stated too).

    ALG = sqrt(q_hat xi'(q_hat)) + int_{q_hat}^1 sqrt(xi''(q)) dq, i.e. ``path_energy(mixture,
    1.0)``; without a field this is int_0^1 sqrt(xi''(q)) dq. For a pure linear mixture (p = 1
    only) it is gamma_1, the exact maximum of a linear function on the unit sphere.

    The value is kept per mixture (the last 256; mixtures are immutable and equal ones have
    equal gammas): its integral took 2-4.5 ms, and Hessian ascent asked for it three times a
    run, 4-9 % of a run at the small sizes of a many-seed study.
    """
    mixture = check_mixture(mixture, "algorithmic_energy")
    return _algorithmic_energy(mixture)


@functools.lru_cache(maxsize=256)
def _algorithmic_energy(mixture: Mixture) -> float:
    return float(path_energy(mixture, 1.0))


def hessian_edge(mixture: Mixture, q: Any) -> Any:
    """Predicted top eigenvalue per spin of the Hessian restricted to the tangent space at a point
    of radius sqrt(q): 2 sqrt(xi''(q)) (vectorized over q in [0, 1]).

    At a fixed point of radius sqrt(q) the Hessian restricted to the tangent space, divided by n,
    is a Gaussian symmetric matrix with semicircle radius 2 sqrt(xi''(q)) for large n; a
    covariance computation shows it is independent of H(x) and of the gradient there. Along a
    Hessian-ascent path the points depend on the disorder, and the edge is approached only when
    the steps taken are a small fraction of n (n -> infinity before K): at n = 200 ... 800 the
    path's top eigenvalue runs 3-15 % below it (see ``orthoclimb.algorithms.hessian_ascent``).
    """
    mixture = check_mixture(mixture, "hessian_edge")
    q_arr = check_overlap(q, "hessian_edge")
    curvature = np.maximum(np.asarray(mixture.xi(q_arr, 2), dtype=np.float64), 0.0)
    out = np.array(2.0 * np.sqrt(curvature))  # an array also for a scalar q, to assign into
    tiny = (curvature < np.finfo(np.float64).tiny) & (q_arr > 0.0)
    if np.any(tiny):  # xi''(q) lost its digits below the normal range (q^2 at q = 1e-200)
        out[tiny] = 2.0 * _sqrt_curvature_factored(mixture, q_arr[tiny])
    return scalar_or_array(out)


def _sqrt_curvature_factored(mixture: Mixture, q: np.ndarray) -> np.ndarray:
    """sqrt(xi''(q)) as q^(k/2) sqrt(sum_p gamma_p^2 p (p - 1) q^(p - 2 - k)), k the lowest
    power p - 2 of xi'' (p >= 2): no q^(p - 2) underflows at tiny q > 0, where xi''(q) itself
    does (hessian_edge of q^4 at q = 1e-200 was 0.0, not 6.9e-200)."""
    powers = {p: c for p, c in mixture.xi_coefficients.items() if p >= 2}
    if not powers:
        return np.zeros_like(q)
    k = min(powers) - 2
    inner = sum(c * p * (p - 1) * q ** (p - 2 - k) for p, c in powers.items())
    return np.sqrt(q) ** k * np.sqrt(inner)
