"""Tests of orthoclimb.theory.algorithmic: ALG, q_hat, the path curve and the Hessian edge."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.linalg import eigvalsh

from orthoclimb import Mixture
from orthoclimb.errors import NonFiniteError
from orthoclimb.theory import (
    algorithmic_energy,
    algorithmic_threshold,
    hessian_edge,
    path_energy,
)

MIXTURES = [
    Mixture({2: 1.0}),
    Mixture({3: 1.0}),
    Mixture({2: 1.0, 4: 0.3}),
    Mixture({3: 0.5, 5: 1.2, 8: 0.3}),
    Mixture({1: 0.4, 2: 1.0, 4: 0.2}),
    Mixture({1: 0.3, 3: 1.0}),
    Mixture({2: 0.1, 7: 2.0}),
]


def _quad_path(mixture: Mixture, lo: float, hi: float) -> float:
    value, _ = quad(lambda s: math.sqrt(mixture.xi(s, 2)), lo, hi, epsabs=1e-14, epsrel=1e-13)
    return value


def test_pure_two_spin_alg_is_the_semicircle_edge():
    # Wigner semicircle edge: xi = q^2, ALG = int_0^1 sqrt(2) dq = sqrt(2).
    assert algorithmic_energy(Mixture({2: 1.0})) == pytest.approx(math.sqrt(2), abs=1e-12)


def test_pure_three_spin_alg():
    # Auffinger, Ben Arous and Cerny 2013: E_inf = 2 sqrt(2/3) for p = 3 (= ALG for pure models).
    assert algorithmic_energy(Mixture({3: 1.0})) == pytest.approx(2 * math.sqrt(2 / 3), abs=1e-12)


@pytest.mark.parametrize("p", range(2, 9))
@pytest.mark.parametrize("gamma", [0.5, 1.0, 1.7])
def test_pure_p_path_closed_form(p, gamma):
    # xi'' = gamma^2 p (p-1) q^(p-2): int_0^q sqrt(xi'') = gamma sqrt(p (p-1)) (2/p) q^(p/2).
    mixture = Mixture({p: gamma})
    q = np.linspace(0.0, 1.0, 11)
    expected = gamma * math.sqrt(p * (p - 1)) * (2 / p) * q ** (p / 2)
    np.testing.assert_allclose(path_energy(mixture, q), expected, rtol=1e-12, atol=1e-14)
    assert algorithmic_energy(mixture) == pytest.approx(gamma * 2 * math.sqrt((p - 1) / p))


def test_two_plus_four_path_closed_form():
    # xi = a q^2 + b q^4: int_0^q sqrt(A + B s^2) ds with A = 2a, B = 12b equals
    # q/2 sqrt(A + B q^2) + A / (2 sqrt B) asinh(q sqrt(B / A)) (a table integral).
    a, b = 1.0, 0.09
    A, B = 2 * a, 12 * b
    q = np.linspace(0.0, 1.0, 21)
    expected = q / 2 * np.sqrt(A + B * q**2) + A / (2 * math.sqrt(B)) * np.arcsinh(
        q * math.sqrt(B / A)
    )
    np.testing.assert_allclose(
        path_energy(Mixture.from_xi({2: a, 4: b}), q), expected, rtol=1e-12, atol=1e-15
    )


@pytest.mark.parametrize("mixture", MIXTURES, ids=repr)
def test_path_energy_against_quad(mixture):
    # E_path(q) = sqrt(q_hat xi'(q_hat)) + int_{q_hat}^q sqrt(xi'') for q >= q_hat (Subag 2018; the
    # field term from memory),
    # sqrt(q xi'(q)) below q_hat; the integral is recomputed with scipy.integrate.quad.
    q_hat = algorithmic_threshold(mixture)
    for q in [0.0, 0.05, 0.3, 0.5, 0.77, 1.0]:
        if q <= q_hat:
            expected = math.sqrt(q * mixture.xi(q, 1))
        else:
            expected = math.sqrt(q_hat * mixture.xi(q_hat, 1)) + _quad_path(mixture, q_hat, q)
        assert path_energy(mixture, q) == pytest.approx(expected, rel=1e-11, abs=1e-13)


@pytest.mark.parametrize("gammas", [{2: 1e-3, 6: 1.0}, {2: 1e-4, 7: 1.0}, {2: 1.0, 4: 0.3}])
@pytest.mark.parametrize("scale", [1e-20, 1e-8, 1e8])
def test_alg_is_linear_in_the_scale_of_the_gammas(gammas, scale):
    # Every gamma times c multiplies xi by c^2, so ALG = int_0^1 sqrt(xi'') (Subag 2018) is
    # multiplied by c exactly. With an absolute error bound the integral stopped early for
    # small c and a dominant high degree (relative error 1.6e-10 at c = 1e-20).
    unscaled = Mixture(gammas)
    reference, _ = quad(
        lambda s: math.sqrt(unscaled.xi(s, 2)), 0.0, 1.0, epsabs=0.0, epsrel=1e-13, limit=200
    )
    scaled = Mixture({p: g * scale for p, g in gammas.items()})
    assert algorithmic_energy(scaled) / scale == pytest.approx(reference, rel=1e-12)


@pytest.mark.parametrize("mixture", MIXTURES, ids=repr)
def test_path_energy_is_alg_of_the_restricted_polynomial(mixture):
    # On the sphere of radius sqrt(q) the polynomial has mixture r -> xi(q r), i.e. gammas
    # gamma_p q^(p/2); path_energy(q) is defined as the ALG of that mixture.
    for q in [0.1, 0.4, 0.9]:
        restricted = Mixture({p: g * q ** (p / 2) for p, g in mixture.gammas.items()})
        assert path_energy(mixture, q) == pytest.approx(algorithmic_energy(restricted), rel=1e-11)


@pytest.mark.parametrize("mixture", MIXTURES, ids=repr)
def test_path_energy_is_increasing_and_ends_at_alg(mixture):
    q = np.linspace(0.0, 1.0, 101)
    values = path_energy(mixture, q)
    assert values[0] == 0.0
    assert np.all(np.diff(values) > 0)
    assert values[-1] == pytest.approx(algorithmic_energy(mixture), rel=1e-14)


def test_pure_field():
    # p = 1 alone: H(x) = sqrt(n) gamma_1 <g, x>, whose maximum on the unit sphere is
    # gamma_1 |g| / sqrt(n) -> gamma_1 per spin (maximum of a linear function, exact).
    assert algorithmic_threshold(Mixture({1: 0.8})) == 1.0
    assert algorithmic_energy(Mixture({1: 0.8})) == pytest.approx(0.8, rel=1e-14)


def test_field_plus_two_spin_uses_q_hat_one():
    # xi = h^2 q + c q^2: q xi''(q) - xi'(q) = 2cq - h^2 - 2cq = -h^2 < 0 on [0, 1], so no root:
    # q_hat = 1 by the q_hat rule (q xi'' = xi', from memory) and ALG = sqrt(q_hat xi'(q_hat)) =
    # sqrt(h^2 + 2c).
    mixture = Mixture.from_xi({1: 0.5, 2: 1.0})
    assert algorithmic_threshold(mixture) == 1.0
    assert algorithmic_energy(mixture) == pytest.approx(math.sqrt(0.5 + 2.0), rel=1e-14)


def test_field_plus_three_spin_closed_form():
    # xi = h^2 q + c q^3: q xi'' - xi' = 3 c q^2 - h^2, so q_hat = h / sqrt(3c) when < 1, and
    # ALG = sqrt(q_hat (h^2 + 3 c q_hat^2)) + sqrt(6c) (2/3) (1 - q_hat^(3/2)).
    h2, c = 0.09, 1.0
    mixture = Mixture.from_xi({1: h2, 3: c})
    q_hat = math.sqrt(h2 / (3 * c))
    assert algorithmic_threshold(mixture) == pytest.approx(q_hat, rel=1e-13)
    expected = math.sqrt(q_hat * (h2 + 3 * c * q_hat**2)) + math.sqrt(6 * c) * (2 / 3) * (
        1 - q_hat**1.5
    )
    assert algorithmic_energy(mixture) == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("h", [1e-12, 1e-15, 1e-30, 1e-150])
def test_q_hat_of_a_tiny_field_is_exact_to_relative_precision(h):
    # the same closed form, q_hat = h / sqrt(3) for xi = h^2 q + q^3: a root found to an
    # absolute 1e-15 was 1.3e-6 off at h = 1e-12 and 0.0 below h of about 1e-20 (a trial)
    q_hat = algorithmic_threshold(Mixture({1: h, 3: 1.0}))
    assert q_hat == pytest.approx(h / math.sqrt(3), rel=1e-13)


def test_no_field_means_q_hat_zero():
    assert algorithmic_threshold(Mixture({2: 1.0, 5: 0.4})) == 0.0


def test_hessian_edge_formula_and_shapes():
    mixture = Mixture({2: 1.0, 4: 0.3})
    q = np.array([[0.0, 0.5], [0.25, 1.0]])
    np.testing.assert_allclose(hessian_edge(mixture, q), 2 * np.sqrt(mixture.xi(q, 2)), rtol=1e-15)
    assert isinstance(hessian_edge(mixture, 0.5), float)
    assert hessian_edge(mixture, q).shape == (2, 2)
    assert path_energy(mixture, q).shape == (2, 2)
    assert isinstance(path_energy(mixture, 0.5), float)
    assert path_energy(mixture, np.array([])).shape == (0,)


@pytest.mark.parametrize(
    ("gammas", "q", "expected"),
    [
        # xi = q^4: 2 sqrt(12 q^2) = 4 sqrt(3) q; 12 q^2 underflowed to 0 (a review)
        ({4: 1.0}, 1e-200, 4.0 * math.sqrt(3.0) * 1e-200),
        # xi = q^5 + q^7 / 4: 2 sqrt(20 q^3 + 10.5 q^5) = 2 sqrt(20) q sqrt(q) at q = 1e-110,
        # where 20 q^3 = 2e-329 underflowed to 0
        ({5: 1.0, 7: 0.5}, 1e-110, 2.0 * math.sqrt(20.0) * 1e-110 * math.sqrt(1e-110)),
        # xi = q^6 / 4: 2 sqrt(7.5 q^4) = 2 sqrt(7.5) q^2 = 1.1e-299, q^4 = 1e-600 underflowed
        ({6: 0.5}, 1e-150, 2.0 * math.sqrt(7.5) * 1e-300),
    ],
)
def test_hessian_edge_at_tiny_q_is_exact(gammas, q, expected):
    # exact identities of 2 sqrt(xi''(q)) with the lowest power of q taken out of the root
    assert hessian_edge(Mixture(gammas), q) == pytest.approx(expected, rel=1e-14, abs=0.0)
    # an array with ordinary entries beside keeps their bits (2 sqrt(xi''(q)) as before)
    mixture = Mixture(gammas)
    both = hessian_edge(mixture, np.array([q, 0.5]))
    assert both[1] == 2.0 * math.sqrt(mixture.xi(0.5, 2))


def test_hessian_edge_matches_a_sampled_two_spin_hessian():
    # For xi = gamma^2 q^2 the Hessian of H(x) = sqrt(n) gamma x^T J x is sqrt(n) gamma (J + J^T),
    # a Gaussian symmetric matrix with off-diagonal variance 2 n gamma^2: semicircle edge
    # 2 sqrt(2 n) sqrt(n) gamma = n * 2 sqrt(xi''). Restricting to the tangent space of a unit
    # vector removes one dimension and does not move the edge. Finite-n edge fluctuations are
    # of order n^(-2/3); n = 600 and a 3% tolerance.
    n, gamma = 600, 0.8
    rng = np.random.default_rng(7)
    J = rng.standard_normal((n, n))
    hess = math.sqrt(n) * gamma * (J + J.T)
    u = rng.standard_normal(n)
    u /= np.linalg.norm(u)
    basis = np.linalg.qr(np.column_stack([u, rng.standard_normal((n, n - 1))]))[0][:, 1:]
    top = eigvalsh(basis.T @ hess @ basis, subset_by_index=[n - 2, n - 2])[0] / n
    assert top == pytest.approx(hessian_edge(Mixture({2: gamma}), 0.3), rel=0.03)


@pytest.mark.parametrize("function", [path_energy, hessian_edge])
def test_q_validation(function):
    mixture = Mixture({2: 1.0})
    with pytest.raises(ValueError, match=r"\[0, 1\].*1\.5"):
        function(mixture, 1.5)
    with pytest.raises(ValueError, match=r"-0\.25"):
        function(mixture, [0.5, -0.25])
    with pytest.raises(NonFiniteError, match="nan"):
        function(mixture, [0.5, float("nan")])
    with pytest.raises(NonFiniteError, match="inf"):
        function(mixture, float("inf"))
    with pytest.raises(TypeError, match="'half'"):
        function(mixture, "half")
    with pytest.raises(TypeError, match="Mixture"):
        function({2: 1.0}, 0.5)


@pytest.mark.parametrize("function", [algorithmic_energy, algorithmic_threshold])
def test_mixture_validation(function):
    with pytest.raises(TypeError, match="NoneType"):
        function(None)
    with pytest.raises(TypeError, match="dict"):
        function({2: 1.0})


@pytest.mark.parametrize("q", [1e-300, 1e-200, 1e-20])
def test_the_path_integral_converges_where_it_underflows(monkeypatch, q):
    # With a purely relative error bound quad_vec never converged where F(q) underflows: it
    # ran to its limit of 10,000 intervals (6 s) and returned 0 with a failure status. Each
    # integral must now end converged (status 0), and agree with the pure 3-spin closed form
    # F(q) = int_0^q sqrt(6 s) ds = (2/3) sqrt(6) q^(3/2) where that is representable.
    import importlib

    module = importlib.import_module("orthoclimb.theory.algorithmic")
    real, statuses = module.quad_vec, []

    def recording(*args, **kwargs):
        value, err, info = real(*args, full_output=True, **kwargs)
        statuses.append(info.status)
        return value, err

    monkeypatch.setattr(module, "quad_vec", recording)
    value = path_energy(Mixture({3: 1.0}), q)
    assert all(s == 0 for s in statuses), statuses  # none where F is 0 in doubles
    assert value == pytest.approx(2.0 / 3.0 * math.sqrt(6.0) * q**1.5, rel=1e-12, abs=0.0)


def test_alg_is_computed_once_per_mixture(monkeypatch):
    # ALG's integral took 2-4.5 ms and Hessian ascent asked for it three times a run; it is
    # kept per mixture (equal gammas, however built, share it), and the kept value is the
    # integral's own
    import orthoclimb as oc
    import orthoclimb.theory.algorithmic as algorithmic

    algorithmic._algorithmic_energy.cache_clear()
    real = algorithmic.path_energy
    calls = []

    def counted(mixture, q):
        if isinstance(q, float) and q == 1.0:  # ALG's call; the path's predictions ask more
            calls.append(mixture)
        return real(mixture, q)

    monkeypatch.setattr(algorithmic, "path_energy", counted)
    first = algorithmic.algorithmic_energy(Mixture({2: 1.0, 5: 0.7}))
    assert algorithmic.algorithmic_energy(Mixture.parse("2:1,5:0.7")) == first
    assert Mixture({2: 1.0, 5: 0.7}).algorithmic_energy() == first
    assert len(calls) == 1
    assert first == float(real(Mixture({2: 1.0, 5: 0.7}), 1.0))
    other = algorithmic.algorithmic_energy(Mixture({2: 1.0, 5: 0.8}))
    assert len(calls) == 2 and other > first
    ham = oc.Hamiltonian.sample(Mixture({3: 1.0}), 30, seed=1)
    calls.clear()
    oc.hessian_ascent(ham, steps=5, seed=0, polish=False)
    assert calls == [Mixture({3: 1.0})]


@pytest.mark.parametrize("function", [path_energy, hessian_edge])
def test_bad_entries_of_a_q_array_are_named_with_their_index(function):
    mixture = Mixture({2: 1.0})
    with pytest.raises(ValueError, match=r"got q\[1\] = 1\.5$"):
        function(mixture, [0.5, 1.5])
    with pytest.raises(NonFiniteError, match=r"got q\[1, 0\] = nan$"):
        function(mixture, [[0.5, 0.2], [float("nan"), 0.1]])
    # a long list of text is shown cut short (it was printed whole)
    with pytest.raises(TypeError, match=r"got \['half', 'half', .*\.\.\.\]$") as info:
        function(mixture, ["half"] * 100_000)
    assert len(str(info.value)) < 200


def test_path_energy_with_a_field_at_the_smallest_q():
    # E_path(q) = sqrt(q xi'(q)) below q_hat; q xi'(q) = 5e-324 * 0.16 underflowed to 0, and so
    # did E_path, whose value 8.9e-163 is a normal float. Reference: the same formula in
    # 40-digit decimal arithmetic, where q xi'(q) does not underflow.
    from decimal import Decimal, localcontext

    mixture = Mixture({1: 0.4, 2: 1.0})
    q = 5e-324
    with localcontext() as ctx:
        ctx.prec = 40
        slope = Decimal(0.4) ** 2 + 2 * Decimal(q)  # xi'(q) = gamma_1^2 + 2 gamma_2^2 q
        expected = float((Decimal(q) * slope).sqrt())
    assert path_energy(mixture, q) == pytest.approx(expected, rel=1e-15, abs=0.0)
