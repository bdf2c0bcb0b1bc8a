"""Stability of the algorithms to a change of the disorder (correlated instances)."""

from __future__ import annotations

import numpy as np
import pytest

import orthoclimb as oc


def test_hessian_ascent_stability():
    # exact: at rho = 1 the instances coincide and a deterministic algorithm gives overlap 1;
    # the overlap decreases as rho decreases (eigenvector steps are stable when the change,
    # about sqrt(1 - rho^2) relative, is small against the edge gaps, about n^(-2/3))
    rhos = [1.0, 1 - 1e-8, 1 - 1e-4, 0.9, 0.0]
    st = oc.stability("hessian", oc.Mixture({3: 1.0}), 80, seed=3, rhos=rhos, steps=30)
    assert st.overlaps[0] == pytest.approx(1.0, abs=1e-12)
    assert st.overlaps[1] > 0.999
    assert st.overlaps[1] >= st.overlaps[2] > st.overlaps[3]
    assert abs(st.overlaps[4]) < 0.5
    assert st.to_dict()["config"]["other_seed"] == 3 ^ 0x9E3779B97F4A7C15


def test_stability_validation():
    mix = oc.Mixture({3: 1.0})
    with pytest.raises(ValueError, match="rho"):
        oc.stability("gradient", mix, 10, seed=1, rhos=[1.5])
    with pytest.raises(ValueError, match="rho"):
        oc.stability("gradient", mix, 10, seed=1, rhos=[float("nan")])
    with pytest.raises(ValueError, match="other_seed"):
        oc.stability("gradient", mix, 10, seed=1, rhos=[0.5], other_seed=1)
    with pytest.raises(ValueError, match="algorithm"):
        oc.stability("simplex", mix, 10, seed=1, rhos=[0.5])
    with pytest.raises(TypeError, match="mixture"):
        oc.stability("gradient", {3: 1.0}, 10, seed=1, rhos=[0.5])
    with pytest.raises(TypeError, match="keep_results must be True or False, got 'no'"):
        oc.stability("gradient", mix, 10, seed=1, rhos=[0.5], keep_results="no")  # was true


def test_stability_with_callable():
    calls = []

    def algo(ham):
        calls.append(ham.correlated_with)
        return oc.gradient_ascent(ham, seed=0)

    st = oc.stability(algo, oc.Mixture({2: 1.0}), 30, seed=5, rhos=[1.0, 0.5])
    assert calls == [None, (5, 1.0), (5, 0.5)]
    assert st.overlaps[0] == pytest.approx(1.0, abs=1e-12)
    assert np.all(np.abs(st.overlaps) <= 1.0 + 1e-12)


def test_overlaps_keep_their_sign():
    # exact: for a pure field H(x) = h.x the maximum on the sphere is h/|h|, and the
    # correlated field is rho h + sqrt(1 - rho^2) h', so the overlap of the two outputs is
    # the cosine of h and h_rho: exactly -1 at rho = -1, and negative for rho < 0 here. Each
    # output is within the angle asin(n |P grad H|/n / |h|) of its maximum (|P grad H| =
    # |h| sin angle), which bounds the error of the overlap.
    mix = oc.Mixture({1: 1.0})
    n, seed, rhos = 30, 5, [-1.0, -0.5, 0.5]
    st = oc.stability("gradient", mix, n, seed=seed, rhos=rhos, keep_results=True)
    h0 = oc.Hamiltonian.sample(mix, n, seed).coefficients(1)
    base, *runs = st.results

    def angle(res, h):
        return float(np.arcsin(min(1.0, n * res.info["grad_norm"] / np.linalg.norm(h))))

    for rho, overlap, res in zip(rhos, st.overlaps, runs, strict=True):
        other = st.config["other_seed"]
        h = oc.Hamiltonian.sample(mix, n, other, correlated_with=(seed, rho)).coefficients(1)
        cosine = float(h0 @ h) / float(np.linalg.norm(h0) * np.linalg.norm(h))
        tol = angle(base, h0) + angle(res, h) + 1e-12
        assert overlap == pytest.approx(cosine, abs=tol), rho
    assert st.overlaps[0] == pytest.approx(-1.0, abs=1e-9)
    assert st.overlaps[1] < 0.0


