"""Study specification: the grid mixtures x sizes n x seeds x methods (with options).

A study is read from command-line flags (:func:`spec_from_flags`) or from a TOML file
(:func:`spec_from_toml`) laid out as ``TOML_EXAMPLE`` shows (``orthoclimb sweep --help``
prints it). Each task is one (mixture, n, seed, method + options); see
:mod:`orthoclimb.studies.tasks`. Energies throughout are per spin, H(x)/n on the unit
sphere, maximized.
"""

from __future__ import annotations

import decimal
import math
import numbers
import sys
import unicodedata
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from ..algorithms._checks import MAX_STEPS
from ..model import Mixture

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - Python 3.10
    import tomli as tomllib

__all__ = [
    "DEFAULT_EXPONENT",
    "TOML_EXAMPLE",
    "MAX_TASKS",
    "METHOD_OPTIONS",
    "MethodSpec",
    "MixtureSpec",
    "StudySpec",
    "parse_methods",
    "parse_seeds",
    "parse_sizes",
    "spec_from_flags",
    "spec_from_toml",
]

DEFAULT_EXPONENT = 2.0 / 3.0

TOML_EXAMPLE = """\
exponent = 0.6666666666666666     # finite-size law e(n) = e_inf + a n^(-exponent)
sizes = [100, 200, 400]           # optional when every mixture has its own
seeds = "0-19"                    # or a list of integers
dtype = "float64"                 # optional: float32 halves the memory

[[mixture]]                       # one block per mixture
name = "rugged"
gammas = { 3 = 1.0 }              # p -> gamma_p; or xi = { 3 = 1.0 } (p -> gamma_p^2)
# sizes = [50, 100]               # optional: this mixture's own sizes

[[method]]                        # one block per method
name = "hessian"                  # hessian | gradient | anneal
steps = 100                       # hessian: steps ("auto"), tol, polish, start
                                  # gradient: max_iter, gtol
                                  # anneal: steps, eta, t_start, t_end, polish
"""

# method -> option -> (type, default). Defaults follow orthoclimb.hessian_ascent /
# orthoclimb.gradient_ascent / orthoclimb.langevin_anneal (its geometric schedule from t_start
# to t_end in steps); an integer option whose default is "auto" also takes "auto"
# (Hessian-ascent steps: orthoclimb.algorithms.auto_steps(n), chosen per task); a text option
# takes one of its CHOICES.
METHOD_OPTIONS: dict[str, dict[str, tuple[type, Any]]] = {
    "hessian": {
        "steps": (int, "auto"),
        "tol": (float, 1e-3),
        "polish": (bool, True),
        "start": (str, "auto"),
    },
    "gradient": {"max_iter": (int, 2000), "gtol": (float, 1e-7)},
    "anneal": {
        "steps": (int, 400),
        "eta": (float, 0.02),
        "t_start": (float, 1.0),
        "t_end": (float, 0.01),
        "polish": (bool, True),
    },
}
CHOICES = {"start": ("auto", "top", "random")}
# Hessian ascent's start before the option existed: a study.json without it was run so, and
# the option is left out of a configuration (and of its tasks' ids) where it has this value,
# so such a study keeps its task ids and still resumes (given this value).
LEGACY_START = "random"
MAX_SIZE = 100_000


def start_used(start: str, mixture: Mixture) -> str:
    """The start Hessian ascent makes on ``mixture`` under the option ``start``: "top" along
    the top eigenvector of Hess H(0), or "random" (a random direction; with a field the first
    stage sets the start, which counts as "random", the value the option had before); see
    :func:`orthoclimb.algorithms.hessian_ascent.resolve_start`."""
    from ..algorithms.hessian_ascent import resolve_start

    return resolve_start(start, mixture.degrees, mixture.has_field)


