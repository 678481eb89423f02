"""One customer, explained: what ``lifecycle explain`` shows.

`explain_customer` scores the portfolio at ``as_of`` exactly as the monthly run does, then
takes one customer's row apart: the features as of ``as_of``, the monthly hazards, survival
and cumulative incidence per cause, lifetime value, and for each offer its expected value
split into its terms, whether the customer may receive it (and if not, why not), and the
reasons the plan would give. Past months come from the score history when there is one.
"""

from __future__ import annotations

import logging
import math
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .._months import format_month, parse_month
from ..config import Config
from ..data import Tables
from ..errors import UsageError
from ..models import HazardModel

log = logging.getLogger(__name__)

__all__ = ["explain_customer"]


def explain_customer(
    tables: Tables,
    model: HazardModel,
    as_of: str | int,
    customer_id: Any,
    config: Config,
    *,
    history: str | Path | None = None,
) -> dict[str, Any]:
    """Everything the models and the plan say about one customer as of ``as_of``.

    Parameters
    ----------
    tables, model, config
        The checked tables, a fitted model (e.g. the run's champion) and the settings.
    as_of
        The month whose end the customer is scored at (``YYYY-MM``).
    customer_id
        The customer; compared as text with the customers table's ids.
    history
        The score history (DuckDB file); default the ``[run]`` history when it exists.

    Returns
    -------
    dict
        Plain JSON values: ``customer_id``, ``as_of``, ``first_month`` (the first month
        predicted), ``currency``, ``features`` (name → value, the snapshot's row), ``months``
        (1..T), ``hazards`` and ``incidence`` (cause → T monthly values), ``survival`` (T
        values), ``scores`` (the row of ``scores.csv``), ``lifetime_value``, ``offers`` (one
        entry per offer: ``offer``, ``target``, ``eligible``, ``exclusions`` (texts),
        ``expected_value`` = ``value_saved`` + ``uptake_value`` − ``cost``, ``reasons``,
        ``hazard_ratio`` (the customer's own where ``own_effect``, else the offer's), ``effect``
        (the change in the target's cumulative incidence over the value horizon if offered))
        and
        ``history`` (one entry per stored month up to ``as_of``: its scores, and the offer
        and reasons if the customer was planned).

    Raises
    ------
    UsageError
        When the customer is not in the data, or was not a customer at the end of ``as_of``.
    """
    from ..models import incidence_from_hazards, survival_from_hazards
    from ..value import value_settings
    from ._steps import score_portfolio

    month = format_month(parse_month(as_of, what="as_of") if isinstance(as_of, str) else as_of)
    _check_known(tables, customer_id, month)
    scored = score_portfolio(tables, model, month, config)
    ids = scored.snapshot["customer_id"].astype(str).to_numpy()
    where = np.flatnonzero(ids == str(customer_id))
    if not len(where):
        raise UsageError(
            f"customer {customer_id!r} is in the data but was not a customer at the end of "
            f"{month}; choose an --as-of when they were"
        )
    i = int(where[0])
    values = value_settings(config)
    horizon = values.horizon_months
    hazards = scored.hazards[i : i + 1, :horizon]
    survival = survival_from_hazards(hazards, scored.n_terminal)[0]
    incidence = incidence_from_hazards(hazards, scored.n_terminal)[0]
    row = scored.snapshot.iloc[i]
    out: dict[str, Any] = {
        "customer_id": str(ids[i]),
        "as_of": month,
        "first_month": scored.first_month,
        "currency": values.currency,
        "features": {str(k): _plain(row[k]) for k in scored.snapshot.columns if k != "customer_id"},
        "months": list(range(1, horizon + 1)),
        "hazards": {c: _floats(hazards[0, :, j]) for j, c in enumerate(scored.causes)},
        "survival": _floats(survival),
        "incidence": {c: _floats(incidence[:, j]) for j, c in enumerate(scored.causes)},
        "scores": {
            str(k): _plain(v) for k, v in scored.scores.iloc[i].items() if k != "customer_id"
        },
        "lifetime_value": _cents(scored.scores["lifetime_value"].iloc[i]),
        "offers": _offers(tables, model, scored, config, i),
        "history": _history(config, history, str(ids[i]), month),
    }
    return out


