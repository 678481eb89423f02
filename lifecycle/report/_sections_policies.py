"""The report's section on what the plan is worth against simpler ways of spending the budget
(``policy_comparison.csv``): a point chart of each policy's expected value with its 90 %
interval, a table, and what it means and does not."""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from . import _figures as fig
from ._blocks import Section, count, money, number
from ._inputs import ReportInputs

POLICY_LABELS = {
    "plan": "this month's plan",
    "top_risk": "highest risk first",
    "random": "at random",
    "none": "nobody contacted",
}


def policy_section(inputs: ReportInputs) -> tuple[Section, dict[str, Any]]:
    """Expected value of the plan, top risk, random and no contact, with 90 % intervals."""
    section = Section("policies", "What the plan is worth against simpler choices")
    table = inputs.policy_comparison
    if table is None or len(table) == 0:
        section.note(
            "No comparison this month: it needs the portfolio's hazards in this process and a "
            "plan (it is skipped when scoring ran on a cluster)."
        )
        return section, {"policies": None}
    unit = f" {inputs.currency}" if inputs.currency else ""
    rows = table.set_index("policy")
    section.text(_meaning(rows, unit))
    section.text(
        "Each customer is valued with the offer effect learnt from past randomised campaigns "
        "(its own where the effect varies), so these are model estimates, not outcomes: the "
        "interval carries the uncertainty of the effects only, not that of the risk models, "
        "and a campaign's effect may not hold for customers unlike those it reached."
    )
    section.figure(
        policy_chart(table),
        alt="Expected value of each policy with its 90% interval, one marker shape per policy",
        caption="Expected value with the 90% interval from draws of the offer effects.",
    )
    section.table(
        ["policy", "contacts", "cost", "expected saves", "expected value", "lower 90%",
         "upper 90%"],
        [
            [POLICY_LABELS.get(p, p), count(r.contacts), money(r.cost),
             number(r.expected_saves, 1), money(r.expected_value), money(r.lower_90),
             money(r.upper_90)]
            for p, r in rows.iterrows()
        ],
        caption="Expected saves: target events the offers avoid (or uptakes they add) over "
        "the value horizon.",
    )  # fmt: skip
    key = {
        str(p): {c: float(r[c]) for c in ("contacts", "cost", "expected_saves",
                                          "expected_value", "lower_90", "upper_90")}
        for p, r in rows.iterrows()
    }  # fmt: skip
    return section, {"policies": key}


def _meaning(rows: pd.DataFrame, unit: str) -> str:
    """One sentence: the plan's value against top risk and random at the same spend."""
    if "plan" not in rows.index:
        return "The policies are valued at the same spend."
    plan = rows.loc["plan"]
    parts = [
        f"{POLICY_LABELS[p]} {rows.loc[p, 'expected_value']:,.2f}{unit}"
        for p in ("top_risk", "random")
        if p in rows.index
    ]
    return (
        f"At the same spend ({plan['cost']:,.2f}{unit}, {int(plan['contacts']):,} contacts), "
        f"the plan is expected to be worth {plan['expected_value']:,.2f}{unit} "
        f"(90% interval {plan['lower_90']:,.2f} to {plan['upper_90']:,.2f}), against "
        + ", ".join(parts)
        + "."
    )


def policy_chart(table: pd.DataFrame) -> bytes:
    """Horizontal point chart: each policy's expected value, its 90 % interval as a line, a
    marker shape of its own and its name on the axis (not told apart by colour alone)."""
    figure = fig.new_figure(7.0, 0.6 + 0.5 * len(table))
    ax = figure.add_subplot()
    y = np.arange(len(table))[::-1]
    for k, row in enumerate(table.itertuples()):
        ax.errorbar(
            row.expected_value,
            y[k],
            xerr=[[row.expected_value - row.lower_90], [row.upper_90 - row.expected_value]],
            fmt=fig.MARKERS[k % len(fig.MARKERS)],
            color=fig.SERIES[k % len(fig.SERIES)],
            capsize=4,
            markersize=7,
        )
    ax.axvline(0.0, color=fig.GRID, linewidth=1)
    ax.set_yticks(y, [POLICY_LABELS.get(p, p) for p in table["policy"]])
    ax.set_xlabel("expected value")
    ax.set_title("Expected value by policy (90% interval)", loc="left")
    fig._tidy(ax)
    return fig.png_bytes(figure)
