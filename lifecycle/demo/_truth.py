"""The demo's true parameters as a JSON-ready dict, its config file and its README."""

from __future__ import annotations

import json
import math
import textwrap
from typing import Any

import numpy as np

from .._months import format_month
from . import _params as P
from ._simulate import STREAMS, SimulationResult

TRUTH_VERSION = 2  # 2: the campaign's effect varies by customer segment
GENERATOR = "lifecycle.demo"
_TENURE_TABLE_MONTHS = 121  # baseline table for tenure 0..120

# Cause keys in truth.json are the panel's event columns; the simulation's own names differ
# only for "other" (end_reason code) and the product.
EVENT_OF = {"churn": "churn", "move_out": "move_out", "other": "other_exit"}
EVENT_OF[P.PRODUCT] = f"uptake_{P.PRODUCT}"


def build_truth(sim: SimulationResult, *, customers: int, seed: int, months: int) -> dict:
    """Every true parameter of the scenario, with the realised counts for orientation."""
    cal = sim.calendar
    truth: dict[str, Any] = {
        "generator": GENERATOR,
        "truth_version": TRUTH_VERSION,
        "invented": (
            "Everything in this scenario is invented: the provider, the district, its areas, "
            "the product, the customers and every number."
        ),
        "provider": P.PROVIDER,
        "district": P.DISTRICT,
        "product": {"code": P.PRODUCT, "description": P.PRODUCT_DESCRIPTION},
        "seed": seed,
        "random_streams": {
            "method": "numpy.random.SeedSequence(seed).spawn(5), one Generator per stream",
            "order": list(STREAMS),
        },
        "customers_target": customers,
        "window": {
            "months": months,
            "start": format_month(cal.window_start),
            "end": format_month(cal.as_of),
        },
        "as_of": format_month(cal.as_of),
        "extract_month": format_month(cal.as_of),
        "first_simulated_month": format_month(cal.first),
        "burn_in_months": P.BURN_IN_MONTHS,
        "product_launch_month": format_month(cal.first),
        "crs": P.CRS,
        "radius_m": P.RADIUS_M,
        "district_bounds": [float(v) for v in sim.district.bounds],
        "n_areas": int(sim.district.area_id.size),
        "n_premises": int(sim.district.premise_x.size),
        "n_premise_pairs_within_radius": int(sim.n_pairs),
        "hazard_model": _HAZARD_MODEL,
        **_hazard_parameters(),
        "campaign": _campaign_truth(sim),
        "features": _feature_definitions(sim.calendar.move_rate_months),
        "activity_process": P.ACTIVITY,
        "static_attributes": P.STATIC,
        "portfolio": P.PORTFOLIO,
        "realised": _realised(sim),
    }
    return _rounded(truth)


_HAZARD_MODEL = {
    "exits": (
        "lambda_k = baseline_k(tenure) * exp(sum_c beta[k][c] * x_c) for k in churn, "
        "move_out, other_exit; P(exit in month) = 1 - exp(-sum_k lambda_k); the cause "
        "is k with probability lambda_k / sum_k lambda_k"
    ),
    "uptake": (
        "lambda_u = baseline_u(tenure) * exp(sum_c beta[u][c] * x_c); while not holding "
        "the product, P(uptake in month) = 1 - exp(-lambda_u), drawn independently of "
        "the exit (an uptake and an exit may fall in the same month)"
    ),
    "x": (
        "the panel's feature columns of the month (DEVELOPERS.md): known at the end of "
        "the previous month; a NaN feature (lagged activity in a customer's first "
        "simulated month) contributes 0; columns not listed in beta have no effect"
    ),
    "tenure": "months since the start month (the panel's tenure_start)",
    "campaign": (
        "churn hazard of an offered customer times the hazard_ratio of its segment "
        "(campaign.segments) in the months of campaign.effect_months_list"
    ),
}


def _hazard_parameters() -> dict[str, Any]:
    """The baselines (as parameters and by tenure month), the coefficients and the season."""
    tenure = np.arange(_TENURE_TABLE_MONTHS)
    table = {"tenure": tenure.tolist()}
    table.update({EVENT_OF[k]: b(tenure).tolist() for k, b in P.BASELINE.items()})
    return {
        "baseline": {EVENT_OF[k]: b.as_dict() for k, b in P.BASELINE.items()},
        "baseline_by_tenure": table,
        "beta": {
            EVENT_OF[k]: {c: v for c, v in effects.items() if v != 0.0}
            for k, effects in P.BETA.items()
        },
        "season": {
            EVENT_OF[k]: {c: P.BETA[k].get(c, 0.0) for c in ("season_sin", "season_cos")}
            for k in P.BETA
        },
    }


def _campaign_truth(sim: SimulationResult) -> dict[str, Any]:
    """The past campaign's settings, effect months and arm sizes."""
    offered = int((sim.campaigns["arm"] == "offered").sum())
    campaign = dict(P.CAMPAIGN)
    campaign["effect_months_list"] = [
        format_month(sim.calendar.campaign + i) for i in range(1, P.CAMPAIGN["effect_months"] + 1)
    ]
    campaign["eligible"] = len(sim.campaigns)
    campaign["offered"] = offered
    campaign["held_out"] = len(sim.campaigns) - offered
    campaign.update(_campaign_segments(sim))
    return campaign