def canonical_options(method: MethodSpec, mixtures: list[Mixture]) -> dict[str, Any]:
    """The options of ``method`` as a configuration records them: Hessian ascent's start as
    the start it makes (:func:`start_used`) where that is the same on every one of
    ``mixtures`` ("auto" and "top" on a degree-2 mixture are one run), left out where that is
    a random start (as before the option existed), so a study or task whose runs did not
    change keeps its configuration and id; as given where the mixtures differ."""
    opts = dict(method.options)
    if "start" in opts:
        used = {start_used(opts["start"], m) for m in mixtures}
        if used == {LEGACY_START}:
            del opts["start"]
        elif len(used) == 1:
            opts["start"] = used.pop()
    return opts


# A study writes one row file per task and holds its task list in memory: a grid beyond this
# is almost surely a typo (say "0-1000000000"), and would exhaust memory before starting.
MAX_TASKS = 100_000


def _int_token(text: str, what: str, whole: str) -> int:
    """An integer written in ASCII digits (with an optional minus sign); int() alone also read
    '1_0' as 10 and other scripts' digits, which Mixture.parse refuses (a user trial)."""
    body = text.strip()
    digits = body[1:] if body.startswith("-") else body
    if not (digits.isascii() and digits.isdigit()):
        raise ValueError(f"{what} {body!r} in {whole!r} is not an integer")
    return int(body)


def _given_int(value: object, what: str) -> int:
    """An integer of a list (Python or NumPy; not bool) as a Python int, or a TypeError."""
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        raise TypeError(f"{what} must be integers, got {value!r}")
    return int(value)


def _given_ints(value: object, what: str, example: str) -> list[int]:
    """The integers of a list given for ``what`` (seeds, sizes), or a TypeError naming the
    value: not a list (None), or bytes, whose items are byte values (b"0-1" read as the seeds
    48, 45, 49, a review)."""
    wrong = TypeError(f"{what} must be text like {example!r} or a list of integers, got {value!r}")
    if isinstance(value, (bytes, bytearray, memoryview)):
        raise wrong
    try:
        items = list(value)
    except TypeError:
        raise wrong from None
    return [_given_int(s, what) for s in items]


def parse_seeds(text: str | Iterable[int]) -> tuple[int, ...]:
    """Seeds from text like ``"0-19"``, ``"1,5,9"`` or ``"0-4,10-12"`` (ranges inclusive),
    or from a list of integers. Refuses empty, negative, reversed (``"5-2"``) and repeated seeds."""
    if isinstance(text, str):
        body = text.strip()
        if not body:
            raise ValueError("seeds are empty; expected e.g. '0-19' or '1,5,9'")
        seeds: list[int] = []
        for chunk in body.split(","):
            piece = chunk.strip()
            if not piece:
                raise ValueError(f"empty item in seeds {text!r}; expected e.g. '0-19' or '1,5,9'")
            lo_text, dash, hi_text = piece.partition("-")
            if dash:
                if not lo_text.strip():
                    raise ValueError(f"seeds must be >= 0; cannot read {piece!r} in {text!r}")
                lo = _int_token(lo_text, "seed", text)
                hi = _int_token(hi_text, "seed", text)
                if hi < 0:  # '0--2': its reversal '-2-0' would be refused too
                    raise ValueError(f"seeds must be >= 0, got {hi} in the range {piece!r}")
                if hi < lo:
                    where = "" if piece == body else f" in {text!r}"
                    raise ValueError(
                        f"seed range {piece!r}{where} is reversed (end {hi} < start {lo});"
                        f" write '{hi}-{lo}'"
                    )
                if len(seeds) + (hi - lo + 1) > MAX_TASKS:
                    raise ValueError(
                        f"seeds {text!r} give more than {MAX_TASKS} seeds (the range {piece!r}"
                        f" alone has {hi - lo + 1}); a study has at most {MAX_TASKS} tasks:"
                        " split it into several studies"
                    )
                seeds.extend(range(lo, hi + 1))
            else:
                seeds.append(_int_token(piece, "seed", text))
    else:
        seeds = _given_ints(text, "seeds", "0-19")
        if not seeds:
            raise ValueError("the list of seeds is empty")
    bad = [s for s in seeds if s < 0 or s >= 2**63]
    if bad:
        raise ValueError(
            f"seeds of a study must be in [0, 2^63) (its tables store them as 64-bit signed"
            f" integers), got {bad[0]}"
        )
    seen: set[int] = set()
    for s in seeds:
        if s in seen:
            raise ValueError(f"seed {s} is given twice")
        seen.add(s)
    return tuple(seeds)


