"""The true parameters of the invented demo scenario.

Every number that drives the simulation lives here, so that ``truth.json`` can be written from
one place and a model fitted on the demo can be compared with it. Effects (``BETA``) are keyed
by the panel's column names (DEVELOPERS.md, "The panel contract"): they are coefficients of those
exact columns, on the log-hazard scale, per unit of the column.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

PROVIDER = "Brenvaskmere Community Broadband Co-operative"
DISTRICT = "Brenvaskmere"
PRODUCT = "backup_line"
PRODUCT_DESCRIPTION = "4G backup-line add-on: a mobile-data line that takes over during outages"
CUSTOMER_PREFIX = "BM"
CRS = "EPSG:32625"
RADIUS_M = 400
AS_OF = "2026-10"
CAMPAIGN_MONTH = "2025-09"
BURN_IN_MONTHS = 12
"""Months simulated before the panel window, so that every lagged feature (including the
12-month local move rate) is fully defined from the window's first month on."""

CAUSES = ("churn", "move_out", "other")
PANEL_EVENT = {"churn": "churn", "move_out": "move_out", "other": "other_exit"}

# District: a rectangle in UTM zone 25N (open North Atlantic, so no real place is implied). Its
# sides scale with sqrt(customers / 20 000) so that premise density, and hence the size of a
# 400 m neighbourhood, does not depend on the portfolio size.
DISTRICT_ORIGIN = (480_000.0, 4_395_000.0)
DISTRICT_SIZE_AT_REFERENCE = (14_000.0, 11_000.0)
REFERENCE_CUSTOMERS = 20_000
N_AREAS = 40
PREMISES_PER_CUSTOMER = 1.6
"""Premises in the district per customer of the target portfolio (market share about 60 %)."""
QUARTERS_AT_REFERENCE = 120
"""Settlement clusters (a few streets each) at the reference size."""


@dataclass(frozen=True)
class Baseline:
    """Baseline monthly hazard of one cause as a function of tenure τ (months since start).

    λ0(τ) = late + (early − late) · exp(−τ / decay_months)
    """

    early: float
    late: float
    decay_months: float

    def __call__(self, tenure: np.ndarray) -> np.ndarray:
        tenure = np.asarray(tenure, dtype=np.float64)
        return self.late + (self.early - self.late) * np.exp(-tenure / self.decay_months)

    def as_dict(self) -> dict[str, object]:
        return {
            "formula": "late + (early - late) * exp(-tenure / decay_months)",
            "early": self.early,
            "late": self.late,
            "decay_months": self.decay_months,
        }


BASELINE: dict[str, Baseline] = {
    "churn": Baseline(early=0.0056, late=0.0032, decay_months=10.0),
    "move_out": Baseline(early=0.0060, late=0.0030, decay_months=30.0),
    "other": Baseline(early=0.0009, late=0.0009, decay_months=12.0),
    PRODUCT: Baseline(early=0.0028, late=0.0028, decay_months=12.0),
}
"""Baseline hazards for the three exit causes and for uptake of the product."""

# Effects on the log hazard, per unit of the panel column. Columns not listed have no effect
# (in particular plan_speed, nearby_adopters_*, and do_not_contact / hardship, which are not
# model inputs). Season enters through season_sin / season_cos like any other column.
NEARBY_SHARE = f"nearby_adoption_{PRODUCT}_{RADIUS_M}m"
NEARBY_ADOPTERS = f"nearby_adopters_{PRODUCT}_{RADIUS_M}m"
HOLDS = f"holds_{PRODUCT}"

BETA: dict[str, dict[str, float]] = {
    "churn": {
        "contract_ending": math.log(2.6),
        "contract_months_left": -0.06,
        "bill_shock": math.log(1.8),
        "complaints_3m": 0.22,
        "late_payment": math.log(1.35),
        HOLDS: math.log(0.7),
        "monthly_margin": 0.05,  # bigger bills shop around: a lasting difference between customers
        "rental_share": 0.55,
        "season_sin": 0.0,
        "season_cos": 0.10,
    },
    "move_out": {
        "rental_share": 1.6,
        "local_move_rate": 25.0,
        "late_payment": 0.25,
        "season_sin": -0.12,
        "season_cos": -0.25,
    },
    "other": {
        "late_payment": 1.2,
        "season_sin": 0.0,
        "season_cos": 0.0,
    },
    PRODUCT: {
        NEARBY_SHARE: 3.5,
        "complaints": 0.35,
        "monthly_margin": 0.02,
        "rental_share": -0.6,
        "season_sin": 0.0,
        "season_cos": 0.15,
    },
}

