"""Polish, the local-maximum check, gradient ascent and Langevin annealing."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg

import orthoclimb as oc
from orthoclimb.algorithms import geometric_schedule, tangent_spectrum


def _sym_from_p2(ham):
    n = ham.n
    m = np.zeros((n, n))
    i, j = np.triu_indices(n)
    m[i, j] = ham.coefficients(2)
    return 0.5 * (m + m.T)


def test_polish_p2_and_spectrum_count():
    # exact: at the k-th eigenvector e_k of M (H = x.M x) the Riemannian Hessian has
    # eigenvalues 2 (lambda_j - lambda_k), j != k, so k - 1 of them are positive
    n = 80
    ham = oc.Hamiltonian.sample(oc.Mixture({2: 1.0}), n, seed=2)
    vals, vecs = scipy.linalg.eigh(_sym_from_p2(ham))
    res = oc.polish(ham, np.random.default_rng(0).standard_normal(n))
    assert res.energy == pytest.approx(vals[-1] / n, rel=1e-10)
    assert res.info["grad_norm"] <= 1e-7 and res.info["local_max"]
    for k in (1, 2, 5):
        spec = tangent_spectrum(ham, vecs[:, -k])
        assert spec["n_positive"] == k - 1
        expected = 2.0 * (vals[-1] - vals[-k]) / n if k > 1 else 2.0 * (vals[-2] - vals[-1]) / n
        assert spec["top_eigenvalue"] == pytest.approx(expected, rel=1e-8, abs=1e-10)


def test_polish_validation():
    ham = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 10, seed=1)
    with pytest.raises(ValueError, match="shape"):
        oc.polish(ham, np.ones(9))
    with pytest.raises(ValueError, match="NaN"):
        oc.polish(ham, np.full(10, np.nan))
    with pytest.raises(ValueError, match="zero vector"):
        oc.polish(ham, np.zeros(10))
    with pytest.raises(ValueError, match="gtol"):
        oc.polish(ham, np.ones(10), gtol=-1.0)


def test_gradient_ascent_below_hessian_ascent():
    # common practice (no source): from random starts, gradient ascent ends below Hessian ascent
    # on average for the pure 3-spin model
    mix = oc.Mixture({3: 1.0})
    ga, ha = [], []
    for seed in range(3):
        ham = oc.Hamiltonian.sample(mix, 300, seed=10 + seed)
        ha.append(oc.hessian_ascent(ham, steps=200, seed=0).energy)
        ga.extend(oc.gradient_ascent(ham, seed=s).energy for s in range(3))
    assert np.mean(ga) < np.mean(ha)


def test_gradient_ascent_reaches_critical_point():
    ham = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 100, seed=3)
    res = oc.gradient_ascent(ham, seed=1)
    assert res.info["status"] in ("converged", "stalled")
    assert res.info["grad_norm"] < 1e-6
    assert res.info["local_max"]
    assert np.all(np.diff(res.path["energy"]) > -0.05)  # nonmonotone, but never falls far
    assert res.config["method"] == "gradient"


def test_langevin_anneal():
    # the polished end is a local maximum and is at least as high as the annealed point
    ham = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 100, seed=4)
    res = oc.langevin_anneal(ham, seed=2, schedule=geometric_schedule(1.0, 0.01, 200))
    assert res.path["temperature"][0] == pytest.approx(1.0)
    assert res.path["temperature"][-1] == pytest.approx(0.01)
    assert res.energy >= res.info["energy_anneal"] - 1e-12
    assert res.info["local_max"]
    a = oc.langevin_anneal(ham, seed=2, schedule=[0.5] * 10, polish=False)
    b = oc.langevin_anneal(ham, seed=2, schedule=[0.5] * 10, polish=False)
    np.testing.assert_array_equal(a.x, b.x)


@pytest.mark.parametrize(
    ("schedule", "exc"),
    [([], ValueError), ([1.0, -0.1], ValueError), ([1.0, np.inf], ValueError), ("hot", TypeError)],
)
def test_langevin_schedule_validation(schedule, exc):
    ham = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 10, seed=1)
    with pytest.raises(exc, match="schedule"):
        oc.langevin_anneal(ham, schedule=schedule)