def parse_exponent(text: str) -> float:
    """A positive finite-size exponent k (of e_inf + a n^(-k)) from text: a number ("0.5") or a
    fraction ("2/3", read as float(2) / float(3)); a ValueError names anything else."""
    body = str(text).strip()
    bad = ValueError(f"expected a positive number or a fraction such as 2/3, got {text!r}")
    if len(body) > 64:  # no exponent needs more; bounds the work on hostile text
        raise bad
    try:
        if "/" in body:
            top, _, bottom = body.partition("/")
            value = float(top) / float(bottom)
        else:
            value = float(body)
    except (ValueError, ZeroDivisionError, OverflowError):
        raise bad from None
    if not (math.isfinite(value) and value > 0):
        raise ValueError(f"the exponent must be positive and finite, got {text!r}")
    return value


def parse_sizes(text: str | Iterable[int]) -> tuple[int, ...]:
    """Sizes n from text like ``"100,200,400"`` or a list; each 2 <= n <= 100000, distinct."""
    if isinstance(text, str):
        if not text.strip():
            raise ValueError("sizes are empty; expected e.g. '100,200,400'")
        sizes = [_int_token(t, "size", text) for t in text.split(",")]
    else:
        sizes = _given_ints(text, "sizes", "100,200,400")
    if not sizes:
        raise ValueError("the list of sizes is empty")
    for s in sizes:
        if not 2 <= s <= MAX_SIZE:
            raise ValueError(f"size n must be in [2, {MAX_SIZE}], got {s}")
    if len(set(sizes)) != len(sizes):
        raise ValueError(f"a size is given twice in {list(sizes)}")
    return tuple(sorted(sizes))


@dataclass(frozen=True)
class MethodSpec:
    """An algorithm and its options (every option filled in with its default)."""

    name: str
    options: tuple[tuple[str, Any], ...]

    @classmethod
    def make(
        cls, name: str, options: Mapping[str, Any] | None = None, *, stored: bool = False
    ) -> MethodSpec:
        """The method ``name`` with ``options`` checked and defaults filled in. ``stored``: the
        options come from an existing study.json, which is read as written even where a new
        configuration would now be refused (an anneal that heats), so it can still be
        reported."""
        if name not in METHOD_OPTIONS:
            raise ValueError(f"unknown method {name!r}; choose from {sorted(METHOD_OPTIONS)}")
        allowed = METHOD_OPTIONS[name]
        given = dict(options or {})
        unknown = sorted(set(given) - set(allowed))
        if unknown:
            raise ValueError(
                f"method {name!r} has no option {unknown[0]!r}; its options are {sorted(allowed)}"
            )
        out = {}
        for key, (kind, default) in allowed.items():
            if key == "start" and stored:
                default = LEGACY_START  # a stored study without it ran from random starts
            value = given.get(key, default)
            if kind is str:
                if value not in CHOICES[key]:
                    raise ValueError(
                        f"option {key} of {name} must be one of {list(CHOICES[key])}, got {value!r}"
                    )
            elif kind is bool:
                if not isinstance(value, bool):
                    raise TypeError(f"option {key} of {name} must be true/false, got {value!r}")
            elif kind is int:
                auto = default == "auto" and value == "auto"
                if not auto and (
                    isinstance(value, bool) or not isinstance(value, int) or value < 1
                ):
                    also = " or 'auto'" if default == "auto" else ""
                    raise ValueError(
                        f"option {key} of {name} must be an integer >= 1{also}, got {value!r}"
                    )
                # max_iter had no bound before: a stored study is read as written
                bounded = key == "steps" or (key == "max_iter" and not stored)
                if bounded and not auto and value > MAX_STEPS:
                    raise ValueError(
                        f"option {key} of {name} must be at most {MAX_STEPS:_}, got {value}"
                    )
            else:
                if isinstance(value, bool) or not isinstance(value, (int, float)):
                    raise TypeError(f"option {key} of {name} must be a number, got {value!r}")
                value = float(value)
                if not (math.isfinite(value) and value > 0):
                    raise ValueError(f"option {key} of {name} must be positive, got {value!r}")
            out[key] = value
        if name == "anneal" and not stored and out["t_end"] > out["t_start"]:
            raise ValueError(
                f"options of anneal: t_end = {out['t_end']} is above t_start ="
                f" {out['t_start']}; the schedule cools from t_start to t_end, so t_end must"
                " be <= t_start"
            )
        return cls(name, tuple(sorted(out.items())))

    @property
    def label(self) -> str:
        return self.name

    def to_dict(self) -> dict[str, Any]:
        return {"name": self.name, **dict(self.options)}


