"""What a policy would have been worth in a past campaign month, from what happened.

A randomised campaign offered each customer with a known probability p (the campaign's share
offered) and held the others out. For a policy π that says, customer by customer, offer or not,
the customers whose arm happens to match π's choice are a random sample of everyone, each kept
with probability p (π offers) or 1 − p (π holds out); weighting their observed outcomes by the
inverse of that probability estimates the total outcome had π been followed for everyone (the
Horvitz–Thompson estimator, Horvitz & Thompson 1952, JASA 47(260); the inverse-propensity
policy value of Dudík, Langford & Li 2011, "Doubly robust policy evaluation and learning",
ICML, eq. 1).
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
import pandas as pd

from ..errors import UsageError

BACKTEST_COLUMNS = [
    "policy", "customers", "contacts", "matched", "target_events", "value", "lower_90",
    "upper_90",
]  # fmt: skip
_Z90 = 1.6448536269514722  # the standard normal's 95th percentile


def policy_value_ipw(
    outcome: np.ndarray, offered: np.ndarray, choose: np.ndarray, propensity: float | np.ndarray
) -> tuple[float, float]:
    """The inverse-propensity estimate of a policy's total outcome, and its standard error.

    .. math::

        \\hat T(\\pi) = \\sum_i \\frac{1[a_i = \\pi_i]\\, y_i}{q_i}, \\qquad
        q_i = \\begin{cases} p_i & \\pi_i = 1 \\\\ 1 - p_i & \\pi_i = 0 \\end{cases}

    with :math:`a_i` the arm (1 offered), :math:`\\pi_i` the policy's choice and :math:`p_i`
    the propensity of being offered. Each customer is kept independently (Poisson sampling),
    so the Horvitz–Thompson variance estimate is
    :math:`\\widehat{\\mathrm{Var}} = \\sum_{i: a_i = \\pi_i} (1 - q_i)\\, y_i^2 / q_i^2`.

    Returns
    -------
    (total, standard_error)
    """
    y = np.asarray(outcome, dtype=np.float64)
    a = np.asarray(offered).astype(bool)
    pi = np.asarray(choose).astype(bool)
    p = np.broadcast_to(np.asarray(propensity, dtype=np.float64), y.shape)
    if not (y.shape == a.shape == pi.shape):
        raise UsageError(
            f"outcome, offered and choose must have one value per customer; got {y.shape}, "
            f"{a.shape}, {pi.shape}"
        )
    if not np.isfinite(y).all():
        raise UsageError("the outcomes hold missing or infinite values")
    if ((p <= 0) | (p >= 1)).any():
        raise UsageError("the propensity of being offered must lie strictly between 0 and 1")
    q = np.where(pi, p, 1.0 - p)
    match = a == pi
    total = float(np.sum(y[match] / q[match]))
    variance = float(np.sum((1.0 - q[match]) * y[match] ** 2 / q[match] ** 2))
    return total, float(np.sqrt(variance))


def backtest_policies(
    value: np.ndarray,
    events: np.ndarray,
    offered: np.ndarray,
    policies: Mapping[str, np.ndarray],
    *,
    propensity: float | None = None,
) -> pd.DataFrame:
    """Each policy's estimated target events and value in a past randomised campaign.

    Parameters
    ----------
    value
        Each campaign customer's realised value (e.g. margin over the months followed, minus
        the offer's cost when offered).
    events
        1 where the customer had the offer's target event in the follow-up.
    offered
        1 for the offered arm, 0 for the held-out arm.
    policies
        Name → the policy's choice per customer (True: offer).
    propensity
        The chance of being offered; default the campaign's share offered.

    Returns
    -------
    pandas.DataFrame
        `BACKTEST_COLUMNS`: ``customers`` (campaign customers), ``contacts`` (whom the policy
        offers), ``matched`` (customers whose arm matches its choice: the ones that inform the
        estimate), ``target_events`` and ``value`` (estimated totals over the campaign's
        customers had the policy been followed), and the normal 90 % interval of ``value``
        (± 1.645 standard errors).
    """
    offered = np.asarray(offered).astype(bool)
    if propensity is None:
        propensity = float(offered.mean())
    rows = []
    for name, choose in policies.items():
        choose = np.asarray(choose).astype(bool)
        total, se = policy_value_ipw(value, offered, choose, propensity)
        count, _ = policy_value_ipw(events, offered, choose, propensity)
        rows.append(
            {
                "policy": name,
                "customers": len(offered),
                "contacts": int(choose.sum()),
                "matched": int((choose == offered).sum()),
                "target_events": count,
                "value": total,
                "lower_90": total - _Z90 * se,
                "upper_90": total + _Z90 * se,
            }
        )
    return pd.DataFrame(rows, columns=BACKTEST_COLUMNS)
