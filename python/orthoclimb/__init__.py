"""orthoclimb: mixed p-spin random polynomials on the sphere, fast kernels, and the theory
to check optimizers against.

Conventions (see the README): H(x) = sum_p H_p(x) with E[H(x) H(y)] = n xi(<x, y>); points live
on the unit sphere |x| = 1; the reported figure is the energy per spin H(x)/n; we maximize.
"""

from . import errors, reference, theory
from .model import MAX_DEGREE, Hamiltonian, Mixture, available_memory, estimate_memory
from .runtime import get_num_threads, kernel_path, set_num_threads
from .theory import algorithmic_energy, full_rsb, ground_state, hessian_edge, path_energy

__version__ = "0.1.0"

__all__ = [
    "MAX_DEGREE",
    "Hamiltonian",
    "Mixture",
    "__version__",
    "algorithmic_energy",
    "available_memory",
    "errors",
    "estimate_memory",
    "full_rsb",
    "get_num_threads",
    "ground_state",
    "hessian_edge",
    "kernel_path",
    "path_energy",
    "reference",
    "set_num_threads",
    "theory",
]
