"""``lifecycle bench panel``: building the panel, against lifelines' long-format helpers."""

from __future__ import annotations

import time

import numpy as np
import pandas as pd

from ..config import Config, PanelSettings
from ._harness import Measurement, measure
from ._synthetic import synthetic_tables


def _ours(customers: int, months: int, late_entry: bool) -> dict:
    from ..panel import build_panel

    tables = synthetic_tables(customers, months, late_entry=late_entry)
    config = Config(panel=PanelSettings(window_months=months))
    start = time.perf_counter()
    panel = build_panel(tables, int(tables.extract_month), config=config)
    seconds = time.perf_counter() - start
    return {"seconds": seconds, "note": f"{len(panel):,} rows"}


def _lifelines_route(customers: int, months: int) -> dict:
    """The plain route: one row per customer in long form, then monthly activity added as
    time-varying covariates (delayed one month), which splits each customer into months."""
    from lifelines.utils import add_covariate_to_timeline, to_long_format

    tables = synthetic_tables(customers, months, late_entry=False)
    c = tables.customers
    as_of = int(tables.extract_month)
    start = time.perf_counter()
    last = np.where(c["end"].isna(), as_of, c["end"].fillna(0)).astype(int)
    base = pd.DataFrame(
        {
            "customer_id": c["customer_id"],
            "duration": last - c["start"].to_numpy() + 1,
            "event": c["end"].notna().astype(int),
        }
    )
    long = to_long_format(base, duration_col="duration")
    act = tables.activity.merge(c[["customer_id", "start"]], on="customer_id")
    cv = pd.DataFrame(
        {
            "customer_id": act["customer_id"],
            "time": act["month"] - act["start"],
            "complaints": act["complaints"],
            "usage": act["usage"],
        }
    )
    cv = cv[cv["time"] >= 0]
    panel = add_covariate_to_timeline(
        long, cv, id_col="customer_id", duration_col="time", event_col="event", delay=1
    )
    seconds = time.perf_counter() - start
    return {"seconds": seconds, "note": f"{len(panel):,} rows"}


def run_panel_bench(
    customers: int = 1_000_000, months: int = 48, baseline_customers: int = 50_000
) -> list[Measurement]:
    """Our build at full size, then ours and the plain route side by side on the same data."""
    size = f"{customers:,} × {months} months"
    small = f"{baseline_customers:,} × {months} months"
    return [
        measure(
            "panel",
            "build_panel (late entry)",
            size,
            _ours,
            customers=customers,
            months=months,
            late_entry=True,
        ),
        measure(
            "panel",
            "build_panel",
            small,
            _ours,
            customers=baseline_customers,
            months=months,
            late_entry=False,
        ),
        measure(
            "panel",
            "lifelines long-format route",
            small,
            _lifelines_route,
            role="plain",
            customers=baseline_customers,
            months=months,
        ),
    ]
