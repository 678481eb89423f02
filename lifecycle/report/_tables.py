"""The report's tables, built from a panel, scores and a plan.

Each function returns a small tidy frame that `ReportInputs` holds, so that the report can be
rendered again from saved files without the panel or the models.
"""

from __future__ import annotations

import itertools
from collections.abc import Sequence

import numpy as np
import pandas as pd
from scipy import stats

from .._months import categorical_to_index, format_month
from ..errors import InputError, UsageError
from ..models import survival_and_incidence
from ..panel import life_table, panel_layout

__all__ = [
    "area_risk",
    "incidence_by_segment",
    "monthly_counts",
    "offer_rates_by_area",
    "tenure_hazards",
    "wilson_interval",
]

MAX_SEGMENTS = 8
"""A numeric segment column with more distinct values than this is cut into quartiles."""


def monthly_counts(panel: pd.DataFrame) -> pd.DataFrame:
    """Customers, exits by cause and uptakes per calendar month of a panel.

    Returns
    -------
    pandas.DataFrame
        One row per month (``YYYY-MM``, in order): ``customers`` (customers active in the
        month: the panel's rows), one column per terminal cause (exits in the month), one per
        uptake cause (first months holding the product), ``customers_end`` (customers still
        present at the month's end: ``customers`` minus the exits).
    """
    layout = panel_layout(panel)
    month = categorical_to_index(panel["month"])
    if month.size == 0:
        raise UsageError("the panel has no rows, so there is nothing to count")
    first = int(month.min())
    slot = month - first
    width = int(slot.max()) + 1
    out: dict[str, object] = {"month": [format_month(first + i) for i in range(width)]}
    out["customers"] = np.bincount(slot, minlength=width)
    exits = np.zeros(width, dtype=np.int64)
    for cause in layout.causes:
        counts = np.bincount(slot, weights=panel[cause].to_numpy(np.float64), minlength=width)
        out[cause] = counts.astype(np.int64)
        if cause in layout.terminal_causes:
            exits += out[cause]
    out["customers_end"] = out["customers"] - exits
    frame = pd.DataFrame(out)
    return frame[frame["customers"] > 0].reset_index(drop=True)


def tenure_hazards(panel: pd.DataFrame, causes: Sequence[str] | None = None) -> pd.DataFrame:
    """Customers at risk and events by tenure month, per cause (the life table's counts).

    For cause k and tenure month t, ``at_risk`` counts the panel rows with
    ``tenure_stop = t`` at risk of k (for an uptake, rows not yet holding the product) and
    ``events`` those with the event; the hazard is ``events / at_risk``
    (`lifecycle.panel.life_table`).

    Returns
    -------
    pandas.DataFrame
        ``cause``, ``tenure``, ``at_risk``, ``events``.
    """
    layout = panel_layout(panel)
    causes = list(layout.causes if causes is None else causes)
    parts = []
    for cause in causes:
        if cause not in layout.causes:
            raise UsageError(f"cause was {cause!r} but the panel has the causes {layout.causes}")
        table = life_table(panel, cause)
        parts.append(
            pd.DataFrame(
                {
                    "cause": cause,
                    "tenure": table.index.to_numpy(np.int64),
                    "at_risk": table["at_risk"].to_numpy(np.int64),
                    "events": table["events"].to_numpy(np.int64),
                }
            )
        )
    return pd.concat(parts, ignore_index=True)


