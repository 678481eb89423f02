"""Which area each premise lies in, and the numeric attributes of the areas."""

from __future__ import annotations

import logging

import geopandas as gpd
import numpy as np
import pandas as pd
from pyproj import CRS

from ..config import Config
from ..data import Tables, planar_areas
from ..errors import InputError
from ._crs import check_coordinates, coordinate_columns, distance_crs, premise_crs

log = logging.getLogger(__name__)

__all__ = ["area_attributes", "area_positions", "premise_areas"]

_NONE = np.iinfo(np.int64).max


def _checked_areas(tables: Tables) -> gpd.GeoDataFrame:
    areas = tables.areas
    if areas is None or len(areas) == 0:
        raise InputError(
            table="areas", column=None, problem="has no areas", fix="give at least one area polygon"
        )
    if "area_id" not in areas.columns:
        raise InputError(
            table="areas",
            column="area_id",
            problem="is missing",
            fix="name the id column area_id, or map it with [columns.areas] area_id = ...",
        )
    if areas.crs is None:
        raise InputError(
            table="areas",
            column="geometry",
            problem="has no CRS",
            fix="save the areas in a format that keeps one (GeoPackage, GeoJSON, GeoParquet), "
            "or for WKT text in DuckDB set [data] areas_crs",
        )
    return areas


def _rank_by_id(areas: gpd.GeoDataFrame) -> np.ndarray:
    """Rank of each area (row) when the areas are sorted by ``area_id``: 0 for the first."""
    ids = areas["area_id"].reset_index(drop=True)
    try:
        order = ids.sort_values(kind="stable").index.to_numpy()
    except TypeError:  # mixed types: sort their text
        order = ids.astype(str).sort_values(kind="stable").index.to_numpy()
    rank = np.empty(len(ids), dtype=np.int64)
    rank[order] = np.arange(len(ids))
    return rank


def _rank_by_size(areas: gpd.GeoDataFrame) -> np.ndarray:
    """Rank of each area by its size, smallest first (ties: ``area_id`` order)."""
    by_id = _rank_by_id(areas)
    order = np.lexsort((by_id, planar_areas(areas.geometry)))
    rank = np.empty(len(order), dtype=np.int64)
    rank[order] = np.arange(len(order))
    return rank


def _swapped_hits(
    areas: gpd.GeoDataFrame, x: np.ndarray, y: np.ndarray, source: CRS, area_crs: CRS
) -> int:
    """How many of these premises would lie in an area with their two coordinates swapped."""
    points = gpd.GeoSeries.from_xy(y, x, crs=source)
    if not area_crs.equals(source):
        points = points.to_crs(area_crs)
    ok = np.isfinite(points.x.to_numpy()) & np.isfinite(points.y.to_numpy())
    hit, _ = areas.sindex.query(points[ok], predicate="intersects")
    return int(np.unique(hit).size)


def _best_rank(n: int, points: np.ndarray, ranks: np.ndarray) -> np.ndarray:
    """For each of ``n`` premises the smallest area rank among its matches, else ``_NONE``."""
    best = np.full(n, _NONE, dtype=np.int64)
    np.minimum.at(best, points, ranks)
    return best


def area_positions(tables: Tables, config: Config | None = None) -> np.ndarray:
    """Row position in ``tables.areas`` of the area holding each premise (see `premise_areas`)."""
    config = config or Config()
    areas = _checked_areas(tables)
    check_coordinates(tables)
    source = premise_crs(tables)
    customers = tables.customers
    n = len(customers)
    x = customers["x"].to_numpy(dtype=np.float64)
    y = customers["y"].to_numpy(dtype=np.float64)
    area_crs = CRS.from_user_input(areas.crs)
    points = gpd.GeoSeries.from_xy(x, y, crs=source)
    if not area_crs.equals(source):
        log.warning(
            "areas are in %s but premises in %s: premises reprojected to %s for the "
            "point-in-polygon join",
            area_crs.to_string(),
            source.to_string(),
            area_crs.to_string(),
        )
        points = points.to_crs(area_crs)
    rank = _rank_by_size(areas) if config.spatial.overlaps == "smallest" else _rank_by_id(areas)
    hit_point, hit_area = areas.sindex.query(points, predicate="intersects")
    best = _best_rank(n, hit_point, rank[hit_area])
    shared = int((np.bincount(hit_point, minlength=n) > 1).sum())
    if shared:
        log.info(
            "%d premise(s) lie in more than one area (on a shared boundary or where areas "
            "overlap); each takes the %s",
            shared,
            "smallest area"
            if config.spatial.overlaps == "smallest"
            else "area whose area_id sorts first",
        )
    outside = np.flatnonzero(best == _NONE)
    max_m = float(config.spatial.nearest_area_max_m)
    if outside.size and max_m > 0:
        best[outside] = _nearest_within(areas, rank, outside, x, y, source, config, max_m)
        taken = int((best[outside] != _NONE).sum())
        if taken:
            log.info(
                "%d premise(s) outside every area took the nearest area within %g m", taken, max_m
            )
        outside = np.flatnonzero(best == _NONE)
    if outside.size:
        within = f" and none is within {max_m:g} m" if max_m > 0 else ""
        swapped = _swapped_hits(areas, x[outside], y[outside], source, area_crs)
        if swapped * 2 >= outside.size:
            names = coordinate_columns(source).replace(", ", " and ")
            within += (
                f"; {swapped} of them would lie in an area with {names} swapped: check which "
                "column is which (and the mapping in [columns.customers])"
            )
        raise InputError(
            table="customers",
            column=coordinate_columns(source),
            problem=f"premise lies in no area{within}",
            count=int(outside.size),
            examples=customers["customer_id"].to_numpy()[outside[:5]],
            fix="add the missing area polygons or correct the coordinates, or set [spatial] "
            "nearest_area_max_m to give such premises the nearest area within that distance",
        ).with_source_names(config.columns)
    by_rank = np.empty(len(rank), dtype=np.int64)
    by_rank[rank] = np.arange(len(rank))
    return by_rank[best]


