"""The model: mixtures and the random polynomials built from them."""

from .hamiltonian import Hamiltonian
from .instance_file import load_instance
from .memory import available_memory, estimate_memory
from .mixture import MAX_DEGREE, Mixture

__all__ = [
    "MAX_DEGREE",
    "Hamiltonian",
    "Mixture",
    "available_memory",
    "estimate_memory",
    "load_instance",
]
