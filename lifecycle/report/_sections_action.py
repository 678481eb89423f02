"""The report's later sections: drivers, drift, the uptake forecast, the plan and the cautions."""

from __future__ import annotations

import re
from typing import Any

import numpy as np
import pandas as pd

from ..forecast import fan_chart
from . import _figures as fig
from ._blocks import Cell, Section, count, money, number, pct_text, percent
from ._drift import ACT_PSI, WATCH_PSI
from ._inputs import ReportInputs

TOP_DRIVERS = 5
MIN_AREA_CUSTOMERS = 20
"""Areas with fewer customers are left out when naming the most and least contacted area."""
RATE_COLUMNS = (
    "area_id",
    "customers",
    "contacts",
    "customer_share",
    "contact_share",
    "contact_rate",
    "rate_ratio",
)


# -- drivers ---------------------------------------------------------------------------------
PH_LEVEL = 0.01


def _ph_failures(section: Section, ph: pd.DataFrame | None, key: dict[str, Any]) -> None:
    """The covariates whose proportional-hazards test fails at 1 % (Grambsch–Therneau)."""
    if ph is None or len(ph) == 0:
        return
    failed = ph[ph["p_value"] < PH_LEVEL].sort_values(["p_value", "cause", "feature"])
    key["ph_failures"] = len(failed)
    if not len(failed):
        section.note(
            f"Every covariate passes the proportional-hazards test at {PH_LEVEL:.0%} "
            f"({len(ph)} tested)."
        )
        return
    section.table(
        ["cause", "feature", "χ²(1)", "p"],
        [
            [
                Cell(fig.label_of(r.cause)),
                Cell(str(r.feature)),
                number(r.statistic, 1),
                Cell(f"{r.p_value:.1e}", number=True),
            ]
            for r in failed.itertuples(index=False)
        ],
        caption=(
            f"Proportional-hazards tests that fail at {PH_LEVEL:.0%} ({len(failed)} of "
            f"{len(ph)}): the effect of these covariates changes with tenure, so their hazard "
            "ratio is an average over tenure"
        ),
    )


def drivers_section(inputs: ReportInputs) -> tuple[Section, dict[str, Any]]:
    """Hazard ratios with intervals, and forest importances."""
    section = Section("drivers", "What drives the hazards")
    key: dict[str, Any] = {}
    hr = inputs.hazard_ratios
    if hr is None or len(hr) == 0:
        section.note("No cause-specific Cox model was fitted, so there are no hazard ratios.")
    else:
        section.text(
            "Hazard ratios from the cause-specific Cox model: how much a one-unit higher value "
            "of a flag (or the named level, against the reference level), or a one standard "
            "deviation higher value of a measured feature (marked 'per SD'), multiplies the "
            "monthly hazard of that cause, other things equal. coefficients.csv beside the model "
            "keeps them per unit. Whiskers are 95 % intervals; an interval that "
            "crosses 1 is compatible with no effect. They describe associations in past data, "
            "not what would happen if a value were changed."
        )
        section.figure(
            fig.hazard_ratio_chart(hr), alt="Hazard ratios with 95 % intervals for each cause"
        )
        rows, key["strongest_effects"] = [], {}
        for cause in dict.fromkeys(hr["cause"]):
            part = hr[hr["cause"] == cause]
            clear = part[(part["lower_95"] > 1) | (part["upper_95"] < 1)]
            clear = clear.assign(size=np.abs(np.log(clear["hazard_ratio"].astype(float))))
            top = clear.sort_values(["size", "feature"], ascending=[False, True]).head(TOP_DRIVERS)
            key["strongest_effects"][cause] = top["feature"].astype(str).tolist()
            for r in top.itertuples(index=False):
                rows.append(
                    [
                        Cell(fig.label_of(cause)),
                        Cell(str(r.feature)),
                        number(r.hazard_ratio, 2),
                        Cell(f"{r.lower_95:.2f}–{r.upper_95:.2f}", number=True),
                    ]
                )
        if rows:
            section.table(
                ["cause", "feature", "hazard ratio", "95 % interval"],
                rows,
                caption=f"Largest effects whose interval excludes 1 (up to {TOP_DRIVERS} a cause)",
            )
        else:
            section.note("No hazard ratio has an interval that excludes 1.")
        _ph_failures(section, inputs.ph_tests, key)
    imp = inputs.importances
    if imp is not None and len(imp) > 0:  # no heading without a forest: no empty part
        section.heading("Forest importances")
        section.text(
            "How much the forest's accuracy drops when one feature's values are shuffled "
            "among customers: a larger drop means the forest leans on it more. Importances "
            "say nothing about the direction of an effect."
        )
        section.figure(fig.importance_chart(imp), alt="Forest importances for each cause")
    return section, key


