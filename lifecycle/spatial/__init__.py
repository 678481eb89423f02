"""Spatial context of each premise, as known at the end of the previous month."""

from ._pairs import neighbour_pairs
from ._shrinkage import gamma_poisson_rates

__all__ = ["gamma_poisson_rates", "neighbour_pairs"]
