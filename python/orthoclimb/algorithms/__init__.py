"""Algorithms that climb H on the unit sphere, and how to check them against the theory.

Units and sign: energy per spin e(x) = H(x)/n at unit vectors x; we maximize.

* :func:`hessian_ascent` -- the Hessian-ascent method (Subag 2018, arXiv:1812.04588) with a
  per-step path table compared with ``path_energy`` and ``hessian_edge``; a field stage up to
  q_hat with a p = 1 term. :func:`stepwise_limit` -- the n -> infinity energy of a path of K
  points, below ALG by about c/K.
* :func:`polish` -- Riemannian gradient ascent to a near-critical point, with the local-maximum
  check :func:`tangent_spectrum`.
* :func:`gradient_ascent`, :func:`langevin_anneal` -- baselines.
* :func:`stability` -- overlap of the outputs on instances correlated at level rho.
* :class:`Result`, :func:`load_result` -- results and their files (JSON + .npz, checksummed).
"""

from .baselines import geometric_schedule, gradient_ascent, langevin_anneal
from .hessian_ascent import auto_steps, hessian_ascent, hessian_moves, stepwise_limit
from .polish import polish, tangent_spectrum
from .result import FORMAT_VERSION, Result, load_result
from .stability import StabilityResult, stability

__all__ = [
    "FORMAT_VERSION",
    "Result",
    "StabilityResult",
    "auto_steps",
    "geometric_schedule",
    "gradient_ascent",
    "hessian_ascent",
    "hessian_moves",
    "langevin_anneal",
    "load_result",
    "polish",
    "stability",
    "stepwise_limit",
    "tangent_spectrum",
]
