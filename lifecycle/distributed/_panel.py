"""The panel, the scoring snapshot and landmark snapshots, built partition by partition.

The results are `dask.dataframe.DataFrame` collections, one partition per partition of
customers (landmark snapshots: one per landmark month). Each partition's task runs the
single-process functions on its own customers: `build_panel`, `build_snapshot` or
`landmark_snapshots`, then `add_spatial_context` given the partition's share of the
`ContextPlan` (the move rates and nearby counts that depend on other customers). It then
recodes its categorical columns onto the categories of the whole table (customer ids, months,
text attributes), so that the partitions concatenated are the single-process result.
"""

from __future__ import annotations

import logging
from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from .._months import categorical_to_index, format_month, parse_month
from ..config import Config
from ..data import Tables
from ..errors import UsageError
from ..models import landmark_snapshots as _landmark_snapshots
from ..panel import build_panel, build_snapshot
from ._context import ContextPlan, plan_context, with_context
from ._remote import as_frame, concat_frames, item, parts_of
from ._tables import PartitionedTables, Shared, Summary

if TYPE_CHECKING:
    import dask.dataframe

log = logging.getLogger(__name__)


def panel_with_context(
    data: PartitionedTables, as_of: str | int, *, spatial: bool = True
) -> dask.dataframe.DataFrame:
    """The customer-month panel of ``as_of`` with its spatial context, by partition.

    Equals ``add_spatial_context(build_panel(tables, as_of, config=config), tables,
    config=config)`` of the whole tables (``build_panel`` alone with ``spatial=False``):
    partition p holds the rows of partition p's customers (each with its own index 0..n_p−1).
    See `lifecycle.panel.build_panel`
    and `lifecycle.spatial.add_spatial_context` for the columns and their definitions, and
    `lifecycle.distributed._context` for how the context is shared out.

    Parameters
    ----------
    data
        The partitioned tables (`distribute_tables`).
    as_of
        The panel's last month, ``YYYY-MM`` or a month index; not after the extract month.
    spatial
        Whether to append the spatial context.
    """
    as_of_index = _as_of(data, as_of)
    window = int(data.config.panel.window_months)
    if window < 1:
        raise UsageError(f"[panel] window_months was {window} but must be at least 1")
    client = data.client
    span = client.submit(_span, data.summaries, as_of_index - window + 1, as_of_index).result()
    months = span or (as_of_index, as_of_index)
    plan = plan_context(data, *months) if spatial else None
    parts = [
        client.submit(
            _panel_part,
            data.parts[p],
            data.shared,
            data.config,
            as_of_index,
            span,
            *_plan_args(plan, p),
        )
        for p in range(data.npartitions)
    ]
    return as_frame(client, parts)


def snapshot_with_context(data: PartitionedTables, as_of: str | int) -> dask.dataframe.DataFrame:
    """The scoring snapshot at the end of ``as_of`` with its spatial context, by partition.

    Equals ``add_spatial_context(build_snapshot(tables, as_of, config=config), tables,
    config=config)`` of the whole tables: one row per customer present at the end of
    ``as_of``, with the features known then (see `lifecycle.panel.build_snapshot`).
    """
    as_of_index = _as_of(data, as_of)
    month = as_of_index + 1
    plan = plan_context(data, month, month)
    client = data.client
    parts = [
        client.submit(
            _snapshot_part,
            data.parts[p],
            data.shared,
            data.config,
            as_of_index,
            *_plan_args(plan, p),
        )
        for p in range(data.npartitions)
    ]
    return as_frame(client, parts)


def landmark_snapshots(
    panel: dask.dataframe.DataFrame,
    *,
    horizon: int,
    months: Sequence[int] | np.ndarray | None = None,
    every: int = 3,
    max_landmarks: int = 12,
) -> dask.dataframe.DataFrame:
    """Landmark snapshots of a partitioned panel: one partition per landmark month.

    Equals `lifecycle.models.landmark_snapshots` of the whole panel (same arguments, same
    rows in the same order: by landmark month, then customer). Each panel partition holds
    whole customers, so its follow-up is complete; its landmark rows are then regrouped by
    month. The default months are `lifecycle.models.landmark_months` of the whole panel:
    every ``every``-th month from its first, the latest ``max_landmarks``.
    """
    for name, value in (("horizon", horizon), ("every", every), ("max_landmarks", max_landmarks)):
        if not isinstance(value, int | np.integer) or isinstance(value, bool) or value < 1:
            raise UsageError(f"{name} was {value!r} but is expected to be a whole number >= 1")
    from distributed import get_client

    client = get_client()
    panel_parts = parts_of(client, panel)
    if months is None:
        spans = client.gather([client.submit(_month_span, p) for p in panel_parts])
        spans = [s for s in spans if s is not None]
        if spans:
            lo, hi = min(s[0] for s in spans), max(s[1] for s in spans)
            months = np.arange(lo, hi + 1, every, dtype=np.int64)[-max_landmarks:]
        else:
            months = np.empty(0, dtype=np.int64)
    months = np.unique(np.asarray(months, dtype=np.int64))
    by_part = [client.submit(_landmark_part, p, int(horizon), months) for p in panel_parts]
    if months.size == 0:
        return as_frame(client, [client.submit(item, by_part[0], 0)])
    parts = [
        client.submit(_concat_list, [client.submit(item, b, k) for b in by_part])
        for k in range(months.size)
    ]
    return as_frame(client, parts)


