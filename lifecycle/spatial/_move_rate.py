"""The local move rate: move-outs per active customer-month in each area, trailing and shrunk."""

from __future__ import annotations

import numpy as np

from ._shrinkage import gamma_poisson_rates

__all__ = ["local_move_rates"]


def _trailing_sums(counts: np.ndarray, window: int, n_months: int) -> np.ndarray:
    """Window sums per row: month k (offset from the first wanted month) covers the offsets
    k .. k + W − 1 of ``counts``."""
    cum = np.zeros((counts.shape[0], counts.shape[1] + 1), dtype=np.int64)
    np.cumsum(counts, axis=1, out=cum[:, 1:])
    return cum[:, window : window + n_months] - cum[:, :n_months]


def local_move_rates(
    area: np.ndarray,
    start: np.ndarray,
    end: np.ndarray,
    moved_out: np.ndarray,
    *,
    n_areas: int,
    first_month: int,
    last_month: int,
    window: int = 12,
) -> np.ndarray:
    """Shrunk trailing move-out rate of each area for each month, as known a month before.

    For month m and area a, with W = ``window``::

        y_a(m) = #{customers j in a: j moved out, end_j ∈ [m−W, m−1]}
        n_a(m) = Σ_{j in a} #([start_j, end_j] ∩ [m−W, m−1])      (active customer-months)

    and the rate is the empirical Bayes posterior mean of `gamma_poisson_rates` applied across
    areas to ``(y_a(m), n_a(m))``, month by month: the gamma–Poisson model of Clayton & Kaldor
    (1987) with the moment estimates of Marshall (1991), which pulls an area's raw rate
    y_a/n_a toward the overall rate Σy/Σn the more, the fewer customer-months the area has.
    Only months up to m−1 enter, so the value for m is known at the end of m−1. A customer
    counts as active in its end month (as in the panel). Units: move-outs per customer-month.

    Parameters
    ----------
    area
        Area code (0..n_areas−1) of each customer.
    start, end
        Month indices; ``end`` is NaN while the customer is active.
    moved_out
        True where the customer's end reason is ``move_out``.
    n_areas
        Number of areas.
    first_month, last_month
        The months (indices, inclusive) for which rates are wanted.
    window
        W, the trailing window in months (≥ 1).

    Returns
    -------
    numpy.ndarray
        float64 of shape ``(n_areas, last_month − first_month + 1)``; a month whose window has
        no customer-months in any area is NaN throughout.
    """
    if window < 1:
        raise ValueError(f"window was {window} but is expected to be at least 1")
    n_months = last_month - first_month + 1
    t0 = first_month - window  # first month any window looks at
    length = n_months + window - 1  # months t0 .. last_month - 1
    area = np.asarray(area, dtype=np.int64)
    start = np.asarray(start, dtype=np.int64)
    end_f = np.asarray(end, dtype=np.float64)
    open_end = np.isnan(end_f)
    end = np.where(open_end, np.iinfo(np.int64).max // 4, np.nan_to_num(end_f)).astype(np.int64)

    # active customers per area and month, by a difference array over [start, end]
    lo = np.clip(start - t0, 0, length)
    hi = np.clip(end - t0 + 1, 0, length)
    seen = lo < hi
    diff = np.bincount(area[seen] * (length + 1) + lo[seen], minlength=n_areas * (length + 1))
    diff -= np.bincount(area[seen] * (length + 1) + hi[seen], minlength=n_areas * (length + 1))
    active = np.cumsum(diff.reshape(n_areas, length + 1)[:, :length], axis=1)

    moves = np.asarray(moved_out, dtype=bool) & ~open_end & (end >= t0) & (end < t0 + length)
    events = np.bincount(
        area[moves] * length + (end[moves] - t0), minlength=n_areas * length
    ).reshape(n_areas, length)

    y = _trailing_sums(events, window, n_months)
    n = _trailing_sums(active, window, n_months)
    rates = np.empty((n_areas, n_months), dtype=np.float64)
    for k in range(n_months):
        rates[:, k] = gamma_poisson_rates(y[:, k], n[:, k])
    return rates