# Unicode categories a mixture's name may not hold: control characters (NUL, tab, newline,
# escape, DEL, ...) and line and paragraph separators, which break the table's lines.
UNPRINTABLE = frozenset({"Cc", "Zl", "Zp"})


@dataclass(frozen=True)
class MixtureSpec:
    """A named mixture; ``gammas`` as sorted (p, gamma_p) pairs; ``sizes`` overrides the
    study's sizes for this mixture (higher degrees cost n^P, so they often need smaller n)."""

    name: str
    gammas: tuple[tuple[int, float], ...]
    sizes: tuple[int, ...] | None = None

    @classmethod
    def make(
        cls, mixture: Mixture, name: str | None = None, sizes: Iterable[int] | str | None = None
    ) -> MixtureSpec:
        from ..theory._checks import check_mixture

        mixture = check_mixture(mixture, "MixtureSpec.make")  # a dict: AttributeError before
        if name is not None and not (isinstance(name, str) and name.strip()):
            # a number was stored as the rows' mixture, which the table then refused
            raise ValueError(f"a mixture's name must be a non-empty text, got {name!r}")
        if name is not None and any(unicodedata.category(c) in UNPRINTABLE for c in name):
            # "a\x00b" was printed raw into the table and the report (a review)
            raise ValueError(
                f"a mixture's name must not hold control characters or line breaks, got {name!r}"
            )
        own = None if sizes is None else parse_sizes(sizes)
        return cls(name or mixture.to_text(), tuple(sorted(mixture.gammas.items())), own)

    @property
    def mixture(self) -> Mixture:
        return Mixture(dict(self.gammas))

    def to_dict(self) -> dict[str, Any]:
        out: dict[str, Any] = {"name": self.name, "gammas": {str(p): g for p, g in self.gammas}}
        if self.sizes is not None:
            out["sizes"] = list(self.sizes)
        return out


