"""The verdicts against theory: which n^(-k) laws are kept, and what each sentence says
about the printed intervals."""

from __future__ import annotations

import math

import pytest

from orthoclimb.studies.laws import law_regions, verdict


@pytest.mark.parametrize(
    ("value", "interval", "other", "z", "words"),
    [
        (1.445, (1.40, 1.49), None, -1.9, "0.0550 below ALG = 1.5000 (-1.9 s.e. under"),
        (1.50, (1.45, 1.55), None, -0.5, "consistent with ALG = 1.5000 (-0.5 s.e.)"),
        # ALG in the chosen interval but outside that of n^(-1), which the data keep too: said
        # (a user trial read "consistent with ALG" beside a kept law that excluded it)
        (
            1.49,
            (1.45, 1.53),
            (1.40, 1.47, 0.25),
            -0.5,
            "consistent with ALG = 1.5000 (-0.5 s.e.), not under n^(-1), which the data also keep",
        ),
        # ... and nothing is added when n^(-1) holds ALG too, or when the data reject it
        (1.50, (1.45, 1.55), (1.48, 1.56, 0.4), -0.5, "consistent with ALG = 1.5000 (-0.5 s.e.)"),
        (1.50, (1.45, 1.55), (1.40, 1.47, 0.01), 0.0, "ALG = 1.5000 (+0.0 s.e.)"),
        # every law rejected (all are read then): none is said to be kept (a review)
        (1.50, (1.45, 1.55, 0.01), (1.40, 1.47, 0.01), 0.0, "ALG = 1.5000 (+0.0 s.e.)"),
        (1.555, (1.51, 1.60), None, 2.5, "above ALG"),
        # ALG outside the chosen interval, inside the n^(-1) law's, which fits
        (1.555, (1.51, 1.60), (1.47, 1.53, 0.4), 2.5, "only under n^(-1) (+2.5 s.e. under"),
        # ... but not when the data reject n^(-1)
        (1.555, (1.51, 1.60), (1.47, 1.53, 0.01), 2.5, "0.0550 above ALG"),
        # between two kept laws' intervals: an exponent between them fits too
        (1.555, (1.51, 1.60), (1.40, 1.49, 0.4), 2.5, "only under a law between n^(-2/3) and"),
        # outside the span of the kept laws
        (1.555, (1.51, 1.60), (1.52, 1.56, 0.4), 2.5, "outside the interval under n^(-1) too"),
        # the chosen law rejected, ALG inside its interval but below the kept n^(-1)'s: the
        # side and distance come from the law kept (e_inf = 1.54 there)
        (
            1.505,
            (1.49, 1.52, 0.01),
            (1.52, 1.56, 0.4),
            0.5,
            "0.0400 above ALG = 1.5000 under n^(-1)",
        ),
        (1.45, (math.nan, math.nan), None, -1.9, "consistent with ALG"),  # no interval: |z|
    ],
)
def test_the_verdict_agrees_with_the_printed_intervals(value, interval, other, z, words):
    fit = {"value": value, "low": interval[0], "high": interval[1], "exponent": 2 / 3}
    fit.update(fit_p=interval[2] if len(interval) > 2 else 0.5, other_laws=[])
    if other is not None:
        fit["other_laws"] = [{"exponent": 1.0, "low": other[0], "high": other[1]}]
        fit["other_laws"][0].update(fit_p=other[2], value=(other[0] + other[1]) / 2)
    got = verdict(fit, 1.5, z, "ALG")
    assert words in got
    if "not under" not in words:
        assert "not under" not in got


def test_a_gap_between_kept_laws_counts_only_without_a_rejected_law_inside_it():
    # n^(-1/2) at [1.52, 1.56] and n^(-1) at [1.40, 1.48] both fit; ALG = 1.5 lies between
    # their intervals. With n^(-2/3) also kept, an exponent between fits: "a law between";
    # with n^(-2/3) rejected, no tested law between them fits, and ALG is outside both
    def fit(p_chosen):
        f = {"value": 1.505, "low": 1.49, "high": 1.52, "exponent": 2 / 3, "fit_p": p_chosen}
        f["other_laws"] = [
            {"exponent": 0.5, "low": 1.52, "high": 1.56, "value": 1.54, "fit_p": 0.3},
            {"exponent": 1.0, "low": 1.40, "high": 1.48, "value": 1.44, "fit_p": 0.3},
        ]
        return f

    text = verdict(fit(0.5), 1.50, 0.5, "ALG")
    assert text.startswith("consistent with ALG = 1.5000 (")  # inside the chosen interval
    text = verdict(fit(0.5), 1.485, 0.5, "ALG")  # between n^(-2/3)'s and n^(-1)'s
    assert "only under a law between n^(-2/3) and n^(-1)" in text
    text = verdict(fit(0.01), 1.50, 0.5, "ALG")
    assert "only under" not in text and "the nearest law the data keep" in text
    # the kept laws form one region, or two split by the rejected n^(-2/3)
    assert [[law["exponent"] for law in run] for run in law_regions(fit(0.5))] == [
        [0.5, 2 / 3, 1.0]
    ]
    assert [[law["exponent"] for law in run] for run in law_regions(fit(0.01))] == [[0.5], [1.0]]


def test_a_z_from_few_degrees_of_freedom_says_so():
    # with 2 sizes of 3 seeds the interval is a Student t one with nu ~ 2-3 (Welch 1947): a
    # z of +2.7 is then inside a 90% interval, which the sentence must not leave unexplained
    fit = {"value": 1.527, "low": 1.45, "high": 1.61, "exponent": 2 / 3, "t_dof": 2.4}
    fit.update(fit_p=math.nan, other_laws=[])
    assert "consistent with ALG = 1.5000 (+2.7 s.e. with 2.4 degrees of freedom)" in verdict(
        fit, 1.5, 2.7, "ALG"
    )
    fit["t_dof"] = 40.0
    assert "(+2.7 s.e.)" in verdict(fit, 1.5, 2.7, "ALG")


def test_alg_and_gs_in_different_laws_intervals_are_named_apart():
    # a review's study (pure 3-spin, ALG = 1.6330, GS = 1.6570): no one interval holds both,
    # so "both lie inside the intervals under n^(-1/2), n^(-2/3) and n^(-1)" was untrue; the
    # sentence now gives the range the kept laws span and which law's interval holds each
    from orthoclimb.studies.laws import against_theory

    fit = {"value": 1.6424, "low": 1.6299, "high": 1.6538, "exponent": 2 / 3, "fit_p": 0.5}
    fit.update(alg=1.6330, gs=1.6570, z_alg=1.3, z_gs=-2.1, gs_equals_alg=False)
    fit["other_laws"] = [
        {"exponent": 0.5, "low": 1.6453, "high": 1.6777, "value": 1.6615, "fit_p": 0.5},
        {"exponent": 1.0, "low": 1.6146, "high": 1.6306, "value": 1.6226, "fit_p": 0.5},
    ]
    text = against_theory(fit)
    assert "cannot tell ALG = 1.6330" in text and "inside the intervals under" not in text
    assert "in the range [1.6146, 1.6777] over n^(-1/2) to n^(-1)" in text
    assert "ALG under n^(-2/3) and GS under n^(-1/2)" in text
    # ALG in no interval, between n^(-1)'s and n^(-2/3)'s: an exponent between them fits
    fit["low"] = 1.6340
    assert "ALG under a law between n^(-2/3) and n^(-1)" in against_theory(fit)
