"""The uptake forecast of a partitioned portfolio, area by area.

A prediction interval of an area's adopters is a quantile of the Poisson-binomial sum over
*all* the area's customers, which lie in any partition. So the per-customer inputs of the
forecast are gathered by area: each partition reduces its hazards to what the forecast uses —
the summed terminal hazard and each uptake hazard, ``(n, T, 1 + products)`` — and sends each
area's rows to the task of that area's group of areas; one more task takes every customer for
the total. Each task runs `lifecycle.forecast.forecast_uptake` itself, on the customers of one
area at a time, in the customers' order: the numbers are those of the single-process call.

The total needs every customer's reduced hazards in one task: 8·T·(1 + products) bytes per
customer (about 200 MB for a million customers, 12 months, one product).
"""

from __future__ import annotations

import logging

import numpy as np
import pandas as pd

from .._layout import UPTAKE_PREFIX
from ..data import Tables
from ..errors import UsageError
from ..forecast import ALL_AREAS, forecast_settings, forecast_uptake
from ._context import _local_positions
from ._remote import parts_of
from ._score import DistributedScored
from ._tables import PartitionedTables, Summary

log = logging.getLogger(__name__)

_EXITS = "exit"


def forecast_portfolio(
    data: PartitionedTables, scored: DistributedScored, *, extras: dict | None = None
) -> pd.DataFrame:
    """Expected uptakes by month, area and product, with prediction intervals.

    Equals ``forecast_uptake(hazards[:, :H], causes, start_month=..., areas=<premise area of
    each customer>, levels=..., method=..., exact_max=...)`` of the whole scored portfolio
    (H, levels and method from ``[forecast]``): the columns and rows of
    `lifecycle.forecast.forecast_uptake`, total first, then areas in sorted order, per
    product. ``extras`` are `forecast_uptake`'s ``joiners`` and ``level_draws``
    (`lifecycle.cycle.forecast_extras`, computed in the driving process), passed to every
    task. Bootstrap intervals are not offered here.
    """
    uptakes = [c for c in scored.causes if c.startswith(UPTAKE_PREFIX)]
    if not uptakes:
        raise UsageError(f"the hazards have no uptake_<product> cause: {list(scored.causes)}")
    settings = forecast_settings(data.config)
    client = data.client
    inputs = [
        client.submit(
            _reduce,
            hazards,
            snapshot,
            data.parts[p],
            data.summaries[p],
            scored.causes,
            scored.n_terminal,
            settings.horizon_months,
        )
        for p, (hazards, snapshot) in enumerate(
            zip(scored.hazards, parts_of(client, scored.snapshot), strict=True)
        )
    ]
    labels = sorted(set().union(*client.gather([client.submit(_labels, i) for i in inputs])))
    if ALL_AREAS in labels:
        raise UsageError(f"areas: {ALL_AREAS!r} is reserved for the total; rename that area")
    causes = (_EXITS, *uptakes)
    options = {
        "levels": settings.levels,
        "method": settings.method,
        "exact_max": settings.exact_max,
        "start_month": scored.first_month,
        **(extras or {}),
    }
    total = client.submit(_forecast_groups, inputs, None, causes, options)
    split = np.array_split(np.array(labels, dtype=object), len(inputs))
    chunks = [list(c) for c in split if len(c)]
    by_chunk = [client.submit(_forecast_groups, inputs, chunk, causes, options) for chunk in chunks]
    groups = [*client.gather([total]), *client.gather(by_chunk)]
    frames = [frame for group in groups for frame in group]
    products = [c.removeprefix(UPTAKE_PREFIX) for c in uptakes]
    ordered = [f[f["product"] == product] for product in products for f in frames]
    return pd.concat(ordered, ignore_index=True)


def _reduce(
    hazards: np.ndarray,
    snapshot: pd.DataFrame,
    tables: Tables,
    summary: Summary,
    causes: tuple[str, ...],
    n_terminal: int,
    horizon: int,
) -> tuple[np.ndarray, np.ndarray]:
    """Area label of each snapshot customer, and its hazards reduced to what the forecast
    uses: Σ_k h_k over the terminal causes (summed in their order, as the forecast sums
    them), then each uptake hazard, for months 1..horizon."""
    if hazards.shape[1] < horizon:
        raise UsageError(f"the hazards cover {hazards.shape[1]} months; {horizon} are needed")
    rows = _local_positions(snapshot["customer_id"], tables.customers["customer_id"])
    area_ids = tables.areas["area_id"].to_numpy()[summary.area[rows]]
    labels = pd.Series(area_ids, dtype=object).astype(str).to_numpy(dtype=object)
    array = hazards[:, :horizon]
    exits = np.zeros(array.shape[:-1])
    for k in range(n_terminal):
        exits += array[..., k]
    uptake = [j for j, c in enumerate(causes) if c.startswith(UPTAKE_PREFIX)]
    return labels, np.concatenate([exits[..., None], array[..., uptake]], axis=-1)


def _labels(inputs: tuple[np.ndarray, np.ndarray]) -> set[str]:
    return set(inputs[0].tolist())


def _forecast_groups(
    inputs: list[tuple[np.ndarray, np.ndarray]],
    areas: list[str] | None,
    causes: tuple[str, ...],
    options: dict,
) -> list[pd.DataFrame]:
    """`forecast_uptake` of all customers (``areas=None``), or of each area given, one frame
    per group, the area's customers in portfolio order."""
    if areas is None:
        array = np.concatenate([i[1] for i in inputs])
        return [forecast_uptake(array, causes, **options)]
    mine = [np.flatnonzero(pd.Index(areas).get_indexer(i[0]) >= 0) for i in inputs]
    labels = np.concatenate([i[0][m] for i, m in zip(inputs, mine, strict=True)])
    array = np.concatenate([i[1][m] for i, m in zip(inputs, mine, strict=True)])
    codes = pd.Index(areas).get_indexer(labels)
    order = np.argsort(codes, kind="stable")  # by area, each in portfolio order
    cuts = np.searchsorted(codes[order], np.arange(len(areas) + 1))
    out = []
    joiners = options.get("joiners") or {}
    for k, area in enumerate(areas):
        # the area's customers are this call's whole group: its joiners stand for "all"
        mine = {(p, ALL_AREAS): part for (p, a), part in joiners.items() if a == area}
        frame = forecast_uptake(
            array[order[cuts[k] : cuts[k + 1]]], causes, **{**options, "joiners": mine or None}
        )
        frame["area_id"] = area
        out.append(frame)
    return out
