"""Calibration by risk group, and lift and capture of the highest-risk group.

The observed cumulative incidence of a group is the Aalen–Johansen estimate on the monthly grid:
nonparametric hazards ``d_k(t) / n(t)`` fed to `lifecycle.models.survival_and_incidence`, so that
censoring and competing exits are handled as in the models themselves.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

from ..errors import UsageError
from ..models import survival_and_incidence


def calibration_table(
    months: np.ndarray,
    event: np.ndarray,
    predicted: np.ndarray,
    horizon: int,
    *,
    groups: int = 10,
    level: float = 0.95,
) -> pd.DataFrame:
    """Mean predicted against observed cumulative incidence of cause 1 at ``horizon``, by group.

    Customers are ranked by ``predicted`` and cut into ``groups`` groups of equal size (group
    ``groups`` holds the highest predictions). Customers with tied predictions that straddle a
    boundary are shared between the groups in proportion (each gets a fractional weight), so
    the table does not depend on the order of the rows.

    In each group, with weighted counts ``n(t)`` of customers followed into month t
    (``months ≥ t``) and ``d_k(t)`` of exits by cause k in month t, the observed incidence is the
    Aalen–Johansen estimate ``F_1(h) = Σ_{t ≤ h} S(t−1) d_1(t)/n(t)``,
    ``S(t) = Π_{s ≤ t} (1 − Σ_k d_k(s)/n(s))`` (Aalen & Johansen 1978). The interval is
    Wilson's score interval for a binomial proportion (Wilson 1927, JASA 22, 209–212),

        (p + z²/2m ± z √(p(1−p)/m + z²/4m²)) / (1 + z²/m),

    at ``p = F_1(h)`` and ``m`` the (weighted) number of the group's customers whose status at
    h is known (an exit by h, or followed through h). Without censoring before h it is exact
    binomial practice; with censoring it is an approximation.

    Parameters
    ----------
    months
        Whole months: the month of the event, or the last month observed (censored).
    event
        0 censored, 1 the cause calibrated, 2, 3, … competing causes.
    predicted
        Predicted cumulative incidence of cause 1 at ``horizon``.
    horizon
        The month h the incidence is read at (≥ 1).
    groups
        Number of groups (10: deciles).
    level
        Confidence level of the interval.

    Returns
    -------
    pandas.DataFrame
        One row per group: ``group`` (1 = lowest predictions), ``n``, ``mean_predicted``,
        ``observed``, ``lower``, ``upper``, ``events`` (weighted events of cause 1 by h).
    """
    months, event, predicted = _checked(months, event, predicted, horizon)
    _check_groups_and_level(groups, level)
    n_causes = max(int(event.max(initial=0)), 1)
    weight, group, mass = _group_weights(predicted, groups)

    size, predicted_sum, known, exits, events = _group_sums(
        months, event, predicted, horizon, groups, n_causes, weight, group, mass
    )

    # n(t) for t = 1..h: everyone whose months are ≥ t
    at_risk = size[:, None] - np.cumsum(exits, axis=1)[:, :horizon]
    hazards = np.divide(
        events[:, 1:, :], at_risk[..., None], out=np.zeros_like(events[:, 1:, :]),
        where=at_risk[..., None] > 0,
    )  # fmt: skip
    _, incidence = survival_and_incidence(hazards)
    observed = incidence[:, horizon - 1, 0]
    lower, upper = _wilson(observed, known, level)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean_predicted = predicted_sum / size
    return pd.DataFrame(
        {
            "group": np.arange(1, groups + 1),
            "n": size,
            "mean_predicted": mean_predicted,
            "observed": np.where(size > 0, observed, np.nan),
            "lower": lower,
            "upper": upper,
            "events": events[:, :, 0].sum(axis=1),
        }
    )


def _check_groups_and_level(groups: int, level: float) -> None:
    if groups < 1:
        raise UsageError(f"groups was {groups} but must be at least 1")
    if not 0 < level < 1:
        raise UsageError(f"level was {level} but must lie between 0 and 1")


def _group_sums(months, event, predicted, horizon, groups, n_causes, weight, group, mass):
    """Per group (fractional weights included): size, sum of predictions, customers whose
    status at h is known, exits by month ``(groups, h + 2)`` and events by month and cause
    ``(groups, h + 1, causes)``."""
    width = horizon + 2
    size = np.zeros(groups)
    predicted_sum = np.zeros(groups)
    known = np.zeros(groups)
    exits = np.zeros(groups * width)
    events = np.zeros(groups * width * n_causes)
    capped = np.minimum(months, horizon + 1)
    status_known = (months >= horizon) | ((event > 0) & (months <= horizon))
    for rows, g, w in ((np.arange(months.size), group, weight), *mass):
        size += np.bincount(g, weights=w, minlength=groups)
        predicted_sum += np.bincount(g, weights=w * predicted[rows], minlength=groups)
        known += np.bincount(g, weights=w * status_known[rows], minlength=groups)
        exits += np.bincount(g * width + capped[rows], weights=w, minlength=exits.size)
        hit = (event[rows] > 0) & (months[rows] <= horizon)
        cell = (g[hit] * width + months[rows][hit]) * n_causes + event[rows][hit] - 1
        events += np.bincount(cell, weights=w[hit], minlength=events.size)
    exits = exits.reshape(groups, width)
    events = events.reshape(groups, width, n_causes)[:, : horizon + 1, :]
    return size, predicted_sum, known, exits, events


def lift_and_capture(
    months: np.ndarray,
    event: np.ndarray,
    predicted: np.ndarray,
    horizon: int,
    *,
    groups: int = 10,
) -> tuple[float, float]:
    """Lift and capture of the highest-predicted group (the top decile by default).

    With ``F_top`` and ``F_all`` the observed (Aalen–Johansen) cumulative incidence of cause 1
    at h in the top group and overall, and ``n_top``, ``n`` their sizes,

        lift    = F_top / F_all,
        capture = n_top F_top / (n F_all),

    the share of all cause-1 events by h that fall in the top group (exact counts when there
    is no censoring before h). Both are NaN when no event was observed. Groups as in
    `calibration_table`.
    """
    table = calibration_table(months, event, predicted, horizon, groups=groups)
    overall = calibration_table(months, event, predicted, horizon, groups=1)
    return lift_from_tables(table, overall)


def lift_from_tables(table: pd.DataFrame, overall: pd.DataFrame) -> tuple[float, float]:
    """Lift and capture from a `calibration_table` and its one-group version (see
    `lift_and_capture`)."""
    f_all = float(overall["observed"].iloc[0])
    top = table.iloc[-1]
    if not f_all > 0:
        return float("nan"), float("nan")
    lift = float(top["observed"]) / f_all
    capture = float(top["n"]) * float(top["observed"]) / (float(overall["n"].iloc[0]) * f_all)
    return lift, capture


def _group_weights(
    predicted: np.ndarray, groups: int
) -> tuple[np.ndarray, np.ndarray, list[tuple[np.ndarray, np.ndarray, np.ndarray]]]:
    """Equal-size groups by rank, with tied values that straddle a boundary shared.

    Positions ``[a, b)`` of a run of equal values in sorted order overlap group g's share
    ``[g n/G, (g+1) n/G)``; each member gets the overlap over ``b − a`` as its weight in g.
    Returns the weight and group of every customer in a run that sits inside one group (weight
    1; 0 for those in split runs) and, for each split run (at most G − 1), its rows with one
    (group, weight) pair per row and group.
    """
    n = predicted.size
    order = np.argsort(predicted, kind="stable")
    values = predicted[order]
    new_run = np.r_[True, values[1:] != values[:-1]]
    run = np.cumsum(new_run) - 1
    first = np.flatnonzero(new_run)
    last = np.r_[first[1:], n]
    g_lo = (first * groups) // n
    g_hi = (last * groups + n - 1) // n - 1
    weight = np.ones(n)
    group = np.empty(n, dtype=np.int64)
    group[order] = g_lo[run]
    split_runs = np.flatnonzero(g_hi > g_lo)
    mass = []
    for r in split_runs:
        rows = order[first[r] : last[r]]
        weight[rows] = 0.0
        g = np.arange(g_lo[r], g_hi[r] + 1)
        overlap = np.minimum(last[r], (g + 1) * n / groups) - np.maximum(first[r], g * n / groups)
        share = overlap / (last[r] - first[r])
        mass.append(
            (
                np.repeat(rows, g.size),
                np.tile(g, rows.size),
                np.tile(share, rows.size),
            )
        )
    return weight, group, mass


def _wilson(p: np.ndarray, m: np.ndarray, level: float) -> tuple[np.ndarray, np.ndarray]:
    z = stats.norm.ppf(0.5 + level / 2.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        denominator = 1.0 + z * z / m
        centre = (p + z * z / (2.0 * m)) / denominator
        half = z * np.sqrt(p * (1.0 - p) / m + z * z / (4.0 * m * m)) / denominator
    ok = m > 0
    return np.where(ok, np.clip(centre - half, 0, 1), np.nan), np.where(
        ok, np.clip(centre + half, 0, 1), np.nan
    )


def _checked(
    months: np.ndarray, event: np.ndarray, predicted: np.ndarray, horizon: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    months = np.asarray(months)
    event = np.asarray(event)
    if event.dtype == bool:
        event = event.astype(np.int64)
    predicted = np.asarray(predicted, dtype=np.float64)
    if months.ndim != 1 or months.shape != event.shape or months.shape != predicted.shape:
        raise UsageError(
            f"months, event and predicted must be one-dimensional of one length; got "
            f"{months.shape}, {event.shape}, {predicted.shape}"
        )
    if months.size == 0:
        raise UsageError("there are no customers to calibrate on")
    if not np.issubdtype(months.dtype, np.integer) or months.min() < 0:
        raise UsageError("months must be whole months ≥ 0 (an integer array)")
    if not np.issubdtype(event.dtype, np.integer) or event.min() < 0:
        raise UsageError("event must be 0 (censored) or a positive cause code (integers)")
    if not np.isfinite(predicted).all():
        raise UsageError("predicted has NaN or infinite values")
    if int(horizon) < 1:
        raise UsageError(f"horizon was {horizon} but must be at least 1 month")
    return months.astype(np.int64), event.astype(np.int64), predicted
