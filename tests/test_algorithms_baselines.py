"""Polish, the local-maximum check, gradient ascent and Langevin annealing."""

from __future__ import annotations

import math
import re

import numpy as np
import pytest
import scipy.linalg

import orthoclimb as oc
from orthoclimb.algorithms import geometric_schedule, tangent_spectrum
from orthoclimb.errors import ShapeError


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


def test_polish_newton_phase_reaches_the_same_point_as_gradients_alone(monkeypatch):
    # exact criterion: both end at a critical point (|P grad H|/n <= gtol) that is a local
    # maximum; from the same start they must be the same point (same basin, same maximum).
    import importlib

    polish_module = importlib.import_module("orthoclimb.algorithms.polish")

    n = 200
    ham = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), n, seed=4)
    start = oc.hessian_ascent(ham, steps=40, seed=0, polish=False).x
    fast = oc.polish(ham, start)
    assert fast.info["newton_steps"] >= 1 and fast.info["newton_status"] == "converged"
    assert fast.info["grad_norm"] <= 1e-7 and fast.info["local_max"]
    assert np.isnan(fast.path["alpha"][-1])  # the last row is a Newton step
    monkeypatch.setattr(polish_module, "NEWTON_MAX_N", 0)
    slow = oc.polish(ham, start)
    assert slow.info["newton_steps"] == 0 and slow.info["newton_status"] == "not used"
    assert slow.info["grad_norm"] <= 1e-7
    assert abs(float(fast.x @ slow.x)) == pytest.approx(1.0, abs=1e-9)
    assert fast.energy == pytest.approx(slow.energy, rel=1e-12)
    assert fast.info["iterations"] < slow.info["iterations"]


def test_polish_counts_every_pass_and_makes_none_for_its_start_energy(monkeypatch):
    # the start's energy came from a pass of its own, though the gradient stage's first pass
    # is at the same point (a profile: 1-3 % of a Hessian ascent run); info["passes"] is the
    # number of passes over the coefficients the polish made (energy, energy and gradient,
    # Hessian), without the local-maximum check's
    n = 60
    ham = oc.Hamiltonian.sample(oc.Mixture({2: 1.0, 3: 1.0}), n, seed=1)
    x0 = np.random.default_rng(2).standard_normal(n)
    x0 /= np.linalg.norm(x0)
    calls = []
    for name in ("energy", "energy_and_gradient", "gradient", "hessian", "hvp"):
        real = getattr(oc.Hamiltonian, name)

        def counted(self, *args, _real=real, _name=name, **kwargs):
            calls.append(_name)
            return _real(self, *args, **kwargs)

        monkeypatch.setattr(oc.Hamiltonian, name, counted)
    res = oc.polish(ham, x0, check=False)
    monkeypatch.undo()
    assert res.info["newton_steps"] >= 1  # both stages ran
    assert "energy" not in calls, calls
    assert res.info["passes"] == len(calls)
    assert res.info["energy_start"] == pytest.approx(ham.energy(x0) / n, rel=1e-14, abs=1e-14)


def test_polish_runs_its_dense_linear_algebra_on_one_blas_thread(monkeypatch, blas_threads):
    # common practice with spinning OpenBLAS threads (polish module doc: with two threads and
    # a busy core a 600 x 600 Cholesky factor took 0.85 s instead of 0.01 s)
    seen = []
    for name in ("cho_factor", "eigvalsh"):
        original = getattr(scipy.linalg, name)

        def spy(*args, _original=original, **kwargs):
            seen.append(max(blas_threads()))
            return _original(*args, **kwargs)

        monkeypatch.setattr(scipy.linalg, name, spy)
    ham = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 120, seed=4)
    start = oc.hessian_ascent(ham, steps=25, seed=0, polish=False).x
    res = oc.polish(ham, start)
    assert res.info["newton_steps"] >= 1 and res.info["local_max"]
    assert len(seen) >= 2 and set(seen) == {1}
    assert max(blas_threads()) >= 2  # restored afterwards


def test_newton_leaves_a_saddle_for_the_maximum_with_a_shifted_step():
    # exact: for H = x.M x the critical points on the sphere are M's eigenvectors and the only
    # local maximum is the top one (energy lambda_1 / n). At the second eigenvector the
    # Riemannian Hessian has one positive eigenvalue 2 (lambda_1 - lambda_2), so the Cholesky
    # factorization of -A fails unshifted: before December 2026 Newton stopped there
    # ("not_a_maximum"); the shifted step (Nocedal and Wright 2006, Algorithm 3.3) climbs on
    # along the gradient's small component toward the top eigenvector.
    from orthoclimb.algorithms._newton import newton_refine

    n = 60
    ham = oc.Hamiltonian.sample(oc.Mixture({2: 1.0}), n, seed=3)
    vals, vecs = scipy.linalg.eigh(_sym_from_p2(ham))
    near = vecs[:, -2] + 1e-3 * vecs[:, -1] + 1e-3 * vecs[:, 0]
    out = newton_refine(ham, near / np.linalg.norm(near), gtol=1e-10, max_steps=40)
    assert out.status == "converged" and out.shifted >= 1
    assert out.factorizations > out.steps  # some shifts were refused before one held
    assert out.energy == pytest.approx(vals[-1] / n, rel=1e-12)
    assert abs(float(out.x @ vecs[:, -1])) == pytest.approx(1.0, abs=1e-9)
    top = vecs[:, -1] + 1e-2 * vecs[:, 0]
    out = newton_refine(ham, top / np.linalg.norm(top), gtol=1e-10)
    assert out.status == "converged" and out.shifted == 0  # near the maximum: plain Newton
    assert out.energy == pytest.approx(vals[-1] / n, rel=1e-12)