# --- tasks ------------------------------------------------------------------------------------


def _plan_args(plan: ContextPlan | None, p: int) -> tuple[object, ...]:
    if plan is None:
        return (None, 0, [])
    return (plan.rates, plan.first, plan.pieces[p])


def _span(summaries: list[Summary], window_start: int, as_of: int) -> tuple[int, int] | None:
    """First and last month of the panel's rows over all customers (`None`: no rows)."""
    start = np.concatenate([s.start for s in summaries])
    end = np.concatenate([s.end for s in summaries])
    first = np.maximum(start, window_start)
    last = np.where(np.isnan(end), as_of, np.minimum(np.nan_to_num(end), as_of)).astype(np.int64)
    kept = first <= last
    if not kept.any():
        return None
    return int(first[kept].min()), int(last[kept].max())


def _panel_part(
    tables: Tables,
    shared: Shared,
    config: Config,
    as_of: int,
    span: tuple[int, int] | None,
    rates: np.ndarray | None,
    first: int,
    pieces: list,
) -> pd.DataFrame:
    frame = build_panel(tables, as_of, config=config)
    if rates is not None:
        frame = with_context(frame, tables, config, rates, first, pieces)
    return harmonise(frame, shared, span)


def _snapshot_part(
    tables: Tables,
    shared: Shared,
    config: Config,
    as_of: int,
    rates: np.ndarray,
    first: int,
    pieces: list,
) -> pd.DataFrame:
    frame = build_snapshot(tables, as_of, config=config)
    frame = with_context(frame, tables, config, rates, first, pieces)
    return harmonise(frame, shared, (as_of + 1, as_of + 1))


def harmonise(frame: pd.DataFrame, shared: Shared, months: tuple[int, int] | None) -> pd.DataFrame:
    """Categorical columns recoded onto the categories of the whole table: text customer
    ids (every id, in table order), ``month`` (``YYYY-MM`` from ``months[0]`` to
    ``months[1]``; none when ``None``) and text static attributes (sorted levels)."""
    frame = frame.copy(deep=False)
    ids = frame["customer_id"]
    if shared.id_categories is not None and isinstance(ids.dtype, pd.CategoricalDtype):
        frame["customer_id"] = _recode(ids, shared.id_categories)
    index = categorical_to_index(frame["month"]).astype(np.int64)
    lo, hi = months if months is not None else (0, -1)
    frame["month"] = pd.Categorical.from_codes(
        index - lo, categories=[format_month(m) for m in range(lo, hi + 1)], ordered=True
    )
    for name, levels in shared.levels.items():
        if name in frame.columns and isinstance(frame[name].dtype, pd.CategoricalDtype):
            frame[name] = _recode(frame[name], levels)
    return frame


def _recode(values: pd.Series, categories: pd.Index) -> pd.Categorical:
    mapping = categories.get_indexer(values.cat.categories)
    codes = values.cat.codes.to_numpy()
    new = np.where(codes >= 0, mapping[codes], -1)
    return pd.Categorical.from_codes(new, categories=categories, ordered=values.cat.ordered)


def _month_span(frame: pd.DataFrame) -> tuple[int, int] | None:
    if len(frame) == 0:
        return None
    month = categorical_to_index(frame["month"])
    return int(month.min()), int(month.max())


def _landmark_part(panel: pd.DataFrame, horizon: int, months: np.ndarray) -> list[pd.DataFrame]:
    """This partition's landmark rows, one frame per landmark month."""
    frame = _landmark_snapshots(panel, horizon=horizon, months=months)
    month = categorical_to_index(frame["month"]) if len(frame) else np.empty(0, np.int64)
    cuts = np.searchsorted(month, months), np.searchsorted(month, months, "right")
    return [frame.iloc[a:b].reset_index(drop=True) for a, b in zip(*cuts, strict=True)] or [frame]


def _concat_list(frames: list[pd.DataFrame]) -> pd.DataFrame:
    return concat_frames(frames)


def _as_of(data: PartitionedTables, as_of: str | int) -> int:
    index = parse_month(as_of, what="as_of") if isinstance(as_of, str) else int(as_of)
    if index > data.extract_month:
        raise UsageError(
            f"as_of was {format_month(index)} but the data only covers months up to "
            f"{format_month(data.extract_month)} (the extract month); choose an earlier as_of"
        )
    return index
