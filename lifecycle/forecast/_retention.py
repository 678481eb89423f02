"""Cohort retention projected with the shifted-beta-geometric (sBG) model.

Fader & Hardie (2007), "How to project customer retention", Journal of Interactive Marketing
21(1): each customer of a cohort leaves at the end of any period with a constant probability θ
(geometric lifetime), and θ varies across customers as Beta(α, β). Then

    P(T = 1) = α / (α + β),    P(T = t) = P(T = t − 1) · (β + t − 2) / (α + β + t − 1),
    S(t) = P(T > t) = B(α, β + t) / B(α, β) = S(t − 1) − P(T = t),

and the retention rate r(t) = S(t)/S(t − 1) = (β + t − 1)/(α + β + t − 1) rises with t, as the
customers most likely to leave go first. Given the counts alive at the start of periods
0..n (n_0 the cohort size), α and β maximise

    ℓ(α, β) = Σ_{t=1..n} (n_{t−1} − n_t) ln P(T = t) + n_n ln S(n)

(the n_n still alive are right-censored).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy import optimize, special

from ..errors import UsageError


@dataclass(frozen=True)
class ShiftedBetaGeometric:
    """A fitted sBG model: ``alpha``, ``beta``, the cohort ``size``, and ``loglik``."""

    alpha: float
    beta: float
    size: float
    loglik: float

    def survival(self, t: int | Sequence[int] | np.ndarray) -> np.ndarray:
        """S(t) = B(α, β + t) / B(α, β): the share of the cohort alive after t periods."""
        ts = np.asarray(t, dtype=np.float64)
        if np.any(ts < 0):
            raise UsageError(f"t must be >= 0; got {ts[ts < 0][:3].tolist()}")
        if np.all(ts == np.round(ts)) and ts.size and ts.max() <= 10_000:
            # the product of retention rates: exact, and stable however large α and β are
            with np.errstate(divide="ignore"):  # α or β of 0: a log of −inf is right
                log_ab = np.log(self.alpha), np.log(self.beta)
            log_s, _ = _log_terms(*log_ab, int(ts.max()))
            out = np.exp(log_s[ts.astype(np.int64)])
        else:
            out = np.exp(
                special.betaln(self.alpha, self.beta + ts) - special.betaln(self.alpha, self.beta)
            )
        return out if out.ndim else out[()]

    def retention(self, t: int | Sequence[int] | np.ndarray) -> np.ndarray:
        """r(t) = S(t) / S(t − 1) = (β + t − 1) / (α + β + t − 1), for t >= 1."""
        ts = np.asarray(t, dtype=np.float64)
        return (self.beta + ts - 1.0) / (self.alpha + self.beta + ts - 1.0)

    def expected_alive(self, t: int | Sequence[int] | np.ndarray) -> np.ndarray:
        """Expected customers alive after t periods: size · S(t)."""
        return self.size * self.survival(t)


def fit_shifted_beta_geometric(alive: Sequence[float] | np.ndarray) -> ShiftedBetaGeometric:
    """Fit the sBG model to a cohort's counts alive at the start of each period.

    Parameters
    ----------
    alive
        n_0, n_1, …, n_n: customers alive at the start of periods 0..n, the first the cohort
        size; non-increasing, at least two values.

    Returns
    -------
    ShiftedBetaGeometric
        With ``alpha``, ``beta`` and ``survival(t)``.
    """
    n = np.asarray(alive, dtype=np.float64)
    if n.ndim != 1 or n.size < 2:
        raise UsageError(f"alive needs at least two counts (cohort size first); got {n.tolist()}")
    if not np.all(np.isfinite(n)) or n[0] <= 0 or np.any(n < 0) or np.any(np.diff(n) > 0):
        raise UsageError(
            f"alive was {n.tolist()[:8]} but must be non-negative counts that never rise, "
            "the first (the cohort size) above 0"
        )
    lost = -np.diff(n)
    periods = np.arange(1, n.size)

    def nll(log_ab: np.ndarray) -> float:
        # Through the recursion above rather than differences of log-beta functions, which
        # lose every digit once α and β are large (a cohort with little heterogeneity).
        log_s, log_leave = _log_terms(log_ab[0], log_ab[1], int(periods[-1]))
        log_p = log_s[periods - 1] + log_leave[periods - 1]
        return -float(np.sum(lost * log_p) + n[-1] * log_s[-1])

    best = None
    for start in ((0.0, 0.0), (-1.0, 1.0), (1.0, 2.0)):
        options = {"xatol": 1e-10, "fatol": 1e-12, "maxiter": 20_000}
        found = optimize.minimize(nll, np.array(start), method="Nelder-Mead", options=options)
        if best is None or found.fun < best.fun:
            best = found
    a, b = np.exp(np.clip(best.x, -700.0, 700.0))  # finite and above 0 in float64
    return ShiftedBetaGeometric(alpha=float(a), beta=float(b), size=float(n[0]), loglik=-best.fun)


def _log_terms(log_alpha: float, log_beta: float, periods: int) -> tuple[np.ndarray, np.ndarray]:
    """ln S(t) for t = 0..periods, and ln(1 − r(t + 1)) for t = 0..periods − 1, from ln α, ln β.

    r(i + 1) = (β + i)/(α + β + i), so ln r(i + 1) = −ln(1 + e^{ln α − ln(β + i)}) and
    ln(1 − r(i + 1)) = −ln(1 + e^{ln(β + i) − ln α}); ln S(t) = Σ_{i<t} ln r(i + 1). Written
    with ``logaddexp`` so that no step overflows, underflows or cancels for any α, β.
    """
    i = np.arange(1, periods, dtype=np.float64)
    log_b_i = np.r_[log_beta, np.logaddexp(log_beta, np.log(i))][:periods]
    log_r = -np.logaddexp(0.0, log_alpha - log_b_i)
    log_leave = -np.logaddexp(0.0, log_b_i - log_alpha)
    return np.r_[0.0, np.cumsum(log_r)], log_leave