def test_shifted_cholesky_takes_the_first_shift_that_makes_the_matrix_definite():
    # exact: diag(-1, 2) needs tau > 1; the sequence is tau_0 = beta + 1, doubling
    # (Nocedal and Wright 2006, Algorithm 3.3); a NaN matrix gets no factor
    from orthoclimb.algorithms._newton import _shifted_cholesky

    factor, tau, tried = _shifted_cholesky(np.diag([-1.0, 2.0]), 0.25)
    assert (tau, tried) == (1.25, 1)
    c, lower = factor
    assert np.allclose(np.diag(np.triu(c) if not lower else np.tril(c)) ** 2, [0.25, 3.25])
    _f, tau, tried = _shifted_cholesky(np.array([[1.0, 2.0], [2.0, 1.0]]), 0.3)
    assert tried == 4 and tau == pytest.approx(1.2)  # eigenvalues -1, 3: 0, 0.3, 0.6 fail
    assert _shifted_cholesky(np.full((2, 2), np.nan), 1.0)[0] is None


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


def test_the_line_search_is_the_nonmonotone_test_of_grippo_lampariello_lucidi():
    # Grippo, Lampariello and Lucidi (1986), for maximization: a step is accepted when the new
    # energy exceeds the SMALLEST of the last 10 by the Armijo term. So every energy is at least
    # the minimum of the ten before it, and the energy does dip now and then (the BB steps go
    # through unshortened). Before, the test read the largest of the last 10: every step had to
    # beat the best so far, the path never dipped and 40% more passes went into halving steps
    # (370 passes for 265 iterations here; now 334 for 291).
    from orthoclimb.algorithms._riemannian import sphere_ascent

    ham = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 300, seed=0)
    trace = sphere_ascent(ham, np.random.default_rng(0).standard_normal(300), gtol=1e-7)
    e = np.asarray(trace.rows["energy"])
    assert trace.status == "converged"
    assert all(e[k] >= e[max(0, k - 10) : k].min() for k in range(1, e.size))
    assert np.count_nonzero(np.diff(e) < 0) >= 5
    assert trace.passes <= 1.2 * trace.iterations
    # stopped by the iteration cap inside a dip (62 here), it returns its best point, not the
    # last one: the energy of the returned x is the path's maximum
    capped = sphere_ascent(ham, np.random.default_rng(0).standard_normal(300), max_iter=62)
    path = np.asarray(capped.rows["energy"])
    assert capped.status == "max_iter" and path[-1] < path.max()
    assert capped.energy == path.max() == pytest.approx(ham.energy(capped.x) / 300, rel=1e-12)
    assert path[capped.returned_iteration] == capped.energy and capped.returned_iteration < 62


def test_the_armijo_term_refuses_a_step_that_gains_too_little():
    # the sufficient-increase term itself (Armijo 1966; common practice): on a scripted
    # landscape the first trial step (alpha = 0.1, |G| = 1 per spin) gains 1e-6 per spin, less
    # than 1e-4 * alpha * |G|^2 = 1e-5, so it must be halved (a flipped sign or a missing
    # term would accept it; the runs of real instances never depend on it, see above)
    from orthoclimb.algorithms._riemannian import sphere_ascent

    class Scripted:
        n = 2

        def __init__(self):
            self.calls = 0

        def energy_and_gradient(self, x):
            self.calls += 1
            if self.calls == 1:
                return 0.0, np.array([0.0, 2.0])  # tangent at (1, 0): |G| = 1 per spin
            if self.calls == 2:
                return 2e-6, np.array([0.0, 2.0])  # 1e-6 per spin: too little
            return 2.0, np.zeros(2)  # a clear gain, at a critical point

    trace = sphere_ascent(Scripted(), np.array([1.0, 0.0]), gtol=1e-7, max_iter=5)
    assert trace.rows["alpha"] == [0.0, 0.05] and trace.passes == 3
    assert trace.status == "converged"


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
    [
        ([], ValueError),
        ([1.0, -0.1], ValueError),
        ([1.0, np.inf], ValueError),
        ("hot", TypeError),
        ([True, False], TypeError),  # ran at temperatures 1 and 0 (a review)
        ([1.0, 0.5j], TypeError),
    ],
)
def test_langevin_schedule_validation(schedule, exc):
    ham = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 10, seed=1)
    with pytest.raises(exc, match="schedule"):
        oc.langevin_anneal(ham, schedule=schedule)


def test_a_schedule_of_too_many_steps_is_refused_before_it_is_built():
    # 10^14 temperatures asked NumPy for 728 TiB (a MemoryError traceback in climb)
    with pytest.raises(ValueError, match="steps must be at most 10_000_000, got 10{14}"):
        geometric_schedule(1.0, 0.01, 10**14)
    # the same bound for a schedule of the caller's own and for the iteration caps (a user
    # trial ran 2 x 10^7 temperatures, about 7 minutes at n = 30, and max_iter = 10^9 passed)
    ham = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 10, seed=1)
    with pytest.raises(ValueError, match="at most 10_000_000 temperatures .*got 10_000_001"):
        oc.langevin_anneal(ham, schedule=np.ones(10**7 + 1))
    with pytest.raises(ValueError, match="max_iter must be at most 10_000_000, got 1000000000"):
        oc.gradient_ascent(ham, max_iter=10**9)
    with pytest.raises(ValueError, match="max_iter must be at most 10_000_000, got 1000000000"):
        oc.polish(ham, np.ones(10), max_iter=10**9)


