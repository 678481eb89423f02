"""What the monthly report is made from: `ReportInputs`, and `build_report_inputs` to fill it."""

from __future__ import annotations

import logging
from dataclasses import dataclass, field, fields
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd

from .._months import parse_month
from ..errors import InputError, UsageError
from ._drift import DRIFT_COLUMNS, drift_table
from ._tables import (
    area_risk,
    incidence_by_segment,
    monthly_counts,
    offer_rates_by_area,
    tenure_hazards,
)

log = logging.getLogger(__name__)

__all__ = ["ReportInputs", "build_report_inputs", "check_inputs", "decile_table"]

DEFAULT_TITLE = "Monthly hazard report"
DECILE_ALIASES = {"predicted_mean": "predicted", "realised_rate": "realised"}

#: Columns each table must have (``None``: the field may be absent).
REQUIRED: dict[str, tuple[str, ...]] = {
    "portfolio": ("month", "customers", "customers_end", "churn", "move_out", "other_exit"),
    "tenure_hazards": ("cause", "tenure", "at_risk", "events"),
    "incidence": ("segment", "cause", "tenure", "incidence"),
    "areas": ("area_id", "geometry"),
    "area_risk": ("area_id", "customers"),
    "backtest_metrics": ("family", "cause", "horizon", "cutoff", "metric", "value"),
    "champions": ("cause", "family", "horizon"),
    "decile_check": ("decile", "n", "predicted", "realised"),
    "hazard_ratios": ("cause", "feature", "hazard_ratio", "lower_95", "upper_95"),
    "ph_tests": ("cause", "feature", "statistic", "p_value"),
    "importances": ("cause", "feature", "importance"),
    "drift": ("variable", "kind", "psi"),
    "forecast": ("month", "area_id", "product", "expected"),
    "plan": ("customer_id", "offer", "week", "expected_value", "cost"),
    "offer_rates": ("area_id", "customers", "contacts", "customer_share", "contact_rate"),
    "policy_comparison": (
        "policy",
        "contacts",
        "cost",
        "expected_saves",
        "expected_value",
        "lower_90",
        "upper_90",
    ),
}
OPTIONAL = (
    "decile_check",
    "hazard_ratios",
    "ph_tests",
    "importances",
    "drift",
    "forecast",
    "plan",
    "offer_rates",
    "policy_comparison",
)


