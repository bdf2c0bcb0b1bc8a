"""The full-RSB criterion: is q -> xi''(q)^(-1/2) concave on (0, 1]?

By arXiv:1812.04588 (for mixtures without a field), the zero-temperature Parisi measure has
support [0, 1] exactly when f(q) = xi''(q)^(-1/2) is concave on (0, 1]; then the ground-state
energy equals ALG and Hessian ascent reaches it. One case is degenerate: with no degree above 2,
xi'' is constant, f is affine (concave, so GS = ALG still holds), and alpha = -f' = 0: the
solution is replica symmetric, with no RSB at all (pure p = 2: GS = ALG = sqrt(2 xi(1))). The
verdict says so (``describe``); for a polynomial xi it is the only affine case.

How it is computed. With f = xi''^(-1/2),

    f''(q) = (3/4) xi'''^2 xi''^(-5/2) - (1/2) xi'''' xi''^(-3/2)
           = (1/4) xi''^(-5/2) N(q),      N(q) = 3 xi'''(q)^2 - 2 xi''(q) xi''''(q).

On (0, 1], xi'' > 0 whenever the mixture has a degree p >= 2, so f'' has the sign of the
polynomial N. We build N exactly from the mixture (integer combinatorial factors times products of
coefficients), divide out the power of q that vanishes at 0 (which does not change the sign on
(0, 1]), find the roots of what is left with NumPy and test the sign between consecutive roots.
No finite differences are involved, and the blow-up of f at 0 when xi''(0) = 0 (no p = 2 term)
plays no role: the sign of N near 0 decides, and it is positive there, so such mixtures fail the
criterion on an interval starting at 0.

With a field (a p = 1 term): the field does not enter xi'', so ``holds`` still describes
concavity on all of (0, 1]. But a field keeps the overlap of two near-maximizers away from 0, so
the Parisi alpha vanishes near 0, and only [q_hat, 1] matters (q_hat from
:func:`orthoclimb.theory.algorithmic_threshold`): when xi''^(-1/2) is concave there, alpha = 0 on
[0, q_hat) and alpha = -d/dq xi''^(-1/2) on [q_hat, 1] satisfy the optimality conditions of the
Chen-Sen functional, and GS = ALG. That is reported as ``gs_equals_alg``. When q_hat = 1
(xi''(1) <= xi'(1)) the solution is replica symmetric and GS = ALG = sqrt(xi'(1)) whatever the
shape of xi''. (This field version is our own derivation from the stationarity conditions, see
:mod:`orthoclimb.theory.parisi`, and is checked numerically in the tests.) Without a field
q_hat = 0 and ``gs_equals_alg`` equals ``holds``.

A pure field (p = 1 only) has xi'' = 0: f is infinite everywhere and there is no concavity to
test. The polynomial is linear, its maximum on the sphere is |field| = gamma_1 per spin, the
Parisi measure is the replica-symmetric point (alpha = 0) and GS = ALG = gamma_1. We report
``holds = False`` (no full-RSB region), no failing interval, ``linear = True`` and
``gs_equals_alg = True``.
"""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction

import numpy as np
from numpy.polynomial import Polynomial
from numpy.polynomial import polynomial as npoly

from ..model.mixture import Mixture
from ._checks import check_mixture
from .algorithmic import algorithmic_threshold

__all__ = ["FullRSBVerdict", "concavity_numerator", "full_rsb"]

# Values of |N(q)| below this fraction of sum_k |c_k| q^k (the size of the terms that cancel) are
# indistinguishable from 0 in double precision; on their own they count as "concave" (N <= 0).
# This keeps a mixture exactly on a boundary, such as b = a/12 below, from being reported as
# failing on a sliver of width 1e-16 next to a root. Between two failing stretches they join
# them (a double root of N, which N touches without changing sign: see _failing).
_SIGN_RTOL = 64 * np.finfo(float).eps
# Roots whose imaginary part is this small are used as candidate sign changes. Keeping a spurious
# candidate is harmless (it only splits a sign test in two).
_IMAG_TOL = 1e-6


