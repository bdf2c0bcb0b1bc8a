"""Paired comparison of two methods on the same instances: the sign test, the paired
t-test and ties, against scipy.stats."""

from __future__ import annotations

import math

import numpy as np
import pytest

from orthoclimb.studies.paired import head_to_head, paired_comparison


def test_paired_comparison_sign_test_is_the_exact_binomial():
    # exact identity: under H0 the count of seeds where a is higher is Binomial(m, 1/2), so
    # 9 of 10 has two-sided p = 2 (C(10,9) + C(10,10)) / 2^10 = 22/1024; ties are dropped
    d = np.array([0.01] * 9 + [-0.02, 0.0])
    c = paired_comparison(d)
    assert (c["higher"], c["nonzero"]) == (9, 10)
    assert c["sign_p"] == pytest.approx(22 / 1024, rel=1e-12)
    assert c["diff"] == pytest.approx(d.mean())
    assert c["se"] == pytest.approx(d.std(ddof=1) / math.sqrt(d.size))
    balanced = paired_comparison(np.array([1.0, -1.0] * 5))
    assert balanced["sign_p"] == pytest.approx(1.0) and balanced["diff"] == 0.0
    with pytest.raises(ValueError, match="at least 2 seeds"):
        paired_comparison(np.array([0.1]))


def test_the_mean_edge_is_the_paired_t_test_not_a_normal_z():
    # Student (1908): the mean of m paired differences over its standard error has a t law
    # with m - 1 degrees of freedom (scipy.stats.ttest_1samp as the reference). Five seeds
    # with z = 2.28 give p = 0.085: no edge (before: "ahead", since |z| > 2)
    from scipy import stats

    d = np.array([0.01, 0.02, -0.003, 0.015, 0.004])
    c = paired_comparison(d)
    assert c["t_p"] == pytest.approx(stats.ttest_1samp(d, 0.0).pvalue, rel=1e-10)
    assert c["z"] > 2 and c["t_p"] > 0.05
    a = {s: 1.6 for s in range(5)}
    b = {s: 1.6 - d[s] for s in range(5)}
    seeds = {("m", "x", 100): a, ("m", "y", 100): b}
    line = head_to_head("m", "x", "y", seeds, {"gs": 1.657, "alg": 1.633})
    assert "not distinguishable in the mean" in line and "t-test over 5 seeds: p = 0.085" in line
    b = {s: 1.6 - 3 * d[s] - 0.01 for s in range(5)}  # all positive: the t-test sees it
    line = head_to_head("m", "x", "y", {**seeds, ("m", "y", 100): b}, {"gs": 1.657, "alg": 1.6})
    assert "x is ahead of y" in line and "paired t-test over 5 seeds: p = " in line


def test_a_sign_test_edge_is_led_by_the_counts_and_a_constant_edge_is_certain():
    # eleven small wins and one large loss: the sign test (p = 0.0063) sees x higher on most
    # instances while the mean favours y; the line must name x (before: "y is ahead"). And a
    # difference that is the same on every seed has no spread: a certain edge (before:
    # "not distinguishable ... nan s.e.")
    theory = {"gs": 1.657, "alg": 1.633}
    d = [0.001] * 11 + [-0.1]
    seeds = {("m", "x", 50): {s: 1.6 for s in range(12)}}
    seeds[("m", "y", 50)] = {s: 1.6 - d[s] for s in range(12)}
    line = head_to_head("m", "x", "y", seeds, theory)
    assert "x is higher on most instances (x higher on 11, y on 1" in line
    assert "p = 0.0063" in line and "y is ahead" not in line
    seeds[("m", "y", 50)] = {s: 1.59 for s in range(12)}
    line = head_to_head("m", "x", "y", seeds, theory)
    assert (
        "x is ahead of y by 0.0100 per spin on average (the same difference on each of the 12"
        in line
    )
    assert "nan" not in line


