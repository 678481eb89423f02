"""The expected maximum profit measure for churn models (Verbraken, Verbeke & Baesens 2013).

A retention campaign contacts the customers a churn model ranks highest. A contacted churner
accepts the incentive with probability γ and stays (worth the customer lifetime value, minus
the incentive and the contact); a contacted non-churner takes the incentive anyway. The measure
is the profit per customer of the best cut-off of the ranking, averaged over an uncertain γ.
"""

from __future__ import annotations

import numpy as np
from scipy.special import betainc

from ..errors import UsageError


def expected_maximum_profit(
    churn_score: object,
    churned: object,
    *,
    clv: float = 200.0,
    incentive_cost: float = 10.0,
    contact_cost: float = 1.0,
    alpha: float = 6.0,
    beta: float = 14.0,
) -> float:
    """Expected maximum profit per customer of a churn ranking (EMP, the churn version).

    Verbraken, Verbeke & Baesens (2013), "A novel profit maximizing metric for measuring
    classification performance of customer churn prediction models", IEEE TKDE 25(5):961–973.
    Contacting every customer whose score is at least a cut-off :math:`t` gives the profit per
    customer

    .. math::

        P(t; \\gamma) = CLV\\,(\\gamma(1-\\delta) - \\phi)\\,\\pi_0 F_0(t)
                        - CLV\\,(\\delta + \\phi)\\,\\pi_1 F_1(t),
        \\qquad \\delta = d / CLV,\\ \\phi = f / CLV

    where :math:`\\pi_0`, :math:`\\pi_1` are the shares of churners and non-churners and
    :math:`F_0(t)`, :math:`F_1(t)` the shares of each contacted at that cut-off (one point of
    the ROC curve). The measure averages the best cut-off's profit over the acceptance rate
    :math:`\\gamma \\sim \\mathrm{Beta}(\\alpha, \\beta)`:

    .. math::

        EMP = \\int_0^1 \\max_t P(t; \\gamma)\\, f_{\\alpha,\\beta}(\\gamma)\\, d\\gamma .

    :math:`P` is linear in :math:`\\gamma` at each cut-off, so the maximum is the upper
    envelope of straight lines (one per distinct score, plus contacting nobody, profit 0) and
    the integral is exact on each piece :math:`[g_0, g_1]`:
    :math:`\\int (a\\gamma + b) f_{\\alpha,\\beta} = a\\,\\frac{\\alpha}{\\alpha+\\beta}
    [I_{g}(\\alpha+1, \\beta)]_{g_0}^{g_1} + b\\,[I_g(\\alpha, \\beta)]_{g_0}^{g_1}`, with
    :math:`I` the regularised incomplete beta function. Tied scores are contacted together.

    The defaults (CLV 200, d = 10, f = 1, α = 6, β = 14, so a mean acceptance of 0.3) are the
    paper's worked setting as we recall it (from memory), and match the defaults of the
    ``empulse`` package's ``empc_score``.

    Parameters
    ----------
    churn_score
        Predicted churn risk per customer; higher means contacted first.
    churned
        1 if the customer churned (the class a campaign wants to find), else 0.
    clv
        Customer lifetime value of a churner kept, in money.
    incentive_cost
        Cost :math:`d` of the incentive, paid by every contacted customer who accepts (all
        non-churners are assumed to accept).
    contact_cost
        Cost :math:`f` of contacting one customer.
    alpha, beta
        Shape parameters of the acceptance rate's beta distribution.

    Returns
    -------
    float
        EMP in money per customer of the portfolio scored.
    """
    score, y = _arrays(churn_score, churned)
    for name, value in {"clv": clv, "alpha": alpha, "beta": beta}.items():
        if not (np.isfinite(value) and value > 0):
            raise UsageError(f"{name} was {value!r} but is expected to be a positive number")
    for name, value in {"incentive_cost": incentive_cost, "contact_cost": contact_cost}.items():
        if not (np.isfinite(value) and value >= 0):
            raise UsageError(f"{name} was {value!r} but is expected to be a number >= 0")
    delta, phi = incentive_cost / clv, contact_cost / clv
    n, churners = y.size, y.sum()
    order = np.argsort(-score, kind="mergesort")
    score, y = score[order], y[order]
    cuts = np.r_[np.flatnonzero(np.diff(score) != 0), score.size - 1]
    # Shares of the portfolio contacted that churn (π0·F0) and that do not (π1·F1), per cut.
    churn_share = np.r_[0.0, np.cumsum(y)[cuts]] / n
    stay_share = np.r_[0.0, (cuts + 1) - np.cumsum(y)[cuts]] / n
    slope = clv * (1.0 - delta) * churn_share
    intercept = -clv * (phi * churn_share + (delta + phi) * stay_share)
    if churners == 0:
        return 0.0  # nobody to keep: contacting nobody is best at every γ
    total = 0.0
    for a, b, g0, g1 in _envelope(slope, intercept):
        total += a * alpha / (alpha + beta) * (
            betainc(alpha + 1, beta, g1) - betainc(alpha + 1, beta, g0)
        ) + b * (betainc(alpha, beta, g1) - betainc(alpha, beta, g0))
    return float(total)


def _envelope(slope: np.ndarray, intercept: np.ndarray) -> list[tuple[float, float, float, float]]:
    """Pieces ``(a, b, g0, g1)`` of max_i (a_i·γ + b_i) over γ in [0, 1]."""
    current = int(np.lexsort((slope, intercept))[-1])  # best at γ = 0 (ties: steeper)
    pieces = []
    g0 = 0.0
    while True:
        steeper = slope > slope[current]
        if not steeper.any():
            break
        cross = np.full(slope.size, np.inf)
        cross[steeper] = (intercept[current] - intercept[steeper]) / (
            slope[steeper] - slope[current]
        )
        cross = np.maximum(cross, g0)
        g1 = float(cross.min())
        if g1 >= 1.0:
            break
        at = np.flatnonzero(cross == g1)
        nxt = int(at[np.argmax(slope[at])])
        pieces.append((float(slope[current]), float(intercept[current]), g0, g1))
        current, g0 = nxt, g1
    pieces.append((float(slope[current]), float(intercept[current]), g0, 1.0))
    return pieces


def _arrays(churn_score: object, churned: object) -> tuple[np.ndarray, np.ndarray]:
    score = np.asarray(churn_score, dtype=np.float64).ravel()
    y = np.asarray(churned, dtype=np.float64).ravel()
    if score.size == 0:
        raise UsageError("churn_score is empty; the measure needs at least one customer")
    if y.size != score.size:
        raise UsageError(f"churned has {y.size} values but churn_score has {score.size}")
    if not np.isfinite(score).all():
        raise UsageError(
            f"churn_score has {int((~np.isfinite(score)).sum())} missing or infinite values; "
            "give every customer a finite score"
        )
    bad = ~np.isin(y, (0.0, 1.0))
    if bad.any():
        raise UsageError(
            f"churned has {int(bad.sum())} values other than 0 and 1 (first: {y[bad][0]!r}); "
            "pass 1 for a churner and 0 otherwise"
        )
    return score, y
