"""Scoring, lifetime value and offer values per partition of the snapshot; the fitting sample.

Fitting stays in one process. No model family fits across processes: `CauseSpecificCox`
(lifelines' Newton–Raphson over the risk sets), `BoostedHazard` (scikit-learn's histogram
gradient boosting) and `SurvivalForest` (scikit-survival) each need their rows in one place.
What scales is the sample they are given: `sample_customers` draws whole customers at random
(every month of a drawn customer, none of the others), so every hazard estimated from the
sample targets the same hazard as the full panel, without weights. Inside one process, Cox
and boosted also take ``sample_fraction`` (all event rows and a weighted fraction of the
others) and the forest ``max_rows``, to go further.
"""

from __future__ import annotations

import logging
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from .._months import format_month
from ..config import Config
from ..errors import UsageError
from ..forecast import forecast_settings
from ..models import HazardModel, score_customers, survival_from_hazards
from ..value import lifetime_value, value_settings
from ..value import offer_values as _offer_values
from ._frame import PartitionedFrame
from ._panel import _as_of, snapshot_with_context
from ._remote import concat_frames, item, portable
from ._tables import PartitionedTables

log = logging.getLogger(__name__)

SCORE_HORIZONS = (3, 6, 12)


@dataclass
class DistributedScored:
    """What scoring the partitioned portfolio gives; partition p of each part belongs to the
    same customers.

    Attributes
    ----------
    snapshot
        One row per customer present at the end of ``as_of`` (`snapshot_with_context`).
    hazards
        Futures of ``(n_p, T, K)`` monthly hazards per partition, causes in ``causes`` order.
    causes, n_terminal
        Cause names (terminal first) and how many are terminal.
    scores
        ``customer_id``, ``survival_<h>m``, ``cif_<cause>_<h>m``, ``lifetime_value``.
    first_month
        The first month predicted, ``YYYY-MM`` (the month after ``as_of``).
    config
        The settings scored with (their ``[value]`` section values the offers).
    """

    snapshot: PartitionedFrame
    hazards: list[Any]
    causes: tuple[str, ...]
    n_terminal: int
    scores: PartitionedFrame
    first_month: str
    config: Config


def score_portfolio(
    data: PartitionedTables,
    model: HazardModel,
    as_of: str | int,
    *,
    horizons: Sequence[int] = SCORE_HORIZONS,
) -> DistributedScored:
    """Score every customer present at the end of ``as_of``, partition by partition.

    For each partition of the snapshot: the model's monthly hazards for T months (T the
    longest of the score horizons, ``[value] horizon_months`` and ``[forecast]
    horizon_months``), `lifecycle.models.score_customers` at ``horizons``, and the lifetime
    value over the ``[value]`` horizon, LTV = Σ_{t≤H} margin · S(t) · (1 + d)^−t (see
    `lifecycle.value.lifetime_value`). The model is sent once to every worker. The result
    equals the single-process scoring of the whole snapshot, row for row.
    """
    if not hasattr(model, "features_"):
        raise UsageError(f"this {type(model).__name__} is not fitted yet; call fit(panel)")
    as_of_index = _as_of(data, as_of)
    values = value_settings(data.config)
    forecast_months = forecast_settings(data.config).horizon_months
    months = max(max(horizons), values.horizon_months, forecast_months)
    snapshot = snapshot_with_context(data, as_of_index)
    client = data.client
    remote_model = client.scatter(model, broadcast=True)
    scored = [
        client.submit(
            _score_part,
            part,
            remote_model,
            months,
            tuple(horizons),
            values.annual_discount,
            values.horizon_months,
        )
        for part in snapshot.parts
    ]
    return DistributedScored(
        snapshot=snapshot,
        hazards=[client.submit(item, s, 0) for s in scored],
        causes=tuple(model.causes_),
        n_terminal=len(model.terminal_causes_),
        scores=PartitionedFrame(client, [client.submit(item, s, 1) for s in scored]),
        first_month=format_month(as_of_index + 1),
        config=data.config,
    )


