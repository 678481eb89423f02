"""Checks of a requested month against the data, made before any step runs."""

from __future__ import annotations

from pathlib import Path

from .._months import format_month, parse_month
from ..config import Config
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


def checked_inputs(source, config: Config, as_of: str | None) -> dict:
    """Every check of the inputs, before the run takes its lock or writes anything (it only
    reads): the tables, the month, the plan's flags and offers. Whether the month exists is
    asked under the lock, after an earlier crash is mended."""
    from ..data import load_tables, tables_as_of
    from ..models import min_events_setting
    from ..spatial import premise_areas
    from ._steps import plan_offers

    tables = load_tables(source, config)
    premise_areas(tables, config)  # as `lifecycle check` does: refused before anything is written
    month = as_of or format_month(tables.extract_month)
    month_index = parse_month(month, what="as_of")
    if month_index > tables.extract_month:
        raise UsageError(
            f"as_of was {month} but the data only covers months up to "
            f"{format_month(tables.extract_month)}"
        )
    check_as_of(tables, month_index, what="as_of")
    tables = tables_as_of(tables, month_index)  # a past month sees only what it knew
    check_plan_inputs(tables, config)
    return {
        "tables": tables,
        "month": month,
        "month_index": month_index,
        "offers": plan_offers(tables, config),
        "min_events": min_events_setting(config),
    }


def refuse_existing(folder: Path, month: str, force: bool) -> None:
    if folder.exists() and not force:
        raise UsageError(
            f"{folder} exists: month {month} was run already; pass --force to rewrite it"
        )


def check_plan_inputs(tables, config: Config) -> None:
    """The plan's settings and exclusion flags, checked before any computation."""
    from ..decisions import plan_settings_from_config, require_flag_columns

    plan = plan_settings_from_config(config)
    require_flag_columns(tables.customers, plan.exclusions, plan.flags_absent, plan.consent_column)
