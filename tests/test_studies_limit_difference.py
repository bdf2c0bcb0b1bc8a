"""The difference of two methods' limits from their paired runs: the fit against numpy.polyfit,
the gain of pairing, ties, left-out sizes and the reading of the kept laws."""

from __future__ import annotations

import math

import numpy as np
import pytest

from orthoclimb.studies.limit_difference import (
    limit_difference,
    limit_difference_line,
    limit_difference_markdown,
    limit_differences,
)

THEORY = {"gs": 1.657, "alg": 1.633}
SIZES = (50, 100, 200, 400)


def _study(gap: float, seeds: int = 30, rng_seed: int = 1, instance_sd: float = 0.5):
    """Energies of methods x and y on the same instances: a shared instance effect of sd
    instance_sd / sqrt(n) (a hard instance is hard for both), each method's own noise of sd
    0.05 / sqrt(n), and limits 1.60 and 1.60 - gap under n^(-2/3) corrections."""
    rng = np.random.default_rng(rng_seed)
    out = {}
    for n in SIZES:
        shared = instance_sd / math.sqrt(n) * rng.standard_normal(seeds)
        own = 0.05 / math.sqrt(n) * rng.standard_normal((2, seeds))
        out[("m", "x", n)] = dict(enumerate(1.60 - 0.5 * n ** (-2 / 3) + shared + own[0]))
        y = 1.60 - gap - 0.9 * n ** (-2 / 3) + shared + own[1]
        out[("m", "y", n)] = dict(enumerate(y))
    return out


def test_the_difference_is_the_weighted_line_through_the_mean_differences():
    # reference: numpy.polyfit of the mean differences against n^(-2/3), weights 1/s.e., the
    # per-seed variances pooled as a power law in n: numpy.polyfit of log var on log n with
    # weights m - 1 (polyfit's w multiplies the residuals, so w = sqrt(weight))
    seeds = _study(gap=0.02)
    f = limit_difference("m", "x", "y", seeds, THEORY, 2 / 3, 0.9, 2000, seed=3)
    d = [
        np.array([seeds[("m", "x", n)][s] - seeds[("m", "y", n)][s] for s in range(30)])
        for n in SIZES
    ]
    means = np.array([a.mean() for a in d])
    b, a = np.polyfit(np.log(SIZES), np.log([v.var(ddof=1) for v in d]), 1, w=[29**0.5] * 4)
    s = np.sqrt(np.exp(a + b * np.log(SIZES)) / 30)
    x = np.array(SIZES, dtype=float) ** (-2 / 3)
    slope, intercept = np.polyfit(x, means, 1, w=1 / s)
    assert f["value"] == pytest.approx(intercept, rel=1e-10)
    assert f["slope"] == pytest.approx(slope, rel=1e-10)
    assert f["sizes"] == list(SIZES) and f["seeds"] == [30] * 4 and f["left_out"] == []
    assert f["low"] < 0.02 < f["high"]  # the true gap, 0.02
    assert f["z0"] == pytest.approx(f["value"] / f["se"])


def test_pairing_takes_out_the_instance_spread():
    # the shared instance effect cancels in the differences: the paired s.e. is far below
    # sqrt(se_x^2 + se_y^2) of the two fits apart (here sd 0.5 shared against 0.05 own)
    from orthoclimb.studies.extrapolate import extrapolate

    seeds = _study(gap=0.02)
    fits = {}
    for m in ("x", "y"):
        samples = [np.array(list(seeds[("m", m, n)].values())) for n in SIZES]
        fits[m] = {"value": extrapolate(SIZES, samples).value, "se": extrapolate(SIZES, samples).se}
    f = limit_difference("m", "x", "y", seeds, THEORY, 2 / 3, 0.9, 2000, seed=3, fits=fits)
    assert f["separate"] == pytest.approx(fits["x"]["value"] - fits["y"]["value"])
    assert f["separate_se"] == pytest.approx(math.hypot(fits["x"]["se"], fits["y"]["se"]))
    assert f["se"] < f["separate_se"] / 4
    line = limit_difference_line(f)
    assert "the limits differ: x reaches the higher energy" in line
    assert f"paired, +- {f['se']:.4f}" in line


