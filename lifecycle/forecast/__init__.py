"""Uptake forecasts: expected adopters per product, month, and area, with prediction intervals."""

from ._fan_chart import fan_chart, save_fan_chart
from ._poisson_binomial import (
    mixture_quantiles,
    poisson_binomial_cdf,
    poisson_binomial_pmf,
    poisson_binomial_quantiles,
)
from ._uptake import ForecastSettings, forecast_settings, forecast_uptake

__all__ = [
    "ForecastSettings",
    "fan_chart",
    "forecast_settings",
    "forecast_uptake",
    "mixture_quantiles",
    "poisson_binomial_cdf",
    "poisson_binomial_pmf",
    "poisson_binomial_quantiles",
    "save_fan_chart",
]
