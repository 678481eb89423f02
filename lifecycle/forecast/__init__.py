"""Uptake forecasts: expected adopters per product, month, and area, with prediction intervals;
the customers who join during the horizon; the forecast's track record; cohort retention."""

from ._fan_chart import fan_chart, save_fan_chart
from ._poisson_binomial import (
    mixture_quantiles,
    poisson_binomial_cdf,
    poisson_binomial_pmf,
    poisson_binomial_quantiles,
)
from ._retention import ShiftedBetaGeometric, fit_shifted_beta_geometric
from ._track import coverage as forecast_coverage
from ._track import track_record
from ._uptake import ForecastSettings, forecast_settings, forecast_uptake

__all__ = [
    "ForecastSettings",
    "ShiftedBetaGeometric",
    "fan_chart",
    "fit_shifted_beta_geometric",
    "forecast_coverage",
    "forecast_settings",
    "forecast_uptake",
    "mixture_quantiles",
    "poisson_binomial_cdf",
    "poisson_binomial_pmf",
    "poisson_binomial_quantiles",
    "save_fan_chart",
    "track_record",
]
