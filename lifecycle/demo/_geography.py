"""The invented district: area polygons and premises clustered along streets.

The district is a rectangle in a projected metric CRS (UTM zone 25N, open ocean). Areas are the
Voronoi cells of seeded centres, clipped to the rectangle. Premises sit along short street
segments grouped into settlement quarters, with some blocks of flats sharing one coordinate, so
that a 400 m neighbourhood holds a few dozen to a few hundred premises.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import shapely

from . import _params as P

_STEMS = (
    "Aldrevosk", "Brisquenna", "Corvallune", "Dunquessil", "Elvrathen", "Fernovask", "Grellantor",
    "Hallowquine", "Istravell", "Jonquivar", "Korrimvale", "Lessivarn", "Mortquellan", "Nevristow",
    "Osquarrow", "Pellinvask", "Quorrenby", "Rastlewyn", "Sorvennick", "Trevasquel", "Ulvassen",
    "Vosquarry", "Wyvrenoth", "Yssolmere",
)  # fmt: skip
# Coined stems (no real place is meant); the suffixes are common words.
_SUFFIXES = ("Quay", "Rise", "Green", "Fields", "Row", "Hill", "Strand", "Cross")


@dataclass(frozen=True)
class District:
    """Areas and premises of the district.

    Attributes
    ----------
    bounds
        ``(xmin, ymin, xmax, ymax)`` of the district rectangle, metres in `CRS`.
    area_id, area_name
        Text id (``A01`` …) and invented name of each area.
    rental_share
        Share of rented homes in each area, in [0, 1].
    polygons
        shapely polygons of the areas (coordinates on a 1 cm grid).
    premise_x, premise_y
        Premise coordinates (rounded to 1 cm), each strictly inside one area and at least 1 m
        from every area boundary.
    premise_area
        Index into the area arrays of each premise.
    """

    bounds: tuple[float, float, float, float]
    area_id: np.ndarray
    area_name: np.ndarray
    rental_share: np.ndarray
    polygons: np.ndarray
    premise_x: np.ndarray
    premise_y: np.ndarray
    premise_area: np.ndarray


def build_district(customers: int, rng: np.random.Generator) -> District:
    """Draw the district for a portfolio of about ``customers`` customers."""
    scale = np.sqrt(customers / P.REFERENCE_CUSTOMERS)
    x0, y0 = P.DISTRICT_ORIGIN
    width = round(P.DISTRICT_SIZE_AT_REFERENCE[0] * scale, 2)
    height = round(P.DISTRICT_SIZE_AT_REFERENCE[1] * scale, 2)
    bounds = (x0, y0, x0 + width, y0 + height)

    centres = _spread_points(P.N_AREAS, bounds, rng)
    polygons = _voronoi_cells(centres, bounds)
    area_name = _area_names(P.N_AREAS, rng)
    area_id = np.array([f"A{i + 1:02d}" for i in range(P.N_AREAS)], dtype=object)

    # Renting concentrates around the district's harbour town (an invented point near one
    # corner); further out, owner-occupiers dominate.
    town = np.array([x0 + 0.3 * width, y0 + 0.65 * height])
    cx = shapely.get_x(shapely.centroid(polygons))
    cy = shapely.get_y(shapely.centroid(polygons))
    dist = np.hypot(cx - town[0], cy - town[1]) / max(width, height)
    rental = 0.08 + 0.5 * np.exp(-((dist / 0.3) ** 2)) + rng.normal(0.0, 0.06, P.N_AREAS)
    rental_share = np.round(np.clip(rental, 0.03, 0.9), 3)

    n_premises = int(np.ceil(P.PREMISES_PER_CUSTOMER * customers))
    px, py, parea = _premises(n_premises, bounds, polygons, scale, rng)
    return District(
        bounds=bounds,
        area_id=area_id,
        area_name=area_name,
        rental_share=rental_share,
        polygons=polygons,
        premise_x=px,
        premise_y=py,
        premise_area=parea,
    )


def _spread_points(n: int, bounds, rng: np.random.Generator) -> np.ndarray:
    """``n`` seeded points in ``bounds``, no two closer than a fraction of the mean spacing."""
    xmin, ymin, xmax, ymax = bounds
    min_gap = 0.5 * np.sqrt((xmax - xmin) * (ymax - ymin) / n)
    points: list[tuple[float, float]] = []
    while len(points) < n:
        cand = rng.uniform((xmin, ymin), (xmax, ymax), size=(4 * n, 2))
        for x, y in cand:
            if all((x - a) ** 2 + (y - b) ** 2 >= min_gap**2 for a, b in points):
                points.append((x, y))
                if len(points) == n:
                    break
        min_gap *= 0.9  # relax if the rectangle is crowded
    return np.array(points)


def _voronoi_cells(centres: np.ndarray, bounds) -> np.ndarray:
    """Voronoi cells of ``centres`` clipped to ``bounds``, in the order of ``centres``."""
    box = shapely.box(*bounds)
    cells = shapely.get_parts(shapely.voronoi_polygons(shapely.multipoints(centres), extend_to=box))
    cells = shapely.set_precision(shapely.intersection(cells, box), grid_size=0.01)
    points = shapely.points(centres)
    ordered = np.empty(len(centres), dtype=object)
    for cell in cells:
        inside = np.flatnonzero(shapely.contains(cell, points))
        ordered[inside[0]] = cell
    return ordered


def _area_names(n: int, rng: np.random.Generator) -> np.ndarray:
    names = [f"{stem} {suffix}" for stem in _STEMS for suffix in _SUFFIXES]
    pick = rng.choice(len(names), size=n, replace=False)
    return np.array([names[i] for i in pick], dtype=object)


def _premises(n: int, bounds, polygons: np.ndarray, scale: float, rng: np.random.Generator):
    """``n`` premises along streets of settlement quarters, each well inside one area."""
    xmin, ymin, xmax, ymax = bounds
    # One quarter around every area's centre (so that no area is empty) and more at random.
    n_quarters = max(len(polygons), round(P.QUARTERS_AT_REFERENCE * scale**2))
    extra = n_quarters - len(polygons)
    anchor = shapely.point_on_surface(polygons)
    qx = np.concatenate([shapely.get_x(anchor), rng.uniform(xmin, xmax, extra)])
    qy = np.concatenate([shapely.get_y(anchor), rng.uniform(ymin, ymax, extra)])
    # Each quarter has 3–7 straight streets passing within a few hundred metres of its centre.
    n_streets = rng.integers(3, 8, n_quarters)
    quarter = np.repeat(np.arange(n_quarters), n_streets)
    sx = qx[quarter] + rng.normal(0.0, 300.0, quarter.size)
    sy = qy[quarter] + rng.normal(0.0, 300.0, quarter.size)
    angle = rng.uniform(0.0, np.pi, quarter.size)
    length = rng.uniform(400.0, 1600.0, quarter.size)
    quarter_weight = rng.gamma(4.0, 1.0, n_quarters)  # some quarters are busier than others
    street_weight = quarter_weight[quarter] * length
    street_weight /= street_weight.sum()

    xs: list[np.ndarray] = []
    ys: list[np.ndarray] = []
    total = 0
    while total < n:
        want = int(1.3 * (n - total)) + 16
        street = rng.choice(street_weight.size, size=want, p=street_weight)
        along = rng.uniform(-0.5, 0.5, want) * length[street]
        across = rng.normal(0.0, 12.0, want)
        cos, sin = np.cos(angle[street]), np.sin(angle[street])
        x = sx[street] + along * cos - across * sin
        y = sy[street] + along * sin + across * cos
        # About one premise in ten is a block of flats: 4–16 homes at one coordinate.
        flats = rng.random(want) < 0.1
        units = np.where(flats, rng.integers(4, 17, want), 1)
        x = np.round(np.repeat(x, units), 2)
        y = np.round(np.repeat(y, units), 2)
        keep = (x > xmin + 1.0) & (x < xmax - 1.0) & (y > ymin + 1.0) & (y < ymax - 1.0)
        xs.append(x[keep])
        ys.append(y[keep])
        total += int(keep.sum())
    x = np.concatenate(xs)
    y = np.concatenate(ys)

    area = np.full(x.size, -1, dtype=np.int64)
    inside_count = np.zeros(x.size, dtype=np.int64)
    for i, polygon in enumerate(polygons):
        inside = shapely.contains_xy(polygon, x, y)
        area[inside] = i
        inside_count += inside
    points = shapely.points(x, y)
    boundaries = shapely.boundary(polygons)
    clear = np.ones(x.size, dtype=bool)
    ok = inside_count == 1
    clear[ok] = shapely.distance(points[ok], boundaries[area[ok]]) >= 1.0
    good = np.flatnonzero(ok & clear)[:n]
    if good.size < n:  # vanishingly unlikely; draw more rather than return fewer
        ex, ey, ea = _premises(n - good.size, bounds, polygons, scale, rng)
        return (
            np.concatenate([x[good], ex]),
            np.concatenate([y[good], ey]),
            np.concatenate([area[good], ea]),
        )
    return x[good], y[good], area[good]
