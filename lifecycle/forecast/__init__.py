"""Uptake forecasts: expected adopters per product, month, and area, with prediction intervals;
the customers who join during the horizon; the forecast's track record; cohort retention."""

from ._bass import launch_forecast, launch_settings
from ._fan_chart import fan_chart, save_fan_chart
from ._poisson_binomial import (
    mixture_quantiles,
    poisson_binomial_cdf,
    poisson_binomial_pmf,
    poisson_binomial_quantiles,
)
from ._portfolio import forecast_extras
from ._retention import ShiftedBetaGeometric, fit_shifted_beta_geometric
from ._track import coverage as forecast_coverage
from ._track import track_record, track_record_hook
from ._uptake import ALL_AREAS, ForecastSettings, forecast_settings, forecast_uptake

__all__ = [
    "ALL_AREAS",
    "ForecastSettings",
    "ShiftedBetaGeometric",
    "fan_chart",
    "fit_shifted_beta_geometric",
    "forecast_coverage",
    "forecast_extras",
    "forecast_settings",
    "forecast_uptake",
    "launch_forecast",
    "launch_settings",
    "mixture_quantiles",
    "poisson_binomial_cdf",
    "poisson_binomial_pmf",
    "poisson_binomial_quantiles",
    "save_fan_chart",
    "track_record",
    "track_record_hook",
]
