"""The report's plan section: offers, budget, the weekly schedule, why each offer got the
contacts it did, and offer rates by area (the fairness check)."""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from . import _figures as fig
from ._blocks import Cell, Section, count, money, number, pct_text, percent
from ._inputs import ReportInputs

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


# -- the plan --------------------------------------------------------------------------------
def plan_section(inputs: ReportInputs) -> tuple[Section, dict[str, Any]]:
    """Offers by count, cost and value, budget, the weekly schedule, offer rates by area."""
    section = Section("plan", "This month's contact plan")
    plan = inputs.plan
    if plan is None:
        section.note("No contact plan was made this month.")
        return section, {"plan": None}
    summary = inputs.plan_summary or {}
    unit = f" {inputs.currency}" if inputs.currency else ""
    _plan_overview(section, plan, summary.get("budget"), unit)
    _left_out(section, summary)
    by_offer = _offers_table(section, plan, unit)
    _offer_effects(section, summary.get("effects"))
    _own_effects_text(section, summary.get("effects"), summary.get("offers"))
    _offer_limits(section, summary.get("offers"), unit)
    _solver_table(section, summary)
    weekly = _schedule_table(section, plan)
    key = _plan_key(plan, summary, by_offer, weekly)
    key["currency"] = inputs.currency or None
    key["planned_again"] = _planned_again(section, inputs.planned_again)
    rate_key = _offer_rates(section, inputs.offer_rates, _area_names(inputs.areas))
    return section, {"plan": key, "offer_rates": rate_key, "offers": summary.get("offers")}


