"""Building the customer-month panel from checked tables."""

from __future__ import annotations

import logging
import re

import numpy as np
import pandas as pd

from .._layout import HOLDS_PREFIX, REASON_TO_CAUSE, UPTAKE_PREFIX
from .._months import format_month, month_categorical, parse_month
from ..config import Config
from ..data import Tables
from ..errors import InputError, UsageError
from ._offers import offer_features, offer_windows

log = logging.getLogger(__name__)

_NAME_RE = re.compile(r"^[A-Za-z][A-Za-z0-9_]*$")
_SEASON_ANGLE = 2.0 * np.pi * np.arange(12) / 12.0


def build_panel(tables: Tables, as_of: str | int, *, config: Config | None = None) -> pd.DataFrame:
    """The customer-month panel: one row per customer per month active, features lagged.

    A customer with start month ``s`` and end month ``e`` (``e`` is the last month active; the
    exit happens in it) has one row for every month ``m`` with
    ``max(s, w) ≤ m ≤ min(e, as_of)``, where ``w = as_of − window_months + 1`` is the window
    start. ``tenure_start = m − s`` and ``tenure_stop = tenure_start + 1``, so customers who
    started before the window enter late (left truncation). Every feature on the row of month
    ``m`` uses only what was known at the end of month ``m − 1``; data after ``as_of`` is cut
    away, so past cutoffs can be built from today's extract. The columns and their meaning are
    set out in DEVELOPERS.md (the panel contract).

    Parameters
    ----------
    tables
        Checked input tables (`lifecycle.load_tables`).
    as_of
        The last month of the panel, ``YYYY-MM`` (or a month index). It may not be later than
        the extract month.
    config
        Settings; ``[panel] window_months``, ``not_features`` and ``trailing_sums`` are used,
        and the ``name`` and ``months`` of each ``[[offers]]`` entry with campaign rows
        (past offers as features, `lifecycle.panel._offers`).

    Returns
    -------
    pandas.DataFrame
        Rows sorted by customer (in the customers table's order) then month.
    """
    config = config or Config()
    as_of_index = _as_of_index(tables, as_of)
    return _assemble(tables, as_of_index, config, window=int(config.panel.window_months))


def build_snapshot(
    tables: Tables, as_of: str | int, *, config: Config | None = None
) -> pd.DataFrame:
    """One row per customer at the end of ``as_of``, with the features for the next month.

    This is the row the panel would hold for month ``as_of + 1`` (every feature known at the
    end of ``as_of``) for each customer who started by ``as_of`` and had not left by its end:
    the input of scoring. Its ``month`` is ``as_of + 1``, the first month predicted; it has no
    cause columns. Nothing dated after ``as_of`` is used.
    """
    config = config or Config()
    as_of_index = _as_of_index(tables, as_of)
    rows = _assemble(tables, as_of_index + 1, config, window=1, outcomes=False)
    return rows[rows["tenure_start"].to_numpy() >= 1].reset_index(drop=True)


def _as_of_index(tables: Tables, as_of: str | int) -> int:
    as_of_index = parse_month(as_of, what="as_of") if isinstance(as_of, str) else int(as_of)
    if as_of_index > tables.extract_month:
        raise UsageError(
            f"as_of was {format_month(as_of_index)} but the data only covers months up to "
            f"{format_month(tables.extract_month)} (the extract month); choose an earlier as_of"
        )
    return as_of_index


