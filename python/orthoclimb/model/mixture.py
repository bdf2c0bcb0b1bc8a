"""Mixtures: the covariance function of a mixed p-spin random polynomial.

A mixture is a finite set of pairs (p, gamma_p) with 1 <= p <= 8 and gamma_p >= 0. Its mixture
polynomial is

    xi(q) = sum_p gamma_p^2 q^p,

and the random polynomial H built from it (see :class:`orthoclimb.Hamiltonian`) satisfies
E[H(x) H(y)] = n xi(<x, y>). The term p = 1 is a random external field.
"""

from __future__ import annotations

import math
import sys
from collections.abc import Iterable, Mapping
from decimal import Decimal
from typing import Any

import numpy as np

from ..errors import MixtureError, MixtureTypeError
from .arrays import digits, real_array

MAX_DEGREE = 8
"""Largest degree p the kernels support."""

# xi and its derivatives up to this order at q = 1 must be finite (the theory uses the third).
_CHECKED_DERIVATIVES = 3


def _check_degree(p: Any) -> int:
    if isinstance(p, bool) or not isinstance(p, (int, np.integer)):
        raise MixtureTypeError(f"degree p must be an integer in 1..{MAX_DEGREE}, got {p!r}")
    p = int(p)
    if not 1 <= p <= MAX_DEGREE:
        raise MixtureError(f"degree p must be in 1..{MAX_DEGREE}, got p = {p}")
    return p


_ROUNDS_TO_ZERO = "is too small: it rounds to 0 in float64; give 0 to drop the degree"
"""Why a nonzero weight that float64 reads as 0 is refused (it would drop its degree)."""


def _check_gamma(p: int, gamma: Any, what: str = "gamma") -> float:
    if isinstance(gamma, (bool, np.bool_, str, bytes, np.complexfloating)):
        # True would read as 1.0, "0.5" as 0.5 and a NumPy complex as its real part (float()
        # only warns): slips, not weights (Mixture.parse reads text)
        raise MixtureTypeError(f"{what} for p = {p} must be a real number, got {gamma!r}")
    try:
        value = float(gamma)
    except (TypeError, ValueError):
        raise MixtureTypeError(f"{what} for p = {p} must be a real number, got {gamma!r}") from None
    except OverflowError:  # an integer beyond float64
        raise MixtureError(
            f"{what} for p = {p} is beyond float64's range, got an integer of about"
            f" {digits(int(gamma))} digits"
        ) from None
    # Fraction(1, 10**400) or longdouble('1e-4000') becomes 0.0 (or -0.0 for a negative one):
    # the degree would vanish, or a negative weight pass, without a word
    if not math.isfinite(value) or value < 0 or (value == 0.0 and _negative(gamma)):
        raise MixtureError(f"{what} for p = {p} must be finite and >= 0, got {gamma!r}")
    if value == 0.0 and _nonzero(gamma):
        raise MixtureError(f"{what} for p = {p} {_ROUNDS_TO_ZERO}; got {gamma!r}")
    return value


def _nonzero(value: Any) -> bool:
    """Whether `value` (which float() turned into 0.0) is not zero itself."""
    try:
        return bool(value != 0)
    except (TypeError, ValueError):  # a type that cannot compare: float() is all we know
        return False


def _negative(value: Any) -> bool:
    """Whether `value` (which float() turned into 0.0 or -0.0) is below zero itself."""
    try:
        return bool(value < 0)
    except (TypeError, ValueError):
        return False


def _degree_key(key: object) -> object:
    """A degree as a mapping key: a string of ASCII digits ('2', as to_dict writes it; blanks
    around it allowed) as its int, anything else as it is (the constructor checks it); other
    text is a MixtureError."""
    if not isinstance(key, str):
        return key
    digits = key.strip()
    if not (digits.isascii() and digits.isdigit()):
        raise MixtureError(f"a degree must be written in digits, got {key!r}")
    return int(digits)


