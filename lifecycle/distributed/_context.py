"""The spatial context of partitioned rows, from the summaries of every customer.

`lifecycle.spatial.add_spatial_context` needs every customer's history for two of its columns:

- ``local_move_rate`` of area a in month m counts move-outs and customer-months of the whole
  area. It is computed once, by one task, from every customer's start, end, reason and area
  (`local_move_rates`, the same function): an ``areas × months`` table, sent to each partition.
- ``nearby_adopters_*`` / ``nearby_adoption_*`` count customers within r metres. The premises
  are sorted along the wider axis of their extent and cut into runs of equal size ("tiles");
  a tile's task counts with `lifecycle.spatial.nearby_counts` (the same function) over its
  own premises and every premise within r of the tile along that axis (the "halo"): every
  neighbour of a premise of the tile is among them, so its counts are exactly those over all
  premises. The counts are then sent on to the partitions of their customers.

Each partition's rows then get their context from `add_spatial_context` itself, given the
rates and their counts as a `lifecycle.spatial.SharedContext` (`with_context`); area
attributes are per customer. The values equal the single-process ones: the same functions
see the same numbers.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from ..config import Config
from ..data import Tables
from ..errors import UsageError
from ..spatial import (
    SharedContext,
    add_spatial_context,
    checked_radii,
    local_move_rates,
    nearby_counts,
)
from ._remote import item
from ._tables import NEVER, PartitionedTables, Summary

if TYPE_CHECKING:
    from distributed import Future

# Widening of a tile's halo beyond r, against rounding in the distance test (metres).
_HALO_SLACK = 1e-6


@dataclass
class ContextPlan:
    """Futures of the context shared by all partitions for rows of months ``first..last``.

    Attributes
    ----------
    rates
        ``(areas, months)`` shrunk local move rates.
    pieces
        Per partition, the pieces of nearby counts from every tile (empty without products).
    """

    first: int
    last: int
    radii: tuple[float, ...]
    rates: Future
    pieces: list[list[Future]]


def radii_of(config: Config) -> tuple[float, ...]:
    """The ``[spatial] radii_m``, checked as `add_spatial_context` checks them."""
    radii = tuple(checked_radii(config))
    if config.spatial.move_rate_months < 1:
        raise UsageError(
            f"[spatial] move_rate_months was {config.spatial.move_rate_months} but is expected "
            "to be a number of months, at least 1"
        )
    return radii


def plan_context(data: PartitionedTables, first: int, last: int) -> ContextPlan:
    """Start the shared part of the context of rows in months ``first..last`` (indices)."""
    client = data.client
    radii = radii_of(data.config)
    window = int(data.config.spatial.move_rate_months)
    rates = client.submit(_move_rates, data.summaries, data.n_areas, first, last, window)
    pieces: list[list[Future]] = [[] for _ in range(data.npartitions)]
    if data.products:
        n_tiles = data.npartitions
        points = client.submit(_points, data.summaries, data.offsets, first, last, n_tiles)
        n_months = last - first + 1
        for t in range(n_tiles):
            tile = client.submit(_tile, points, t, radii, n_months)
            for p in range(data.npartitions):
                pieces[p].append(client.submit(item, tile, p))
    return ContextPlan(first, last, radii, rates, pieces)


def _move_rates(
    summaries: list[Summary], n_areas: int, first: int, last: int, window: int
) -> np.ndarray:
    return local_move_rates(
        np.concatenate([s.area for s in summaries]),
        np.concatenate([s.start for s in summaries]),
        np.concatenate([s.end for s in summaries]),
        np.concatenate([s.moved_out for s in summaries]),
        n_areas=n_areas,
        first_month=first,
        last_month=last,
        window=window,
    )


@dataclass(frozen=True)
class _Points:
    """Premises that can be in or count for rows of the months, sorted along one axis."""

    x: np.ndarray
    y: np.ndarray
    along: np.ndarray  # the coordinate sorted on
    position: np.ndarray  # position in the customers table
    intervals: list[tuple[np.ndarray, np.ndarray]]
    tiles: np.ndarray  # tile t holds sorted points tiles[t]..tiles[t+1]-1
    offsets: np.ndarray  # partition starts in the customers table


def _points(
    summaries: list[Summary], offsets: np.ndarray, first: int, last: int, n_tiles: int
) -> _Points:
    """The premises of customers active at some time in ``first..last``: every customer with
    rows then, and every one who counts for anyone then (a customer counts in month m when
    start + 1 ≤ m ≤ end; a holder of p when max(start, U) + 1 ≤ m ≤ end)."""
    start = np.concatenate([s.start for s in summaries])
    end_f = np.concatenate([s.end for s in summaries])
    end = np.where(np.isnan(end_f), NEVER, np.nan_to_num(end_f)).astype(np.int64)
    keep = np.flatnonzero((start <= last) & (end >= first))
    x = np.concatenate([s.x for s in summaries])[keep]
    y = np.concatenate([s.y for s in summaries])[keep]
    uptake = np.concatenate([s.uptake for s in summaries])[keep]
    wide_x = x.size == 0 or np.ptp(x) >= np.ptp(y)
    along = x if wide_x else y
    order = np.argsort(along, kind="stable")
    s, e = start[keep][order] - first, end[keep][order] - first
    intervals = [(s + 1, e)]
    for k in range(uptake.shape[1]):
        u = uptake[order, k]
        lo = np.where(u >= NEVER, NEVER, np.maximum(start[keep][order], u) + 1 - first)
        intervals.append((lo, e))
    return _Points(
        x=x[order],
        y=y[order],
        along=along[order],
        position=keep[order],
        intervals=intervals,
        tiles=np.linspace(0, keep.size, n_tiles + 1).round().astype(np.int64),
        offsets=offsets,
    )


def _tile(
    points: _Points, t: int, radii: tuple[float, ...], n_months: int
) -> list[tuple[np.ndarray, list[np.ndarray]]]:
    """Nearby counts of the premises of tile t, one piece per partition of customers:
    (positions within the partition, counts ``(n, 1 + products, months)`` per radius)."""
    a, b = int(points.tiles[t]), int(points.tiles[t + 1])
    n_parts = len(points.offsets) - 1
    position = points.position[a:b]
    part = np.searchsorted(points.offsets, position, "right") - 1
    by_radius = []
    for radius in radii:
        if a == b:
            by_radius.append(np.zeros((0, len(points.intervals), n_months), dtype=np.int32))
            continue
        reach = radius + _HALO_SLACK * max(1.0, float(np.abs(points.along).max()))
        h0 = int(np.searchsorted(points.along, points.along[a] - reach, "left"))
        h1 = int(np.searchsorted(points.along, points.along[b - 1] + reach, "right"))
        halo = [(lo[h0:h1], hi[h0:h1]) for lo, hi in points.intervals]
        counts = nearby_counts(points.x[h0:h1], points.y[h0:h1], radius, halo, n_months)
        by_radius.append(counts[a - h0 : b - h0])
    pieces = []
    for p in range(n_parts):
        mine = np.flatnonzero(part == p)
        pieces.append((position[mine] - points.offsets[p], [c[mine] for c in by_radius]))
    return pieces


def with_context(
    frame: pd.DataFrame,
    tables: Tables,
    config: Config,
    rates: np.ndarray,
    first: int,
    pieces: list[tuple[np.ndarray, list[np.ndarray]]],
) -> pd.DataFrame:
    """The frame (rows of this partition's customers) with its spatial context appended by
    `lifecycle.spatial.add_spatial_context`, given the move rates and this partition's
    pieces of nearby counts (`SharedContext`)."""
    n = len(tables.customers)
    slot = np.full(n, -1, dtype=np.int64)
    counts: list[np.ndarray] = []
    if tables.products and pieces:
        positions = np.concatenate([p[0] for p in pieces])
        slot[positions] = np.arange(positions.size)
        n_radii = len(pieces[0][1])
        counts = [
            np.concatenate([p[1][r] for p in pieces]).astype(np.int32, copy=False)
            for r in range(n_radii)
        ]
    shared = SharedContext(first=first, rates=rates, counts=counts, slot=slot)
    return add_spatial_context(frame, tables, config=config, shared=shared)


def _local_positions(frame_ids: pd.Series, customer_ids: pd.Series) -> np.ndarray:
    """Row position in this partition's customers table of each row's customer."""
    index = pd.Index(customer_ids)
    if isinstance(frame_ids.dtype, pd.CategoricalDtype):
        by_code = index.get_indexer(frame_ids.cat.categories)
        codes = frame_ids.cat.codes.to_numpy()
        pos = np.where(codes >= 0, by_code[codes], -1)
    else:
        pos = index.get_indexer(frame_ids)
    if (pos < 0).any():  # the rows were built from these tables: never happens
        raise RuntimeError("rows of customers not in their partition")
    return pos.astype(np.int64)
