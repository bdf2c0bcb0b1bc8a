"""Mixture: validation, text form, and xi against NumPy's polynomial evaluation."""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
import pytest
from numpy.polynomial import polynomial as P

from orthoclimb import Mixture
from orthoclimb.errors import MixtureError


def test_gammas_xi_and_derivatives_match_numpy_polynomials():
    m = Mixture({1: 0.5, 2: 1.0, 4: 0.3})
    coeffs = np.zeros(5)
    for p, g in m.gammas.items():
        coeffs[p] = g * g
    q = np.linspace(0.0, 1.0, 11)
    for k in range(6):
        # exact identity: derivative of the polynomial sum_p gamma_p^2 q^p
        want = P.polyval(q, P.polyder(coeffs, k)) if k <= 4 else np.zeros_like(q)
        np.testing.assert_allclose(m.xi(q, derivative=k), want, rtol=1e-14, atol=1e-14)
    assert m.degrees == (1, 2, 4)
    assert m.max_degree == 4
    assert m.has_field
    assert isinstance(m.xi(0.5), float)


def test_from_xi_and_parse_agree():
    a = Mixture.from_xi({2: 1.0, 4: 0.09})
    b = Mixture.parse("2:1, 4:0.3")
    c = Mixture.parse("2:1,4:0.09", squared=True)
    assert a.degrees == b.degrees == c.degrees
    for p in a.degrees:
        assert math.isclose(a.gammas[p], b.gammas[p]) and math.isclose(a.gammas[p], c.gammas[p])
    assert Mixture.parse(b.to_text()) == b
    assert Mixture.from_dict(b.to_dict()) == b
    # the text form keeps every bit (a study names its mixtures by it): gammas that need all
    # 17 significant digits come back equal, not rounded
    odd = Mixture({1: 1 / 3, 3: math.sqrt(2), 5: 1e-7})
    assert Mixture.parse(odd.to_text()).gammas == odd.gammas


def test_zero_gammas_are_dropped():
    assert Mixture({2: 1.0, 3: 0.0}).degrees == (2,)


@pytest.mark.parametrize(
    "spec, fragment",
    [
        ({}, "empty"),
        ({0: 1.0}, "p = 0"),
        ({9: 1.0}, "p = 9"),
        ({2: -1.0}, "-1.0"),
        ({2: float("nan")}, "nan"),
        ({2: float("inf")}, "inf"),
        ({2.5: 1.0}, "2.5"),
        ({2: "x"}, "'x'"),
        ({3: True}, "got True"),  # a flag where a weight belongs is a typo, not gamma = 1
        ({2: "0.5"}, "got '0.5'"),  # text is for Mixture.parse
        ({2: 0.0}, "at least one"),
        ({3: 1e200}, "1e\\+200"),  # finite, but gamma^2 overflows float64
        ({3: 1e-170}, "too small.*1e-170"),  # positive, but gamma^2 underflows to 0
        ({2: 1.0, 3: 1e-155}, "p = 3.*1e-155"),  # gamma^2 subnormal: xi would lose it
        ("3:1", r"the text '3:1'; Mixture.parse\('3:1'\) reads"),  # text belongs to parse
    ],
)
def test_bad_mixtures_name_the_value(spec, fragment):
    with pytest.raises(MixtureError, match=fragment):
        Mixture(spec)


@pytest.mark.parametrize("spec", [None, 3, "3:1", [(3,)], {3: "a"}, {"x": 1}, {3.5: 1}, {3: True}])
def test_a_mixture_of_the_wrong_type_is_a_type_error(spec):
    # common practice (Python's own convention): a wrong type is a TypeError, a wrong value a
    # ValueError; MixtureTypeError is both a MixtureError (ValueError) and a TypeError, so
    # callers catching either keep working. Before: a plain MixtureError (ValueError only)
    with pytest.raises(TypeError) as caught:
        Mixture(spec)
    assert isinstance(caught.value, MixtureError) and isinstance(caught.value, ValueError)


@pytest.mark.parametrize("spec", [{0: 1.0}, {3: -1.0}, {3: float("nan")}, {}])
def test_a_mixture_of_the_right_type_but_a_bad_value_is_no_type_error(spec):
    with pytest.raises(MixtureError) as caught:
        Mixture(spec)
    assert not isinstance(caught.value, TypeError)


def test_parse_squared_must_be_a_boolean():
    with pytest.raises(TypeError, match="squared must be True or False, got 'no'"):
        Mixture.parse("3:1", squared="no")