def test_geometric_schedule_cools_and_refuses_to_heat():
    # np.geomspace would happily run from 0.01 up to 1; a "cooling schedule" that heats is a
    # swapped pair of arguments, so it is refused by name (equal ends: constant temperature)
    temps = geometric_schedule(1.0, 0.01, 5)
    assert np.all(np.diff(temps) < 0)
    np.testing.assert_allclose(temps, [1.0, 10**-0.5, 0.1, 10**-1.5, 0.01])
    np.testing.assert_allclose(geometric_schedule(0.3, 0.3, 4), [0.3] * 4, rtol=1e-14)
    with pytest.raises(ValueError, match="t_end = 1.0 is above t_start = 0.01"):
        geometric_schedule(0.01, 1.0, 5)


def test_flags_must_be_booleans():
    # the string "no" is truthy: taking it as True would run what the caller meant to skip
    ham = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 12, seed=0)
    x = np.ones(12) / np.sqrt(12)
    with pytest.raises(TypeError, match="check must be True or False, got 'no'"):
        oc.polish(ham, x, check="no")
    with pytest.raises(TypeError, match="check must be True or False, got 1"):
        oc.gradient_ascent(ham, check=1)


def test_the_local_maximum_check_does_not_depend_on_the_scale():
    # exact scaling: the Hessian of c H is c Hess H, so the count of positive tangent
    # eigenvalues must be the same at c = 1e-20, 1 and 1e20 (a fixed 1e-9 n threshold said
    # "local maximum" at a random point when c = 1e-20)
    base = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 30, seed=0)
    x = np.random.default_rng(3).standard_normal(30)
    peak = oc.gradient_ascent(base, seed=0).x
    for point in (x, peak):
        want = tangent_spectrum(base, point)["n_positive"]
        for c in (1e-20, 1e20):
            scaled = oc.Hamiltonian.from_coefficients(30, {3: c * base.coefficients(3)})
            assert tangent_spectrum(scaled, point)["n_positive"] == want, c
    assert tangent_spectrum(base, x)["n_positive"] > 0
    assert tangent_spectrum(base, peak)["n_positive"] == 0


def test_far_scales_warn_that_the_tolerances_are_absolute(recwarn):
    tiny = oc.Hamiltonian.sample(oc.Mixture({3: 1e-20}), 12, seed=0)
    with pytest.warns(RuntimeWarning, match=r"sqrt\(xi\(1\)\) = 1e-20 is far from 1"):
        oc.gradient_ascent(tiny, max_iter=5)
    oc.gradient_ascent(oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 12, seed=0), max_iter=5)
    assert not [w for w in recwarn if "far from 1" in str(w.message)]


def test_polish_warns_at_a_far_scale_once_per_call_and_methods_warn_only_their_own(recwarn):
    # the polish's tolerances are absolute like the other optimizers': at 1e-12 a point that is
    # not critical passes gtol at once, and polish said nothing (a user trial)
    import warnings

    base = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 40, seed=2)
    tiny = oc.Hamiltonian.from_coefficients(40, {3: 1e-12 * base.coefficients(3)})
    with pytest.warns(RuntimeWarning, match=r"^polish: the energy scale .* is far from 1"):
        oc.polish(tiny, np.ones(40), max_iter=5)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        oc.hessian_ascent(tiny, steps=5, seed=0)  # its own warning, not its polish's too
    far = [str(w.message) for w in caught if "far from 1" in str(w.message)]
    assert len(far) == 1 and far[0].startswith("hessian_ascent:")
    recwarn.clear()
    oc.polish(base, np.ones(40), max_iter=5)
    assert not [w for w in recwarn if "far from 1" in str(w.message)]


@pytest.mark.parametrize("scale", [2.0**-66, 2.0**66, 1e-20, 1e20])
def test_polish_from_a_random_start_does_not_depend_on_the_scale_of_h(scale):
    # exact identity: c H has the critical points of H, with energies and gradients times c.
    # With gtol times c the polish makes the same steps: its hand-over to Newton and its
    # step-size bounds follow the power of two nearest the scale. An absolute hand-over sent
    # a random start at c = 1e-20 straight to Newton, which climbed to another maximum;
    # absolute step bounds made c = 1e20 backtrack some 30 halvings a step, to a third one (a
    # review). For c a power of two every step is exact: the same bits
    import warnings

    n = 60
    base = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), n, seed=1)
    copy = oc.Hamiltonian.from_coefficients(n, {3: base.coefficients(3)})
    x0 = np.random.default_rng(1).standard_normal(n)
    one = oc.polish(base, x0)
    scaled = oc.Hamiltonian.from_coefficients(n, {3: scale * base.coefficients(3)})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # the far-scale warning
        out = oc.polish(scaled, x0, gtol=1e-7 * scale)
        grad = oc.gradient_ascent(scaled, x0=x0, gtol=1e-7 * scale)
    ref = oc.gradient_ascent(base, x0=x0)
    assert out.info["status"] == one.info["status"] == "converged"
    if math.log2(scale).is_integer():
        np.testing.assert_array_equal(out.x, one.x)
        np.testing.assert_array_equal(grad.x, ref.x)
        np.testing.assert_array_equal(oc.polish(copy, x0).x, one.x)  # sampled or given
        assert out.info["passes"] == one.info["passes"]
    # otherwise the hand-over differs by up to sqrt(2) (49 and 53 passes against 50 here)
    assert abs(float(out.x @ one.x)) == pytest.approx(1.0, abs=1e-9)
    assert out.energy / scale == pytest.approx(one.energy, rel=1e-12)
    assert grad.energy / scale == pytest.approx(ref.energy, rel=1e-12)