def test_equal_limits_read_as_consistent_and_the_leader_follows_the_sign():
    same = limit_difference("m", "x", "y", _study(gap=0.0), THEORY, 2 / 3, 0.9, 2000, seed=0)
    assert same["low"] <= 0 <= same["high"]
    assert "consistent with equal limits" in limit_difference_line(same)
    behind = limit_difference("m", "x", "y", _study(gap=-0.03), THEORY, 2 / 3, 0.9, 2000, seed=0)
    assert behind["high"] < 0
    assert "the limits differ: y reaches the higher energy" in limit_difference_line(behind)


def test_ties_count_as_zero_and_all_ties_say_no_difference():
    # runs within TIE_RELATIVE * GS of each other stopped at the same point (paired.py)
    seeds = _study(gap=0.0, instance_sd=0.5)
    for n in SIZES:
        x = seeds[("m", "x", n)]
        seeds[("m", "y", n)] = {s: v + 1e-12 for s, v in x.items()}
    f = limit_difference("m", "x", "y", seeds, THEORY, 2 / 3, 0.9, 200, seed=0)
    assert f["all_ties"] and f["value"] == 0.0 and f["se"] == 0.0
    line = limit_difference_line(f)
    assert line == (
        "m: x - y as n -> infinity: no difference; the two stopped at the same point on every"
        " paired seed at n = 50, 100, 200, 400."
    )
    even = limit_difference("m", "x", "y", seeds, {**THEORY, "even": True}, 2 / 3, 0.9, 200, 0)
    assert "the same point or its mirror -x on every" in limit_difference_line(even)
    assert "| -- |" in "\n".join(limit_difference_markdown([f]))  # no s.e. printed as 0
    # some ties: counted per size in the finding
    for n in SIZES:
        for s in range(0, 30, 3):
            seeds[("m", "y", n)][s] = seeds[("m", "x", n)][s] - 0.01
    part = limit_difference("m", "x", "y", seeds, THEORY, 2 / 3, 0.9, 200, seed=0)
    assert part["ties"] == [20] * 4 and not part["all_ties"]
    assert "(ties, the same point: 20/30, 20/30, 20/30, 20/30)" in limit_difference_line(part)


def test_sizes_without_two_paired_seeds_are_left_out_and_named():
    seeds = _study(gap=0.02)
    seeds[("m", "y", 400)] = {0: seeds[("m", "y", 400)][0]}  # one paired seed at n = 400
    f = limit_difference("m", "x", "y", seeds, THEORY, 2 / 3, 0.9, 200, seed=0)
    assert f["sizes"] == [50, 100, 200] and f["left_out"] == [[400, 1]]
    assert "left out: n = 400 (1 paired seed)" in limit_difference_line(f)
    # one common size: no fit at all
    one = {k: v for k, v in seeds.items() if k[2] == 50}
    assert limit_difference("m", "x", "y", one, THEORY, 2 / 3, 0.9, 200, seed=0) is None
    # two common sizes, one with a single paired seed: a record that says why there is no fit
    two = {k: v for k, v in seeds.items() if k[2] in (200, 400)}
    f = limit_difference("m", "x", "y", two, THEORY, 2 / 3, 0.9, 200, seed=0)
    assert f["value"] is None and "at least 2 sizes" in f["note"]
    assert "no extrapolation" in limit_difference_line(f)
    assert "| m | x - y | | -- |" in "\n".join(limit_difference_markdown([f]))


def test_every_pair_and_mixture_gets_its_own_bootstrap_seed():
    seeds = _study(gap=0.01)
    for n in SIZES:
        seeds[("m", "z", n)] = {s: v - 0.01 for s, v in seeds[("m", "y", n)].items()}
    recs = limit_differences(["m"], ["x", "y", "z"], seeds, {"m": THEORY}, [], 2 / 3, 0.9, 500)
    assert [(r["a"], r["b"]) for r in recs] == [("x", "y"), ("x", "z"), ("y", "z")]
    # y - z is exactly 0.01 on every seed: no spread, a point interval and no error estimate
    assert recs[2]["se"] == 0.0 and recs[2]["value"] == pytest.approx(0.01)
    assert "no spread" in limit_difference_line(recs[2])
    assert all("separate" not in r for r in recs)  # no fits given


