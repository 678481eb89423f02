"""The steps of the monthly cycle as plain functions: each reads what the last one gave.

The command line's subcommands and `run_cycle` are thin layers over these.
"""

from __future__ import annotations

import dataclasses
import logging
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from .._months import categorical_to_index, format_month, parse_month
from ..config import Config
from ..data import Tables
from ..errors import UsageError
from ..models import HazardModel, make_model, score_customers
from ..panel import build_panel, build_snapshot
from ._effects import customer_effects, effect_flags, effect_summary, own_hazard_ratios

log = logging.getLogger(__name__)

SCORE_HORIZONS = (3, 6, 12)


def panel_with_context(
    tables: Tables, as_of: str | int, config: Config, *, spatial: bool = True
) -> pd.DataFrame:
    """The panel of ``as_of`` with its spatial context (what ``lifecycle panel`` writes)."""
    panel = build_panel(tables, as_of, config=config)
    if not spatial:
        return panel
    from ..spatial import add_spatial_context

    return add_spatial_context(panel, tables, config=config)


def snapshot_with_context(tables: Tables, as_of: str | int, config: Config) -> pd.DataFrame:
    """The scoring snapshot at the end of ``as_of``, with its spatial context."""
    from ..spatial import add_spatial_context

    snapshot = build_snapshot(tables, as_of, config=config)
    return add_spatial_context(snapshot, tables, config=config)


def fit_model(
    tables: Tables, as_of: str | int, family: str, config: Config
) -> tuple[HazardModel, tuple[str, str]]:
    """Fit ``family`` on the panel of ``as_of``; returns the model and its training window."""
    from ..models import check_fittable, min_events_setting

    panel = panel_with_context(tables, as_of, config)
    check_fittable(panel, min_events=min_events_setting(config))
    months = panel["month"]
    window = (str(months.min()), str(months.max()))
    log.info("fitting %s on %d customer-months (%s to %s)", family, len(panel), *window)
    model = make_model(family, config).fit(panel)
    return model, window


@dataclass
class Scored:
    """What scoring the portfolio at ``as_of`` gives.

    Attributes
    ----------
    snapshot
        One row per customer present at the end of ``as_of`` (features for the next month).
    hazards
        ``(n, T, K)`` monthly hazards for the next T months, causes in ``causes`` order;
        ``None`` when they stayed on a Dask cluster (`score_on_cluster`).
    causes
        Cause names (terminal, then uptake).
    scores
        ``customer_id``, ``survival_<h>m``, ``cif_<cause>_<h>m``, ``lifetime_value``.
    """

    snapshot: pd.DataFrame
    hazards: np.ndarray | None
    causes: tuple[str, ...]
    n_terminal: int
    scores: pd.DataFrame

    @property
    def first_month(self) -> str:
        """The first month predicted (the month after ``as_of``)."""
        return format_month(int(categorical_to_index(self.snapshot["month"])[0]))


def score_portfolio(
    tables: Tables,
    model: HazardModel,
    as_of: str | int,
    config: Config,
    *,
    horizons: Sequence[int] = SCORE_HORIZONS,
) -> Scored:
    """Score every customer present at the end of ``as_of``: survival, cumulative incidence at
    each horizon, and lifetime value over the ``[value]`` horizon."""
    from ..forecast import forecast_settings
    from ..value import lifetime_value, value_settings

    values = value_settings(config)
    months = max(max(horizons), values.horizon_months, forecast_settings(config).horizon_months)
    snapshot = snapshot_with_context(tables, as_of, config)
    hazards = model.hazard_array(snapshot, months)
    scores = score_customers(model, snapshot, horizons, hazards=hazards)
    survival = _survival(hazards, len(model.terminal_causes_))
    scores["lifetime_value"] = lifetime_value(
        survival[:, : values.horizon_months],
        snapshot["monthly_margin"].to_numpy(dtype=np.float64),
        annual_discount=values.annual_discount,
    )
    return Scored(snapshot, hazards, model.causes_, len(model.terminal_causes_), scores)


def _survival(hazards: np.ndarray, n_terminal: int) -> np.ndarray:
    from ..models import survival_from_hazards

    return survival_from_hazards(hazards, n_terminal)


def plan_offers(tables: Tables, config: Config) -> tuple:
    """The configured offers, with the hazard ratio of each offer that was tried in a past
    campaign with a random hold-out replaced by the one estimated from it (logged)."""
    from ..decisions import offers_from_config
    from ..value import estimate_offer_effects

    offers = offers_from_config(config)
    return _with_estimated_effects(offers, estimate_offer_effects(tables, offers=offers))