def _campaign_segments(sim: SimulationResult) -> dict[str, Any]:
    """The campaign's segments with their realised sizes, and the average effect.

    ``hazard_ratio_average`` is Σ λ·HR / Σ λ over the offered customers' months at risk in the
    effect window, λ being each month's true churn hazard without the offer: the ratio of the
    churn hazard with the offer to the hazard without it, averaged with the untreated hazard as
    weight. With randomised arms and short follow-up this is, to first order, what a single
    Cox hazard ratio of offered against held out estimates (the arms have the same mix of
    segments, and each month's events are weighted by the hazard that produces them).
    """
    camp = sim.campaigns
    ratio = sim.pop.offer_hr[camp["customer"].to_numpy()]
    offered = (camp["arm"] == "offered").to_numpy()
    segments = []
    for segment in P.CAMPAIGN["segments"]:
        mine = ratio == segment["hazard_ratio"]
        segments.append(
            {**segment, "eligible": int(mine.sum()), "offered": int((mine & offered).sum())}
        )
    with_offer, without = (float(v) for v in sim.effect_sums)
    return {
        "segments": segments,
        "hazard_ratio_average": with_offer / without if without > 0 else 1.0,
        "hazard_ratio_average_definition": (
            "sum of lambda * hazard_ratio / sum of lambda over the offered customers' months "
            "at risk in the effect window, lambda being the true churn hazard without the "
            "offer: to first order what one Cox hazard ratio of offered vs held out estimates"
        ),
    }


def _feature_definitions(move_rate_months: int) -> dict[str, Any]:
    """How each feature of the hazards is defined, in words."""
    return {
        "season_sin": "sin(2*pi*(month_of_year - 1)/12)",
        "season_cos": "cos(2*pi*(month_of_year - 1)/12)",
        "activity": "value of the activity column in the previous month (NaN if no row)",
        "complaints_3m": "complaints summed over the 3 previous months (missing months 0)",
        "rental_share": "rental_share of the area holding the premise",
        "local_move_rate": (
            "for month m and area a: move-outs with end month in m-12..m-1 among the "
            "area's customers, over the area's active customer-months in m-12..m-1 (a "
            "customer is active in month t when start <= t <= end, the end month "
            "included), shrunk across areas by lifecycle.spatial.gamma_poisson_rates "
            "month by month"
        ),
        P.NEARBY_ADOPTERS: (
            "other customers within radius_m metres (boundary inclusive) that hold the "
            "product at the end of the previous month"
        ),
        P.NEARBY_SHARE: (
            "that count over the other customers within radius_m at the end of the previous "
            "month (0 when there are none); a customer at the end of month t has "
            "start <= t and (no end or end > t)"
        ),
        "move_rate_months": move_rate_months,
    }


def _realised(sim: SimulationResult) -> dict[str, Any]:
    """Realised counts, for orientation."""
    pop = sim.pop
    n = pop.n
    ends = pop.reason[:n]
    return {
        "customers": int(n),
        "exits": {EVENT_OF[k]: int((ends == i + 1).sum()) for i, k in enumerate(P.CAUSES)},
        "uptakes": int((pop.uptake[:n] >= 0).sum()),
        "active_at_as_of": int((pop.end[:n] < 0).sum()),
        "do_not_contact": int(pop.do_not_contact[:n].sum()),
        "hardship": int(pop.hardship[:n].sum()),
    }


def truth_json(truth: dict) -> str:
    """Deterministic JSON text: sorted keys, floats to 10 significant digits."""
    return json.dumps(_rounded(truth), sort_keys=True, indent=2, ensure_ascii=False) + "\n"


def _rounded(value: Any) -> Any:
    if isinstance(value, dict):
        return {str(k): _rounded(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_rounded(v) for v in value]
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float):
        if not math.isfinite(value):
            raise ValueError(f"truth holds a non-finite number {value!r}")
        return float(f"{value:.10g}")
    return value


def config_text(months: int, move_rate_months: int) -> str:
    """``lifecycle.toml`` for the demo data (every setting: ``lifecycle settings``)."""
    return _data_and_models_text(months, move_rate_months) + _offers_and_run_text()


