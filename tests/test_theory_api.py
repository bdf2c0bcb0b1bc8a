"""The theory is reachable from the package top level and from Mixture methods."""

from __future__ import annotations

import numpy as np
import pytest

import orthoclimb
from orthoclimb import Mixture, theory


def test_top_level_exports():
    for name in ("theory", "full_rsb", "algorithmic_energy", "ground_state", "path_energy"):
        assert name in orthoclimb.__all__
    assert orthoclimb.full_rsb is theory.full_rsb
    assert orthoclimb.ground_state is theory.ground_state


def test_mixture_methods_delegate():
    m = Mixture({1: 0.2, 2: 1.0, 4: 0.25})
    assert m.full_rsb() == theory.full_rsb(m)
    assert m.algorithmic_energy() == theory.algorithmic_energy(m)
    assert m.algorithmic_threshold() == theory.algorithmic_threshold(m)
    q = np.linspace(0, 1, 5)
    np.testing.assert_array_equal(m.path_energy(q), theory.path_energy(m, q))
    np.testing.assert_array_equal(m.hessian_edge(q), theory.hessian_edge(m, q))
    assert m.ground_state(tol=1e-7).value == theory.ground_state(m, tol=1e-7).value
    with pytest.raises(ValueError, match="tol"):
        m.ground_state(tol=-1)
    with pytest.raises(ValueError, match="1.5"):
        m.path_energy(1.5)


def test_a_text_tolerance_is_refused_like_a_text_gamma():
    # float("1e-3") would work, but a text gamma is refused, so a text tolerance is too
    with pytest.raises(TypeError, match=r"ground_state\(\): tol must be a positive number"):
        Mixture({3: 1.0}).ground_state(tol="1e-3")


@pytest.mark.parametrize("q", [None, True, "0.5", 1 + 0j])
def test_an_overlap_that_is_no_real_number_is_refused_by_name(q):
    # NumPy reads True as 1.0 and '0.5' as 0.5; the theory functions refuse both, as the
    # README promises for booleans and text (before: accepted silently; None gave "nan")
    from orthoclimb.theory import path_energy

    with pytest.raises(TypeError, match=r"path_energy\(\): q must be a real number"):
        path_energy(Mixture({3: 1.0}), q)


def test_bad_step_functions_and_derivatives_name_the_value():
    # the Parisi functional names the entry that is not finite; a derivative order given as
    # text is a TypeError (it was a ValueError)
    from orthoclimb.theory import parisi_functional

    with pytest.raises(ValueError, match=r"alpha holds a non-finite value nan at index \(1,\)"):
        parisi_functional(Mixture({3: 1.0}), 1.0, [0.0, 0.5, 1.0], [0.0, np.nan])
    # text and flags are no alpha (text raised NumPy's own words, flags were read as 0 and 1)
    for alpha, words in ((["a"], "alpha must be a real numeric array"), ([True], "boolean")):
        with pytest.raises(TypeError, match=words):
            parisi_functional(Mixture({3: 1.0}), 1.0, [0.0, 1.0], alpha)
    value = parisi_functional(Mixture({3: 1.0}), 1.0, [0.0, 1.0], [0.5])
    assert type(value) is float
    with pytest.raises(TypeError, match="derivative must be a nonnegative integer, got '2'"):
        Mixture({3: 1.0}).xi(0.5, "2")
