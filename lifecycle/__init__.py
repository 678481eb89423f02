"""lifecycle: customer-lifecycle survival modelling for subscription utilities.

The flow, one function per step (the command line is a thin layer over these)::

    tables   = load_tables("data/", load_config("data/lifecycle.toml"))
    panel    = build_panel(tables, "2026-10", config=config)      # customer-month panel
    panel    = add_spatial_context(panel, tables, config=config)  # area, move rate, neighbours
    model    = CauseSpecificCox().fit(panel)                      # or BoostedHazard, SurvivalForest
    snapshot = add_spatial_context(build_snapshot(tables, "2026-10", config=config), tables)
    scores   = score_customers(model, snapshot)                   # survival, cumulative incidence
    result   = run_cycle("data/", config)                         # the whole monthly cycle
"""

from importlib import import_module
from typing import TYPE_CHECKING, Any

# Names are imported on first use (PEP 562), so that `lifecycle --help` and small scripts do
# not pay for loading every modelling library.
_WHERE = {
    "Config": "config", "load_config": "config",
    "run_cycle": "cycle",
    "RawTables": "data", "Tables": "data", "check_tables": "data", "describe_tables": "data",
    "load_tables": "data", "read_raw_tables": "data", "tables_as_of": "data",
    "Offer": "decisions", "Plan": "decisions", "make_plan": "decisions",
    "offers_from_config": "decisions", "top_reasons": "decisions",
    "simulate_demo": "demo", "write_demo": "demo",
    "InputError": "errors", "LifecycleError": "errors", "ModelFileError": "errors",
    "UsageError": "errors",
    "BacktestResult": "evaluation", "TenureLifeTable": "evaluation", "backtest": "evaluation",
    "fan_chart": "forecast", "forecast_uptake": "forecast",
    "BoostedHazard": "models", "CauseSpecificCox": "models", "HazardModel": "models",
    "SurvivalForest": "models", "load_model": "models", "save_model": "models",
    "score_customers": "models", "survival_and_incidence": "models",
    "build_panel": "panel", "build_snapshot": "panel", "life_table": "panel",
    "panel_layout": "panel",
    "add_spatial_context": "spatial", "premise_areas": "spatial",
    "estimate_offer_effects": "value", "lifetime_value": "value", "offer_values": "value",
}  # fmt: skip


def __getattr__(name: str) -> Any:
    if name in _WHERE:
        value = getattr(import_module(f".{_WHERE[name]}", __name__), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'lifecycle' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_WHERE))


if TYPE_CHECKING:  # for type checkers and editors: the same names, imported eagerly
    from .config import Config, load_config
    from .cycle import run_cycle
    from .data import (
        RawTables,
        Tables,
        check_tables,
        describe_tables,
        load_tables,
        read_raw_tables,
        tables_as_of,
    )
    from .decisions import Offer, Plan, make_plan, offers_from_config, top_reasons
    from .demo import simulate_demo, write_demo
    from .errors import InputError, LifecycleError, ModelFileError, UsageError
    from .evaluation import BacktestResult, TenureLifeTable, backtest
    from .forecast import fan_chart, forecast_uptake
    from .models import (
        BoostedHazard,
        CauseSpecificCox,
        HazardModel,
        SurvivalForest,
        load_model,
        save_model,
        score_customers,
        survival_and_incidence,
    )
    from .panel import build_panel, build_snapshot, life_table, panel_layout
    from .spatial import add_spatial_context, premise_areas
    from .value import estimate_offer_effects, lifetime_value, offer_values

__version__ = "0.1.0"

__all__ = [
    "BacktestResult",
    "BoostedHazard",
    "CauseSpecificCox",
    "Config",
    "HazardModel",
    "InputError",
    "LifecycleError",
    "ModelFileError",
    "Offer",
    "Plan",
    "RawTables",
    "SurvivalForest",
    "Tables",
    "TenureLifeTable",
    "UsageError",
    "add_spatial_context",
    "backtest",
    "build_panel",
    "build_snapshot",
    "check_tables",
    "describe_tables",
    "estimate_offer_effects",
    "fan_chart",
    "forecast_uptake",
    "life_table",
    "lifetime_value",
    "load_config",
    "load_model",
    "load_tables",
    "make_plan",
    "offer_values",
    "offers_from_config",
    "panel_layout",
    "premise_areas",
    "read_raw_tables",
    "run_cycle",
    "save_model",
    "score_customers",
    "simulate_demo",
    "survival_and_incidence",
    "tables_as_of",
    "top_reasons",
    "write_demo",
]
