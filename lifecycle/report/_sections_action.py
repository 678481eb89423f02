"""The report's later sections: drivers, drift, the uptake forecast and the cautions (the plan
in `_sections_plan`)."""

from __future__ import annotations

import re
from typing import Any

import numpy as np
import pandas as pd

from ..forecast import fan_chart
from . import _figures as fig
from ._blocks import Cell, Section, number
from ._drift import ACT_PSI, WATCH_PSI
from ._inputs import ReportInputs

TOP_DRIVERS = 5


# -- drivers ---------------------------------------------------------------------------------
PH_LEVEL = 0.01


def _ph_failures(section: Section, ph: pd.DataFrame | None, key: dict[str, Any]) -> None:
    """The covariates whose proportional-hazards test fails at 1 % (Grambsch–Therneau)."""
    if ph is None or len(ph) == 0:
        return
    failed = ph[ph["p_value"] < PH_LEVEL].sort_values(["p_value", "cause", "feature"])
    key["ph_failures"] = len(failed)
    if not len(failed):
        section.note(
            f"Every covariate passes the proportional-hazards test at {PH_LEVEL:.0%} "
            f"({len(ph)} tested)."
        )
        return
    section.table(
        ["cause", "feature", "χ²(1)", "p"],
        [
            [
                Cell(fig.label_of(r.cause)),
                Cell(str(r.feature)),
                number(r.statistic, 1),
                Cell(f"{r.p_value:.1e}", number=True),
            ]
            for r in failed.itertuples(index=False)
        ],
        caption=(
            f"Proportional-hazards tests that fail at {PH_LEVEL:.0%} ({len(failed)} of "
            f"{len(ph)}): the effect of these covariates changes with tenure, so their hazard "
            "ratio is an average over tenure"
        ),
    )


def drivers_section(inputs: ReportInputs) -> tuple[Section, dict[str, Any]]:
    """Hazard ratios with intervals, and forest importances."""
    section = Section("drivers", "What drives the hazards")
    key: dict[str, Any] = {}
    hr = inputs.hazard_ratios
    if hr is None or len(hr) == 0:
        section.note("No cause-specific Cox model was fitted, so there are no hazard ratios.")
    else:
        section.text(
            "Hazard ratios from the cause-specific Cox model: how much a one-unit higher value "
            "of a flag (or the named level, against the reference level), or a one standard "
            "deviation higher value of a measured feature (marked 'per SD'), multiplies the "
            "monthly hazard of that cause, other things equal. coefficients.csv beside the model "
            "keeps them per unit. Whiskers are 95 % intervals; an interval that "
            "crosses 1 is compatible with no effect. They describe associations in past data, "
            "not what would happen if a value were changed."
        )
        section.figure(
            fig.hazard_ratio_chart(hr), alt="Hazard ratios with 95 % intervals for each cause"
        )
        rows, key["strongest_effects"] = [], {}
        for cause in dict.fromkeys(hr["cause"]):
            part = hr[hr["cause"] == cause]
            clear = part[(part["lower_95"] > 1) | (part["upper_95"] < 1)]
            clear = clear.assign(size=np.abs(np.log(clear["hazard_ratio"].astype(float))))
            top = clear.sort_values(["size", "feature"], ascending=[False, True]).head(TOP_DRIVERS)
            key["strongest_effects"][cause] = top["feature"].astype(str).tolist()
            for r in top.itertuples(index=False):
                rows.append(
                    [
                        Cell(fig.label_of(cause)),
                        Cell(str(r.feature)),
                        number(r.hazard_ratio, 2),
                        Cell(f"{r.lower_95:.2f}–{r.upper_95:.2f}", number=True),
                    ]
                )
        if rows:
            section.table(
                ["cause", "feature", "hazard ratio", "95 % interval"],
                rows,
                caption=f"Largest effects whose interval excludes 1 (up to {TOP_DRIVERS} a cause)",
            )
        else:
            section.note("No hazard ratio has an interval that excludes 1.")
        _ph_failures(section, inputs.ph_tests, key)
    imp = inputs.importances
    if imp is not None and len(imp) > 0:  # no heading without a forest: no empty part
        section.heading("Forest importances")
        section.text(
            "How much the forest's accuracy drops when one feature's values are shuffled "
            "among customers: a larger drop means the forest leans on it more. Importances "
            "say nothing about the direction of an effect."
        )
        section.figure(fig.importance_chart(imp), alt="Forest importances for each cause")
    return section, key


