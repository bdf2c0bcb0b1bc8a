"""How stable an algorithm is to a small change of the disorder.

For the instance H of ``seed`` and, at each rho, the instance H_rho whose Gaussians are
rho g(seed) + sqrt(1 - rho^2) g(other_seed) coefficient by coefficient
(``Hamiltonian.sample(..., correlated_with=(seed, rho))``; E[H(x) H_rho(y)] = rho n xi(<x,y>)),
run the same algorithm (same algorithm seed) and report the overlap <x, x_rho> of the two
outputs (both unit vectors, so the overlap is in [-1, 1]). A stable algorithm has
overlap -> 1 as rho -> 1; a deterministic algorithm gives exactly 1 at rho = 1, where the two
instances coincide.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..model.hamiltonian import Hamiltonian
from ..model.memory import normalize_dtype
from ..model.mixture import Mixture
from ._checks import check_flag, check_seed
from .result import Result, _plain

__all__ = ["StabilityResult", "stability"]

_METHODS = ("hessian", "gradient", "anneal")
# The default other_seed is seed XOR this (the 64-bit golden-ratio constant, common practice
# for spreading integers): far from every small seed, so no seed's independent part is
# another seed's base instance.
_OTHER_SEED_MASK = 0x9E3779B97F4A7C15


@dataclass
class StabilityResult:
    """Overlaps <x, x_rho> of the outputs on the base instance and on each correlated one.

    ``rhos``, ``overlaps``, ``energies`` (per spin on H_rho) are NumPy arrays in the order given;
    ``energy`` is the base instance's energy per spin; ``config`` the run's description.
    """

    rhos: np.ndarray
    overlaps: np.ndarray
    energies: np.ndarray
    energy: float
    config: dict[str, Any]
    seconds: float
    results: list[Result] = field(default_factory=list, repr=False)

    def to_dict(self) -> dict[str, Any]:
        return _plain(
            {
                "rhos": self.rhos,
                "overlaps": self.overlaps,
                "energies": self.energies,
                "energy": self.energy,
                "config": self.config,
                "seconds": self.seconds,
            }
        )


def _resolve(algorithm: Any, options: dict[str, Any]) -> tuple[Callable[..., Result], str]:
    if isinstance(algorithm, str):
        from .baselines import gradient_ascent, langevin_anneal
        from .hessian_ascent import hessian_ascent

        table = {"hessian": hessian_ascent, "gradient": gradient_ascent, "anneal": langevin_anneal}
        if algorithm not in table:
            raise ValueError(
                f"algorithm must be one of {_METHODS} or a callable, got {algorithm!r}"
            )
        fn = table[algorithm]
        return (lambda ham: fn(ham, **options)), algorithm
    if callable(algorithm):
        if options:
            return (lambda ham: algorithm(ham, **options)), getattr(algorithm, "__name__", "?")
        return algorithm, getattr(algorithm, "__name__", "?")
    raise TypeError(
        f"algorithm must be a method name or a callable ham -> Result, got {algorithm!r}"
    )


def stability(
    algorithm: Any,
    mixture: Mixture,
    n: int,
    seed: int,
    rhos: Sequence[float],
    other_seed: int | None = None,
    dtype: str = "float64",
    keep_results: bool = False,
    start_seed: int | None = None,
    **options: Any,
) -> StabilityResult:
    """Run ``algorithm`` on the instance of ``seed`` and on instances correlated with it.

    ``algorithm`` is "hessian", "gradient", "anneal" or a callable ham -> Result; ``options``
    are passed to it (e.g. ``steps=100``). ``seed`` is the disorder seed; a named method gets
    ``start_seed`` (default 0) as its own ``seed`` (its random start or noise, the same for
    every instance; Hessian ascent on a mixture with a degree-2 term and no field starts along
    each instance's own top eigenvector of Hess H(0), with the seed's sign), while a callable
    chooses its own (giving ``start_seed`` with one is a
    TypeError rather than a silently unused value). ``rhos`` are correlations in [-1, 1]
    (checked by ``Hamiltonian.sample``); ``other_seed`` (default seed XOR 0x9E3779B97F4A7C15, must
    differ from ``seed``) drives the independent part. Instances are built one at a time.
    """
    if not isinstance(mixture, Mixture):
        raise TypeError(f"mixture must be an orthoclimb.Mixture, got {type(mixture).__name__}")
    seed = check_seed(seed)
    dtype = normalize_dtype(dtype)  # "float32" for np.float32 too, so to_dict stays JSON
    keep_results = check_flag(keep_results, "keep_results")  # "no" was taken as true
    if isinstance(algorithm, str):
        start = 0 if start_seed is None else start_seed
        options = {**options, "seed": check_seed(start, "start_seed")}
    elif start_seed is not None:
        raise TypeError(
            "start_seed is for the named methods; a callable algorithm chooses its own start"
        )
    # seed + 1 made the independent part of seed s the base instance of seed s + 1, so
    # results over consecutive seeds were not independent (a review)
    other = seed ^ _OTHER_SEED_MASK if other_seed is None else check_seed(other_seed, "other_seed")
    if other == seed:
        raise ValueError(
            f"other_seed must differ from seed ({seed}): the two parts must be independent"
        )
    bad = TypeError(f"rhos must be a sequence of numbers, got {rhos!r}")
    if isinstance(rhos, (str, bytes)):  # "10" ran with rhos 1.0 and 0.0, its characters
        raise bad
    try:
        given = list(rhos)  # once: a generator is read a single time
    except TypeError:
        raise bad from None
    if any(isinstance(r, (bool, np.bool_)) for r in given):
        raise bad
    try:
        rho_list = [float(r) for r in given]
    except (TypeError, ValueError):
        raise bad from None
    except OverflowError:  # an integer beyond float64
        raise ValueError("correlation rho must be in [-1, 1], got a larger integer") from None
    if not rho_list:
        raise ValueError("rhos is empty")
    for r in rho_list:
        if not (math.isfinite(r) and -1.0 <= r <= 1.0):
            raise ValueError(f"correlation rho must be in [-1, 1], got {r}")
    run, name = _resolve(algorithm, options)
    start = time.perf_counter()
    base = run(Hamiltonian.sample(mixture, n, seed, dtype=dtype))
    overlaps, energies, kept = [], [], [base]
    for r in rho_list:
        ham = Hamiltonian.sample(mixture, n, other, dtype=dtype, correlated_with=(seed, r))
        res = run(ham)
        del ham
        if not isinstance(res, Result):
            raise TypeError(
                f"the algorithm must return an orthoclimb Result, got {type(res).__name__}"
            )
        # unit vectors: |<x, y>| <= 1 up to rounding (1 + 2e-16 was seen in float32)
        overlaps.append(float(np.clip(np.dot(base.x, res.x), -1.0, 1.0)))
        energies.append(res.energy)
        if keep_results:
            kept.append(res)
    config = {
        "algorithm": name,
        "options": _plain({k: v for k, v in options.items() if not callable(v)}),
        "mixture": mixture.to_dict(),
        "n": int(n),
        "seed": seed,
        "other_seed": other,
        "dtype": dtype,
        "base_config": base.config,
    }
    return StabilityResult(
        np.array(rho_list),
        np.array(overlaps),
        np.array(energies),
        base.energy,
        config,
        time.perf_counter() - start,
        kept if keep_results else [],
    )
