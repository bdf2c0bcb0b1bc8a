"""Tests of orthoclimb.theory.criterion: the full-RSB criterion (arXiv:1812.04588)."""

from __future__ import annotations

import math

import numpy as np
import pytest

from orthoclimb import Mixture
from orthoclimb.theory import concavity_numerator, full_rsb


def _inv_sqrt_curvature(mixture: Mixture, q: np.ndarray) -> np.ndarray:
    return np.asarray(mixture.xi(q, 2), dtype=np.float64) ** -0.5


def test_pure_two_spin_holds():
    # xi = q^2: xi'' = 2 is constant, so xi''^(-1/2) is constant, hence concave.
    verdict = full_rsb(Mixture({2: 1.0}))
    assert verdict.holds and verdict.failing_intervals == [] and verdict.gs_equals_alg
    # but the Parisi measure is not full RSB: alpha = -(xi''^(-1/2))' = 0, replica symmetric
    # (an independent check of the theory found "holds: ... concave" printed above "alpha = 0,
    # replica symmetric"); with a field too (q xi'' = 2q < xi' = h + 2q: q_hat = 1)
    assert verdict.constant_curvature
    # "holds" beside "no RSB" read as a contradiction (a user trial): the degenerate case
    assert verdict.describe().startswith("holds, in its degenerate case: xi'' is constant")
    assert "replica symmetric (no RSB at all); GS = ALG" in verdict.describe()
    with_field = full_rsb(Mixture({1: 0.5, 2: 1.0}))
    assert with_field.constant_curvature and with_field.describe().endswith("= sqrt(xi'(1))")
    assert not full_rsb(Mixture({2: 1.0, 4: 0.25})).constant_curvature


@pytest.mark.parametrize("p", range(3, 9))
def test_pure_p_fails_everywhere(p):
    # Exact: for pure p >= 3, xi''^(-1/2) = c q^(-(p-2)/2) is convex on (0, 1].
    verdict = full_rsb(Mixture({p: 0.7}))
    assert not verdict.holds
    assert verdict.failing_intervals == [(0.0, 1.0)], f"p = {p}: {verdict.failing_intervals}"
    assert not verdict.gs_equals_alg


@pytest.mark.parametrize("ratio", [1e-300, 1e-200, 1e-3, 0.1, 1.0, 10.0, 1e3, 1e200])
def test_two_plus_three_always_fails(ratio):
    # Exact: every mixture of p = 2 and p = 3 alone fails. Here N = 3 xi'''^2 > 0
    # since the p = 2 term has xi'''' = 0 and the p = 3 term has xi'''' = 0.
    # The tiny and huge ratios check that N is not lost to underflow (108 c_3^2 = 1e-598).
    verdict = full_rsb(Mixture.from_xi({2: 1.0, 3: ratio}))
    assert not verdict.holds
    assert verdict.failing_intervals == [(0.0, 1.0)]


@pytest.mark.parametrize("a", [0.25, 1.0, 3.0])
@pytest.mark.parametrize("factor", [0.1, 0.5, 0.9, 1.0])
def test_two_plus_four_holds_up_to_the_boundary(a, factor):
    # Worked example: xi = a q^2 + b q^4 satisfies the criterion iff b <= a/12
    # (the boundary itself included: there N(q) = 96 a b (q^2 - 1) <= 0).
    verdict = full_rsb(Mixture.from_xi({2: a, 4: factor * a / 12}))
    assert verdict.holds, f"a = {a}, b = {factor} a/12: {verdict.failing_intervals}"


@pytest.mark.parametrize("a", [0.25, 1.0, 3.0])
@pytest.mark.parametrize("factor", [1.01, 1.5, 2.0, 10.0])
def test_two_plus_four_past_the_boundary_fails_near_one(a, factor):
    # Worked example: for b > a/12, (2a + 12 b q^2)^(-1/2) is convex exactly where
    # 2 * 12 b q^2 > 2a, i.e. on (sqrt(a / (12 b)), 1]; the interval reaches q = 1.
    b = factor * a / 12
    verdict = full_rsb(Mixture.from_xi({2: a, 4: b}))
    assert not verdict.holds
    assert len(verdict.failing_intervals) == 1
    lo, hi = verdict.failing_intervals[0]
    assert hi == 1.0
    assert lo == pytest.approx(math.sqrt(a / (12 * b)), rel=1e-12)


@pytest.mark.parametrize("scale", [1e-300, 1e-150, 1e-20, 1e20, 1e150, 1e300])
def test_verdict_does_not_depend_on_the_scale_of_xi(scale):
    # exact: xi''^(-1/2) of c xi is c^(-1/2) times that of xi, so concavity (and the worked
    # examples above) cannot change; before, c = 1e200 made N overflow and "hold"
    for xi in ({3: 1.0}, {2: 1.0, 4: 1 / 16}, {2: 1.0, 4: 1 / 10}, {1: 0.3, 2: 1.0, 3: 0.2}):
        base = full_rsb(Mixture.from_xi(xi))
        scaled = full_rsb(Mixture.from_xi({p: c * scale for p, c in xi.items()}))
        assert scaled.holds == base.holds, (xi, scale)
        np.testing.assert_allclose(scaled.failing_intervals, base.failing_intervals, rtol=1e-12)
        assert scaled.q_hat == pytest.approx(base.q_hat, rel=1e-12)


