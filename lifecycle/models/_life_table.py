"""The reference family: monthly hazard per cause by tenure month, no covariates."""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..errors import UsageError
from ..panel import life_table
from ._base import HazardModel
from ._smooth import smoothed_rates


class TenureLifeTable(HazardModel):
    """Life-table hazards by tenure: the baseline every model must beat in a backtest.

    For each cause k and tenure month t (the panel rows with ``tenure_stop = t``; for an uptake
    only the rows not yet holding the product), the raw hazard is the share of rows at risk with
    the event, ``d_k(t) / n(t)`` (`lifecycle.panel.life_table`). It is smoothed over tenure as
    the Cox baseline is (`lifecycle.models.smoothed_rates`): a kernel estimate whose window
    widens until it holds ``min_events`` events, ``h_k(t) = Σ K d_k / Σ K n``, so that thinly
    populated tenures neither spike nor drop to 0, and a month holding ``min_events`` events
    alone keeps its raw hazard; a tenure month with no row at risk borrows from its neighbours
    the same way. Past the longest fitted tenure the hazard is ``Σ d / Σ n`` over the trailing
    months spanning at least ``tail_months`` months and ``min_events`` events. No covariate is
    used: every customer of one tenure gets the same prediction.

    Parameters
    ----------
    tail_months
        Months at least in the trailing window of the hazard used for longer tenures.
    min_events
        Events each tenure month's smoothing window holds at least; 0 keeps the raw life
        table (and the hazard of the nearest month with rows at risk where none is).

    Attributes
    ----------
    hazard_ : numpy.ndarray
        ``(T + 1, K)``: row t is the hazard of tenure month t (row 0 repeats row 1), columns in
        ``causes_`` order.
    tail_hazard_ : numpy.ndarray
        ``(K,)``: the hazard used past tenure T.
    """

    def __init__(self, *, tail_months: int = 12, min_events: float = 20) -> None:
        self.tail_months = tail_months
        self.min_events = min_events

    def _fit(self, panel: pd.DataFrame) -> None:
        if not isinstance(self.tail_months, int | np.integer) or self.tail_months < 1:
            raise UsageError(f"tail_months was {self.tail_months!r} but must be a whole number ≥ 1")
        if isinstance(self.min_events, bool) or not self.min_events >= 0:
            raise UsageError(f"min_events was {self.min_events!r} but must be a number ≥ 0")
        if len(panel) == 0:
            raise UsageError("the panel has no rows; fit needs at least one customer-month")
        longest = int(panel["tenure_stop"].max())
        hazard = np.zeros((longest + 1, len(self.causes_)))
        tail = np.zeros(len(self.causes_))
        for j, cause in enumerate(self.causes_):
            table = life_table(panel, cause)
            if table.empty:
                continue
            events, at_risk = np.zeros(longest + 1), np.zeros(longest + 1)
            events[table.index.to_numpy()] = table["events"].to_numpy()
            at_risk[table.index.to_numpy()] = table["at_risk"].to_numpy()
            rates, tail[j] = smoothed_rates(
                events[1:], at_risk[1:], min_events=self.min_events, tail_months=self.tail_months
            )
            if self.min_events <= 0:  # raw: a month nobody was at risk in takes its neighbour's
                rates = pd.Series(np.where(at_risk[1:] > 0, rates, np.nan)).ffill().bfill()
            hazard[1:, j] = np.asarray(rates)
            hazard[0, j] = hazard[1, j]
        self.hazard_ = hazard
        self.tail_hazard_ = tail

    def _hazard_array(self, future: pd.DataFrame, n: int, horizon: int) -> np.ndarray:
        tenure = future["tenure_stop"].to_numpy(dtype=np.int64)
        inside = (tenure >= 0) & (tenure < self.hazard_.shape[0])
        out = np.where(
            inside[:, None], self.hazard_[np.where(inside, tenure, 0)], self.tail_hazard_[None, :]
        )
        return out.reshape(n, horizon, len(self.causes_))