def _plan_overview(section: Section, plan: pd.DataFrame, budget: Any, unit: str) -> None:
    """Contacts, cost, expected value and the budget used, in words."""
    cost = float(plan["cost"].sum())
    value = float(plan["expected_value"].sum())
    section.text(
        f"{len(plan):,} customers are to be contacted at a cost of {cost:,.2f}{unit}, for an "
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


def _left_out(section: Section, summary: dict[str, Any]) -> None:
    """How many customers were never considered, and why (flags, consent), in words."""
    total, why = summary.get("excluded_customers"), summary.get("excluded_by") or {}
    if total is None:
        return
    parts = ", ".join(f"{name} {int(n):,}" for name, n in why.items())
    section.text(
        f"Left out before planning: {_customers(int(total))}"
        + (f" ({parts}; a customer may count under more than one)." if parts else ".")
    )


def _offers_table(section: Section, plan: pd.DataFrame, unit: str) -> pd.DataFrame:
    """Contacts, cost and expected value per offer and in all; returns the per-offer sums."""
    contacts = len(plan)
    cost = float(plan["cost"].sum())
    value = float(plan["expected_value"].sum())
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
    return by_offer


def _solver_table(section: Section, summary: dict[str, Any]) -> None:
    """How the plan was chosen: solver, status and optimality gap, where known."""
    solver = {k: summary[k] for k in ("solver", "status", "gap", "relative_gap") if k in summary}
    if solver:
        section.table(
            ["solver figure", "value"],
            [[Cell(k), Cell(_plain_text(v), number=True)] for k, v in solver.items()],
            caption="How the plan was chosen (gap: how far the plan could be from the best)",
        )


def _schedule_table(section: Section, plan: pd.DataFrame) -> pd.DataFrame:
    """The weekly schedule by offer (chart and table); returns contacts by week and offer."""
    weekly = plan.groupby(["week", "offer"]).size().unstack("offer", fill_value=0).sort_index()
    if len(plan):
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
    return weekly


def _plan_key(
    plan: pd.DataFrame, summary: dict[str, Any], by_offer: pd.DataFrame, weekly: pd.DataFrame
) -> dict[str, Any]:
    """The plan's key figures (JSON-ready)."""
    cost = float(plan["cost"].sum())
    key: dict[str, Any] = {
        "contacts": len(plan),
        "cost": cost,
        "expected_value": float(plan["expected_value"].sum()),
        "budget": summary.get("budget"),
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
    for extra in ("gap", "relative_gap", "solver", "excluded_customers", "excluded_by"):
        if extra in summary:
            key[extra] = summary[extra]
    return key


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
    "predicted harm": "customers it would otherwise have gone to are predicted to be harmed "
    "by it (their own effect raises the risk it targets), and harmed customers are not "
    "contacted ([plan] contact_when_harmful)",
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


def _own_effects_text(
    section: Section, effects: dict[str, Any] | None, offers: dict[str, Any] | None
) -> None:
    """For each offer: whether each customer's own effect or the average was used, why, and
    how many customers it is predicted to harm."""
    if not effects:
        return
    offers = offers or {}
    lines = []
    for name, e in effects.items():
        harmed = offers.get(name, {}).get("predicted_harmed")
        tail = "" if harmed is None else f"; {_customers(harmed)} predicted harmed"
        if e.get("per_customer"):
            lines.append(f"{name}: each customer's own effect ({e.get('reason', '')}){tail}.")
        elif "reason" in e:
            lines.append(f"{name}: the campaign's average effect ({e['reason']}){tail}.")
        elif e.get("from") == "campaigns":
            lines.append(
                f"{name}: the campaign's average effect (its campaign could not give an effect "
                f"per customer; the log says why){tail}."
            )
        else:
            lines.append(f"{name}: one effect for everyone (no randomised campaign){tail}.")
    section.text(
        "Effects per customer. An offer's effect on a customer is the change in the chance "
        "that the customer leaves (or takes the product up) within the value horizon if "
        "offered. Where a past campaign held a random group out, each customer's effect is "
        "learnt from it (a Cox model of the target with shrunk arm × feature interactions, "
        "used only when a test finds that the effect varies); otherwise every customer gets "
        "the average. Effects are predictions, not guarantees, and customers unlike the "
        "campaign's get effects extrapolated from it. " + " ".join(lines)
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
    """Each area's share of the contacts next to its share of customers: text, chart, table
    and, by the first numeric area attribute, the contact rate per quarter of areas."""
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
    high, low = _extreme_areas(rates)
    _rates_text(section, overall, high, low, names)
    section.figure(
        fig.offer_rate_chart(rates, attribute),
        alt="Share of each area's customers in the plan, against the portfolio's share",
    )
    _rates_table(section, rates, attributes, names)
    key: dict[str, Any] = {
        "overall_rate": float(overall),
        "min_area_customers": MIN_AREA_CUSTOMERS,
        "highest": {"area_id": high["area_id"], "rate_ratio": float(high["rate_ratio"])},
        "lowest": {"area_id": low["area_id"], "rate_ratio": float(low["rate_ratio"])},
    }
    if attribute:
        quarters = _quarters_table(section, rates, attribute)
        key[f"contact_rate_by_{attribute}_quarter"] = quarters["contact_rate"].tolist()
    return key


def _extreme_areas(rates: pd.DataFrame) -> tuple[pd.Series, pd.Series]:
    """The most and least contacted area relative to the portfolio, among areas with at least
    `MIN_AREA_CUSTOMERS` customers (among all areas when none has that many)."""
    sizeable = rates[rates["customers"] >= MIN_AREA_CUSTOMERS]
    if sizeable.empty:
        sizeable = rates
    ordered = sizeable.sort_values(["rate_ratio", "area_id"], ascending=[False, True])
    return ordered.iloc[0], ordered.iloc[-1]


def _rates_text(
    section: Section, overall: float, high: pd.Series, low: pd.Series, names: dict[str, str]
) -> None:
    """What the offer rates by area mean, and the highest and lowest area, in words."""
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


def _rates_table(
    section: Section, rates: pd.DataFrame, attributes: list[str], names: dict[str, str]
) -> None:
    """One row per area, ordered by the first area attribute (then by id)."""
    attribute = attributes[0] if attributes else None
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


def _quarters_table(section: Section, rates: pd.DataFrame, attribute: str) -> pd.DataFrame:
    """The contact rate per quarter of areas ranked by ``attribute`` (`attribute_quarters`)."""
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
    return quarters


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


def _customers(count: int) -> str:
    """``1 customer``, ``2,000 customers``, ``no customer``."""
    if count == 0:
        return "no customer"
    return f"{count:,} customer" + ("" if count == 1 else "s")