# -- drift -----------------------------------------------------------------------------------
def drift_section(inputs: ReportInputs) -> tuple[Section, dict[str, Any]]:
    """Population stability index of each feature and score against last month."""
    section = Section("drift", "Drift since last month")
    drift = inputs.drift
    if drift is None or len(drift) == 0:
        section.note("First month: nothing to compare yet.")
        return section, {"drift": None}
    status = np.where(
        drift["psi"] >= ACT_PSI, "act", np.where(drift["psi"] >= WATCH_PSI, "watch", "ok")
    )
    drift = drift.assign(status=status)
    section.text(
        "The population stability index compares this month's distribution of each feature "
        "and score with last month's, over ten bins cut at last month's deciles: "
        "PSI = Σ (a − e)·ln(a / e), with e and a the shares of last month and this month in "
        f"each bin. Common practice reads below {WATCH_PSI:g} as stable, {WATCH_PSI:g} to "
        f"{ACT_PSI:g} as worth watching and above {ACT_PSI:g} as a shift to act on (check the "
        "data feed, then consider refitting). Calendar terms are left out: they change every "
        "month by design. A feature that takes one value per area (such as the local move "
        "rate) can show a large index when a few areas' values pass one another; look at the "
        "areas before acting on it."
    )
    section.figure(
        fig.drift_chart(drift, WATCH_PSI, ACT_PSI), alt="Population stability index by variable"
    )
    flagged = drift[drift["status"] != "ok"].sort_values(
        ["psi", "variable"], ascending=[False, True]
    )
    if len(flagged):
        section.table(
            ["variable", "kind", "PSI", "flag"],
            [
                [Cell(r.variable), Cell(r.kind), number(r.psi), Cell(r.status, css=r.status)]
                for r in flagged.itertuples(index=False)
            ],
            caption="Variables above the watch threshold",
        )
    else:
        section.note(f"No feature or score moved beyond the watch threshold ({WATCH_PSI:g}).")
    top = drift.sort_values(["psi", "variable"], ascending=[False, True]).iloc[0]
    return section, {
        "drift": {
            "compared": len(drift),
            "watch": sorted(drift.loc[drift["status"] == "watch", "variable"].astype(str)),
            "act": sorted(drift.loc[drift["status"] == "act", "variable"].astype(str)),
            "largest": {"variable": str(top["variable"]), "psi": float(top["psi"])},
        }
    }