CAMPAIGN = {
    "offer": "loyalty_credit",
    "month": CAMPAIGN_MONTH,
    "target_cause": "churn",
    "effect_months": 6,
    "eligibility": (
        "active in the offer month with the panel feature contract_months_left <= 1 (the "
        "fixed-term contract ends within a month, or the customer is out of contract and rolls "
        "monthly), and neither do_not_contact nor hardship"
    ),
    "randomisation": "complete: a seeded random half of the eligible customers is offered",
    "effect": (
        "churn hazard of an offered customer multiplied by the hazard_ratio of the customer's "
        "segment in the effect_months months after the offer month (not in the offer month "
        "itself); the arm held_out is unaffected"
    ),
    "segments": (
        {
            "name": "complained",
            "rule": "complaints_3m >= 2",
            "hazard_ratio": 2.5,
            "story": (
                "a credit offered after repeated complaints (two or more in the three months "
                "before the offer) reads as a brush-off: it prompts the customer to shop around"
            ),
        },
        {
            "name": "contract_end",
            "rule": "contract_ending == 1 or tenure_start < 48",
            "hazard_ratio": 0.3,
            "story": (
                "near a contract end: the fixed term ends within a month, or the customer is "
                "in its first four years, so its first 12- or 24-month term ended within the "
                "last three years; such a customer is still weighing a switch and a credit "
                "tips the balance"
            ),
        },
        {
            "name": "others",
            "rule": "otherwise",
            "hazard_ratio": 1.0,
            "story": "long out of contract and settled: the credit changes nothing",
        },
    ),
    "segment_rules": (
        "pandas DataFrame.eval expressions on the panel's feature columns of the offer month "
        "(known at the end of the month before it); the first segment whose rule holds is the "
        "customer's"
    ),
}

# Time-varying activity (the value written for month t; the panel lags it by one month).
ACTIVITY = {
    "bill_shock": {
        "probability": 0.02,
        "probability_in_price_review_month": 0.12,
        "price_review_month_of_year": 4,
    },
    "complaints": {
        "distribution": "Poisson(mu_i + outage_boost * outage[area, t])",
        "mu_mean": 0.05,
        "mu_gamma_shape": 0.7,
        "outage_probability_per_area_month": 0.04,
        "outage_boost": 0.6,
    },
    "late_payment": {
        "process": "Markov chain per customer",
        "p_late_after_on_time": 0.03,
        "p_late_after_on_time_hardship": 0.15,
        "p_late_after_late": 0.35,
        "p_late_after_late_hardship": 0.5,
    },
    "contract": {
        "new_customer_terms": {"12": 0.6, "24": 0.3, "0": 0.1},
        "renewal_probability": 0.3,
        "renewal_term_months": 12,
        "stock_in_renewed_term_probability": 0.35,
        "contract_months_left": "max(contract_end_month - t, 0)",
        "contract_ending": "1 if 0 <= contract_end_month - t <= 1 else 0",
        "renewal": (
            "in the first month after a term ends, a customer signs a new 12-month term with "
            "probability renewal_probability; otherwise the contract rolls monthly"
        ),
    },
}

STATIC = {
    "plan_speed": {"100M": 0.45, "300M": 0.35, "1G": 0.20},
    "margin_by_plan": {"100M": 14.0, "300M": 22.0, "1G": 34.0},
    "margin_sd": 3.0,
    "do_not_contact_probability": 0.02,
    "hardship_probability": 0.015,
}

PORTFOLIO = {
    "stock_tenure_mean_months": 40.0,
    "stock_tenure_max_months": 108,
    "arrival_rate": 0.024,
    "arrival_feedback": 0.1,
    "arrivals": (
        "Poisson(arrival_rate * customers + arrival_feedback * (customers - active at the end "
        "of the previous month)), placed on premises free at the end of the previous month"
    ),
}


def season_terms(month_index: np.ndarray | int) -> tuple[np.ndarray, np.ndarray]:
    """``season_sin``, ``season_cos`` of a month index: sin, cos of 2π·(month of year − 1)/12."""
    moy0 = np.asarray(month_index) % 12
    angle = 2.0 * np.pi * moy0 / 12.0
    return np.sin(angle), np.cos(angle)


def campaign_hazard_ratios(features: pd.DataFrame) -> np.ndarray:
    """The true hazard ratio of the campaign offer for each row of ``features`` (the panel's
    feature columns of the offer month): the ratio of the first segment of
    ``CAMPAIGN["segments"]`` whose rule holds."""
    out = np.full(len(features), np.nan)
    for segment in CAMPAIGN["segments"]:
        rule = segment["rule"]
        hit = np.ones(len(features), dtype=bool)
        if rule != "otherwise":
            hit = features.eval(rule).to_numpy(dtype=bool)
        out = np.where(np.isnan(out) & hit, segment["hazard_ratio"], out)
    return out
