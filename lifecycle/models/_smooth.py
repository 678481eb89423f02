"""A monthly baseline hazard that does not spike, or drop to 0, where few customers are at risk.

Raw monthly estimates (Breslow's ``d(t) / Σ_{at risk} φ``, or the life table's ``d(t) / n(t)``)
are exact where many events fall in a tenure month, and noise where few do: a month with 2
events among 113 customers reads as a 1.8 % hazard, its neighbours with none as 0. Both the Cox
family and the tenure life table smooth them the same way here.

The rule: a kernel estimate of the hazard (Ramlau-Hansen 1983, Ann. Statist. 11, 453–466)
with a nearest-neighbour bandwidth (the window widens until it holds enough events; Gefeller &
Dette 1992, Commun. Statist. Theory Methods 21, 3185–3200 — from memory). For tenure month t,
with events ``d(s)`` and exposure ``E(s)`` (customers at risk, or their summed relative hazard
``Σ φ``) in month s, let ``w(t)`` be the smallest half-width ≥ 0 for which the months
``t − w … t + w`` hold at least ``min_events`` events (the whole range when they never do), and

    rate(t) = Σ_s K((s − t)/(w(t) + 1)) d(s) / Σ_s K((s − t)/(w(t) + 1)) E(s),
    K(u) = 1 − u²  (Epanechnikov, |u| < 1).

Where a month alone holds ``min_events`` events, ``w = 0`` and the rate is the raw one; where
data are thin, neighbouring months lend their events and exposure, so a month with customers
at risk gets a positive hazard as soon as the cause occurred at all. ``min_events = 0`` gives
the raw estimates. The ratio of kernel sums (not a kernel sum of raw rates) weights each month
by its exposure, and at the edges of the tenure range the kernel is truncated, which the
ratio renormalises.

Beyond the last tenure month fitted, the rate is held at ``Σ d / Σ E`` over the trailing
months, going back from the last month until they span at least ``tail_months`` months and
hold at least ``min_events`` events (or the whole range).
"""

from __future__ import annotations

import numpy as np

__all__ = ["smoothed_rates"]


def smoothed_rates(
    events: np.ndarray, exposure: np.ndarray, *, min_events: float, tail_months: int = 12
) -> tuple[np.ndarray, float]:
    """Monthly rates smoothed over tenure, and the rate held beyond the last month.

    Parameters
    ----------
    events, exposure
        ``(M,)`` events and exposure of tenure months 0..M−1 (see the module docstring).
    min_events
        Events each month's kernel window must hold; 0 returns the raw ``d / E``.
    tail_months
        Months at least in the trailing window of the rate beyond month M − 1.

    Returns
    -------
    rates
        ``(M,)``; 0 where the window has no exposure.
    tail
        The rate beyond month M − 1.
    """
    d = np.asarray(events, dtype=np.float64)
    e = np.asarray(exposure, dtype=np.float64)
    m = d.size
    if m == 0:
        return np.zeros(0), 0.0
    cum = np.concatenate([[0.0], np.cumsum(d)])
    rates = np.zeros(m)
    for t in range(m):
        w = _half_width(cum, t, min_events)
        lo, hi = max(t - w, 0), min(t + w, m - 1)
        u = (np.arange(lo, hi + 1) - t) / (w + 1.0)
        k = 1.0 - u * u
        below = k @ e[lo : hi + 1]
        rates[t] = (k @ d[lo : hi + 1]) / below if below > 0 else 0.0
    return rates, _tail(d, e, min_events, tail_months)


def _half_width(cum: np.ndarray, t: int, min_events: float) -> int:
    """Smallest w ≥ 0 whose window t − w … t + w holds ``min_events`` events (``cum`` is
    the prefix sum of the events); the whole range when none does."""
    m = cum.size - 1
    if min_events <= 0:
        return 0
    widest = max(t, m - 1 - t)
    lo, hi = 0, widest
    if cum[m] - cum[0] < min_events:
        return widest
    while lo < hi:  # events in the window grow with w: bisect
        mid = (lo + hi) // 2
        if cum[min(t + mid, m - 1) + 1] - cum[max(t - mid, 0)] >= min_events:
            hi = mid
        else:
            lo = mid + 1
    return lo


def _tail(d: np.ndarray, e: np.ndarray, min_events: float, tail_months: int) -> float:
    m = d.size
    events, exposure = np.cumsum(d[::-1]), np.cumsum(e[::-1])
    enough = (np.arange(1, m + 1) >= tail_months) & (events >= min_events)
    last = int(np.argmax(enough)) if enough.any() else m - 1
    return float(events[last] / exposure[last]) if exposure[last] > 0 else 0.0
