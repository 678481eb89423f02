"""Monthly cause-specific hazards as the value and forecast steps take them.

Either the DataFrame of `HazardModel.predict_hazard` (index ``customer_id``, ``month_ahead``;
one column per cause) or a plain array ``(n, T, K)`` with the cause names beside it. Causes
whose name starts with ``uptake_`` are product uptakes; every other cause is terminal. A model's
hazards are valid already (`lifecycle.models._competing.valid_hazards`); hazards given by hand
are checked, not repaired. The uptake incidence is the models' own `uptake_incidence`.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from .._layout import UPTAKE_PREFIX
from ..errors import UsageError
from ..models import uptake_incidence

__all__ = ["HazardInput", "read_hazards", "uptake_incidence"]

_TOLERANCE = 1e-9


@dataclass(frozen=True)
class HazardInput:
    """Hazards checked and split into terminal causes and uptakes.

    Attributes
    ----------
    array
        ``(n, T, K)`` float64, causes in the order of ``causes``.
    causes
        Cause names, length K.
    customer_ids
        ``(n,)`` ids (the first index level of a DataFrame input; else the ones given, else
        0..n−1).
    """

    array: np.ndarray
    causes: tuple[str, ...]
    customer_ids: np.ndarray

    @property
    def terminal(self) -> list[int]:
        return [j for j, c in enumerate(self.causes) if not c.startswith(UPTAKE_PREFIX)]

    @property
    def uptakes(self) -> list[int]:
        return [j for j, c in enumerate(self.causes) if c.startswith(UPTAKE_PREFIX)]

    @property
    def n(self) -> int:
        return self.array.shape[0]

    @property
    def months(self) -> int:
        return self.array.shape[1]


def read_hazards(
    hazards: np.ndarray | pd.DataFrame,
    causes: Sequence[str] | None = None,
    customer_ids: Sequence[object] | np.ndarray | None = None,
    *,
    what: str = "hazards",
) -> HazardInput:
    """Check hazards and return them as a `HazardInput`.

    Raises `UsageError` when the shape does not match the causes, a value is not a probability,
    or the terminal hazards of a month add up to more than 1.
    """
    if isinstance(hazards, pd.DataFrame):
        array, names, ids = _from_frame(hazards, what)
        if causes is not None and tuple(causes) != names:
            raise UsageError(
                f"{what}: causes were {list(causes)} but the DataFrame's columns are {list(names)}"
            )
        if customer_ids is not None:
            ids = np.asarray(customer_ids)
    else:
        array = np.asarray(hazards, dtype=np.float64)
        if array.ndim != 3:
            raise UsageError(
                f"{what} must have shape (customers, months, causes); got shape {array.shape}"
            )
        if causes is None:
            raise UsageError(f"{what}: an array needs its cause names (causes=...)")
        names = tuple(str(c) for c in causes)
        if len(names) != array.shape[2]:
            raise UsageError(
                f"{what} has {array.shape[2]} causes on its last axis but {len(names)} names "
                f"were given: {list(names)}"
            )
        ids = np.arange(array.shape[0]) if customer_ids is None else np.asarray(customer_ids)
    if len(set(names)) != len(names):
        raise UsageError(f"{what}: cause names repeat: {list(names)}")
    if ids.shape != (array.shape[0],):
        raise UsageError(
            f"{what}: {ids.size} customer ids were given for {array.shape[0]} customers"
        )
    if array.shape[1] < 1:
        raise UsageError(f"{what} covers no month")
    out = HazardInput(array=array, causes=names, customer_ids=ids)
    _check_values(out, what)
    return out


def _from_frame(frame: pd.DataFrame, what: str) -> tuple[np.ndarray, tuple[str, ...], np.ndarray]:
    index = frame.index
    if not isinstance(index, pd.MultiIndex) or index.nlevels != 2:
        raise UsageError(
            f"{what}: a DataFrame must be indexed by (customer_id, month_ahead) as "
            "predict_hazard returns it"
        )
    ahead = index.get_level_values(1).to_numpy()
    months = int(ahead.max()) if len(ahead) else 0
    n = len(frame) // months if months else 0
    if n * months != len(frame) or not np.array_equal(ahead, np.tile(np.arange(1, months + 1), n)):
        raise UsageError(
            f"{what}: every customer needs the months 1..{months} in order "
            "(customer-major rows, as predict_hazard returns them)"
        )
    ids = index.get_level_values(0).to_numpy()[::months]
    array = frame.to_numpy(dtype=np.float64).reshape(n, months, frame.shape[1])
    return array, tuple(str(c) for c in frame.columns), ids


def _check_values(h: HazardInput, what: str) -> None:
    array = h.array
    lo, hi = (array.min(), array.max()) if array.size else (0.0, 0.0)
    if not (lo >= 0.0 and hi <= 1.0):  # also when NaN, which min and max pass on
        bad = ~np.isfinite(array) | (array < 0.0) | (array > 1.0)
        i, t, k = np.argwhere(bad)[0]
        raise UsageError(
            f"{what}: {int(bad.sum())} value(s) are not probabilities in [0, 1], e.g. "
            f"{array[i, t, k]!r} for customer {h.customer_ids[i]!r}, month {t + 1}, cause "
            f"{h.causes[k]!r}"
        )
    total = np.zeros(array.shape[:2])
    for k in h.terminal:
        total += array[..., k]
    over = total > 1.0 + _TOLERANCE
    if over.any():
        i, t = np.argwhere(over)[0]
        raise UsageError(
            f"{what}: the terminal hazards of a month add up to more than 1 in {int(over.sum())} "
            f"customer-month(s), e.g. {total[i, t]:.6g} for customer {h.customer_ids[i]!r}, "
            f"month {t + 1}"
        )
    for j in h.uptakes:
        with_uptake = total + array[..., j]
        over = with_uptake > 1.0 + _TOLERANCE
        if over.any():
            i, t = np.argwhere(over)[0]
            raise UsageError(
                f"{what}: {h.causes[j]!r} plus the terminal hazards exceed 1 in "
                f"{int(over.sum())} customer-month(s), e.g. {with_uptake[i, t]:.6g} for customer "
                f"{h.customer_ids[i]!r}, month {t + 1}"
            )