@pytest.mark.parametrize(
    "text, fragment",
    [
        ("2:1,3:1e-400", "'1e-400' for p = 3 .* too small: it rounds to 0"),
        ("2:1,3:-1e-400", "'-1e-400' for p = 3 .* must be >= 0"),
        ("2:1, 3: 4.9e-325 ", "'4.9e-325' for p = 3 .* too small"),  # below the least subnormal
    ],
)
@pytest.mark.parametrize("squared", [False, True])
def test_a_weight_that_reads_as_zero_but_is_not_is_refused(text, fragment, squared):
    # float() reads these texts as 0.0 or -0.0, which dropped the degree without a word (a
    # fuzzing trial); written zeros still drop it
    with pytest.raises(MixtureError, match=fragment):
        Mixture.parse(text, squared=squared)
    for zero in ["0", "-0", "0.0e5", "-0e-400"]:
        assert Mixture.parse(f"2:1,3:{zero}", squared=squared).degrees == (2,)


@pytest.mark.parametrize(
    "value, fragment",
    [
        (Fraction(1, 10**400), "too small: it rounds to 0"),
        (Fraction(-1, 10**400), ">= 0"),
        (np.longdouble("1e-4000"), "too small: it rounds to 0"),
        (np.longdouble("-1e-4000"), ">= 0"),
    ],
)
def test_a_weight_that_rounds_to_zero_is_refused(value, fragment):
    # float() turns these into 0.0 or -0.0; the value itself is compared with 0 (np.longdouble
    # of 1e-4000 is nonzero only where long double is wider than float64)
    if value == 0:
        pytest.skip("long double is float64 here")
    with pytest.raises(MixtureError, match=fragment):
        Mixture({2: 1.0, 3: value})
    with pytest.raises(MixtureError, match=fragment):
        Mixture.from_xi({2: 1.0, 3: value})
    assert Mixture({2: 1.0, 3: -0.0}).degrees == (2,)


def test_from_xi_refuses_a_subnormal_coefficient():
    with pytest.raises(MixtureError, match="gamma_p\\^2 for p = 3 is too small.*1e-320"):
        Mixture.from_xi({3: 1e-320})
    assert Mixture.from_xi({3: 1e-300}).xi(1.0) == 1e-300  # the smallest normals are kept


@pytest.mark.parametrize("text", ["", "2", "2:", ":1", "a:1", "2:b", "2:1,2:1", "2:1;3:1", "9:1"])
def test_malformed_text_is_refused(text):
    with pytest.raises(MixtureError):
        Mixture.parse(text)


def test_bad_derivative_order():
    with pytest.raises(ValueError, match="-1"):
        Mixture({2: 1.0}).xi(0.5, derivative=-1)


def test_weights_beyond_float64_are_refused_with_the_package_error():
    # float(10**400) raises OverflowError, which is neither ValueError nor TypeError; a NumPy
    # complex read as its real part with only a warning (a review)
    from orthoclimb.errors import MixtureTypeError

    for make in (lambda: Mixture({2: 10**400}), lambda: Mixture.from_xi({2: 10**400})):
        with pytest.raises(
            MixtureError, match="beyond float64's range, got an integer of about 401 digits"
        ):
            make()
    with pytest.raises(MixtureTypeError, match="must be a real number"):
        Mixture({2: np.complex128(1 + 2j)})
    with pytest.raises(ValueError, match="q holds an integer beyond float64's range"):
        Mixture({2: 1.0}).xi(10**400)


@pytest.mark.parametrize("gammas", [{8: 1e154}, {2: 1e154, 3: 1e154}, {5: 2e153}])
def test_a_mixture_whose_xi_overflows_at_1_is_refused(gammas):
    # each gamma_p^2 is finite, but xi(1), xi'(1), xi''(1) or xi'''(1) (sums of falling
    # factorials times gamma_p^2) overflow: ALG came out NaN for 8:1e154 (a review)
    derivatives = [
        sum(g * g * math.perm(p, k) for p, g in gammas.items() if p >= k) for k in range(4)
    ]
    assert not all(math.isfinite(v) for v in derivatives)
    with pytest.raises(MixtureError, match="overflows float64; scale them down"):
        Mixture(gammas)
    scaled = Mixture({p: g * 1e-10 for p, g in gammas.items()})  # the same shape, smaller
    assert math.isfinite(scaled.algorithmic_energy())


def test_from_dict_refuses_a_float_degree_instead_of_truncating_it():
    # int(2.7) is 2: from_dict({2.7: 1}) gave Mixture({2: 1.0}) (a review)
    from orthoclimb.errors import MixtureTypeError

    with pytest.raises(MixtureTypeError, match="2.7"):
        Mixture.from_dict({2.7: 1.0})
    assert Mixture.from_dict({"2": 1.0, 4: 0.5}) == Mixture({2: 1.0, 4: 0.5})


