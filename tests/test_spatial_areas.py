"""Which area each premise lies in (`premise_areas`), against shapely's own predicates.

The reference for point in polygon is shapely's ``covers`` (boundary included) evaluated pair by
pair, with no spatial index; for the nearest area, shapely's ``distance``.
"""

from __future__ import annotations

import dataclasses
import logging

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from shapely.geometry import Point, Polygon, box

from lifecycle.config import Config, SpatialSettings
from lifecycle.errors import InputError
from lifecycle.spatial import premise_areas
from lifecycle.spatial._areas import area_attributes
from tests._builders import make_tables

CRS = "EPSG:32625"  # a UTM zone in metres; the coordinates are invented (open ocean)
X0, Y0 = 500_000.0, 4_400_000.0


def tables_with(points, areas: gpd.GeoDataFrame, *, crs: str = CRS):
    rows = [
        {"customer_id": f"C{i:03d}", "start_month": "2026-01", "x": float(x), "y": float(y)}
        for i, (x, y) in enumerate(points)
    ]
    return dataclasses.replace(make_tables(rows), areas=areas, premise_crs=crs)


def grid_areas(order=None) -> gpd.GeoDataFrame:
    """Four 1 km squares in a 2 × 2 grid, ids Q1..Q4, with two numeric attributes."""
    frame = gpd.GeoDataFrame(
        {
            "area_id": ["Q1", "Q2", "Q3", "Q4"],
            "rental_share": [0.1, 0.2, 0.3, 0.4],
            "flats": [10, 20, 30, 40],
            "area_name": ["Aldrevosk", "Brisquenna", "Corvallune", "Dunquessil"],  # coined
        },
        geometry=[
            box(X0, Y0, X0 + 1000, Y0 + 1000),
            box(X0 + 1000, Y0, X0 + 2000, Y0 + 1000),
            box(X0, Y0 + 1000, X0 + 1000, Y0 + 2000),
            box(X0 + 1000, Y0 + 1000, X0 + 2000, Y0 + 2000),
        ],
        crs=CRS,
    )
    return frame if order is None else frame.iloc[order].reset_index(drop=True)


def reference_area(point: Point, areas: gpd.GeoDataFrame):
    """The smallest area_id among the areas that cover the point (shapely, no index)."""
    hits = [a for a, g in zip(areas["area_id"], areas.geometry, strict=True) if g.covers(point)]
    return min(hits) if hits else None


@settings(max_examples=60, deadline=None)
@given(
    st.lists(
        st.tuples(st.integers(0, 8), st.integers(0, 8)), min_size=1, max_size=30
    ),  # a 250 m lattice: many premises on edges and corners
    st.permutations([0, 1, 2, 3]),
)
def test_point_in_polygon_matches_shapely_covers(cells, order):
    points = [(X0 + 250 * i, Y0 + 250 * j) for i, j in cells]
    areas = grid_areas(list(order))
    got = premise_areas(tables_with(points, areas))
    expected = [reference_area(Point(p), areas) for p in points]
    assert got.tolist() == expected
    assert got.index.name == "customer_id" and got.name == "area_id"


def test_boundary_goes_to_the_first_area_id_whatever_the_table_order():
    on_edge = (X0 + 1000, Y0 + 500)  # between Q1 and Q2
    corner = (X0 + 1000, Y0 + 1000)  # all four meet
    for order in ([0, 1, 2, 3], [3, 2, 1, 0], [1, 3, 0, 2]):
        got = premise_areas(tables_with([on_edge, corner], grid_areas(order)))
        assert got.tolist() == ["Q1", "Q1"]


def test_premises_in_no_area_are_listed():
    points = [(X0 + 10, Y0 + 10), (X0 - 50, Y0 + 10), (X0 + 2500, Y0 + 2500)]
    with pytest.raises(InputError) as info:
        premise_areas(tables_with(points, grid_areas()))
    err = info.value
    assert (err.table, err.column, err.count) == ("customers", "x, y", 2)
    assert err.examples == ["C001", "C002"]
    assert "nearest_area_max_m" in str(err)


def test_nearest_area_within_the_configured_distance():
    # 30 m west of Q1's west edge; 70 m south of Q2; 700 m beyond Q4's corner
    points = [(X0 - 30, Y0 + 400), (X0 + 1500, Y0 - 70), (X0 + 2500, Y0 + 2500)]
    areas = grid_areas()
    nearest = [min(g.distance(Point(p)) for g in areas.geometry) for p in points]  # shapely
    assert nearest == pytest.approx([30.0, 70.0, 500 * 2**0.5])
    config = Config(spatial=SpatialSettings(nearest_area_max_m=800.0))
    assert premise_areas(tables_with(points, areas), config).tolist() == ["Q1", "Q2", "Q4"]
    config = Config(spatial=SpatialSettings(nearest_area_max_m=50.0))
    with pytest.raises(InputError) as info:
        premise_areas(tables_with(points, areas), config)
    assert info.value.count == 2 and info.value.examples == ["C001", "C002"]
    assert "none is within 50 m" in str(info.value)