@dataclass(kw_only=True)
class ReportInputs:
    """Everything the monthly report shows, as plain tables and dicts.

    Nothing here needs a fitted model or the panel, so a report can be rendered again from
    saved files (`save_report_inputs`, `load_report_inputs`). Build it with
    `build_report_inputs`, or fill the fields from files. Optional fields left as ``None``
    give a section that says why there is nothing to show.

    Attributes
    ----------
    month
        The report month ``YYYY-MM``: the last month of data (the scores' ``as_of``).
    portfolio
        One row per calendar month (`monthly_counts`): ``month``, ``customers`` (active in
        the month), ``customers_end`` (still present at its end), exits per terminal cause
        (``churn``, ``move_out``, ``other_exit``) and ``uptake_<product>`` counts.
    tenure_hazards
        ``cause``, ``tenure``, ``at_risk``, ``events`` (`tenure_hazards`): the monthly hazard
        by tenure month is ``events / at_risk``.
    incidence
        ``segment``, ``cause``, ``tenure``, ``incidence`` (and ``at_risk``): observed
        cumulative incidence by tenure per segment (`incidence_by_segment`).
    segment_column
        The customer attribute the segments are values of (for the captions).
    areas
        ``area_id`` and polygons (``geometry``) with a CRS, for the risk map; optional
        ``area_name`` labels the areas on the map and in the tables.
    area_risk
        ``area_id``, ``customers`` and mean predicted probabilities per area, e.g.
        ``cif_churn_3m``, ``cif_move_out_3m`` (`area_risk`).
    backtest_metrics
        The tidy metrics of `lifecycle.evaluation.backtest`: ``family``, ``cause``,
        ``horizon``, ``cutoff``, ``metric``, ``value`` (``n``, ``events``).
    champions
        ``cause``, ``family``, ``horizon`` (``uno_c``, ``brier``): the champion per cause.
    decile_check
        How last month's predictions did, by risk decile: ``decile`` (1 = lowest risk),
        ``n`` (customers), ``predicted`` (mean predicted probability), ``realised``
        (share who had the event); optional ``realised_events`` and ``cause``.
        ``predicted_mean``/``realised_rate`` are accepted for ``predicted``/``realised``.
        ``None`` in the first month.
    decile_summary
        Optional figures about that comparison (e.g. ``cause``, ``horizon``, ``brier``,
        ``uno_c``, ``observed_expected``), shown as given.
    hazard_ratios
        Cox coefficients: ``cause``, ``feature``, ``hazard_ratio``, ``lower_95``,
        ``upper_95`` (hazard-ratio scale).
    ph_tests
        Cox proportional-hazards tests (``CauseSpecificCox.ph_tests_``): ``cause``,
        ``feature``, ``statistic``, ``p_value``.
    importances
        Forest importances: ``cause``, ``feature``, ``importance``.
    drift
        ``variable``, ``kind`` (``feature``/``score``), ``psi`` (``bins``, ``status``)
        (`drift_table`). ``None`` in the first month.
    forecast
        `lifecycle.forecast.forecast_uptake` output: ``month``, ``area_id``, ``product``,
        ``expected``, ``lower_<L>``, ``upper_<L>``, ``cumulative_*``.
    forecast_track
        The forecast's track record (`lifecycle.forecast.track_record`: ``forecast_backtest.csv``).
    uptake_history
        Realised uptakes per month: ``product``, ``month`` (``YYYY-MM``), ``realised``.
    cohort_alive
        Young cohorts' customers alive at each tenure: ``cohort``, ``tenure``, ``alive``
        (`lifecycle.report._sections_cohorts.cohort_alive`).
    plan
        The plan table: ``customer_id``, ``offer``, ``week``, ``expected_value``, ``cost``
        (``reasons``).
    plan_summary
        `Plan.summary()`: ``budget``, ``budget_used``, ``gap``, ``solver``, …
    offer_rates
        Contacts per area next to the area's share of customers (`offer_rates_by_area`).
    planned_again
        `Plan.planned_again` of last month's plan: ``previous_contacts``, ``still_eligible``,
        ``planned_again``, ``share`` (``None`` the first month).
    policy_comparison
        ``policy_comparison.csv`` (`lifecycle.decisions.compare_policies`): ``policy``,
        ``contacts``, ``cost``, ``expected_saves``, ``expected_value``, ``lower_90``,
        ``upper_90``; ``None`` when no comparison was made.
    currency
        The currency of the amounts (``[value] currency``; "" when not named).
    title
        Heading of the page.
    notes
        Extra lines for the page's header (e.g. where the data came from).
    """

    month: str
    portfolio: pd.DataFrame
    tenure_hazards: pd.DataFrame
    incidence: pd.DataFrame
    segment_column: str = "segment"
    areas: gpd.GeoDataFrame
    area_risk: pd.DataFrame
    backtest_metrics: pd.DataFrame
    champions: pd.DataFrame
    decile_check: pd.DataFrame | None = None
    decile_summary: dict[str, Any] | None = None
    hazard_ratios: pd.DataFrame | None = None
    ph_tests: pd.DataFrame | None = None
    importances: pd.DataFrame | None = None
    drift: pd.DataFrame | None = None
    forecast: pd.DataFrame | None = None
    forecast_track: pd.DataFrame | None = None
    uptake_history: pd.DataFrame | None = None
    cohort_alive: pd.DataFrame | None = None
    plan: pd.DataFrame | None = None
    plan_summary: dict[str, Any] | None = None
    offer_rates: pd.DataFrame | None = None
    planned_again: dict[str, Any] | None = None
    policy_comparison: pd.DataFrame | None = None
    currency: str = ""
    title: str = DEFAULT_TITLE
    notes: list[str] = field(default_factory=list)


def check_inputs(inputs: ReportInputs) -> ReportInputs:
    """Check every table's columns; return the inputs with the decile table's names unified.

    Raises `InputError` naming the field and the column that is missing, and `UsageError`
    for a month that is not ``YYYY-MM``.
    """
    if not isinstance(inputs, ReportInputs):
        raise UsageError(f"expected ReportInputs, got {type(inputs).__name__}")
    parse_month(inputs.month, what="report month")
    values = {f.name: getattr(inputs, f.name) for f in fields(inputs)}
    if values["decile_check"] is not None:
        values["decile_check"] = decile_table(values["decile_check"])
    for name, columns in REQUIRED.items():
        frame = values[name]
        if frame is None and name in OPTIONAL:
            continue
        if not isinstance(frame, pd.DataFrame):
            raise UsageError(f"report input {name} must be a DataFrame, got {type(frame).__name__}")
        missing = [c for c in columns if c not in frame.columns]
        if missing:
            raise InputError(
                table=f"report input {name}",
                column=missing[0],
                problem=f"is missing (needed: {list(columns)})",
                fix="build it with the matching lifecycle.report function",
            )
    if getattr(values["areas"], "crs", None) is None:
        raise InputError(table="report input areas", column="geometry", problem="has no CRS")
    for name in ("decile_summary", "plan_summary", "planned_again"):
        if values[name] is not None and not isinstance(values[name], dict):
            raise UsageError(f"report input {name} must be a dict or None")
    return ReportInputs(**values)


