"""Lifetime value: the discounted margin a customer is expected to bring while still a customer.

Settings in ``lifecycle.toml`` (all optional)::

    [value]
    annual_discount = 0.08     # yearly discount rate a, >= 0 and < 1; the monthly rate is
                               # d = (1 + a)^(1/12) − 1 (compounding: 12 months of d make a)
    horizon_months = 36        # months of margin counted, whole number >= 1
    currency = "EUR"           # the currency of monthly_margin and the offers' costs and
                               # values, named in the report and key figures (default "":
                               # amounts are in the unit of monthly_margin, unnamed)

Timing: the margin of month t is received at the end of month t, and only if the customer is
still a customer then, so it is weighted by S(t) and discounted by (1 + d)^−t, t = 1..H. This is
the convention of the closed form of Gupta & Lehmann (2003), "Customers as assets", Journal of
Interactive Marketing 17(1), 9–24: with a constant retention r per period and rate i,
Σ_{t≥1} m·r^t·(1 + i)^−t = m·r / (1 + i − r).
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..config import Config, section
from ..errors import UsageError

DEFAULT_ANNUAL_DISCOUNT = 0.08
DEFAULT_HORIZON_MONTHS = 36


@dataclass(frozen=True)
class ValueSettings:
    """The ``[value]`` section: ``annual_discount``, ``horizon_months``, ``currency``, and
    whether to learn each customer's own offer effects (``customer_effects``) on which
    features (``effect_features``; empty: the automatic choice)."""

    annual_discount: float = DEFAULT_ANNUAL_DISCOUNT
    horizon_months: int = DEFAULT_HORIZON_MONTHS
    currency: str = ""
    customer_effects: bool = True
    effect_features: tuple[str, ...] = ()


def value_settings(config: Config) -> ValueSettings:
    """Read and check the ``[value]`` section of a config (defaults where it is silent)."""
    raw = section(config, "value")  # checked against the settings schema
    currency = raw.get("currency", "")
    annual = raw.get("annual_discount", DEFAULT_ANNUAL_DISCOUNT)
    horizon = raw.get("horizon_months", DEFAULT_HORIZON_MONTHS)
    features = raw.get("effect_features", [])
    return ValueSettings(
        annual_discount=float(annual),
        horizon_months=int(horizon),
        currency=currency,
        customer_effects=bool(raw.get("customer_effects", True)),
        effect_features=(features,) if isinstance(features, str) else tuple(features),
    )


def monthly_discount_rate(annual_discount: float) -> float:
    """The monthly rate equivalent to an annual one: ``d = (1 + a)^(1/12) − 1``.

    Twelve months compounded at d give exactly one year at a: ``(1 + d)^12 = 1 + a``.
    """
    _check_annual(annual_discount, "annual_discount")
    return (1.0 + float(annual_discount)) ** (1.0 / 12.0) - 1.0


def discount_factors(horizon: int, annual_discount: float) -> np.ndarray:
    """``(1 + d)^−t`` for months t = 1..``horizon`` (d the monthly rate), shape ``(horizon,)``."""
    d = monthly_discount_rate(annual_discount)
    return (1.0 + d) ** -np.arange(1, int(horizon) + 1, dtype=np.float64)


def lifetime_value(
    survival: np.ndarray | pd.DataFrame,
    margin: float | np.ndarray | pd.Series | pd.DataFrame,
    *,
    annual_discount: float = DEFAULT_ANNUAL_DISCOUNT,
    horizon: int | None = None,
) -> np.ndarray | pd.Series | float:
    """Expected discounted margin over the next ``horizon`` months, per customer.

    .. math::

        \\mathrm{LTV}_i = \\sum_{t=1}^{H} m_i(t) \\, S_i(t) \\, (1 + d)^{-t},
        \\qquad d = (1 + a)^{1/12} - 1

    where S_i(t) is the probability that customer i is still a customer after month t, m_i(t)
    the margin of month t (received at the end of the month), a the annual discount rate and
    d the monthly rate with the same yearly growth.

    Parameters
    ----------
    survival
        S(1..T): an array ``(n, T)`` (or ``(T,)`` for one customer), or the DataFrame of
        `HazardModel.predict_survival` (index ``customer_id``, columns months 1..T).
    margin
        Monthly margin: one number for everyone, one per customer (``(n,)``), or one per
        customer and month (``(n, T')`` with T' ≥ H; months 1..H are used).
    annual_discount
        Yearly rate a, in [0, 1).
    horizon
        H, the months counted; default all T months of ``survival``.

    Returns
    -------
    numpy.ndarray, pandas.Series or float
        ``(n,)`` values; a Series named ``lifetime_value`` with the survival's index when
        ``survival`` is a DataFrame; a float for a single curve.
    """
    index = survival.index if isinstance(survival, pd.DataFrame) else None
    s = np.asarray(survival, dtype=np.float64)
    single = s.ndim == 1
    if single:
        s = s[None, :]
    if s.ndim != 2 or s.shape[1] < 1:
        raise UsageError(f"survival must have shape (customers, months); got shape {s.shape}")
    h = check_horizon(horizon, s.shape[1], covered="the survival curves")
    bad = ~np.isfinite(s[:, :h]) | (s[:, :h] < 0.0) | (s[:, :h] > 1.0 + 1e-12)
    if bad.any():
        raise UsageError(
            f"survival has {int(bad.sum())} value(s) outside [0, 1], e.g. {s[:, :h][bad][0]!r}"
        )
    m = margin_matrix(margin, s.shape[0], h)
    values = (m * s[:, :h]) @ discount_factors(h, annual_discount)
    if single:
        return float(values[0])
    if index is not None:
        return pd.Series(values, index=index, name="lifetime_value")
    return values


def margin_matrix(
    margin: float | np.ndarray | pd.Series | pd.DataFrame, n: int, horizon: int
) -> np.ndarray:
    """Margins as an ``(n, horizon)`` array (broadcast view for a number or one per customer)."""
    m = np.asarray(margin, dtype=np.float64)
    if m.ndim == 0:
        out = np.broadcast_to(m, (n, horizon))
    elif m.ndim == 1:
        if m.shape[0] != n:
            raise UsageError(f"margin has {m.shape[0]} values but there are {n} customers")
        out = np.broadcast_to(m[:, None], (n, horizon))
    elif m.ndim == 2:
        if m.shape[0] != n or m.shape[1] < horizon:
            raise UsageError(
                f"margin by month has shape {m.shape} but needs ({n}, >= {horizon}): one row "
                "per customer and a column for each month of the horizon"
            )
        out = m[:, :horizon]
    else:
        raise UsageError(f"margin must be a number, (n,) or (n, months); got shape {m.shape}")
    if not np.isfinite(out).all():
        raise UsageError(
            f"margin has {int((~np.isfinite(out)).sum())} missing or infinite value(s)"
        )
    return out


def check_horizon(horizon: int | None, months: int, *, covered: str) -> int:
    """``horizon`` checked against the ``months`` that ``covered`` spans (``None``: all)."""
    if horizon is None:
        return months
    if isinstance(horizon, bool) or not isinstance(horizon, numbers.Integral) or horizon < 1:
        raise UsageError(f"horizon was {horizon!r} but is expected to be a whole number >= 1")
    if horizon > months:
        raise UsageError(
            f"horizon was {horizon} months but {covered} cover only {months}; predict "
            "further ahead or shorten the horizon"
        )
    return int(horizon)


def _check_annual(value: object, what: str) -> None:
    ok = isinstance(value, numbers.Real) and not isinstance(value, bool)
    if not ok or not math.isfinite(float(value)) or not 0.0 <= float(value) < 1.0:
        raise UsageError(
            f"{what} was {value!r} but is expected to be a yearly rate in [0, 1), e.g. 0.08"
        )
