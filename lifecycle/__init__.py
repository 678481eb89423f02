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
from typing import Any

# The public names and the subpackage each lives in: the one list of the public surface
# (`__all__` is its keys). Names are imported on first use (PEP 562), so that `lifecycle --help`
# and small scripts do not pay for loading every modelling library.
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
    "BacktestResult": "evaluation", "backtest": "evaluation",
    "harrell_concordance": "evaluation", "integrated_brier_score": "evaluation",
    "logrank_test": "evaluation",
    "fan_chart": "forecast", "forecast_uptake": "forecast",
    "BoostedHazard": "models", "CauseSpecificCox": "models", "HazardModel": "models",
    "SurvivalForest": "models", "TenureLifeTable": "models", "load_model": "models",
    "save_model": "models", "score_customers": "models", "survival_and_incidence": "models",
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


__version__ = "0.1.0"

# The public names are the keys of _WHERE, listed once.
__all__ = sorted(_WHERE)