# -- the uptake forecast ---------------------------------------------------------------------
def forecast_section(inputs: ReportInputs) -> tuple[Section, dict[str, Any]]:
    """Fan charts of the uptake forecast, the total and the areas expecting most."""
    section = Section("forecast", "Uptake forecast")
    forecast = inputs.forecast
    if forecast is None or len(forecast) == 0:
        section.note("No uptake forecast was made this month.")
        return section, {"forecast": None}
    forecast = forecast.assign(area_id=forecast["area_id"].astype(str))
    level = _interval_level(forecast.columns)
    joiners = "expected_joiners" in forecast.columns
    section.text(
        "Expected new holders among today's customers, month by month, net of customers "
        "who leave first"
        + (", plus those among customers who join during these months" if joiners else "")
        + (f"; the band is the {level} % prediction interval for the count." if level else ".")
        + (" The monthly chart shows the last months' realised uptakes on its left."
           if inputs.uptake_history is not None else "")
    )  # fmt: skip
    key: dict[str, Any] = {}
    for product in sorted(forecast["product"].astype(str).unique()):
        total = forecast[(forecast["product"] == product) & (forecast["area_id"] == "all")]
        if total.empty:
            continue
        for cumulative in (False, True):
            figure = fan_chart(
                forecast, product=product, area_id="all", cumulative=cumulative,
                history=_history(inputs.uptake_history, product),
            )  # fmt: skip
            what = "cumulative" if cumulative else "monthly"
            section.figure(
                fig.png_bytes(figure), alt=f"Fan chart of {what} uptake of {product}, all areas"
            )
        last = total.iloc[-1]
        entry = {
            "first_month": str(total["month"].iloc[0]),
            "last_month": str(last["month"]),
            "expected": float(last["cumulative_expected"]),
        }
        words = f"{float(last['cumulative_expected']):,.0f}"
        if level:
            lo, hi = last[f"cumulative_lower_{level}"], last[f"cumulative_upper_{level}"]
            entry[f"lower_{level}"], entry[f"upper_{level}"] = float(lo), float(hi)
            words += f" ({level} % interval {float(lo):,.0f}–{float(hi):,.0f})"
        section.text(
            f"{product}: by {last['month']}, {words} customers are expected to have taken it "
            "up"
            + (f", {float(last['cumulative_expected_joiners']):,.0f} of them customers who have "
               "not joined yet." if joiners else ".")
        )  # fmt: skip
        if joiners:
            entry["expected_joiners"] = float(last["cumulative_expected_joiners"])
        key[product] = entry
        areas = forecast[(forecast["product"] == product) & (forecast["area_id"] != "all")]
        if len(areas):
            ends = areas[areas["month"] == last["month"]]
            ends = ends.sort_values(["cumulative_expected", "area_id"], ascending=[False, True])
            rows = []
            for r in ends.head(10).itertuples(index=False):
                row = [Cell(str(r.area_id)), number(r.cumulative_expected, 1)]
                if level:
                    lo = getattr(r, f"cumulative_lower_{level}")
                    hi = getattr(r, f"cumulative_upper_{level}")
                    row.append(Cell(f"{lo:,.0f}–{hi:,.0f}", number=True))
                rows.append(row)
            header = ["area", "expected by " + str(last["month"])]
            if level:
                header.append(f"{level} % interval")
            section.table(header, rows, caption=f"{product}: the ten areas expecting most")
    return section, {"forecast": key}


def _history(history: pd.DataFrame | None, product: str) -> pd.DataFrame | None:
    if history is None or len(history) == 0:
        return None
    return history[history["product"].astype(str) == product]


def _interval_level(columns: pd.Index) -> str | None:
    levels = []
    for name in columns:
        match = re.fullmatch(r"cumulative_lower_(\d+(?:_\d+)?)", str(name))
        if match and f"cumulative_upper_{match.group(1)}" in columns:
            levels.append(match.group(1))
    return sorted(levels, key=lambda s: float(s.replace("_", ".")))[-1] if levels else None


