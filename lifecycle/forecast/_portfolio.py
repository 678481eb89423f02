"""What the uptake forecast of a portfolio needs besides the current customers' hazards: the
joiners (`lifecycle.forecast._joiners`), the trend of the uptake rate the models lack
(`lifecycle.forecast._trend`) and the draws of the uptake hazards' level."""

from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np
import pandas as pd

from .._layout import UPTAKE_PREFIX
from .._months import format_month
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
from ._trend import SAMPLE, model_rate_slope, trend_path

log = logging.getLogger(__name__)

DRIFT_MONTHS = 24


@dataclass
class ForecastExtras:
    """Keyword arguments of `forecast_uptake` beyond the current customers' hazards."""

    joiners: dict[tuple[str, str], JoinerPart] | None
    level_draws: dict[str, np.ndarray] | None
    level_trend: dict[str, np.ndarray] | None = None

    def as_kwargs(self) -> dict:
        return {
            "joiners": self.joiners,
            "level_draws": self.level_draws,
            "level_trend": self.level_trend,
        }


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
    level_trend: bool = True,
    hazards: np.ndarray | None = None,
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
    level_trend
        Whether to carry the uptake rate's trend the model lacks (`lifecycle.forecast._trend`).
    hazards
        The model's hazards ``(n, ≥ horizon, K)`` of the snapshot's customers, if already
        computed (else those of a sample of the snapshot are computed for the trend).
    """
    products = [c.removeprefix(UPTAKE_PREFIX) for c in model.causes_ if c.startswith(UPTAKE_PREFIX)]
    uptakes = tables.uptakes
    recent = uptakes[(uptakes["month"] > as_of - window_months) & (uptakes["month"] <= as_of)]
    events = {p: float((recent["product"] == p).sum()) for p in products}
    drift = _drifts(tables, products, as_of) if (draws or level_trend) else {}
    levels = level_draws(events, draws, seed, drift=drift, horizon=horizon) or None
    trend = None
    if level_trend and products and len(snapshot):
        cohort = _drifts(tables, products, as_of, cohort=True)
        trend = _trend(model, snapshot, hazards, cohort, as_of, horizon, seed)
    if not joiners or len(snapshot) == 0:
        return ForecastExtras(None, levels, trend)
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
    return ForecastExtras(parts, levels, trend)


def _drifts(
    tables: Tables, products: list[str], as_of: int, *, cohort: bool = False
) -> dict[str, tuple[float, float]]:
    """Each product's `uptake_rate_drift` (with month-of-year terms) over the 24 months up to
    ``as_of``; with ``cohort``, among the customers active and not holding the product at the
    window's first month only (`lifecycle.forecast._trend`)."""
    customers, uptakes = tables.customers, tables.uptakes
    starts = customers["start"].to_numpy(dtype=np.float64)
    ends = customers["end"].to_numpy(dtype=np.float64)
    first = as_of - DRIFT_MONTHS + 1
    out = {}
    for p in products:
        mine = uptakes[uptakes["product"] == p].set_index("customer_id")["month"]
        taken = mine.reindex(customers["customer_id"].to_numpy()).to_numpy(dtype=np.float64)
        keep = np.ones(len(starts), dtype=bool)
        if cohort:
            keep = (starts <= first) & ~(ends < first) & ~(taken < first)
        out[p] = uptake_rate_drift(
            starts[keep], ends[keep], taken[keep], as_of, DRIFT_MONTHS, season=True
        )
        what = "among the customers of " + format_month(first) if cohort else "lately"
        log.info("uptake of %s: level drift %.4f (se %.4f) a month %s", p, *out[p], what)
    return out


def _trend(model, snapshot, hazards, drift, as_of: int, horizon: int, seed: int):
    """ln g_t per product (`lifecycle.forecast._trend`)."""
    if hazards is None:
        rows = np.arange(len(snapshot))
        if len(rows) > SAMPLE:
            rng = np.random.default_rng([seed, 16, 7])
            rows = np.sort(rng.choice(len(rows), SAMPLE, replace=False))
        hazards = model.hazard_array(snapshot.iloc[rows], horizon)
    causes = list(model.causes_)
    terminal = [k for k, c in enumerate(causes) if not c.startswith(UPTAKE_PREFIX)]
    out = {}
    for j, cause in enumerate(causes):
        if not cause.startswith(UPTAKE_PREFIX):
            continue
        product = cause.removeprefix(UPTAKE_PREFIX)
        own = model_rate_slope(hazards[:, :horizon], terminal, j, as_of + 1, seed=seed)
        observed = drift[product][0]
        log.info(
            "uptake of %s: rate slope %.4f a month observed, %.4f in the model's forecast",
            product, observed, own,
        )  # fmt: skip
        out[product] = trend_path(observed, own, horizon)
    return out


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
