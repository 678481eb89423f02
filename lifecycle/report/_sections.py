"""The report's first sections: the portfolio, hazards by tenure, the risk map, accuracy.

Each function takes the checked `ReportInputs` and returns a `Section` with its key figures.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from .._layout import TERMINAL_CAUSES, UPTAKE_PREFIX
from .._months import format_month, parse_month
from ..errors import InputError
from . import _figures as fig
from ._blocks import Cell, Section, change, count, number, pct_text, percent
from ._inputs import ReportInputs
from ._tables import wilson_interval

TENURE_BANDS = ((1, 3), (4, 6), (7, 12), (13, 24), (25, 36), (37, None))
METRIC_NAMES = {
    "uno_c": "Uno's C",
    "auc": "AUC",
    "brier": "Brier",
    "lift_top_decile": "lift, top 10 %",
    "capture_top_decile": "capture, top 10 %",
    "mean_predicted": "mean predicted",
    "observed": "observed",
    "emp": "expected max. profit",
    "qini": "Qini",
}


# -- the portfolio ---------------------------------------------------------------------------
def portfolio_section(inputs: ReportInputs) -> tuple[Section, dict[str, Any]]:
    """This month's customers, exits and uptakes, against last month and a year before."""
    frame = inputs.portfolio.assign(month=inputs.portfolio["month"].astype(str))
    by_month = frame.set_index("month")
    m = parse_month(inputs.month)
    if inputs.month not in by_month.index:
        raise InputError(
            table="report input portfolio",
            column="month",
            problem=f"has no row for the report month {inputs.month}",
            fix="count the panel that ends at the report month",
        )
    uptakes = [c for c in frame.columns if c.startswith(UPTAKE_PREFIX)]
    measures = ["customers", "customers_end", *TERMINAL_CAUSES, *uptakes]

    def row_of(month: int) -> pd.Series | None:
        key = format_month(month)
        return by_month.loc[key] if key in by_month.index else None

    now, last, year = row_of(m), row_of(m - 1), row_of(m - 12)
    section = Section("portfolio", "The portfolio this month")
    _portfolio_text(section, inputs.month, now, uptakes)
    _portfolio_table(section, inputs.month, now, last, year, uptakes)
    section.figure(
        fig.portfolio_trend(frame, [*TERMINAL_CAUSES, *uptakes]),
        alt="Monthly exit and uptake rates over the last two years",
        caption="Each point is the share of the month's active customers with that event.",
    )

    def plain(r: pd.Series | None) -> dict[str, int] | None:
        return None if r is None else {c: int(r[c]) for c in measures}

    key = {"this_month": plain(now), "last_month": plain(last), "same_month_last_year": plain(year)}
    return section, key


def _portfolio_text(section: Section, month: str, now: pd.Series, uptakes: list[str]) -> None:
    """The month's customers, exits by cause and uptakes, in words."""
    exits = int(sum(now[c] for c in TERMINAL_CAUSES))
    parts = ", ".join(f"{int(now[c]):,} {fig.label_of(c)}" for c in TERMINAL_CAUSES)
    section.text(
        f"In {month}, {int(now['customers']):,} customers were active and {exits:,} of "
        f"them left ({pct_text(exits / now['customers'])}): {parts}. "
        + (
            " ".join(
                f"{int(now[c]):,} customers took up {c.removeprefix(UPTAKE_PREFIX)}."
                for c in uptakes
            )
        )
    )


def _portfolio_table(
    section: Section,
    month: str,
    now: pd.Series,
    last: pd.Series | None,
    year: pd.Series | None,
    uptakes: list[str],
) -> None:
    """Counts and monthly rates this month, last month and a year before, with the changes."""
    m = parse_month(month)
    measures = ["customers", "customers_end", *TERMINAL_CAUSES, *uptakes]
    names = {
        "customers": "customers active in the month",
        "customers_end": "customers at the month's end",
        **{c: f"exits: {fig.label_of(c)}" for c in TERMINAL_CAUSES},
        **{c: f"{fig.label_of(c)} (new holders)" for c in uptakes},
    }

    def value(row: pd.Series | None, column: str) -> float | None:
        return None if row is None else float(row[column])

    def rate(row: pd.Series | None, column: str) -> float | None:
        return None if row is None else float(row[column]) / float(row["customers"])

    rows = [
        [
            Cell(names[c]),
            count(now[c]),
            count(value(last, c)),
            change(now[c], value(last, c)),
            count(value(year, c)),
            change(now[c], value(year, c)),
        ]
        for c in measures
    ]
    rows += [
        [
            Cell(f"rate: {fig.label_of(c)}"),
            percent(rate(now, c)),
            percent(rate(last, c)),
            Cell(""),
            percent(rate(year, c)),
            Cell(""),
        ]
        for c in (*TERMINAL_CAUSES, *uptakes)
    ]
    header = [
        "",
        month,
        f"last month ({format_month(m - 1)})",
        "change",
        f"a year before ({format_month(m - 12)})",
        "change",
    ]
    section.table(header, rows, caption="Counts and monthly rates")
    missing = [
        w for w, r in (("last month", last), ("the same month last year", year)) if r is None
    ]
    if missing:
        section.note(
            f"The data do not reach back to {' or '.join(missing)}, so those columns are blank."
        )


