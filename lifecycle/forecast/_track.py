"""The forecast's track record: what each backtest fit would have forecast at its cutoff, beside
what happened.

For a cutoff c (a month of the backtest, whose fits are reused: no model is fitted for the
track record), the uptake forecast of months c+1..c+H is made exactly as the run makes it —
the current customers' hazards from the family fitted at c, plus the customers who join after
c (joiner counts fitted on the months up to c), with the trend of the uptake rate the
models lack (`lifecycle.forecast._trend`, from months up to c) and the draws of the models'
uncertainty —
and set beside the uptakes realised in those months, all customers' and the joiners' (those
who started after c). H is the ``[forecast]`` horizon, shortened to the months observed.

``forecast_backtest.csv`` holds the champion family's rows: ``product``, ``made_at`` (c),
``month``, ``expected``, ``lower_<L>``, ``upper_<L>``, ``realised`` (per month), the same with
``cumulative_`` (by month), and the current customers' and joiners' parts of both.
"""

from __future__ import annotations

import logging

import numpy as np
import pandas as pd

from .._layout import UPTAKE_PREFIX
from .._months import format_month
from ..config import Config
from ..data import Tables
from ._joiners import ALL_AREAS
from ._uptake import forecast_settings, forecast_uptake, level_suffix

log = logging.getLogger(__name__)

FRONT = ["family", "product", "made_at", "month"]


def track_record_hook(tables: Tables, config: Config, customer_areas: pd.Series):
    """An ``after_fit`` for `lifecycle.evaluation.backtest` that returns, for each family and
    cutoff, the uptake forecast it would have made beside what happened (see the module
    docstring). ``tables`` are those of the run (they hold the months after each cutoff)."""
    from ..data import tables_as_of
    from ._portfolio import forecast_extras

    settings = forecast_settings(config)
    known: dict[int, Tables] = {}

    def after_fit(family, cutoff, model, snapshot, hazards) -> pd.DataFrame | None:
        horizon = min(settings.horizon_months, tables.extract_month - cutoff, hazards.shape[1])
        if horizon < 1 or not any(c.startswith(UPTAKE_PREFIX) for c in model.causes_):
            return None
        if cutoff not in known:
            known[cutoff] = tables_as_of(tables, cutoff)
        extras = forecast_extras(
            known[cutoff], model, snapshot, customer_areas, as_of=cutoff, horizon=horizon,
            joiners=settings.joiners, joiner_months=settings.joiner_months,
            joiner_trend=settings.joiner_trend,
            draws=settings.draws, seed=settings.seed,
            window_months=int(config.panel.window_months),
            level_trend=settings.level_trend, hazards=hazards[:, :horizon],
        )  # fmt: skip
        joiners = extras.joiners and {k: v for k, v in extras.joiners.items() if k[1] == ALL_AREAS}
        made = forecast_uptake(
            hazards[:, :horizon], model.causes_, start_month=cutoff + 1,
            levels=settings.levels, method=settings.method, exact_max=settings.exact_max,
            joiners=joiners or None, level_draws=extras.level_draws,
            level_trend=extras.level_trend,
        )  # fmt: skip
        made = made.drop(columns="area_id").assign(made_at=format_month(cutoff))
        return _with_realised(made, tables, cutoff, horizon)

    return after_fit


def _with_realised(made: pd.DataFrame, tables: Tables, cutoff: int, horizon: int):
    up = tables.uptakes
    up = up[(up["month"] > cutoff) & (up["month"] <= cutoff + horizon)]
    starts = tables.customers.set_index("customer_id")["start"]
    joined = starts.reindex(up["customer_id"].to_numpy()).to_numpy() > cutoff
    months = [format_month(cutoff + 1 + t) for t in range(horizon)]
    parts = []
    for product, rows in made.groupby("product", sort=False):
        mine = (up["product"] == product).to_numpy()
        counts = np.bincount(up["month"].to_numpy()[mine] - cutoff - 1, minlength=horizon)
        late = np.bincount(
            up["month"].to_numpy()[mine & joined] - cutoff - 1, minlength=horizon
        )  # fmt: skip
        frame = rows.set_index("month").reindex(months).reset_index()
        frame["realised"] = counts[:horizon]
        frame["realised_joiners"] = late[:horizon]
        frame["cumulative_realised"] = np.cumsum(counts[:horizon])
        frame["cumulative_realised_joiners"] = np.cumsum(late[:horizon])
        parts.append(frame)
    return pd.concat(parts, ignore_index=True)


def track_record(forecasts: pd.DataFrame, champions: pd.DataFrame) -> pd.DataFrame:
    """The champion family's rows of the backtest's forecasts (the ``forecast_backtest.csv``
    table), the family named in ``family``; empty when there are none."""
    if forecasts is None or forecasts.empty:
        return pd.DataFrame(columns=[*FRONT, "expected", "realised"])
    chosen = dict(zip(champions["cause"], champions["family"], strict=True))
    keep = [
        chosen.get(f"{UPTAKE_PREFIX}{p}") == f
        for p, f in zip(forecasts["product"], forecasts["family"], strict=True)
    ]
    out = forecasts[np.asarray(keep, dtype=bool)]
    columns = FRONT + [c for c in out.columns if c not in FRONT]
    return out[columns].sort_values(["product", "made_at", "month"]).reset_index(drop=True)


def coverage(track: pd.DataFrame, level: float = 0.9) -> pd.DataFrame:
    """Share of months whose realised count lies inside the ``level`` interval, per product,
    monthly and cumulative, over all cutoffs (and ``n``, the months counted)."""
    suffix = level_suffix(level)
    rows = []
    for product, part in track.groupby("product", sort=True):
        row = {"product": product, "n": len(part)}
        for prefix, name in (("", "monthly"), ("cumulative_", "cumulative")):
            inside = (part[f"{prefix}lower_{suffix}"] <= part[f"{prefix}realised"]) & (
                part[f"{prefix}realised"] <= part[f"{prefix}upper_{suffix}"]
            )
            row[f"coverage_{name}"] = float(inside.mean()) if len(part) else float("nan")
        rows.append(row)
    return pd.DataFrame(rows, columns=["product", "n", "coverage_monthly", "coverage_cumulative"])