def test_the_start_seed_reaches_a_named_method_and_the_largest_seed_works():
    # seed is the disorder; start_seed goes to the method's own seed (its random start), the
    # same for every instance. At rho = 1 the correlated instance is the base one, so the same
    # start gives the same point (overlap 1 exactly); another start_seed gives another start
    mix = oc.Mixture({3: 1.0})
    st = oc.stability("gradient", mix, 30, seed=2, rhos=[1.0], start_seed=7)
    assert st.config["base_config"]["seed"] == 7
    assert st.overlaps[0] == pytest.approx(1.0, abs=1e-12)
    other = oc.stability("gradient", mix, 30, seed=2, rhos=[1.0], start_seed=8)
    assert other.config["base_config"]["seed"] == 8
    # the default other_seed stays a valid seed at the top of the range
    top = oc.stability("gradient", mix, 12, seed=2**64 - 1, rhos=[0.5])
    assert top.config["other_seed"] == (2**64 - 1) ^ 0x9E3779B97F4A7C15
    with pytest.raises(ValueError, match="start_seed must be in"):
        oc.stability("gradient", mix, 12, seed=1, rhos=[0.5], start_seed=-1)


def test_a_numpy_dtype_is_recorded_as_its_name():
    # dtype=np.float32 is accepted like "float32" and recorded as the name, so the summary
    # stays JSON (before, json.dumps(to_dict()) failed on the NumPy type)
    import json

    st = oc.stability("gradient", oc.Mixture({3: 1.0}), 12, seed=1, rhos=[0.5], dtype=np.float32)
    assert st.config["dtype"] == "float32"
    json.dumps(st.to_dict())


def test_a_start_seed_given_with_a_callable_is_refused():
    # a callable chooses its own start; a start_seed beside it would be silently unused
    def run(ham):
        return oc.gradient_ascent(ham, seed=3)

    with pytest.raises(TypeError, match="start_seed is for the named methods"):
        oc.stability(run, oc.Mixture({3: 1.0}), 12, seed=1, rhos=[0.5], start_seed=3)


def test_consecutive_seeds_do_not_share_instances():
    # the default other_seed was seed + 1: the independent part of seed s was the base
    # instance of seed s + 1, so the energy at rho = 0 for seed s equalled the base energy of
    # seed s + 1 and averages over consecutive seeds were not over independent samples
    mix = oc.Mixture({3: 1.0})
    runs = [oc.stability("gradient", mix, 30, s, [0.0]) for s in range(3)]
    bases = {r.energy for r in runs}
    assert not any(r.energies[0] in bases for r in runs)
    assert {r.config["other_seed"] for r in runs}.isdisjoint(range(1000))


def test_stability_refuses_text_and_flags_as_rhos_and_a_callable_without_a_result():
    mix = oc.Mixture({3: 1.0})
    for bad in ("10", [True]):  # "10" ran with rhos 1.0, 0.0 (its characters)
        with pytest.raises(TypeError, match="rhos must be a sequence of numbers"):
            oc.stability("gradient", mix, 10, seed=1, rhos=bad)
    with pytest.raises(TypeError, match="rhos must be a sequence of numbers, got 0.5"):
        oc.stability("gradient", mix, 10, seed=1, rhos=0.5)
    # a generator is read once
    gen = oc.stability("gradient", mix, 10, seed=1, rhos=(r for r in (0.5, 0.0)))
    assert gen.rhos.tolist() == [0.5, 0.0]
    with pytest.raises(TypeError, match="must return an orthoclimb Result, got int"):
        oc.stability(lambda ham: 3, mix, 10, seed=1, rhos=[0.5])


def test_overlaps_stay_within_one_in_float32():
    # 1.0000000000000002 at rho = 1 in float32 (a review): the overlap of unit vectors
    st = oc.stability("gradient", oc.Mixture({3: 1.0}), 30, 2, [1.0], dtype="float32")
    assert -1.0 <= st.overlaps[0] <= 1.0
