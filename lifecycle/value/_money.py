"""Amounts of money as they are written: rounded to cents."""

from __future__ import annotations

from collections.abc import Sequence

import pandas as pd

#: Columns of the written tables that hold money (in the ``[value] currency``).
MONEY_COLUMNS = ("expected_value", "cost", "lifetime_value", "spend", "value_saved", "uptake_value")


def round_money(frame: pd.DataFrame, columns: Sequence[str] = MONEY_COLUMNS) -> pd.DataFrame:
    """A copy of ``frame`` with its money columns (those of ``columns`` it has) rounded to
    cents (two decimals, round half to even as numpy does); other columns untouched."""
    present = [c for c in columns if c in frame.columns]
    if not present:
        return frame
    return frame.assign(**{c: frame[c].astype(float).round(2) for c in present})
