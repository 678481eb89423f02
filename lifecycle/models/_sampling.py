"""How many non-event rows a family fits on: the share kept by its row sample.

Both the Cox and the boosted family fit each cause on every event row and a random share f of
the other rows, weighted ``1 / f`` (case-base sampling: the weighted likelihood is an unbiased
estimate of the full one). The share is the family's ``sample_fraction`` when it is given;
otherwise, when a cause has more than ``max_rows`` rows at risk, it is chosen so that about
``max_rows`` rows are fitted.
"""

from __future__ import annotations

import numbers

from ..errors import UsageError


def non_event_share(
    sample_fraction: float | None, max_rows: int | None, n_rows: int, n_events: int
) -> float:
    """The share of non-event rows to keep (1.0: every row).

    With ``sample_fraction`` given, that; else with ``n_rows > max_rows``,
    ``max(max_rows − n_events, max_rows / 10) / (n_rows − n_events)`` (at most 1), so that
    about ``max_rows`` rows are fitted and never fewer than a tenth of them without an event.
    """
    if sample_fraction is not None:
        return float(sample_fraction)
    if max_rows is None or n_rows <= max_rows:
        return 1.0
    others = n_rows - n_events
    if others <= 0:
        return 1.0
    return min(1.0, max(max_rows - n_events, max_rows / 10) / others)


def check_max_rows(value: object) -> None:
    """``max_rows`` must be None or a whole number >= 1,000."""
    if value is None:
        return
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < 1_000:
        raise UsageError(
            f"max_rows was {value!r} but is expected to be None or a whole number >= 1000"
        )
