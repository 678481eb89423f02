"""The contact plan: who gets which offer, in which week, and why.

`make_plan` puts the steps together: the pairs allowed (eligibility, the exclusion flags, the
contact cooldown), the choice of offers (`allocate`: exact MILP or greedy, with the
optimality gap), the weeks (`schedule_weeks`, most urgent first) and the reasons
(`top_reasons`). The caller writes the table, e.g. with ``lifecycle._files.write_csv_atomic``.
"""

from __future__ import annotations

import logging
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from .._months import categorical_to_index, format_month, parse_month
from ..errors import InputError, UsageError
from ._exclusions import consent_mask, exclusion_counts, require_flag_columns
from ._offers import Offer, PlanSettings, _numbers, cooldown_ok, eligible_mask, excluded_mask
from ._reasons import (
    DEFAULT_PHRASES,
    Phrase,
    join_reasons,
    portfolio_reference,
    risk_reason,
    top_reasons,
    with_response_reason,
)
from ._schedule import schedule_weeks
from ._solve import Allocation, allocate

log = logging.getLogger(__name__)

__all__ = ["LIMITS", "Plan", "expected_value_matrix", "make_plan", "offer_figures"]

PLAN_COLUMNS = ["customer_id", "offer", "week", "expected_value", "cost", "reasons"]
#: features that are area-level in every panel (the areas table's attributes are added by the run)
AREA_FEATURES = ("local_move_rate", "rental_share")


@dataclass(frozen=True)
class Plan:
    """A contact plan and the figures that describe it.

    Attributes
    ----------
    table
        ``customer_id``, ``offer``, ``week``, ``expected_value``, ``cost``, ``reasons``;
        sorted by week, then urgency (highest first).
    allocation
        The solver's result (choice, objective, bound, gap, solver, counts).
    offers
        The offers, in the order of the allocation's columns.
    budget
        The budget the plan had.
    excluded
        Customers never considered because of an exclusion flag or consent.
    excluded_by
        Why (`exclusion_counts`): customers per flag, and those not opted in.
    offer_figures
        Per offer name, why it got the contacts it did (`offer_figures`).
    allowed
        Customer × offer: True where the customer may receive the offer this month
        (eligibility, flags and cooldown), indexed by ``customer_id``.
    own_effects
        Per offer with a randomised campaign: ``per_customer`` (whether each customer's own
        effect was used, else the average), ``average_hazard_ratio`` and ``reason``; added to
        the summary's ``effects``.
    """

    table: pd.DataFrame
    allocation: Allocation
    offers: tuple[Offer, ...]
    budget: float
    excluded: int
    offer_figures: dict[str, dict[str, Any]] = field(default_factory=dict)
    allowed: pd.DataFrame | None = None
    own_effects: dict[str, dict[str, Any]] = field(default_factory=dict)
    excluded_by: dict[str, int] = field(default_factory=dict)

    def planned_again(self, previous: pd.DataFrame | None) -> dict[str, Any] | None:
        """How many of last month's planned customers are planned again.

        ``previous_contacts``: customers in last month's plan; ``still_eligible``: of those,
        customers still scored who may receive at least one offer now; ``planned_again``: of
        those, customers in this plan; ``share`` = planned_again / still_eligible (``None``
        when nobody is still eligible). ``None`` without a previous plan.
        """
        if previous is None or self.allowed is None:
            return None
        before = pd.Index(previous["customer_id"].astype(str).unique())
        allowed = self.allowed.any(axis=1)
        allowed.index = allowed.index.astype(str)
        still = before[before.isin(allowed.index[allowed.to_numpy()])]
        now = set(self.table["customer_id"].astype(str))
        again = int(sum(c in now for c in still))
        return {
            "previous_contacts": len(before),
            "still_eligible": len(still),
            "planned_again": again,
            "share": again / len(still) if len(still) else None,
        }

    def summary(self) -> dict[str, Any]:
        """The key figures as plain values (for the report's JSON)."""
        a = self.allocation
        return {
            "objective": a.objective,
            "bound": a.bound,
            "gap": a.gap,
            "relative_gap": a.relative_gap,
            "solver": a.solver,
            "status": a.status,
            "budget": self.budget,
            "budget_used": a.budget_used,
            "contacts": int(sum(a.counts)),
            "counts": {o.name: c for o, c in zip(self.offers, a.counts, strict=True)},
            "effects": {
                o.name: {
                    "hazard_ratio": o.hazard_ratio,
                    "from": "campaigns" if o.effect_interval else "settings",
                    "lower_95": o.effect_interval[0] if o.effect_interval else None,
                    "upper_95": o.effect_interval[1] if o.effect_interval else None,
                    **self.own_effects.get(o.name, {"per_customer": False}),
                }
                for o in self.offers
            },
            "candidate_pairs": a.candidates,
            "excluded_customers": self.excluded,
            "excluded_by": self.excluded_by,
            "offers": self.offer_figures,
        }


