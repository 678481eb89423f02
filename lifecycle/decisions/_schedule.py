"""Contacts into weeks: most urgent first, within each offer's weekly capacity."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from ..errors import UsageError

__all__ = ["schedule_weeks"]


def schedule_weeks(
    offer: np.ndarray,
    urgency: np.ndarray,
    weekly_capacity: Sequence[int | None],
    weeks: int,
    *,
    tiebreak: np.ndarray | None = None,
) -> np.ndarray:
    """The week (1..``weeks``) of each planned contact.

    Within each offer, contacts are ranked by ``urgency`` (highest first; a missing urgency
    comes last), then by ``tiebreak`` (highest first, e.g. the expected value), then by
    position; the contact of rank r (0-based) goes to week ``r // weekly_capacity + 1``, so
    the most urgent customers are called first and no week holds more than the capacity. An
    offer without a weekly limit (``None``) has all its contacts in week 1.

    Parameters
    ----------
    offer
        ``(k,)`` offer index of each planned contact.
    urgency
        ``(k,)`` the near-term risk of the offer's target cause (e.g. its 3-month cumulative
        incidence).
    weekly_capacity
        Per offer index: contacts per week, or ``None`` for no limit.
    weeks
        Weeks in the period.

    Raises
    ------
    UsageError
        When an offer has more contacts than ``weekly_capacity × weeks``.
    """
    offer = np.asarray(offer, dtype=np.int64)
    urgency = np.asarray(urgency, dtype=float)
    if urgency.shape != offer.shape:
        raise UsageError(f"urgency has shape {urgency.shape} but offers {offer.shape}")
    tiebreak = np.zeros(len(offer)) if tiebreak is None else np.asarray(tiebreak, dtype=float)
    week = np.zeros(len(offer), dtype=np.int64)
    # lexsort: the last key is the primary one; NaN urgency sorts last through -inf
    order = np.lexsort(
        (
            np.arange(len(offer)),
            -np.nan_to_num(tiebreak, nan=-np.inf),
            -np.nan_to_num(urgency, nan=-np.inf),
            offer,
        )
    )
    for o in np.unique(offer):
        at = order[offer[order] == o]
        limit = weekly_capacity[o]
        if limit is None:
            week[at] = 1
            continue
        if limit < 1 or len(at) > limit * weeks:
            raise UsageError(
                f"offer #{o} has {len(at)} contacts but room for {limit} a week × {weeks} weeks"
            )
        week[at] = np.arange(len(at)) // limit + 1
    return week