def decile_table(frame: pd.DataFrame) -> pd.DataFrame:
    """The decile comparison with ``predicted``/``realised`` names (aliases renamed)."""
    renames = {k: v for k, v in DECILE_ALIASES.items() if k in frame and v not in frame}
    return frame.rename(columns=renames)


def build_report_inputs(
    *,
    month: str,
    panel: pd.DataFrame,
    scores: pd.DataFrame,
    customer_areas: pd.Series,
    areas: gpd.GeoDataFrame,
    backtest_metrics: pd.DataFrame,
    champions: pd.DataFrame,
    segment_column: str | None = None,
    hazard_ratios: pd.DataFrame | None = None,
    ph_tests: pd.DataFrame | None = None,
    importances: pd.DataFrame | None = None,
    forecast: pd.DataFrame | None = None,
    plan: Any = None,
    snapshot: pd.DataFrame | None = None,
    previous_snapshot: pd.DataFrame | None = None,
    previous_scores: pd.DataFrame | None = None,
    decile_check: pd.DataFrame | None = None,
    decile_summary: dict[str, Any] | None = None,
    risk_columns: tuple[str, ...] = ("cif_churn_3m", "cif_move_out_3m"),
    previous_plan: pd.DataFrame | None = None,
    currency: str = "",
    title: str = DEFAULT_TITLE,
    notes: list[str] | None = None,
) -> ReportInputs:
    """Fill `ReportInputs` from the month's panel, scores, backtest, plan and forecast.

    Parameters
    ----------
    month
        The report month (``YYYY-MM``), the panel's ``as_of``.
    panel
        The customer-month panel (with spatial context or without).
    scores
        `lifecycle.models.score_customers` of the customers present at the end of ``month``
        (with ``risk_columns``).
    customer_areas
        ``area_id`` per ``customer_id`` (`lifecycle.spatial.premise_areas`).
    areas
        The area polygons (``tables.areas``).
    backtest_metrics, champions
        ``BacktestResult.metrics`` and ``.champions``.
    segment_column
        Customer attribute for the incidence curves; default ``plan_speed`` if the panel has
        it, else ``contract_ending``, else no segments (one curve, "all customers").
    hazard_ratios, ph_tests, importances
        ``CauseSpecificCox.coefficients_``, ``CauseSpecificCox.ph_tests_`` and
        ``SurvivalForest.feature_importances_``.
    forecast
        `lifecycle.forecast.forecast_uptake` output.
    plan
        A `lifecycle.decisions.Plan` (its table and summary are used) or a plan table.
    snapshot, previous_snapshot
        The features of this month's and last month's customers (`build_snapshot` at
        ``month`` and the month before): feature drift. Both or neither.
    previous_scores
        Last month's scores (from the score history): score drift.
    decile_check, decile_summary
        How last month's predictions did (from the score history); ``None`` the first month.
    previous_plan
        Last month's plan table (from the score history): how many are planned again.
    currency
        The currency of the amounts (``[value] currency``).
    """
    parse_month(month, what="report month")
    incidence, segment_label = _incidence(panel, segment_column)
    plan_table, plan_summary = _plan_parts(plan)
    offer_rates = None
    if plan_table is not None:
        offer_rates = offer_rates_by_area(
            plan_table, customer_areas, scores["customer_id"], areas=pd.DataFrame(areas)
        )
    drift = _drift(scores, snapshot, previous_snapshot, previous_scores)
    names = {"area_id": areas["area_id"].astype(str).to_numpy()}
    if "area_name" in areas.columns:  # maps and tables label areas by name where given
        names["area_name"] = areas["area_name"].astype(str).to_numpy()
    map_areas = gpd.GeoDataFrame(names, geometry=areas.geometry.to_numpy(), crs=areas.crs)
    inputs = ReportInputs(
        month=month,
        portfolio=monthly_counts(panel),
        tenure_hazards=tenure_hazards(panel),
        incidence=incidence,
        segment_column=segment_label,
        areas=map_areas,
        area_risk=area_risk(scores, customer_areas, columns=risk_columns),
        backtest_metrics=backtest_metrics,
        champions=champions,
        decile_check=decile_check,
        decile_summary=decile_summary,
        hazard_ratios=per_standard_deviation(hazard_ratios, panel),
        ph_tests=ph_tests,
        importances=importances,
        drift=drift,
        forecast=forecast,
        plan=plan_table,
        plan_summary=plan_summary,
        offer_rates=offer_rates,
        planned_again=(
            plan.planned_again(previous_plan) if hasattr(plan, "planned_again") else None
        ),
        currency=currency,
        title=title,
        notes=list(notes or []),
    )
    return check_inputs(inputs)


