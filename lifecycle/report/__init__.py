"""The monthly hazard report: one self-contained HTML page and a JSON of its key figures.

Fill `ReportInputs` (with `build_report_inputs`, from the month's panel, scores, backtest,
plan and forecast), then `write_report` writes ``report.html`` and ``key_figures.json``
atomically; `render_report` gives the page and the figures without writing. The inputs can be
saved and read back (`save_report_inputs`, `load_report_inputs`), so a report can be rendered
again without refitting. The table builders (`monthly_counts`, `tenure_hazards`,
`incidence_by_segment`, `area_risk`, `offer_rates_by_area`) and the drift measure
(`population_stability_index`, `drift_table`) are usable on their own.
"""

from ._drift import ACT_PSI, WATCH_PSI, drift_table, population_stability_index
from ._html import REPORT_FILES, key_figures_json, render_report, write_report
from ._inputs import ReportInputs, build_report_inputs, check_inputs
from ._persist import load_report_inputs, save_report_inputs
from ._sections_cohorts import cohort_alive
from ._tables import (
    area_risk,
    incidence_by_segment,
    monthly_counts,
    offer_rates_by_area,
    tenure_hazards,
    wilson_interval,
)

__all__ = [
    "ACT_PSI",
    "REPORT_FILES",
    "WATCH_PSI",
    "ReportInputs",
    "area_risk",
    "build_report_inputs",
    "check_inputs",
    "cohort_alive",
    "drift_table",
    "incidence_by_segment",
    "key_figures_json",
    "load_report_inputs",
    "monthly_counts",
    "offer_rates_by_area",
    "population_stability_index",
    "render_report",
    "save_report_inputs",
    "tenure_hazards",
    "wilson_interval",
    "write_report",
]
