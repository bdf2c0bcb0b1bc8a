"""The law of the sampled coefficients (README, Conventions) and the covariance of H.

Statistical checks use fixed seeds and tolerances of several standard errors, so they are
deterministic and would catch a wrong normalization (a factor sqrt(2) or c(m) misplaced).
"""

from __future__ import annotations

import hashlib
import math

import numpy as np
import pytest

import orthoclimb as oc
from conftest import unit
from orthoclimb.model.dense import multisets, orderings


def test_standardized_coefficients_are_standard_gaussians():
    # a_m / sqrt(n gamma^2 c(m)) must be i.i.d. N(0, 1) (README, Conventions)
    n, gamma = 120, 0.7
    ham = oc.Hamiltonian.sample(oc.Mixture({3: gamma}), n, seed=5)
    a = ham.coefficients(3)
    c = orderings(multisets(n, 3))
    g = a / np.sqrt(n * gamma**2 * c)
    m = g.size  # 295,240 draws
    se_mean, se_var = 1 / math.sqrt(m), math.sqrt(2 / m)
    assert abs(g.mean()) < 5 * se_mean
    assert abs(g.var() - 1) < 5 * se_var
    # the repeated-index coefficients (c(m) < 6) follow the same law
    rep = g[c < 6]
    assert abs(rep.var() - 1) < 5 * math.sqrt(2 / rep.size)
    # fourth moment of a Gaussian is 3
    assert abs(np.mean(g**4) - 3) < 5 * math.sqrt(96 / m)


def test_covariance_is_n_xi_of_overlap():
    # E[H(x) H(y)] = n xi(<x, y>) (the normalization of the README); estimated over independent
    # seeds
    n, seeds = 12, 3000
    mix = oc.Mixture({1: 0.5, 2: 1.0, 3: 0.6})
    rng = np.random.default_rng(3)
    x = unit(rng.standard_normal(n))
    y = unit(x + 0.9 * unit(rng.standard_normal(n)))
    r = float(x @ y)
    prods, sq = [], []
    for s in range(seeds):
        ham = oc.Hamiltonian.sample(mix, n, seed=s)
        hx, hy = ham.energy(np.stack([x, y]))
        prods.append(hx * hy)
        sq.append(hx * hx)
    prods, sq = np.array(prods), np.array(sq)
    for est, q in ((prods, r), (sq, 1.0)):
        want = n * mix.xi(q)
        se = est.std(ddof=1) / math.sqrt(seeds)
        assert abs(est.mean() - want) < 4 * se, (est.mean(), want, se)


def test_same_seed_same_instance_and_seeds_differ():
    mix = oc.Mixture({2: 1.0, 4: 0.2})
    a = oc.Hamiltonian.sample(mix, 15, seed=1)
    b = oc.Hamiltonian.sample(mix, 15, seed=1)
    c = oc.Hamiltonian.sample(mix, 15, seed=2)
    np.testing.assert_array_equal(a.coefficients(4), b.coefficients(4))
    assert not np.array_equal(a.coefficients(4), c.coefficients(4))


# (mixture, n, seed, dtype, correlated_with) -> SHA-256 of the coefficients (float64, SPEC
# order, degree by degree), recorded with version 0.2.0. The Gaussians come from the `libm`
# crate compiled into the library, not from the platform's math library, so these hold on
# every machine; a change to the generator, the Box-Muller transform, the scale sqrt(n c(m))
# gamma_p or the packed order changes them, and every saved seed would then name another
# instance.
_RECORDED_DIGESTS = [
    (
        ({1: 0.5, 2: 1.0, 3: 1.0, 5: 0.3}, 40, 11, "float64", None),
        "7584265510a641e77db03922c17deb47243ca98d3f34b3cd8616d0377d064ee1",
    ),
    (
        ({3: 1.0, 4: 0.25}, 70, 2**63 + 5, "float32", None),
        "eb4406bd2c70c7cc50fafeee92ffcb7ba0afb9c02e63298f78b59c3684f44b87",
    ),
    (
        ({2: 1.0, 8: 0.1}, 9, 0, "float64", (5, -0.6)),
        "c5a5f08e10aeeaa759d8bd71f660e3121da90bbc4284cc33c46eef82ae2bbb0f",
    ),
    (
        ({3: 1.0}, 300, 123456789, "float64", None),
        "8593bbc3616deef68838832248adaeeb5963da61ebd75b2bb7a6a62ee0ea86fd",
    ),
]


@pytest.mark.parametrize(("case", "digest"), _RECORDED_DIGESTS)
def test_instances_keep_the_bits_recorded_with_0_2_0(case, digest):
    mix, n, seed, dtype, corr = case
    ham = oc.Hamiltonian.sample(oc.Mixture(mix), n, seed, dtype=dtype, correlated_with=corr)
    h = hashlib.sha256()
    for p in ham.mixture.degrees:
        h.update(ham.coefficients(p).tobytes())
    assert h.hexdigest() == digest


def test_correlated_instances():
    mix = oc.Mixture({3: 1.0})
    n = 60
    base = oc.Hamiltonian.sample(mix, n, seed=10)
    same = oc.Hamiltonian.sample(mix, n, seed=99, correlated_with=(10, 1.0))
    np.testing.assert_array_equal(same.coefficients(3), base.coefficients(3))
    other = oc.Hamiltonian.sample(mix, n, seed=99)
    half = oc.Hamiltonian.sample(mix, n, seed=99, correlated_with=(10, 0.5))
    # exact construction: rho g0 + sqrt(1 - rho^2) g
    want = 0.5 * base.coefficients(3) + math.sqrt(0.75) * other.coefficients(3)
    np.testing.assert_allclose(half.coefficients(3), want, rtol=1e-12, atol=1e-12)
    assert half.correlated_with == (10, 0.5)


def test_nbytes_and_estimate_memory():
    mix = oc.Mixture({1: 1.0, 3: 1.0})
    n = 50
    count = n + math.comb(n + 2, 3)
    for dtype, size in (("float64", 8), ("float32", 4)):
        ham = oc.Hamiltonian.sample(mix, n, seed=0, dtype=dtype)
        assert ham.num_coefficients == count
        assert ham.nbytes == size * count == oc.estimate_memory(mix, n, dtype)
        assert ham.dtype == dtype
        # with the Hessian: plus one hessian() call's workspace, at least its accumulator and
        # its result (n x n numbers each), as the instance itself counts it
        extra = oc.estimate_memory(mix, n, dtype, hessian=True) - ham.nbytes
        assert extra == ham.hessian_workspace_nbytes >= 2 * n * n * 8
    with pytest.raises(TypeError, match="hessian must be True or False, got 'yes'"):
        oc.estimate_memory(mix, n, hessian="yes")


def test_coefficient_ranges_are_slices_of_the_block():
    ham = oc.Hamiltonian.sample(oc.Mixture({1: 0.5, 3: 1.0}), 9, seed=4, dtype="float32")
    full = ham.coefficients(3)
    for start, stop in [(0, 5), (7, 7), (100, len(full)), (0, None), (len(full), None)]:
        np.testing.assert_array_equal(ham.coefficients(3, start, stop), full[start:stop])
    with pytest.raises(ValueError, match=r"165\.\.166 is outside 0\.\.165"):
        ham.coefficients(3, 165, 166)
    with pytest.raises(ValueError, match=r"5\.\.2"):
        ham.coefficients(3, 5, 2)
    with pytest.raises(ValueError, match="start must be >= 0, got -1"):
        ham.coefficients(3, -1)
    with pytest.raises(TypeError, match="stop must be an integer, got 2.5"):
        ham.coefficients(3, 0, 2.5)