def expected_value_matrix(
    values: pd.DataFrame, customer_ids: Sequence[Any], offers: Sequence[Offer]
) -> np.ndarray:
    """``(n, O)`` expected values from a long table ``customer_id``, ``offer``,
    ``expected_value``, aligned to ``customer_ids`` and ``offers``; missing pairs are NaN (not
    allowed)."""
    missing = [c for c in ("customer_id", "offer", "expected_value") if c not in values]
    if missing:
        raise UsageError(f"the expected values lack the column(s) {missing}")
    names = [o.name for o in offers]
    unknown = sorted(set(values["offer"].astype(str)) - set(names))
    if unknown:
        raise UsageError(f"expected values name offers {unknown} that are not configured: {names}")
    if values.duplicated(["customer_id", "offer"]).any():
        dup = values[values.duplicated(["customer_id", "offer"], keep=False)]
        raise InputError(
            table="expected_values",
            column="customer_id",
            problem="a customer has two expected values for one offer",
            count=len(dup),
            examples=dup["customer_id"],
        )
    wide = values.pivot(index="customer_id", columns="offer", values="expected_value")
    wide = wide.reindex(index=pd.Index(customer_ids), columns=names)
    return wide.to_numpy(dtype=float)


def make_plan(
    frame: pd.DataFrame,
    expected_values: np.ndarray | pd.DataFrame,
    offers: Sequence[Offer],
    settings: PlanSettings,
    *,
    last_contact: pd.Series | None = None,
    plan_month: str | int | None = None,
    model: Any = None,
    snapshot: pd.DataFrame | None = None,
    phrases: Sequence[Phrase] = DEFAULT_PHRASES,
    area_features: Sequence[str] = AREA_FEATURES,
    harmed: pd.DataFrame | None = None,
    responsive: pd.DataFrame | None = None,
) -> Plan:
    """The contact plan for one month.

    Parameters
    ----------
    frame
        One row per customer: ``customer_id`` (unique), the columns the offers' eligibility
        rules name, each offer's urgency column (``settings.urgency``, e.g. ``cif_churn_3m``)
        and the exclusion flags (``do_not_contact``, ``hardship`` and ``[plan] exclude``; a
        missing one is an `InputError` unless ``[plan] flags_absent`` names it) and the
        ``[plan] consent_column`` when set. Typically the snapshot
        merged with its scores and the customers' flags.
    expected_values
        ``(n, O)`` array in the order of ``frame`` and ``offers`` (NaN: not allowed), or a
        long table ``customer_id``, ``offer``, ``expected_value``. The expected value of an
        offer is its value with the offer minus without it minus its cost.
    offers, settings
        From `offers_from_config` and `plan_settings_from_config`.
    last_contact
        Month index of each customer's last contact, indexed by ``customer_id`` (see
        `last_contact_months`); customers within an offer's cooldown are not contacted.
    plan_month
        The month the contacts happen (index or ``YYYY-MM``); default the ``month`` column of
        ``frame`` (a snapshot's first predicted month).
    model, snapshot
        A fitted model and the snapshot rows (default ``frame``) for the reasons; without a
        model the ``reasons`` column is empty.
    phrases
        The phrase table for reasons (`phrases_from_config`).
    area_features
        Area-level features (the areas table's attributes and the local move rate): not
        given as reasons unless ``settings.area_reasons``.
    harmed
        Customer × offer (indexed by ``customer_id``, a column per offer name; missing: False):
        True where the offer is predicted to harm the customer (its own effect raises the risk
        a retention offer targets). Such pairs are never planned unless
        ``settings.contact_when_harmful``.
    responsive
        Customer × offer, as ``harmed``: True where the customer's own effect is clearly
        stronger than the offer's average; a planned row gets the reason `RESPONDS_REASON`
        first.

    Every planned row gets at least one reason: its top reasons (`top_reasons`), else its
    urgency against the portfolio's median (`risk_reason`).
    """
    offers = tuple(offers)
    if not offers:
        raise UsageError("no offers are configured; add [[offers]] tables to the config")
    ids = _checked_ids(frame)
    ev = _value_matrix(expected_values, ids, offers)
    urgency_columns = _urgency_columns(frame, settings, offers)
    rules, excluded, allowed = _allowed_pairs(
        frame, ids, offers, settings, last_contact, plan_month
    )
    harm, before = _pair_flags(harmed, ids, offers), allowed
    if not settings.contact_when_harmful:
        allowed = allowed & ~harm
        log.info("plan: %d pairs left out as predicted harmful", int((before & harm).sum()))
    allocation = _allocation(ev, offers, settings, allowed)
    urgency_all = np.column_stack([_numbers(frame[c]) for c in urgency_columns])
    table, rows, chosen, urgency = _scheduled_table(
        ids, ev, offers, settings, allocation, urgency_all
    )
    if model is not None and settings.reasons > 0 and len(table):
        source = frame if snapshot is None else snapshot
        causes = [offers[o].target for o in chosen]
        hidden = () if settings.area_reasons else tuple(area_features)
        table["reasons"] = _model_reasons(
            model, source, snapshot is not None, table, rows, causes, settings.reasons,
            phrases, hidden,
        )  # fmt: skip
    if settings.reasons > 0 and len(table):
        _risk_reasons(table, urgency_all, urgency_columns, chosen, urgency)
        table["reasons"] = with_response_reason(
            table["reasons"].tolist(), _pair_flags(responsive, ids, offers)[rows, chosen]
        )
    result = _plan_result(table, ids, ev, offers, settings, allocation, rules, excluded, allowed)
    result.excluded_by.update(exclusion_counts(frame, settings.exclusions, settings.consent_column))
    add_harm_figures(result.offer_figures, offers, ev, before & ~allowed, harm, allocation.choice)
    return result