# -- hazard by tenure ------------------------------------------------------------------------
def tenure_section(inputs: ReportInputs) -> tuple[Section, dict[str, Any]]:
    """Hazard by tenure per cause, and cumulative incidence curves by segment."""
    table = inputs.tenure_hazards
    section = Section("tenure", "Hazard by tenure, incidence by segment")
    section.text(
        "The monthly hazard at tenure t is the share of customers in their t-th month who "
        "had the event in that month (for an uptake, among customers not yet holding the "
        "product). It is estimated from the whole panel window; shaded bands and the "
        "intervals below are 95 % Wilson intervals."
    )
    section.figure(
        fig.tenure_chart(table),
        alt="Monthly hazard by tenure for each cause, with 95 % intervals",
    )
    causes = list(dict.fromkeys(table["cause"]))
    rows, key = [], {}
    for lo, hi in TENURE_BANDS:
        label = f"{lo}–{hi}" if hi else f"{lo} and over"
        row = [Cell(f"months {label}")]
        for cause in causes:
            part = table[table["cause"] == cause]
            inside = (part["tenure"] >= lo) & (part["tenure"] <= (hi or np.inf))
            n, d = part.loc[inside, "at_risk"].sum(), part.loc[inside, "events"].sum()
            if n == 0:
                row.append(Cell("–", number=True))
                continue
            lower, upper = wilson_interval(np.array([d]), np.array([n]))
            row.append(
                Cell(
                    f"{100 * d / n:.2f} % ({100 * lower[0]:.2f}–{100 * upper[0]:.2f})",
                    number=True,
                )
            )
            key.setdefault(cause, []).append(
                {"first": lo, "last": hi, "at_risk": int(n), "events": int(d), "hazard": d / n}
            )
        rows.append(row)
    section.table(
        ["tenure", *[fig.label_of(c) for c in causes]],
        rows,
        caption="Monthly hazard by tenure band (95 % interval)",
    )
    incidence = inputs.incidence
    section.heading(fig.incidence_title(inputs.segment_column))
    if len(incidence) == 0:
        section.note(
            f"No segment of {inputs.segment_column} has enough customers at risk to draw a curve."
        )
    else:
        section.text(
            "Observed share of customers who left by each cause within t months of starting "
            "(Aalen–Johansen, so the causes compete: a customer who moved out can no longer "
            "churn). Curves stop where fewer than 30 customers remain at risk."
        )
        section.figure(
            fig.incidence_chart(incidence, inputs.segment_column),
            alt=f"{fig.incidence_title(inputs.segment_column)}, each exit cause",
        )
    return section, {"hazard_by_tenure_band": key}


# -- the risk map ----------------------------------------------------------------------------
def risk_columns(area_risk: pd.DataFrame) -> list[str]:
    return [
        c
        for c in area_risk.columns
        if c not in ("area_id", "customers") and pd.api.types.is_numeric_dtype(area_risk[c])
    ]


