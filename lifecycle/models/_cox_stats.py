"""The statistics behind the cause-specific Cox family: risk-set sums over start-stop rows,
which columns are identifiable, Breslow's baseline increments, Efron-weighted Schoenfeld
residuals and the proportional-hazards test; and, of a fitted model, the log partial likelihood
at the estimate and at β = 0 with the likelihood-ratio test of each cause."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

from ..errors import UsageError

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


# -- the estimators behind the fit ---------------------------------------------------------------
class RiskSets:
    """Sums over the risk sets of given times, for start-stop rows.

    Row i is at risk at time u when ``start_i < u ≤ stop_i``. With the times sorted
    ``u_0 < u_1 < …``, row i is at risk exactly at the times ``u_g`` with ``c_i ≤ g < b_i``,
    where ``c_i = #{g: u_g ≤ start_i}`` and ``b_i = #{g: u_g ≤ stop_i}``; a sum over each
    risk set is then a cumulative sum of per-row contributions added at ``c_i`` and taken
    off at ``b_i``: O(n) per column once the two positions are known.
    """

    def __init__(self, start: np.ndarray, stop: np.ndarray, times: np.ndarray) -> None:
        self.times = np.asarray(times, dtype=np.float64)
        self._enter = np.searchsorted(self.times, start, side="right")
        self._leave = np.searchsorted(self.times, stop, side="right")

    def sums(self, values: np.ndarray) -> np.ndarray:
        """``Σ_{i at risk at u_g} values_i`` for each time: ``(G,)`` or ``(G, d)``."""
        values = np.asarray(values, dtype=np.float64)
        if values.ndim == 2:
            return np.column_stack([self.sums(values[:, j]) for j in range(values.shape[1])])
        size = self.times.size + 1
        delta = np.bincount(self._enter, weights=values, minlength=size)
        delta -= np.bincount(self._leave, weights=values, minlength=size)
        return np.cumsum(delta)[:-1]

    def sums_over_times_at_risk(self, per_time: np.ndarray) -> np.ndarray:
        """``Σ_{g: row i at risk at u_g} per_time_g`` for each row i: ``(n,)``."""
        suffix = np.concatenate([np.cumsum(per_time[::-1])[::-1], [0.0]])
        return suffix[self._enter] - suffix[self._leave]


def risk_set_sums(
    start: np.ndarray, stop: np.ndarray, times: np.ndarray, values: np.ndarray
) -> np.ndarray:
    """``Σ_i values_i`` over the rows at risk at each of the sorted ``times``
    (``start_i < u ≤ stop_i``); see `RiskSets`."""
    return RiskSets(start, stop, times).sums(values)


def identifiable_columns(
    risk: RiskSets, x: np.ndarray, stop: np.ndarray, event: np.ndarray
) -> np.ndarray:
    """Mask of the columns of ``x`` whose coefficients the partial likelihood identifies.

    The information at β = 0 is ``I = Σ_u d(u) · Cov_{R(u)}(x)``: the covariance of the
    covariates within the risk set of each event time u, times the events at u. A direction v
    with ``vᵀ I v = 0`` leaves the partial likelihood flat (``v·x`` is constant within every
    risk set, e.g. an indicator of a customer's first month, which is a function of tenure
    alone and so absorbed by the baseline). Columns are taken in order and one is kept when
    its part not explained by the kept ones (the Schur complement ``I_jj − I_jK I_KK⁻¹ I_Kj``)
    exceeds 10⁻⁹ of ``I_jj``, and ``I_jj`` itself is more than rounding.

    With ``n(u)`` rows and means ``m(u)`` in the risk sets,
    ``I = Σ_i ω_i x_i x_iᵀ − Σ_u d(u) m(u) m(u)ᵀ`` where ``ω_i = Σ_{u: i at risk} d(u)/n(u)``:
    one weighted cross product instead of one risk-set sum per pair of columns.
    """
    p = x.shape[1]
    keep = np.zeros(p, dtype=bool)
    if p == 0:
        return keep
    deaths = np.bincount(
        np.searchsorted(risk.times, stop[event]), minlength=risk.times.size
    ).astype(np.float64)
    n = risk.sums(np.ones(x.shape[0]))
    xc = x - x.mean(axis=0)
    mean = risk.sums(xc) / n[:, None]
    omega = risk.sums_over_times_at_risk(deaths / n)
    info = (xc * omega[:, None]).T @ xc - (mean * deaths[:, None]).T @ mean
    rounding = 1e-10 * deaths.sum() * (xc**2).mean(axis=0)
    for j in range(p):
        if info[j, j] <= rounding[j]:
            continue
        kept = np.flatnonzero(keep)
        residual = info[j, j]
        if kept.size:
            block = info[np.ix_(kept, kept)]
            residual -= info[j, kept] @ np.linalg.solve(block, info[kept, j])
        keep[j] = residual > 1e-9 * info[j, j]
    return keep


def breslow_increments(
    risk: RiskSets, stop: np.ndarray, event: np.ndarray, weights: np.ndarray, phi: np.ndarray
) -> np.ndarray:
    """Breslow's baseline cumulative-hazard jumps at the event times ``risk.times``.

    ``ΔĤ0(u) = Σ_{i: event at u} w_i / Σ_{j: start_j < u ≤ stop_j} φ_j``, with
    ``φ_j = w_j · exp(β̂·(x_j − c))`` (so Ĥ0 is the baseline at covariates c).
    """
    events = np.flatnonzero(event)
    group = np.searchsorted(risk.times, stop[events])
    deaths = np.bincount(group, weights=weights[events], minlength=risk.times.size)
    return deaths / risk.sums(phi)


def efron_schoenfeld(
    risk: RiskSets, x: np.ndarray, stop: np.ndarray, event: np.ndarray, phi: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Schoenfeld residuals of the event rows under Efron's handling of ties.

    For the m events tied at time u, with ``R = Σ_{at risk} φ``, ``R_x = Σ_{at risk} φ x`` and
    ``T``, ``T_x`` the same sums over the tied events, the expected covariate is Efron's mean
    ``x̄(u) = (1/m) Σ_{l=0}^{m−1} (R_x − (l/m) T_x) / (R − (l/m) T)`` and the residual of event
    i at u is ``x_i − x̄(u)``.

    Returns
    -------
    times, residuals
        The event time of each event row (in row order) and its residual ``(D, p)``.
    """
    events = np.flatnonzero(event)
    t_event = stop[events]
    n_times, p = risk.times.size, x.shape[1]
    group = np.searchsorted(risk.times, t_event)
    counts = np.bincount(group, minlength=n_times)
    at_risk = risk.sums(phi)
    at_risk_x = risk.sums(phi[:, None] * x)
    tie = np.bincount(group, weights=phi[events], minlength=n_times)
    tie_x = np.column_stack(
        [
            np.bincount(group, weights=phi[events] * x[events, j], minlength=n_times)
            for j in range(p)
        ]
    )
    # one term per (time, l): l = 0..m−1 within each tied group
    g = np.repeat(np.arange(n_times), counts)
    first = np.concatenate([[0], np.cumsum(counts)[:-1]])
    frac = (np.arange(g.size) - first[g]) / counts[g]
    terms = (at_risk_x[g] - frac[:, None] * tie_x[g]) / (at_risk[g] - frac * tie[g])[:, None]
    terms /= counts[g, None]
    xbar = np.column_stack(
        [np.bincount(g, weights=terms[:, j], minlength=n_times) for j in range(p)]
    )
    return t_event, x[events] - xbar[group]