def test_the_zero_polynomial_is_a_local_maximum_everywhere():
    # exact: H = 0 makes every point critical with every tangent eigenvalue 0, so no
    # eigenvalue is positive (the check's scale is 0 there; rounding noise of 1e-18 counted
    # as positive against a threshold of 0 before: a user trial)
    n = 30
    count = len(oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), n, seed=0).coefficients(3))
    zero = oc.Hamiltonian.from_coefficients(n, {3: np.zeros(count)})
    res = oc.polish(zero, np.random.default_rng(1).standard_normal(n))
    assert res.info["n_positive"] == 0 and res.info["local_max"]
    assert tangent_spectrum(zero, np.ones(n))["n_positive"] == 0


def test_langevin_noise_diffuses_at_the_stated_temperature():
    # exact identity for the scheme of the module doc with H = 0 (pure diffusion): a step is
    # x' = (x + s P xi)/sqrt(1 + s^2 |P xi|^2), s^2 = 2 eta T / n, with |P xi|^2 ~ chi^2_(n-1)
    # and <P xi, x_0> symmetric given |P xi| (reflection in the tangent space), so
    # E[<x_K, x_0>] = m^K with m = E[(1 + s^2 chi^2_(n-1))^(-1/2)] (scipy.stats.chi2.expect).
    # Its continuous limit is the heat kernel of Brownian motion on S^(n-1) with generator
    # (T/n) Laplacian: exp(-(n-1) T eta K / n) (degree-1 harmonics have eigenvalue -(n-1)).
    # Noise at half the temperature would give about 0.38 instead of 0.14.
    from scipy import stats

    n, temp, eta, steps, seeds = 50, 1.0, 0.01, 200, 100
    ham = oc.Hamiltonian.from_coefficients(n, {1: np.zeros(n)})  # H = 0: no drift at all
    overlaps = []
    for seed in range(seeds):
        # T = 0 and no gradient: one step leaves the seeded start x_0 where it is
        x0 = oc.langevin_anneal(ham, seed=seed, schedule=[0.0], eta=eta, polish=False).x
        xk = oc.langevin_anneal(ham, seed=seed, schedule=[temp] * steps, eta=eta, polish=False)
        overlaps.append(float(x0 @ xk.x))
    s2 = 2.0 * eta * temp / n
    m = stats.chi2(n - 1).expect(lambda q: (1.0 + s2 * q) ** -0.5)
    expected = m**steps
    assert expected == pytest.approx(np.exp(-(n - 1) * temp * eta * steps / n), rel=0.05)
    mean = float(np.mean(overlaps))
    se = float(np.std(overlaps, ddof=1)) / np.sqrt(seeds)
    assert abs(mean - expected) <= 4.0 * se, (mean, se, expected)


@pytest.mark.parametrize(("eta", "t_start"), [(1e300, 1e300), (1e308, 1.0)])
def test_absurd_langevin_options_are_named_when_the_step_overflows(eta, t_start, recwarn):
    # a study with eta = 1e300 failed every task with NumPy overflow warnings and
    # "NonFiniteError: x holds a non-finite value nan" (user review); the error now names
    # the step, eta and the temperature, and NumPy stays silent. (A step of 1e300 times the
    # gradient alone no longer overflows: its norm is taken scaled, and the retraction is
    # then a normalized gradient step; 2 eta T overflows here.)
    ham = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 20, seed=1)
    schedule = geometric_schedule(t_start, t_start / 10, 3)
    with pytest.raises(ValueError, match=rf"step 0 overflowed .*eta = {re.escape(repr(eta))}"):
        oc.langevin_anneal(ham, eta=eta, schedule=schedule)
    ours = f"langevin_anneal: eta = {eta:g} is large"  # the step-size warning, before the run
    numpy_warnings = [w for w in recwarn if not str(w.message).startswith(ours)]
    assert not [w for w in numpy_warnings if issubclass(w.category, RuntimeWarning)]


def test_given_coefficients_far_from_unit_scale_warn_too(recwarn):
    # a user trial: from_coefficients at 1e-100 "converged" at its random start, silently
    # (only sampled instances, which carry a mixture, were checked). The scale of given
    # coefficients is sqrt(sum_p sum_m a_m^2 / n^(p+1)), an unbiased estimate of xi(1)'s root
    # for sampled ones since the multinomial counts of the degree-p monomials add up to n^p
    # (multinomial theorem)
    from orthoclimb.algorithms._checks import coefficient_scale

    mixture = oc.Mixture({2: 1.0, 4: 0.25})
    sampled = oc.Hamiltonian.sample(mixture, 200, seed=1)
    given = oc.Hamiltonian.from_coefficients(200, {p: sampled.coefficients(p) for p in (2, 4)})
    assert np.exp(coefficient_scale(given)) == pytest.approx(np.sqrt(mixture.xi(1.0)), rel=0.01)
    oc.gradient_ascent(given, max_iter=5)
    assert not [w for w in recwarn if "far from 1" in str(w.message)]
    # 9.96e-101: the degree-2 part alone, whose gamma = 1 this sample estimates as 0.996
    tiny = oc.Hamiltonian.from_coefficients(200, {2: sampled.coefficients(2) * 1e-100})
    with pytest.warns(RuntimeWarning, match=r"energy scale 9.96e-101 \(sqrt\(sum_p sum_m a_m"):
        oc.gradient_ascent(tiny, max_iter=5)
    huge = oc.Hamiltonian.from_coefficients(200, {2: sampled.coefficients(2) * 1e300})
    with pytest.warns(RuntimeWarning, match=r"energy scale 9.96e\+299 \(sqrt"):
        oc.hessian_ascent(huge, steps=3)