@dataclass(frozen=True)
class FullRSBVerdict:
    """Result of :func:`full_rsb`.

    Attributes:
        holds: True when q -> xi''(q)^(-1/2) is concave on all of (0, 1].
        failing_intervals: the maximal open sub-intervals (lo, hi) of (0, 1] on which it is
            strictly convex: N > 0 but at isolated points, where N touches 0 (a double root of
            N does not split an interval). hi = 1.0 means the interval reaches q = 1,
            included. Empty when ``holds``.
        q_hat: start of the Parisi support with a field (0.0 without a field).
        gs_equals_alg: True when the function is concave on [q_hat, 1], which is what predicts
            GS = ALG; equal to ``holds`` without a field.
        linear: True for a pure field (p = 1 only), where xi'' = 0 and the test is void.
        constant_curvature: True when no degree exceeds 2 (and one is 2): xi'' is constant,
            the criterion holds trivially and the solution is replica symmetric.
    """

    holds: bool
    failing_intervals: list[tuple[float, float]]
    q_hat: float
    gs_equals_alg: bool
    linear: bool
    constant_curvature: bool = False

    def describe(self) -> str:
        """A one-line human-readable verdict."""
        if self.linear:
            return "no full-RSB region: xi'' = 0 (linear polynomial), GS = ALG = gamma_1"
        if self.holds and self.constant_curvature:  # a field gives q_hat = 1 here
            return (
                "holds, in its degenerate case: xi'' is constant (no degree above 2), so"
                " xi''^(-1/2) is affine (concave and convex), alpha = 0 and the solution is"
                " replica symmetric (no RSB at all); GS = ALG"
                + (" = sqrt(xi'(1))" if self.q_hat >= 1.0 else "")
            )
        if self.holds:
            text = "holds: xi''^(-1/2) is concave on (0, 1]"
        else:
            parts = ", ".join(
                "({}, {}{}".format(*_apart(lo, hi), "]" if hi == 1.0 else ")")
                for lo, hi in self.failing_intervals
            )
            text = f"fails: xi''^(-1/2) is not concave on {parts}"
        if self.q_hat >= 1.0:
            text += (
                "; not needed here: with this field q_hat = 1, so the solution is replica"
                " symmetric (no RSB at all) and GS = ALG = sqrt(xi'(1))"
            )
        elif self.q_hat > 0.0:
            text += (
                f"; with the field only [q_hat, 1] matters, q_hat = {self.q_hat:.6g}:"
                f" GS {'=' if self.gs_equals_alg else '>'} ALG predicted"
            )
        return text


def _apart(lo: float, hi: float) -> tuple[str, str]:
    """lo and hi printed with 6 significant digits, or as many more as tell them apart (an
    interval that just reaches into (0, 1] printed "(1, 1]" at 6)."""
    for digits in range(6, 18):
        a, b = f"{lo:.{digits}g}", f"{hi:.{digits}g}"
        if a != b:
            break
    return a, b


def _pair_factor(p: int, r: int) -> int:
    """K(p, r) = 3 p(p-1)(p-2) r(r-1)(r-2) - 2 p(p-1) r(r-1)(r-2)(r-3), in exact integers."""
    third_p, third_r = p * (p - 1) * (p - 2), r * (r - 1) * (r - 2)
    return 3 * third_p * third_r - 2 * p * (p - 1) * third_r * (r - 3)


def _numerator_coefficients(mixture: Mixture, unit_scale: bool = False) -> np.ndarray:
    """Ascending coefficients of N(q) = 3 xi'''^2 - 2 xi'' xi''''.

    For degrees p, r with xi coefficients c_p, c_r, the product of the q^p and q^r terms gives
    c_p c_r K(p, r) q^(p + r - 6) with the integer
    K(p, r) = 3 p(p-1)(p-2) r(r-1)(r-2) - 2 p(p-1) r(r-1)(r-2)(r-3).
    Pairs with K(p, r) + K(r, p) = 0 are skipped exactly (for instance p = 2 with r = 3, and p = r
    = 2), so structural zeros stay exactly zero.

    With ``unit_scale`` N is computed in exact rational arithmetic and divided by its largest
    coefficient: a positive factor, which keeps its sign, and the result is finite and free of
    underflow however large or small, or however unequal, the terms of xi are (the verdict does
    not depend on the scale of xi; with xi = q^2 + 1e-200 q^3 the single term 108 c_3^2 would
    underflow to 0 in floating point and turn "fails" into "holds").
    """
    coeffs: dict[int, float] | dict[int, Fraction] = mixture.xi_coefficients
    if unit_scale:
        coeffs = {p: Fraction(c) for p, c in coeffs.items()}
    degrees = [p for p in coeffs if p >= 2]
    top = max(degrees, default=0)
    terms: list = [0] * max(2 * top - 5, 1)
    for i, p in enumerate(degrees):
        for r in degrees[i:]:
            factor = _pair_factor(p, r) + _pair_factor(r, p) if p != r else _pair_factor(p, p)
            if factor == 0:
                continue
            terms[p + r - 6] += factor * coeffs[p] * coeffs[r]
    if unit_scale:
        largest = max((abs(t) for t in terms), default=0)
        if largest:
            terms = [t / largest for t in terms]
    return np.array([float(t) for t in terms])