class Mixture:
    """A mixture {p: gamma_p}: degrees 1..8 with nonnegative weights gamma_p (not squared).

    Degrees whose gamma is exactly 0 are dropped (they contribute nothing). At least one
    gamma must be positive.

    >>> m = Mixture({2: 1.0, 4: 0.3})
    >>> m.degrees
    (2, 4)
    >>> float(m.xi(1.0))   # 1.0**2 + 0.3**2
    1.09
    """

    __slots__ = ("_gammas",)

    def __init__(self, gammas: Mapping[int, float] | Iterable[tuple[int, float]]):
        if isinstance(gammas, str):
            raise MixtureTypeError(
                f"a mixture is a mapping p -> gamma_p, got the text {gammas!r}; "
                f"Mixture.parse({gammas!r}) reads the p:gamma text form"
            )
        items = gammas.items() if isinstance(gammas, Mapping) else gammas
        checked: dict[int, float] = {}
        try:
            pairs = list(items)
        except TypeError:
            raise MixtureTypeError(
                f"a mixture is a mapping p -> gamma_p, got {type(gammas).__name__}"
            ) from None
        for pair in pairs:
            try:
                p_raw, g_raw = pair
            except (TypeError, ValueError):
                raise MixtureTypeError(
                    f"mixture entries are (p, gamma) pairs, got {pair!r}"
                ) from None
            p = _check_degree(p_raw)
            if p in checked:
                raise MixtureError(f"degree p = {p} is given twice")
            checked[p] = _check_gamma(p, g_raw)
            if not math.isfinite(checked[p] * checked[p]):
                raise MixtureError(
                    f"gamma for p = {p} is too large: its square, the coefficient of q^{p} in"
                    f" xi, overflows float64; got {g_raw!r}"
                )
            if 0.0 < checked[p] and checked[p] * checked[p] < sys.float_info.min:
                raise MixtureError(
                    f"gamma for p = {p} is too small: its square, the coefficient of q^{p} in"
                    f" xi, underflows float64 (below {sys.float_info.min:.3g}); give 0 to drop"
                    f" the degree; got {g_raw!r}"
                )
        kept = {p: g for p, g in sorted(checked.items()) if g > 0.0}
        if not kept:
            raise MixtureError(
                "a mixture needs at least one degree with gamma > 0, got "
                + (repr(dict(checked)) if checked else "an empty mixture")
            )
        for k in range(_CHECKED_DERIVATIVES + 1):
            # each gamma_p^2 is finite, but their sum or a derivative at q = 1 can overflow
            # (8:1e154 has xi''(1) = 56e308 = inf, and ALG came out NaN)
            total = sum(g * g * math.perm(p, k) for p, g in kept.items() if p >= k)
            if not math.isfinite(total):
                squares = {p: g * g for p, g in kept.items()}  # what from_xi was given
                raise MixtureError(
                    f"the gammas {kept!r} (xi coefficients gamma_p^2 {squares!r}) are too"
                    f" large: xi{chr(39) * k}(1) overflows float64;"
                    " scale them down (every energy scales with them: gammas times c, energies"
                    " times c)"
                )
        self._gammas = kept

    def __reduce__(self) -> tuple[Any, tuple[Any, ...]]:
        # every pickle protocol, 0 and 1 too (__slots__ without __getstate__ refused them)
        return (Mixture, (dict(self._gammas),))

    # -- constructors -------------------------------------------------------------------

    @classmethod
    def from_xi(cls, coeffs: Mapping[int, float]) -> Mixture:
        """Build from the coefficients of xi: a mapping p -> gamma_p^2 (each >= 0)."""
        if not isinstance(coeffs, Mapping):
            raise MixtureError(f"from_xi takes a mapping p -> gamma_p^2, got {coeffs!r}")
        gammas = {}
        for p, c in coeffs.items():
            p = _check_degree(p)
            c2 = _check_gamma(p, c, what="xi coefficient gamma_p^2")
            if 0.0 < c2 < sys.float_info.min:
                raise MixtureError(
                    f"xi coefficient gamma_p^2 for p = {p} is too small: below float64's"
                    f" smallest normal number {sys.float_info.min:.3g}; give 0 to drop the"
                    f" degree; got {c!r}"
                )
            gammas[p] = math.sqrt(c2)
        return cls(gammas)

    @classmethod
    def parse(cls, text: str, squared: bool = False) -> Mixture:
        """Parse the text form ``"2:1,4:0.3"`` (p:gamma pairs, comma separated).

        With ``squared=True`` the numbers are gamma_p^2 (the coefficients of xi).
        """
        if not isinstance(squared, (bool, np.bool_)):
            raise TypeError(f"squared must be True or False, got {squared!r}")
        if not isinstance(text, str):
            raise MixtureTypeError(f"mixture text must be a string, got {text!r}")
        pairs: dict[int, float] = {}
        body = text.strip()
        if not body:
            raise MixtureError("mixture text is empty; expected p:gamma pairs like '2:1,4:0.3'")
        for chunk in body.split(","):
            piece = chunk.strip()
            p_text, sep, g_text = piece.partition(":")
            if not sep or not p_text.strip() or not g_text.strip():
                raise MixtureError(
                    f"cannot read {piece!r} in mixture text {text!r}; expected p:gamma"
                    " pairs like '2:1,4:0.3'"
                )
            if "_" in piece or not piece.isascii():  # int() and float() take "1_0" as 10
                raise MixtureError(
                    f"cannot read {piece!r} in mixture text {text!r}: numbers are written with"
                    " ASCII digits, '.', 'e' and signs only (no '_' or other scripts' digits)"
                )
            try:
                p = int(p_text)
            except ValueError:
                raise MixtureError(
                    f"degree {p_text.strip()!r} in mixture text {text!r} is not an integer"
                ) from None
            try:
                g = float(g_text)
            except ValueError:
                raise MixtureError(
                    f"weight {g_text.strip()!r} in mixture text {text!r} is not a number"
                ) from None
            p = _check_degree(p)
            if not math.isfinite(g):  # '1e400' overflows to inf: name the text as written
                raise MixtureError(
                    f"weight {g_text.strip()!r} for p = {p} in mixture text {text!r} is not a"
                    " finite number"
                )
            exact = Decimal(g_text.strip()) if g == 0.0 else None  # only a zero reading
            if exact is not None and exact != 0:  # '1e-400' and '-1e-400' read as 0.0, -0.0
                problem = "must be >= 0" if exact < 0 else _ROUNDS_TO_ZERO
                raise MixtureError(
                    f"weight {g_text.strip()!r} for p = {p} in mixture text {text!r} {problem}"
                )
            if p in pairs:
                raise MixtureError(f"degree p = {p} is given twice in mixture text {text!r}")
            pairs[p] = g
        return cls.from_xi(pairs) if squared else cls(pairs)

    # -- properties ----------------------------------------------------------------------

    @property
    def degrees(self) -> tuple[int, ...]:
        """Degrees p with gamma_p > 0, increasing."""
        return tuple(self._gammas)

    @property
    def gammas(self) -> dict[int, float]:
        """A copy of the mapping p -> gamma_p."""
        return dict(self._gammas)

    @property
    def xi_coefficients(self) -> dict[int, float]:
        """The mapping p -> gamma_p^2 (the coefficients of xi)."""
        return {p: g * g for p, g in self._gammas.items()}

    @property
    def max_degree(self) -> int:
        """The largest degree P; kernels cost about n^P operations."""
        return max(self._gammas)

    @property
    def has_field(self) -> bool:
        """True when the mixture has a p = 1 (external field) term."""
        return 1 in self._gammas

    def xi(self, q: Any, derivative: int = 0) -> Any:
        """The mixture polynomial xi(q) = sum_p gamma_p^2 q^p or its derivative of the given
        order (0, 1, 2, ...), vectorized over ``q``. Returns a float for scalar ``q``. As a
        polynomial it is evaluated at any real q (outside [0, 1] too, NaN giving NaN); the
        theory functions, which need q in [0, 1], check that themselves."""
        if isinstance(derivative, bool) or not isinstance(derivative, (int, np.integer)):
            raise TypeError(f"derivative must be a nonnegative integer, got {derivative!r}")
        if derivative < 0:
            raise ValueError(f"derivative must be a nonnegative integer, got {derivative}")
        q_arr = np.asarray(real_array(q, "q"), dtype=np.float64)
        out = np.zeros_like(q_arr)
        for p, g in self._gammas.items():
            if derivative > p:
                continue
            falling = math.perm(p, derivative)  # p (p-1) ... (p-derivative+1)
            out = out + (g * g * falling) * q_arr ** (p - derivative)
        return float(out) if out.ndim == 0 else out

    # -- text and dict forms -------------------------------------------------------------

    def to_text(self) -> str:
        """The text form read by :meth:`parse` (``repr`` of each gamma, so it round-trips)."""
        return ",".join(f"{p}:{g!r}" for p, g in self._gammas.items())

    def xi_text(self) -> str:
        """xi(q) as a polynomial for people, "q^2 + 0.0625 q^4" (coefficients gamma_p^2 to six
        significant digits, a coefficient 1 left out): a mixture given by ``--xi`` reads as
        typed, where :meth:`to_text` gives its gammas."""
        terms = []
        for p, c in self.xi_coefficients.items():
            power = "q" if p == 1 else f"q^{p}"
            coeff = f"{c:.6g}"
            terms.append(power if coeff == "1" else f"{coeff} {power}")
        return " + ".join(terms)

    def to_dict(self) -> dict[str, float]:
        """JSON-friendly form: degree (as a string) -> gamma."""
        return {str(p): g for p, g in self._gammas.items()}

    @classmethod
    def from_dict(cls, data: Mapping[str, float]) -> Mixture:
        """Inverse of :meth:`to_dict`."""
        try:
            # keys as to_dict writes them ('2'); a float key such as 2.7 is refused by the
            # constructor, not truncated to 2; pairs, not a dict, so that '2' and '02' are
            # refused as one degree given twice (a user trial: the last one won)
            return cls([(_degree_key(k), v) for k, v in data.items()])
        except (AttributeError, ValueError, TypeError) as exc:
            if isinstance(exc, MixtureError):
                raise
            raise MixtureError(f"cannot read a mixture from {data!r}") from None

    def __repr__(self) -> str:
        return f"Mixture({self._gammas!r})"

    def __eq__(self, other: object) -> bool:
        return isinstance(other, Mixture) and self._gammas == other._gammas

    def __hash__(self) -> int:
        return hash(tuple(self._gammas.items()))

    # -- theory (thin wrappers around orthoclimb.theory, imported lazily) -----------------

    def full_rsb(self) -> Any:
        """The full-RSB criterion; see :func:`orthoclimb.theory.full_rsb`. Whether GS = ALG
        is predicted is its ``gs_equals_alg``: with a field, ``holds`` (concavity on all of
        (0, 1]) can be False while GS = ALG (only [q_hat, 1] matters, and q_hat = 1 makes the
        solution replica symmetric)."""
        from ..theory import full_rsb

        return full_rsb(self)

    def algorithmic_energy(self) -> float:
        """ALG, energy per spin; see :func:`orthoclimb.theory.algorithmic_energy`."""
        from ..theory import algorithmic_energy

        return algorithmic_energy(self)

    def algorithmic_threshold(self) -> float:
        """q_hat (0 without a field); see :func:`orthoclimb.theory.algorithmic_threshold`."""
        from ..theory import algorithmic_threshold

        return algorithmic_threshold(self)

    def path_energy(self, q: Any) -> Any:
        """Predicted energy per spin at radius sqrt(q); see
        :func:`orthoclimb.theory.path_energy`."""
        from ..theory import path_energy

        return path_energy(self, q)

    def hessian_edge(self, q: Any) -> Any:
        """2 sqrt(xi''(q)); see :func:`orthoclimb.theory.hessian_edge`."""
        from ..theory import hessian_edge

        return hessian_edge(self, q)

    def ground_state(self, tol: float = 1e-6, **kwargs: Any) -> Any:
        """Zero-temperature Parisi ground state to ``tol`` (absolute, energy per spin), the
        other options passed on; see :func:`orthoclimb.theory.ground_state` (the default is
        its ``DEFAULT_TOL``, written out: importing it here would be circular)."""
        from ..theory import ground_state

        return ground_state(self, tol, **kwargs)