def test_a_polish_far_from_unit_scale_ends_where_newton_stopped():
    # at 1e300 times a unit instance gtol = 1e-7 lies far below rounding, so Newton stops
    # with "no progress" once its gradient is at rounding level (1e-15 relative here); the
    # gradient steps that followed could only wander there and returned their best energy,
    # at 3.6e-9 relative, above the stall bound sqrt(eps) |E| (2.6e-9 here): no local
    # maximum. The polish now keeps Newton's point; at unit scale nothing changes
    import warnings

    coeffs = np.random.default_rng(0).standard_normal(1540)
    unit = oc.Hamiltonian.from_coefficients(20, {3: coeffs})
    start = oc.hessian_ascent(unit, polish=False).x
    ref = oc.polish(unit, start)
    assert ref.info["status"] == "converged" and ref.info["local_max"] is True
    scale = 1e300
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # the scale warning
        far = oc.polish(oc.Hamiltonian.from_coefficients(20, {3: coeffs * scale}), start)
    assert far.info["status"] == "stalled" and far.info["newton_status"] == "no_progress"
    assert far.info["local_max"] is True
    assert far.info["grad_norm"] / scale < 1e-9
    assert far.energy / scale == pytest.approx(ref.energy, rel=1e-12)


@pytest.mark.parametrize("scale", [1.0, 1e4])
def test_a_polish_from_a_saddle_climbs_to_the_maximum(scale):
    # pure 2-spin: H(x) = x.M x with the critical points the eigenvectors of M (M from
    # scipy's eigh); from the second one, nudged 1e-9 towards the first, Newton's shifted
    # step gains nothing visible, and the gradient steps after it must climb to the top
    # eigenvector (a review: a version that kept Newton's point whenever its gradient was
    # within the stall bound stopped at this saddle, 0.14 per spin lower, at scale 1e4)
    import warnings

    n = 40
    base = oc.Hamiltonian.sample(oc.Mixture({2: 1.0}), n, seed=3)
    ham = oc.Hamiltonian.from_coefficients(n, {2: base.coefficients(2) * scale})
    _, vecs = scipy.linalg.eigh(base.hessian(np.zeros(n)))
    x = vecs[:, -2] + 1e-9 * vecs[:, -1]
    x /= np.linalg.norm(x)
    top = ham.energy(vecs[:, -1]) / n
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # the scale warning at 1e4
        res = oc.polish(ham, x, gtol=1e-10)
    assert res.energy == pytest.approx(top, rel=1e-12)
    assert res.info["local_max"] is True and res.info["n_positive"] == 0


def test_hessian_ascent_at_1e300_reports_finite_norms_without_numpy_warnings():
    # a user trial: at coefficients of 1e300 the energy was right but grad_norm came back as
    # inf, with hundreds of NumPy overflow warnings (|v| summed squares past float64's
    # range); norms are now taken scaled, so every number is the unit-scale run's times 1e300
    import warnings

    coeffs = np.random.default_rng(0).standard_normal(1540)
    unit = oc.hessian_ascent(oc.Hamiltonian.from_coefficients(20, {3: coeffs}))
    big = oc.Hamiltonian.from_coefficients(20, {3: coeffs * 1e300})
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        res = oc.hessian_ascent(big)
    assert [str(w.message) for w in caught if "far from 1" not in str(w.message)] == []
    assert res.energy / 1e300 == pytest.approx(unit.energy, rel=1e-12)
    assert np.isfinite(res.info["grad_norm"]) and res.info["local_max"] is True
    assert res.info["grad_norm"] / 1e300 <= 1e-7  # converged, as at unit scale


def test_the_baselines_callbacks_see_the_rows_their_paths_keep():
    # a user trial: gradient ascent's callback rows had "step" where the path has
    # "iteration", and Langevin's lacked the path's grad_norm. Each now gets the path's row
    # (gradient ascent: every row but the start's) plus the keys all methods share
    ham = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 40, seed=2)
    seen: list[dict] = []
    run = oc.gradient_ascent(ham, seed=1, max_iter=30, callback=seen.append, check=False)
    assert len(seen) == len(run.path["iteration"]) - 1 > 0
    for key, column in run.path.items():
        assert [row[key] for row in seen] == list(column[1:]), key
    assert all(row["step"] == row["iteration"] and row["q"] == 1.0 for row in seen)
    seen.clear()
    schedule = geometric_schedule(1.0, 0.1, 12)
    run = oc.langevin_anneal(ham, seed=1, schedule=schedule, polish=False, callback=seen.append)
    assert len(seen) == 12
    for key, column in run.path.items():
        assert [row[key] for row in seen] == list(column), key


