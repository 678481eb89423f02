"""Life tables from a panel: the discrete-time hazard of each tenure month."""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

from .._layout import TERMINAL_CAUSES, panel_layout
from ..errors import InputError


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

    Raises
    ------
    InputError
        When the rows do not follow the panel contract (one row per customer per month,
        ``tenure_stop = tenure_start + 1``): one row per customer with its whole duration, say,
        would otherwise give a wrong curve silently.

    Returns
    -------
    pandas.DataFrame
        Indexed by ``tenure`` (the month ``tenure_stop``): ``at_risk``, ``events``, ``hazard``,
        ``survival``, ``survival_lower``, ``survival_upper``.
    """
    _check_panel_rows(panel)
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


_FIX = (
    "life_table needs the customer-month panel (build_panel): one row per customer per "
    "active month with tenure_stop = tenure_start + 1; for one row per customer with a "
    "duration, expand it into months first (or use a Kaplan–Meier estimator)"
)


def _check_panel_rows(panel: pd.DataFrame) -> None:
    """Refuse rows that do not follow the panel contract (see DEVELOPERS.md)."""
    missing = [c for c in ("customer_id", "tenure_start", "tenure_stop") if c not in panel]
    if missing:
        raise InputError(
            table="panel",
            column=missing[0],
            problem=f"column(s) {missing} are missing, so these rows are not a panel",
            fix=_FIX,
        )
    start = pd.to_numeric(panel["tenure_start"], errors="coerce").to_numpy(dtype=np.float64)
    stop = pd.to_numeric(panel["tenure_stop"], errors="coerce").to_numpy(dtype=np.float64)
    bad = ~(stop - start == 1.0) | (start < 0)
    if bad.any():
        widths = np.unique((stop - start)[bad & np.isfinite(stop - start)])[:3]
        raise InputError(
            table="panel",
            column="tenure_stop",
            problem="rows span other than one month (tenure_stop - tenure_start was "
            f"{', '.join(f'{w:g}' for w in widths) or 'missing'}; 1 is allowed, from "
            "tenure_start >= 0)",
            count=int(bad.sum()),
            examples=panel["customer_id"].to_numpy()[bad][:5],
            fix=_FIX,
        )
    column = panel["customer_id"]
    ids = column.cat.codes.to_numpy() if isinstance(column.dtype, pd.CategoricalDtype) else column
    ids = np.asarray(ids)
    same = ids[1:] == ids[:-1]
    if not (same & (start[1:] <= start[:-1])).any():
        return  # each customer's rows contiguous with tenure increasing: no repeats
    twice = panel.duplicated(subset=["customer_id", "tenure_start"], keep=False).to_numpy()
    if twice.any():
        raise InputError(
            table="panel",
            column="tenure_start",
            problem="a customer has more than one row for the same tenure month",
            count=int(twice.sum()),
            examples=pd.unique(panel["customer_id"].to_numpy()[twice])[:5],
            fix=_FIX,
        )