# -- the plan --------------------------------------------------------------------------------
def plan_section(inputs: ReportInputs) -> tuple[Section, dict[str, Any]]:
    """Offers by count, cost and value, budget, the weekly schedule, offer rates by area."""
    section = Section("plan", "This month's contact plan")
    plan = inputs.plan
    if plan is None:
        section.note("No contact plan was made this month.")
        return section, {"plan": None}
    summary = inputs.plan_summary or {}
    contacts = len(plan)
    cost = float(plan["cost"].sum())
    value = float(plan["expected_value"].sum())
    budget = summary.get("budget")
    unit = f" {inputs.currency}" if inputs.currency else ""
    section.text(
        f"{contacts:,} customers are to be contacted at a cost of {cost:,.2f}{unit}, for an "
        f"expected value of {value:,.2f}{unit} (value kept with the offer, less without it, "
        "less its cost; an estimate, not a promise)."
        + (
            f" Budget used: {cost:,.2f} of {float(budget):,.2f}{unit} "
            f"({pct_text(cost / budget, 1)})."
            if budget and np.isfinite(budget) and budget > 0
            else ""
        )
        + ("" if unit else " Amounts are in the unit of the customers' monthly margin.")
    )
    by_offer = plan.groupby("offer", sort=True).agg(
        contacts=("customer_id", "size"), cost=("cost", "sum"), value=("expected_value", "sum")
    )
    rows = [
        [
            Cell(str(o)),
            count(r.contacts),
            money(r.cost),
            money(r.value),
            money(r.value / r.contacts),
        ]
        for o, r in by_offer.iterrows()
    ]
    rows.append(
        [
            Cell("all"),
            count(contacts),
            money(cost),
            money(value),
            money(value / contacts if contacts else np.nan),
        ]
    )
    section.table(
        ["offer", "contacts", f"cost{unit}", f"expected value{unit}", f"per contact{unit}"],
        rows,
        caption="Offers",
    )
    _offer_effects(section, summary.get("effects"))
    _offer_limits(section, summary.get("offers"), unit)
    solver = {k: summary[k] for k in ("solver", "status", "gap", "relative_gap") if k in summary}
    if solver:
        section.table(
            ["solver figure", "value"],
            [[Cell(k), Cell(_plain_text(v), number=True)] for k, v in solver.items()],
            caption="How the plan was chosen (gap: how far the plan could be from the best)",
        )
    weekly = plan.groupby(["week", "offer"]).size().unstack("offer", fill_value=0).sort_index()
    if contacts:
        section.figure(fig.schedule_chart(plan), alt="Contacts per week by offer")
        section.table(
            ["week", *[str(c) for c in weekly.columns], "all"],
            [
                [Cell(str(w)), *[count(v) for v in row.to_numpy()], count(row.sum())]
                for w, row in weekly.iterrows()
            ],
            caption="Weekly schedule (most urgent customers first)",
        )
    else:
        section.note("The plan selects nobody this month, so there is no schedule.")
    key: dict[str, Any] = {
        "contacts": contacts,
        "cost": cost,
        "expected_value": value,
        "budget": budget,
        "budget_used": summary.get("budget_used", cost),
        "by_offer": {
            str(o): {
                "contacts": int(r.contacts),
                "cost": float(r.cost),
                "expected_value": float(r.value),
            }
            for o, r in by_offer.iterrows()
        },
        "by_week": {str(w): int(row.sum()) for w, row in weekly.iterrows()},
    }
    for extra in ("gap", "relative_gap", "solver", "excluded_customers"):
        if extra in summary:
            key[extra] = summary[extra]
    key["currency"] = inputs.currency or None
    key["planned_again"] = _planned_again(section, inputs.planned_again)
    rate_key = _offer_rates(section, inputs.offer_rates, _area_names(inputs.areas))
    return section, {"plan": key, "offer_rates": rate_key, "offers": summary.get("offers")}


def _planned_again(section: Section, again: dict[str, Any] | None) -> dict[str, Any] | None:
    """How many of last month's planned customers are planned again, in words."""
    if not again:
        return None
    share = again.get("share")
    section.text(
        f"Of last month's {again['previous_contacts']:,} planned customers, "
        f"{again['still_eligible']:,} may still receive an offer; "
        f"{again['planned_again']:,} of them are planned again"
        + (f" ({pct_text(share, 0)})." if share is not None else ".")
        + " A low share with an unchanged portfolio means the ranking moved: see the "
        "champions and their changes above."
    )
    return again


_LIMIT_WORDS = {
    "eligibility": "nobody could receive it (its eligibility rules, the do-not-contact and "
    "hardship flags, or the contact cooldown)",
    "no positive value": "no customer who could receive it had a positive expected value (the "
    "offer costs more than it is expected to keep or win)",
    "capacity": "its weekly capacity was reached",
    "budget": "the budget ran out before it",
    "none": "every customer worth contacting with it was planned (some with a better offer)",
}