def test_the_baselines_start_from_a_given_point():
    # a user trial: only polish took a start point. x0 is scaled to the sphere, recorded by
    # its digest, and gives the seeded run's result when it is that run's own start (to
    # rounding: the scaling of x0 may move its last bits)
    from orthoclimb.algorithms._checks import check_unit_start
    from orthoclimb.algorithms._sphere import random_unit
    from orthoclimb.algorithms.result import vector_digest

    ham = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 40, seed=2)
    seeded = oc.gradient_ascent(ham, seed=5, max_iter=50, check=False)
    start = random_unit(40, np.random.default_rng(5))  # the seeded run's start
    given = oc.gradient_ascent(ham, x0=3.0 * start, max_iter=50, check=False)
    np.testing.assert_allclose(given.x, seeded.x, rtol=0, atol=1e-9)
    assert given.config["start_sha256"] == vector_digest(check_unit_start(3 * start, 40, "x0"))
    assert "start_sha256" not in seeded.config
    assert given.path["energy"][0] == pytest.approx(ham.energy(start) / 40, rel=1e-14)
    # Langevin: the seed still drives the noise; from the seeded start the runs agree
    schedule = geometric_schedule(1.0, 0.1, 10)
    a = oc.langevin_anneal(ham, seed=5, schedule=schedule, polish=False)
    b = oc.langevin_anneal(ham, seed=5, schedule=schedule, polish=False, x0=start)
    np.testing.assert_allclose(a.x, b.x, rtol=0, atol=1e-9)
    other = -start
    c = oc.langevin_anneal(ham, seed=5, schedule=schedule, polish=False, x0=other)
    assert c.path["energy"][0] == pytest.approx(ham.energy(other) / 40, rel=1e-14)
    with pytest.raises(ShapeError, match=r"x0 must have shape \(40,\), got \(3,\)"):
        oc.gradient_ascent(ham, x0=np.ones(3))
    with pytest.raises(ValueError, match="x0 is the zero vector"):
        oc.langevin_anneal(ham, x0=np.zeros(40))


def test_a_point_stopped_on_a_slope_is_no_local_maximum():
    # a local maximum is a critical point with no positive tangent eigenvalue: a run cut off
    # by its cap after 20 iterations has none positive here, but its tangent gradient is far
    # above gtol, so it is no maximum (before: local_max True, and the CLI said "yes")
    ham = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 80, seed=7)
    res = oc.gradient_ascent(ham, max_iter=20)
    assert res.info["status"] == "max_iter" and res.info["grad_norm"] > 1e-2
    assert res.info["n_positive"] == 0 and res.info["local_max"] is False
    done = oc.gradient_ascent(ham)  # the same start, run to convergence
    assert done.info["grad_norm"] <= 1e-7 and done.info["local_max"] is True


def test_polish_says_converged_only_below_its_gtol():
    # a cap that stage 1 uses up exactly at its hand-over tolerance, with Newton stopping short
    # of gtol = 1e-16, used to be reported "converged" at |P grad H|/n ~ 1e-10 (a review)
    ham = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 100, seed=3)
    x = np.random.default_rng(1).standard_normal(100)
    for cap in (60, 72, 90, 2000):
        res = oc.polish(ham, x, gtol=1e-16, max_iter=cap)
        converged = res.info["status"] == "converged"
        assert converged == (res.info["grad_norm"] <= 1e-16), (cap, res.info["status"])
        # a stall (no progress at rounding level) is as critical as arithmetic allows
        critical = converged or res.info["status"] == "stalled"
        assert res.info["local_max"] is (critical and res.info["n_positive"] == 0)


@pytest.mark.parametrize("scale", [1e200, 1e-170])
def test_a_start_of_any_finite_size_is_a_direction(scale):
    # x is only a direction: 1e200 * ones has a norm that overflows (x/inf was the zero
    # vector, "a local maximum" with every eigenvalue 0) and 1e-170 * ones one that
    # underflows ("x is the zero vector"); both must give the results of ones itself
    ham = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 30, seed=0)
    ones = np.ones(30)
    assert tangent_spectrum(ham, scale * ones) == tangent_spectrum(ham, ones)
    a, b = oc.polish(ham, scale * ones), oc.polish(ham, ones)
    np.testing.assert_array_equal(a.x, b.x)
    assert tangent_spectrum(ham, ones)["n_positive"] > 0  # the case is not trivial


@pytest.mark.parametrize(
    "run",
    [
        lambda h: oc.gradient_ascent(h),
        lambda h: oc.langevin_anneal(h),
        lambda h: oc.polish(h, np.ones(1)),
        lambda h: tangent_spectrum(h, np.ones(1)),
        lambda h: oc.hessian_ascent(h),
    ],
)
def test_one_spin_is_refused_by_every_algorithm(run):
    # the sphere of n = 1 is the points -1 and +1: gradient ascent used to return whichever
    # the seed picked (the minimum for this seed of pure p = 1), "converged", "local maximum"
    ham = oc.Hamiltonian.sample(oc.Mixture({1: 1.0}), 1, seed=0)
    with pytest.raises(ValueError, match=r"needs n >= 2: the sphere of n = 1"):
        run(ham)


def test_a_langevin_step_too_large_for_the_curvature_warns(recwarn):
    # eta 2 sqrt(xi''(1)) > 1 overshoots (measured: the energy per gamma fell from 1.55 to 0.80
    # at 1.96); pure 3-spin has xi''(1) = 6 gamma^2, so gamma = 20 with eta = 0.02 gives 1.96
    import warnings

    ham = oc.Hamiltonian.sample(oc.Mixture({3: 20.0}), 20, seed=0)
    with pytest.warns(RuntimeWarning, match=r"eta = 0.02 is large .* = 1.96 > 1"):
        oc.langevin_anneal(ham, schedule=[1.0, 0.5], polish=False)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        oc.langevin_anneal(ham, schedule=[1.0, 0.5], eta=0.01, polish=False)  # 0.98: silent