def _pair_flags(flags: pd.DataFrame | None, ids: pd.Series, offers: tuple[Offer, ...]):
    """``(n, O)`` booleans from a customer × offer frame (missing customers or offers: False)."""
    if flags is None:
        return np.zeros((len(ids), len(offers)), dtype=bool)
    wide = flags.astype(bool).reindex(
        index=pd.Index(ids.to_numpy()), columns=[o.name for o in offers], fill_value=False
    )
    return wide.to_numpy(dtype=bool)


def add_harm_figures(
    figures: dict[str, dict[str, Any]],
    offers: Sequence[Offer],
    ev: np.ndarray,
    held_back: np.ndarray,
    harm: np.ndarray,
    choice: np.ndarray,
) -> None:
    """Add ``predicted_harmed`` (customers the offer is predicted to harm) and
    ``harmed_planned`` (of those, planned for it) to each offer's figures; ``limited_by``
    becomes ``"predicted harm"`` when harmed customers with a positive expected value were
    left out and neither the capacity nor the budget held the offer back. ``held_back``: the
    pairs otherwise allowed that the harm rule left out."""
    positive = np.nan_to_num(ev, nan=-np.inf) > 0
    for j, offer in enumerate(offers):
        f = figures[offer.name]
        f["predicted_harmed"] = int(harm[:, j].sum())
        f["harmed_planned"] = int(np.sum(harm[:, j] & (choice == j)))
        blocked = held_back[:, j] & positive[:, j]
        if blocked.any() and f["limited_by"] not in ("capacity", "budget"):
            f["limited_by"] = "predicted harm"


