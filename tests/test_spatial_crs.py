"""Where distances are measured: lon/lat premises go to a UTM zone, and distances there agree
with pyproj's geodesic on the WGS 84 ellipsoid (``pyproj.Geod(ellps="WGS84").inv``, the
reference) to within 0.5 % at neighbourhood scales. All places are open ocean: no real place.
"""

from __future__ import annotations

import dataclasses
import logging

import geopandas as gpd
import numpy as np
import pytest
from pyproj import CRS, Geod
from scipy.spatial.distance import pdist
from shapely.geometry import box

from lifecycle.config import Config, SpatialSettings
from lifecycle.errors import InputError, UsageError
from lifecycle.panel import build_panel
from lifecycle.spatial import add_spatial_context, distance_crs
from lifecycle.spatial._crs import project_premises
from tests._builders import make_tables

GEOD = Geod(ellps="WGS84")


def lonlat_tables(lon, lat, *, starts=None, uptakes=()):
    n = len(lon)
    starts = starts or ["2026-01"] * n
    rows = [
        {"customer_id": f"P{i:03d}", "start_month": s, "x": float(a), "y": float(b)}
        for i, (a, b, s) in enumerate(zip(lon, lat, starts, strict=True))
    ]
    tables = make_tables(rows, uptakes=list(uptakes), products=("fibre_plus",))
    pad = 0.5
    areas = gpd.GeoDataFrame(
        {"area_id": ["A"], "rental_share": [0.3]},
        geometry=[box(min(lon) - pad, min(lat) - pad, max(lon) + pad, max(lat) + pad)],
        crs="EPSG:4326",
    )
    return dataclasses.replace(tables, areas=areas, premise_crs="EPSG:4326")


@pytest.mark.parametrize(
    ("lon0", "lat0", "epsg"),
    [
        (-35.0, 40.0, 32625),  # mid-Atlantic, zone 25 north
        (-30.0, 62.0, 32626),  # high latitude, on a zone edge: lon −30 starts zone 26
        (-15.0, -30.0, 32728),  # South Atlantic, zone 28 south
        (-36.05, 45.0, 32624),  # 2.95° east of zone 24's central meridian (−39°)
    ],
)
def test_lonlat_distances_agree_with_pyproj_geodesic(lon0, lat0, epsg):
    rng = np.random.default_rng(abs(int(lon0 * 100 + lat0)))
    # points within about 2 km of the centre
    lon = lon0 + rng.uniform(-0.02, 0.02, 40) / np.cos(np.radians(lat0))
    lat = lat0 + rng.uniform(-0.015, 0.015, 40)
    tables = lonlat_tables(lon, lat)
    x, y, crs = project_premises(tables)
    assert crs.to_epsg() == epsg
    ours = pdist(np.c_[x, y])
    i, j = np.triu_indices(len(lon), k=1)
    _, _, reference = GEOD.inv(lon[i], lat[i], lon[j], lat[j])  # pyproj geodesic, metres
    assert ours.min() > 0
    np.testing.assert_allclose(ours, reference, rtol=0.005)


def test_nearby_counts_from_lonlat_match_geodesic_counts():
    rng = np.random.default_rng(5)
    lon0, lat0 = -33.0, 47.0
    radius = 400.0
    lon, lat = [], []
    for a, b in zip(
        lon0 + rng.uniform(-0.01, 0.01, 200) / np.cos(np.radians(lat0)),
        lat0 + rng.uniform(-0.008, 0.008, 200),
        strict=True,
    ):
        # keep a point only if no kept point is within 1 % of the radius of the boundary
        _, _, d = GEOD.inv(np.full(len(lon), a), np.full(len(lon), b), lon, lat)
        if len(lon) < 60 and np.all(np.abs(np.asarray(d) - radius) > 0.01 * radius):
            lon.append(a)
            lat.append(b)
    lon, lat = np.array(lon), np.array(lat)
    assert len(lon) == 60
    i, j = np.triu_indices(60, k=1)
    _, _, d = GEOD.inv(lon[i], lat[i], lon[j], lat[j])  # pyproj geodesic
    within = np.zeros((60, 60), dtype=bool)
    within[i, j] = within[j, i] = d <= radius
    # everybody is a customer holding the product from 2025-06, so in 2026-03 the adopters
    # nearby are all the neighbours within 400 m
    held = [
        {"customer_id": f"P{k:03d}", "product": "fibre_plus", "month": "2025-06"} for k in range(60)
    ]
    tables = lonlat_tables(lon, lat, starts=["2025-06"] * 60, uptakes=held)
    out = add_spatial_context(build_panel(tables, "2026-03", config=Config()), tables)
    last = out[out["month"].astype(str) == "2026-03"]
    assert len(last) == 60
    np.testing.assert_array_equal(
        last["nearby_adopters_fibre_plus_400m"].to_numpy(), within.sum(axis=1)
    )
    np.testing.assert_array_equal(
        last["nearby_adoption_fibre_plus_400m"].to_numpy(), (within.sum(axis=1) > 0) * 1.0
    )