@pytest.mark.parametrize("eps", [1e-3, 1e-6])
def test_boundary_location_is_sharp(eps):
    # Worked example: the boundary b = a/12 is located to relative precision eps.
    a = 1.3
    assert full_rsb(Mixture.from_xi({2: a, 4: a / 12 * (1 - eps)})).holds
    past = full_rsb(Mixture.from_xi({2: a, 4: a / 12 * (1 + eps)}))
    assert not past.holds
    assert past.failing_intervals[0][1] == 1.0


def test_no_two_spin_term_fails_from_zero():
    # Without p = 2, xi''(0) = 0 and xi''^(-1/2) blows up at 0 like a negative power of q, which
    # is convex near 0: the failing interval must start at 0 (and nothing breaks at q = 0).
    verdict = full_rsb(Mixture({4: 1.0, 6: 0.2}))
    assert not verdict.holds
    assert verdict.failing_intervals[0][0] == 0.0


def test_interior_failing_interval_matches_dense_sign_scan():
    # Independent check of the root-based intervals: the sign of the second derivative of
    # xi''^(-1/2), computed by central differences on a fine grid (test only).
    mixture = Mixture.from_xi({2: 1.0, 3: 0.24, 4: 0.07, 8: 0.05})
    verdict = full_rsb(mixture)
    h = 1e-4
    q = np.linspace(0.01, 0.99, 981)
    f = _inv_sqrt_curvature
    second = (f(mixture, q + h) - 2 * f(mixture, q) + f(mixture, q - h)) / h**2
    inside = np.zeros_like(q, dtype=bool)
    for lo, hi in verdict.failing_intervals:
        inside |= (q > lo) & (q < hi)
    margin = np.ones_like(q, dtype=bool)
    for lo, hi in verdict.failing_intervals:
        margin &= (np.abs(q - lo) > 0.01) & (np.abs(q - hi) > 0.01)
    assert np.all(second[inside & margin] > 0)
    assert np.all(second[~inside & margin] <= 0)
    # This mixture has an interior failing interval (not reaching 1) and concave ends, so the
    # scan above tests both signs.
    assert len(verdict.failing_intervals) == 1
    lo, hi = verdict.failing_intervals[0]
    assert 0.0 < lo and hi < 1.0


@pytest.mark.parametrize("seed", range(8))
def test_random_mixtures_against_dense_sign_scan(seed):
    # Same independent check as above on random mixtures with a p = 2 term.
    rng = np.random.default_rng(seed)
    degrees = [2, *rng.choice(np.arange(3, 9), size=2, replace=False).tolist()]
    mixture = Mixture({int(p): float(rng.uniform(0.02, 0.6)) if p > 2 else 1.0 for p in degrees})
    verdict = full_rsb(mixture)
    h = 1e-4
    q = np.linspace(0.02, 0.98, 97)
    f = _inv_sqrt_curvature
    second = (f(mixture, q + h) - 2 * f(mixture, q) + f(mixture, q - h)) / h**2
    for qi, si in zip(q, second, strict=True):
        near_edge = any(
            min(abs(qi - lo), abs(qi - hi)) < 0.01 for lo, hi in verdict.failing_intervals
        )
        if near_edge or abs(si) < 1e-6:
            continue
        inside = any(lo < qi < hi for lo, hi in verdict.failing_intervals)
        assert inside == (si > 0), f"{mixture!r} at q = {qi}: f'' ~ {si}"
    # the intervals are maximal: sorted, and no two touch (touching ones are one interval)
    ends = [x for iv in verdict.failing_intervals for x in iv]
    assert np.all(np.diff(ends) > 0), verdict.failing_intervals


def test_numerator_matches_second_derivative_formula():
    # f = xi''^(-1/2) has f'' = N xi''^(-5/2) / 4 with N = 3 xi'''^2 - 2 xi'' xi'''' (chain rule);
    # compare with a central difference of f (test only).
    mixture = Mixture({2: 0.8, 3: 0.3, 5: 0.4, 8: 0.1})
    poly = concavity_numerator(mixture)
    q = np.linspace(0.1, 0.9, 9)
    h = 1e-4
    f = _inv_sqrt_curvature
    numeric = (f(mixture, q + h) - 2 * f(mixture, q) + f(mixture, q - h)) / h**2
    exact = poly(q) * np.asarray(mixture.xi(q, 2)) ** -2.5 / 4
    np.testing.assert_allclose(exact, numeric, rtol=1e-5)
    # and N itself from the derivatives the Mixture computes
    direct = 3 * mixture.xi(q, 3) ** 2 - 2 * mixture.xi(q, 2) * mixture.xi(q, 4)
    np.testing.assert_allclose(poly(q), direct, rtol=1e-12)