@dataclass(frozen=True)
class StudySpec:
    """The full study grid. ``to_dict`` is the canonical configuration stored in study.json.

    ``sizes`` are the sizes of every mixture without sizes of its own; it may be empty
    (``()``) when each mixture has its own.
    """

    mixtures: tuple[MixtureSpec, ...]
    sizes: tuple[int, ...]
    seeds: tuple[int, ...]
    methods: tuple[MethodSpec, ...]
    exponent: float = DEFAULT_EXPONENT
    dtype: str = "float64"

    def __post_init__(self) -> None:
        if not self.mixtures:
            raise ValueError("a study needs at least one mixture")
        if not self.methods:
            raise ValueError("a study needs at least one method")
        names = [m.name for m in self.mixtures]
        if len(set(names)) != len(names):
            raise ValueError(f"mixture names must be distinct, got {names}")
        if self.sizes:  # checked and sorted as a parsed list is (tasks run small n first)
            object.__setattr__(self, "sizes", parse_sizes(self.sizes))
        for spec in self.mixtures:
            if not (spec.sizes or self.sizes):
                # such a mixture had no tasks at all, silently
                raise ValueError(
                    f"mixture {spec.name!r} has no sizes of its own and the study gives none:"
                    " give the study's sizes (sizes = [100, 200]) or this mixture's own"
                )
        for i, spec in enumerate(self.mixtures):
            # a task's id hashes the gammas and n, not the name: two names for one mixture at
            # a common size gave two tasks one id, and the second name's row was refused on
            # every rerun. One mixture under two names at distinct own sizes is fine
            for other in self.mixtures[:i]:
                common = set(spec.sizes or self.sizes) & set(other.sizes or self.sizes)
                if other.gammas == spec.gammas and common:
                    raise ValueError(
                        f"mixtures {other.name!r} and {spec.name!r} are the same mixture"
                        f" ({spec.mixture.to_text()}) at n = {min(common)}: their tasks would"
                        " be the same; keep one name for it at each size"
                    )
        for method in self.methods:
            for m in self.mixtures if "start" in dict(method.options) else ():
                try:
                    start_used(dict(method.options)["start"], m.mixture)
                except ValueError as exc:  # start = 'top' without a degree-2 term
                    raise ValueError(
                        f"hessian on {m.name!r}: {exc}; 'auto' starts at random there"
                    ) from None
        labels = [m.label for m in self.methods]
        if len(set(labels)) != len(labels):
            raise ValueError(f"each method may appear once, got {labels}")
        if not (math.isfinite(self.exponent) and self.exponent > 0):
            raise ValueError(f"the extrapolation exponent must be positive, got {self.exponent}")
        if self.dtype not in ("float64", "float32"):
            raise ValueError(f"dtype must be float64 or float32, got {self.dtype!r}")
        count = self.num_tasks
        if count > MAX_TASKS:
            raise ValueError(
                f"this study has {count} tasks (mixtures x sizes x methods x seeds); at most"
                f" {MAX_TASKS} are allowed (one row file each): split it into several studies"
            )

    @property
    def num_tasks(self) -> int:
        """Number of tasks, counted without building them."""
        sizes = sum(len(m.sizes or self.sizes) for m in self.mixtures)
        return sizes * len(self.methods) * len(self.seeds)

    def to_dict(self) -> dict[str, Any]:
        return {
            "mixtures": [m.to_dict() for m in self.mixtures],
            "sizes": list(self.sizes),
            "seeds": list(self.seeds),
            "methods": [
                {"name": m.name, **canonical_options(m, [x.mixture for x in self.mixtures])}
                for m in self.methods
            ],
            "exponent": self.exponent,
            "dtype": self.dtype,
        }

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> StudySpec:
        try:
            mixtures = tuple(
                MixtureSpec.make(Mixture.from_dict(m["gammas"]), m["name"], m.get("sizes"))
                for m in data["mixtures"]
            )
            methods = tuple(
                MethodSpec.make(m["name"], {k: v for k, v in m.items() if k != "name"}, stored=True)
                for m in data["methods"]
            )
            return cls(
                mixtures,
                parse_sizes(data["sizes"]) if data.get("sizes") else (),
                parse_seeds(data["seeds"]),
                methods,
                float(data.get("exponent", DEFAULT_EXPONENT)),
                str(data.get("dtype", "float64")),
            )
        except KeyError as exc:
            raise ValueError(f"study configuration lacks the key {exc.args[0]!r}") from None

    def tasks(self) -> list:
        """All tasks, in the order mixture, method, n (small first), seed."""
        from .tasks import Task

        return [
            Task(mix, n, seed, method, self.dtype)
            for mix in self.mixtures
            for n in (mix.sizes or self.sizes)
            for method in self.methods
            for seed in self.seeds
        ]


def method_names(text: str) -> list[str]:
    """The names in ``"hessian,gradient"``, as written (checked by :func:`parse_methods`);
    none in blank text. An empty item (``"hessian,,gradient"``) is refused, as in seeds and
    sizes, and so is anything but text (a list of names: AttributeError before)."""
    if not isinstance(text, str):
        raise TypeError(f"methods must be text like 'hessian,gradient', got {text!r}")
    if not text.strip():
        return []
    names = [t.strip() for t in text.split(",")]
    if not all(names):
        raise ValueError(f"empty item in methods {text!r}; expected e.g. 'hessian,gradient'")
    return names