def ph_test(
    risk: RiskSets,
    x: np.ndarray,
    stop: np.ndarray,
    event: np.ndarray,
    phi: np.ndarray,
    cov: np.ndarray,
    *,
    time_transform: str = "rank",
) -> tuple[np.ndarray, np.ndarray]:
    """Grambsch–Therneau proportional-hazards test of each covariate (see `CauseSpecificCox`).

    ``time_transform`` is ``"rank"`` (rank of the event time among the events, ties sharing
    their mean rank) or ``"identity"`` (the time itself). Row weights enter through ``phi``
    (``w · exp(β̂·x)``); the events are counted unweighted (a weighted-sample fit keeps its
    event rows at weight 1). Returns the χ²(1) statistics and
    their p-values, one per column of ``x``.
    """
    t_event, resid = efron_schoenfeld(risk, x, stop, event, phi)
    n_events = t_event.size
    scaled = n_events * resid @ cov
    if time_transform == "rank":
        g = stats.rankdata(t_event)
    elif time_transform == "identity":
        g = t_event.astype(np.float64)
    else:
        raise UsageError(
            f"time_transform was {time_transform!r} but is expected to be 'rank' or 'identity'"
        )
    centred = g - g.mean()
    spread = (centred**2).sum()
    with np.errstate(divide="ignore", invalid="ignore"):
        statistic = (centred @ scaled) ** 2 / (n_events * np.diag(cov) * spread)
    statistic = np.where(np.isfinite(statistic), statistic, np.nan)
    return statistic, stats.chi2.sf(statistic, 1)