def risk_map_section(inputs: ReportInputs) -> tuple[Section, dict[str, Any]]:
    """Areas shaded by mean predicted probability."""
    risk = inputs.area_risk.assign(area_id=inputs.area_risk["area_id"].astype(str))
    columns = risk_columns(risk)
    section = Section("risk-map", "Where the risk is")
    if not columns or len(risk) == 0:
        section.note("No area scores were given, so there is no map this month.")
        return section, {}
    weights = risk["customers"].to_numpy(float)
    overall = {c: float(np.average(risk[c].to_numpy(float), weights=weights)) for c in columns}
    words = "; ".join(f"{fig.risk_title(c)}: {pct_text(v)}" for c, v in overall.items())
    section.text(
        "Each area is shaded by the mean predicted probability of its current customers "
        f"(competing causes accounted for). Across the portfolio — {words}."
    )
    areas = inputs.areas.assign(area_id=inputs.areas["area_id"].astype(str))
    section.figure(
        fig.risk_map(areas, risk, columns),
        alt="Map of areas shaded by mean predicted probability of each exit cause",
    )
    key: dict[str, Any] = {"portfolio_mean": overall, "highest_area": {}}
    header = ["area", "customers", *[fig.risk_title(c) for c in columns]]
    named = (
        dict(zip(areas["area_id"], areas["area_name"], strict=True)) if "area_name" in areas else {}
    )
    for column in columns:
        top = risk.sort_values([column, "area_id"], ascending=[False, True]).head(5)
        rows = [
            [Cell(f"{named[a]} ({a})" if a in named else a), count(n)]
            + [percent(top.loc[i, c]) for c in columns]
            for i, a, n in zip(top.index, top["area_id"], top["customers"], strict=True)
        ]
        section.table(header, rows, caption=f"Areas with the highest {fig.risk_title(column)}")
        first = top.iloc[0]
        key["highest_area"][column] = {"area_id": first["area_id"], "value": float(first[column])}
    return section, key


# -- accuracy --------------------------------------------------------------------------------
def accuracy_section(inputs: ReportInputs) -> tuple[Section, dict[str, Any]]:
    """Last month's predictions against what happened, and the backtest table."""
    section = Section("accuracy", "How last month's predictions did")
    key: dict[str, Any] = {}
    deciles = inputs.decile_check
    if deciles is None or len(deciles) == 0:
        section.note("First month: nothing to compare yet.")
        key["last_month"] = None
    else:
        key["last_month"] = _decile_blocks(section, deciles, inputs.decile_summary)
    section.heading("Backtest: accuracy on past months")
    metrics = inputs.backtest_metrics
    champions = inputs.champions
    if len(metrics) == 0:
        section.note("No backtest was run, so there are no accuracy figures or champions.")
        key["champions"] = {}
        return section, key
    section.text(
        "Each model family was fitted as of past cutoffs and scored on what happened next. "
        "Uno's C: the chance that of two customers, the one who had the event first was given "
        "the higher risk (0.5 is a coin toss, 1 is perfect). AUC: the same at the horizon. "
        "Brier: mean squared error of the predicted probability (lower is better). Lift: the "
        "event rate among the 10 % with the highest risk over the overall rate; capture: the "
        "share of events found among them. In the tables per cause below, values are means over "
        "all the cutoffs, the one held out included; the champion's score on a cutoff that took no "
        "part in its choice is the held-out one in the champion table."
    )
    _champion_blocks(section, champions)
    winners = dict(zip(champions["cause"], champions["family"], strict=True))
    extra = ("held_out_cutoff", "held_out_uno_c", "held_out_brier", "previous_family", "changed")
    key["champions"] = {
        r.cause: {
            "family": r.family,
            "horizon": int(r.horizon),
            "uno_c": float(getattr(r, "uno_c", np.nan)),
            "brier": float(getattr(r, "brier", np.nan)),
            **{k: _plain_value(getattr(r, k)) for k in extra if hasattr(r, k)},
            **({"why": str(r.why)} if hasattr(r, "why") else {}),
        }
        for r in champions.itertuples(index=False)
    }
    means = (
        metrics.groupby(["cause", "family", "horizon", "metric"], sort=False)["value"]
        .mean()
        .unstack("metric")
    )
    cutoffs = metrics.groupby(["cause", "family", "horizon"], sort=False)["cutoff"].nunique()
    shown = [m for m in METRIC_NAMES if m in means.columns]
    for cause in dict.fromkeys(metrics["cause"]):
        part = means.loc[cause].sort_index()
        rows, css = [], []
        for (family, horizon), values in part.iterrows():
            rows.append(
                [
                    Cell(str(family)),
                    count(horizon),
                    count(cutoffs.loc[(cause, family, horizon)]),
                    *[
                        percent(values[m])
                        if m in ("mean_predicted", "observed")
                        else number(values[m])
                        for m in shown
                    ],
                ]
            )
            css.append("champion" if winners.get(cause) == family else "")
        section.table(
            ["family", "horizon", "cutoffs", *[METRIC_NAMES[m] for m in shown]],
            rows,
            caption=f"{fig.label_of(cause)} (champion in bold)",
            row_css=css,
        )
    return section, key


