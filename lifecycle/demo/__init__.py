"""The invented demo scenario, simulated from a known process.

An invented broadband co-operative in an invented district (coordinates in open ocean, EPSG:32625)
sells broadband and an invented 4G backup-line add-on (``backup_line``). Its customers churn, move
out or leave for other reasons, and take up the add-on, according to monthly cause-specific
hazards whose every parameter is written to ``truth.json``, so that models fitted on the demo can
be checked against the truth. See ``lifecycle.demo._simulate`` for the process and
``lifecycle.demo._params`` for the numbers.
"""

from __future__ import annotations

import logging
import numbers
from dataclasses import dataclass
from pathlib import Path

import geopandas as gpd
import pandas as pd

from ..errors import UsageError
from ._effect_truth import TRUE_EFFECT_COLUMNS, true_offer_effect
from ._simulate import simulate
from ._tables import build_tables
from ._truth import build_truth, config_text, readme_text, truth_json
from ._write import DEMO_FILES, check_target, write_all
from ._yardstick import TrueIncidence, true_incidence

__all__ = [
    "DEMO_FILES",
    "TRUE_EFFECT_COLUMNS",
    "DemoScenario",
    "TrueIncidence",
    "simulate_demo",
    "true_incidence",
    "true_offer_effect",
    "write_demo",
]

log = logging.getLogger(__name__)

MIN_CUSTOMERS = 500
MAX_CUSTOMERS = 1_000_000
MIN_MONTHS = 24
MAX_MONTHS = 120


@dataclass
class DemoScenario:
    """The simulated demo: its input tables, config, truth and the features it used.

    Attributes
    ----------
    customers
        ``customer_id``, ``start_month``, ``end_month`` (None while active), ``end_reason``
        (``churn`` | ``move_out`` | ``other`` | None), ``x``, ``y``, ``monthly_margin``,
        ``plan_speed``, ``do_not_contact``, ``hardship``.
    activity
        ``customer_id``, ``month`` and the activity columns ``bill_shock``, ``complaints``,
        ``late_payment``, ``contract_months_left``, ``contract_ending`` for every active
        simulated month (ids and months categorical).
    uptakes
        ``customer_id``, ``product``, ``month``: the first month holding ``backup_line``.
    campaigns
        ``customer_id``, ``month``, ``offer``, ``arm`` of the past ``loyalty_credit`` offer.
    areas
        GeoDataFrame of ``area_id``, ``area_name``, ``rental_share`` and polygons, with its CRS.
    config
        Text of the ``lifecycle.toml`` for these data.
    truth
        Every true parameter (the content of ``truth.json``).
    features
        One row per customer and month of the panel window in which the customer was active:
        ``customer_id``, ``month``, ``tenure_start``, the event columns (``churn``,
        ``move_out``, ``other_exit``, ``uptake_backup_line``), the features by their panel
        names, ``offer_loyalty_credit`` (1 where the campaign's effect applied) and the monthly
        hazards used: ``hazard_churn``, ``hazard_move_out``, ``hazard_other_exit``,
        ``hazard_uptake_backup_line`` (NaN while holding the product). Sorted by customer,
        then month.
    """

    customers: pd.DataFrame
    activity: pd.DataFrame
    uptakes: pd.DataFrame
    campaigns: pd.DataFrame
    areas: gpd.GeoDataFrame
    config: str
    truth: dict
    features: pd.DataFrame


def simulate_demo(
    *, customers: int = 20_000, seed: int = 7, months: int = 48, keep_features: bool = True
) -> DemoScenario:
    """Simulate the demo scenario.

    Parameters
    ----------
    customers
        Size of the portfolio: about this many customers are active in any month (new
        customers replace those who leave). The customers table holds more rows, since it
        also lists everyone who left during the simulated months.
    seed
        Seed of every random draw; the same seed gives the same scenario.
    months
        Length of the panel window, ending at 2026-10. The simulation starts 12 months
        earlier so that every lagged feature is defined in the window.
    keep_features
        Keep the ``features`` table (customer-months with the true hazards). Without it,
        ``features`` is empty and a large portfolio needs far less memory; the other tables
        and the truth are the same.

    Returns
    -------
    DemoScenario
    """
    _check_int("customers", customers, MIN_CUSTOMERS, MAX_CUSTOMERS)
    _check_int("months", months, MIN_MONTHS, MAX_MONTHS)
    if not isinstance(seed, numbers.Integral) or isinstance(seed, bool) or seed < 0:
        raise UsageError(f"seed was {seed!r} but is expected to be a whole number >= 0")
    log.info("simulating the demo: %d customers, %d months, seed %d", customers, months, seed)
    sim = simulate(customers, seed, months, keep_features=keep_features)
    tables = build_tables(sim)
    truth = build_truth(sim, customers=customers, seed=seed, months=months)
    return DemoScenario(
        customers=tables["customers"],
        activity=tables["activity"],
        uptakes=tables["uptakes"],
        campaigns=tables["campaigns"],
        areas=tables["areas"],
        config=config_text(months, sim.calendar.move_rate_months),
        truth=truth,
        features=tables["features"],
    )


def write_demo(out_dir: str | Path, *, customers: int = 20_000, seed: int = 7) -> dict[str, Path]:
    """Simulate the demo scenario and write it into ``out_dir``.

    Writes ``customers.csv``, ``activity.parquet``, ``uptakes.csv``, ``campaigns.csv``,
    ``areas.geojson``, ``lifecycle.toml``, ``truth.json`` and ``README.md``, each atomically;
    the same seed gives byte-identical files. ``out_dir`` must be new, empty, or hold only a
    previous demo (which is replaced); anything else raises `UsageError` before any work.

    Returns
    -------
    dict
        Path of each file, keyed ``customers``, ``activity``, ``uptakes``, ``campaigns``,
        ``areas``, ``config``, ``truth``, ``readme``.
    """
    out = Path(out_dir)
    check_target(out)
    scenario = simulate_demo(customers=customers, seed=seed, keep_features=False)
    check_target(out)  # the folder may have changed while simulating
    tables = {
        "customers": scenario.customers,
        "activity": scenario.activity,
        "uptakes": scenario.uptakes,
        "campaigns": scenario.campaigns,
        "areas": scenario.areas,
    }
    return write_all(
        out, tables, scenario.config, truth_json(scenario.truth), readme_text(scenario.truth)
    )


def _check_int(name: str, value: object, lo: int, hi: int) -> None:
    if not isinstance(value, numbers.Integral) or isinstance(value, bool) or not lo <= value <= hi:
        raise UsageError(
            f"{name} was {value!r} but is expected to be a whole number in [{lo}, {hi}]"
        )
