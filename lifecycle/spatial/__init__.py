"""Spatial context of each premise, as known at the end of the previous month.

`add_spatial_context` appends it to the panel: the numeric attributes of the premise's area,
the area's shrunk local move rate and, per product and radius, how many customers nearby hold
the product. The parts are usable on their own: `premise_areas` (area per customer, e.g. for
forecasts and maps by area), `local_move_rates`, `nearby_counts` (counts within a radius for
every premise and month), `neighbour_pairs` and `gamma_poisson_rates`; `distance_crs` says in
which projected CRS distances are measured.
"""

from ._areas import area_attributes, area_positions, premise_areas
from ._context import (
    SharedContext,
    add_spatial_context,
    adoption_columns,
    check_context_names,
    checked_radii,
    radius_label,
)
from ._crs import distance_crs, project_premises
from ._move_rate import local_move_rates
from ._pairs import neighbour_pairs
from ._shrinkage import gamma_poisson_rates
from ._sweep import nearby_counts

__all__ = [
    "SharedContext",
    "add_spatial_context",
    "adoption_columns",
    "area_attributes",
    "area_positions",
    "check_context_names",
    "checked_radii",
    "distance_crs",
    "gamma_poisson_rates",
    "local_move_rates",
    "nearby_counts",
    "neighbour_pairs",
    "premise_areas",
    "project_premises",
    "radius_label",
]
