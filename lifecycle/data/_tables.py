"""The two forms of the input: as read (`RawTables`) and as checked (`Tables`)."""

from __future__ import annotations

from dataclasses import dataclass, field

import geopandas as gpd
import pandas as pd


@dataclass
class RawTables:
    """Tables exactly as read, with columns renamed onto the contract's names.

    Values are not yet parsed or validated; `check_tables` turns this into `Tables`.
    ``sources`` says where each table came from, for messages.
    """

    customers: pd.DataFrame | None
    uptakes: pd.DataFrame | None
    areas: gpd.GeoDataFrame | None
    activity: pd.DataFrame | None = None
    campaigns: pd.DataFrame | None = None
    sources: dict[str, str] = field(default_factory=dict)


@dataclass
class Tables:
    """Input tables that passed every check, parsed into working types.

    Months are integer month indices (``year * 12 + month - 1``; see ``lifecycle._months``).

    Attributes
    ----------
    customers
        One row per customer: ``customer_id`` (as given), ``start`` (int32), ``end`` (float64,
        NaN while active), ``end_reason`` (categorical ``churn`` / ``move_out`` / ``other``,
        NaN while active), ``x``, ``y`` (float64 premise coordinates in ``premise_crs``),
        ``monthly_margin`` (float64), then the static attribute columns as given.
    uptakes
        ``customer_id``, ``product`` (str), ``month`` (int32); one row per customer and product.
    areas
        GeoDataFrame with ``area_id``, numeric attributes and polygon geometry, with a CRS.
    activity
        ``customer_id``, ``month`` (int32) and numeric time-varying columns (float64); may be
        empty.
    campaigns
        ``customer_id``, ``month`` (int32), ``offer``, ``arm``; may be empty.
    premise_crs
        CRS of ``x``, ``y`` (``EPSG:4326`` when the input gave lon/lat).
    extract_month
        The last month the data covers.
    products
        Product names, sorted.
    extract_inferred
        True when ``extract_month`` was inferred from the data (no ``[data] extract_month``).
    """

    customers: pd.DataFrame
    uptakes: pd.DataFrame
    areas: gpd.GeoDataFrame
    activity: pd.DataFrame
    campaigns: pd.DataFrame
    premise_crs: str
    extract_month: int
    products: list[str]
    static_columns: list[str] = field(default_factory=list)
    activity_columns: list[str] = field(default_factory=list)
    extract_inferred: bool = False
