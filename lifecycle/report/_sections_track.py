"""The report's section on the forecast's track record: what the backtest's fits would have
forecast, beside what happened, with the coverage of the intervals and the families side by
side."""

from __future__ import annotations

from typing import Any

import pandas as pd

from ..forecast import forecast_coverage as coverage
from ..forecast import track_record
from ._blocks import Cell, Section, count, number, pct_text
from ._inputs import ReportInputs


def track_section(inputs: ReportInputs) -> tuple[Section, dict[str, Any]]:
    """Past uptake forecasts against realised uptakes: coverage, joiners, families."""
    section = Section("forecast-track", "How past uptake forecasts fared")
    forecasts = inputs.forecast_track
    if forecasts is None or len(forecasts) == 0:
        section.note(
            "No past forecast to judge yet: the backtest made none (no uptake cause, or no "
            "cutoff with months observed after it)."
        )
        return section, {"forecast_track": None}
    track = track_record(forecasts, inputs.champions)
    level = _level(track.columns)
    if track.empty or level is None:
        section.note("The backtest's forecasts hold no interval to judge.")
        return section, {"forecast_track": None}
    section.text(
        "Each backtest fit made the forecast the run makes today — current customers plus "
        "those who joined later, with the same intervals — at its cutoff; here it is beside "
        "the uptakes that followed (the champion family, no refit: the backtest's own fits)."
    )
    cover = coverage(track, float(level.replace("_", ".")) / 100.0)
    key: dict[str, Any] = {}
    rows = []
    for product, part in track.groupby("product", sort=True):
        row = cover[cover["product"] == product].iloc[0]
        entry: dict[str, Any] = {
            "coverage_cumulative": float(row["coverage_cumulative"]),
            "coverage_monthly": float(row["coverage_monthly"]),
            "months": int(row["n"]),
            "cutoffs": {},
        }
        for made_at, one in part.groupby("made_at", sort=True):
            last = one.iloc[-1]
            expected, realised = (
                float(last["cumulative_expected"]),
                float(last["cumulative_realised"]),
            )
            share_e = _share(last.get("cumulative_expected_joiners"), expected)
            share_r = _share(last.get("cumulative_realised_joiners"), realised)
            lo, hi = last[f"cumulative_lower_{level}"], last[f"cumulative_upper_{level}"]
            entry["cutoffs"][str(made_at)] = {
                "months": len(one), "expected": expected, f"lower_{level}": float(lo),
                f"upper_{level}": float(hi), "realised": realised,
                "joiners_share_expected": share_e, "joiners_share_realised": share_r,
            }  # fmt: skip
            rows.append(
                [
                    Cell(str(product)), Cell(str(made_at)), count(len(one)),
                    number(expected, 1), Cell(f"{lo:,.0f}–{hi:,.0f}", number=True),
                    count(realised), Cell(pct_text(share_e, 0), number=True),
                    Cell(pct_text(share_r, 0), number=True),
                ]
            )  # fmt: skip
        section.text(
            f"{product}: {pct_text(entry['coverage_cumulative'], 0)} of the {entry['months']} "
            f"cumulative monthly totals fell inside their {level} % interval "
            f"({pct_text(entry['coverage_monthly'], 0)} of the monthly counts)."
        )
        key[str(product)] = entry
    section.table(
        ["product", "made at", "months", "expected", f"{level} % interval", "realised",
         "joiners' share expected", "joiners' share realised"],
        rows,
        caption="Cumulative uptakes over the months after each cutoff",
    )  # fmt: skip
    _families(section, forecasts, level)
    return section, {"forecast_track": key}


def _families(section: Section, forecasts: pd.DataFrame, level: str) -> None:
    """Every backtested family's total beside the realised one: how much the choice of model
    moves the forecast."""
    last = forecasts.sort_values("month").groupby(["product", "made_at", "family"]).tail(1)
    rows = [
        [
            Cell(str(r.product)), Cell(str(r.made_at)), Cell(str(r.family)),
            number(r.cumulative_expected, 1),
            Cell(f"{getattr(r, f'cumulative_lower_{level}'):,.0f}–"
                 f"{getattr(r, f'cumulative_upper_{level}'):,.0f}", number=True),
            count(r.cumulative_realised),
        ]
        for r in last.sort_values(["product", "made_at", "family"]).itertuples(index=False)
    ]  # fmt: skip
    section.table(
        ["product", "made at", "family", "expected", f"{level} % interval", "realised"],
        rows,
        caption="The families side by side: each one's forecast total at the same cutoff",
    )


def _share(part: Any, whole: float) -> float:
    if part is None or pd.isna(part) or not whole:
        return float("nan")
    return float(part) / whole


def _level(columns: pd.Index) -> str | None:
    found = [
        c.removeprefix("cumulative_lower_") for c in columns if c.startswith("cumulative_lower_")
    ]
    found = [s for s in found if f"cumulative_upper_{s}" in columns]
    return sorted(found, key=lambda s: float(s.replace("_", ".")))[-1] if found else None