def incidence_by_segment(
    panel: pd.DataFrame,
    column: str,
    *,
    max_tenure: int | None = None,
    min_at_risk: int = 30,
) -> pd.DataFrame:
    """Observed cumulative incidence of each terminal cause by tenure, per segment.

    Within a segment, with ``n(t)`` the rows at tenure month t (``tenure_stop = t``; customers
    who entered late count from their entry on) and ``d_k(t)`` the exits by cause k among them,
    the hazards ``d_k(t) / n(t)`` are fed to `survival_and_incidence`: the discrete-time
    Aalen–Johansen estimate with left truncation,

        F_k(t) = Σ_{s ≤ t} S(s−1) · d_k(s)/n(s),   S(t) = Π_{s ≤ t} (1 − Σ_k d_k(s)/n(s)).

    A row belongs to the segment of its own value of ``column``; for a time-varying column
    the curve is that of a customer who stays in the segment. A numeric column with more
    than 8 distinct values is cut at its quartiles. Each segment's curve stops before the
    first tenure month with fewer than ``min_at_risk`` rows.

    Returns
    -------
    pandas.DataFrame
        ``segment`` (text), ``cause``, ``tenure``, ``at_risk``, ``incidence``.
    """
    layout = panel_layout(panel)
    if column not in panel.columns:
        raise UsageError(f"segment column {column!r} is not in the panel")
    if not isinstance(min_at_risk, int) or min_at_risk < 1:
        raise UsageError(f"min_at_risk was {min_at_risk!r} but must be a whole number >= 1")
    segment = _segments(panel[column])
    tenure = panel["tenure_stop"].to_numpy(np.int64)
    longest = int(tenure.max()) if max_tenure is None else int(max_tenure)
    causes = layout.terminal_causes
    events = np.column_stack([panel[c].to_numpy(np.float64) for c in causes])
    parts = []
    for name in sorted(segment.dropna().unique()):
        rows = (segment == name).to_numpy()
        t = tenure[rows]
        inside = t <= longest
        n = np.bincount(t[inside], minlength=longest + 1)[1:].astype(np.float64)
        d = np.column_stack(
            [
                np.bincount(t[inside], weights=events[rows][inside, j], minlength=longest + 1)[1:]
                for j in range(len(causes))
            ]
        )
        short = np.flatnonzero(n < min_at_risk)
        stop = int(short[0]) if short.size else longest
        if stop == 0:
            continue
        hazards = d[:stop] / n[:stop, None]
        _, incidence = survival_and_incidence(hazards)
        for j, cause in enumerate(causes):
            parts.append(
                pd.DataFrame(
                    {
                        "segment": name,
                        "cause": cause,
                        "tenure": np.arange(1, stop + 1),
                        "at_risk": n[:stop].astype(np.int64),
                        "incidence": incidence[:, j],
                    }
                )
            )
    if not parts:
        return pd.DataFrame(columns=["segment", "cause", "tenure", "at_risk", "incidence"])
    return pd.concat(parts, ignore_index=True)


def area_risk(
    scores: pd.DataFrame,
    customer_areas: pd.Series,
    *,
    columns: Sequence[str] = ("cif_churn_3m", "cif_move_out_3m"),
) -> pd.DataFrame:
    """Mean predicted probability per area, e.g. of churn and of moving out within 3 months.

    Parameters
    ----------
    scores
        ``customer_id`` and the score columns (`lifecycle.models.score_customers`).
    customer_areas
        ``area_id`` of each customer, indexed by ``customer_id``
        (`lifecycle.spatial.premise_areas`).
    columns
        Score columns averaged.

    Returns
    -------
    pandas.DataFrame
        ``area_id`` (text), ``customers``, and the mean of each column; sorted by area.
    """
    missing = [c for c in ("customer_id", *columns) if c not in scores]
    if missing:
        raise UsageError(f"the scores lack the column(s) {missing}")
    area = _areas_of(scores["customer_id"], customer_areas, "scores")
    frame = scores[list(columns)].astype(np.float64).assign(area_id=area)
    grouped = frame.groupby("area_id", sort=True)
    out = grouped[list(columns)].mean()
    out.insert(0, "customers", grouped.size())
    return out.reset_index()