def test_metric_premise_crs_is_kept():
    crs = distance_crs(CRS.from_epsg(32625), np.array([500_000.0]), np.array([4_400_000.0]))
    assert crs.to_epsg() == 32625


def test_feet_are_reprojected_to_metres():
    feet = CRS.from_proj4(
        "+proj=tmerc +lat_0=0 +lon_0=-33 +k=1 +x_0=0 +y_0=0 +ellps=WGS84 +units=us-ft +no_defs"
    )
    # two premises 1,000 US survey feet apart east–west at about 44° N
    x = np.array([0.0, 1000.0])
    y = np.array([16_000_000.0, 16_000_000.0])
    crs = distance_crs(feet, x, y)
    assert crs.is_projected and crs.axis_info[0].unit_name == "metre"
    from pyproj import Transformer

    lon, lat = Transformer.from_crs(feet, 4326, always_xy=True).transform(x, y)
    px, py = Transformer.from_crs(feet, crs, always_xy=True).transform(x, y)
    _, _, reference = GEOD.inv(lon[0], lat[0], lon[1], lat[1])  # pyproj geodesic
    assert np.hypot(px[1] - px[0], py[1] - py[0]) == pytest.approx(reference, rel=0.005)
    # and 1,000 US survey feet = 1200/3937 × 1,000 m (the survey foot's definition)
    assert reference == pytest.approx(1000 * 1200 / 3937, rel=0.005)


def test_configured_distance_crs():
    x, y = np.array([-33.0]), np.array([47.0])
    wgs84 = CRS.from_epsg(4326)
    assert distance_crs(wgs84, x, y, "EPSG:32626").to_epsg() == 32626
    with pytest.raises(UsageError, match="projected CRS with axes in metres"):
        distance_crs(wgs84, x, y, "EPSG:4326")
    with pytest.raises(UsageError, match="not a CRS"):
        distance_crs(wgs84, x, y, "no such thing")


def test_configured_crs_reaches_the_projection(caplog):
    tables = lonlat_tables(np.array([-33.0, -33.001]), np.array([47.0, 47.0]))
    config = Config(spatial=SpatialSettings(distance_crs="EPSG:32626"))
    _, _, crs = project_premises(tables, config)
    assert crs.to_epsg() == 32626
    with caplog.at_level(logging.INFO, logger="lifecycle.spatial"):
        _, _, crs = project_premises(tables)
    assert crs.to_epsg() == 32625  # lon −33 lies in zone 25 (−36° to −30°)
    assert "EPSG:32625" in caplog.text


def test_unknown_premise_crs_is_an_input_error():
    tables = dataclasses.replace(lonlat_tables([-33.0], [47.0]), premise_crs="EPSG:999999")
    with pytest.raises(InputError, match="not a CRS"):
        project_premises(tables)


def test_missing_coordinates_are_an_input_error():
    tables = lonlat_tables([-33.0, -33.1, -33.2], [47.0, 47.0, 47.0])
    tables.customers.loc[1, "y"] = np.nan
    with pytest.raises(InputError) as info:
        project_premises(tables)
    assert info.value.column == "lon, lat" and info.value.count == 1
    assert info.value.examples == ["P001"]