def _incidence(panel: pd.DataFrame, segment_column: str | None) -> tuple[pd.DataFrame, str]:
    """Cumulative incidence by segment and the segment's label (see `build_report_inputs`)."""
    if segment_column is None:
        segment_column = next(
            (c for c in ("plan_speed", "contract_ending") if c in panel.columns), None
        )
    if segment_column is None:
        segmented = panel.assign(_segment="all customers")
        return incidence_by_segment(segmented, "_segment"), "all customers"
    return incidence_by_segment(panel, segment_column), segment_column


def _drift(
    scores: pd.DataFrame,
    snapshot: pd.DataFrame | None,
    previous_snapshot: pd.DataFrame | None,
    previous_scores: pd.DataFrame | None,
) -> pd.DataFrame | None:
    """Feature drift (both snapshots given) and score drift (last month's scores given)."""
    drift_parts = []
    if (snapshot is None) != (previous_snapshot is None):
        raise UsageError("feature drift needs both snapshot and previous_snapshot, or neither")
    if snapshot is not None:
        drift_parts.append(drift_table(previous_snapshot, snapshot, kind="feature"))
    if previous_scores is not None:
        columns = [c for c in scores.columns if c != "customer_id" and c in previous_scores]
        drift_parts.append(drift_table(previous_scores, scores, columns, kind="score"))
    drift = pd.concat(drift_parts, ignore_index=True) if drift_parts else None
    if drift is not None:
        drift = drift[DRIFT_COLUMNS]
    return drift


def _plan_parts(plan: Any) -> tuple[pd.DataFrame | None, dict[str, Any] | None]:
    if plan is None:
        return None, None
    if isinstance(plan, pd.DataFrame):
        return plan, None
    table = getattr(plan, "table", None)
    summary = getattr(plan, "summary", None)
    if not isinstance(table, pd.DataFrame) or not callable(summary):
        raise UsageError(f"plan must be a Plan or a plan table, got {type(plan).__name__}")
    return table, summary()


def plain(value: Any) -> Any:
    """Numbers and containers as plain Python values (numpy scalars unwrapped)."""
    if isinstance(value, dict):
        return {str(k): plain(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [plain(v) for v in value]
    if isinstance(value, np.generic):
        return value.item()
    return value


def per_standard_deviation(hazard_ratios: pd.DataFrame | None, panel: pd.DataFrame):
    """Hazard ratios of continuous features restated per standard deviation of the feature.

    A coefficient per unit is unreadable for a feature whose values are small (a monthly move
    rate of 0.01 gives a "hazard ratio per unit" of millions): for a feature that takes more
    than two values, ``HR_sd = exp(β · sd) = HR^sd`` (the same for both bounds), and the feature
    is labelled ``name (per SD 0.0042)``. 0/1 flags and one-hot levels stay per unit.
    """
    if hazard_ratios is None or hazard_ratios.empty:
        return hazard_ratios
    out = hazard_ratios.copy()
    for i, feature in enumerate(out["feature"].astype(str)):
        if feature not in panel.columns or not pd.api.types.is_numeric_dtype(panel[feature]):
            continue
        values = panel[feature].to_numpy(dtype=np.float64, na_value=np.nan)
        values = values[np.isfinite(values)]
        if values.size == 0 or np.unique(values[:100_000]).size <= 2:
            continue
        sd = float(values.std())
        if not sd > 0:
            continue
        for column in ("hazard_ratio", "lower_95", "upper_95"):
            out.iloc[i, out.columns.get_loc(column)] = float(out.iloc[i][column]) ** sd
        out.iloc[i, out.columns.get_loc("feature")] = f"{feature} (per SD {sd:.3g})"
    return out
