"""How much an offer changed its target hazard, from past campaigns with a random hold-out.

For each offer of the ``campaigns`` table that has both arms (``offered`` and ``held_out``), a
Cox model with the arm as its only covariate gives the hazard ratio of the offer's target cause
with a 95 % interval. Because the arms were randomised, this ratio needs no other adjustment.

Time scale: months since the offer month. A customer contacted in offer month m is followed
from the end of m (so only customers still a customer then are analysed), and month m + k is
time k. Follow-up ends at the first of: the target event (an event at time k), another exit
(censored at k: a competing cause ends the time at risk), the end of the effect window
m + ``months``, and the extract month (both censored).
"""

from __future__ import annotations

import logging
import numbers
from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd
from lifelines import CoxPHFitter

from .._layout import REASON_TO_CAUSE, TERMINAL_CAUSES, UPTAKE_PREFIX
from .._months import format_month
from ..data import Tables
from ..errors import InputError, UsageError

log = logging.getLogger(__name__)

EFFECT_COLUMNS = [
    "offer",
    "target",
    "hazard_ratio",
    "lower_95",
    "upper_95",
    "n_offered",
    "n_held_out",
    "events",
]
_CAUSE_TO_REASON = {cause: reason for reason, cause in REASON_TO_CAUSE.items()}


def campaign_follow_up(
    tables: Tables, offer: str, *, target: str = "churn", months: int = 6
) -> pd.DataFrame:
    """The follow-up of one offer's campaign rows, on the scale of months since the offer.

    Parameters
    ----------
    tables
        Checked input tables (`lifecycle.data.Tables`).
    offer
        An offer named in ``tables.campaigns``.
    target
        The cause whose hazard the offer targets: ``churn``, ``move_out``, ``other_exit`` or
        ``uptake_<product>``.
    months
        The effect window: follow-up ends ``months`` months after the offer month.

    Returns
    -------
    pandas.DataFrame
        One row per campaign row whose customer was still a customer at the end of the offer
        month (and, for an uptake target, did not hold the product then): ``customer_id``,
        ``offer_month`` (``YYYY-MM``), ``arm``, ``offered`` (1 offered, 0 held out),
        ``duration`` (months from the end of the offer month to the event or censoring,
        ≥ 1) and ``event`` (1 if the target event ended the follow-up).
    """
    _check_target(target, tables)
    months = _months(months, f"offer {offer!r}: months")
    camp = tables.campaigns
    rows = camp.loc[camp["offer"] == offer]
    if rows.empty:
        raise UsageError(
            f"offer {offer!r} is not in the campaigns table; it names "
            f"{sorted(pd.unique(camp['offer']).tolist())}"
        )
    customers = tables.customers
    position = pd.Index(customers["customer_id"]).get_indexer(rows["customer_id"])
    unknown = position < 0
    if unknown.any():
        raise InputError(
            table="campaigns",
            column="customer_id",
            problem="names customers who are not in the customers table",
            count=int(unknown.sum()),
            examples=rows["customer_id"].to_numpy()[unknown],
            fix="check the tables with `lifecycle check` first",
        )
    m = rows["month"].to_numpy(dtype=np.float64)
    end = customers["end"].to_numpy(dtype=np.float64)[position]
    reason = customers["end_reason"].astype(object).to_numpy()[position]
    stop = np.minimum(m + months, float(tables.extract_month))
    at_risk = (np.isnan(end) | (end > m)) & (stop > m)
    exit_or_stop = np.fmin(end, stop)
    if target.startswith(UPTAKE_PREFIX):
        uptake = _uptake_months(tables, target.removeprefix(UPTAKE_PREFIX), rows["customer_id"])
        at_risk &= ~(uptake <= m)
        event = uptake <= exit_or_stop
        ends = np.where(event, uptake, exit_or_stop)
    else:
        event = (end <= stop) & (reason == _CAUSE_TO_REASON[target])
        ends = exit_or_stop
    dropped = int((~at_risk).sum())
    if dropped:
        log.info(
            "offer %r: %d of %d campaign rows are not followed up (no longer a customer at the "
            "end of the offer month%s, or no month after it in the data)",
            offer, dropped, len(rows),
            ", or holding the product already" if target.startswith(UPTAKE_PREFIX) else "",
        )  # fmt: skip
    arm = rows["arm"].to_numpy(dtype=object)
    return pd.DataFrame(
        {
            "customer_id": rows["customer_id"].to_numpy()[at_risk],
            "offer_month": [format_month(int(v)) for v in m[at_risk]],
            "arm": arm[at_risk],
            "offered": (arm[at_risk] == "offered").astype(np.int8),
            "duration": (ends - m)[at_risk].astype(np.int32),
            "event": event[at_risk].astype(np.int8),
        }
    )