@pytest.mark.parametrize("protocol", [0, 1, 2, 5])
def test_a_mixture_pickles_with_every_protocol(protocol):
    # __slots__ without __getstate__ refused protocols 0 and 1 (a review)
    import pickle

    m = Mixture({1: 0.25, 3: 1.0})
    assert pickle.loads(pickle.dumps(m, protocol=protocol)) == m


@pytest.mark.parametrize(
    ("q", "error", "words"),
    [
        (None, TypeError, "q must be a real numeric array, got None"),
        ([None, 0.5], TypeError, "got \\[None, 0.5\\]"),
        ("0.5", TypeError, "got '0.5'"),
        (True, TypeError, "boolean"),
        (np.datetime64("2020"), TypeError, "datetime64"),
        (np.ma.array([0.5, 1.0], mask=[False, True]), TypeError, "masked array"),
        (1 + 0j, TypeError, "complex"),
        (10**400, ValueError, "beyond float64's range"),
    ],
)
def test_xi_refuses_what_is_no_real_number(q, error, words):
    # xi(None) gave nan, xi("0.5") 0.2556, xi(True) xi(1), and a masked entry was evaluated
    # as if unmasked (a review)
    with pytest.raises(error, match=words):
        Mixture({2: 1.0, 4: 0.3}).xi(q)


def test_xi_takes_large_python_integers_and_nan():
    m = Mixture({2: 1.0})
    assert m.xi([2**64, 0]).tolist() == [float(2**64) ** 2, 0.0]  # an object array of ints
    assert math.isnan(m.xi(float("nan")))  # documented: NaN gives NaN


@pytest.mark.parametrize("text", ["2:1_0", "2_0:1", "\uff12:1", "2:\u0661", "3:1.5\u00a0e1"])
def test_parse_reads_ascii_numbers_only(text):
    # Python's int() and float() read "1_0" as 10 and other scripts' digits as digits, so
    # a typo for "2:1.0" became gamma = 10 (a review)
    with pytest.raises(MixtureError, match="ASCII digits"):
        Mixture.parse(text)
    assert Mixture.parse(" 2 : 1.5e-1 , 4:+2").gammas == {2: 0.15, 4: 2.0}


def test_from_xi_overflow_names_the_coefficients_given():
    # the message showed only the gammas (1e+154), not the xi coefficient 1e308 the caller
    # passed (a review)
    with pytest.raises(MixtureError, match=r"xi coefficients gamma_p\^2 \{2: 1e\+308\}"):
        Mixture.from_xi({2: 1e308})


@pytest.mark.parametrize(
    ("text", "squared", "shown"),
    [
        ("2:1,4:0.0625", True, "q^2 + 0.0625 q^4"),
        ("1:0.5,3:1", False, "0.25 q + q^3"),
        ("2:0.3,3:0.7", True, "0.3 q^2 + 0.7 q^3"),  # gamma^2 = 0.30000000000000004
    ],
)
def test_xi_text_reads_back_as_the_polynomial_xi(text, squared, shown):
    # the text, read back term by term, evaluates to xi(q) (to its six digits)
    m = Mixture.parse(text, squared=squared)
    assert m.xi_text() == shown
    q = np.linspace(0.0, 1.0, 7)
    back = np.zeros_like(q)
    for term in shown.split(" + "):
        coeff, _, power = term.rpartition(" ")
        p = int(power.partition("^")[2] or 1)
        back += float(coeff or 1.0) * q**p
    np.testing.assert_allclose(back, m.xi(q), rtol=1e-6)


def test_from_dict_refuses_a_degree_given_twice_or_not_in_digits():
    # a user trial: {"2": 1.0, "02": 2.0} kept the last value without a word, while the
    # constructor and Mixture.parse refuse a degree given twice
    for data in ({"2": 1.0, "02": 2.0}, {2: 1.0, "2": 2.0}):
        with pytest.raises(MixtureError, match="degree p = 2 is given twice"):
            Mixture.from_dict(data)
    for key in ("٢", "0_2", "2.0", ""):
        with pytest.raises(MixtureError, match=f"must be written in digits, got {key!r}"):
            Mixture.from_dict({key: 1.0})
    assert Mixture.from_dict({"2": 1.0, " 4 ": 0.5}) == Mixture({2: 1.0, 4: 0.5})


@pytest.mark.parametrize("text", [b"2:1", 2, None])
def test_parse_takes_text_only_and_says_so_as_a_type_error(text):
    # a user trial: bytes were a plain MixtureError (a ValueError); a wrong type is both a
    # MixtureError and a TypeError (MixtureTypeError), as the constructor's are
    with pytest.raises(TypeError, match="mixture text must be a string"):
        Mixture.parse(text)
    with pytest.raises(MixtureError):
        Mixture.parse(text)