def parse_methods(text: str, options: Mapping[str, Mapping[str, Any]] | None = None):
    """Methods from ``"hessian,gradient"``; ``options`` maps a method name to its options."""
    names = method_names(text)
    if not names:
        raise ValueError("no method given; choose from " + ", ".join(sorted(METHOD_OPTIONS)))
    options = options or {}
    return tuple(MethodSpec.make(name, options.get(name)) for name in names)


def spec_from_flags(
    gammas: list[str] | None,
    xi: list[str] | None,
    sizes: str | Iterable[int],
    seeds: str | Iterable[int],
    methods: str,
    method_options: Mapping[str, Mapping[str, Any]] | None = None,
    exponent: float | str = DEFAULT_EXPONENT,
    dtype: str = "float64",
) -> StudySpec:
    """Build a study from the ``sweep`` flags: ``gammas`` and ``xi`` lists of mixture texts
    (each adds a mixture; None for none), ``sizes`` and ``seeds`` text or lists of integers (as
    :func:`parse_sizes` and :func:`parse_seeds` read them), ``methods`` text like
    ``"hessian,gradient"``, ``method_options`` a mapping of a method's name to its options,
    ``exponent`` a number or text as :func:`parse_exponent` reads it ("2/3"). An argument of
    another type is a TypeError naming it and the value."""
    given = [(f"--gammas {t}", Mixture.parse(t)) for t in _mixture_texts(gammas, "gammas")]
    given += [(f"--xi {t}", Mixture.parse(t, squared=True)) for t in _mixture_texts(xi, "xi")]
    if not given:
        raise ValueError("give at least one mixture with --gammas (or --xi), or a TOML file")
    for i, (flag, mix) in enumerate(given):  # the names would clash: say which flags did it
        for other, same in given[:i]:
            if same == mix:
                raise ValueError(f"{other} and {flag} give the same mixture ({mix.to_text()})")
    mixes = [MixtureSpec.make(mix) for _, mix in given]
    _check_option_types(method_options, exponent)
    return StudySpec(
        tuple(mixes),
        parse_sizes(sizes),
        parse_seeds(seeds),
        parse_methods(methods, method_options),
        parse_exponent(exponent) if isinstance(exponent, str) else float(exponent),
        dtype=dtype,
    )


def _check_option_types(method_options: object, exponent: object) -> None:
    """A TypeError naming ``method_options`` of :func:`spec_from_flags` when it is no mapping
    (or None), and ``exponent`` when it is neither a real number (Fraction and Decimal
    included) nor text (a flag: True was read as the exponent 1)."""
    if method_options is not None and not isinstance(method_options, Mapping):
        raise TypeError(
            "method_options must map a method's name to its options, like"
            f" {{'hessian': {{'steps': 50}}}}, got {method_options!r}"
        )
    number = (str, numbers.Real, decimal.Decimal)
    if isinstance(exponent, (bool, np.bool_)) or not isinstance(exponent, number):
        raise TypeError(f"exponent must be a number or text like '2/3', got {exponent!r}")


def _mixture_texts(texts: object, what: str) -> list[str]:
    """The mixture texts given for ``what`` (gammas, xi) to :func:`spec_from_flags`: a list
    (or tuple) of texts, one per mixture, or None for none; a TypeError names anything else
    (one text was read character by character, a review)."""
    if texts is None:
        return []
    if not isinstance(texts, (list, tuple)) or not all(isinstance(t, str) for t in texts):
        raise TypeError(
            f"{what} must be a list of mixture texts, one per mixture (like ['3:1',"
            f" '2:1,4:0.25']), or None, got {texts!r}"
        )
    return list(texts)


