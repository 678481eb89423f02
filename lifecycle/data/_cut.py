"""The tables as they stood at the end of an earlier month."""

from __future__ import annotations

import dataclasses

import numpy as np

from ._tables import Tables


def tables_as_of(tables: Tables, month: int) -> Tables:
    """What the extract would have held at the end of ``month``.

    Customers who started later are dropped; an end after ``month`` becomes "still active";
    uptakes, activity and campaign rows dated after ``month`` are dropped; the extract month
    becomes ``month``. Replaying a past month this way lets a run of that month use nothing it
    could not have known.
    """
    if month >= tables.extract_month:
        return tables
    c = tables.customers
    c = c[c["start"].to_numpy() <= month].copy()
    later = c["end"].to_numpy() > month
    c.loc[later, "end"] = np.nan
    c["end_reason"] = c["end_reason"].where(~later)
    known = set(c["customer_id"])

    def keep(frame):
        if frame is None or frame.empty:
            return frame
        rows = (frame["month"].to_numpy() <= month) & frame["customer_id"].isin(known).to_numpy()
        return frame[rows].reset_index(drop=True)

    return dataclasses.replace(
        tables,
        customers=c.reset_index(drop=True),
        uptakes=keep(tables.uptakes),
        activity=keep(tables.activity),
        campaigns=keep(tables.campaigns),
        extract_month=int(month),
    )
