"""Writing the demo scenario into a folder, every file atomically and byte-reproducibly."""

from __future__ import annotations

import json
import logging
import re
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import shapely

from .._files import write_atomic, write_csv_atomic, write_text_atomic
from ..errors import UsageError
from . import _params as P
from ._truth import GENERATOR

log = logging.getLogger(__name__)

DEMO_FILES = (
    "customers.csv",
    "activity.parquet",
    "uptakes.csv",
    "campaigns.csv",
    "areas.geojson",
    "lifecycle.toml",
    "truth.json",
    "README.md",
)


def check_target(out_dir: Path) -> None:
    """Refuse a target that is a file, or a folder holding anything but a previous demo.

    A previous demo is a folder whose files all carry demo names and whose ``truth.json`` was
    written by this generator; leftover temporary files of an interrupted write count as ours.
    """
    if out_dir.exists() and not out_dir.is_dir():
        raise UsageError(f"demo output {out_dir} is a file; give a folder")
    if not out_dir.exists():
        return
    entries = sorted(p.name for p in out_dir.iterdir() if p.name != ".gitkeep")
    if not entries:
        return
    foreign = [name for name in entries if not _is_ours(name)]
    if foreign:
        raise UsageError(
            f"demo output folder {out_dir} holds files that are not a previous demo "
            f"({', '.join(foreign[:5])}{', …' if len(foreign) > 5 else ''}); give an empty or "
            "new folder, or one that holds only a previous demo"
        )
    truth = out_dir / "truth.json"
    try:
        generator = json.loads(truth.read_text(encoding="utf-8")).get("generator")
    except (OSError, ValueError, AttributeError):
        generator = None
    if generator != GENERATOR:
        raise UsageError(
            f"demo output folder {out_dir} is not empty and has no truth.json written by "
            f"{GENERATOR}; give an empty or new folder, or one that holds only a previous demo"
        )


def _is_ours(name: str) -> bool:
    if (
        name in DEMO_FILES
        or name == ".gitkeep"
        or re.fullmatch(r"panel_\d{4}-\d{2}\.parquet", name)
    ):
        return True  # the demo's files, git's placeholder, and panels `lifecycle demo` built
    return (
        name.startswith(".")
        and name.endswith(".part")
        and any(name.startswith(f".{f}.") for f in DEMO_FILES)
    )


def remove_leftovers(out_dir: Path) -> None:
    """Delete temporary files left by an interrupted earlier write."""
    for path in out_dir.glob(".*.part"):
        if _is_ours(path.name):
            path.unlink()


def write_parquet(dest: Path, frame: pd.DataFrame) -> Path:
    """``frame`` as Parquet with categorical columns stored as plain text (zstd)."""
    arrays = {}
    for name in frame.columns:
        column = frame[name]
        if isinstance(column.dtype, pd.CategoricalDtype):
            arrays[name] = pa.array(column.astype(object).to_numpy(), type=pa.string())
        else:
            arrays[name] = pa.array(column.to_numpy())
    table = pa.table(arrays)
    return write_atomic(dest, lambda tmp: pq.write_table(table, tmp, compression="zstd"))


def geojson_text(areas) -> str:
    """GeoJSON of the areas with a named CRS member (read back by GDAL / geopandas).

    Coordinates are written to 1 cm; the polygons are already on that grid.
    """
    features = []
    for row in areas.itertuples(index=False):
        geometry = json.loads(shapely.to_geojson(row.geometry))
        geometry["coordinates"] = _round_coords(geometry["coordinates"])
        features.append(
            {
                "type": "Feature",
                "properties": {
                    "area_id": row.area_id,
                    "area_name": row.area_name,
                    "rental_share": float(row.rental_share),
                },
                "geometry": geometry,
            }
        )
    epsg = P.CRS.split(":")[1]
    doc = {
        "type": "FeatureCollection",
        "name": "areas",
        "crs": {"type": "name", "properties": {"name": f"urn:ogc:def:crs:EPSG::{epsg}"}},
        "features": features,
    }
    return json.dumps(doc, ensure_ascii=False) + "\n"


def _round_coords(value):
    if isinstance(value, list):
        return [_round_coords(v) for v in value]
    return round(float(value), 2)


def write_all(out_dir: Path, tables: dict, config: str, truth: str, readme: str) -> dict[str, Path]:
    """Write every demo file into ``out_dir`` (already checked) and return their paths.

    ``truth.json`` goes first, so that a folder left half-written by an interrupted run is
    still recognised as a demo (and replaced) by the next run.
    """
    out_dir.mkdir(parents=True, exist_ok=True)
    remove_leftovers(out_dir)
    paths = {
        "truth": write_text_atomic(out_dir / "truth.json", truth),
        "customers": write_csv_atomic(out_dir / "customers.csv", tables["customers"]),
        "activity": write_parquet(out_dir / "activity.parquet", tables["activity"]),
        "uptakes": write_csv_atomic(out_dir / "uptakes.csv", tables["uptakes"]),
        "campaigns": write_csv_atomic(out_dir / "campaigns.csv", tables["campaigns"]),
        "areas": write_text_atomic(out_dir / "areas.geojson", geojson_text(tables["areas"])),
        "config": write_text_atomic(out_dir / "lifecycle.toml", config),
        "readme": write_text_atomic(out_dir / "README.md", readme),
    }
    log.info("demo scenario written to %s", out_dir)
    return paths