def test_kept_laws_on_both_sides_of_zero_are_not_read_as_a_difference():
    # the data keep n^(-1/2) and n^(-1) and reject n^(-2/3) between them; their intervals lie
    # on opposite sides of 0, so neither method has the higher limit under every kept law
    f = {
        "mixture": "m",
        "a": "x",
        "b": "y",
        "left_out": [],
        "sizes": [50, 100, 200],
        "all_ties": False,
        "even": False,
        "level": 0.9,
        "exponent": 2 / 3,
        "value": 0.002,
        "low": 0.001,
        "high": 0.003,
        "se": 0.0006,
        "z0": 3.3,
        "fit_p": 0.001,
        "other_laws": [
            {"exponent": 0.5, "value": -0.02, "low": -0.03, "high": -0.01, "fit_p": 0.5},
            {"exponent": 1.0, "value": 0.02, "low": 0.01, "high": 0.03, "fit_p": 0.5},
        ],
        "law_low": -0.03,
        "law_high": 0.03,
    }
    line = limit_difference_line(f)
    assert "the laws the data keep disagree on which limit is higher" in line
    assert "the limits differ" not in line
    assert "(+3.3 s.e. under n^(-2/3), which the data reject;" in line
    f["other_laws"][1].update(low=-0.005, high=-0.001)  # now both kept laws put it below 0
    line = limit_difference_line({**f, "law_high": -0.001})
    assert "the limits differ: y reaches the higher energy" in line
    f["other_laws"][1].update(high=0.0005)  # and now n^(-1) holds 0
    line = limit_difference_line({**f, "law_high": 0.0005})
    assert (
        "equal limits only under n^(-1) (+3.3 s.e. under n^(-2/3), which the data reject)" in line
    )


def test_zero_between_two_kept_laws_names_that_pair():
    # every law kept, 0 between the intervals of n^(-2/3) and n^(-1): an exponent between
    # them fits too (laws.py), and the reading names that pair, as the energies' verdicts do
    # (a review: it named the whole run of laws)
    f = {
        "mixture": "m", "a": "x", "b": "y", "left_out": [], "sizes": [50, 100, 200],
        "all_ties": False, "even": False, "level": 0.9, "exponent": 2 / 3,
        "value": 0.01, "low": 0.005, "high": 0.015, "se": 0.003, "z0": 3.3, "fit_p": 0.5,
        "other_laws": [
            {"exponent": 0.5, "value": 0.02, "low": 0.012, "high": 0.03, "fit_p": 0.5},
            {"exponent": 1.0, "value": -0.01, "low": -0.02, "high": -0.004, "fit_p": 0.5},
        ],
        "law_low": -0.02, "law_high": 0.03,
    }  # fmt: skip
    line = limit_difference_line(f)
    assert "equal limits only under a law between n^(-2/3) and n^(-1) (+3.3 s.e." in line


def test_equal_limits_name_a_kept_law_that_excludes_them():
    # as the verdicts against ALG: 0 in the chosen law's interval but outside that of n^(-1),
    # which the data keep too, is said (a user trial)
    from orthoclimb.studies.limit_difference import _reading

    fit = {"se": 0.01, "z0": 0.5, "value": 0.005, "low": -0.01, "high": 0.02, "exponent": 2 / 3}
    fit.update(fit_p=0.5, a="hessian", b="gradient", law_low=-0.01, law_high=0.05)
    fit["other_laws"] = [{"exponent": 1.0, "low": 0.01, "high": 0.05, "fit_p": 0.3, "value": 0.03}]
    assert _reading(fit) == (
        "consistent with equal limits (+0.5 s.e.), not under n^(-1), which the data also keep"
    )
    fit["other_laws"][0]["fit_p"] = 0.01  # rejected: nothing to add
    assert _reading(fit) == "consistent with equal limits (+0.5 s.e.)"