def _offer_limits(section: Section, offers: dict[str, Any] | None, unit: str) -> None:
    """Per offer: who could get it, who was worth it, who got it, and what held it back."""
    if not offers:
        return
    section.table(
        [
            "offer",
            "customers",
            "eligible",
            "positive value",
            "chosen",
            f"spend{unit}",
            "limited by",
        ],
        [
            [
                Cell(str(name)),
                count(f["candidates"]),
                count(f["eligible"]),
                count(f["positive_value"]),
                count(f["chosen"]),
                money(f["spend"]),
                Cell(str(f["limited_by"])),
            ]
            for name, f in offers.items()
        ],
        caption="Why each offer got the contacts it did (eligible: meets its rules and is not "
        "flagged; positive value: of those, outside the cooldown and worth more than it costs)",
    )
    for name, f in offers.items():
        few = f["chosen"] == 0 or f["chosen"] < 0.1 * max(f["positive_value"], 1)
        if few or f["limited_by"] in ("capacity", "budget"):
            section.text(
                f"{name}: {f['chosen']:,} contact(s), because "
                f"{_LIMIT_WORDS.get(f['limited_by'], f['limited_by'])}."
            )


def _offer_effects(section: Section, effects: dict[str, Any] | None) -> None:
    """Where each offer's hazard ratio comes from: past campaigns (with its interval) or the
    settings."""
    if not effects:
        return
    rows = [
        [
            Cell(str(name)),
            Cell(f"{e['hazard_ratio']:.3f}", number=True),
            Cell(
                f"{e['lower_95']:.3f} to {e['upper_95']:.3f}" if e["from"] == "campaigns" else "",
                number=True,
            ),
            Cell("past campaigns with a hold-out" if e["from"] == "campaigns" else "settings"),
        ]
        for name, e in effects.items()
    ]
    section.table(
        ["offer", "hazard ratio", "95% interval", "effect from"],
        rows,
        caption="Offer effects: estimated from past campaigns, or as configured",
    )


def _area_names(areas: pd.DataFrame) -> dict[str, str]:
    """``area_id`` → "name (id)" where the areas have names, else nothing."""
    if "area_name" not in areas:
        return {}
    ids = areas["area_id"].astype(str)
    return {a: f"{n} ({a})" for a, n in zip(ids, areas["area_name"].astype(str), strict=True)}


def _offer_rates(
    section: Section, rates: pd.DataFrame | None, names: dict[str, str] | None = None
) -> dict[str, Any] | None:
    names = names or {}
    section.heading("Offer rates by area")
    if rates is None or len(rates) == 0:
        section.note("Offer rates by area were not computed.")
        return None
    rates = rates.assign(area_id=rates["area_id"].astype(str))
    attributes = [
        c for c in rates.columns
        if c not in RATE_COLUMNS and pd.api.types.is_numeric_dtype(rates[c])
    ]  # fmt: skip
    attribute = attributes[0] if attributes else None
    overall = rates["contacts"].sum() / rates["customers"].sum()
    if rates["contacts"].sum() == 0:
        section.note("The plan contacts nobody, so there are no offer rates to compare.")
        return {"overall_rate": 0.0}
    sizeable = rates[rates["customers"] >= MIN_AREA_CUSTOMERS]
    if sizeable.empty:
        sizeable = rates
    ordered = sizeable.sort_values(["rate_ratio", "area_id"], ascending=[False, True])
    high, low = ordered.iloc[0], ordered.iloc[-1]
    section.text(
        "Each area's share of the plan's contacts next to its share of customers. An area "
        "contacted far more or less often than its share may mean an area feature (such as "
        "the share of rented homes) stands in for a protected characteristic; check with "
        "your data-protection officer before acting on such a pattern. "
        f"All areas: {pct_text(overall, 1)} of customers contacted. Among areas with at least "
        f"{MIN_AREA_CUSTOMERS} customers, the highest is area "
        f"{names.get(high['area_id'], high['area_id'])} "
        f"({pct_text(high['contact_rate'], 1)}, {high['rate_ratio']:.2f}× the portfolio) and "
        f"the lowest area {names.get(low['area_id'], low['area_id'])} "
        f"({pct_text(low['contact_rate'], 1)}, "
        f"{low['rate_ratio']:.2f}×); small areas swing widely by chance."
    )
    section.figure(
        fig.offer_rate_chart(rates, attribute),
        alt="Share of each area's customers in the plan, against the portfolio's share",
    )
    order = [attribute, "area_id"] if attribute else ["area_id"]
    rows = []
    for r in rates.sort_values(order, kind="stable").itertuples(index=False):
        row = [
            Cell(names.get(r.area_id, r.area_id)),
            count(r.customers),
            percent(r.customer_share, 1),
            count(r.contacts),
            percent(getattr(r, "contact_share", np.nan), 1),
            percent(r.contact_rate, 1),
            number(getattr(r, "rate_ratio", np.nan), 2),
        ]
        row += [number(getattr(r, a), 3) for a in attributes]
        rows.append(row)
    section.table(
        [
            "area",
            "customers",
            "share of customers",
            "contacts",
            "share of contacts",
            "contacted",
            "rate ratio",
            *attributes,
        ],
        rows,
        caption="Offer rates by area" + (f", ordered by {attribute}" if attribute else ""),
    )
    key: dict[str, Any] = {
        "overall_rate": float(overall),
        "min_area_customers": MIN_AREA_CUSTOMERS,
        "highest": {"area_id": high["area_id"], "rate_ratio": float(high["rate_ratio"])},
        "lowest": {"area_id": low["area_id"], "rate_ratio": float(low["rate_ratio"])},
    }
    if attribute:
        quarters = attribute_quarters(rates, attribute)
        section.table(
            [f"areas by {attribute}", f"{attribute} range", "customers", "contacts", "contacted"],
            [
                [
                    Cell(f"quarter {q.quarter}"),
                    Cell(f"{q.low:.3g}–{q.high:.3g}", number=True),
                    count(q.customers),
                    count(q.contacts),
                    percent(q.contact_rate, 1),
                ]
                for q in quarters.itertuples(index=False)
            ],
            caption=(
                f"Customers contacted by quarter of {attribute} (areas ranked by {attribute}, "
                "cut into four groups of about equal numbers of customers)"
            ),
        )
        key[f"contact_rate_by_{attribute}_quarter"] = quarters["contact_rate"].tolist()
    return key


