"""Settings from ``lifecycle.toml``.

The file is optional; every setting has a default. Its format, section by section::

    [data]
    extract_month = "2026-11"        # last month the data covers (default: the last month in
                                     # which any customer start or end, activity, uptake or
                                     # campaign row is dated; logged, and printed by check)
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

    [formats]                        # date formats (strftime) beside the ones always read:
    customers = "%d/%m/%Y"           # YYYY-MM, YYYY-MM-DD, ISO date-time; per table, or per
    "activity.month" = "%m/%Y"       # column as "<table>.<column>" (the column wins)

    [campaigns]                      # when [[offers]] are configured, every campaign offer
                                     # must name one of them (after this mapping)
    offers = { WINBACK10 = "loyalty_credit" }        # your offer codes onto [[offers]] names
    arms = { T = "offered", C = "held_out" }         # your arm labels onto offered / held_out

    [panel]
    window_months = 48               # months of history in the panel, ending at as_of
    not_features = ["do_not_contact", "hardship"]   # customer columns kept out of models
    trailing_sums = { complaints = 3 }              # activity column = months summed, lagged

    [spatial]
    radii_m = [400]                  # nearby-adoption radii in metres (boundary inclusive)
    distance_crs = ""                # projected CRS for distances; default: premise CRS if
                                     # projected, else the UTM zone of the premises
    nearest_area_max_m = 0           # > 0: a premise outside every area takes the nearest area
                                     # within this distance instead of being an error
    move_rate_months = 12            # trailing window of the local move rate
    overlaps = "refuse"              # areas whose interiors overlap: "refuse" (an error naming
                                     # the pairs), "smallest" (a premise in several takes the
                                     # smallest area) or "first_id" (the area_id sorting first)
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ._months import parse_month
from .errors import UsageError

__all__ = ["Config", "load_config"]

TABLE_NAMES = ("customers", "activity", "uptakes", "areas", "campaigns")
REASONS = ("churn", "move_out", "other")
ARMS = ("offered", "held_out")
OVERLAP_RULES = ("refuse", "smallest", "first_id")


@dataclass(frozen=True)
class PanelSettings:
    window_months: int = 48
    not_features: tuple[str, ...] = ("do_not_contact", "hardship")
    trailing_sums: dict[str, int] = field(default_factory=dict)


@dataclass(frozen=True)
class SpatialSettings:
    radii_m: tuple[float, ...] = (400.0,)
    distance_crs: str | None = None
    nearest_area_max_m: float = 0.0
    move_rate_months: int = 12
    overlaps: str = "refuse"


@dataclass(frozen=True)
class CampaignSettings:
    """``[campaigns]``: the export's offer codes and arm labels onto ours."""

    offers: dict[str, str] = field(default_factory=dict)
    arms: dict[str, str] = field(default_factory=dict)


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
    formats: dict[str, str] = field(default_factory=dict)
    campaigns: CampaignSettings = field(default_factory=CampaignSettings)
    source: Path | None = None
    raw: dict[str, Any] = field(default_factory=dict)

    def extract_month_index(self) -> int | None:
        """The configured last month the data covers, or ``None``: then `check_tables`
        infers it from the data (never from today's date)."""
        if self.extract_month:
            return parse_month(self.extract_month, what="data.extract_month")
        return None

    def month_format(self, table: str, column: str) -> str | None:
        """The ``[formats]`` date format of a column: ``"<table>.<column>"``, else the table's."""
        return self.formats.get(f"{table}.{column}") or self.formats.get(table)


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
    panel = _section(raw, "panel", {"window_months", "not_features", "trailing_sums"}, path)
    spatial = _section(
        raw,
        "spatial",
        {"radii_m", "distance_crs", "nearest_area_max_m", "move_rate_months", "overlaps"},
        path,
    )
    overlaps = spatial.get("overlaps", "refuse")
    if overlaps not in OVERLAP_RULES:
        raise UsageError(
            f"{path}: [spatial] overlaps was {overlaps!r} but is expected to be one of "
            f"{list(OVERLAP_RULES)}"
        )
    formats = _formats(raw, path)
    campaigns = _campaigns(raw, path)
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
        ),
        spatial=SpatialSettings(
            radii_m=tuple(float(r) for r in spatial.get("radii_m", (400.0,))),
            distance_crs=spatial.get("distance_crs") or None,
            nearest_area_max_m=float(spatial.get("nearest_area_max_m", 0.0)),
            move_rate_months=int(spatial.get("move_rate_months", 12)),
            overlaps=overlaps,
        ),
        formats=formats,
        campaigns=campaigns,
        source=path,
        raw=raw,
    )


def _formats(raw: dict[str, Any], path: Path) -> dict[str, str]:
    """``[formats]``: keys ``<table>`` or ``"<table>.<column>"``, values strftime formats."""
    section = raw.get("formats", {})
    if not isinstance(section, dict):
        raise UsageError(f"{path}: [formats] must be a table of settings")
    flat: dict[str, Any] = {}
    for key, value in section.items():  # activity.month = "..." unquoted is a nested table
        if isinstance(value, dict):
            flat |= {f"{key}.{column}": v for column, v in value.items()}
        else:
            flat[str(key)] = value
    out: dict[str, str] = {}
    for key, value in flat.items():
        table = str(key).split(".", 1)[0]
        if table not in TABLE_NAMES or table == "areas":
            raise UsageError(
                f"{path}: [formats] key {key!r} names no table; use a table name "
                f'({", ".join(t for t in TABLE_NAMES if t != "areas")}) or "<table>.<column>"'
            )
        if not isinstance(value, str) or "%" not in value:
            raise UsageError(
                f"{path}: [formats] {key} was {value!r} but is expected to be a date format "
                'such as "%d/%m/%Y" (Python strftime codes)'
            )
        out[str(key)] = value
    return out


def _campaigns(raw: dict[str, Any], path: Path) -> CampaignSettings:
    """``[campaigns]``: ``offers`` (your code = offer name) and ``arms`` (your label = arm)."""
    section = _section(raw, "campaigns", {"offers", "arms"}, path)
    maps: dict[str, dict[str, str]] = {}
    for key in ("offers", "arms"):
        value = section.get(key, {})
        if not isinstance(value, dict) or not all(isinstance(v, str) for v in value.values()):
            raise UsageError(
                f"{path}: [campaigns] {key} was {value!r} but is expected to be a table of "
                'texts, e.g. { CODE = "name" }'
            )
        maps[key] = {str(k): v for k, v in value.items()}
    wrong = {k: v for k, v in maps["arms"].items() if v not in ARMS}
    if wrong:
        raise UsageError(
            f"{path}: [campaigns] arms maps onto {wrong}; each must be one of {list(ARMS)}"
        )
    return CampaignSettings(offers=maps["offers"], arms=maps["arms"])