def plan_contacts(
    tables: Tables,
    model: HazardModel,
    scored: Scored,
    config: Config,
    *,
    offers: tuple | None = None,
    expected_values: pd.DataFrame | None = None,
    effects: Mapping | None = None,
):
    """The contact plan of the month after ``as_of`` (`lifecycle.decisions.Plan`).

    ``offers`` default to `plan_offers`; the expected values to `lifecycle.value.offer_values`
    of the scored hazards with each customer's own effect where an offer has one
    (``expected_values``, computed elsewhere from the same hazards and offers, e.g. on a
    cluster, may be given instead: ``customer_id``, ``offer``, ``expected_value``).
    ``effects`` (`customer_effects`, computed here by default; ``{}``: none) also keep a
    customer away from an offer predicted to harm it (unless ``[plan] contact_when_harmful``)
    and give the reason "responds to this offer more than most".
    """
    from ..decisions import (
        guard_plan,
        last_contact_months,
        make_plan,
        phrases_from_config,
        plan_settings_from_config,
        require_flag_columns,
    )

    offers = plan_offers(tables, config) if offers is None else offers
    settings = plan_settings_from_config(config)
    snapshot = scored.snapshot
    if effects is None:
        effects = customer_effects(tables, config, offers, snapshot)
    if expected_values is not None:
        ev = expected_values
    elif scored.hazards is None:
        raise UsageError("the hazards stayed on the cluster; give expected_values")
    else:
        ev = portfolio_offer_values(scored, offers, config, effects)
    harmed, responsive = effect_flags(effects, offers)
    customers = tables.customers
    flags = list(settings.exclusions)
    consent = settings.consent_column
    require_flag_columns(customers, flags, settings.flags_absent, consent)
    frame = planning_frame(tables, scored, [*flags, *([consent] if consent else [])])
    plan = make_plan(
        frame,
        ev[["customer_id", "offer", "expected_value"]],
        offers,
        settings,
        last_contact=last_contact_months(tables.campaigns),
        model=model,
        snapshot=snapshot,
        phrases=phrases_from_config(config),
        area_features=area_feature_names(tables),
        harmed=harmed,
        responsive=responsive,
    )
    guard_plan(plan.table, customers, flags, consent)
    return dataclasses.replace(plan, own_effects=effect_summary(effects))


def portfolio_offer_values(
    scored: Scored, offers: Sequence, config: Config, effects: Mapping | None = None
) -> pd.DataFrame:
    """`lifecycle.value.offer_values` of the scored hazards over the ``[value]`` horizon, with
    each customer's own hazard ratio for the offers whose ``effects`` vary."""
    from ..value import offer_values, value_settings

    values = value_settings(config)
    snapshot = scored.snapshot
    return offer_values(
        scored.hazards,
        scored.causes,
        snapshot["monthly_margin"].to_numpy(dtype=np.float64),
        offers,
        annual_discount=values.annual_discount,
        horizon=values.horizon_months,
        customer_ids=snapshot["customer_id"].to_numpy(),
        hazard_ratios=own_hazard_ratios(effects or {}),
    )


def planning_frame(tables: Tables, scored: Scored, flags: Sequence[str]) -> pd.DataFrame:
    """One row per scored customer, as the plan reads it: the snapshot's features with the
    scores, the exclusion ``flags`` from the customers table and ``tenure`` (the snapshot's
    ``tenure_start``) for the eligibility rules."""
    frame = scored.snapshot.merge(scored.scores, on="customer_id", how="left")
    flags = [c for c in dict.fromkeys(flags) if c in tables.customers.columns and c not in frame]
    if flags:
        frame = frame.merge(tables.customers[["customer_id", *flags]], on="customer_id", how="left")
    return frame.rename(columns={"tenure_start": "tenure"}).assign(
        tenure_start=frame["tenure_start"]
    )


def area_feature_names(tables: Tables) -> tuple[str, ...]:
    """The area-level features: every numeric attribute of the areas table and the local move
    rate (not given to staff as reasons unless ``[plan] area_reasons = true``)."""
    from ..decisions import AREA_FEATURES

    areas = getattr(tables, "areas", None)
    own: list[str] = []
    if areas is not None:
        geometry = getattr(areas, "geometry", None)
        name = getattr(geometry, "name", "geometry")
        own = [
            str(c)
            for c in areas.columns
            if c not in ("area_id", name) and pd.api.types.is_numeric_dtype(areas[c])
        ]
    return tuple(dict.fromkeys([*AREA_FEATURES, *own]))


def _with_estimated_effects(offers, effects: pd.DataFrame):
    if effects is None or effects.empty:
        return offers
    by_name = effects.set_index("offer")
    out = []
    for offer in offers:
        if offer.name in by_name.index:
            row = by_name.loc[offer.name]
            ratio = float(row["hazard_ratio"])
            interval = (float(row["lower_95"]), float(row["upper_95"]))
            log.info(
                "offer %s: effect from past campaigns: hazard ratio %.3f (95%% %.3f–%.3f), used "
                "instead of the configured %.3f",
                offer.name, ratio, *interval, offer.hazard_ratio,
            )  # fmt: skip
            offer = dataclasses.replace(offer, hazard_ratio=ratio, effect_interval=interval)
        else:
            log.info(
                "offer %s: effect from the settings: hazard ratio %.3f (no past campaign with a "
                "hold-out estimated it)",
                offer.name, offer.hazard_ratio,
            )  # fmt: skip
        out.append(offer)
    return tuple(out)


