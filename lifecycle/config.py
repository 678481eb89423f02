"""Settings from ``lifecycle.toml``.

The file is optional; every setting has a default. Its format, section by section::

    [data]
    extract_month = "2026-11"        # last month the data covers (default: this calendar month)
    premise_crs = "EPSG:32625"       # CRS of the x, y columns (not needed with lon, lat)
    areas_crs = "EPSG:32625"         # only for areas read from DuckDB as WKT text

    [tables]                         # where each table is, relative to the data folder
    customers = "customers.csv"      # default: <name>.csv / .parquet, areas.gpkg / .geojson /
    areas = "areas.gpkg"             # .parquet, or the DuckDB table/view of that name

    [columns.customers]              # our name = your name, for any table of the contract
    customer_id = "account_no"
    end_reason = "leave_code"

    [reasons]                        # your end-reason codes onto ours (churn, move_out, other)
    SW = "churn"
    MV = "move_out"

    [panel]
    window_months = 48               # months of history in the panel, ending at as_of
    not_features = ["do_not_contact", "hardship"]   # customer columns kept out of models
    trailing_sums = { complaints = 3 }              # activity column = months summed, lagged
    known_future = { contract_months_left = "countdown" }   # feature = schedule of its future
                                     # values when predicting months ahead ("countdown",
                                     # "within:<countdown column>:<k>", "until:<countdown
                                     # column>"; lifecycle/panel/_future.py); default none

    [spatial]
    radii_m = [400]                  # nearby-adoption radii in metres (boundary inclusive)
    distance_crs = ""                # projected CRS for distances; default: premise CRS if
                                     # projected, else the UTM zone of the premises
    nearest_area_max_m = 0           # > 0: a premise outside every area takes the nearest area
                                     # within this distance instead of being an error
    move_rate_months = 12            # trailing window of the local move rate
"""

from __future__ import annotations

import datetime as _dt
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ._months import parse_month
from .errors import UsageError

__all__ = ["Config", "load_config"]

TABLE_NAMES = ("customers", "activity", "uptakes", "areas", "campaigns")
REASONS = ("churn", "move_out", "other")


@dataclass(frozen=True)
class PanelSettings:
    window_months: int = 48
    not_features: tuple[str, ...] = ("do_not_contact", "hardship")
    trailing_sums: dict[str, int] = field(default_factory=dict)
    known_future: dict[str, str] = field(default_factory=dict)


@dataclass(frozen=True)
class SpatialSettings:
    radii_m: tuple[float, ...] = (400.0,)
    distance_crs: str | None = None
    nearest_area_max_m: float = 0.0
    move_rate_months: int = 12


@dataclass(frozen=True)
class Config:
    """Every setting of a run. Build one with `load_config`, or directly in Python."""

    extract_month: str | None = None
    premise_crs: str | None = None
    areas_crs: str | None = None
    tables: dict[str, str] = field(default_factory=dict)
    columns: dict[str, dict[str, str]] = field(default_factory=dict)
    reasons: dict[str, str] = field(default_factory=dict)
    panel: PanelSettings = field(default_factory=PanelSettings)
    spatial: SpatialSettings = field(default_factory=SpatialSettings)
    source: Path | None = None
    raw: dict[str, Any] = field(default_factory=dict)

    def extract_month_index(self, today: _dt.date | None = None) -> int:
        """The last month the data covers: the configured one, else this calendar month."""
        if self.extract_month:
            return parse_month(self.extract_month, what="data.extract_month")
        today = today or _dt.date.today()
        return today.year * 12 + today.month - 1


def _section(raw: dict[str, Any], name: str, allowed: set[str], path: Path) -> dict[str, Any]:
    section = raw.get(name, {})
    if not isinstance(section, dict):
        raise UsageError(f"{path}: [{name}] must be a table of settings")
    unknown = sorted(set(section) - allowed)
    if unknown:
        raise UsageError(
            f"{path}: [{name}] has unknown setting(s) {unknown}; allowed are {sorted(allowed)}"
        )
    return section


def load_config(path: str | Path | None) -> Config:
    """Read a ``lifecycle.toml``; ``None`` gives the defaults.

    Raises `UsageError` naming the file and the setting when something is malformed.
    """
    if path is None:
        return Config()
    path = Path(path)
    if not path.is_file():
        raise UsageError(f"config file {path} does not exist")
    try:
        raw = tomllib.loads(path.read_text(encoding="utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise UsageError(f"{path} is not valid TOML: {exc}") from None
    # Later stages (models, offers, report, ...) read their own sections.
    data = _section(raw, "data", {"extract_month", "premise_crs", "areas_crs"}, path)
    tables = _section(raw, "tables", set(TABLE_NAMES), path)
    columns = _section(raw, "columns", set(TABLE_NAMES), path)
    reasons = raw.get("reasons", {})
    bad = {k: v for k, v in reasons.items() if v not in REASONS}
    if bad:
        raise UsageError(f"{path}: [reasons] maps onto {bad}; each must be one of {list(REASONS)}")
    panel = _section(
        raw, "panel", {"window_months", "not_features", "trailing_sums", "known_future"}, path
    )
    from .panel._future import check_known_future

    known_future = check_known_future(panel.get("known_future"))
    spatial = _section(
        raw, "spatial", {"radii_m", "distance_crs", "nearest_area_max_m", "move_rate_months"}, path
    )
    if data.get("extract_month"):
        parse_month(data["extract_month"], what=f"{path}: data.extract_month")
    return Config(
        extract_month=data.get("extract_month"),
        premise_crs=data.get("premise_crs"),
        areas_crs=data.get("areas_crs"),
        tables={k: str(v) for k, v in tables.items()},
        columns={k: dict(v) for k, v in columns.items()},
        reasons={str(k): str(v) for k, v in reasons.items()},
        panel=PanelSettings(
            window_months=int(panel.get("window_months", 48)),
            not_features=tuple(panel.get("not_features", PanelSettings.not_features)),
            trailing_sums={str(k): int(v) for k, v in panel.get("trailing_sums", {}).items()},
            known_future=known_future,
        ),
        spatial=SpatialSettings(
            radii_m=tuple(float(r) for r in spatial.get("radii_m", (400.0,))),
            distance_crs=spatial.get("distance_crs") or None,
            nearest_area_max_m=float(spatial.get("nearest_area_max_m", 0.0)),
            move_rate_months=int(spatial.get("move_rate_months", 12)),
        ),
        source=path,
        raw=raw,
    )