def test_a_stalled_run_at_a_large_scale_is_still_a_local_maximum():
    # gtol is absolute: at gamma = 1e4 (sqrt(xi(1)) = 1e4, no far-scale warning yet) gradient
    # ascent stalls at rounding level with |P grad H|/n = 2.7e-7 > gtol = 1e-7. A stall is as
    # critical as double precision allows, so with no positive eigenvalue it is a local
    # maximum (a review: such runs were all reported as no local maximum)
    ham = oc.Hamiltonian.sample(oc.Mixture({3: 1e4}), 80, seed=0)
    res = oc.gradient_ascent(ham)
    assert res.info["status"] == "stalled" and res.info["grad_norm"] > 1e-7
    assert res.info["n_positive"] == 0 and res.info["local_max"] is True


def test_a_stall_with_a_gradient_above_rounding_is_no_local_maximum():
    # a review's quadratic: A/n with eigenvalues 1, 0.99, -1e6 and the rest in (-1, 0.99), a
    # random rotation (generator 2, the sixth draw of 36); the nonmonotone line search's dips
    # stalled gradient ascent at |P grad H|/n = 8.6e-4, 1.85e-5 below the maximum (the top
    # eigenvalue, scipy.linalg.eigh). A stall is critical only with a gradient near rounding
    rng = np.random.default_rng(2)
    n = 60
    for stiff in (1e2, 1e4, 1e6):
        for delta in (1e-2, 1e-4, 1e-6):
            for rep in range(4):
                q, _ = np.linalg.qr(rng.standard_normal((n, n)))
                spread = rng.uniform(-1.0, 1.0 - delta, n - 3)
                if (stiff, delta, rep) == (1e6, 1e-2, 1):
                    lam = np.concatenate(([1.0, 1.0 - delta, -stiff], spread))
                    a = (q * lam) @ q.T * n
                    ham = oc.Hamiltonian.from_dense({2: 0.5 * (a + a.T)})
    # its eigenvalue of -1e6 puts its scale (1.8e5) far from 1, which the run says
    with pytest.warns(RuntimeWarning, match="far from 1"):
        res = oc.gradient_ascent(ham, seed=1, max_iter=5000)
    top = scipy.linalg.eigh(0.5 * (a + a.T) / n, eigvals_only=True)[-1]
    # since the step-size bounds follow the energy scale it stalls closer (2.7e-11 below the
    # top, |P grad H|/n = 2.1e-5), still with a gradient far above rounding: not critical
    from orthoclimb.algorithms.polish import STALL_GRADIENT

    assert res.info["status"] == "stalled" and res.info["grad_norm"] > 1e3 * STALL_GRADIENT
    assert 0 < top - res.energy and res.info["n_positive"] == 0
    assert res.info["local_max"] is False


def _tangent_eigenvalues(ham, x):
    """The n - 1 eigenvalues (descending) of the Riemannian Hessian P (Hess - x.grad I) P on
    the tangent space at the unit vector x, from an explicit orthonormal basis of that space
    (scipy.linalg.null_space) and scipy.linalg.eigvalsh: independent of the package's shift."""
    _e, g = ham.energy_and_gradient(x)
    basis = scipy.linalg.null_space(x[None, :])
    restricted = basis.T @ (ham.hessian(x) - float(x @ g) * np.eye(ham.n)) @ basis
    return scipy.linalg.eigvalsh(restricted)[::-1]


@pytest.mark.parametrize("n", [20, 60])
def test_the_check_runs_matrix_free_when_the_dense_hessian_does_not_fit(monkeypatch, n):
    # The check always built the dense n x n Hessian, so a run that had chosen matrix-free
    # products for lack of memory ran to its end and then failed in its last step. With
    # 16 KiB "available" (less than the dense check's arrays) it now uses Hessian-vector
    # products; the Hessian itself is refused as it is at large n (its own check starts at
    # 64 MiB).
    import importlib

    memory_module = importlib.import_module("orthoclimb.model.memory")
    ham = oc.Hamiltonian.sample(oc.Mixture({2: 0.5, 3: 1.0}), n, seed=4)
    x = np.random.default_rng(1).standard_normal(n)
    x /= np.linalg.norm(x)
    want = _tangent_eigenvalues(ham, x)

    def refuse(self, x, **kwargs):
        raise oc.errors.InsufficientMemoryError(f"the Hessian of n = {self.n} does not fit")

    monkeypatch.setattr(memory_module, "available_memory", lambda: 16 * 1024)
    monkeypatch.setattr(oc.Hamiltonian, "hessian", refuse)
    spec = tangent_spectrum(ham, x)
    assert spec["top_eigenvalue"] == pytest.approx(want[0] / n, rel=1e-9)
    assert spec["n_positive"] == min(int(np.count_nonzero(want > 0)), 10 if n > 40 else n)
    assert spec["exhaustive"] == (n <= 40)
    run = oc.hessian_ascent(ham, steps=5, seed=0)
    assert run.info["hessian_mode"] == "operator" and run.info["local_max"] in (True, False)
    # a quadratic's constant Hessian was taken dense whatever the memory
    quadratic = oc.Hamiltonian.sample(oc.Mixture({2: 1.0}), n, seed=4)
    assert oc.hessian_ascent(quadratic, steps=3, seed=0).info["hessian_mode"] == "operator"
    # a linear H has a zero Hessian, on which Lanczos cannot start: its tangent eigenvalues
    # are all -x.grad H (exact; ARPACK stopped with "starting vector is zero")
    field = oc.Hamiltonian.sample(oc.Mixture({1: 1.0}), n, seed=4)
    h = field.coefficients(1)
    spec = tangent_spectrum(field, h)
    assert spec["n_positive"] == 0
    assert spec["top_eigenvalue"] == pytest.approx(-float(np.linalg.norm(h)) / n, rel=1e-12)
    # at the minimum -h every one of the n - 1 is +|h| (counted up to 10 where not exhaustive)
    low = tangent_spectrum(field, -h)
    assert low["n_positive"] == (n - 1 if low["exhaustive"] else 10)
    monkeypatch.undo()
    assert run.info["n_positive"] == tangent_spectrum(ham, run.x)["n_positive"]


