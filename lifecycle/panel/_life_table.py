"""Life tables from a panel: the discrete-time hazard of each tenure month."""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

from ._layout import TERMINAL_CAUSES, panel_layout


def life_table(
    panel: pd.DataFrame, cause: str | tuple[str, ...] = TERMINAL_CAUSES, *, level: float = 0.95
) -> pd.DataFrame:
    """Hazard and survival by tenure month, from the rows at risk in each month.

    For tenure month ``t`` (rows with ``tenure_stop = t``), ``at_risk`` counts the rows (a
    customer who entered late counts from its entry on; one censored in month ``t`` counts in
    it), ``events`` counts rows with the cause(s), the hazard is ``h(t) = events / at_risk``
    and the survival is the product-limit ``S(t) = Π_{s ≤ t} (1 − h(s))``, which is the
    Kaplan–Meier estimate with left truncation at the monthly grid. The interval is Greenwood's
    variance on the log–log scale (Kalbfleisch & Prentice 2002, *The Statistical Analysis of
    Failure Time Data*, 2nd ed., §1.4):
    ``Var(log S) = Σ d / (n (n − d))``, ``S^{exp(± z σ / log S)}``.

    Parameters
    ----------
    panel
        A panel (see `build_panel`). For an uptake cause only rows at risk of it are used.
    cause
        One cause column, or several whose union is the event (default: any terminal exit).
    level
        Confidence level of the interval.

    Returns
    -------
    pandas.DataFrame
        Indexed by ``tenure`` (the month ``tenure_stop``): ``at_risk``, ``events``, ``hazard``,
        ``survival``, ``survival_lower``, ``survival_upper``.
    """
    causes = (cause,) if isinstance(cause, str) else tuple(cause)
    layout = panel_layout(panel)
    at_risk = np.ones(len(panel), dtype=bool)
    for name in causes:
        column = layout.at_risk_column(name)
        if column is not None:
            at_risk &= panel[column].to_numpy() == 0
    event = np.zeros(len(panel), dtype=bool)
    for name in causes:
        event |= panel[name].to_numpy() == 1
    tenure = panel["tenure_stop"].to_numpy()[at_risk].astype(np.int64)
    n = np.bincount(tenure)
    d = np.bincount(tenure, weights=event[at_risk].astype(np.float64), minlength=n.size)
    keep = n > 0
    t = np.flatnonzero(keep)
    n, d = n[keep].astype(np.float64), d[keep]
    hazard = d / n
    survival = np.cumprod(1.0 - hazard)
    with np.errstate(divide="ignore", invalid="ignore"):
        greenwood = np.cumsum(np.where(n > d, d / (n * (n - d)), np.inf))
        sigma = np.sqrt(greenwood) / np.abs(np.log(survival))
        z = stats.norm.ppf(0.5 + level / 2.0)
        lower = survival ** np.exp(z * sigma)
        upper = survival ** np.exp(-z * sigma)
    # Before the first event the interval is the point itself.
    none_yet = np.cumsum(d) == 0
    lower = np.where(none_yet, 1.0, np.nan_to_num(lower, nan=0.0))
    upper = np.where(none_yet, 1.0, np.nan_to_num(upper, nan=0.0))
    return pd.DataFrame(
        {
            "at_risk": n.astype(np.int64),
            "events": d.astype(np.int64),
            "hazard": hazard,
            "survival": survival,
            "survival_lower": lower,
            "survival_upper": upper,
        },
        index=pd.Index(t, name="tenure"),
    )