# -- drift -----------------------------------------------------------------------------------
def drift_section(inputs: ReportInputs) -> tuple[Section, dict[str, Any]]:
    """Population stability index of each feature and score against last month."""
    section = Section("drift", "Drift since last month")
    drift = inputs.drift
    if drift is None or len(drift) == 0:
        section.note("First month: nothing to compare yet.")
        return section, {"drift": None}
    status = np.where(
        drift["psi"] >= ACT_PSI, "act", np.where(drift["psi"] >= WATCH_PSI, "watch", "ok")
    )
    drift = drift.assign(status=status)
    section.text(
        "The population stability index compares this month's distribution of each feature "
        "and score with last month's, over ten bins cut at last month's deciles: "
        "PSI = Σ (a − e)·ln(a / e), with e and a the shares of last month and this month in "
        f"each bin. Common practice reads below {WATCH_PSI:g} as stable, {WATCH_PSI:g} to "
        f"{ACT_PSI:g} as worth watching and above {ACT_PSI:g} as a shift to act on (check the "
        "data feed, then consider refitting). Calendar terms are left out: they change every "
        "month by design. A feature that takes one value per area (such as the local move "
        "rate) can show a large index when a few areas' values pass one another; look at the "
        "areas before acting on it."
    )
    section.figure(
        fig.drift_chart(drift, WATCH_PSI, ACT_PSI), alt="Population stability index by variable"
    )
    flagged = drift[drift["status"] != "ok"].sort_values(
        ["psi", "variable"], ascending=[False, True]
    )
    if len(flagged):
        section.table(
            ["variable", "kind", "PSI", "flag"],
            [
                [Cell(r.variable), Cell(r.kind), number(r.psi), Cell(r.status, css=r.status)]
                for r in flagged.itertuples(index=False)
            ],
            caption="Variables above the watch threshold",
        )
    else:
        section.note(f"No feature or score moved beyond the watch threshold ({WATCH_PSI:g}).")
    top = drift.sort_values(["psi", "variable"], ascending=[False, True]).iloc[0]
    return section, {
        "drift": {
            "compared": len(drift),
            "watch": sorted(drift.loc[drift["status"] == "watch", "variable"].astype(str)),
            "act": sorted(drift.loc[drift["status"] == "act", "variable"].astype(str)),
            "largest": {"variable": str(top["variable"]), "psi": float(top["psi"])},
        }
    }


