"""Reading the input tables from a folder of files or from a DuckDB database."""

from __future__ import annotations

import csv
import logging
import os
from pathlib import Path

import geopandas as gpd
import pandas as pd

from ..config import TABLE_NAMES, Config
from ..errors import InputError, UsageError
from ._tables import RawTables

log = logging.getLogger(__name__)

_TABULAR_SUFFIXES = (".parquet", ".csv")
_AREA_SUFFIXES = (".gpkg", ".geojson", ".json", ".parquet", ".shp")
_DUCKDB_SUFFIXES = (".duckdb", ".ddb", ".db")


def read_raw_tables(source: str | Path, config: Config | None = None) -> RawTables:
    """Read every table of the data contract from ``source``.

    ``source`` is a folder holding ``customers``, ``uptakes``, ``areas`` and optionally
    ``activity`` and ``campaigns`` as CSV or Parquet files (areas: GeoPackage, GeoJSON or
    GeoParquet), or a DuckDB database file holding tables or views of those names. File names
    and column names can be remapped in the config (``[tables]``, ``[columns.<table>]``).
    A missing table is returned as ``None``; `check_tables` decides whether that is an error.
    CSV files are read as text, so that the checks can name values that do not parse.
    """
    config = config or Config()
    path = Path(source)
    if not path.exists():
        raise UsageError(f"data source {path} does not exist; give a folder or a DuckDB file")
    if path.is_dir():
        frames, sources = _read_folder(path, config)
    elif path.suffix.lower() in _DUCKDB_SUFFIXES:
        frames, sources = _read_duckdb(path, config)
    else:
        raise UsageError(
            f"data source {path} is neither a folder nor a DuckDB file "
            f"(expected one of {list(_DUCKDB_SUFFIXES)})"
        )
    for name, frame in frames.items():
        if frame is not None:
            frames[name] = _rename(frame, name, config)
    return RawTables(**frames, sources=sources)


def _rename(frame: pd.DataFrame, table: str, config: Config) -> pd.DataFrame:
    mapping = config.columns.get(table, {})
    theirs_to_ours = {theirs: ours for ours, theirs in mapping.items() if theirs in frame.columns}
    clash = [ours for theirs, ours in theirs_to_ours.items() if ours in frame.columns]
    if clash:
        raise InputError(
            table=table,
            column=clash[0],
            problem=f"is given twice: as itself and as '{mapping[clash[0]]}', mapped onto it in "
            f"[columns.{table}]",
            fix="Drop one of the two columns, or remove the mapping",
        )
    return frame.rename(columns=theirs_to_ours) if theirs_to_ours else frame


def _check_header(names: list[object], table: str, file: Path, config: Config) -> None:
    """Refuse a header that names a column twice (pandas would rename one ``name.1``)."""
    seen: set[str] = set()
    repeated = [str(n) for n in names if str(n) in seen or seen.add(str(n))]
    if repeated:
        ours = {v: k for k, v in config.columns.get(table, {}).items()}.get(repeated[0])
        raise InputError(
            table=table,
            column=ours or repeated[0],
            source_column=repeated[0] if ours else None,
            problem=f"appears more than once in the header of {file} "
            f"(repeated: {sorted(set(repeated))[:5]})",
            fix="Give every column its own name, or drop the copies",
        )


def _read_folder(folder: Path, config: Config):
    frames: dict[str, pd.DataFrame | None] = {}
    sources: dict[str, str] = {}
    for name in TABLE_NAMES:
        file = _find_file(folder, name, config)
        if file is None:
            frames[name] = None
            continue
        sources[name] = str(file)
        log.info("reading %s from %s", name, file)
        frames[name] = (
            _read_areas_file(file) if name == "areas" else _read_tabular(file, name, config)
        )
    return frames, sources


def _find_file(folder: Path, name: str, config: Config) -> Path | None:
    if name in config.tables:
        file = _table_path(folder, name, config.tables[name])
        if not file.is_file():
            raise UsageError(
                f"[tables] {name} = {config.tables[name]!r}, but {file} does not exist"
            )
        return file
    suffixes = _AREA_SUFFIXES if name == "areas" else _TABULAR_SUFFIXES
    for suffix in suffixes:
        file = folder / f"{name}{suffix}"
        if file.is_file():
            return file
    return None


def _table_path(folder: Path, name: str, given: str) -> Path:
    """Where ``[tables] name`` points: an absolute path as given (on purpose), else a path
    inside ``folder``; a relative path leading out of it (``..``) is refused."""
    path = Path(given)
    if path.is_absolute():
        return path
    inside = Path(os.path.normpath(folder / path))
    if not inside.is_relative_to(Path(os.path.normpath(folder))):
        raise UsageError(
            f"[tables] {name} was {given!r}, which leads out of the data folder {folder}; "
            "name a file inside it, or give an absolute path on purpose"
        )
    return inside


def _read_tabular(file: Path, name: str, config: Config) -> pd.DataFrame:
    try:
        if file.suffix.lower() == ".parquet":
            import pyarrow.parquet as pq

            _check_header(pq.read_schema(file).names, name, file, config)
            return pd.read_parquet(file)
        with open(file, newline="", encoding="utf-8-sig", errors="replace") as handle:
            _check_header(next(csv.reader(handle), []), name, file, config)
        return pd.read_csv(file, dtype=str, keep_default_na=False, na_values=[""])
    except (OSError, ValueError, pd.errors.ParserError) as exc:
        raise InputError(
            table=name, column=None, problem=f"cannot be read from {file}: {exc}"
        ) from None


def _read_areas_file(file: Path) -> gpd.GeoDataFrame:
    try:
        if file.suffix.lower() == ".parquet":
            return gpd.read_parquet(file)
        return gpd.read_file(file)
    except Exception as exc:  # the drivers raise many kinds; all mean "unreadable"
        raise InputError(
            table="areas", column=None, problem=f"cannot be read from {file}: {exc}"
        ) from None


def _read_duckdb(file: Path, config: Config):
    import duckdb

    frames: dict[str, pd.DataFrame | None] = {}
    sources: dict[str, str] = {}
    con = duckdb.connect(str(file), read_only=True)
    try:
        present = {
            row[0]
            for row in con.execute("SELECT table_name FROM information_schema.tables").fetchall()
        }
        for name in TABLE_NAMES:
            table = config.tables.get(name, name)
            if name == "areas" and Path(table).suffix.lower() in _AREA_SUFFIXES:
                path = _table_path(file.parent, name, table)
                frames[name] = _read_areas_file(path)
                sources[name] = str(path)
                continue
            if table not in present:
                frames[name] = None
                continue
            frame = con.execute(f'SELECT * FROM "{table}"').fetch_df()
            sources[name] = f"{file}:{table}"
            frames[name] = _areas_from_wkt(frame, config) if name == "areas" else frame
    finally:
        con.close()
    return frames, sources


def _areas_from_wkt(frame: pd.DataFrame, config: Config) -> gpd.GeoDataFrame:
    """Areas kept in DuckDB as a WKT text column ``geometry``, with the CRS from the config."""
    if "geometry" not in frame.columns:
        raise InputError(
            table="areas",
            column="geometry",
            problem="is missing; areas in DuckDB need a WKT text column named geometry",
        )
    geometry = gpd.GeoSeries.from_wkt(frame["geometry"].astype(str), crs=config.areas_crs)
    return gpd.GeoDataFrame(frame.drop(columns="geometry"), geometry=geometry)
