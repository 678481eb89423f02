"""Negative-binomial (NB2) regression of counts: the monthly number of customers who join.

With log link and NB2 variance,

    E[y_i] = μ_i = exp(x_iᵀβ),   Var[y_i] = μ_i + α·μ_i²,

the log-likelihood is

    ℓ(β, α) = Σ_i [ lnΓ(y_i + 1/α) − lnΓ(1/α) − ln y_i! + (1/α)·ln(1/(1 + αμ_i))
                    + y_i·ln(αμ_i/(1 + αμ_i)) ].

β is found by iteratively reweighted least squares at a given α (weights μ/(1 + αμ), working
response η + (y − μ)/μ), and α by maximising the profile likelihood ℓ(β̂(α), α) over ln α.
The covariance of β̂ is the inverse expected information (Xᵀ W X)⁻¹ with W = diag(μ/(1 + αμ))
(β̂ and α̂ are asymptotically uncorrelated). These are the estimates of statsmodels'
``NegativeBinomial`` (NB2) and ``GLM(family=NegativeBinomial(alpha=α̂))`` (tested).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import optimize, special

from ..errors import UsageError

_MIN_LOG_ALPHA = -12.0
_MAX_LOG_ALPHA = 4.0


@dataclass(frozen=True)
class CountFit:
    """A fitted NB2 regression: coefficients ``params``, their covariance ``cov``, the
    dispersion ``alpha`` (Var = μ + α·μ²) and the maximised log-likelihood ``loglik``."""

    params: np.ndarray
    cov: np.ndarray
    alpha: float
    loglik: float

    def mean(self, x: np.ndarray, params: np.ndarray | None = None) -> np.ndarray:
        """μ = exp(x β) for the rows of ``x`` (at ``params``, default the estimates)."""
        beta = self.params if params is None else params
        return np.exp(np.clip(x @ beta, -700.0, 700.0))


def fit_negative_binomial(x: np.ndarray, y: np.ndarray, *, max_iter: int = 100) -> CountFit:
    """Maximum-likelihood NB2 regression of counts ``y`` on the design ``x`` (log link).

    Parameters
    ----------
    x
        ``(n, p)`` design of full column rank (include a constant or dummies yourself).
    y
        ``(n,)`` non-negative whole counts.

    Returns
    -------
    CountFit
    """
    # small products of matrices: one BLAS thread is faster than several on a busy machine
    # (threadpoolctl comes with scikit-learn)
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=1, user_api="blas"):
        return _fit(x, y, max_iter)


def _fit(x: np.ndarray, y: np.ndarray, max_iter: int) -> CountFit:
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    if x.ndim != 2 or y.shape != (x.shape[0],):
        raise UsageError(f"counts: x has shape {x.shape} but y has shape {y.shape}")
    if (y < 0).any() or not np.all(np.isfinite(y)) or np.any(y != np.round(y)):
        raise UsageError("counts: y must be whole numbers >= 0")
    if np.linalg.matrix_rank(x.T @ x) < x.shape[1]:
        raise UsageError(f"counts: the design of {x.shape[1]} columns is not of full rank")
    start = np.linalg.lstsq(x, np.log(y + 0.5), rcond=None)[0]
    state = {"beta": start}

    def profile(log_alpha: float) -> float:
        state["beta"] = _irls(x, y, float(np.exp(log_alpha)), state["beta"], max_iter)
        return -_loglik(x, y, state["beta"], float(np.exp(log_alpha)))

    found = optimize.minimize_scalar(
        profile, bounds=(_MIN_LOG_ALPHA, _MAX_LOG_ALPHA), method="bounded",
        options={"xatol": 1e-7},
    )  # fmt: skip
    alpha = float(np.exp(found.x))
    beta = _irls(x, y, alpha, state["beta"], max_iter)
    mu = np.exp(x @ beta)
    info = x.T @ (x * (mu / (1.0 + alpha * mu))[:, None])
    return CountFit(
        params=beta, cov=np.linalg.inv(info), alpha=alpha, loglik=_loglik(x, y, beta, alpha)
    )


def _irls(x: np.ndarray, y: np.ndarray, alpha: float, beta: np.ndarray, max_iter: int):
    beta = beta.copy()
    for _ in range(max_iter):
        eta = np.clip(x @ beta, -50.0, 50.0)
        mu = np.exp(eta)
        w = mu / (1.0 + alpha * mu)
        z = eta + (y - mu) / mu
        xw = x * w[:, None]
        new = np.linalg.solve(x.T @ xw, xw.T @ z)
        done = np.max(np.abs(new - beta)) < 1e-10
        beta = new
        if done:
            break
    return beta


def _loglik(x: np.ndarray, y: np.ndarray, beta: np.ndarray, alpha: float) -> float:
    mu = np.exp(np.clip(x @ beta, -50.0, 50.0))
    r = 1.0 / alpha
    return float(
        np.sum(
            special.gammaln(y + r)
            - special.gammaln(r)
            - special.gammaln(y + 1.0)
            - r * np.log1p(alpha * mu)
            + y * (np.log(alpha * mu) - np.log1p(alpha * mu))
        )
    )