@portable
def _score_part(
    snapshot: pd.DataFrame,
    model: HazardModel,
    months: int,
    horizons: tuple[int, ...],
    annual_discount: float,
    value_months: int,
) -> tuple[np.ndarray, pd.DataFrame]:
    if len(snapshot):
        hazards = model.hazard_array(snapshot, months)
    else:  # a model may refuse to predict for no rows
        hazards = np.zeros((0, months, len(model.causes_)))
    scores = score_customers(model, snapshot, horizons, hazards=hazards)
    survival = survival_from_hazards(hazards, len(model.terminal_causes_))
    scores["lifetime_value"] = lifetime_value(
        survival[:, :value_months],
        snapshot["monthly_margin"].to_numpy(dtype=np.float64),
        annual_discount=annual_discount,
    )
    return hazards, scores


def offer_values(
    scored: DistributedScored,
    offers: Sequence[Any],
    *,
    annual_discount: float | None = None,
    horizon: int | None = None,
    uptake_values: Mapping[str, float] | None = None,
    hazard_ratios: Mapping[str, pd.Series] | None = None,
) -> PartitionedFrame:
    """Expected value of each offer for each scored customer, partition by partition.

    `lifecycle.value.offer_values` of each partition's hazards and margins: one row per
    customer and offer, customer-major, as the single-process call on the whole portfolio
    gives them (value with the offer − value without it − cost, competing risks accounted
    for). ``annual_discount`` and ``horizon`` default to the ``[value]`` settings the
    portfolio was scored with. ``hazard_ratios`` (offer → each customer's own ratio, a Series
    indexed by customer id) is sent whole to every partition, which aligns it by id.
    """
    settings = value_settings(scored.config)
    discount = settings.annual_discount if annual_discount is None else annual_discount
    months = settings.horizon_months if horizon is None else horizon
    client = scored.scores.client
    parts = [
        client.submit(
            _offer_part,
            hazards,
            snapshot,
            scored.causes,
            list(offers),
            discount,
            months,
            None if uptake_values is None else dict(uptake_values),
            None if hazard_ratios is None else dict(hazard_ratios),
        )
        for hazards, snapshot in zip(scored.hazards, scored.snapshot.parts, strict=True)
    ]
    return PartitionedFrame(client, parts)


@portable
def _offer_part(
    hazards: np.ndarray,
    snapshot: pd.DataFrame,
    causes: tuple[str, ...],
    offers: list[Any],
    annual_discount: float,
    horizon: int,
    uptake_values: dict[str, float] | None,
    hazard_ratios: dict[str, pd.Series] | None = None,
) -> pd.DataFrame:
    return _offer_values(
        hazards,
        causes,
        snapshot["monthly_margin"].to_numpy(dtype=np.float64),
        offers,
        annual_discount=annual_discount,
        horizon=horizon,
        uptake_values=uptake_values,
        customer_ids=snapshot["customer_id"].to_numpy(),
        hazard_ratios=hazard_ratios,
    )


def sample_customers(panel: PartitionedFrame, fraction: float, *, seed: int = 0) -> pd.DataFrame:
    """A random sample of whole customers of a partitioned panel, gathered in this process.

    Customer i is drawn when ``u_i < fraction``, with ``u_i`` a hash of its id and ``seed``
    mapped to [0, 1) (pandas' `hash_array`, SipHash keyed by the seed): the draw does not
    depend on how the panel is partitioned, and the same seed draws the same customers. All
    months of a drawn customer are kept, in panel order, so a model fitted on the sample
    estimates the full panel's hazards (with less precision) without weights. The rows are
    ``fraction`` of the panel on average.

    Raises
    ------
    UsageError
        If ``fraction`` is not in (0, 1] or ``seed`` is not a whole number ≥ 0.
    """
    ok = isinstance(fraction, int | float) and not isinstance(fraction, bool)
    if not ok or not 0.0 < float(fraction) <= 1.0:
        raise UsageError(f"fraction was {fraction!r} but is expected to be in (0, 1]")
    if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
        raise UsageError(f"seed was {seed!r} but is expected to be a whole number >= 0")
    client = panel.client
    parts = [client.submit(_sample_part, p, float(fraction), seed) for p in panel.parts]
    sample = concat_frames(client.gather(parts))
    log.info("sampled %d panel rows (fraction %.3g of customers)", len(sample), fraction)
    return sample


def _sample_part(panel: pd.DataFrame, fraction: float, seed: int) -> pd.DataFrame:
    ids = panel["customer_id"].astype(str).to_numpy(dtype=object)
    key = f"{seed:016d}"[-16:]
    hashed = pd.util.hash_array(ids, hash_key=key, categorize=True)
    u = (hashed >> np.uint64(11)).astype(np.float64) / float(2**53)
    return panel[u < fraction].reset_index(drop=True)
