"""What a policy is worth, in the monthly cycle: this month's comparison and a past campaign's.

``policy_comparison.csv`` (`month_policy_comparison`): the month's plan against spending the
same budget on the highest risk, at random, and on nobody, each customer valued with its own
offer effect (`lifecycle.decisions.compare_policies`), with 90 % intervals from draws of the
effect models' coefficients.

``policy_backtest.csv`` (`campaign_policy_backtest`): for each past month of each offer's
randomised campaign, the inverse-propensity estimate (`lifecycle.decisions.backtest_policies`)
of what three policies would have given on the campaign's customers: ``by_effect`` (offer the
customers the effect model predicts the offer helps, the model learnt without the customer's
own outcome: on the campaign's other months when it has some, else by cross-fitting over
folds of the month's customers), ``everyone`` and ``none``.
"""

from __future__ import annotations

import logging
from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd

from .._layout import UPTAKE_PREFIX
from ..config import Config
from ..data import Tables
from ..errors import UsageError

log = logging.getLogger(__name__)

POLICY_DRAWS = 200
"""Draws of the effects behind the comparison's intervals."""
POLICY_SEED = 0
"""Seed of those draws and of the ``random`` policy."""
BACKTEST_FOLDS = 5
"""Folds of the cross-fitting when a campaign has a single month."""


def month_policy_comparison(
    scored,
    plan,
    offers: Sequence,
    config: Config,
    effects: Mapping | None,
) -> pd.DataFrame | None:
    """``policy_comparison.csv`` of the month (``None`` when the hazards stayed on a cluster).

    ``effects`` are `customer_effects` (offer → own ratios and the model); an offer without
    one is valued with its single ratio, drawn within its ``effect_interval`` when it was
    estimated from a campaign. ``top_risk`` and ``random`` choose among the pairs the plan
    could choose from (``plan.allowed``: eligibility, flags, cooldown and, unless ``[plan]
    contact_when_harmful``, the predicted harm), so the comparison isolates how customers are
    ranked: by their risk, at random, or by their expected value with their own effect.
    """
    from ..decisions import compare_policies, policy_selections
    from ..value import value_settings

    if scored.hazards is None:
        log.info("policy comparison: skipped (the hazards stayed on the cluster)")
        return None
    ids = scored.snapshot["customer_id"].to_numpy()
    names = [o.name for o in offers]
    allowed = plan.allowed.reindex(index=ids, columns=names, fill_value=False).to_numpy(bool)
    risk = np.column_stack([_risk(scored.scores, ids, o.target) for o in offers])
    selections = policy_selections(plan.table, ids, offers, allowed, risk, seed=POLICY_SEED)
    points, draws = policy_effects(offers, scored.snapshot, effects or {})
    values = value_settings(config)
    table = compare_policies(
        scored.hazards, scored.causes, scored.snapshot["monthly_margin"].to_numpy(np.float64),
        offers, selections, points, draws,
        annual_discount=values.annual_discount, horizon=values.horizon_months,
    )  # fmt: skip
    log.info("policy comparison:\n%s", table.to_string(index=False))
    return table


def policy_effects(
    offers: Sequence,
    snapshot: pd.DataFrame,
    effects: Mapping,
    *,
    draws: int = POLICY_DRAWS,
) -> tuple[dict[str, np.ndarray], dict[str, np.ndarray]]:
    """Each offer's point ratio per customer and ``(draws, n)`` drawn ratios.

    An offer with an own effect that varies: its ratios (as the plan used them) and draws of
    its model's coefficients centred on them (`effect_draws`, on the features the ratios were
    predicted from: ``CustomerEffects.covariates``). Any other offer: its single ratio, drawn
    within its ``effect_interval`` (`interval_draws`; fixed when configured).
    """
    from ..decisions import effect_draws, interval_draws

    ids = snapshot["customer_id"].to_numpy()
    points, drawn = {}, {}
    for k, offer in enumerate(offers):
        own = effects.get(offer.name)
        seed = POLICY_SEED + 1 + k
        if own is not None and own.varying and own.covariates is not None:
            order = pd.Index(own.hazard_ratio.index).get_indexer(ids)
            if (order < 0).any():
                raise UsageError(
                    f"offer {offer.name}: {int((order < 0).sum())} scored customers have no own "
                    f"effect (for example {ids[order < 0][:5].tolist()})"
                )
            ratio = own.hazard_ratio.to_numpy(np.float64)[order]
            covariates = own.covariates.iloc[order]
            points[offer.name] = ratio
            drawn[offer.name] = effect_draws(
                own.model, covariates, draws=draws, seed=seed, centre=ratio
            )
        else:
            points[offer.name] = np.full(len(ids), float(offer.hazard_ratio))
            drawn[offer.name] = interval_draws(offer, len(ids), draws=draws, seed=seed)
    return points, drawn


def _risk(scores: pd.DataFrame, ids: np.ndarray, target: str) -> np.ndarray:
    """The target's cumulative incidence at the longest scored horizon, per customer."""
    prefix = f"cif_{target}_"
    columns = [c for c in scores.columns if c.startswith(prefix) and c.endswith("m")]
    if not columns:
        raise UsageError(f"the scores have no column {prefix}<h>m to rank customers by risk")
    longest = max(columns, key=lambda c: int(c[len(prefix) : -1]))
    return scores.set_index("customer_id")[longest].reindex(ids).to_numpy(np.float64)


