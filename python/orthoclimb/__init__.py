"""orthoclimb: mixed p-spin random polynomials on the sphere, fast kernels, and the theory
to check optimizers against.

Conventions (see the README): H(x) = sum_p H_p(x) with E[H(x) H(y)] = n xi(<x, y>); points live
on the unit sphere |x| = 1; the reported figure is the energy per spin H(x)/n; we maximize.
"""

from . import algorithms, errors, reference, theory
from .algorithms import (
    Result,
    gradient_ascent,
    hessian_ascent,
    langevin_anneal,
    load_result,
    polish,
    stability,
)
from .model import (
    MAX_DEGREE,
    Hamiltonian,
    Mixture,
    available_memory,
    estimate_memory,
    load_instance,
)
from .runtime import get_num_threads, kernel_path, one_blas_thread, set_num_threads
from .theory import algorithmic_energy, full_rsb, ground_state, hessian_edge, path_energy

__version__ = "0.2.0"

__all__ = [
    "MAX_DEGREE",
    "Hamiltonian",
    "Mixture",
    "Result",
    "__version__",
    "algorithmic_energy",
    "algorithms",
    "available_memory",
    "errors",
    "estimate_memory",
    "full_rsb",
    "get_num_threads",
    "gradient_ascent",
    "ground_state",
    "hessian_ascent",
    "hessian_edge",
    "kernel_path",
    "langevin_anneal",
    "load_instance",
    "load_result",
    "one_blas_thread",
    "path_energy",
    "polish",
    "reference",
    "set_num_threads",
    "stability",
    "theory",
]