def _check_known(tables: Tables, customer_id: Any, month: str) -> None:
    known = tables.customers["customer_id"].astype(str)
    if str(customer_id) in set(known):
        return
    raise UsageError(
        f"customer {customer_id!r} is not in the customers table ({len(known):,} customers; "
        f"e.g. {', '.join(known.head(3))}); give an id from its customer_id column"
    )


def _offers(tables: Tables, model, scored, config: Config, i: int) -> list[dict[str, Any]]:
    """Per offer: value terms, eligibility and exclusions, reasons (as the plan gives them)."""
    from ..decisions import (
        RESPONDS_REASON,
        last_contact_months,
        phrases_from_config,
        plan_settings_from_config,
        portfolio_reference,
        risk_reason,
        top_reasons,
    )
    from ..value import offer_values, value_settings
    from ._effects import harmful
    from ._steps import area_feature_names, plan_offers, planning_frame

    offers = plan_offers(tables, config)
    if not offers:
        return []
    settings = plan_settings_from_config(config)
    values = value_settings(config)
    consent = [settings.consent_column] if settings.consent_column else []
    frame = planning_frame(tables, scored, [*settings.exclusions, *consent])
    one = frame.iloc[[i]].reset_index(drop=True)
    hazards = scored.hazards[i : i + 1]
    margin = scored.snapshot["monthly_margin"].to_numpy(dtype=np.float64)[i : i + 1]
    own, responds = _own_effects(tables, config, offers, scored, i)
    kwargs = dict(
        annual_discount=values.annual_discount,
        horizon=values.horizon_months,
        hazard_ratios={name: [ratio] for name, ratio in own.items()},
    )
    full = offer_values(hazards, scored.causes, margin, offers, **kwargs)
    # the same arithmetic with no margin leaves only the uptakes' value
    uptake = offer_values(hazards, scored.causes, np.zeros(1), offers, **kwargs)
    last = last_contact_months(tables.campaigns)
    hidden = () if settings.area_reasons else area_feature_names(tables)
    reference = portfolio_reference(model, scored.snapshot)
    snapshot = scored.snapshot.iloc[[i]]
    entries = []
    for j, offer in enumerate(offers):
        gain = float(full["value_with"].iloc[j] - full["value_without"].iloc[j])
        won = float(uptake["value_with"].iloc[j] - uptake["value_without"].iloc[j])
        reasons = top_reasons(
            model,
            snapshot,
            offer.target,
            max(settings.reasons, 1),
            reference=reference,
            phrases=phrases_from_config(config),
            hidden=hidden,
        )
        phrases = list(reasons["phrase"])
        column = settings.urgency_column(offer)
        if not phrases and column in frame:
            everyone = pd.to_numeric(frame[column], errors="coerce")
            phrases = [risk_reason(column, float(everyone.iloc[i]), float(everyone.median()))]
        if offer.name in responds:
            phrases = [RESPONDS_REASON, *phrases]
        exclusions = _exclusions(one, offer, settings, last, scored.first_month)
        ratio = own.get(offer.name, float(offer.hazard_ratio))
        if harmful(offer, [ratio])[0] and not settings.contact_when_harmful:
            exclusions.append("predicted to be harmed by it (its own effect raises the risk)")
        entries.append(
            {
                "offer": offer.name,
                "target": offer.target,
                "eligible": not exclusions,
                "exclusions": exclusions,
                "expected_value": _cents(full["expected_value"].iloc[j]),
                "value_saved": _cents(gain - won),
                "uptake_value": _cents(won),
                "cost": _cents(offer.cost),
                "reasons": phrases,
                "hazard_ratio": float(ratio),
                "own_effect": offer.name in own,
                "effect": float(full[f"cif_change_{offer.target}"].iloc[j]),
            }
        )
    return entries