def campaign_policy_backtest(
    tables: Tables,
    offers: Sequence,
    effects: Mapping,
    panel: pd.DataFrame,
    month: int,
    *,
    horizon: int = 12,
) -> pd.DataFrame:
    """``policy_backtest.csv``: per offer with own effects and each of its campaign months
    before ``month``, the inverse-propensity value of ``by_effect``, ``everyone`` and ``none``
    (columns ``offer``, ``offer_month`` and `lifecycle.decisions.BACKTEST_COLUMNS`).

    Each campaign customer's outcome is followed for ``horizon`` months after the offer month
    (or to the extract, whichever is first): ``target_events`` counts the target event in that
    time, ``value`` is the monthly margin times the months it stayed, less the offer's cost
    when offered. The effects themselves are learnt over the offer's effect months."""
    from .._months import parse_month
    from ..decisions import BACKTEST_COLUMNS
    from ..value import campaign_follow_up

    parts = []
    margins = tables.customers.set_index("customer_id")["monthly_margin"]
    for offer in offers:
        own = effects.get(offer.name)
        if own is None:
            continue
        follow = campaign_follow_up(tables, offer.name, target=offer.target, months=offer.months)
        outcome = campaign_follow_up(tables, offer.name, target=offer.target, months=horizon)
        if not outcome[["customer_id", "offer_month"]].equals(
            follow[["customer_id", "offer_month"]]
        ):
            raise UsageError(f"offer {offer.name}: the campaign's follow-ups do not align")
        follow = follow.assign(outcome_duration=outcome["duration"], outcome_event=outcome["event"])
        months = follow["offer_month"].astype(str)
        for offer_month in sorted(months.unique()):
            if parse_month(offer_month) >= month:
                continue
            part = _month_backtest(follow, months == offer_month, own, panel, offer, margins)
            if part is not None:
                parts.append(part.assign(offer=offer.name, offer_month=offer_month))
    columns = ["offer", "offer_month", *BACKTEST_COLUMNS]
    if not parts:
        return pd.DataFrame(columns=columns)
    return pd.concat(parts, ignore_index=True)[columns]


def _month_backtest(follow, here, own, panel, offer, margins) -> pd.DataFrame | None:
    """One campaign month's backtest table (``None`` when an arm is empty)."""
    from ..decisions import backtest_policies

    rows = follow[here.to_numpy()]
    offered = rows["offered"].to_numpy(bool)
    if offered.all() or not offered.any():
        return None
    ratio = _held_out_ratios(follow, here.to_numpy(), own, panel)
    helps = ratio > 1.0 if offer.target.startswith(UPTAKE_PREFIX) else ratio < 1.0
    margin = margins.reindex(rows["customer_id"].to_numpy()).to_numpy(np.float64)
    stayed = rows["outcome_duration"].to_numpy(np.float64)
    value = np.nan_to_num(margin) * stayed - offer.cost * offered
    policies = {"by_effect": helps, "everyone": np.ones(len(rows), bool)}
    policies["none"] = np.zeros(len(rows), bool)
    return backtest_policies(value, rows["outcome_event"].to_numpy(), offered, policies)


def _held_out_ratios(follow, here, own, panel) -> np.ndarray:
    """Each customer of the month's campaign rows ``here``: its ratio from an effect model
    fitted without its own outcome (the other months, else the other folds)."""
    from lifelines.exceptions import ConvergenceError
    from sklearn.model_selection import KFold

    from ..value import campaign_covariates, customer_offer_effects

    covariates = campaign_covariates(panel, follow, list(own.features))
    covariates = covariates.fillna(covariates.mean()).fillna(0.0)
    rows = np.flatnonzero(here)
    out = np.empty(len(rows))
    if (~here).any():
        groups = [(np.flatnonzero(~here), np.arange(len(rows)))]
    else:
        split = KFold(n_splits=BACKTEST_FOLDS, shuffle=True, random_state=POLICY_SEED)
        groups = [(rows[train], test) for train, test in split.split(rows)]
    for train, test in groups:
        try:
            model = customer_offer_effects(
                follow.iloc[train].reset_index(drop=True),
                covariates.iloc[train].reset_index(drop=True),
                seed=POLICY_SEED,
            )
        except (UsageError, ConvergenceError) as exc:  # e.g. an arm without a target event
            log.warning(
                "policy backtest: the campaign's average effect is used for %d customers (the "
                "effect model could not be fitted without them: %s)", len(test), exc,
            )  # fmt: skip
            out[test] = own.average_hazard_ratio
            continue
        out[test] = model.predict_hazard_ratio(covariates.iloc[rows[test]])
    return out


def policy_tables(tables, config, scored, plan, offers, effects, panel, month: str) -> dict:
    """The month's ``comparison`` (``None`` when the hazards stayed on a cluster) and the past
    campaigns' ``backtest`` (no rows when no offer has own effects)."""
    from .._months import parse_month
    from ..value import value_settings

    comparison = month_policy_comparison(scored, plan, offers, config, effects)
    backtest = campaign_policy_backtest(
        tables, offers, effects or {}, panel, parse_month(month),
        horizon=value_settings(config).horizon_months,
    )  # fmt: skip
    return {"comparison": comparison, "backtest": backtest}


def write_policy_tables(folder, policies: Mapping) -> dict:
    """``policy_comparison.csv`` and ``policy_backtest.csv`` written atomically (amounts to
    cents) into ``folder``, for the tables that are there."""
    from .._files import write_csv_atomic
    from ..value import round_money

    names = {"comparison": "policy_comparison.csv", "backtest": "policy_backtest.csv"}
    money = ("cost", "expected_value", "value", "lower_90", "upper_90")
    out = {}
    for key, name in names.items():
        table = policies.get(key)
        if table is not None:
            counts = [c for c in ("expected_saves", "target_events") if c in table]
            table = round_money(table, money).round(dict.fromkeys(counts, 4))
            out[f"policy_{key}"] = write_csv_atomic(folder / name, table)
    return out