def forecast_portfolio(
    tables: Tables, scored: Scored, config: Config, model: HazardModel | None = None
) -> pd.DataFrame:
    """Uptake forecast by area and in total from the scored portfolio's hazards; with the
    ``model``, plus the customers who join during the horizon and the draws of what is not
    known about the models (`forecast_extras`, as ``[forecast]`` says)."""
    from ..forecast import forecast_settings, forecast_uptake
    from ..spatial import premise_areas

    settings = forecast_settings(config)
    ids = scored.snapshot["customer_id"]
    customer_areas = premise_areas(tables, config)
    areas = customer_areas.reindex(ids.to_numpy()).to_numpy()
    extras = forecast_extras(tables, model, scored, config, customer_areas)
    return forecast_uptake(
        scored.hazards[:, : settings.horizon_months],
        scored.causes,
        start_month=scored.first_month,
        areas=areas,
        levels=settings.levels,
        method=settings.method,
        exact_max=settings.exact_max,
        customer_ids=ids.to_numpy(),
        **extras,
    )


def forecast_extras(
    tables: Tables,
    model: HazardModel | None,
    scored: Scored,
    config: Config,
    customer_areas: pd.Series | None = None,
) -> dict:
    """`forecast_uptake`'s ``joiners``, ``level_draws`` and ``level_trend`` for the scored
    portfolio (``{}`` without a model, or when ``[forecast]`` turns all three off)."""
    from ..forecast import forecast_extras as extras_of
    from ..forecast import forecast_settings
    from ..spatial import premise_areas

    settings = forecast_settings(config)
    if model is None or not (settings.joiners or settings.draws or settings.level_trend):
        return {}
    if customer_areas is None:
        customer_areas = premise_areas(tables, config)
    return extras_of(
        tables,
        model,
        scored.snapshot,
        customer_areas,
        as_of=parse_month(scored.first_month) - 1,
        horizon=settings.horizon_months,
        joiners=settings.joiners,
        joiner_months=settings.joiner_months,
        joiner_trend=settings.joiner_trend,
        draws=settings.draws,
        seed=settings.seed,
        window_months=int(config.panel.window_months),
        level_trend=settings.level_trend,
        hazards=scored.hazards,
    ).as_kwargs()


def score_on_cluster(
    client,
    tables: Tables,
    model: HazardModel,
    as_of: str | int,
    config: Config,
    offers: tuple,
    *,
    own_effects: Callable[[pd.DataFrame], Mapping] | None = None,
) -> tuple[Scored, pd.DataFrame, pd.DataFrame]:
    """Scores, offer values and the uptake forecast computed on a Dask cluster.

    The checked ``tables`` are split by customer and sent to the workers
    (`lifecycle.distributed.distribute_tables`); each partition's snapshot, spatial context,
    hazards, scores, lifetime values and offer values are computed there
    (`lifecycle.distributed.score_portfolio`, `lifecycle.distributed.offer_values`), and the
    forecast is reduced by area there (`lifecycle.distributed.forecast_portfolio`). Only the
    snapshot, the scores, the offer values and the forecast come back; the hazards stay on
    the workers (the result's ``hazards`` is ``None``). Each equals what `score_portfolio`,
    `plan_contacts` and `forecast_portfolio` compute in this process (tested).
    ``own_effects`` maps the gathered snapshot to `customer_effects`, whose varying ratios the
    offer values then use.
    """
    from .. import distributed as dist

    data = dist.distribute_tables(client, tables, config=config)
    remote = dist.score_portfolio(data, model, as_of)
    snapshot = remote.snapshot.gather()
    ratios = own_hazard_ratios(own_effects(snapshot)) if own_effects is not None else {}
    values = dist.offer_values(remote, offers, hazard_ratios=ratios or None)
    extras = forecast_extras(tables, model, Scored(snapshot, None, (), 0, None), config)
    forecast = dist.forecast_portfolio(data, remote, extras=extras)
    scored = Scored(
        snapshot=snapshot,
        hazards=None,
        causes=tuple(remote.causes),
        n_terminal=remote.n_terminal,
        scores=remote.scores.gather(),
    )
    return scored, values.gather(), forecast


def default_cutoffs(as_of: str | int, horizon: int, count: int = 2, step: int = 3) -> list[str]:
    """Past cutoffs with full follow-up: ``as_of − horizon``, then every ``step`` months back."""
    last = (parse_month(as_of) if isinstance(as_of, str) else int(as_of)) - horizon
    return [format_month(last - step * i) for i in reversed(range(count))]
