"""Checks of a requested month against the data, made before any step runs."""

from __future__ import annotations

from .._months import format_month, parse_month
from ..data import Tables
from ..errors import UsageError


def first_month(tables: Tables) -> int:
    """The first month of the data: the earliest start month of any customer."""
    starts = tables.customers["start"]
    return int(starts.min()) if len(starts) else int(tables.extract_month)


def check_as_of(tables: Tables, month: str | int, *, what: str = "--as-of") -> int:
    """The month index of ``month``, refused with `UsageError` when it lies before the first
    month of the data (no panel, snapshot or fit can have a row then).

    Months after the extract month are refused where the extract month is known (the panel
    and the run); this check is the other end.
    """
    index = parse_month(month, what=what) if isinstance(month, str) else int(month)
    first = first_month(tables)
    if index < first:
        raise UsageError(
            f"{what} was {format_month(index)} but the data begins in {format_month(first)} "
            f"(the earliest start_month); choose a month from {format_month(first)} to "
            f"{format_month(tables.extract_month)}"
        )
    return index
