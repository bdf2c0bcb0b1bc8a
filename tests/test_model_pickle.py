"""Pickling and copying a Hamiltonian: a sampled instance travels as its recipe and comes back
bit for bit; given coefficients travel as arrays. Checked against the instance itself and
across a process boundary (the multiprocessing use it exists for)."""

from __future__ import annotations

import copy
import multiprocessing
import pickle
from concurrent.futures import ProcessPoolExecutor

import numpy as np
import pytest

import orthoclimb as oc
from orthoclimb.errors import InsufficientMemoryError


def _same_instance(a: oc.Hamiltonian, b: oc.Hamiltonian) -> None:
    assert (a.n, a.dtype, a.degrees, a.seed, a.correlated_with) == (
        b.n,
        b.dtype,
        b.degrees,
        b.seed,
        b.correlated_with,
    )
    assert a.mixture == b.mixture  # None for given coefficients
    for p in a.degrees:
        np.testing.assert_array_equal(a.coefficients(p), b.coefficients(p))


@pytest.mark.parametrize(
    "kwargs",
    [
        {},
        {"dtype": "float32"},
        {"correlated_with": (11, 0.6)},
    ],
)
def test_a_sampled_instance_pickles_as_its_recipe(kwargs):
    ham = oc.Hamiltonian.sample(oc.Mixture({1: 0.3, 3: 1.0}), 120, seed=5, **kwargs)
    data = pickle.dumps(ham)
    assert len(data) < 1000 < ham.nbytes  # the recipe, not the 2.4 MB of coefficients
    _same_instance(ham, pickle.loads(data))


@pytest.mark.parametrize("dtype", ["float64", "float32"])
def test_given_coefficients_pickle_as_arrays(dtype):
    rng = np.random.default_rng(2)
    given = {2: rng.standard_normal(21), 4: rng.standard_normal(126)}  # n = 6
    ham = oc.Hamiltonian.from_coefficients(6, given, dtype=dtype)
    back = pickle.loads(pickle.dumps(ham))
    _same_instance(ham, back)
    x = rng.standard_normal(6)
    assert back.energy(x) == ham.energy(x)


def test_unpickling_checks_memory_like_sample(monkeypatch):
    import orthoclimb.model.memory as memory

    data = pickle.dumps(oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 60, seed=1))
    monkeypatch.setattr(memory, "available_memory", lambda: 1000)
    with pytest.raises(InsufficientMemoryError, match="only 1000 bytes"):
        pickle.loads(data)


def test_copies_are_the_same_immutable_instance():
    ham = oc.Hamiltonian.sample(oc.Mixture({2: 1.0}), 10, seed=3)
    assert copy.copy(ham) is ham and copy.deepcopy(ham) is ham
    assert copy.deepcopy({"h": ham})["h"] is ham


def _energy_in_worker(ham: oc.Hamiltonian, x: np.ndarray) -> float:
    return ham.energy(x)


def test_a_worker_process_sees_the_same_instance():
    ham = oc.Hamiltonian.sample(oc.Mixture({2: 1.0, 3: 0.5}), 80, seed=9)
    x = np.random.default_rng(0).standard_normal(80)
    context = multiprocessing.get_context("spawn")  # a fresh interpreter, nothing inherited
    with ProcessPoolExecutor(max_workers=1, mp_context=context) as pool:
        there = pool.submit(_energy_in_worker, ham, x).result(timeout=120)
    assert there == ham.energy(x)  # bitwise: same coefficients, same kernel
