"""What the theory predicts for a mixture: the numbers a run is compared with.

Units and sign everywhere: energy per spin e = H(x)/n on the unit sphere, maximization.

* :func:`full_rsb` -- the full-RSB criterion (concavity of xi''^(-1/2) on (0, 1], arXiv:1812.04588).
* :func:`algorithmic_energy`, :func:`algorithmic_threshold` -- ALG and q_hat.
* :func:`path_energy`, :func:`hessian_edge` -- the predicted energy and top tangent eigenvalue at
  radius sqrt(q).
* :func:`ground_state` -- the zero-temperature Parisi formula (Chen-Sen form), minimized over step
  functions with exact integrals; :func:`parisi_functional` evaluates it.
* :func:`threshold_energy`, :func:`complexity`, :func:`complexity_ground_state` -- pure-model
  complexity of Auffinger, Ben Arous and Cerny.
"""

from .algorithmic import algorithmic_energy, algorithmic_threshold, hessian_edge, path_energy
from .complexity import complexity, complexity_ground_state, threshold_energy
from .criterion import FullRSBVerdict, concavity_numerator, full_rsb
from .parisi import GroundState, ground_state, parisi_functional, parisi_gradient

__all__ = [
    "FullRSBVerdict",
    "GroundState",
    "algorithmic_energy",
    "algorithmic_threshold",
    "complexity",
    "complexity_ground_state",
    "concavity_numerator",
    "full_rsb",
    "ground_state",
    "hessian_edge",
    "parisi_functional",
    "parisi_gradient",
    "path_energy",
    "threshold_energy",
]
