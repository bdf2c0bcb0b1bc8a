"""The model: mixtures and the random polynomials built from them."""

from .mixture import MAX_DEGREE, Mixture

__all__ = ["MAX_DEGREE", "Mixture"]
