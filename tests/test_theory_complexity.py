"""Tests of orthoclimb.theory.complexity (Auffinger, Ben Arous and Cerny 2013, arXiv:1003.1129)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import quad

from orthoclimb import Mixture
from orthoclimb.errors import NonFiniteError
from orthoclimb.theory import (
    algorithmic_energy,
    complexity,
    complexity_ground_state,
    threshold_energy,
)


@pytest.mark.parametrize("p", range(3, 11))
def test_threshold_energy(p):
    # Auffinger, Ben Arous and Cerny 2013: E_inf = 2 sqrt((p-1)/p); p = 3 gives 2 sqrt(2/3).
    assert threshold_energy(p) == pytest.approx(2 * math.sqrt((p - 1) / p), rel=1e-15)


def test_threshold_energy_three_spin_value():
    # 2 sqrt(2/3) = 1.632993 (Auffinger, Ben Arous and Cerny 2013).
    assert threshold_energy(3) == pytest.approx(1.632993, abs=5e-7)


@pytest.mark.parametrize("p", range(3, 9))
def test_complexity_at_threshold(p):
    # I_1(E_inf) = 0, so Theta_p(E_inf) = 1/2 log(p-1) - (p-2)/(4(p-1)) E_inf^2 (Auffinger, Ben
    # Arous and Cerny 2013).
    e_inf = 2 * math.sqrt((p - 1) / p)
    expected = 0.5 * math.log(p - 1) - (p - 2) / (4 * (p - 1)) * e_inf**2
    assert complexity(p, e_inf) == pytest.approx(expected, abs=1e-15)
    assert expected > 0  # local maxima are exponentially many at the threshold


@pytest.mark.parametrize("p", range(3, 9))
def test_complexity_takes_e_inf_computed_another_way(p):
    # ALG of the pure p-spin model is E_inf = 2 sqrt((p - 1)/p) (Subag 2018, Auffinger, Ben
    # Arous and Cerny 2013); computed by quadrature, or as 2 sqrt(p - 1)/sqrt(p), it may land
    # an ulp or two below and was refused for p = 5, 6, 7, 8 (a user trial)
    e_inf = threshold_energy(p)
    for e in (algorithmic_energy(Mixture({p: 1.0})), 2 * math.sqrt(p - 1) / math.sqrt(p)):
        assert abs(e - e_inf) <= 4 * np.finfo(float).eps * e_inf
        assert complexity(p, e) == pytest.approx(complexity(p, e_inf), abs=1e-12)
    with pytest.raises(ValueError, match="energy >= E_inf"):
        complexity(p, e_inf * (1 - 1e-14))


@pytest.mark.parametrize("p", [3, 4, 6])
def test_rate_function_against_quad(p):
    # I_1(E) = (2 / E_inf^2) int_{E_inf}^E sqrt(s^2 - E_inf^2) ds (differentiate the closed form
    # of Auffinger, Ben Arous and Cerny 2013); recompute Theta_p with scipy.integrate.quad.
    e_inf = 2 * math.sqrt((p - 1) / p)
    for energy in [e_inf * 1.001, 1.7, 2.0, 3.0]:
        if energy < e_inf:
            continue
        i1, _ = quad(lambda s: math.sqrt(s * s - e_inf * e_inf), e_inf, energy, epsabs=1e-14)
        i1 *= 2 / e_inf**2
        expected = 0.5 * math.log(p - 1) - (p - 2) / (4 * (p - 1)) * energy**2 - i1
        assert complexity(p, energy) == pytest.approx(expected, rel=1e-11, abs=1e-13)


def test_vectorized_and_decreasing():
    e = np.linspace(threshold_energy(4), 3.0, 50)
    values = complexity(4, e)
    assert values.shape == e.shape
    assert np.all(np.diff(values) < 0)
    assert isinstance(complexity(4, 2.0), float)


@pytest.mark.parametrize("p", range(3, 9))
def test_zero_of_the_complexity(p):
    zero = complexity_ground_state(p)
    assert zero > threshold_energy(p)
    assert abs(complexity(p, zero)) < 1e-13
    assert complexity(p, zero - 1e-6) > 0 > complexity(p, zero + 1e-6)


def test_three_spin_ground_state_value():
    # Crisanti and Sommers 1992 (Z. Phys. B 87); Auffinger, Ben Arous and Cerny 2013: 1.657.
    assert abs(complexity_ground_state(3) - 1.657) < 5e-4


@pytest.mark.parametrize("function", [threshold_energy, complexity_ground_state])
def test_degree_validation(function):
    with pytest.raises(ValueError, match="p = 2"):
        function(2)
    with pytest.raises(ValueError, match="p = 1"):
        function(1)
    with pytest.raises(TypeError, match="3.5"):
        function(3.5)
    with pytest.raises(TypeError, match="True"):
        function(True)


def test_energy_validation():
    with pytest.raises(ValueError, match="p = 2"):
        complexity(2, 1.5)
    with pytest.raises(ValueError, match="energy = 1.5"):
        complexity(3, 1.5)  # below E_inf = 1.633
    with pytest.raises(ValueError, match="energy = 1.0"):
        complexity(3, [2.0, 1.0])
    with pytest.raises(NonFiniteError, match="nan"):
        complexity(3, float("nan"))
    with pytest.raises(TypeError, match="'high'"):
        complexity(3, "high")
    # text that looks like a number, flags and None are no energies either (a review: '2'
    # was read as 2.0 and True as 1.0); a square that overflows is refused, not NaN
    for bad in ("2", True, None, ["2.0"]):
        with pytest.raises(TypeError, match="energy must be a real number or array"):
            complexity(3, bad)
    with pytest.raises(ValueError, match="its square overflows"):
        complexity(3, 1e200)
