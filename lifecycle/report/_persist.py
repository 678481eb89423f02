"""Saving `ReportInputs` to a folder and reading them back, so a report can be re-rendered.

Layout of the folder: ``inputs.json`` (the month, title, notes, segment column, the two
summaries and which tables are present), one Parquet file per table (``<field>.parquet``)
and the areas as GeoParquet (``areas.parquet``, which keeps the CRS).
"""

from __future__ import annotations

import json
from dataclasses import fields
from pathlib import Path
from typing import Any

import geopandas as gpd
import pandas as pd

from .._files import write_atomic, write_parquet_atomic, write_text_atomic
from ..errors import UsageError
from ._inputs import ReportInputs, check_inputs, plain

__all__ = ["load_report_inputs", "save_report_inputs"]

INDEX_FILE = "inputs.json"
_SCALARS = (
    "month", "title", "notes", "segment_column", "decile_summary", "plan_summary", "currency",
    "planned_again",
)  # fmt: skip


def save_report_inputs(inputs: ReportInputs, folder: str | Path) -> Path:
    """Write every field of ``inputs`` into ``folder`` (each file atomically); return it.

    The index (``inputs.json``) is written last, so a folder without it is incomplete.
    """
    inputs = check_inputs(inputs)
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    tables = []
    for f in fields(inputs):
        if f.name in _SCALARS:
            continue
        value = getattr(inputs, f.name)
        if value is None:
            continue
        path = folder / f"{f.name}.parquet"
        if isinstance(value, gpd.GeoDataFrame):
            write_atomic(path, lambda tmp, v=value: v.to_parquet(tmp, index=False))
        else:
            write_parquet_atomic(path, _parquet_safe(value))
        tables.append(f.name)
    index = {name: plain(getattr(inputs, name)) for name in _SCALARS}
    index["tables"] = sorted(tables)
    write_text_atomic(folder / INDEX_FILE, json.dumps(index, sort_keys=True, indent=2) + "\n")
    return folder


def load_report_inputs(folder: str | Path) -> ReportInputs:
    """Read what `save_report_inputs` wrote."""
    folder = Path(folder)
    index_path = folder / INDEX_FILE
    if not index_path.is_file():
        raise UsageError(f"{folder} holds no saved report inputs ({INDEX_FILE} is missing)")
    index: dict[str, Any] = json.loads(index_path.read_text(encoding="utf-8"))
    values: dict[str, Any] = {name: index.get(name) for name in _SCALARS}
    values["notes"] = list(values["notes"] or [])
    values["currency"] = values["currency"] or ""
    for name in index.get("tables", []):
        path = folder / f"{name}.parquet"
        if not path.is_file():
            raise UsageError(f"{path} is listed in {INDEX_FILE} but missing")
        values[name] = gpd.read_parquet(path) if name == "areas" else pd.read_parquet(path)
    return check_inputs(ReportInputs(**values))


def _parquet_safe(frame: pd.DataFrame) -> pd.DataFrame:
    """Columns of mixed Python objects as text, so that Parquet can store them."""
    out = frame.reset_index(drop=True).copy()
    for column in out.columns:
        if out[column].dtype == object:
            out[column] = out[column].astype("string")
    out.columns = [str(c) for c in out.columns]
    return out