# -- the uptake forecast ---------------------------------------------------------------------
def forecast_section(inputs: ReportInputs) -> tuple[Section, dict[str, Any]]:
    """Fan charts of the uptake forecast, the total and the areas expecting most."""
    section = Section("forecast", "Uptake forecast")
    forecast = inputs.forecast
    if forecast is None or len(forecast) == 0:
        section.note("No uptake forecast was made this month.")
        return section, {"forecast": None}
    forecast = forecast.assign(area_id=forecast["area_id"].astype(str))
    level = _interval_level(forecast.columns)
    joiners = "expected_joiners" in forecast.columns
    section.text(
        "Expected new holders among today's customers, month by month, net of customers "
        "who leave first"
        + (", plus those among customers who join during these months" if joiners else "")
        + (f"; the band is the {level} % prediction interval for the count." if level else ".")
        + (" The monthly chart shows the last months' realised uptakes on its left."
           if inputs.uptake_history is not None else "")
    )  # fmt: skip
    key: dict[str, Any] = {}
    for product in sorted(forecast["product"].astype(str).unique()):
        total = forecast[(forecast["product"] == product) & (forecast["area_id"] == "all")]
        if total.empty:
            continue
        for cumulative in (False, True):
            figure = fan_chart(
                forecast, product=product, area_id="all", cumulative=cumulative,
                history=_history(inputs.uptake_history, product),
            )  # fmt: skip
            what = "cumulative" if cumulative else "monthly"
            section.figure(
                fig.png_bytes(figure), alt=f"Fan chart of {what} uptake of {product}, all areas"
            )
        last = total.iloc[-1]
        entry = {
            "first_month": str(total["month"].iloc[0]),
            "last_month": str(last["month"]),
            "expected": float(last["cumulative_expected"]),
        }
        words = f"{float(last['cumulative_expected']):,.0f}"
        if level:
            lo, hi = last[f"cumulative_lower_{level}"], last[f"cumulative_upper_{level}"]
            entry[f"lower_{level}"], entry[f"upper_{level}"] = float(lo), float(hi)
            words += f" ({level} % interval {float(lo):,.0f}–{float(hi):,.0f})"
        section.text(
            f"{product}: by {last['month']}, {words} customers are expected to have taken it "
            "up"
            + (f", {float(last['cumulative_expected_joiners']):,.0f} of them customers who have "
               "not joined yet." if joiners else ".")
        )  # fmt: skip
        if joiners:
            entry["expected_joiners"] = float(last["cumulative_expected_joiners"])
        key[product] = entry
        areas = forecast[(forecast["product"] == product) & (forecast["area_id"] != "all")]
        if len(areas):
            ends = areas[areas["month"] == last["month"]]
            ends = ends.sort_values(["cumulative_expected", "area_id"], ascending=[False, True])
            rows = []
            for r in ends.head(10).itertuples(index=False):
                row = [Cell(str(r.area_id)), number(r.cumulative_expected, 1)]
                if level:
                    lo = getattr(r, f"cumulative_lower_{level}")
                    hi = getattr(r, f"cumulative_upper_{level}")
                    row.append(Cell(f"{lo:,.0f}–{hi:,.0f}", number=True))
                rows.append(row)
            header = ["area", "expected by " + str(last["month"])]
            if level:
                header.append(f"{level} % interval")
            section.table(header, rows, caption=f"{product}: the ten areas expecting most")
    return section, {"forecast": key}


def _history(history: pd.DataFrame | None, product: str) -> pd.DataFrame | None:
    if history is None or len(history) == 0:
        return None
    return history[history["product"].astype(str) == product]


def _interval_level(columns: pd.Index) -> str | None:
    levels = []
    for name in columns:
        match = re.fullmatch(r"cumulative_lower_(\d+(?:_\d+)?)", str(name))
        if match and f"cumulative_upper_{match.group(1)}" in columns:
            levels.append(match.group(1))
    return sorted(levels, key=lambda s: float(s.replace("_", ".")))[-1] if levels else None


# -- cautions --------------------------------------------------------------------------------
def cautions_section() -> Section:
    """The cautions every report carries."""
    section = Section("cautions", "Before acting on this report")
    section.bullets(
        [
            "This report ranks people for marketing contact. Follow the privacy and "
            "marketing-consent law that applies to you and your organisation's own rules; "
            "where they differ from anything here, they win.",
            "Contact only customers who agreed to be contacted for marketing. Customers "
            "flagged do-not-contact or in hardship are never selected by the plan; keep those "
            "flags up to date, and route hardship cases to the team that handles them, not to "
            "a sales offer.",
            "Area features (such as the share of rented homes) can act as proxies for "
            "protected characteristics. Read the offer rates by area above, and involve your "
            "data-protection officer if some areas are contacted much more or less often.",
            "Every figure here is an estimate from past data, with uncertainty: hazard ratios "
            "are associations, offer effects are estimates, and a predicted probability says "
            "nothing certain about one person.",
            "Local rules come first: where they require a review, a record or an opt-out, "
            "they take precedence over this plan.",
        ]
    )
    return section
