"""How an earlier month's predictions did: its stored scores against what happened since."""

from __future__ import annotations

import logging
import re
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .._layout import TERMINAL_CAUSES
from ..errors import InputError, UsageError
from ._store import ScoreHistory, _month_label

log = logging.getLogger(__name__)

DECILE_COLUMNS = ["decile", "n", "predicted_mean", "realised_rate", "realised_events"]


@dataclass(frozen=True)
class Comparison:
    """Predicted against realised, for one stored month, cause and horizon.

    Attributes
    ----------
    deciles
        One row per risk group (`compare_with_outcomes`): ``decile`` (1 = lowest predicted
        risk), ``n``, ``predicted_mean``, ``realised_rate``, ``realised_events``.
    summary
        Plain values (JSON-ready): ``month``, ``cause``, ``horizon_requested``,
        ``horizon_used``, ``months_elapsed``, ``predicted_column``, ``interpolated``, ``n``,
        ``events``, ``predicted_mean``, ``realised_rate``, ``expected_events``,
        ``observed_expected``, ``brier``, ``uno_c``, ``unmatched_scores``,
        ``unmatched_outcomes`` and ``notes`` (a list of sentences saying what was done).
    """

    deciles: pd.DataFrame
    summary: dict[str, object] = field(default_factory=dict)


def compare_with_outcomes(
    history: ScoreHistory,
    previous_month: str | int,
    outcomes: pd.DataFrame,
    *,
    cause: str = "churn",
    horizon: int = 1,
    groups: int = 10,
) -> Comparison:
    """Predicted against realised risk of ``cause`` for the customers scored in a stored month.

    ``outcomes`` is the follow-up of the customers present at the end of ``previous_month``
    (`lifecycle.evaluation.observed_outcomes` with that month as the cutoff, on the current
    data). Its censored customers are followed to the extract month E, so the months elapsed
    are ``e = E − previous_month``. An outcome over ``horizon`` months is observable only when
    ``horizon ≤ e``; otherwise the comparison is made over ``h = e`` months (1 month after one
    month) and the summary's notes say so. Within h every customer's status is known (an exit
    by h, or followed through h), so the realised figures are plain proportions.

    The prediction is the stored ``cif_<cause>_<h>m``. If the scores hold no such column (the
    default horizons are 3, 6, 12) and the cause is terminal, it is interpolated between the
    stored horizons ``a < h < b`` (``a = 0`` with ``S = 1``, ``F = 0``) assuming constant
    monthly hazards in between, which the discrete Aalen–Johansen form makes exact:

        S(h)   = S(a) · (S(b)/S(a))^((h − a)/(b − a)),
        F_k(h) = F_k(a) + (F_k(b) − F_k(a)) · (S(a) − S(h)) / (S(a) − S(b)),

    since with constant hazards each month's incidence of k is the share ``h_k / Σ_j h_j`` of
    that month's drop in survival.

    Customers (of those at risk of the cause: for an uptake, those not holding the product)
    are ranked by prediction, ties broken by ``customer_id`` so that the result does not depend
    on row order, and cut into ``groups`` groups of equal size by rank: the customer at
    0-based rank r is in group ``⌊r · groups / n⌋ + 1``. Per group, with ``Y_i = 1`` if i
    exited by ``cause`` within h months:

        predicted_mean = mean F̂_i(h),  realised_events = Σ Y_i,  realised_rate = mean Y_i.

    Summary over all n customers: ``observed_expected = Σ Y_i / Σ F̂_i(h)``; the Brier score
    ``(1/n) Σ (Y_i − F̂_i(h))²``, which is `lifecycle.evaluation.brier_score` here because no
    one is censored before h (its IPCW weights are all 1); and Uno's concordance truncated
    after month h (`lifecycle.evaluation.uno_concordance`, on the time axis of
    `lifecycle.evaluation.backtest`: an event in month t at t, anything else half a month
    later), NaN with a note when there is no event of the cause or no comparable pair.

    Parameters
    ----------
    history
        The score history holding ``previous_month``.
    previous_month
        The stored month whose predictions are checked (``YYYY-MM``).
    outcomes
        `observed_outcomes` at cutoff ``previous_month``: ``customer_id``, ``months``,
        ``cause`` (and ``holds_<p>``, ``uptake_<p>`` for an uptake cause).
    cause
        ``churn``, ``move_out``, ``other_exit`` or ``uptake_<product>``.
    horizon
        The months ahead to check (1 or 3, say).
    groups
        Number of risk groups (10: deciles).

    Returns
    -------
    Comparison
    """
    if not isinstance(history, ScoreHistory):
        raise UsageError(f"history must be a ScoreHistory; got {type(history).__name__}")
    label = _month_label(previous_month)
    horizon, groups = _checked_counts(horizon, groups)
    h, elapsed, notes = _horizon_used(outcomes, label, horizon)
    scores = history.scores(label)
    predicted, column, interpolated = _prediction(scores, cause, h, label, notes)
    matched = _Matched.of(scores, outcomes, predicted, cause, label, notes)
    realised = (matched.code == 1) & (matched.months <= h)
    deciles = _decile_table(matched.risk, realised, matched.ids, groups)
    summary = _summary(matched, realised, h, cause, notes)
    summary.update(month=label, horizon_requested=horizon, months_elapsed=elapsed)
    summary.update(predicted_column=column, interpolated=interpolated)
    return Comparison(deciles=deciles, summary=_ordered_and_logged(summary))


