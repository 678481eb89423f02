"""Statistics an analyst expects from a survival library: Harrell's C, the integrated Brier
score and the log-rank test (arrays in, numbers out).

Outcomes follow `lifecycle.evaluation` (see ``_metrics``): ``time`` and ``event`` with 0 for
censored and a positive cause code otherwise (a boolean array is one cause).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

from ..errors import UsageError
from ._metrics import TIED_TOL, _checked, _codes, brier_score, weighted_concordance


def harrell_concordance(
    time: np.ndarray,
    event: np.ndarray,
    risk: np.ndarray,
    *,
    cause: int = 1,
    tied_tol: float = TIED_TOL,
) -> float:
    """Harrell's concordance index of a risk score for one cause.

    Over the pairs (i, j) where i had the event of ``cause`` at ``T_i`` and j was still
    observed after it (``T_j > T_i``, or ``T_j = T_i`` and j censored),

        C = Σ_{comparable (i, j)} [ I(r_i > r_j) + ½ I(|r_i − r_j| ≤ tol) ] / #comparable,

    with ``r`` the predicted risk (higher = earlier event). Harrell, Califf, Pryor, Lee &
    Rosati (1982), "Evaluating the yield of medical tests", JAMA 247(18), 2543–2546. The pairs
    and ties follow ``sksurv.metrics.concordance_index_censored``; lifelines'
    ``concordance_index`` gives the same value for ``predicted_scores = −risk``.

    With competing causes this is the cause-specific C: events of the other causes are treated
    as censored at their time (such a customer is compared with the events of ``cause``
    before its own exit, and never counts as an event itself). Unlike `uno_concordance` it is
    not weighted for censoring, so its value depends on the censoring pattern.

    Parameters
    ----------
    time, event
        Observed time and cause code (0 = censored; a boolean array is one cause).
    risk
        Predicted risk score.
    cause
        The cause code whose events are scored.
    tied_tol
        Risks within this distance of each other are tied and count ½.

    Returns
    -------
    float
        The concordance; NaN when there is no comparable pair.
    """
    time, is_event, risk = _checked(time, event, risk, cause)
    return weighted_concordance(
        time, is_event, risk, is_event.astype(np.float64), tied_tol=tied_tol
    )


def integrated_brier_score(
    time: np.ndarray,
    event: np.ndarray,
    incidence: np.ndarray,
    times: np.ndarray,
    *,
    cause: int = 1,
    train_time: np.ndarray | None = None,
    train_event: np.ndarray | None = None,
) -> float:
    """The Brier score of ``cause`` averaged over ``times`` by the trapezoid rule.

        IBS = (1 / (t_m − t_1)) ∫_{t_1}^{t_m} BS(t) dt,

    the integral taken by the trapezoid rule over ``BS(t_1), …, BS(t_m)`` from `brier_score`
    (Graf, Schmoor, Sauerbrei & Schumacher 1999, Statistics in Medicine 18, 2529–2545), as
    ``sksurv.metrics.integrated_brier_score`` computes it. With one cause and
    ``incidence = 1 − survival`` the two agree.

    Parameters
    ----------
    time, event, cause, train_time, train_event
        As in `brier_score`.
    incidence
        ``(n, len(times))`` predicted cumulative incidence of ``cause``.
    times
        At least two strictly increasing time points within ``[min(time), max(time))``.

    Returns
    -------
    float
        The integrated Brier score (lower is better).
    """
    times = np.atleast_1d(np.asarray(times, dtype=np.float64))
    if times.size < 2:
        raise UsageError(
            f"times were {times.tolist()} but the integrated Brier score needs at least two "
            "time points (for one time point use brier_score)"
        )
    scores = brier_score(
        time,
        event,
        incidence,
        times,
        cause=cause,
        train_time=train_time,
        train_event=train_event,
    )
    return float(np.trapezoid(scores, times) / (times[-1] - times[0]))


@dataclass(frozen=True)
class LogrankResult:
    """The log-rank test: ``statistic`` (χ²), its degrees of freedom ``df`` (groups − 1) and
    ``p_value``; ``observed`` and ``expected`` events per group (in ``groups`` order)."""

    statistic: float
    df: int
    p_value: float
    groups: tuple[object, ...]
    observed: np.ndarray
    expected: np.ndarray


def logrank_test(
    time: np.ndarray, event: np.ndarray, group: np.ndarray, *, cause: int | None = None
) -> LogrankResult:
    """Log-rank test that the hazard of the event is the same in two or more groups.

    At each distinct event time u with ``n(u)`` at risk and ``d(u)`` events, of which
    ``n_g(u)`` at risk and ``d_g(u)`` events are in group g, the observed minus expected
    events ``O_g − E_g = Σ_u (d_g(u) − d(u) n_g(u)/n(u))`` have the hypergeometric covariance

        V_gh = Σ_u d(u) (n(u) − d(u)) / (n(u) − 1) · (n_g/n) (δ_gh − n_h/n),

    and ``χ² = (O − E)ᵀ V⁻ (O − E)`` over the first G − 1 groups, with G − 1 degrees of freedom
    (Mantel 1966, Cancer Chemotherapy Reports 50, 163–170; Klein & Moeschberger 2003, *Survival
    Analysis*, 2nd ed., §7.3). For two groups this is lifelines' ``logrank_test``, for more its
    ``multivariate_logrank_test``.

    Parameters
    ----------
    time, event
        Observed time and event (0 or False = censored; any positive code or True = event).
    group
        The group of each subject (two or more distinct values).
    cause
        If given, only events of this cause count; the other causes are treated as censored
        (a cause-specific test).

    Returns
    -------
    LogrankResult
    """
    time = np.asarray(time, dtype=np.float64)
    if time.ndim != 1 or time.size < 2 or not np.isfinite(time).all():
        raise UsageError("time must be one-dimensional, finite, with at least 2 values")
    codes = _codes(event, time.shape)
    is_event = codes != 0 if cause is None else codes == int(cause)
    group = np.asarray(group)
    if group.shape != time.shape:
        raise UsageError(f"group has shape {group.shape} but time has shape {time.shape}")
    labels, g = np.unique(group, return_inverse=True)
    if labels.size < 2:
        raise UsageError(
            f"group has {labels.size} distinct value(s) but the log-rank test compares two or "
            "more groups"
        )
    uniq, inverse = np.unique(time, return_inverse=True)
    k, m = labels.size, uniq.size
    # per (time, group): subjects leaving at the time, and events there
    leaving = np.zeros((m, k))
    np.add.at(leaving, (inverse, g), 1.0)
    deaths = np.zeros((m, k))
    np.add.at(deaths, (inverse[is_event], g[is_event]), 1.0)
    at_risk = leaving[::-1].cumsum(axis=0)[::-1]  # still observed at each time
    n = at_risk.sum(axis=1)
    d = deaths.sum(axis=1)
    used = d > 0
    n, d, at_risk, deaths = n[used], d[used], at_risk[used], deaths[used]
    share = at_risk / n[:, None]
    observed = deaths.sum(axis=0)
    expected = (d[:, None] * share).sum(axis=0)
    spread = np.divide(d * (n - d), n - 1, out=np.zeros(n.size), where=n > 1)
    cov = np.einsum("u,ug,uh->gh", spread, share, share)
    cov = np.diag((spread[:, None] * share).sum(axis=0)) - cov
    diff = (observed - expected)[:-1]
    statistic = float(diff @ np.linalg.pinv(cov[:-1, :-1]) @ diff) if used.any() else 0.0
    df = k - 1
    return LogrankResult(
        statistic=statistic,
        df=df,
        p_value=float(stats.chi2.sf(statistic, df)),
        groups=tuple(labels.tolist()),
        observed=observed,
        expected=expected,
    )
