"""Likelihood statistics of a fitted cause-specific Cox model: the log partial likelihood
at the estimate and at β = 0, and the likelihood-ratio test of each cause."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

_LRT_COLUMNS = ["cause", "statistic", "df", "p"]


@dataclass(frozen=True)
class CauseLikelihood:
    """One cause's log partial likelihood at β̂ (``fitted``) and at β = 0 (``null``), and
    the number of coefficients ``df``."""

    fitted: float
    null: float
    df: int


def efron_log_likelihood(
    times: np.ndarray,
    enter: np.ndarray,
    leave: np.ndarray,
    stop: np.ndarray,
    event: np.ndarray,
    weights: np.ndarray,
    eta: np.ndarray,
) -> float:
    """Log partial likelihood of start-stop rows with Efron's handling of ties.

    For the m events tied at time u, with ``R = Σ_{at risk} w e^η`` and ``T`` the same sum over
    the tied events, and ``w̄`` their mean weight,

        ℓ = Σ_u [ Σ_{i: event at u} w_i η_i − w̄ Σ_{l=0}^{m−1} log(R − (l/m) T) ]

    (Efron 1977, JASA 72, 557–565; the weighting is lifelines' for ``CoxTimeVaryingFitter``).
    ``enter``/``leave`` are the positions of each row's start/stop in the sorted event
    ``times`` (row i is at risk at ``times[g]`` for ``enter_i ≤ g < leave_i``).
    """
    n_times = times.size
    if n_times == 0:
        return 0.0
    phi = weights * np.exp(eta)
    delta = np.bincount(enter, weights=phi, minlength=n_times + 1)
    delta -= np.bincount(leave, weights=phi, minlength=n_times + 1)
    at_risk = np.cumsum(delta)[:-1]
    events = np.flatnonzero(event)
    group = np.searchsorted(times, stop[events])
    counts = np.bincount(group, minlength=n_times)
    tie = np.bincount(group, weights=phi[events], minlength=n_times)
    mean_weight = np.bincount(group, weights=weights[events], minlength=n_times) / np.maximum(
        counts, 1
    )
    g = np.repeat(np.arange(n_times), counts)
    first = np.concatenate([[0], np.cumsum(counts)[:-1]])
    frac = (np.arange(g.size) - first[g]) / counts[g]
    log_terms = mean_weight[g] * np.log(at_risk[g] - frac * tie[g])
    return float(np.sum(weights[events] * eta[events]) - np.sum(log_terms))


def cause_likelihood(
    times: np.ndarray,
    start: np.ndarray,
    stop: np.ndarray,
    event: np.ndarray,
    weights: np.ndarray,
    x: np.ndarray,
    beta: np.ndarray,
) -> CauseLikelihood:
    """`CauseLikelihood` of one cause's fit (``x`` the design the coefficients ``beta`` use)."""
    enter = np.searchsorted(times, start, side="right")
    leave = np.searchsorted(times, stop, side="right")
    centred = x - x.mean(axis=0) if x.shape[1] else x
    eta = centred @ beta if beta.size else np.zeros(x.shape[0])
    args = (times, enter, leave, stop, event, weights)
    return CauseLikelihood(
        fitted=efron_log_likelihood(*args, eta),
        null=efron_log_likelihood(*args, np.zeros(x.shape[0])),
        df=int(beta.size),
    )


class CoxLikelihoodMixin:
    """``log_likelihood_`` and ``likelihood_ratio_test()`` of a fitted `CauseSpecificCox`.

    ``likelihoods_`` (cause → `CauseLikelihood`) is set by the fit; a cause without events
    has the empty partial likelihood (log 1 = 0) and no coefficient.
    """

    causes_: tuple[str, ...]
    likelihoods_: dict[str, CauseLikelihood]

    def _likelihood(self, cause: str) -> CauseLikelihood:
        return self.likelihoods_.get(cause, CauseLikelihood(0.0, 0.0, 0))

    @property
    def log_likelihood_(self) -> dict[str, float]:
        """Cause → log partial likelihood ``ℓ(β̂)`` (Efron ties) of that cause's fit.

        It is lifelines' ``log_likelihood_`` of the same fit; with row sampling (weights) it
        is the weighted log partial likelihood, which estimates the full one.
        """
        return {c: self._likelihood(c).fitted for c in self.causes_}

    def likelihood_ratio_test(self) -> pd.DataFrame:
        """Likelihood-ratio test of each cause's coefficients against none.

        ``statistic = 2 (ℓ(β̂) − ℓ(0))`` referred to χ² with ``df`` = the number of
        coefficients of the cause (Kalbfleisch & Prentice 2002, §4.2; lifelines'
        ``log_likelihood_ratio_test``). With row sampling the weighted statistic is not χ²
        distributed and the p-value is only a guide.

        Returns
        -------
        pandas.DataFrame
            ``cause``, ``statistic``, ``df``, ``p`` (NaN where a cause has no coefficient).
        """
        rows = []
        for cause in self.causes_:
            lik = self._likelihood(cause)
            statistic = max(2.0 * (lik.fitted - lik.null), 0.0)
            p = float(stats.chi2.sf(statistic, lik.df)) if lik.df else float("nan")
            rows.append((cause, statistic, lik.df, p))
        return pd.DataFrame(rows, columns=_LRT_COLUMNS).astype({"df": np.int64})