def _prediction(
    scores: pd.DataFrame, cause: str, h: int, label: str, notes: list[str]
) -> tuple[np.ndarray, str, bool]:
    """`_predicted_at`, with a note when the prediction is interpolated."""
    predicted, column, interpolated = _predicted_at(scores, cause, h)
    if interpolated:
        notes.append(
            f"the scores of {label} hold no cif_{cause}_{h}m; it is interpolated from "
            f"{column} assuming constant monthly hazards between the stored horizons"
        )
    return predicted, column, interpolated


def _ordered_and_logged(summary: dict[str, object]) -> dict[str, object]:
    """The summary's keys in their documented order, logged in a line."""
    summary = {key: summary[key] for key in _SUMMARY_KEYS}
    log.info(
        "predictions of %s for %s over %d month(s): %d customers, %d events, %.1f expected",
        summary["month"], summary["cause"], summary["horizon_used"], summary["n"],
        summary["events"], summary["expected_events"],
    )  # fmt: skip
    return summary


_SUMMARY_KEYS = (
    "month", "cause", "horizon_requested", "horizon_used", "months_elapsed",
    "predicted_column", "interpolated", "n", "events", "predicted_mean", "realised_rate",
    "expected_events", "observed_expected", "brier", "uno_c", "unmatched_scores",
    "unmatched_outcomes", "notes",
)  # fmt: skip


def _summary(
    matched: _Matched, realised: np.ndarray, h: int, cause: str, notes: list[str]
) -> dict[str, object]:
    """The comparison's figures over all compared customers (see `compare_with_outcomes`)."""
    risk, n, events = matched.risk, matched.risk.size, int(realised.sum())
    expected = float(risk.sum())
    return {
        "cause": cause,
        "horizon_used": h,
        "n": int(n),
        "events": events,
        "predicted_mean": float(risk.mean()),
        "realised_rate": events / n,
        "expected_events": expected,
        "observed_expected": events / expected if expected > 0 else float("nan"),
        "brier": float(np.mean(np.square(realised - risk))),
        "uno_c": _truncated_concordance(matched, h, cause, notes),
        "unmatched_scores": matched.unmatched_scores,
        "unmatched_outcomes": matched.unmatched_outcomes,
        "notes": notes,
    }


def _checked_counts(horizon: object, groups: object) -> tuple[int, int]:
    """``horizon`` and ``groups`` as whole numbers ≥ 1 (else a `UsageError`)."""
    if isinstance(horizon, bool) or not isinstance(horizon, int | np.integer) or horizon < 1:
        raise UsageError(f"horizon was {horizon!r} but must be a whole number of months ≥ 1")
    if isinstance(groups, bool) or not isinstance(groups, int | np.integer) or groups < 1:
        raise UsageError(f"groups was {groups!r} but must be a whole number ≥ 1")
    return int(horizon), int(groups)


