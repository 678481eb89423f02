"""The reference family: monthly hazard per cause by tenure month, no covariates."""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..errors import UsageError
from ..models import HazardModel
from ..panel import life_table


class TenureLifeTable(HazardModel):
    """Life-table hazards by tenure: the baseline every model must beat in a backtest.

    For each cause k and tenure month t (the panel rows with ``tenure_stop = t``; for an
    uptake only the rows not yet holding the product), the hazard is the share of rows at risk
    with the event, ``h_k(t) = d_k(t) / n(t)`` (`lifecycle.panel.life_table`). A tenure month
    inside the fitted range with no row at risk takes the hazard of the nearest earlier month
    (the first months, of the nearest later one). Past the longest fitted tenure the hazard is
    the mean of the last ``tail_months`` fitted hazards. No covariate is used: every customer
    of one tenure gets the same prediction.

    Parameters
    ----------
    tail_months
        How many of the last fitted tenure months are averaged for longer tenures.

    Attributes
    ----------
    hazard_ : numpy.ndarray
        ``(T + 1, K)``: row t is the hazard of tenure month t (row 0 repeats row 1), columns in
        ``causes_`` order.
    tail_hazard_ : numpy.ndarray
        ``(K,)``: the hazard used past tenure T.
    """

    def __init__(self, *, tail_months: int = 12) -> None:
        self.tail_months = tail_months

    def _fit(self, panel: pd.DataFrame) -> None:
        if not isinstance(self.tail_months, int | np.integer) or self.tail_months < 1:
            raise UsageError(f"tail_months was {self.tail_months!r} but must be a whole number ≥ 1")
        if len(panel) == 0:
            raise UsageError("the panel has no rows; fit needs at least one customer-month")
        longest = int(panel["tenure_stop"].max())
        hazard = np.zeros((longest + 1, len(self.causes_)))
        tail = np.zeros(len(self.causes_))
        for j, cause in enumerate(self.causes_):
            table = life_table(panel, cause)
            if table.empty:
                continue
            column = np.full(longest + 1, np.nan)
            column[table.index.to_numpy()] = table["hazard"].to_numpy()
            filled = pd.Series(column[1:]).ffill().bfill().to_numpy()
            hazard[1:, j] = filled
            hazard[0, j] = filled[0]
            tail[j] = table["hazard"].to_numpy()[-int(self.tail_months) :].mean()
        self.hazard_ = hazard
        self.tail_hazard_ = tail

    def _hazard_array(self, future: pd.DataFrame, n: int, horizon: int) -> np.ndarray:
        tenure = future["tenure_stop"].to_numpy(dtype=np.int64)
        inside = (tenure >= 0) & (tenure < self.hazard_.shape[0])
        out = np.where(
            inside[:, None], self.hazard_[np.where(inside, tenure, 0)], self.tail_hazard_[None, :]
        )
        return out.reshape(n, horizon, len(self.causes_))