def _data_and_models_text(months: int, move_rate_months: int) -> str:
    """The settings of the data, panel, spatial context, models, value and forecast."""
    return f"""# Settings for the invented demo scenario, written by `lifecycle demo`.
[data]
extract_month = "{P.AS_OF}"
premise_crs = "{P.CRS}"

[panel]
window_months = {months}
trailing_sums = {{ complaints = 3 }}

# Features whose future is known: contract months left count down by one a month; the
# contract-end flag is on while the term ends within a month (renewals are not known ahead).
[panel.known_future]
contract_months_left = "countdown"
contract_ending = "within:contract_months_left:1"

[spatial]
radii_m = [{P.RADIUS_M}]
move_rate_months = {move_rate_months}

# A weighted 5 % of the rows without an event (every event row kept): `lifecycle bench models`
# at 10,000 customers measured the same 12-month churn concordance (0.630) in 1.7 s against
# 14 s on every row.
[models.boosted]
max_iter = 100
n_threads = 1
sample_fraction = 0.05

[models.cox]
sample_fraction = 0.1

# 50 trees on both cores keep the demo within its time; measured on the 20,000-customer demo
# against 100 trees: half the CPU time, 12-month churn concordance 0.622 against 0.623.
[models.forest]
n_estimators = 50
n_jobs = 2

[value]
annual_discount = 0.08
horizon_months = 24
currency = "EUR"

[forecast]
horizon_months = 12

"""


def _offers_and_run_text() -> str:
    """The offers, the plan and the run."""
    return f"""\
# The offers of the invented provider. The loyalty credit's hazard ratio here is the team's
# guess; the past campaign with a random hold-out replaces it with an estimate.
[[offers]]
name = "loyalty_credit"
target = "churn"
cost = 20.0
hazard_ratio = 0.8
months = 6
cooldown_months = 3
weekly_capacity = 150

[offers.eligible]
min_tenure = 3

[[offers]]
name = "moving_home_transfer"
target = "move_out"
cost = 12.0
hazard_ratio = 0.7
months = 3
cooldown_months = 3
weekly_capacity = 100

[[offers]]
name = "{P.PRODUCT}_trial"
target = "uptake_{P.PRODUCT}"
cost = 4.0
hazard_ratio = 1.8
months = 3
value_per_uptake = 120.0
cooldown_months = 3
weekly_capacity = 250

[offers.eligible]
not_holding = "{P.PRODUCT}"

[plan]
budget = 15000.0
weeks = 4

# What the per-customer effect of a past offer is learnt from, for the backtest's Qini
# coefficient (the features known when the offer was made).
[evaluation]
effect_features = [
    "contract_ending", "contract_months_left", "tenure_start", "complaints_3m", "late_payment",
    "bill_shock", "monthly_margin", "rental_share", "holds_{P.PRODUCT}",
]

# The backtest and the models are redone every third month; between, the last ones are reused.
[run]
families = ["cox", "boosted", "forest"]
cutoffs = 2
refit_months = 3
backtest_months = 3
reports = "../reports"
work = "../.lifecycle-work"
"""


def readme_text(truth: dict) -> str:
    """A short README for the demo folder."""
    w = truth["window"]
    r = truth["realised"]
    offer = P.CAMPAIGN["offer"]
    paragraphs = [
        f"Everything here is invented: the {P.PROVIDER}, a broadband provider in the invented "
        f"district of {P.DISTRICT}, its {truth['n_areas']} areas, its product `{P.PRODUCT}` "
        f"({P.PRODUCT_DESCRIPTION}), its customers and every number. The coordinates are in "
        f"{P.CRS} and fall in open ocean, so no real place is implied. No real company, place, "
        "person or data set is described.",
        f"About {truth['customers_target']} customers are active in any month; the customers "
        f"table lists all {r['customers']} who were customers at some time in the simulated "
        f"months. The data were simulated from a known process (seed {truth['seed']}), so "
        "models fitted on them can be checked against `truth.json`: baseline hazards by "
        "tenure, the effect of every panel column on each cause, season terms, the campaign's "
        "true hazard ratios (they differ between customer segments: strong near a contract "
        "end, none for settled customers, harmful after repeated complaints), and how each "
        "spatial feature is defined.",
        f"Panel window: {w['start']} to {w['end']} ({w['months']} months); data extracted "
        f"{truth['extract_month']}. The simulation starts {truth['burn_in_months']} months "
        "earlier, so that every lagged feature is defined from the window's first month.",
    ]
    files = [
        "`customers.csv`: one row per customer: start and end months, end reason, premise x/y, "
        "margin, plan, do_not_contact and hardship flags",
        "`activity.parquet`: one row per customer and active month: bill_shock, complaints, "
        "late_payment, contract_months_left, contract_ending",
        f"`uptakes.csv`: the first month holding `{P.PRODUCT}`",
        f"`campaigns.csv`: the `{offer}` offer of {P.CAMPAIGN_MONTH} with its random hold-out",
        f"`areas.geojson`: area polygons with `area_id`, `area_name`, `rental_share` ({P.CRS})",
        "`lifecycle.toml`: the settings for these data",
        "`truth.json`: every true parameter",
    ]
    text = ["# Demo scenario (invented)", ""]
    for paragraph in paragraphs[:2]:
        text += [textwrap.fill(paragraph, width=96), ""]
    text += [textwrap.fill(f, width=96, initial_indent="- ", subsequent_indent="  ") for f in files]
    text += ["", textwrap.fill(paragraphs[2], width=96)]
    return "\n".join(text) + "\n"