def offer_rates_by_area(
    plan: pd.DataFrame,
    customer_areas: pd.Series,
    customers: Sequence[object] | pd.Series,
    *,
    areas: pd.DataFrame | None = None,
) -> pd.DataFrame:
    """How often the plan contacts customers of each area, next to the area's share.

    With ``n_a`` customers in area a (among ``customers``, those the plan could choose
    from) and ``c_a`` of them in the plan: ``customer_share = n_a / Σ n``, ``contact_share =
    c_a / Σ c``, ``contact_rate = c_a / n_a`` and ``rate_ratio = contact_rate / (Σ c / Σ n)``
    (1 = the area is contacted as often as the portfolio; 2 = twice as often).

    Parameters
    ----------
    plan
        The plan table (``customer_id``, ``offer``, …).
    customer_areas
        ``area_id`` of each customer, indexed by ``customer_id``.
    customers
        Ids of the customers the plan was made for (the scored customers).
    areas
        Optional area table: its numeric columns (e.g. ``rental_share``) are added, so that
        contact rates can be read against area attributes that may act as proxies.

    Returns
    -------
    pandas.DataFrame
        ``area_id``, ``customers``, ``contacts``, ``customer_share``, ``contact_share``,
        ``contact_rate``, ``rate_ratio`` and the areas' numeric attributes; sorted by area.
    """
    ids = pd.Series(customers)
    if ids.duplicated().any():
        raise InputError(
            table="customers",
            column="customer_id",
            problem="appears twice among the customers the plan was made for",
            count=int(ids.duplicated(keep=False).sum()),
            examples=ids[ids.duplicated(keep=False)],
        )
    everyone = _areas_of(ids, customer_areas, "customers")
    unknown = ~plan["customer_id"].astype(str).isin(set(ids.astype(str)))
    if unknown.any():
        raise InputError(
            table="plan",
            column="customer_id",
            problem="names customers that are not among the customers the plan was made for",
            count=int(unknown.sum()),
            examples=plan.loc[unknown, "customer_id"],
        )
    contacted = _areas_of(plan["customer_id"], customer_areas, "plan")
    n = everyone.value_counts().sort_index()
    c = contacted.value_counts().reindex(n.index, fill_value=0)
    out = pd.DataFrame({"area_id": n.index.astype(str), "customers": n.to_numpy()})
    out["contacts"] = c.to_numpy()
    total_n, total_c = out["customers"].sum(), out["contacts"].sum()
    out["customer_share"] = out["customers"] / total_n
    out["contact_share"] = out["contacts"] / total_c if total_c else 0.0
    out["contact_rate"] = out["contacts"] / out["customers"]
    overall = total_c / total_n
    out["rate_ratio"] = out["contact_rate"] / overall if overall > 0 else np.nan
    if areas is not None:
        attributes = [
            c
            for c in areas.columns
            if c not in ("area_id", "geometry") and pd.api.types.is_numeric_dtype(areas[c])
        ]
        extra = pd.DataFrame(areas[["area_id", *attributes]]).copy()
        extra["area_id"] = extra["area_id"].astype(str)
        out = out.merge(extra, on="area_id", how="left")
    return out


def wilson_interval(
    events: np.ndarray, n: np.ndarray, level: float = 0.95
) -> tuple[np.ndarray, np.ndarray]:
    """Wilson's score interval for a binomial proportion ``p = events / n``.

        (p + z²/2n ± z √(p(1−p)/n + z²/4n²)) / (1 + z²/n),   z = Φ⁻¹((1 + level)/2)

    (Wilson 1927, JASA 22, 209–212). NaN where ``n = 0``.
    """
    events = np.asarray(events, dtype=np.float64)
    n = np.asarray(n, dtype=np.float64)
    z = stats.norm.ppf(0.5 + level / 2.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        p = events / n
        denominator = 1.0 + z * z / n
        centre = (p + z * z / (2.0 * n)) / denominator
        half = z * np.sqrt(p * (1.0 - p) / n + z * z / (4.0 * n * n)) / denominator
    ok = n > 0
    lower = np.where(ok, np.clip(centre - half, 0.0, 1.0), np.nan)
    upper = np.where(ok, np.clip(centre + half, 0.0, 1.0), np.nan)
    return lower, upper


# -- pieces ----------------------------------------------------------------------------------
def _segments(values: pd.Series) -> pd.Series:
    """Text label of each row's segment (NaN stays missing)."""
    numeric = pd.api.types.is_numeric_dtype(values) and not pd.api.types.is_bool_dtype(values)
    if numeric and values.nunique(dropna=True) > MAX_SEGMENTS:
        x = values.to_numpy(dtype=np.float64, na_value=np.nan)
        edges = np.unique(np.nanquantile(x, [0.25, 0.5, 0.75]))
        code = np.searchsorted(edges, x, side="left")
        cuts = [f"{e:.4g}" for e in edges]
        bounds = [f"up to {cuts[0]}"]
        bounds += [f"{lo} to {hi}" for lo, hi in itertools.pairwise(cuts)]
        bounds += [f"over {cuts[-1]}"]
        labels = np.array([f"{i + 1}: {b}" for i, b in enumerate(bounds)], dtype=object)
        return pd.Series(np.where(np.isnan(x), None, labels[np.minimum(code, len(labels) - 1)]))
    text = values.astype("string")
    return pd.Series(text.to_numpy(dtype=object, na_value=None))


def _areas_of(ids: pd.Series, customer_areas: pd.Series, table: str) -> pd.Series:
    lookup = pd.Series(customer_areas)
    lookup.index = lookup.index.astype(str)
    area = lookup.reindex(pd.Index(ids.astype(str)))
    if area.isna().any():
        missing = area.index[area.isna().to_numpy()]
        raise InputError(
            table=table,
            column="customer_id",
            problem="has customers without an area",
            count=len(missing),
            examples=missing,
            fix="pass the area of every customer (lifecycle.spatial.premise_areas)",
        )
    return pd.Series(area.astype(str).to_numpy(), name="area_id")