def concavity_numerator(mixture: Mixture) -> Polynomial:
    """The polynomial N(q) = 3 xi'''(q)^2 - 2 xi''(q) xi''''(q).

    f = xi''^(-1/2) has f'' = N xi''^(-5/2) / 4, so f is concave exactly where N <= 0.
    """
    mixture = check_mixture(mixture, "concavity_numerator")
    return Polynomial(_numerator_coefficients(mixture))


def _failing(coeffs: np.ndarray) -> list[tuple[float, float]]:
    """Maximal sub-intervals of (0, 1] where the polynomial with these ascending coefficients is
    positive (beyond rounding)."""
    nz = np.flatnonzero(coeffs)
    if nz.size == 0:
        return []
    # q^k divides N; on q > 0 it does not change the sign.
    reduced = coeffs[nz[0] : nz[-1] + 1]
    cuts = [0.0, 1.0]
    if reduced.size > 1:
        roots = npoly.polyroots(reduced)
        near_real = roots[np.abs(roots.imag) <= _IMAG_TOL * np.maximum(1.0, np.abs(roots))].real
        cuts.extend(float(r) for r in near_real if 0.0 < r < 1.0)
    cuts = sorted(set(cuts))
    abs_coeffs = np.abs(reduced)
    intervals: list[tuple[float, float]] = []
    joined = False  # the last interval may be continued: only rounding-sized values since
    for a, b in zip(cuts[:-1], cuts[1:], strict=True):
        mid = 0.5 * (a + b)
        value = npoly.polyval(mid, reduced)
        scale = npoly.polyval(mid, abs_coeffs)
        if value > _SIGN_RTOL * scale:
            if intervals and joined:
                intervals[-1] = (intervals[-1][0], b)
            else:
                intervals.append((a, b))
            joined = True
        elif value < -_SIGN_RTOL * scale:
            joined = False
        # else: N is zero to rounding on (a, b), as between the two roots that rounding makes
        # of a double root (xi = q^3 + 0.1 q^8: N = c (q^5 - 15/56)^2); a positive interval
        # on each side is one interval
    return intervals


def full_rsb(mixture: Mixture) -> FullRSBVerdict:
    """Test the full-RSB criterion of arXiv:1812.04588 for a mixture.

    Returns a :class:`FullRSBVerdict`: ``holds`` is True when q -> xi''(q)^(-1/2) is concave on
    (0, 1], and ``failing_intervals`` lists the maximal sub-intervals where it is not. The test uses
    the sign of the exact numerator N(q) = 3 xi'''^2 - 2 xi'' xi'''' of the second derivative
    (see the module docstring), found from the roots of N. Whether GS = ALG is predicted is
    ``gs_equals_alg``, not ``holds``: with a field only [q_hat, 1] matters (xi = q + 0.09 q^3
    fails the criterion, yet q_hat = 1 and GS = ALG = sqrt(xi'(1))).

    Examples (from N by hand): xi = a q^2 + b q^4 holds iff b <= a/12 and, past that, fails on
    (sqrt(a / (12 b)), 1]; every pure p >= 3 model and every mixture of p = 2 and p = 3 fails.
    """
    mixture = check_mixture(mixture, "full_rsb")
    q_hat = algorithmic_threshold(mixture)
    if all(p < 2 for p in mixture.degrees):
        return FullRSBVerdict(
            holds=False, failing_intervals=[], q_hat=q_hat, gs_equals_alg=True, linear=True
        )
    coeffs = _numerator_coefficients(mixture, unit_scale=True)
    failing = _failing(coeffs)
    on_support = [iv for iv in failing if iv[1] > q_hat]
    return FullRSBVerdict(
        holds=not failing,
        failing_intervals=failing,
        q_hat=q_hat,
        gs_equals_alg=not on_support,
        linear=False,
        constant_curvature=mixture.max_degree == 2,
    )