def test_pure_field_is_linear():
    # p = 1 only: xi'' = 0, the polynomial is linear; no concavity to test, GS = ALG.
    verdict = full_rsb(Mixture({1: 0.7}))
    assert verdict.linear
    assert not verdict.holds
    assert verdict.failing_intervals == []
    assert verdict.gs_equals_alg
    assert "linear" in verdict.describe()


def test_field_uses_only_the_interval_above_q_hat():
    # xi = 0.1 q + q^2 + 0.05 q^4: concave on (0, 1] (b < a/12), q_hat = (h^2 / 8b)^(1/3)
    # (root of q xi'' = xi': 8 b q^3 = h^2), so GS = ALG is predicted.
    verdict = full_rsb(Mixture.from_xi({1: 0.1, 2: 1.0, 4: 0.05}))
    assert verdict.holds and verdict.gs_equals_alg
    assert verdict.q_hat == pytest.approx((0.1 / (8 * 0.05)) ** (1 / 3), rel=1e-12)
    # A strong field on a pure 3-spin: q xi'' - xi' = 3 c q^2 - h^2 < 0 on [0, 1] when h^2 > 3c,
    # so q_hat = 1 and the solution is replica symmetric although xi''^(-1/2) is convex.
    strong = full_rsb(Mixture.from_xi({1: 4.0, 3: 1.0}))
    assert not strong.holds and strong.q_hat == 1.0 and strong.gs_equals_alg
    # A weak field: q_hat = h / sqrt(3c) < 1 and the convex part is above q_hat.
    weak = full_rsb(Mixture.from_xi({1: 0.09, 3: 1.0}))
    assert weak.q_hat == pytest.approx(0.3 / math.sqrt(3), rel=1e-12)
    assert not weak.gs_equals_alg
    # the verdict in words says which way it goes when 0 < q_hat < 1: GS = ALG for the
    # first mixture above, GS > ALG for the weak field on the pure 3-spin
    assert "q_hat = 0.629961: GS = ALG predicted" in verdict.describe()
    assert "q_hat = 0.173205: GS > ALG predicted" in weak.describe()


def test_verdict_is_frozen():
    verdict = full_rsb(Mixture({2: 1.0}))
    with pytest.raises(AttributeError):
        verdict.holds = False  # type: ignore[misc]


@pytest.mark.parametrize("bad", [None, {2: 1.0}, "2:1", 3.0])
def test_rejects_non_mixtures(bad):
    with pytest.raises(TypeError, match="Mixture") as info:
        full_rsb(bad)
    assert type(bad).__name__ in str(info.value)
    with pytest.raises(TypeError, match="Mixture"):
        concavity_numerator(bad)


def test_a_failing_interval_narrower_than_six_digits_is_printed_apart():
    # exact: for xi = q^2 + c q^4, f = xi''^(-1/2) has f'' proportional to 24 c q^2 - 2, so f is
    # concave exactly on q <= 1/sqrt(12 c); c just above 1/12 fails on (1/sqrt(12 c), 1], an
    # interval of width 2e-11 that six digits printed as "(1, 1]"
    c = 0.2886751346**2
    verdict = full_rsb(Mixture({2: 1.0, 4: 0.2886751346}))
    ((lo, hi),) = verdict.failing_intervals
    assert lo == pytest.approx(1 / math.sqrt(12 * c), abs=1e-13) and hi == 1.0
    text = verdict.describe()
    assert "(1, 1]" not in text
    printed = float(text.split("concave on (")[1].split(",")[0])
    assert printed < 1.0 and printed == pytest.approx(lo, abs=1e-11)


def test_a_field_with_q_hat_one_is_described_as_replica_symmetric_not_full_rsb():
    # xi = q + 0.09 q^3: q xi''(q) = 0.54 q^2 < xi'(q) = 1 + 0.27 q^2 on (0, 1], so q_hat = 1
    # (the root of q xi'' = xi' does not lie in (0, 1)) and GS = ALG = sqrt(xi'(1))
    verdict = full_rsb(Mixture({1: 1.0, 3: 0.3}))
    assert verdict.q_hat == 1.0
    text = verdict.describe()
    assert "replica symmetric (no RSB at all)" in text and "not needed here" in text


def test_a_double_root_of_the_numerator_does_not_split_a_failing_interval():
    # exact: for xi = q^3 + 0.1 q^8, N = 3 xi3^2 - 2 xi2 xi4 (xi_k the k-th derivative)
    # = 108 - 806.4 q^5 + 1505.28 q^10 = 1505.28 (q^5 - 15/56)^2 >= 0, expanded by hand, zero
    # only at q0 = (15/56)^(1/5); rounding makes two roots of the double one, which split
    # (0, 1] at 0.76838812 / 0.76838814 (a review)
    mix = Mixture.from_xi({3: 1.0, 8: 0.1})
    q = np.linspace(0.01, 1.0, 7)
    poly = concavity_numerator(mix)
    np.testing.assert_allclose(poly(q), 1505.28 * (q**5 - 15 / 56) ** 2, rtol=1e-10, atol=1e-9)
    assert full_rsb(mix).failing_intervals == [(0.0, 1.0)]