def _assemble(
    tables: Tables, as_of_index: int, config: Config, *, window: int, outcomes: bool = True
) -> pd.DataFrame:
    if window < 1:
        raise UsageError(f"[panel] window_months was {window} but must be at least 1")
    for product in tables.products:
        _check_product_name(tables, product)

    rows = _row_index(tables.customers, as_of_index - window + 1, as_of_index)
    log.info(
        "panel: %d customers, %d customer-months up to %s",
        len(rows.first),
        len(rows.month),
        format_month(as_of_index),
    )
    columns: dict[str, object] = {}
    columns["customer_id"] = _customer_ids(tables.customers["customer_id"], rows.customer)
    columns["month"] = month_categorical(rows.month)
    tenure = rows.month - tables.customers["start"].to_numpy()[rows.customer]
    columns["tenure_start"] = tenure.astype(np.int16)
    columns["tenure_stop"] = (tenure + 1).astype(np.int16)
    uptake_months = _uptake_months(tables, rows)
    if outcomes:
        columns.update(_terminal_flags(tables.customers, rows, as_of_index))
        for product, first_holding in uptake_months.items():
            columns[UPTAKE_PREFIX + product] = (rows.month == first_holding).astype(np.int8)
    for product, first_holding in uptake_months.items():
        columns[HOLDS_PREFIX + product] = (rows.month > first_holding).astype(np.int8)
    month_of_year = rows.month % 12
    columns["season_sin"] = np.sin(_SEASON_ANGLE).astype(np.float32)[month_of_year]
    columns["season_cos"] = np.cos(_SEASON_ANGLE).astype(np.float32)[month_of_year]
    columns.update(_static_features(tables, rows, config))
    columns.update(_activity_features(tables, rows, config))
    campaigns = tables.campaigns
    if campaigns is not None and len(campaigns):
        position = pd.Index(tables.customers["customer_id"]).get_indexer(campaigns["customer_id"])
        columns.update(
            offer_features(campaigns, position, rows.customer, rows.month, offer_windows(config))
        )
    return pd.DataFrame(columns, copy=False)


class _Rows:
    """Where each panel row comes from: customer position and month index, per row."""

    def __init__(self, kept: np.ndarray, first: np.ndarray, last: np.ndarray) -> None:
        self.kept = kept  # positions in the customers table of customers with rows
        self.first = first  # first month of each kept customer's rows
        self.last = last
        counts = (last - first + 1).astype(np.int64)
        self.offset = np.concatenate([[0], np.cumsum(counts)[:-1]]).astype(np.int64)
        self.customer = np.repeat(kept, counts).astype(np.int32)
        self.month = (np.repeat(first - self.offset, counts) + np.arange(counts.sum())).astype(
            np.int32
        )
        # For a customer position: its block's offset and first month (-1 if it has no rows).
        self._slot = np.full(kept.max() + 1 if kept.size else 0, -1, dtype=np.int64)
        self._slot[kept] = np.arange(kept.size)

    def row_of(self, customer: np.ndarray, month: np.ndarray) -> np.ndarray:
        """Row numbers of (customer position, month) pairs; -1 where there is no such row."""
        customer = np.asarray(customer, dtype=np.int64)
        month = np.asarray(month, dtype=np.int64)
        slot = np.full(customer.shape, -1, dtype=np.int64)
        inside = (customer >= 0) & (customer < self._slot.size)
        slot[inside] = self._slot[customer[inside]]
        has = slot >= 0
        if not has.any():
            return np.full(customer.shape, -1, dtype=np.int64)
        safe = np.where(has, slot, 0)
        within = has & (month >= self.first[safe]) & (month <= self.last[safe])
        return np.where(within, self.offset[safe] + month - self.first[safe], -1)


def _row_index(customers: pd.DataFrame, window_start: int, as_of: int) -> _Rows:
    start = customers["start"].to_numpy(dtype=np.int64)
    end = customers["end"].to_numpy(dtype=np.float64)
    last_active = np.where(np.isnan(end), as_of, np.minimum(np.nan_to_num(end), as_of))
    first = np.maximum(start, window_start)
    last = last_active.astype(np.int64)
    kept = np.flatnonzero(first <= last)
    return _Rows(kept, first[kept], last[kept])


def _customer_ids(ids: pd.Series, customer: np.ndarray) -> pd.Series | pd.Categorical:
    if pd.api.types.is_integer_dtype(ids.dtype) and not isinstance(ids.dtype, pd.CategoricalDtype):
        return ids.to_numpy()[customer]
    # Text ids: one copy of each id, and an int32 code per row.
    return pd.Categorical.from_codes(customer, categories=pd.Index(ids.astype(str)))