def _horizon_used(
    outcomes: pd.DataFrame, label: str, horizon: int
) -> tuple[int, int | None, list[str]]:
    """The months compared (``horizon``, or fewer if fewer have passed), the months elapsed,
    and the notes so far; the outcomes are checked first."""
    _check_outcomes(outcomes)
    elapsed = _months_elapsed(outcomes)
    if elapsed == 0:
        raise UsageError(
            f"no month has passed since {label} in these outcomes; compare a month's "
            "predictions once at least one later month of data is in"
        )
    h = horizon if elapsed is None else min(horizon, elapsed)
    notes = []
    if h < horizon:
        notes.append(
            f"{horizon}-month outcomes are not observable yet: {elapsed} month(s) have passed "
            f"since {label}, so predictions and outcomes are compared over {h} month(s)"
        )
    return h, elapsed, notes


@dataclass(frozen=True)
class _Matched:
    """The scored customers found in the outcomes and at risk of the cause: their ids,
    predictions, months followed and outcome codes (1: the cause), and how many were left out
    on either side."""

    ids: np.ndarray
    risk: np.ndarray
    months: np.ndarray
    code: np.ndarray
    unmatched_scores: int
    unmatched_outcomes: int

    @classmethod
    def of(cls, scores, outcomes, predicted, cause, label, notes) -> _Matched:
        from ..evaluation import outcome_for_cause  # heavy; only needed here

        score_ids = scores["customer_id"].astype(str).to_numpy(dtype=object)
        outcome_ids = pd.Index(outcomes["customer_id"].astype(str))
        where = outcome_ids.get_indexer(score_ids)
        matched = where >= 0
        unmatched_scores = int((~matched).sum())
        unmatched_outcomes = int(len(outcome_ids) - matched.sum())
        if unmatched_scores or unmatched_outcomes:
            log.warning(
                "comparing %s: %d scored customer(s) missing from the outcomes, %d customer(s) "
                "in the outcomes that were not scored; only the %d in both are compared",
                label, unmatched_scores, unmatched_outcomes, int(matched.sum()),
            )  # fmt: skip
            notes.append(
                f"{unmatched_scores} scored customer(s) have no outcome and "
                f"{unmatched_outcomes} outcome(s) have no score; they are left out"
            )
        months, code, at_risk = outcome_for_cause(outcomes, cause)
        rows = where[matched]
        keep = at_risk[rows]
        rows = rows[keep]
        risk = predicted[matched][keep]
        if risk.size == 0:
            raise UsageError(
                f"none of the customers scored in {label} is in the outcomes at risk of "
                f"{cause}; pass observed_outcomes(tables, '{label}')"
            )
        return cls(
            ids=score_ids[matched][keep],
            risk=risk,
            months=months[rows],
            code=code[rows],
            unmatched_scores=unmatched_scores,
            unmatched_outcomes=unmatched_outcomes,
        )


def _truncated_concordance(matched: _Matched, h: int, cause: str, notes: list[str]) -> float:
    """Uno's concordance truncated after month h (NaN with a note when not available)."""
    from ..evaluation import uno_concordance  # heavy; only needed here

    is_event = matched.code == 1
    uno_c = float("nan")
    why = f"no {cause} event, or no comparable pair, within {h} month(s)"
    if is_event.any() and matched.risk.size >= 2:
        specific = matched.months + 0.5 * (~is_event)
        try:
            uno_c = uno_concordance(specific, is_event, matched.risk, tau=h + 0.25)
        except UsageError as exc:  # a censoring weight undefined at an event time
            why = str(exc)
    if not np.isfinite(uno_c):
        notes.append(f"Uno's concordance is not available: {why}")
    return float(uno_c)


def _decile_table(
    risk: np.ndarray, realised: np.ndarray, ids: np.ndarray, groups: int
) -> pd.DataFrame:
    n = risk.size
    order = np.lexsort((ids, risk))
    rank = np.empty(n, dtype=np.int64)
    rank[order] = np.arange(n)
    group = rank * groups // n
    size = np.bincount(group, minlength=groups)
    predicted = np.bincount(group, weights=risk, minlength=groups)
    events = np.bincount(group, weights=realised, minlength=groups)
    with np.errstate(invalid="ignore", divide="ignore"):
        return pd.DataFrame(
            {
                "decile": np.arange(1, groups + 1),
                "n": size.astype(np.int64),
                "predicted_mean": np.where(size > 0, predicted / size, np.nan),
                "realised_rate": np.where(size > 0, events / size, np.nan),
                "realised_events": events.astype(np.int64),
            }
        )