def _allocation(
    ev: np.ndarray, offers: tuple[Offer, ...], settings: PlanSettings, allowed: np.ndarray
) -> Allocation:
    """At most one offer per customer within the budget and the offers' capacities."""
    return allocate(
        ev,
        np.array([o.cost for o in offers]),
        np.array([o.capacity(settings.weeks) for o in offers]),
        settings.budget,
        allowed=allowed,
        solver=settings.solver,
        max_exact_customers=settings.max_exact_customers,
        time_limit_s=settings.time_limit_s,
        mip_gap=settings.mip_gap,
    )


def _plan_result(
    table: pd.DataFrame,
    ids: pd.Series,
    ev: np.ndarray,
    offers: tuple[Offer, ...],
    settings: PlanSettings,
    allocation: Allocation,
    rules: np.ndarray,
    excluded: np.ndarray,
    allowed: np.ndarray,
) -> Plan:
    """The `Plan` with its per-offer figures, logged."""
    log.info(
        "plan: %d contacts, expected value %.2f (bound %.2f, gap %.3g%%), %s solver",
        len(table),
        allocation.objective,
        allocation.bound,
        100 * allocation.relative_gap,
        allocation.solver,
    )
    eligible = rules & ~excluded[:, None]
    return Plan(
        table=table[PLAN_COLUMNS],
        allocation=allocation,
        offers=offers,
        budget=float(settings.budget),
        excluded=int(excluded.sum()),
        offer_figures=offer_figures(
            ev, eligible, allowed, allocation, offers, settings.weeks, float(settings.budget)
        ),
        allowed=pd.DataFrame(
            allowed, index=pd.Index(ids.to_numpy()), columns=[o.name for o in offers]
        ),
    )


def _checked_ids(frame: pd.DataFrame) -> pd.Series:
    """The planning frame's ``customer_id`` column, which must be present and unique."""
    ids = frame["customer_id"] if "customer_id" in frame else None
    if ids is None:
        raise UsageError("the planning frame needs a customer_id column")
    if ids.duplicated().any():
        dup = ids[ids.duplicated(keep=False)]
        raise InputError(
            table="scores",
            column="customer_id",
            problem="customer_id is not unique",
            count=len(dup),
            examples=dup,
        )
    return ids


def _value_matrix(
    expected_values: np.ndarray | pd.DataFrame, ids: pd.Series, offers: tuple[Offer, ...]
) -> np.ndarray:
    """The ``(n, O)`` expected values, from a matrix or a long table (see `make_plan`)."""
    if isinstance(expected_values, pd.DataFrame):
        return expected_value_matrix(expected_values, ids.to_numpy(), offers)
    ev = np.asarray(expected_values, dtype=float)
    if ev.shape != (len(ids), len(offers)):
        raise UsageError(
            f"expected values have shape {ev.shape} but the plan has {len(ids)} customers × "
            f"{len(offers)} offers"
        )
    return ev


def _urgency_columns(
    frame: pd.DataFrame, settings: PlanSettings, offers: tuple[Offer, ...]
) -> list[str]:
    """Each offer's urgency column, which the frame must hold."""
    urgency_columns = [settings.urgency_column(o) for o in offers]
    absent = sorted({c for c in urgency_columns if c not in frame})
    if absent:
        raise UsageError(
            f"[plan] urgency names column(s) {absent}, which the planning frame lacks; "
            "score with those horizons or change [plan] urgency"
        )
    return urgency_columns


