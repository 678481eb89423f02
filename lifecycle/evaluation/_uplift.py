"""The Qini curve and coefficient: how well a ranking finds the customers an offer moves.

A randomised campaign splits customers into a treated arm (offered) and a control arm (held
out). Rank everyone by a predicted effect, highest first; the Qini curve counts, at each depth of
the ranking, the extra responses the treated customers in that top part produced over what the
control customers in the same top part would predict for as many treated customers
(Radcliffe 2007, "Using control groups to target on predicted lift", Direct Marketing Analytics
Journal (3):14–21). A good ranking rises steeply and then falls back to the campaign's total
effect; a random ranking follows the straight line to it.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..errors import UsageError

QINI_COLUMNS = ["targeted", "share", "incremental"]


def qini_curve(
    effect_score: object,
    treated: object,
    outcome: object,
    *,
    weights: object | None = None,
) -> pd.DataFrame:
    """The Qini curve of a ranking by predicted effect, on a randomised campaign.

    Sort the customers by ``effect_score``, highest first, and cut the ranking after each
    distinct score (tied customers are never split). At a cut that keeps the top ``n``
    customers,

    .. math::

        Q(n) = R_t(n) - R_c(n)\\,\\frac{N_t(n)}{N_c(n)}

    where :math:`R_t(n)`, :math:`R_c(n)` are the (weighted) responses (``outcome = 1``) of the
    treated and control customers among the top ``n``, and :math:`N_t(n)`, :math:`N_c(n)` the
    (weighted) numbers of treated and control customers among them (the control term is
    dropped, :math:`Q = R_t(n)`, while :math:`N_c(n) = 0`). The ratio :math:`N_t(n)/N_c(n)`
    scales the control responses to the treated arm's size inside the same top part, so unequal
    arms need no other correction. This
    is the cumulative form used by scikit-uplift's ``qini_curve`` (and by Gutierrez & Gérardy
    2017); Radcliffe's paper scales by the arm sizes of the whole campaign instead (from
    memory), which agrees with it when the arms are balanced at every depth. The curve starts
    at (0, 0) and ends at the campaign's total incremental responses,
    :math:`Q(N) = R_t - R_c N_t / N_c`.

    Parameters
    ----------
    effect_score
        Predicted effect of the treatment on the chance of ``outcome = 1``, one per customer;
        higher means the treatment raises it more. For a retention offer pass the predicted
        reduction of the churn risk and ``outcome = 1`` for a customer kept.
    treated
        1 (or True) for the treated arm, 0 for the control arm.
    outcome
        1 for the response the treatment aims at, 0 otherwise.
    weights
        Optional non-negative weight per customer (default 1 each): every count above becomes
        a sum of weights.

    Returns
    -------
    pandas.DataFrame
        One row per cut, starting with the empty cut: ``targeted`` (the weight of the top
        part, :math:`n`), ``share`` (that over the total weight) and ``incremental``
        (:math:`Q(n)`).
    """
    score, t, y, w = _arrays(effect_score, treated, outcome, weights)
    order = np.argsort(-score, kind="mergesort")
    score, t, y, w = score[order], t[order], y[order], w[order]
    cuts = np.r_[np.flatnonzero(np.diff(score) != 0), score.size - 1]
    n_all = np.cumsum(w)[cuts]
    n_t = np.cumsum(w * t)[cuts]
    n_c = n_all - n_t
    r_t = np.cumsum(w * y * t)[cuts]
    r_c = np.cumsum(w * y * (1 - t))[cuts]
    ratio = np.divide(n_t, n_c, out=np.zeros_like(n_t), where=n_c > 0)
    incremental = r_t - r_c * ratio
    targeted = np.r_[0.0, n_all]
    return pd.DataFrame(
        {
            "targeted": targeted,
            "share": targeted / targeted[-1],
            "incremental": np.r_[0.0, incremental],
        },
        columns=QINI_COLUMNS,
    )


def qini_coefficient(
    effect_score: object,
    treated: object,
    outcome: object,
    *,
    weights: object | None = None,
    normalize: bool = True,
) -> float:
    """The area between the Qini curve and the random-targeting line.

    With :math:`x = n/N` the share targeted and :math:`q(x) = Q(n)/N` the incremental responses
    per customer (`qini_curve`, :math:`N` the total weight), the raw coefficient is

    .. math::

        A = \\int_0^1 q(x)\\,dx - \\frac{q(1)}{2}

    (trapezoids between the cuts; the random line runs straight from (0, 0) to (1, q(1))).
    With ``normalize=True`` (the default) it is divided by the same area for the ranking the
    outcomes favour, :math:`A^*`: treated responders first, then every customer without a
    response, then control responders last (scikit-uplift's ``qini_auc_score`` with
    ``negative_effect=True``). A normalised value is 1 for that ranking, about 0 for a random
    ranking, exactly 0 for a constant score, and negative for a ranking worse than random.

    Parameters
    ----------
    effect_score, treated, outcome, weights
        As in `qini_curve`.
    normalize
        Divide by :math:`A^*` (a number without unit), or return :math:`A` (incremental
        responses per customer).

    Returns
    -------
    float
        The Qini coefficient; NaN when normalising and :math:`A^* = 0` (no response to rank).
    """
    score, t, y, w = _arrays(effect_score, treated, outcome, weights)
    area = _area(qini_curve(score, t, y, weights=w))
    if not normalize:
        return float(area)
    best = _area(qini_curve(y * t - y * (1 - t), t, y, weights=w))
    return float(area / best) if best != 0 else float("nan")


def _area(curve: pd.DataFrame) -> float:
    x = curve["share"].to_numpy()
    total = curve["targeted"].to_numpy()[-1]
    q = curve["incremental"].to_numpy() / total
    return float(np.trapezoid(q, x) - q[-1] / 2.0)


def _arrays(
    effect_score: object, treated: object, outcome: object, weights: object | None
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    score = np.asarray(effect_score, dtype=np.float64).ravel()
    n = score.size
    t = _binary(treated, "treated", n)
    y = _binary(outcome, "outcome", n)
    if n == 0:
        raise UsageError("effect_score is empty; the Qini curve needs at least one customer")
    if not np.isfinite(score).all():
        raise UsageError(
            f"effect_score has {int((~np.isfinite(score)).sum())} missing or infinite values; "
            "give every customer a finite score"
        )
    if weights is None:
        w = np.ones(n)
    else:
        w = np.asarray(weights, dtype=np.float64).ravel()
        if w.size != n or not np.isfinite(w).all() or (w < 0).any() or w.sum() <= 0:
            raise UsageError(f"weights must be {n} finite non-negative numbers with a positive sum")
    if not (w * t).sum() > 0 or not (w * (1 - t)).sum() > 0:
        raise UsageError("treated must contain both arms (some 1s and some 0s)")
    return score, t, y, w


def _binary(values: object, name: str, n: int) -> np.ndarray:
    arr = np.asarray(values, dtype=np.float64).ravel()
    if arr.size != n:
        raise UsageError(f"{name} has {arr.size} values but effect_score has {n}")
    bad = ~np.isin(arr, (0.0, 1.0))
    if bad.any():
        raise UsageError(
            f"{name} has {int(bad.sum())} values other than 0 and 1 (first: "
            f"{arr[bad][0]!r}); pass 1 or 0 (True or False) for each customer"
        )
    return arr
