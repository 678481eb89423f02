"""Scores: survival and cumulative incidence per customer at a few horizons."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd

from ..errors import UsageError
from ._base import HazardModel, incidence_from_hazards, survival_from_hazards


def score_customers(
    model: HazardModel,
    snapshot: pd.DataFrame,
    horizons: Sequence[int] = (3, 6, 12),
    *,
    hazards: np.ndarray | None = None,
) -> pd.DataFrame:
    """One row per customer of the snapshot: survival and cumulative incidence at each horizon.

    Columns: ``customer_id``; ``survival_<h>m`` (probability of still being a customer after
    h months); ``cif_<cause>_<h>m`` for every cause (probability of that cause within h months,
    competing causes accounted for; for an uptake, taking the product up before leaving).
    ``hazards`` (``model.hazard_array(snapshot, T)`` with T ≥ the longest horizon) saves
    predicting them again when the caller has them.
    """
    horizons = sorted({int(h) for h in horizons})
    if not horizons or horizons[0] < 1:
        raise UsageError(f"horizons were {list(horizons)} but must be whole months ≥ 1")
    longest = horizons[-1]
    if hazards is None:
        hazards = model.hazard_array(snapshot, longest)
    if hazards.shape[1] < longest:
        raise UsageError(f"hazards cover {hazards.shape[1]} months; {longest} are needed")
    k = len(model.terminal_causes_)
    survival = survival_from_hazards(hazards[:, :longest], k)
    cif = incidence_from_hazards(hazards[:, :longest], k)
    out = {"customer_id": snapshot["customer_id"].to_numpy()}
    for h in horizons:
        out[f"survival_{h}m"] = survival[:, h - 1]
    for j, cause in enumerate(model.causes_):
        for h in horizons:
            out[f"cif_{cause}_{h}m"] = cif[:, h - 1, j]
    return pd.DataFrame(out).astype({c: np.float64 for c in out if c != "customer_id"})