def _predicted_at(scores: pd.DataFrame, cause: str, h: int) -> tuple[np.ndarray, str, bool]:
    """The predicted incidence of ``cause`` within h months, the column(s) it came from, and
    whether it was interpolated (see `compare_with_outcomes`)."""
    column = f"cif_{cause}_{h}m"
    if column in scores:
        return scores[column].to_numpy(dtype=np.float64), column, False
    pattern = re.compile(rf"^cif_{re.escape(cause)}_(\d+)m$")
    stored = sorted(
        int(m.group(1))
        for m in map(pattern.match, map(str, scores.columns))
        if m and f"survival_{m.group(1)}m" in scores
    )
    if not stored and not any(map(pattern.match, map(str, scores.columns))):
        raise UsageError(
            f"the stored scores have no cif_{cause}_<h>m column; their columns are "
            f"{list(scores.columns)}"
        )
    above = [b for b in stored if b > h]
    if cause not in TERMINAL_CAUSES or not above:
        raise UsageError(
            f"the stored scores have no {column}, and it cannot be interpolated (that needs a "
            f"terminal cause and stored survival_<b>m and cif_{cause}_<b>m with b > {h}); "
            "score with this horizon included"
        )
    b = above[0]
    below = [a for a in stored if a < h]
    a = below[-1] if below else 0
    s_b = scores[f"survival_{b}m"].to_numpy(dtype=np.float64)
    f_b = scores[f"cif_{cause}_{b}m"].to_numpy(dtype=np.float64)
    if a == 0:
        s_a, f_a = np.ones_like(s_b), np.zeros_like(f_b)
    else:
        s_a = scores[f"survival_{a}m"].to_numpy(dtype=np.float64)
        f_a = scores[f"cif_{cause}_{a}m"].to_numpy(dtype=np.float64)
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = np.where(s_a > 0, s_b / s_a, 0.0)
        s_h = s_a * np.power(np.clip(ratio, 0.0, 1.0), (h - a) / (b - a))
        share = np.where(s_a > s_b, (s_a - s_h) / (s_a - s_b), 0.0)
    f_h = f_a + (f_b - f_a) * share
    source = f"cif_{cause}_{b}m" if a == 0 else f"cif_{cause}_{a}m and cif_{cause}_{b}m"
    return f_h, source + f" with survival_{b}m" + ("" if a == 0 else f", survival_{a}m"), True


def _check_outcomes(outcomes: pd.DataFrame) -> None:
    if not isinstance(outcomes, pd.DataFrame):
        raise UsageError(
            f"outcomes must be the DataFrame of observed_outcomes; got {type(outcomes).__name__}"
        )
    missing = [c for c in ("customer_id", "months", "cause") if c not in outcomes]
    if missing:
        raise UsageError(
            f"outcomes lack the columns {missing}; pass observed_outcomes(tables, cutoff)"
        )
    months = pd.to_numeric(outcomes["months"], errors="coerce")
    bad = months.isna() | (months < 0) | (months != np.round(months))
    if bad.any():
        raise InputError(
            table="outcomes", column="months", problem="months must be whole months ≥ 0",
            count=int(bad.sum()), examples=outcomes.loc[bad, "customer_id"],
        )  # fmt: skip
    ids = outcomes["customer_id"].astype(str)
    if ids.duplicated().any():
        twice = ids[ids.duplicated(keep=False)]
        raise InputError(
            table="outcomes", column="customer_id", problem="customer_id repeats",
            count=int(twice.size), examples=twice.unique(),
        )  # fmt: skip


def _months_elapsed(outcomes: pd.DataFrame) -> int | None:
    """Months from the cutoff to the extract month: the follow-up of the censored customers,
    which `observed_outcomes` runs to the extract month for each of them. ``None`` when no
    one is censored (every status is then known at any horizon)."""
    censored = outcomes["cause"].isna().to_numpy()
    if not censored.any():
        return None
    follow = outcomes["months"].to_numpy()[censored].astype(np.int64)
    if np.any(follow != follow.max()):
        short = follow != follow.max()
        raise InputError(
            table="outcomes",
            column="months",
            problem=(
                "censored customers have different follow-up, but outcomes of one cutoff all "
                f"run to the extract month ({follow.max()} months here)"
            ),
            count=int(short.sum()),
            examples=outcomes["customer_id"].to_numpy()[censored][short],
            fix="pass observed_outcomes(tables, cutoff) for the stored month as the cutoff",
        )
    return int(follow.max())
