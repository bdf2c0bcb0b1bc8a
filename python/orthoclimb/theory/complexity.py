"""Complexity of local maxima of pure p-spin models (Auffinger, Ben Arous and Cerny 2013).

For the pure model xi(q) = q^p (gamma_p = 1), p >= 3, the expected number of local maxima of H on
the unit sphere with energy per spin near E grows like exp(n Theta_p(E)). Auffinger, Ben Arous and
Cerny (arXiv:1003.1129) state it for minima at energy u <= -E_inf; we maximize, so we use
u = -E:

    E_inf = 2 sqrt((p - 1) / p),
    Theta_p(E) = 1/2 log(p - 1) - (p - 2) / (4 (p - 1)) E^2 - I_1(E)      for E >= E_inf,
    I_1(E) = (E / E_inf^2) sqrt(E^2 - E_inf^2) - log(E + sqrt(E^2 - E_inf^2)) + log E_inf.

(I_1 is the same function as theirs at u = -E.) I_1(E_inf) = 0 and
I_1(E) = (2 / E_inf^2) int_{E_inf}^E sqrt(s^2 - E_inf^2) ds, so Theta_p decreases on
[E_inf, inf) from a positive value; its zero is the ground-state energy per spin, an independent
cross-check of the Parisi value. For gamma_p != 1 every energy scales by gamma_p.
"""

from __future__ import annotations

import math
import reprlib
from typing import Any

import numpy as np
from scipy.optimize import brentq

from ..model.arrays import as_float_array
from ._checks import scalar_or_array

_E_MAX = 1e150  # energies per spin above this overflow e * e in the formula

__all__ = ["complexity", "complexity_ground_state", "threshold_energy"]


def _check_p(p: Any, where: str) -> int:
    if isinstance(p, bool) or not isinstance(p, (int, np.integer)):
        raise TypeError(f"{where}(): the degree p must be an integer >= 3, got {p!r}")
    if p < 3:
        raise ValueError(
            f"{where}(): the complexity formula is for pure p-spin models with p >= 3, got p = {p}"
            " (p = 2 has no exponential number of critical points; p = 1 has one maximum)"
        )
    return int(p)


def threshold_energy(p: int) -> float:
    """E_inf = 2 sqrt((p - 1) / p): energy per spin where the pure p-spin landscape's local maxima
    concentrate (Auffinger, Ben Arous and Cerny 2013); equals ALG for the pure model. `orthoclimb
    theory` prints it as E_thr, apart from the reports' e_inf (the extrapolated n -> infinity
    limit of a method's energies)."""
    p = _check_p(p, "threshold_energy")
    return 2.0 * math.sqrt((p - 1) / p)


def complexity(p: int, energy: Any) -> Any:
    """Theta_p(E), the exponential growth rate (per spin) of the expected number of local maxima
    with energy per spin E >= E_inf for the pure p-spin model with gamma_p = 1 (maximizing sign;
    see the module docstring). Vectorized over ``energy``."""
    p = _check_p(p, "complexity")
    # the package's array check: text, booleans, None and complex values are refused (before,
    # '2' was read as 2.0 and True as 1.0), integers converted
    try:
        e = as_float_array(energy, "complexity(): energy")
    except TypeError:  # name the value itself, not only its dtype
        raise TypeError(
            f"complexity(): energy must be a real number or array, got {reprlib.repr(energy)}"
        ) from None
    e_inf = 2.0 * math.sqrt((p - 1) / p)
    # E_inf computed another way (ALG of the pure model, 2 sqrt(p - 1) / sqrt(p)) can land a
    # few ulp below this one, and was refused (a trial): less than 8 eps relative below (9-16
    # ulp, as E_inf lies in [1.15, 2)) it is E_inf
    e = np.where((e < e_inf) & (e >= e_inf * (1.0 - 8 * np.finfo(float).eps)), e_inf, e)
    below = e < e_inf
    if np.any(below):
        bad = float(e[below].flat[0])
        raise ValueError(
            f"complexity(): the formula holds for energy >= E_inf = {e_inf!r} (p = {p}),"
            f" got energy = {bad!r}"
        )
    if np.any(e > _E_MAX):  # e * e overflows: NaN with warnings before
        raise ValueError(
            f"complexity(): energy must be at most {_E_MAX:g} (its square overflows), got"
            f" {float(e.max())!r}"
        )
    root = np.sqrt(e * e - e_inf * e_inf)
    i1 = (e / e_inf**2) * root - np.log((e + root) / e_inf)
    theta = 0.5 * math.log(p - 1) - (p - 2) / (4.0 * (p - 1)) * e * e - i1
    return scalar_or_array(theta)


def complexity_ground_state(p: int) -> float:
    """The zero of Theta_p above E_inf: the ground-state energy per spin of the pure p-spin model
    with gamma_p = 1 according to the complexity (found with scipy.optimize.brentq)."""
    p = _check_p(p, "complexity_ground_state")
    e_inf = threshold_energy(p)
    # Theta_p(E_inf) > 0 for p >= 3 and Theta_p decreases at least like -E^2 / 4 (p-2)/(p-1);
    # double the bracket until the sign changes.
    hi = 2.0 * e_inf
    while complexity(p, hi) > 0.0:
        hi *= 2.0
    return float(brentq(lambda e: complexity(p, e), e_inf, hi, xtol=1e-15, rtol=1e-15))
