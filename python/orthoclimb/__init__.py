"""orthoclimb: mixed p-spin random polynomials on the sphere, fast kernels, and the theory
to check optimizers against.

Conventions (see the README): H(x) = sum_p H_p(x) with E[H(x) H(y)] = n xi(<x, y>); points live
on the unit sphere |x| = 1; the reported figure is the energy per spin H(x)/n; we maximize.
"""

from . import errors
from ._core import __version__ as _core_version
from .model import MAX_DEGREE, Mixture

__version__ = "0.1.0"

__all__ = ["MAX_DEGREE", "Mixture", "errors", "__version__"]
