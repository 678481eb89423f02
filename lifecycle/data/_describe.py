"""A short account of what checked tables hold (what ``lifecycle check`` prints)."""

from __future__ import annotations

import numpy as np

from .._months import format_month
from ._tables import Tables


def describe_tables(tables: Tables) -> str:
    """Counts, month ranges, exits by reason, uptakes by product, areas and CRSs, as text."""
    c = tables.customers
    extract = tables.extract_month
    active = c["end"].isna() | (c["end"] > extract)
    lines = [
        f"extract month: {format_month(extract)}"
        + (
            " (inferred: the last month in which a row is dated; set [data] extract_month to fix "
            "it)"
            if tables.extract_inferred
            else " (from [data] extract_month)"
        ),
        f"customers: {len(c):,} ({int(active.sum()):,} active at the extract month); starts "
        f"{format_month(int(c['start'].min()))} to {format_month(int(c['start'].max()))}",
    ]
    reasons = c["end_reason"].value_counts().reindex(["churn", "move_out", "other"], fill_value=0)
    lines.append("exits: " + ", ".join(f"{k} {int(v):,}" for k, v in reasons.items()))
    if tables.static_columns:
        lines.append("static attributes: " + ", ".join(tables.static_columns))
    if len(tables.activity):
        months = tables.activity["month"].to_numpy()
        lines.append(
            f"activity: {len(tables.activity):,} rows, {format_month(int(months.min()))} to "
            f"{format_month(int(months.max()))}; columns {', '.join(tables.activity_columns)}"
        )
    else:
        lines.append("activity: none")
    counts = tables.uptakes["product"].value_counts()
    lines.append(
        "uptakes: "
        + (", ".join(f"{p} {int(counts.get(p, 0)):,}" for p in tables.products) or "none")
    )
    numeric = [
        col
        for col in tables.areas.columns
        if col not in ("area_id", "geometry") and np.issubdtype(tables.areas[col].dtype, np.number)
    ]
    lines.append(
        f"areas: {len(tables.areas):,} polygons in {tables.areas.crs.to_string()}; "
        f"attributes {', '.join(numeric) or 'none'}"
    )
    lines.append(f"premise coordinates: {tables.premise_crs}")
    if len(tables.campaigns):
        per_offer = tables.campaigns.groupby(["offer", "arm"], observed=True).size()
        lines.append(
            "campaigns: " + ", ".join(f"{o}/{a} {int(n):,}" for (o, a), n in per_offer.items())
        )
    lines.append("all checks passed")
    return "\n".join(lines)