def test_the_dense_lanczos_check_agrees_with_all_eigenvalues(monkeypatch):
    # above DENSE_EIGVALS_MAX_N spins the dense check runs Lanczos for the top 10 (one
    # triangle of the shifted matrix per product); lowered here so that n = 80 takes that
    # route: the top eigenvalue and the count of positive ones among the top 10 are those of
    # scipy.linalg.eigvalsh on an explicit basis of the tangent space
    import importlib

    polish_module = importlib.import_module("orthoclimb.algorithms.polish")
    n = 80
    ham = oc.Hamiltonian.sample(oc.Mixture({2: 0.5, 3: 1.0}), n, seed=4)
    x = np.random.default_rng(1).standard_normal(n)
    x /= np.linalg.norm(x)
    want = _tangent_eigenvalues(ham, x)
    monkeypatch.setattr(polish_module, "DENSE_EIGVALS_MAX_N", 50)
    spec = tangent_spectrum(ham, x)
    assert spec["exhaustive"] is False
    # ARPACK's tol = 1e-8 bounds the residual by 1e-8 |theta|, so theta is that close
    assert spec["top_eigenvalue"] == pytest.approx(want[0] / n, rel=1e-8)
    assert spec["n_positive"] == min(int(np.count_nonzero(want > 0)), 10)
    assert 0 < spec["n_positive"]  # a random point: some positive directions to count


def test_the_lanczos_check_gives_the_same_numbers_every_time():
    # Above 3000 spins the check runs Lanczos; ARPACK's own start vector is random, so three
    # checks of one point differed in the 15th digit. It now starts from a fixed vector.
    n = 3001
    ham = oc.Hamiltonian.sample(oc.Mixture({2: 1.0}), n, seed=1)
    x = np.random.default_rng(0).standard_normal(n)
    tops = {tangent_spectrum(ham, x)["top_eigenvalue"] for _ in range(3)}
    assert len(tops) == 1, tops


def test_the_returned_iteration_is_a_row_of_the_path():
    # When backtracking gave up (a stall at rounding level), the iteration counter had moved
    # on without a row: at gamma = 1e100 returned_iteration was 1 with only row 0 in the path.
    ham = oc.Hamiltonian.sample(oc.Mixture({3: 1e100}), 30, seed=1)
    with pytest.warns(RuntimeWarning):  # the scale warning
        run = oc.gradient_ascent(ham)
    assert run.info["status"] == "stalled"
    assert run.info["returned_iteration"] in set(run.path["iteration"].tolist())
    assert run.info["iterations"] == int(run.path["iteration"][-1])


def test_polish_path_ends_at_the_returned_point():
    # a gradient stage stopped by max_iter inside a dip returns its best iterate; the path
    # went on to the last one, so its final energy (1.2629) was not the result's (1.2801)
    from orthoclimb.algorithms import polish

    ham = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 100, 0)
    start = np.random.default_rng(4).standard_normal(100)
    dropped = 0
    for max_iter in range(3, 16):
        r = polish(ham, start, max_iter=max_iter, check=False)
        assert r.path["energy"][-1] == r.energy, max_iter
        assert r.energy == pytest.approx(ham.energy(r.x) / ham.n, rel=1e-13)
        assert r.info["iterations"] == max_iter or r.info["status"] != "max_iter"
        dropped += r.info["dropped_iterations"]
    assert dropped > 0  # the case arises here (13 iterations: 2 dropped)


@pytest.mark.parametrize("scale", [1e-20, 1e20])
def test_newton_steps_do_not_depend_on_the_scale_of_h(scale):
    # exact identity: c H has the critical points of H, and Newton's steps are the same.
    # An absolute 1 in the radial shift and in the test of progress stopped Newton at
    # c = 1e-20 before its first step (a review)
    from orthoclimb.algorithms._newton import newton_refine
    from orthoclimb.algorithms._riemannian import sphere_ascent

    n = 30
    base = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), n, seed=3)
    start = np.random.default_rng(1).standard_normal(n) / np.sqrt(n)
    x0 = sphere_ascent(base, start, gtol=1e-4, max_iter=500).x
    one = newton_refine(base, x0, gtol=1e-11)
    scaled = oc.Hamiltonian.from_coefficients(n, {3: base.coefficients(3) * scale})
    out = newton_refine(scaled, x0, gtol=1e-11 * scale)
    assert one.status == "converged" and out.status == "converged"
    assert out.steps == one.steps >= 1
    np.testing.assert_allclose(out.x, one.x, atol=1e-13)
    assert out.energy / scale == pytest.approx(one.energy, rel=1e-13)