def _toml_mixture(entry: Any, i: int) -> MixtureSpec:
    if not isinstance(entry, dict):
        raise ValueError(f"[[mixture]] entry {i} must be a table")
    has_g, has_xi = "gammas" in entry, "xi" in entry
    if has_g == has_xi:
        raise ValueError(f"[[mixture]] entry {i} needs exactly one of 'gammas' or 'xi'")
    table = entry["gammas"] if has_g else entry["xi"]
    if not isinstance(table, dict):
        raise ValueError(f"[[mixture]] entry {i}: write gammas/xi as a table like {{ 3 = 1.0 }}")
    # keys are text: int() would also read "1_0" as 10 and fold "03" into 3, losing a gamma
    bad = [k for k in table if not (k.isascii() and k.isdigit())]
    if bad:
        raise ValueError(f"[[mixture]] entry {i}: degrees must be integers, got {bad[0]!r}")
    pairs = {int(k): v for k, v in table.items()}
    if len(pairs) < len(table):
        twice = sorted(table, key=int)
        raise ValueError(f"[[mixture]] entry {i}: a degree is given twice among {twice}")
    mix = Mixture(pairs) if has_g else Mixture.from_xi(pairs)
    unknown = sorted(set(entry) - {"name", "gammas", "xi", "sizes"})
    if unknown:
        raise ValueError(f"[[mixture]] entry {i} has an unknown key {unknown[0]!r}")
    try:
        return MixtureSpec.make(mix, entry.get("name"), entry.get("sizes"))
    except ValueError as exc:
        raise ValueError(f"[[mixture]] entry {i}: {exc}") from None


def _toml_tables(data: Mapping[str, Any], key: str) -> list:
    """The array of tables ``[[key]]`` of a study file; a ValueError names anything else
    (``mixture = 5`` was "'int' object is not iterable", a review)."""
    value = data[key]
    if not isinstance(value, list):
        single = " (a single table [" + key + "])" if isinstance(value, dict) else ""
        raise ValueError(
            f"'{key}' must be an array of tables, one [[{key}]] block per {key}, got"
            f" {value!r}{single}"
        )
    return value


def spec_from_toml(path: str | Path) -> StudySpec:
    """Read a study from a TOML file (format in the module doc). Errors name the file."""
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except OSError as exc:
        raise ValueError(f"cannot read the study file {str(p)!r}: {exc.strerror}") from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ValueError(f"malformed TOML in {str(p)!r}: {exc}") from None
    known = {"exponent", "sizes", "seeds", "mixture", "method", "dtype"}
    unknown = sorted(set(data) - known)
    if unknown:
        raise ValueError(f"{str(p)!r}: unknown key {unknown[0]!r}; known keys {sorted(known)}")
    how = {
        "seeds": 'seeds = "0-19"',
        "mixture": "a table [[mixture]] with gammas = { 3 = 1.0 }",
        "method": 'a table [[method]] with name = "hessian" (one per method)',
    }
    for key in ("seeds", "mixture", "method"):  # sizes: may come with each mixture
        if key not in data:
            raise ValueError(f"{str(p)!r}: missing key {key!r}; add {how[key]}")
    try:
        mixes = tuple(_toml_mixture(e, i) for i, e in enumerate(_toml_tables(data, "mixture")))
        methods = []
        for i, entry in enumerate(_toml_tables(data, "method")):
            if not isinstance(entry, dict) or "name" not in entry:
                raise ValueError(f"[[method]] entry {i} needs a 'name'")
            opts = {k: v for k, v in entry.items() if k != "name"}
            methods.append(MethodSpec.make(entry["name"], opts))
        exponent = data.get("exponent", DEFAULT_EXPONENT)
        wrong = ValueError(
            f"'exponent' must be a number or a fraction such as \"2/3\", got {exponent!r}"
        )
        if isinstance(exponent, str):  # "2/3", as --exponent takes it (a user trial)
            try:
                exponent = parse_exponent(exponent)
            except ValueError as exc:
                raise ValueError(f"{wrong} ({exc})") from None
        if isinstance(exponent, bool) or not isinstance(exponent, (int, float)):
            raise wrong
        return StudySpec(
            mixes,
            parse_sizes(data["sizes"]) if "sizes" in data else (),
            parse_seeds(data["seeds"]),
            tuple(methods),
            float(exponent),
            str(data.get("dtype", "float64")),
        )
    except (ValueError, TypeError) as exc:
        raise ValueError(f"in study file {str(p)!r}: {exc}") from None