def _allowed_pairs(
    frame: pd.DataFrame,
    ids: pd.Series,
    offers: tuple[Offer, ...],
    settings: PlanSettings,
    last_contact: pd.Series | None,
    plan_month: str | int | None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Which customer-offer pairs are allowed: the offers' rules (``(n, O)``), the customers
    excluded by flags or consent (``(n,)``), and the pairs left after both and the cooldown."""
    allowed = np.column_stack([eligible_mask(frame, o) for o in offers])
    flags = settings.exclusions
    require_flag_columns(
        frame, flags, settings.flags_absent, settings.consent_column, table="planning frame"
    )
    excluded = excluded_mask(frame, flags) | ~consent_mask(frame, settings.consent_column)
    rules = allowed.copy()
    allowed &= ~excluded[:, None]
    if last_contact is not None:
        month = _plan_month(frame, plan_month)
        last = pd.Series(last_contact).reindex(ids.to_numpy()).to_numpy(dtype=float)
        for j, offer in enumerate(offers):
            allowed[:, j] &= cooldown_ok(last, month, offer.cooldown_months)
    log.info(
        "plan: %d customers, %d excluded by flags or consent, %d allowed pairs",
        len(frame),
        int(excluded.sum()),
        int(allowed.sum()),
    )
    return rules, excluded, allowed


def _scheduled_table(
    ids: pd.Series,
    ev: np.ndarray,
    offers: tuple[Offer, ...],
    settings: PlanSettings,
    allocation: Allocation,
    urgency_all: np.ndarray,
) -> tuple[pd.DataFrame, np.ndarray, np.ndarray, np.ndarray]:
    """The chosen rows scheduled into weeks and sorted by week, urgency and value; returns the
    table and, in its order, each row's position in the frame, offer index and urgency."""
    rows = np.flatnonzero(allocation.choice >= 0)
    chosen = allocation.choice[rows]
    urgency = urgency_all[rows, chosen]
    value = ev[rows, chosen]
    week = schedule_weeks(
        chosen, urgency, [o.weekly_capacity for o in offers], settings.weeks, tiebreak=value
    )
    table = pd.DataFrame(
        {
            "customer_id": ids.to_numpy()[rows],
            "offer": np.array([o.name for o in offers], dtype=object)[chosen],
            "week": week,
            "expected_value": value,
            "cost": np.array([o.cost for o in offers])[chosen],
            "reasons": "",
        }
    )
    order = np.lexsort((-value, -np.nan_to_num(urgency, nan=-np.inf), week))
    table = table.iloc[order].reset_index(drop=True)
    return table, rows[order], chosen[order], urgency[order]


def _model_reasons(
    model: Any,
    source: pd.DataFrame,
    own_snapshot: bool,
    table: pd.DataFrame,
    rows: np.ndarray,
    causes: list[str],
    n_reasons: int,
    phrases: Sequence[Phrase],
    hidden: tuple[str, ...],
) -> list[str]:
    """Each planned row's top reasons from the model, joined into text. ``source`` is the
    snapshot (``own_snapshot``: looked up by id) or the planning frame (by ``rows``)."""
    source = source.reset_index(drop=True)
    if own_snapshot:
        position = pd.Index(source["customer_id"]).get_indexer(table["customer_id"])
        if (position < 0).any():
            raise UsageError("the snapshot lacks planned customers; pass the matching snapshot")
    else:
        position = rows
    reasons = top_reasons(
        model,
        source.iloc[position],
        causes,
        n_reasons,
        reference=portfolio_reference(model, source),  # against everyone, not the planned
        phrases=phrases,
        hidden=hidden,
    )
    return join_reasons(reasons, table["customer_id"].tolist())


LIMITS = ("no positive value", "eligibility", "capacity", "budget", "predicted harm", "none")


def offer_figures(
    ev: np.ndarray,
    eligible: np.ndarray,
    allowed: np.ndarray,
    allocation: Allocation,
    offers: Sequence[Offer],
    weeks: int,
    budget: float,
) -> dict[str, dict[str, Any]]:
    """Per offer, why it got the contacts it did.

    ``candidates``: customers in the plan's frame; ``eligible``: those meeting the offer's
    rules and not excluded by a flag; ``allowed``: of those, outside the contact cooldown;
    ``positive_value``: allowed with a positive expected value; ``chosen``: contacts planned;
    ``spend``: their cost (to cents); ``capacity``: ``weekly_capacity × weeks`` (``None``: no
    limit); ``limited_by``, the first that holds of:

    - ``"eligibility"``: nobody is allowed (eligibility, flags or cooldown);
    - ``"no positive value"``: nobody allowed has a positive expected value;
    - ``"none"``: every allowed customer with a positive value is planned (this offer or a
      better one for the same customer);
    - ``"capacity"``: the offer's contacts reached its capacity;
    - ``"budget"``: one more contact of this offer would pass the budget;
    - ``"none"`` otherwise (the solver found no better use).

    `make_plan` then adds ``predicted_harmed``, ``harmed_planned`` and the limit
    ``"predicted harm"`` (`add_harm_figures`).
    """
    choice = allocation.choice
    spent = float(allocation.budget_used)
    out: dict[str, dict[str, Any]] = {}
    for j, offer in enumerate(offers):
        positive = allowed[:, j] & (np.nan_to_num(ev[:, j], nan=-np.inf) > 0)
        chosen = int(np.sum(choice == j))
        left_out = int(np.sum(positive & (choice < 0)))
        capacity = offer.capacity(weeks)
        if not allowed[:, j].any():
            limit = "eligibility"
        elif not positive.any():
            limit = "no positive value"
        elif left_out == 0:
            limit = "none"
        elif chosen >= capacity:
            limit = "capacity"
        elif spent + offer.cost > budget + 1e-9:
            limit = "budget"
        else:
            limit = "none"
        out[offer.name] = {
            "candidates": len(ev),
            "eligible": int(eligible[:, j].sum()),
            "allowed": int(allowed[:, j].sum()),
            "positive_value": int(positive.sum()),
            "chosen": chosen,
            "spend": round(chosen * offer.cost, 2),
            "capacity": None if not np.isfinite(capacity) else int(capacity),
            "limited_by": limit,
        }
    return out


def _risk_reasons(
    table: pd.DataFrame,
    urgency_all: np.ndarray,
    columns: Sequence[str],
    chosen: np.ndarray,
    urgency: np.ndarray,
) -> None:
    """Rows without a reason get their urgency against the portfolio's median, in words
    (``chosen`` and ``urgency`` in the order of the table's rows)."""
    empty = np.flatnonzero(table["reasons"].to_numpy(dtype=object) == "")
    at = table.columns.get_loc("reasons")
    typical: dict[int, float] = {}
    for row in empty:
        j = int(chosen[row])
        if j not in typical:
            everyone = urgency_all[:, j]
            finite = np.isfinite(everyone).any()
            typical[j] = float(np.nanmedian(everyone)) if finite else np.nan
        table.iat[row, at] = risk_reason(columns[j], float(urgency[row]), typical[j])


def _plan_month(frame: pd.DataFrame, plan_month: str | int | None) -> int:
    if plan_month is not None:
        return (
            parse_month(plan_month, what="plan_month")
            if isinstance(plan_month, str)
            else int(plan_month)
        )
    if "month" not in frame:
        raise UsageError(
            "a cooldown needs the plan month: pass plan_month, or a frame with the snapshot's "
            "month column"
        )
    month = frame["month"]
    if isinstance(month.dtype, pd.CategoricalDtype):
        distinct = pd.Series(month.cat.remove_unused_categories().cat.categories)
    else:
        distinct = pd.Series(pd.unique(month.to_numpy()))  # parse each distinct value once
    months = np.unique(categorical_to_index(distinct))
    if len(months) != 1:
        raise UsageError(
            f"the planning frame spans months {[format_month(m) for m in months[:5]]}; "
            "pass plan_month"
        )
    return int(months[0])
