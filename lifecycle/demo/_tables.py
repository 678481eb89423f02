"""The simulation's state as the input tables of the data contract (DESIGN.md, "Data contract")."""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pandas as pd

from .._months import format_month, month_categorical, month_labels
from . import _params as P
from ._population import PLANS
from ._simulate import ACTIVITY_COLUMNS, SimulationResult


def customer_ids(n: int) -> np.ndarray:
    """Text ids of customers ``0 .. n − 1``: ``BM0000001`` …"""
    return np.char.add(P.CUSTOMER_PREFIX, np.char.zfill(np.arange(1, n + 1).astype(str), 7))


def build_tables(sim: SimulationResult) -> dict[str, pd.DataFrame]:
    """``customers``, ``activity``, ``uptakes``, ``campaigns``, ``areas`` and ``features``.

    Months are ``YYYY-MM`` text (in ``activity`` and ``features`` an ordered categorical of
    that text, to keep millions of rows small); ids are text (categorical in those two).
    """
    n = sim.pop.n
    ids = customer_ids(n).astype(object)
    id_cat = pd.Categorical.from_codes(np.arange(n), categories=pd.Index(ids, dtype=object))
    pop = sim.pop
    took = np.flatnonzero(pop.uptake[:n] >= 0)
    uptakes = pd.DataFrame(
        {
            "customer_id": ids[took],
            "product": P.PRODUCT,
            "month": month_labels(pop.uptake[took]),
        }
    )
    act = sim.activity
    activity = pd.DataFrame(
        {
            "customer_id": pd.Categorical.from_codes(act["customer"], dtype=id_cat.dtype),
            "month": month_categorical(act["month"]),
            **{name: act[name] for name in ACTIVITY_COLUMNS},
        },
        copy=False,
    )
    camp = sim.campaigns
    campaigns = pd.DataFrame(
        {
            "customer_id": ids[camp["customer"].to_numpy()],
            "month": format_month(sim.calendar.campaign),
            "offer": camp["offer"].to_numpy(),
            "arm": camp["arm"].to_numpy(),
        }
    )
    return {
        "customers": _customers(sim, ids),
        "activity": activity,
        "uptakes": uptakes,
        "campaigns": campaigns,
        "areas": _areas(sim),
        "features": _features(sim, id_cat.dtype),
    }


def _customers(sim: SimulationResult, ids: np.ndarray) -> pd.DataFrame:
    """The customers table: one row per simulated customer."""
    pop, district = sim.pop, sim.district
    n = pop.n
    ended = pop.end[:n] >= 0
    reasons = np.array(["", *P.CAUSES], dtype=object)[pop.reason[:n]]
    premise = pop.premise[:n]
    return pd.DataFrame(
        {
            "customer_id": ids,
            "start_month": month_labels(pop.start[:n]),
            "end_month": np.where(ended, month_labels(np.where(ended, pop.end[:n], 0)), None),
            "end_reason": np.where(ended, reasons, None),
            "x": district.premise_x[premise],
            "y": district.premise_y[premise],
            "monthly_margin": pop.margin[:n],
            "plan_speed": np.array(PLANS, dtype=object)[pop.plan[:n]],
            "do_not_contact": pop.do_not_contact[:n].astype(np.int8),
            "hardship": pop.hardship[:n].astype(np.int8),
        }
    )


def _areas(sim: SimulationResult) -> gpd.GeoDataFrame:
    """The areas: ids, names, rental share and polygons, in the demo's CRS."""
    district = sim.district
    return gpd.GeoDataFrame(
        {
            "area_id": district.area_id,
            "area_name": district.area_name,
            "rental_share": district.rental_share,
        },
        geometry=gpd.GeoSeries(district.polygons),
        crs=P.CRS,
    )


def _features(sim: SimulationResult, id_dtype: pd.CategoricalDtype) -> pd.DataFrame:
    """The simulated customer-months with their features and true hazards."""
    columns: dict[str, object] = {}
    for name, values in sim.features.items():
        if name == "customer":
            columns["customer_id"] = pd.Categorical.from_codes(values, dtype=id_dtype)
        elif name == "month":
            columns["month"] = month_categorical(values)
        elif name == "plan_speed":
            columns[name] = pd.Categorical.from_codes(values, categories=list(PLANS))
        else:
            columns[name] = values
    return pd.DataFrame(columns, copy=False)
