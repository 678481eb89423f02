"""Landmark snapshots: the customers active in a month, and what happened to them next."""

from __future__ import annotations

import logging

import numpy as np
import pandas as pd

from .._months import categorical_to_index, format_month
from ..errors import InputError, UsageError
from ..panel import PanelLayout, panel_layout
from ._competing import survival_and_incidence

log = logging.getLogger(__name__)

TIME = "time"
UPTAKE_TIME_PREFIX = "time_"


def landmark_months(panel: pd.DataFrame, *, every: int = 3, max_landmarks: int = 12) -> np.ndarray:
    """The landmark months of a panel: every ``every``-th month, at most ``max_landmarks``.

    Counting from the panel's first month ``m0``, the candidates are ``m0, m0 + every, …`` up
    to the panel's last month; when there are more than ``max_landmarks`` of them, the latest
    ``max_landmarks`` are kept (recent months describe today's customers best).

    Returns
    -------
    numpy.ndarray
        Month indices (``year * 12 + month − 1``), ascending.
    """
    _check_positive("every", every)
    _check_positive("max_landmarks", max_landmarks)
    month = categorical_to_index(panel["month"])
    if month.size == 0:
        return np.empty(0, dtype=np.int32)
    candidates = np.arange(int(month.min()), int(month.max()) + 1, every, dtype=np.int32)
    return candidates[-max_landmarks:]


def _outcomes(
    panel: pd.DataFrame,
    layout: PanelLayout,
    rows: np.ndarray,
    last: np.ndarray,
    time: np.ndarray,
    exit_seen: np.ndarray,
) -> dict[str, np.ndarray]:
    """At each landmark row: the terminal cause flags (an exit within the horizon), and per
    product the time to uptake and its flag (0 for a customer already holding it)."""
    n = len(panel)
    position = np.arange(n)
    out = {}
    for cause in layout.terminal_causes:
        flag = panel[cause].to_numpy()[last[rows]] == 1
        out[cause] = (flag & exit_seen).astype(np.int8)
    for cause in layout.uptake_causes:
        flag = panel[cause].to_numpy() == 1
        upcoming = np.where(flag, position, n)
        upcoming = np.minimum.accumulate(upcoming[::-1])[::-1][rows]
        until = upcoming - rows + 1
        event = (upcoming <= last[rows]) & (until <= time)
        holds = layout.at_risk_column(cause)
        at_risk = panel[holds].to_numpy()[rows] == 0 if holds in panel else np.ones(len(rows), bool)
        out[UPTAKE_TIME_PREFIX + cause] = np.where(at_risk, np.where(event, until, time), 0).astype(
            np.int16
        )
        out[cause] = (event & at_risk).astype(np.int8)
    return out


def _log_landmarks(frame: pd.DataFrame, months: np.ndarray, horizon: int) -> None:
    log.info(
        "landmark snapshots: %d rows at %d landmark months (%s to %s), horizon %d",
        len(frame),
        months.size,
        format_month(months[0]) if months.size else "-",
        format_month(months[-1]) if months.size else "-",
        horizon,
    )


def landmark_snapshots(
    panel: pd.DataFrame,
    *,
    horizon: int,
    months: np.ndarray | list[int] | None = None,
    every: int = 3,
    max_landmarks: int = 12,
) -> pd.DataFrame:
    """The customers active in each landmark month, their covariates then, and their follow-up.

    For a landmark month ``m``, every customer with a panel row in ``m`` is followed from the
    start of ``m`` (month 1 of the follow-up is ``m`` itself; the row's features are those
    known at the end of ``m − 1``, as in a scoring snapshot). With ``e`` the customer's last
    panel month (its exit month, or the panel's last month),

        time = min(e − m + 1, horizon)

    is the number of months observed, and the terminal cause flag is 1 when the customer left
    by that cause in month ``e`` and ``e − m + 1 ≤ horizon`` (otherwise the follow-up is
    censored at ``time``). For a product p, among rows with ``holds_<p> = 0``, with ``u`` the
    first month at or after ``m`` whose ``uptake_<p>`` flag is 1,

        time_uptake_<p> = min(u − m + 1, time)      (``time`` when there is no such ``u``)

    and ``uptake_<p>`` is 1 when ``u − m + 1 ≤ time``; an exit censors the uptake. Rows
    holding p at the landmark get ``time_uptake_<p> = 0``.

    Parameters
    ----------
    panel
        A panel (see `lifecycle.build_panel`): rows of one customer contiguous, months
        consecutive. Rows out of order are sorted by customer, then month.
    horizon
        Longest follow-up, in months.
    months
        Landmark month indices; by default `landmark_months` with ``every`` and
        ``max_landmarks``.

    Returns
    -------
    pandas.DataFrame
        ``customer_id``, ``month``, ``tenure_start``, ``tenure_stop`` of the landmark row,
        ``time`` (int16), ``churn``, ``move_out``, ``other_exit`` (int8), per product
        ``time_uptake_<p>`` (int16) and ``uptake_<p>`` (int8), then the panel's features at
        the landmark. Ordered by landmark month, then customer as in the panel.

    Raises
    ------
    InputError
        When a customer's months repeat or skip a month.
    """
    _check_positive("horizon", horizon)
    layout = panel_layout(panel)
    panel = in_customer_order(panel)
    month = categorical_to_index(panel["month"]).astype(np.int64)
    if months is None:
        months = landmark_months(panel, every=every, max_landmarks=max_landmarks)
    months = np.unique(np.asarray(months, dtype=np.int64))
    codes = pd.factorize(panel["customer_id"])[0]
    last = block_last(codes)
    rows = np.flatnonzero(np.isin(month, months))
    rows = rows[np.argsort(month[rows], kind="stable")]
    observed = last[rows] - rows + 1
    time = np.minimum(observed, horizon)
    exit_seen = observed <= horizon
    out = {
        "customer_id": panel["customer_id"].iloc[rows].reset_index(drop=True),
        "month": panel["month"].iloc[rows].reset_index(drop=True),
        "tenure_start": panel["tenure_start"].to_numpy()[rows],
        "tenure_stop": panel["tenure_stop"].to_numpy()[rows],
        TIME: time.astype(np.int16),
    }
    out.update(_outcomes(panel, layout, rows, last, time, exit_seen))
    frame = pd.DataFrame(out)
    features = panel[list(layout.features)].iloc[rows].reset_index(drop=True)
    frame = pd.concat([frame, features], axis=1)
    _log_landmarks(frame, months, horizon)
    return frame


