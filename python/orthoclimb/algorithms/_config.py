"""The configuration every result carries, so that a run can be reproduced."""

from __future__ import annotations

from typing import Any

from ..model.hamiltonian import Hamiltonian
from ..runtime import code_digest, get_num_threads, kernel_path

__all__ = ["base_config"]


def base_config(ham: Hamiltonian, method: str, **params: Any) -> dict[str, Any]:
    """Instance description (mixture, n, disorder seed, correlation, dtype), method and its
    parameters, package version and ``code`` (:func:`~orthoclimb.runtime.code_digest`: which
    code, where the version did not change), thread count and kernel instruction path."""
    from .. import __version__

    mixture = ham.mixture
    return {
        "method": method,
        "mixture": mixture.to_dict() if mixture is not None else None,
        "n": ham.n,
        "disorder_seed": ham.seed,
        "correlated_with": list(ham.correlated_with) if ham.correlated_with else None,
        "dtype": ham.dtype,
        "degrees": list(ham.degrees),
        **params,
        "version": __version__,
        "code": code_digest(),
        "threads": get_num_threads(),
        "kernel_path": kernel_path(),
    }