def _nearest_within(
    areas: gpd.GeoDataFrame,
    rank: np.ndarray,
    which: np.ndarray,
    x: np.ndarray,
    y: np.ndarray,
    source: CRS,
    config: Config,
    max_m: float,
) -> np.ndarray:
    """Rank of the nearest area within ``max_m`` metres (ties: lowest rank), else ``_NONE``."""
    metric = distance_crs(source, x, y, config.spatial.distance_crs)
    points = gpd.GeoSeries.from_xy(x[which], y[which], crs=source)
    if not metric.equals(source):
        points = points.to_crs(metric)
    metric_areas = areas if CRS.from_user_input(areas.crs).equals(metric) else areas.to_crs(metric)
    (hit_point, hit_area), dist = metric_areas.sindex.nearest(
        points, return_all=True, max_distance=max_m, return_distance=True
    )
    keep = dist <= max_m
    return _best_rank(len(which), hit_point[keep], rank[hit_area[keep]])


def premise_areas(tables: Tables, config: Config | None = None) -> pd.Series:
    """The area of each customer's premise.

    Each premise is joined to the area polygon that contains it (point in polygon, boundary
    included, in the areas' CRS; premises are reprojected there when their CRS differs, with a
    log line naming both). Areas whose interiors overlap are refused by `check_tables` unless
    ``[spatial] overlaps`` chooses a rule: ``"smallest"`` (a premise in several areas takes the
    smallest) or ``"first_id"``. A premise on a boundary shared by several areas takes the area
    whose ``area_id`` sorts first (under ``"smallest"``: the smallest), so the result does not
    depend on the order of the areas table. A premise in no area is an error (naming swapped
    coordinates when most such premises would lie in an area with x and y swapped), unless
    ``[spatial] nearest_area_max_m`` is positive: then it takes the nearest area within that
    many metres (measured in the CRS of `distance_crs`), and only premises farther than that
    from every area are an error.

    Parameters
    ----------
    tables
        Checked input tables; uses ``customers`` (``customer_id``, ``x``, ``y``), ``areas`` and
        ``premise_crs``.
    config
        Uses ``[spatial] nearest_area_max_m`` and ``distance_crs``.

    Returns
    -------
    pandas.Series
        ``area_id`` per customer, indexed by ``customer_id`` in the order of the customers
        table, named ``area_id``.

    Raises
    ------
    InputError
        If the areas have no CRS or no ``area_id``, if coordinates are missing, or if premises
        lie in no area (with their count and example ids).
    """
    positions = area_positions(tables, config)
    ids = tables.areas["area_id"].to_numpy()[positions]
    index = pd.Index(tables.customers["customer_id"], name="customer_id")
    return pd.Series(ids, index=index, name="area_id")


def area_attributes(tables: Tables) -> pd.DataFrame:
    """The numeric attributes of the areas (every numeric column but ``area_id``), as float32.

    One row per row of ``tables.areas`` (positional index). Text columns are not features and
    are left out, with a log line.
    """
    areas = _checked_areas(tables)
    columns = [c for c in areas.columns if c not in ("area_id", areas.geometry.name)]
    numeric = [c for c in columns if pd.api.types.is_numeric_dtype(areas[c])]
    other = [c for c in columns if c not in numeric]
    if other:
        log.info("area column(s) %s are not numeric and are not features", other)
    return pd.DataFrame(
        {c: areas[c].to_numpy(dtype=np.float32, na_value=np.nan) for c in numeric},
        index=np.arange(len(areas)),
    )
