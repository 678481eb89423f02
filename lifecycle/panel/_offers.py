"""Past offers as panel features: months since an offer was received, and its effect window.

For each offer of ``[[offers]]`` (its ``name`` and effect ``months``) that the campaigns table
has ``offered`` rows of, dated before the last month of the rows built, the row of customer i
in month m gets, from the offers received in months ``r ≤ m − 1`` (known at the end of m − 1,
like every feature):

- ``offer_<name>_active`` = 1 when ``1 ≤ m − r* ≤ months``, else 0: month m lies in the
  offer's effect window, months ``r* + 1 … r* + months`` (the window of the offer's hazard ratio,
  as `lifecycle.value.campaign_follow_up` follows it up), with ``r*`` the latest such month;
- ``offer_<name>_months_since`` = ``m − r*`` (float32; NaN when the customer never received
  it).

The flag comes first: when a campaign lies just before the cutoff, "inside the window" and
"ever received" are the same in the training rows, and a model that keeps the first of two
confounded columns (the Cox family) then keeps the one whose future is known.

Held-out customers did not receive the offer and get no feature values from it. With them a
model no longer credits an offer's effect to other features, nor over-predicts the exits of
treated customers. Their future is known, so `offer_schedules` gives their schedule for
`lifecycle.panel._future` (``countup`` and ``upto``).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..config import Config

__all__ = ["offer_features", "offer_schedules", "offer_windows"]

_BIG = np.int64(1) << 32


def offer_windows(config: Config) -> dict[str, int]:
    """Offer name → effect months of every ``[[offers]]`` entry (read and checked by
    `lifecycle.decisions.offers_from_config`)."""
    from ..decisions import offers_from_config

    return {offer.name: offer.months for offer in offers_from_config(config)}


def offer_schedules(config: Config) -> dict[str, str]:
    """The known-future schedule of every offer feature: the months since count up, and the
    window flag is on while they are at most the offer's months."""
    out: dict[str, str] = {}
    for name, months in offer_windows(config).items():
        since = f"offer_{name}_months_since"
        out[since] = "countup"
        out[f"offer_{name}_active"] = f"upto:{since}:{months}"
    return out


def offer_features(
    campaigns: pd.DataFrame,
    customer_position: np.ndarray,
    row_customer: np.ndarray,
    row_month: np.ndarray,
    windows: dict[str, int],
) -> dict[str, np.ndarray]:
    """The offer columns of the panel rows (see the module docstring).

    Parameters
    ----------
    campaigns
        The checked campaigns table (``month`` as month indexes).
    customer_position
        For each campaign row, its customer's position in the customers table (−1: none).
    row_customer, row_month
        Each panel row's customer position and month index.
    windows
        Offer name → effect months (`offer_windows`).
    """
    out: dict[str, np.ndarray] = {}
    if campaigns is None or campaigns.empty:
        return out
    offered = campaigns["arm"].astype(str).to_numpy() == "offered"
    names = campaigns["offer"].astype(str).to_numpy()
    months = campaigns["month"].to_numpy(dtype=np.int64)
    row_key = row_customer.astype(np.int64) * _BIG + (row_month.astype(np.int64) - 1)
    for name, window in windows.items():
        mine = offered & (names == name) & (customer_position >= 0)
        if not mine.any():
            continue
        keys = np.unique(customer_position[mine].astype(np.int64) * _BIG + months[mine])
        at = np.searchsorted(keys, row_key, side="right") - 1
        hit = at >= 0
        hit[hit] = (keys[at[hit]] // _BIG) == row_customer[hit]
        if not hit.any():
            continue  # no row sees a receipt yet (a campaign after these months)
        since = np.full(row_key.size, np.nan, dtype=np.float32)
        since[hit] = row_month[hit] - keys[at[hit]] % _BIG
        # the window flag first: where it and "never received" are confounded in training (a
        # campaign shortly before the cutoff), a model keeps the flag, whose future is known
        out[f"offer_{name}_active"] = ((since >= 1) & (since <= window)).astype(np.float32)
        out[f"offer_{name}_months_since"] = since
    return out
