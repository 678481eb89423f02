"""What the uptake forecast of a portfolio needs besides the current customers' hazards: the
joiners (`lifecycle.forecast._joiners`) and the draws of the uptake hazards' level."""

from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np
import pandas as pd

from .._layout import UPTAKE_PREFIX
from ..data import Tables
from ..models import uptake_incidence
from ._joiners import (
    ALL_AREAS,
    JoinerPart,
    as_joiners,
    fit_joiner_counts,
    joiner_uptake,
    level_draws,
    template_rows,
    uptake_rate_drift,
)

log = logging.getLogger(__name__)


@dataclass
class ForecastExtras:
    """Keyword arguments of `forecast_uptake` beyond the current customers' hazards."""

    joiners: dict[tuple[str, str], JoinerPart] | None
    level_draws: dict[str, np.ndarray] | None

    def as_kwargs(self) -> dict:
        return {"joiners": self.joiners, "level_draws": self.level_draws}


def forecast_extras(
    tables: Tables,
    model,
    snapshot: pd.DataFrame,
    customer_areas: pd.Series,
    *,
    as_of: int,
    horizon: int,
    joiners: bool = True,
    joiner_months: int = 36,
    joiner_trend: bool = True,
    draws: int = 200,
    seed: int = 0,
    window_months: int = 48,
) -> ForecastExtras:
    """Joiners' uptakes and level draws for the forecast of the portfolio at ``as_of``.

    Parameters
    ----------
    tables
        The checked tables as of ``as_of`` (starts, uptakes).
    model
        The fitted hazard model (`HazardModel`).
    snapshot
        The scoring snapshot at the end of ``as_of`` (templates of joiners come from it).
    customer_areas
        Area of every customer in ``tables.customers`` (`lifecycle.spatial.premise_areas`).
    horizon
        Months forecast.
    joiners, joiner_months, joiner_trend
        Whether to forecast joiners, how many months of joiner counts to fit, and whether
        with a trend.
    draws, seed
        Draws of what is not known about the models (0: none).
    window_months
        The fitted panel's window (the uptake events in it set each level's uncertainty).
    """
    products = [c.removeprefix(UPTAKE_PREFIX) for c in model.causes_ if c.startswith(UPTAKE_PREFIX)]
    uptakes = tables.uptakes
    recent = uptakes[(uptakes["month"] > as_of - window_months) & (uptakes["month"] <= as_of)]
    events = {p: float((recent["product"] == p).sum()) for p in products}
    drift = {}
    if draws:
        customers = tables.customers
        for p in products:
            mine = uptakes[uptakes["product"] == p].set_index("customer_id")["month"]
            taken = mine.reindex(customers["customer_id"].to_numpy()).to_numpy(dtype=np.float64)
            drift[p] = uptake_rate_drift(
                customers["start"].to_numpy(), customers["end"].to_numpy(), taken, as_of
            )
            log.info("uptake of %s: level drift %.4f (se %.4f) a month lately", p, *drift[p])
    levels = level_draws(events, draws, seed, drift=drift, horizon=horizon) or None
    if not joiners or len(snapshot) == 0:
        return ForecastExtras(None, levels)
    customers = tables.customers
    ends = customers["end"].to_numpy(dtype=np.float64)
    first_complete = int(np.nanmin(ends)) if np.isfinite(ends).any() else None
    area_of = customer_areas.reindex(customers["customer_id"].to_numpy()).to_numpy(dtype=object)
    counts = fit_joiner_counts(
        customers["start"].to_numpy(),
        area_of,
        as_of,
        all_areas=tables.areas["area_id"].astype(str).tolist(),
        months=joiner_months,
        first_complete=first_complete,
        trend=joiner_trend,
    )
    curves = joiner_curves(model, snapshot, customer_areas, horizon, seed=seed)
    parts = joiner_uptake(counts, curves, as_of + 1, horizon, draws=draws, seed=seed)
    for product in products:
        total = parts[(product, ALL_AREAS)].mean[1, -1]
        log.info("joiners: %.1f expected uptakes of %s within %d months", total, product, horizon)
    return ForecastExtras(parts, levels)


def joiner_curves(
    model, snapshot: pd.DataFrame, customer_areas: pd.Series, horizon: int, *, seed: int = 0
) -> dict[str, dict[str, np.ndarray]]:
    """m_a(k): each product's monthly uptake probability k = 1..horizon months after joining,
    by area (mean over the area's templates) and over all templates (``"all"``)."""
    rows = template_rows(snapshot, seed=seed)
    templates = as_joiners(snapshot.iloc[rows])
    hazards = model.hazard_array(templates, horizon)
    causes = list(model.causes_)
    terminal = [j for j, c in enumerate(causes) if not c.startswith(UPTAKE_PREFIX)]
    labels = (
        customer_areas.reindex(templates["customer_id"].to_numpy()).astype(str).to_numpy(object)
    )
    out: dict[str, dict[str, np.ndarray]] = {}
    for j, cause in enumerate(causes):
        if not cause.startswith(UPTAKE_PREFIX):
            continue
        monthly = np.diff(uptake_incidence(hazards, terminal, j), axis=1, prepend=0.0)
        curves = {ALL_AREAS: monthly.mean(axis=0)}
        frame = pd.DataFrame(monthly).groupby(labels, sort=True).mean()
        curves.update({str(a): frame.loc[a].to_numpy() for a in frame.index})
        out[cause.removeprefix(UPTAKE_PREFIX)] = curves
    return out