def attribute_quarters(rates: pd.DataFrame, attribute: str) -> pd.DataFrame:
    """Contact rate in four groups of areas ranked by ``attribute``.

    Areas are sorted by the attribute; an area joins group ``⌈4·m⌉`` where m is the
    cumulative share of customers at the area's midpoint, so each group holds about a
    quarter of the customers (a whole area is never split).

    Returns
    -------
    pandas.DataFrame
        ``quarter`` (1 = lowest attribute), ``low``, ``high`` (the attribute's range),
        ``customers``, ``contacts``, ``contact_rate``.
    """
    r = rates.sort_values([attribute, "area_id"], kind="stable")
    customers = r["customers"].to_numpy(float)
    middle = (np.cumsum(customers) - customers / 2.0) / customers.sum()
    group = np.clip(np.ceil(4.0 * middle), 1, 4).astype(int)
    out = (
        r.assign(quarter=group)
        .groupby("quarter")
        .agg(
            low=(attribute, "min"),
            high=(attribute, "max"),
            customers=("customers", "sum"),
            contacts=("contacts", "sum"),
        )
        .reset_index()
    )
    out["contact_rate"] = out["contacts"] / out["customers"]
    return out


def _plain_text(value: Any) -> str:
    if isinstance(value, float | np.floating):
        return f"{float(value):.4g}"
    return str(value)


# -- cautions --------------------------------------------------------------------------------
def cautions_section() -> Section:
    """The cautions every report carries."""
    section = Section("cautions", "Before acting on this report")
    section.bullets(
        [
            "This report ranks people for marketing contact. Follow the privacy and "
            "marketing-consent law that applies to you and your organisation's own rules; "
            "where they differ from anything here, they win.",
            "Contact only customers who agreed to be contacted for marketing. Customers "
            "flagged do-not-contact or in hardship are never selected by the plan; keep those "
            "flags up to date, and route hardship cases to the team that handles them, not to "
            "a sales offer.",
            "Area features (such as the share of rented homes) can act as proxies for "
            "protected characteristics. Read the offer rates by area above, and involve your "
            "data-protection officer if some areas are contacted much more or less often.",
            "Every figure here is an estimate from past data, with uncertainty: hazard ratios "
            "are associations, offer effects are estimates, and a predicted probability says "
            "nothing certain about one person.",
            "Local rules come first: where they require a review, a record or an opt-out, "
            "they take precedence over this plan.",
        ]
    )
    return section
