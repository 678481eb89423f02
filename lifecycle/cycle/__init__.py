"""The monthly cycle: its steps as functions, and the whole cycle in one call."""

from ._checks import check_as_of
from ._effects import CustomerEffects, customer_effects, effect_columns
from ._explain import explain_customer
from ._run import RunResult, RunSettings, run_cycle, run_settings
from ._steps import (
    Scored,
    default_cutoffs,
    fit_model,
    forecast_portfolio,
    panel_with_context,
    plan_contacts,
    planning_frame,
    score_portfolio,
    snapshot_with_context,
)

__all__ = [
    "CustomerEffects",
    "RunResult",
    "RunSettings",
    "Scored",
    "check_as_of",
    "customer_effects",
    "default_cutoffs",
    "effect_columns",
    "explain_customer",
    "fit_model",
    "forecast_portfolio",
    "panel_with_context",
    "plan_contacts",
    "planning_frame",
    "run_cycle",
    "run_settings",
    "score_portfolio",
    "snapshot_with_context",
]