def _champion_blocks(section: Section, champions: pd.DataFrame) -> None:
    """The champion per cause; with `choose_champions` output, its held-out score and why."""
    held = "held_out_uno_c" in champions.columns
    header = ["cause", "champion", "horizon (months)", "Uno's C", "Brier"]
    if held:
        header = [*header[:3], "Uno's C (chosen on)", "Uno's C (held out)", "Brier (held out)"]
    rows = []
    for r in champions.itertuples(index=False):
        row = [Cell(fig.label_of(r.cause)), Cell(str(r.family)), count(r.horizon)]
        if held:
            row += [number(r.uno_c), number(r.held_out_uno_c), number(r.held_out_brier, 4)]
        else:
            row += [number(getattr(r, "uno_c", np.nan)), number(getattr(r, "brier", np.nan), 4)]
        rows.append(row)
    caption = "Champion per cause (best mean Uno's C; ties by Brier)"
    if held:
        cutoff = next((c for c in champions["held_out_cutoff"] if isinstance(c, str)), None)
        caption = (
            "Champion per cause: chosen on the earlier cutoffs, scored on the latest one "
            f"({cutoff}), which took no part in the choice"
            if cutoff
            else "Champion per cause: chosen on the only cutoff, so there is no held-out score"
        )
    section.table(header, rows, caption=caption)
    if "why" not in champions.columns:
        return
    changed = champions[champions["changed"].astype(bool)]
    if len(changed):
        for r in changed.itertuples(index=False):
            section.text(f"{fig.label_of(r.cause)}: the model changed this month — {r.why}.")
    elif champions["previous_family"].notna().any():
        section.text("No cause changed its model family since last month.")
    kept = champions[champions["why"].astype(str).str.contains("within the switch margin")]
    for r in kept.itertuples(index=False):
        section.text(f"{fig.label_of(r.cause)}: {r.why}.")


def _plain_value(value: Any) -> Any:
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not np.isfinite(value):
        return None
    return value


def _decile_blocks(
    section: Section, deciles: pd.DataFrame, summary: dict[str, Any] | None
) -> dict[str, Any]:
    causes = list(dict.fromkeys(deciles["cause"])) if "cause" in deciles else [None]
    out: dict[str, Any] = {}
    horizon = (summary or {}).get("horizon")
    section.text(
        "Customers were ranked by last month's predicted risk and cut into ten equal groups; "
        "each bar is a group's mean predicted probability, each point the share who then had "
        "the event" + (f" within {horizon} month(s)." if horizon is not None else ".")
    )
    for cause in causes:
        part = deciles if cause is None else deciles[deciles["cause"] == cause]
        name = cause or str((summary or {}).get("cause", "churn"))
        section.figure(
            fig.decile_chart(part, name),
            alt=f"Predicted against realised {fig.label_of(name)} by risk decile",
        )
        n = part["n"].to_numpy(float)
        predicted = float(np.sum(part["predicted"].to_numpy(float) * n) / n.sum())
        realised = float(np.sum(part["realised"].to_numpy(float) * n) / n.sum())
        rows = [
            [count(r.decile), count(r.n), percent(r.predicted), percent(r.realised)]
            for r in part.sort_values("decile").itertuples(index=False)
        ]
        rows.append([Cell("all"), count(n.sum()), percent(predicted), percent(realised)])
        section.table(
            ["risk decile", "customers", "predicted", "realised"],
            rows,
            caption=f"{fig.label_of(name)}: predicted against realised",
        )
        out[name] = {"customers": int(n.sum()), "predicted": predicted, "realised": realised}
    if summary:
        figures = {k: v for k, v in summary.items() if k != "notes"}
        section.table(
            ["figure", "value"],
            [
                [Cell(_SUMMARY_LABELS.get(k, k.replace("_", " "))), Cell(_shown(v), number=True)]
                for k, v in figures.items()
            ],
            caption="Summary of the comparison",
        )
        for note in summary.get("notes") or []:
            section.text(f"Note: {note}")
        out["summary"] = dict(summary)
    return out


_SUMMARY_LABELS = {
    "month": "month predicted from",
    "horizon_used": "months of follow-up compared",
    "months_elapsed": "months elapsed since",
    "predicted_column": "prediction compared",
    "n": "customers",
    "observed_expected": "observed / expected events",
    "brier": "Brier score",
    "uno_c": "Uno's C",
}


def _shown(value: Any) -> str:
    if isinstance(value, float | np.floating):
        return f"{float(value):.4g}"
    return str(value)