def test_nearest_area_tie_goes_to_the_first_area_id():
    # 10 m south of the point where Q1 and Q2 meet: equally near both
    config = Config(spatial=SpatialSettings(nearest_area_max_m=20.0))
    for order in ([0, 1, 2, 3], [1, 0, 3, 2]):
        got = premise_areas(tables_with([(X0 + 1000, Y0 - 10)], grid_areas(order)), config)
        assert got.tolist() == ["Q1"]


def test_crs_mismatch_is_reprojected_with_a_log_line(caplog):
    rng = np.random.default_rng(4)
    points = np.c_[X0 + rng.uniform(20, 1980, 50), Y0 + rng.uniform(20, 1980, 50)]
    same = premise_areas(tables_with(points, grid_areas()))
    lonlat = grid_areas().to_crs("EPSG:4326")
    with caplog.at_level(logging.WARNING, logger="lifecycle.spatial"):
        moved = premise_areas(tables_with(points, lonlat))
    assert "EPSG:4326" in caplog.text and "EPSG:32625" in caplog.text
    # Reprojected squares have slightly curved edges in lon/lat; premises ≥ 20 m from every
    # edge keep their area.
    assert moved.tolist() == same.tolist()


def test_areas_without_crs_or_id():
    areas = grid_areas()
    with pytest.raises(InputError, match="has no CRS"):
        premise_areas(tables_with([(X0 + 1, Y0 + 1)], areas.set_crs(None, allow_override=True)))
    with pytest.raises(InputError) as info:
        premise_areas(tables_with([(X0 + 1, Y0 + 1)], areas.rename(columns={"area_id": "zone"})))
    assert info.value.column == "area_id"


def test_numeric_attributes_become_float32_features():
    attrs = area_attributes(tables_with([(X0 + 1, Y0 + 1)], grid_areas()))
    assert list(attrs.columns) == ["rental_share", "flats"]  # area_name is text
    assert (attrs.dtypes == np.float32).all()
    np.testing.assert_array_equal(attrs["flats"], [10, 20, 30, 40])
    with_gap = grid_areas()
    with_gap["flats"] = pd.array([1, None, 3, 4], dtype="Int64")
    assert np.isnan(area_attributes(tables_with([(X0, Y0)], with_gap))["flats"][1])


def test_holes_are_not_inside():
    ring = Polygon(
        [(X0, Y0), (X0 + 900, Y0), (X0 + 900, Y0 + 900), (X0, Y0 + 900)],
        holes=[
            [(X0 + 300, Y0 + 300), (X0 + 600, Y0 + 300), (X0 + 600, Y0 + 600), (X0 + 300, Y0 + 600)]
        ],
    )
    inner = box(X0 + 300, Y0 + 300, X0 + 600, Y0 + 600)
    areas = gpd.GeoDataFrame(
        {"area_id": ["RING", "CORE"], "rental_share": [0.5, 0.7]}, geometry=[ring, inner], crs=CRS
    )
    points = [(X0 + 100, Y0 + 100), (X0 + 450, Y0 + 450)]
    assert not ring.covers(Point(points[1])) and inner.covers(Point(points[1]))  # shapely
    assert premise_areas(tables_with(points, areas)).tolist() == ["RING", "CORE"]


def test_areas_in_lon_lat_are_sized_in_metres_without_a_library_warning():
    """Areas kept in lon/lat (as GeoJSON keeps them): the overlap check and the "smallest"
    rule size them in metres (geopandas warns on areas taken in square degrees, and the test
    configuration turns that warning into an error), with the same results as in metres."""
    from lifecycle.data import planar_areas
    from lifecycle.data._areas import overlapping_pairs

    big = box(X0, Y0, X0 + 1000, Y0 + 1000)
    small = box(X0 + 500, Y0 + 500, X0 + 900, Y0 + 900)  # inside the big one: they overlap
    metric = gpd.GeoDataFrame(
        {"area_id": ["A-BIG", "B-SMALL"], "rental_share": [0.2, 0.6]},
        geometry=[big, small],
        crs=CRS,
    )
    lonlat = metric.to_crs("EPSG:4326")
    # A 1 km square measured back in its own UTM zone: 1,000,000 m² to the zone's scale error
    # (0.9996–1.0010 a side, so within 0.2 % of the area; common practice for UTM).
    sizes = planar_areas(lonlat.geometry)
    np.testing.assert_allclose(sizes, [1_000_000.0, 160_000.0], rtol=2e-3)
    assert overlapping_pairs(lonlat) == overlapping_pairs(metric) == [(0, 1)]
    points = [(X0 + 700, Y0 + 700), (X0 + 100, Y0 + 100)]
    smallest = Config(spatial=SpatialSettings(overlaps="smallest"))
    got = premise_areas(tables_with(points, lonlat), smallest)
    assert got.tolist() == premise_areas(tables_with(points, metric), smallest).tolist()
    assert got.tolist() == ["B-SMALL", "A-BIG"]
