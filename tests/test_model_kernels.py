"""Rust kernels against the pure-NumPy dense reference and against exact identities.

The reference (orthoclimb.reference) contracts dense symmetric tensors with matrix products;
the dense tensors are built by an independent NumPy path from the packed coefficients.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.sparse.linalg import eigsh

import orthoclimb as oc
from conftest import every_call_on_the_pool, unit
from orthoclimb import reference
from orthoclimb.errors import InsufficientMemoryError

CASES = [
    ({1: 0.7}, 1),
    ({2: 1.0}, 1),
    ({1: 0.3, 2: 1.0, 3: 0.5}, 2),
    ({3: 1.0}, 5),
    ({1: 0.2, 2: 0.8, 3: 0.6, 4: 0.4, 5: 0.3}, 7),
    ({2: 1.0, 4: 0.5}, 13),
    ({3: 1.0, 5: 0.2}, 17),
    ({1: 1.0, 2: 0.5}, 30),
    ({4: 1.0}, 22),
]


def _close(a, b, scale):
    np.testing.assert_allclose(a, b, rtol=0, atol=1e-10 * scale)


@pytest.mark.parametrize("dtype", ["float64", "float32"])
@pytest.mark.parametrize("gammas, n", CASES)
def test_kernels_match_dense_reference(gammas, n, dtype, rng):
    ham = oc.Hamiltonian.sample(oc.Mixture(gammas), n, seed=n, dtype=dtype)
    tensors = reference.dense_tensors(ham)  # built from the (rounded) stored coefficients
    x = unit(rng.standard_normal(n))
    v = rng.standard_normal(n)
    vs = rng.standard_normal((n, 3))
    e_ref = reference.energy(tensors, x)
    g_ref = reference.gradient(tensors, x)
    h_ref = reference.hessian(tensors, x)
    scale = 1.0 + abs(e_ref) + np.abs(h_ref).max()
    _close(ham.energy(x), e_ref, scale)
    e, g = ham.energy_and_gradient(x)
    _close(e, e_ref, scale)
    _close(g, g_ref, scale)
    _close(ham.gradient(x), g_ref, scale)
    _close(ham.hessian(x), h_ref, scale)
    _close(ham.hvp(x, v), h_ref @ v, scale)
    _close(ham.hvp(x, vs), h_ref @ vs, scale)
    _close(ham._core.hvp_many(x, vs), h_ref @ vs, scale)  # the pass hvp takes at large n
    xs = unit(rng.standard_normal((4, n)))
    _close(ham.energy(xs), [reference.energy(tensors, p) for p in xs], scale)
    eb, gb = ham.energy_and_gradient(xs)
    _close(eb, [reference.energy(tensors, p) for p in xs], scale)
    _close(gb, np.stack([reference.gradient(tensors, p) for p in xs]), scale)


@pytest.mark.parametrize("dtype", ["float64", "float32"])
@pytest.mark.parametrize("b", [16, 37, 70, 600])
def test_wide_batches_match_dense_reference(b, dtype, rng):
    # 16, 32 + 4 (+ padding) and 2 x 32 + 8 lanes: the AVX-512 tile where the processor has
    # it, the AVX2 tile elsewhere; 600 points run as three chunks of 200 at n = 21;
    # either way each point against the dense reference
    ham = oc.Hamiltonian.sample(oc.Mixture({1: 0.3, 2: 1.0, 3: 0.6, 4: 0.4}), 21, 3, dtype)
    tensors = reference.dense_tensors(ham)
    xs = unit(rng.standard_normal((b, 21)))
    want = [reference.energy(tensors, p) for p in xs]
    scale = 1.0 + np.abs(want).max()
    _close(ham.energy(xs), want, scale)
    e, g = ham.energy_and_gradient(xs)
    _close(e, want, scale)
    _close(g, np.stack([reference.gradient(tensors, p) for p in xs]), scale)


def test_a_batch_wider_than_a_chunk_is_its_chunks_bit_for_bit(rng):
    # at n = 21 a chunk holds at most 256 points (n x 256 numbers fit 512 KiB), so 600 points
    # go as three chunks of 200: the middle one gives the bits it gives as a batch of its own
    ham = oc.Hamiltonian.sample(oc.Mixture({2: 1.0, 3: 0.6}), 21, 8)
    xs = unit(rng.standard_normal((600, 21)))
    e, g = ham.energy_and_gradient(xs)
    e_mid, g_mid = ham.energy_and_gradient(xs[200:400])
    assert np.array_equal(e[200:400], e_mid) and np.array_equal(g[200:400], g_mid)
    assert np.array_equal(ham.energy(xs)[400:], ham.energy(xs[400:]))
    # the multi-direction HVP pass (which hvp takes for large Hessians) chunks directions
    # the same way; against the Hessian times the directions (exact algebra)
    vs = rng.standard_normal((21, 600))
    w = ham._core.hvp_many(xs[0], vs)
    assert np.array_equal(w[:, 200:400], ham._core.hvp_many(xs[0], vs[:, 200:400].copy()))
    want = ham.hessian(xs[0]) @ vs
    _close(w, want, 1.0 + np.abs(want).max())


def test_energy_gradient_agree_with_central_differences(rng):
    # exact calculus: (H(x + h v) - H(x - h v)) / 2h = <grad H, v> + O(h^2)
    n = 25
    ham = oc.Hamiltonian.sample(oc.Mixture({1: 0.5, 2: 1.0, 3: 0.7, 4: 0.3}), n, seed=4)
    x = unit(rng.standard_normal(n))
    v = unit(rng.standard_normal(n))
    h = 1e-5
    fd = (ham.energy(x + h * v) - ham.energy(x - h * v)) / (2 * h)
    assert abs(fd - ham.gradient(x) @ v) < 1e-6 * (1 + abs(fd))
    fd2 = (ham.gradient(x + h * v) - ham.gradient(x - h * v)) / (2 * h)
    np.testing.assert_allclose(fd2, ham.hvp(x, v), atol=1e-6 * (1 + np.abs(fd2).max()))


@pytest.mark.parametrize("p", range(1, 9))
def test_euler_identities(p, rng):
    # Euler's theorem on homogeneous functions: x.grad H_p = p H_p and Hess H_p x = (p-1) grad H_p
    n = 11 if p >= 7 else 19
    ham = oc.Hamiltonian.sample(oc.Mixture({p: 1.0}), n, seed=p)
    x = rng.standard_normal(n)
    e, g = ham.energy_and_gradient(x)
    assert abs(x @ g - p * e) <= 1e-9 * (1 + abs(p * e))
    np.testing.assert_allclose(ham.hessian(x) @ x, (p - 1) * g, atol=1e-9 * (1 + np.abs(g).max()))
    np.testing.assert_allclose(ham.hvp(x, x), (p - 1) * g, atol=1e-9 * (1 + np.abs(g).max()))


def test_hessian_is_symmetric_and_operator_matches(rng):
    n = 40
    ham = oc.Hamiltonian.sample(oc.Mixture({2: 1.0, 3: 0.6, 4: 0.3}), n, seed=11)
    x = unit(rng.standard_normal(n))
    hess = ham.hessian(x)
    np.testing.assert_array_equal(hess, hess.T)
    op = ham.hessian_operator(x)
    v = rng.standard_normal((n, 2))
    np.testing.assert_allclose(op @ v, hess @ v, atol=1e-10 * np.abs(hess).max())
    top = eigsh(op, k=1, which="LA", tol=1e-10)[0][0]
    assert abs(top - np.linalg.eigvalsh(hess)[-1]) < 1e-8 * abs(top)


@pytest.mark.parametrize("dtype", ["float64", "float32"])
def test_a_hessian_cut_in_row_slabs_matches_single_products(dtype, rng):
    # At n = 600 the degree-3 Hessian's shared rows (4 (n - lo)^2 bytes at lo = 0) exceed half
    # of an L2 of up to 2.7 MiB, so the pass walks them in row slabs (rust/kernels/hessian.rs
    # `row_slabs`). Its rows are checked against the single-direction HVP pass, which forms no
    # Hessian, and its bits across thread counts.
    n = 600
    ham = oc.Hamiltonian.sample(oc.Mixture({2: 0.5, 3: 1.0}), n, seed=5, dtype=dtype)
    x = unit(rng.standard_normal(n))
    with every_call_on_the_pool():
        oc.set_num_threads(1)
        one = ham.hessian(x)
        oc.set_num_threads(2)
        two = ham.hessian(x)
    np.testing.assert_array_equal(one, two)
    np.testing.assert_array_equal(two, two.T)
    scale = np.abs(two).max()
    for i in (0, 1, 5, 57, 301, n - 1):
        e = np.zeros(n)
        e[i] = 1.0
        _close(two[i], ham.hvp(x, e), scale)


def test_float32_storage_is_the_rounded_float64_instance(rng):
    n = 30
    mix = oc.Mixture({2: 1.0, 3: 0.5})
    h64 = oc.Hamiltonian.sample(mix, n, seed=3)
    h32 = oc.Hamiltonian.sample(mix, n, seed=3, dtype="float32")
    for p in mix.degrees:
        np.testing.assert_array_equal(
            h32.coefficients(p), h64.coefficients(p).astype(np.float32).astype(np.float64)
        )
    x = unit(rng.standard_normal(n))
    # float32 rounding of coefficients perturbs the value by ~1e-7 relative, no more
    assert abs(h32.energy(x) - h64.energy(x)) < 1e-6 * np.abs(h64.gradient(x)).sum()


def test_kernels_are_bitwise_identical_across_thread_counts(rng):
    n = 90
    mix = oc.Mixture({1: 0.4, 2: 1.0, 3: 0.7})
    x = unit(rng.standard_normal(n))
    v = rng.standard_normal((n, 2))
    xs = unit(rng.standard_normal((3, n)))
    results = []
    with every_call_on_the_pool() as inline_again:
        for k in (1, 2, 4, None):  # then (None) the default: small calls inline
            if k is None:
                inline_again()
            else:
                oc.set_num_threads(k)
            ham = oc.Hamiltonian.sample(mix, n, seed=77, dtype="float32")
            results.append(
                [
                    np.concatenate([ham.coefficients(p) for p in mix.degrees]),
                    np.array([ham.energy(x)]),
                    ham.gradient(x),
                    ham.hessian(x),
                    ham.hvp(x, v[:, 0]),
                    ham.hvp(x, v),
                    ham._core.hvp_many(x, v),
                    ham.energy(xs),
                    ham.gradient(xs),
                ]
            )
    for other in results[1:]:
        for a, b in zip(results[0], other, strict=True):
            np.testing.assert_array_equal(a, b)


def test_hessian_workspace_is_reported():
    # rust/kernels.rs `pieces`: one accumulator per 32 n^2 coefficients, as a power of two
    small = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 50, seed=0)  # 22,100 coefficients
    assert small.hessian_workspace_nbytes == (1 + 1) * 50 * 50 * 8
    big = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 400, seed=0)  # 10.7 M coefficients
    assert big.hessian_workspace_nbytes == (2 + 1) * 400 * 400 * 8
    # and two where each half still has 16 n^2: n = 300 (4.5 M coefficients)
    mid = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 300, seed=0)
    assert mid.hessian_workspace_nbytes == (2 + 1) * 300 * 300 * 8
    # each degree is cut on its own: a field adds an accumulator (a review); and an estimate
    # for a size far past any machine is a number, not an OverflowError
    field = oc.Hamiltonian.sample(oc.Mixture({1: 0.3, 2: 1.0}), 2100, seed=0)
    assert field.hessian_workspace_nbytes == (2 + 1) * 2100 * 2100 * 8
    from orthoclimb.model.memory import hessian_workspace_estimate

    assert hessian_workspace_estimate(oc.Mixture({1: 1.0}), 5 * 10**9) > 10**20


def test_energy_per_spin_is_the_energy_over_n(rng):
    # exact identity (its docstring): energy_per_spin(x) = H(x)/n, for one point and a batch
    n = 9
    ham = oc.Hamiltonian.sample(oc.Mixture({1: 0.3, 3: 1.0}), n, seed=2)
    x = unit(rng.standard_normal(n))
    xs = unit(rng.standard_normal((4, n)))
    assert isinstance(ham.energy_per_spin(x), float)
    assert ham.energy_per_spin(x) == ham.energy(x) / n
    batch = ham.energy_per_spin(xs)
    assert batch.shape == (4,)
    np.testing.assert_array_equal(batch, ham.energy(xs) / n)
    assert ham.energy_per_spin(x) != ham.energy(x)  # n != 1: the division is not a no-op


def test_hvp_with_several_directions_takes_the_faster_route(monkeypatch, rng):
    # degree >= 3 and a small Hessian workspace: k >= 2 directions are one Hessian pass and a
    # matrix product (4-5x faster than the multi-direction pass at p = 4); one direction in a
    # 2-D array is the 1-D kernel, bit for bit; degrees <= 2 keep the multi-direction pass
    # (4x faster than forming the Hessian at p = 2, n = 1800)
    import orthoclimb.model.hamiltonian as hamiltonian_module
    from orthoclimb.model import memory

    n = 40
    ham = oc.Hamiltonian.sample(oc.Mixture({2: 0.5, 4: 1.0}), n, seed=3)
    x = unit(rng.standard_normal(n))
    vs = rng.standard_normal((n, 5))
    np.testing.assert_array_equal(ham.hvp(x, vs), ham.hessian(x) @ vs)
    np.testing.assert_array_equal(ham.hvp(x, vs[:, :1]), ham.hvp(x, vs[:, 0])[:, None])
    quadratic = oc.Hamiltonian.sample(oc.Mixture({1: 0.3, 2: 1.0}), n, seed=3)
    np.testing.assert_array_equal(quadratic.hvp(x, vs), quadratic._core.hvp_many(x, vs))
    many = rng.standard_normal((n, 32))  # from 32 directions the Hessian pays at degree 2
    np.testing.assert_array_equal(quadratic.hvp(x, many), quadratic.hessian(x) @ many)
    # past 64 MiB the Hessian still serves while it is at most an eighth of the coefficients
    # (51.2 kB against 993.8 kB here), whatever the memory; if the Hessian cannot be
    # allocated, the call falls back to the multi-direction pass instead of failing (the
    # Hessian's 51.2 kB do not fit in 20 kB, the pass's 11.2 kB do); when neither fits, it
    # is refused
    monkeypatch.setattr(hamiltonian_module, "_CHECKED_WORKSPACE", 0)
    np.testing.assert_array_equal(ham.hvp(x, vs), ham.hessian(x) @ vs)
    monkeypatch.setattr(memory, "available_memory", lambda: 20_000)
    np.testing.assert_array_equal(ham.hvp(x, vs), ham._core.hvp_many(x, vs))
    scale = 1.0 + np.abs(ham.hessian(x, check_memory=False)).max()
    _close(ham.hvp(x, vs), ham.hessian(x, check_memory=False) @ vs, scale)
    monkeypatch.setattr(memory, "available_memory", lambda: 10_000)
    with pytest.raises(InsufficientMemoryError, match="5 directions at n = 40 needs 11200 bytes"):
        ham.hvp(x, vs)


def test_hvp_by_the_hessian_route_refuses_an_overflow():
    # |x| = 1e150 keeps the Hessian finite (p = 3: linear in x), but times directions of
    # 1e200 it overflows; the route must raise as the kernels do, not return infinities
    n = 12
    ham = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), n, seed=0)
    x = np.full(n, 1e150)
    assert np.isfinite(ham.hessian(x)).all()
    with pytest.raises(oc.errors.NonFiniteError, match="overflowed float64"):
        ham.hvp(x, np.full((n, 2), 1e200))


def test_the_core_refuses_fortran_ordered_batches_instead_of_misreading_them(rng):
    # rust-numpy's as_slice takes a Fortran-ordered array too, whose buffer lists the points
    # column by column; the binding read it as rows and gave other points' energies (a
    # review: max difference 24 at n = 5). The Hamiltonian converts to C order; the core
    # itself refuses, naming the array.
    ham = oc.Hamiltonian.sample(oc.Mixture({2: 1.0, 3: 1.0}), 5, seed=1)
    xs = unit(rng.standard_normal((3, 5)))
    x, vs = xs[0], rng.standard_normal((5, 2))
    for call in (
        lambda a: ham._core.energy_batch(a),
        lambda a: ham._core.energy_gradient_batch(a),
    ):
        call(xs)  # C order is taken
        with pytest.raises(ValueError, match="C-contiguous"):
            call(np.asfortranarray(xs))
    with pytest.raises(ValueError, match="C-contiguous"):
        ham._core.hvp_many(x, np.asfortranarray(vs))
    np.testing.assert_array_equal(ham.energy(np.asfortranarray(xs)), ham.energy(xs))
    np.testing.assert_array_equal(ham.hvp(x, np.asfortranarray(vs)), ham.hvp(x, vs))
