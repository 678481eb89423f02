"""What happened after a cutoff: the observed follow-up of the customers present at it."""

from __future__ import annotations

import numpy as np
import pandas as pd

from .._layout import HOLDS_PREFIX, REASON_TO_CAUSE, TERMINAL_CAUSES, UPTAKE_PREFIX
from .._months import format_month, parse_month
from ..data import Tables
from ..errors import UsageError

#: Cause codes of `outcome_for_cause`.
CENSORED, EVENT, COMPETING = 0, 1, 2


def observed_outcomes(tables: Tables, cutoff: str | int) -> pd.DataFrame:
    """The follow-up after month ``c = cutoff`` of every customer present at the end of ``c``.

    A customer is present at the end of c when ``start ≤ c`` and (no end, or ``end > c``):
    exactly the customers of ``build_snapshot(tables, c)``. Months after the cutoff are counted
    from 1 (month ``c + 1``). Follow-up runs to the extract month ``E``, ``E − c`` months.

    Returns
    -------
    pandas.DataFrame
        One row per present customer, in the customers table's order:

        - ``customer_id``;
        - ``months``: the month of the terminal exit, ``end − c`` (1 = the first month after
          the cutoff), or, with no exit by ``E``, the months observed, ``E − c`` (censored);
        - ``cause``: ``churn`` / ``move_out`` / ``other_exit``, or missing when censored;
        - ``holds_<p>``: 1 if product p was held at the end of c (uptake month ≤ c);
        - ``uptake_<p>``: months from c to the uptake of p when it happened in
          ``c < month ≤ min(end, E)`` (an uptake in the exit month counts), else missing.
    """
    c = parse_month(cutoff, what="cutoff") if isinstance(cutoff, str) else int(cutoff)
    extract = int(tables.extract_month)
    if c > extract:
        raise UsageError(
            f"cutoff was {format_month(c)} but the data ends at {format_month(extract)}"
        )
    customers = tables.customers
    start = customers["start"].to_numpy(dtype=np.int64)
    end = customers["end"].to_numpy(dtype=np.float64)
    present = (start <= c) & (np.isnan(end) | (end > c))
    ended = present & ~np.isnan(end) & (end <= extract)
    months = np.where(ended, np.nan_to_num(end) - c, extract - c).astype(np.int32)
    reason = customers["end_reason"].astype("string").to_numpy(dtype=object, na_value=None)
    cause = np.array([REASON_TO_CAUSE.get(r) if r is not None else None for r in reason])
    cause = np.where(ended, cause, None)
    out: dict[str, object] = {
        "customer_id": customers["customer_id"].to_numpy()[present],
        "months": months[present],
        "cause": pd.Categorical(cause[present], categories=list(TERMINAL_CAUSES)),
    }
    exit_month = np.where(ended, np.nan_to_num(end), extract)
    position = pd.Index(customers["customer_id"]).get_indexer(tables.uptakes["customer_id"])
    products = tables.uptakes["product"].to_numpy()
    uptake_months = tables.uptakes["month"].to_numpy(dtype=np.float64)
    for product in tables.products:
        first = np.full(len(customers), np.nan)
        mine = (products == product) & (position >= 0)
        first[position[mine]] = uptake_months[mine]
        holds = first <= c
        seen = (first > c) & (first <= exit_month)
        out[HOLDS_PREFIX + product] = holds[present].astype(np.int8)
        out[UPTAKE_PREFIX + product] = np.where(seen, first - c, np.nan)[present]
    return pd.DataFrame(out)


def outcome_for_cause(
    outcomes: pd.DataFrame, cause: str
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """One cause's follow-up from `observed_outcomes`: months, code and who is at risk.

    For a terminal cause k every customer is at risk; the code is 1 for an exit by k, 2 for
    an exit by another cause (competing), 0 for censored, at ``months``. For ``uptake_<p>`` only
    customers not holding p at the cutoff are at risk; the time is the uptake month, or the
    exit month if the customer left first (code 2: leaving competes with taking it up), or
    the months observed (code 0).

    Returns
    -------
    months
        int array over all customers.
    code
        int array: 0 censored, 1 the cause, 2 a competing exit.
    at_risk
        bool array: the customers the cause is evaluated on.
    """
    months = outcomes["months"].to_numpy(dtype=np.int64)
    exit_cause = outcomes["cause"].astype("string").to_numpy(dtype=object, na_value=None)
    exited = np.array([c is not None for c in exit_cause], dtype=bool)
    if cause in TERMINAL_CAUSES:
        code = np.where(exit_cause == cause, EVENT, np.where(exited, COMPETING, CENSORED))
        return months, code.astype(np.int64), np.ones(months.size, dtype=bool)
    if cause.startswith(UPTAKE_PREFIX) and cause in outcomes:
        holds = HOLDS_PREFIX + cause.removeprefix(UPTAKE_PREFIX)
        uptake = outcomes[cause].to_numpy(dtype=np.float64)
        took = ~np.isnan(uptake)
        code = np.where(took, EVENT, np.where(exited, COMPETING, CENSORED))
        time = np.where(took, np.nan_to_num(uptake), months).astype(np.int64)
        return time, code.astype(np.int64), outcomes[holds].to_numpy() == 0
    known = list(TERMINAL_CAUSES) + [c for c in outcomes if c.startswith(UPTAKE_PREFIX)]
    raise UsageError(f"cause was {cause!r} but is expected to be one of {known}")