def estimate_offer_effects(
    tables: Tables,
    horizon_months: int = 6,
    *,
    offers: Sequence[Any] | None = None,
) -> pd.DataFrame:
    """Hazard ratio of each campaign offer on its target cause, offered vs held out.

    For every offer in ``tables.campaigns`` with both arms, fits a Cox proportional-hazards
    model (lifelines ``CoxPHFitter``, Efron's method for tied months) to `campaign_follow_up`
    with ``offered`` as the only covariate:

    .. math::

        h(k \\mid \\text{offered}) = h_0(k)\\, \\exp(\\beta \\cdot \\text{offered}),
        \\qquad \\text{hazard ratio} = e^{\\hat\\beta}

    with the 95 % Wald interval ``exp(β̂ ± 1.96·se)``; k is months since the offer month.
    A customer in several campaign rows of one offer gets a robust (sandwich) variance
    clustered by customer. Each estimate is logged, saying whether it replaces the hazard
    ratio of a configured offer or names no configured offer (then no plan uses it).

    Parameters
    ----------
    tables
        Checked input tables; ``tables.campaigns`` may be empty (then the result is empty).
    horizon_months
        Effect window for offers not found in ``offers``.
    offers
        Configured offers (objects with ``name``, ``target``, ``months`` and optionally
        ``hazard_ratio``, such as `lifecycle.decisions.Offer`). A campaign offer found here is
        analysed on its ``target`` over its ``months``; any other on ``churn`` over
        ``horizon_months``.

    Returns
    -------
    pandas.DataFrame
        One row per estimated offer: ``offer``, ``target``, ``hazard_ratio``, ``lower_95``,
        ``upper_95``, ``n_offered``, ``n_held_out`` (customers followed up in each arm) and
        ``events`` (target events in the window, both arms). Offers without a hold-out, or
        with no event in an arm (no finite estimate), are left out with a warning in the log.
    """
    horizon_months = _months(horizon_months, "horizon_months")
    configured = {str(o.name): o for o in (offers or ())}
    rows = []
    for name in sorted(pd.unique(tables.campaigns["offer"]).tolist()):
        spec = configured.get(name)
        target = str(spec.target) if spec is not None else "churn"
        months = spec.months if spec is not None else horizon_months
        arms = set(tables.campaigns.loc[tables.campaigns["offer"] == name, "arm"])
        if arms != {"offered", "held_out"}:
            log.warning(
                "offer %r has no randomised hold-out (arms %s); its effect is not estimated",
                name, sorted(arms),
            )  # fmt: skip
            continue
        follow = campaign_follow_up(tables, name, target=target, months=months)
        row = _fit(name, target, follow)
        if row is None:
            continue
        rows.append(row)
        guess = getattr(spec, "hazard_ratio", None) if spec is not None else None
        log.info(
            "offer %r: hazard ratio on %s %.3f (95%% interval %.3f to %.3f) over %d months from "
            "%d offered and %d held-out customers with %d events; %s",
            name, target, row["hazard_ratio"], row["lower_95"], row["upper_95"], months,
            row["n_offered"], row["n_held_out"], row["events"],
            f"the plan uses it instead of the configured hazard ratio {guess:g}"
            if guess is not None
            else "it is not a configured offer, so no plan uses it",
        )  # fmt: skip
    frame = pd.DataFrame(rows, columns=EFFECT_COLUMNS)
    counts = {"n_offered": np.int64, "n_held_out": np.int64, "events": np.int64}
    return frame.astype({"hazard_ratio": float, "lower_95": float, "upper_95": float, **counts})


def _fit(name: str, target: str, follow: pd.DataFrame) -> dict[str, Any] | None:
    offered = follow["offered"].to_numpy() == 1
    events = follow["event"].to_numpy() == 1
    n_offered, n_held = int(offered.sum()), int((~offered).sum())
    ev_offered, ev_held = int(events[offered].sum()), int(events[~offered].sum())
    if min(n_offered, n_held) == 0 or min(ev_offered, ev_held) == 0:
        log.warning(
            "offer %r: no finite hazard ratio on %s (followed up: %d offered with %d events, "
            "%d held out with %d events); its effect is not estimated",
            name, target, n_offered, ev_offered, n_held, ev_held,
        )  # fmt: skip
        return None
    data = follow[["duration", "event", "offered"]].astype(np.float64)
    repeated = follow["customer_id"].duplicated().any()
    fitter = CoxPHFitter()
    if repeated:
        data["cluster"] = pd.factorize(follow["customer_id"])[0]
        fitter.fit(data, "duration", "event", cluster_col="cluster", robust=True)
    else:
        fitter.fit(data, "duration", "event")
    summary = fitter.summary.loc["offered"]
    return {
        "offer": name,
        "target": target,
        "hazard_ratio": float(summary["exp(coef)"]),
        "lower_95": float(summary["exp(coef) lower 95%"]),
        "upper_95": float(summary["exp(coef) upper 95%"]),
        "n_offered": n_offered,
        "n_held_out": n_held,
        "events": ev_offered + ev_held,
    }


def _uptake_months(tables: Tables, product: str, ids: pd.Series) -> np.ndarray:
    up = tables.uptakes.loc[tables.uptakes["product"] == product]
    month = pd.Series(up["month"].to_numpy(dtype=np.float64), index=up["customer_id"].to_numpy())
    month = month[~month.index.duplicated()]
    return month.reindex(ids.to_numpy()).to_numpy(dtype=np.float64)


def _check_target(target: str, tables: Tables) -> None:
    allowed = [*TERMINAL_CAUSES, *(UPTAKE_PREFIX + p for p in tables.products)]
    if target not in allowed:
        raise UsageError(f"target was {target!r} but is expected to be one of {allowed}")


def _months(value: object, what: str) -> int:
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < 1:
        raise UsageError(f"{what} was {value!r} but is expected to be a whole number >= 1")
    return int(value)
