"""Synthetic checked tables for benchmarks, generated vectorised at any size (seeded)."""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pandas as pd

from .._months import parse_month
from ..data import Tables

AS_OF = parse_month("2026-10")


def synthetic_tables(
    customers: int, months: int = 48, *, seed: int = 0, late_entry: bool = True
) -> Tables:
    """``customers`` customers over ``months`` months ending at 2026-10, with monthly activity
    (two columns) for every active month and one product taken up by about a fifth.

    With ``late_entry`` most customers started before the window (they enter late); without
    it every customer starts inside the window, which is what the plain long-format route can
    represent.
    """
    rng = np.random.default_rng(seed)
    window_start = AS_OF - months + 1
    earliest = window_start - 60 if late_entry else window_start
    start = rng.integers(earliest, AS_OF + 1, size=customers).astype(np.int32)
    duration = rng.geometric(0.02, size=customers)
    end = (start + duration - 1).astype(np.float64)
    end[end > AS_OF] = np.nan
    reason = pd.Categorical.from_codes(
        np.where(np.isnan(end), -1, rng.choice(3, size=customers, p=[0.6, 0.35, 0.05])),
        categories=["churn", "move_out", "other"],
    )
    ids = np.arange(1, customers + 1, dtype=np.int64)
    table = pd.DataFrame(
        {
            "customer_id": ids,
            "start": start,
            "end": end,
            "end_reason": reason,
            "x": rng.uniform(0, 20_000, customers),
            "y": rng.uniform(0, 20_000, customers),
            "monthly_margin": rng.gamma(4.0, 6.0, customers),
        }
    )
    # Activity: one row per active month from one month before the window (it feeds the lag).
    first = np.maximum(start, window_start - 1)
    last = np.where(np.isnan(end), AS_OF, np.nan_to_num(end)).astype(np.int64)
    counts = np.maximum(last - first + 1, 0)
    who = np.repeat(np.arange(customers), counts)
    offsets = np.repeat(np.cumsum(counts) - counts, counts)
    month = (np.repeat(first, counts) + np.arange(counts.sum()) - offsets).astype(np.int32)
    activity = pd.DataFrame(
        {
            "customer_id": ids[who],
            "month": month,
            "complaints": rng.poisson(0.1, who.size).astype(np.float64),
            "usage": rng.gamma(2.0, 50.0, who.size),
        }
    )
    takers = np.flatnonzero(rng.random(customers) < 0.2)
    span = np.maximum(last[takers] - start[takers], 0)
    uptake_month = start[takers] + (rng.random(takers.size) * (span + 1)).astype(np.int64)
    uptakes = pd.DataFrame(
        {
            "customer_id": ids[takers],
            "product": "gadget",
            "month": uptake_month.astype(np.int32),
        }
    )
    return Tables(
        customers=table,
        uptakes=uptakes,
        areas=gpd.GeoDataFrame({"area_id": []}, geometry=[], crs="EPSG:32625"),
        activity=activity,
        campaigns=pd.DataFrame(columns=["customer_id", "month", "offer", "arm"]),
        premise_crs="EPSG:32625",
        extract_month=AS_OF,
        products=["gadget"],
        static_columns=["monthly_margin"],
        activity_columns=["complaints", "usage"],
    )
