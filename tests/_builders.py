"""Small `Tables` built by hand, for tests that exercise a stage without the input checks."""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pandas as pd

from lifecycle._months import parse_month
from lifecycle.data import Tables


def make_tables(
    customers: list[dict],
    *,
    uptakes: list[dict] = (),
    activity: list[dict] = (),
    extract_month: str = "2026-10",
    static_columns: tuple[str, ...] = ("monthly_margin",),
    activity_columns: tuple[str, ...] | None = None,
    products: tuple[str, ...] | None = None,
    campaigns: list[dict] = (),
) -> Tables:
    """Checked-form tables from rows with ``YYYY-MM`` months.

    Customer rows need ``customer_id``, ``start_month``; ``end_month`` and ``end_reason`` may
    be left out (active). Coordinates default to 0 and the margin to 10.
    """
    c = pd.DataFrame(customers)
    out = pd.DataFrame({"customer_id": c["customer_id"]})
    out["start"] = c["start_month"].map(parse_month).astype(np.int32)
    ends = c["end_month"] if "end_month" in c else pd.Series([None] * len(c))
    out["end"] = [np.nan if e is None or e != e else float(parse_month(e)) for e in ends]
    reasons = c["end_reason"] if "end_reason" in c else pd.Series([None] * len(c))
    out["end_reason"] = pd.Categorical(reasons, categories=["churn", "move_out", "other"])
    out["x"] = c.get("x", pd.Series(np.zeros(len(c)))).astype(float)
    out["y"] = c.get("y", pd.Series(np.zeros(len(c)))).astype(float)
    out["monthly_margin"] = c.get("monthly_margin", pd.Series(np.full(len(c), 10.0))).astype(float)
    for name in static_columns:
        if name != "monthly_margin":
            out[name] = c[name]
    u = pd.DataFrame(list(uptakes), columns=["customer_id", "product", "month"])
    u["month"] = u["month"].map(parse_month).astype(np.int32)
    a = pd.DataFrame(list(activity))
    if activity_columns is None:
        activity_columns = [k for k in a.columns if k not in ("customer_id", "month")]
    activity_columns = list(activity_columns)
    a = a.reindex(columns=["customer_id", "month", *activity_columns])
    a["month"] = a["month"].map(parse_month).astype(np.int32)
    a[activity_columns] = a[activity_columns].astype(float)
    return Tables(
        customers=out,
        uptakes=u,
        areas=gpd.GeoDataFrame({"area_id": []}, geometry=[], crs="EPSG:32625"),
        activity=a,
        campaigns=_campaigns(campaigns),
        premise_crs="EPSG:32625",
        extract_month=parse_month(extract_month),
        products=sorted(u["product"].unique().tolist()) if products is None else list(products),
        static_columns=list(static_columns),
        activity_columns=activity_columns,
    )


def _campaigns(rows: list[dict]) -> pd.DataFrame:
    """Campaign rows (``customer_id``, ``month`` as ``YYYY-MM``, ``offer``, ``arm``)."""
    frame = pd.DataFrame(list(rows), columns=["customer_id", "month", "offer", "arm"])
    if len(frame):
        frame["month"] = frame["month"].map(parse_month).astype(np.int32)
    return frame


def scenario_tables(scenario, folder):
    """The checked tables and settings of a simulated demo scenario (`simulate_demo`), its
    ``lifecycle.toml`` written into ``folder``."""
    from lifecycle.config import load_config
    from lifecycle.data import RawTables, check_tables

    (folder / "lifecycle.toml").write_text(scenario.config)
    config = load_config(folder / "lifecycle.toml")
    raw = RawTables(
        customers=scenario.customers,
        activity=scenario.activity,
        uptakes=scenario.uptakes,
        areas=scenario.areas,
        campaigns=scenario.campaigns,
    )
    return check_tables(raw, config), config
