"""Refusing panels that no model can learn from: empty, one customer, too few events.

A cause-specific hazard estimated from no events is 0 whatever the data say, and one from
two or three events is noise; a panel in which nobody leaves gives a survival of 1 for
everyone. Such a fit would run to the end and look like a result, so the steps that fit
(`lifecycle fit`, `lifecycle backtest`, `lifecycle run`) call `check_fittable` first.

The minimum is the ``[models]`` setting ``min_events``::

    [models]
    min_events = 5      # events of each cause a fit needs in its window; 0 accepts any number
                        # (a cause without events then has a hazard of 0, with a warning)
"""

from __future__ import annotations

import logging

import numpy as np
import pandas as pd

from ..config import Config
from ..errors import InputError
from ..panel import panel_layout

log = logging.getLogger(__name__)

MIN_EVENTS = 5
"""Default of ``[models] min_events``: fewer events than this of any cause in the fitting window
refuse the fit (common practice: a handful of events per estimated effect is the least that
gives a hazard more than noise)."""

MIN_CUSTOMERS = 2


def min_events_setting(config: Config | None) -> int:
    """``[models] min_events`` (default `MIN_EVENTS`; checked by the settings schema)."""
    from ..config import setting

    value = setting(config, "models.min_events")
    return MIN_EVENTS if value is None else int(value)


def event_counts(panel: pd.DataFrame) -> dict[str, int]:
    """Events of each cause in the panel (terminal causes, then uptakes)."""
    layout = panel_layout(panel)
    causes = (*layout.terminal_causes, *layout.uptake_causes)
    return {c: int(np.count_nonzero(panel[c].to_numpy() == 1)) for c in causes}


def check_fittable(panel: pd.DataFrame, *, min_events: int = MIN_EVENTS, where: str = "") -> None:
    """Raise `InputError` unless ``panel`` has rows, at least two customers, at least one
    terminal event, and at least ``min_events`` events of every cause.

    Parameters
    ----------
    panel
        The panel a model is about to be fitted on.
    min_events
        The least number of events of each cause (``[models] min_events``); with 0 a cause
        without events is only logged.
    where
        Prefix naming the fit, e.g. ``"backtest cutoff 2025-10: "``.
    """
    layout = panel_layout(panel)
    if len(panel) == 0:
        raise InputError(
            table="panel", column=None,
            problem=f"{where}the panel is empty: no customer is active in the fitting window",
            fix="Choose a later --as-of, or a longer [panel] window_months",
        )  # fmt: skip
    window = f"{panel['month'].min()} to {panel['month'].max()}"
    ids = pd.unique(panel["customer_id"].to_numpy())
    if ids.size < MIN_CUSTOMERS:
        raise InputError(
            table="panel", column="customer_id",
            problem=f"{where}only {ids.size} customer is active in the fitting window {window}; "
            f"a fit needs at least {MIN_CUSTOMERS}",
            count=len(panel), examples=ids,
            fix="Check the customers table, or choose a later --as-of",
        )  # fmt: skip
    counts = event_counts(panel)
    terminal = {c: counts[c] for c in layout.terminal_causes}
    if sum(terminal.values()) == 0:
        raise InputError(
            table="panel", column=None,
            problem=f"{where}every customer is censored: no {', '.join(terminal)} event in the "
            f"fitting window {window} ({ids.size} customers, {len(panel)} customer-months), so "
            "every hazard of leaving would be 0 and survival 1 for everyone",
            fix="Check end_month and end_reason in the customers table (and [reasons])",
        )  # fmt: skip
    few = {c: n for c, n in counts.items() if n < min_events}
    if few:
        listed = ", ".join(f"{c} {n}" for c, n in few.items())
        raise InputError(
            table="panel", column=next(iter(few)),
            problem=f"{where}too few events in the fitting window {window}: {listed} "
            f"(a fit needs at least {min_events} events of each cause)",
            fix="Give a longer history ([panel] window_months, an earlier start of the data) "
            "or a later --as-of; or set [models] min_events = 0 to fit anyway (a cause "
            "without events then has a hazard of 0)",
        )  # fmt: skip
    for cause, n in counts.items():
        if n == 0:
            log.warning(
                "%s%s has no events in the fitting window %s; its hazard is taken as 0 "
                "([models] min_events = 0)", where, cause, window,
            )  # fmt: skip
