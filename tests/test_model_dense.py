"""Packing dense tensors and unpacking them again."""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest

import orthoclimb as oc
from conftest import unit
from orthoclimb import reference
from orthoclimb.errors import ShapeError


def test_to_dense_is_symmetric_and_round_trips():
    mix = oc.Mixture({1: 0.5, 2: 1.0, 3: 0.4, 4: 0.2})
    ham = oc.Hamiltonian.sample(mix, 7, seed=2)
    tensors = reference.dense_tensors(ham)
    for p, t in tensors.items():
        for perm in itertools.permutations(range(p)):
            np.testing.assert_array_equal(t, t.transpose(perm))
    back = oc.Hamiltonian.from_dense(tensors)
    for p in mix.degrees:
        np.testing.assert_allclose(back.coefficients(p), ham.coefficients(p), rtol=1e-14)
    assert back.mixture is None and back.seed is None


def test_from_dense_matches_polynomial_of_a_random_tensor(rng):
    # H(x) = T(x, x, x) for any tensor; symmetrizing does not change the polynomial (exact)
    n = 6
    t = rng.standard_normal((n, n, n))
    with pytest.raises(ValueError, match="not symmetric"):
        oc.Hamiltonian.from_dense({3: t})
    ham = oc.Hamiltonian.from_dense({3: t}, symmetrize=True)
    x = unit(rng.standard_normal(n))
    assert abs(ham.energy(x) - np.einsum("ijk,i,j,k->", t, x, x, x)) < 1e-12


def test_from_coefficients_round_trip_and_length_check():
    n = 5
    a = np.arange(15, dtype=float)
    ham = oc.Hamiltonian.from_coefficients(n, {2: a})
    np.testing.assert_array_equal(ham.coefficients(2), a)
    with pytest.raises(ShapeError, match="expected length 15, got 14"):
        oc.Hamiltonian.from_coefficients(n, {2: a[:-1]})


def test_to_dense_refuses_above_limit(monkeypatch):
    ham = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 40, seed=0)
    with pytest.raises(ValueError, match="512000 bytes"):
        ham.to_dense(3, max_bytes=1000)
    # before copying the coefficients: at n = 1000 that copy took 1.3 GB and 2.3 s, and
    # under a tight ulimit it failed first, with no word of max_bytes (a user trial)

    def copied(*args, **kwargs):
        raise AssertionError("the coefficients were copied before the size check")

    monkeypatch.setattr(ham, "coefficients", copied)
    with pytest.raises(ValueError, match="512000 bytes"):
        ham.to_dense(3, max_bytes=1000)
    monkeypatch.undo()
    with pytest.raises(ValueError, match="no degree-2 term"):
        ham.to_dense(2, max_bytes=1000)
    # a negative limit was taken and reported as "above the limit max_bytes = -1"
    with pytest.raises(ValueError, match="max_bytes must be a number of bytes >= 0, got -1"):
        ham.to_dense(3, max_bytes=-1)


def test_to_dense_refuses_a_tensor_beyond_the_available_memory(monkeypatch):
    # a user who raised max_bytes got NumPy's MemoryError (or the OS's kill) instead of the
    # package's refusal with the bytes needed and available (a fuzzing trial)
    from orthoclimb.errors import InsufficientMemoryError
    from orthoclimb.model import memory

    ham = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 40, seed=0)
    monkeypatch.setattr(memory, "available_memory", lambda: 100_000)
    with pytest.raises(InsufficientMemoryError, match="n = 40 needs 512000 bytes.*100000 bytes"):
        ham.to_dense(3, max_bytes=2**62)
    monkeypatch.setattr(memory, "available_memory", lambda: 600_000)
    assert ham.to_dense(3).shape == (40, 40, 40)


def test_dense_shape_errors():
    with pytest.raises(ShapeError):
        oc.Hamiltonian.from_dense({3: np.zeros((3, 3))})
    with pytest.raises(ShapeError):
        oc.Hamiltonian.from_dense({2: np.zeros((3, 4))})
    with pytest.raises(ShapeError, match="share one n"):
        oc.Hamiltonian.from_dense({1: np.zeros(3), 2: np.zeros((4, 4))})


@pytest.mark.parametrize(("p", "n"), [(2, 5), (3, 4), (4, 3), (5, 3)])
def test_symmetrized_is_the_average_over_all_axis_permutations(p, n):
    # against the definition (the mean of T over all p! axis orders, itertools), which the
    # coset-by-coset average replaces; and max_asymmetry is 0 only for symmetric tensors
    from orthoclimb.model.dense import max_asymmetry, symmetrized

    t = np.random.default_rng(p).standard_normal((n,) * p)
    perms = list(itertools.permutations(range(p)))
    mean = sum(t.transpose(q) for q in perms) / len(perms)
    np.testing.assert_allclose(symmetrized(t), mean, rtol=0, atol=1e-14)
    assert max_asymmetry(mean) < 1e-14 < max_asymmetry(t)
    # a tensor symmetric under one exchange only is still caught
    half = (t + t.transpose([1, 0, *range(2, p)])) / 2
    assert max_asymmetry(half) > 0.1 if p >= 3 else max_asymmetry(half) < 1e-14


def test_the_symmetry_bound_holds_for_every_permutation():
    # any axis permutation is at most p(p-1)/2 = 3 adjacent exchanges at p = 3, so an
    # adjacent difference above 1e-10/3 of the largest entry is refused, and one below it
    # keeps every permutation's difference under 1e-10 (the documented bound)
    sym = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 4, seed=1).to_dense(3)
    scale = np.abs(sym).max()
    for delta, refused in ((5e-11, True), (1e-11, False)):
        t = sym.copy()
        t[0, 1, 2] += delta * scale
        if refused:
            with pytest.raises(ValueError, match="not symmetric"):
                oc.Hamiltonian.from_dense({3: t})
        else:
            assert oc.Hamiltonian.from_dense({3: t}).n == 4


def test_a_finite_tensor_whose_packed_coefficient_overflows_names_the_tensor():
    # a_m = c(m) T[m]: 2 * 1e308 overflows, and the error said "coefficients[2] holds a
    # non-finite value inf" with a RuntimeWarning, though the tensor given was finite (a review)
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("error")
        with pytest.raises(ValueError, match=r"degree-2 tensor's entry at \(0, 1\) times its"):
            oc.Hamiltonian.from_dense({2: np.full((4, 4), 1e308)})


def test_tensors_near_float64s_top_symmetrize_without_overflow_warnings():
    # a user trial: the symmetry check and the average overflowed in their sums and let
    # NumPy's RuntimeWarning through, though the average itself is within range
    import warnings

    from orthoclimb.model.dense import max_asymmetry, symmetrized

    t = np.array([[0.0, 1.5e308], [1e308, 0.0]])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert max_asymmetry(np.array([[0.0, 1e308], [-1e308, 0.0]])) == math.inf
        np.testing.assert_array_equal(symmetrized(t), [[0.0, 1.25e308], [1.25e308, 0.0]])
        zero = oc.Hamiltonian.from_dense(
            {2: np.array([[0.0, 1e308], [-1e308, 0.0]])}, symmetrize=True
        )
        np.testing.assert_array_equal(zero.coefficients(2), [0.0, 0.0, 0.0])
        with pytest.raises(ValueError, match="overflows float64"):  # 2 x 1.25e308 does
            oc.Hamiltonian.from_dense({2: t}, symmetrize=True)
