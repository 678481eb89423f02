"""A small, valid set of input tables (invented: a broadband provider in an invented district),
and writers that put it on disk as CSV, Parquet or DuckDB, for the input-check tests.

Tests take `valid_frames()`, break one thing and write the result with `write_csv`.
"""

from __future__ import annotations

from pathlib import Path

import geopandas as gpd
import pandas as pd
from shapely.geometry import box

PREMISE_CRS = "EPSG:32630"  # a UTM zone in metres; the coordinates themselves are invented
EXTRACT = "2026-06"
X0, Y0 = 500_000.0, 5_600_000.0


def valid_frames() -> dict[str, pd.DataFrame]:
    """Every table as a CSV reader gives it (text, blanks as None); areas as a GeoDataFrame."""
    customers = pd.DataFrame(
        {
            "customer_id": ["C001", "C002", "C003", "C004", "C005", "C006"],
            "start_month": ["2024-01", "2024-03", "2023-11", "2025-01", "2025-05", "2026-01"],
            "end_month": [None, "2025-06", "2026-02", "2025-09", None, None],
            "end_reason": [None, "churn", "move_out", "other", None, None],
            "monthly_margin": ["30.5", "22", "41.25", "0", "18.75", "27"],
            "x": [str(X0 + 120 * i) for i in range(6)],
            "y": [str(Y0 + 80 * i) for i in range(6)],
            "plan": ["swift", "steady", "swift", "steady", "steady", "swift"],
            "household_size": ["3", "1", "4", "2", "2", "5"],
            "do_not_contact": ["0", "0", "1", "0", "0", "0"],
            "hardship": ["0", "0", "0", "0", "1", "0"],
        }
    )
    uptakes = pd.DataFrame(
        {
            "customer_id": ["C001", "C003", "C001", "C005"],
            "product": ["tv", "tv", "mesh", "mesh"],
            "month": ["2024-06", "2025-01", "2025-02", "2025-05"],
        }
    )
    activity = pd.DataFrame(
        {
            "customer_id": ["C001", "C001", "C002", "C002", "C003", "C006"],
            "month": ["2026-04", "2026-05", "2025-05", "2025-06", "2026-02", "2026-06"],
            "complaints": ["0", "2", "1", None, "0", "0"],
            "data_gb": ["310.5", "295", "120", "80.25", "400", "15"],
        }
    )
    campaigns = pd.DataFrame(
        {
            "customer_id": ["C001", "C005", "C006"],
            "month": ["2025-03", "2025-10", "2026-04"],
            "offer": ["loyalty_discount", "loyalty_discount", "speed_boost"],
            "arm": ["offered", "held_out", "offered"],
        }
    )
    areas = gpd.GeoDataFrame(
        {"area_id": ["NORTHFIELD", "SOUTHMERE"], "rental_share": [0.35, 0.6]},
        geometry=[
            box(X0 - 1000, Y0 - 1000, X0 + 300, Y0 + 1000),
            box(X0 + 300, Y0 - 1000, X0 + 2000, Y0 + 1000),
        ],
        crs=PREMISE_CRS,
    )
    return {
        "customers": customers,
        "uptakes": uptakes,
        "activity": activity,
        "campaigns": campaigns,
        "areas": areas,
    }


def write_csv(folder: Path, frames: dict[str, pd.DataFrame | None]) -> Path:
    """CSV files for the tables and GeoJSON for the areas; a ``None`` table is left out."""
    folder.mkdir(parents=True, exist_ok=True)
    for name, frame in frames.items():
        if frame is None:
            continue
        if name == "areas":
            frame.to_file(folder / "areas.geojson", driver="GeoJSON")
        else:
            frame.to_csv(folder / f"{name}.csv", index=False)
    return folder


def native_frames() -> dict[str, pd.DataFrame]:
    """The valid tables with the types a database would hold: numbers as numbers, activity and
    campaign months as dates (the first day of the month)."""
    frames = valid_frames()
    customers = frames["customers"].copy()
    for name in ("monthly_margin", "x", "y"):
        customers[name] = customers[name].astype(float)
    for name in ("household_size", "do_not_contact", "hardship"):
        customers[name] = customers[name].astype("int64")
    activity = frames["activity"].copy()
    activity["month"] = pd.to_datetime(activity["month"] + "-01")
    activity[["complaints", "data_gb"]] = activity[["complaints", "data_gb"]].astype(float)
    campaigns = frames["campaigns"].copy()
    campaigns["month"] = pd.to_datetime(campaigns["month"] + "-01")
    return frames | {"customers": customers, "activity": activity, "campaigns": campaigns}


def write_parquet(folder: Path, frames: dict[str, pd.DataFrame]) -> Path:
    """Parquet files for every table; the areas as GeoParquet."""
    folder.mkdir(parents=True, exist_ok=True)
    for name, frame in frames.items():
        frame.to_parquet(folder / f"{name}.parquet", index=False)
    return folder


def write_duckdb(file: Path, frames: dict[str, pd.DataFrame]) -> Path:
    """One DuckDB table per input table; the areas with their geometry as WKT text."""
    import duckdb

    con = duckdb.connect(str(file))
    try:
        for name, frame in frames.items():
            if name == "areas":
                frame = pd.DataFrame(frame.drop(columns="geometry")).assign(
                    geometry=frame.geometry.to_wkt()
                )
            con.register("frame_view", frame)
            con.execute(f'CREATE TABLE "{name}" AS SELECT * FROM frame_view')
            con.unregister("frame_view")
    finally:
        con.close()
    return file