def observed_incidence(landmarks: pd.DataFrame, horizon: int) -> pd.DataFrame:
    """Survival and cumulative incidence of the terminal causes observed after the landmarks.

    The nonparametric Aalen–Johansen estimate on the monthly grid: for month ``t`` of the
    follow-up, ``n(t)`` counts rows with ``time ≥ t`` and ``d_k(t)`` the rows that left by
    cause k in month t, so ``h_k(t) = d_k(t) / n(t)``; survival and incidence follow from
    these hazards through `survival_and_incidence`.

    Parameters
    ----------
    landmarks
        Rows of `landmark_snapshots` (any subset, e.g. one risk decile).
    horizon
        Months of follow-up to report; a month with nobody at risk has hazard 0.

    Returns
    -------
    pandas.DataFrame
        Index ``month_ahead`` 1..``horizon``; columns ``at_risk``, ``survival`` and one
        cumulative incidence per terminal cause.
    """
    _check_positive("horizon", horizon)
    causes = [c for c in ("churn", "move_out", "other_exit") if c in landmarks]
    time = landmarks[TIME].to_numpy().astype(np.int64)
    at_risk = np.bincount(np.minimum(time, horizon + 1), minlength=horizon + 2)[::-1]
    at_risk = np.cumsum(at_risk)[::-1][1 : horizon + 1].astype(np.float64)
    hazards = np.zeros((horizon, len(causes)))
    for j, cause in enumerate(causes):
        hit = (landmarks[cause].to_numpy() == 1) & (time <= horizon)
        events = np.bincount(time[hit], minlength=horizon + 1)[1 : horizon + 1]
        hazards[:, j] = np.divide(events, at_risk, out=np.zeros(horizon), where=at_risk > 0)
    survival, incidence = survival_and_incidence(hazards)
    frame = pd.DataFrame(incidence, columns=causes)
    frame.insert(0, "survival", survival)
    frame.insert(0, "at_risk", at_risk.astype(np.int64))
    frame.index = pd.RangeIndex(1, horizon + 1, name="month_ahead")
    return frame


def in_customer_order(panel: pd.DataFrame) -> pd.DataFrame:
    """The panel with each customer's rows contiguous and its months consecutive."""
    codes = pd.factorize(panel["customer_id"])[0]
    month = categorical_to_index(panel["month"]).astype(np.int64)
    if not _contiguous(codes, month):
        order = np.lexsort((month, codes))
        panel = panel.iloc[order].reset_index(drop=True)
        codes, month = codes[order], month[order]
        same = codes[1:] == codes[:-1]
        step = month[1:] - month[:-1]
        bad = np.flatnonzero(same & (step != 1))
        if bad.size:
            ids = panel["customer_id"].to_numpy()[bad + 1]
            raise InputError(
                table="panel",
                column="month",
                problem="a customer's months are repeated or not consecutive",
                count=int(bad.size),
                examples=pd.unique(ids),
                fix="build the panel with lifecycle.build_panel (one row per active month)",
            )
    return panel


def _contiguous(codes: np.ndarray, month: np.ndarray) -> bool:
    if codes.size < 2:
        return True
    same = codes[1:] == codes[:-1]
    blocks = 1 + int(np.count_nonzero(~same))
    return blocks == int(codes.max()) + 1 and bool(np.all(month[1:][same] == month[:-1][same] + 1))


def block_first(codes: np.ndarray) -> np.ndarray:
    """For every row, the position of the first row of its customer's (contiguous) block."""
    n = codes.size
    if n == 0:
        return np.empty(0, dtype=np.int64)
    starts = np.flatnonzero(np.concatenate([[True], codes[1:] != codes[:-1]]))
    lengths = np.diff(np.append(starts, n))
    return np.repeat(starts, lengths)


def block_last(codes: np.ndarray) -> np.ndarray:
    """For every row, the position of the last row of its customer's (contiguous) block."""
    n = codes.size
    if n == 0:
        return np.empty(0, dtype=np.int64)
    ends = np.flatnonzero(np.append(codes[1:] != codes[:-1], True))
    lengths = np.diff(np.concatenate([[-1], ends]))
    return np.repeat(ends, lengths)


def _check_positive(name: str, value: object) -> None:
    if not isinstance(value, int | np.integer) or isinstance(value, bool) or value < 1:
        raise UsageError(f"{name} was {value!r} but is expected to be a whole number >= 1")