def _terminal_flags(customers: pd.DataFrame, rows: _Rows, as_of: int) -> dict[str, np.ndarray]:
    end = customers["end"].to_numpy(dtype=np.float64)
    reason = customers["end_reason"].astype("string").to_numpy(dtype=object, na_value=None)
    total = rows.month.size
    flags = {cause: np.zeros(total, dtype=np.int8) for cause in REASON_TO_CAUSE.values()}
    ended = rows.kept[~np.isnan(end[rows.kept]) & (end[rows.kept] <= as_of)]
    row = rows.row_of(ended, end[ended].astype(np.int64))
    for code, cause in REASON_TO_CAUSE.items():
        mine = reason[ended] == code
        flags[cause][row[mine]] = 1
    return flags


def _uptake_months(tables: Tables, rows: _Rows) -> dict[str, np.ndarray]:
    """Per product, the uptake month of each row's customer (a large number if none)."""
    never = np.iinfo(np.int32).max
    position = pd.Index(tables.customers["customer_id"]).get_indexer(tables.uptakes["customer_id"])
    out: dict[str, np.ndarray] = {}
    n_customers = len(tables.customers)
    products = tables.uptakes["product"].to_numpy()
    months = tables.uptakes["month"].to_numpy(dtype=np.int64)
    for product in tables.products:
        mine = (products == product) & (position >= 0)
        first = np.full(n_customers, never, dtype=np.int64)
        first[position[mine]] = months[mine]
        out[product] = first[rows.customer]
    return out


def _static_features(tables: Tables, rows: _Rows, config: Config) -> dict[str, object]:
    customers = tables.customers
    names = ["monthly_margin"] + [
        c
        for c in tables.static_columns
        if c != "monthly_margin" and c not in config.panel.not_features
    ]
    out: dict[str, object] = {}
    for name in names:
        values = customers[name]
        if pd.api.types.is_numeric_dtype(values.dtype) and not pd.api.types.is_bool_dtype(values):
            out[name] = values.to_numpy(dtype=np.float32, na_value=np.nan)[rows.customer]
        else:
            codes, uniques = pd.factorize(values.astype("string"), sort=True)
            out[name] = pd.Categorical.from_codes(codes[rows.customer], categories=uniques)
    return out


def _activity_features(tables: Tables, rows: _Rows, config: Config) -> dict[str, np.ndarray]:
    """Each activity column as of month m−1, and trailing sums over months m−k..m−1."""
    activity = tables.activity
    total = rows.month.size
    out: dict[str, np.ndarray] = {}
    position = pd.Index(tables.customers["customer_id"]).get_indexer(activity["customer_id"])
    month = activity["month"].to_numpy(dtype=np.int64)
    next_row = rows.row_of(position, month + 1)
    has = next_row >= 0
    for name in tables.activity_columns:
        values = activity[name].to_numpy(dtype=np.float32, na_value=np.nan)
        lagged = np.full(total, np.nan, dtype=np.float32)
        lagged[next_row[has]] = values[has]
        out[name] = lagged
    for name, months in config.panel.trailing_sums.items():
        if name not in tables.activity_columns:
            raise UsageError(
                f"[panel] trailing_sums names {name!r}, which is not an activity column; "
                f"the activity columns are {tables.activity_columns}"
            )
        values = np.nan_to_num(activity[name].to_numpy(dtype=np.float64, na_value=np.nan))
        summed = np.zeros(total, dtype=np.float64)
        for lag in range(1, int(months) + 1):
            target = rows.row_of(position, month + lag)
            hit = target >= 0
            summed += np.bincount(target[hit], weights=values[hit], minlength=total)
        out[f"{name}_{int(months)}m"] = summed.astype(np.float32)
    return out


def _check_product_name(tables: Tables, product: str) -> None:
    if not _NAME_RE.match(product):
        bad = tables.uptakes.loc[tables.uptakes["product"] == product, "customer_id"]
        raise InputError(
            table="uptakes",
            column="product",
            problem=f"product name {product!r} cannot become a column name",
            count=len(bad),
            examples=bad.head(5).tolist(),
            fix="Use letters, digits and underscores, starting with a letter (e.g. backup_line)",
        )