def _own_effects(tables: Tables, config: Config, offers, scored, i: int):
    """The customer's own hazard ratio of each offer whose effect varies, and the offers it
    responds to more than most (`customer_effects`, on the panel of the scored month, as the
    run learns them)."""
    from ._effects import customer_effects, effect_flags, own_hazard_ratios
    from ._steps import panel_with_context

    month = format_month(parse_month(scored.first_month) - 1)
    panel = panel_with_context(tables, month, config)
    effects = customer_effects(tables, config, offers, scored.snapshot, panel=panel)
    own = {n: float(r.iloc[i]) for n, r in own_hazard_ratios(effects).items()}
    _, responsive = effect_flags(effects, offers)
    responds = (
        set()
        if responsive is None
        else set(responsive.columns[responsive.iloc[i].to_numpy(dtype=bool)])
    )
    return own, responds


def _exclusions(one: pd.DataFrame, offer, settings, last: pd.Series, month: str) -> list[str]:
    """Why the customer may not receive ``offer``, in words (empty: it may)."""
    import dataclasses

    from ..decisions import Eligibility, consent_mask, cooldown_ok, eligible_mask, excluded_mask

    out = []
    rules = offer.eligible
    single: list[tuple[str, Eligibility]] = []
    for name, low in rules.minimum.items():
        single.append((f"{name} below the minimum {low:g}", Eligibility(minimum={name: low})))
    for name, high in rules.maximum.items():
        single.append((f"{name} above the maximum {high:g}", Eligibility(maximum={name: high})))
    for product in rules.not_holding:
        single.append((f"already holds {product}", Eligibility(not_holding=(product,))))
    for product in rules.holding:
        single.append((f"does not hold {product}", Eligibility(holding=(product,))))
    for name, allowed in rules.segments.items():
        words = f"{name} not in {list(allowed)}"
        single.append((words, Eligibility(segments={name: allowed})))
    for words, rule in single:
        if not eligible_mask(one, dataclasses.replace(offer, eligible=rule))[0]:
            out.append(words)
    for flag in settings.exclusions:
        if flag in one and excluded_mask(one, [flag])[0]:
            out.append(f"flagged {flag}")
    consent = settings.consent_column
    if consent and not consent_mask(one, consent)[0]:
        out.append(f"no marketing consent ({consent} not set)")
    contact = pd.Series(last).reindex(one["customer_id"].to_numpy()).to_numpy(dtype=float)
    if not cooldown_ok(contact, parse_month(month), offer.cooldown_months)[0]:
        out.append(
            f"contacted in {format_month(int(contact[0]))}, within the "
            f"{offer.cooldown_months}-month cooldown"
        )
    return out


def _history(config: Config, given, customer: str, month: str) -> list[dict[str, Any]]:
    """The customer's stored months up to ``month``: scores, and the plan row if planned."""
    from ..history import ScoreHistory
    from ._run import run_settings

    path = Path(given) if given is not None else run_settings(config).history_path
    if not path.is_file():
        if given is not None:
            raise UsageError(f"--history {path} does not exist")
        return []
    store = ScoreHistory(path)
    out = []
    for stored in store.months():
        if parse_month(stored) > parse_month(month):
            continue
        scores = store.scores(stored)
        mine = scores[scores["customer_id"].astype(str) == customer]
        if mine.empty:
            continue
        entry = {"month": stored}
        entry.update({str(k): _plain(v) for k, v in mine.iloc[0].items() if k != "customer_id"})
        plan = store.plan(stored)
        planned = plan[plan["customer_id"].astype(str) == customer]
        entry["planned_offer"] = None if planned.empty else str(planned["offer"].iloc[0])
        entry["planned_reasons"] = None if planned.empty else str(planned["reasons"].iloc[0])
        out.append(entry)
    return out


def _cents(value: Any) -> float:
    """An amount rounded to cents (``+ 0.0`` turns −0.0 into 0.0)."""
    return round(float(value), 2) + 0.0


def _floats(values: np.ndarray) -> list[float]:
    return [float(f"{v:.6g}") for v in np.asarray(values, dtype=float)]


def _plain(value: Any) -> Any:
    """A value as plain JSON: numbers (NaN as None), text otherwise."""
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, bool | int | str) or value is None:
        return value
    if isinstance(value, float):
        return None if not math.isfinite(value) else float(f"{value:.6g}")
    if pd.isna(value):
        return None
    return str(value)