def test_paired_comparison_counts_runs_at_the_same_point_as_ties():
    # exact identity: rounding-level differences (both runs at the same maximum) are ties; of
    # the 3 seeds that really differ, a is higher on 3: two-sided p = 2 / 2^3 = 0.25
    noise = np.array([4e-15, 4e-14, 3e-14, 2e-15, 1e-15, 1e-14, 3e-14])
    real = np.array([0.038, 0.072, 0.0035])
    c = paired_comparison(np.concatenate([noise, real]), tie=1e-9)
    assert (c["higher"], c["lower"], c["ties"], c["nonzero"]) == (3, 0, 7, 3)
    assert c["sign_p"] == pytest.approx(0.25, rel=1e-12)
    assert c["diff"] == pytest.approx(real.sum() / 10)
    only_noise = paired_comparison(noise, tie=1e-9)
    assert only_noise["nonzero"] == 0 and math.isnan(only_noise["sign_p"])
    assert math.isnan(only_noise["z"])  # no "ahead by 0.0000 (3.2 s.e.)"
    # without a tie width the same noise is 7 of 7 (p = 2/128): what the report used to say
    assert paired_comparison(noise)["sign_p"] == pytest.approx(2 / 128)
    with pytest.raises(ValueError, match="tie"):
        paired_comparison(real, tie=-1.0)


def test_ties_of_a_mixture_of_even_degrees_may_be_mirror_points():
    # H(-x) = H(x) when every degree is even: equal energies were called "the same point"
    # while 3 of 8 such pairs ended at opposite points (R = -1; a user trial)
    seeds = {("m", "x", 50): {s: 1.5 for s in range(4)}, ("m", "y", 50): {s: 1.5 for s in range(4)}}
    theory = {"gs": 1.5, "alg": 1.5}
    plain = head_to_head("m", "x", "y", seeds, theory)
    even = head_to_head("m", "x", "y", seeds, {**theory, "even": True})
    assert "stopped at the same point (" in plain and "mirror" not in plain
    assert "stopped at the same point or its mirror -x (" in even
    # the width said is the rule's, 1e-9 of |GS| = 1.5e-9 here (a user trial read "1e-09",
    # the width rounded to one digit)
    assert "(energies within 1.5e-09 per spin, 1e-09 of |GS|)" in plain
    unknown_gs = head_to_head("m", "x", "y", seeds, {"gs": math.nan, "alg": 1.4})
    assert "(energies within 1.4e-09 per spin, 1e-09 of |ALG|)" in unknown_gs  # a review


@pytest.mark.parametrize("bad", [math.nan, math.inf, -math.inf])
def test_non_finite_differences_are_refused(bad):
    # se came out NaN and t_p 0.0, "a certain edge", where scipy.stats.ttest_rel gives NaN
    # (a review)
    with pytest.raises(ValueError, match=f"must be finite, got {bad} at index 0"):
        paired_comparison([bad, 0.01, 0.02, 0.03])


def test_comparisons_are_made_at_every_size_with_two_paired_seeds():
    # a user trial found a clear edge at n = 100 (p = 0.018) that the report, speaking of the
    # largest size only, never showed; each size's t-test is scipy.stats.ttest_rel's
    from scipy.stats import ttest_rel

    from orthoclimb.studies.paired import comparisons_per_size

    rng = np.random.default_rng(3)
    x = {n: {s: 1.5 + 0.01 * rng.standard_normal() for s in range(8)} for n in (50, 100, 200)}
    y = {n: {s: v - 0.004 + 0.003 * rng.standard_normal() for s, v in x[n].items()} for n in x}
    seeds = {("m", "x", n): x[n] for n in x} | {("m", "y", n): y[n] for n in y}
    seeds[("m", "y", 200)] = {0: y[200][0]}  # one paired seed: no comparison at n = 200
    out = comparisons_per_size("m", "x", "y", seeds, {"gs": 1.5, "alg": 1.5})
    assert [c["n"] for c in out] == [50, 100]
    for c in out:
        ref = ttest_rel(list(x[c["n"]].values()), list(y[c["n"]].values()))
        assert c["t_p"] == pytest.approx(ref.pvalue, rel=1e-9) and c["seeds"] == 8
