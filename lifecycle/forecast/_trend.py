"""The trend of the uptake rate that a forecast made with held features lacks.

The hazard models forecast months 1..H from features held at their snapshot values (except
tenure, season and `[panel] known_future` schedules), so a level that keeps moving — nearby
adoption spreading, say — is missed, and the forecast falls behind more each month. From
what was observed up to the forecast's start, two slopes of the log monthly uptake rate of a
fixed group of customers as it ages are compared:

    b̂_obs   = slope of ln(uptakes_m / at_risk_m) over the last 24 observed months among the
              customers active and not holding the product at the first of those months
              (at risk: still active, not holding it; `uptake_rate_drift`, Poisson regression
              with the at-risk count as offset and month-of-year terms sin, cos of 2πm/12),
    b̂_model = slope of ln r_t over the forecast months t = 1..H of the model's own forecast
              for today's customers,
              r_t = Σ_i S_i(t−1)·h_i(t) / Σ_i S_i(t−1)   (customers not holding the product;
              S_i(t−1) = Π_{s<t}(1 − h_i(s) − Σ_k h_k,i(s)), exits k competing), by least
              squares on 1, t (and sin, cos of the calendar month when H ≥ 12).

Both follow a fixed group as it ages and thins out (those most inclined take the product up
first), so tenure and selection enter both; what the observed one has beyond the model's is
the calendar drift the held features miss. That part, d = b̂_obs − b̂_model (standard error
se(b̂_obs)), is carried forward: month t's expected uptakes — current customers' and
joiners' — are multiplied by

    g_t = exp(d·(t − 1)),

month 1 being the month the snapshot's features describe. The log-level draws keep their
spread around this path (`level_draws`: ε_b,t = ε_b + δ_b·t, δ_b ~ N(0, b̂² + se²), b̂ the
slope among all customers at risk), so the intervals allow the drift to stop or to double.
A model whose level is off from month 1 is not mended by this (it compares slopes only).
Only months up to the forecast's start enter (no realised value of a forecast month).
``[forecast] level_trend = false`` turns the correction off (g_t = 1).
"""

from __future__ import annotations

import numpy as np

SAMPLE = 5000


def model_rate_slope(
    hazards: np.ndarray, terminal: list[int], j: int, first_month: int, *, seed: int = 0
) -> float:
    """b̂_model of the module docstring from hazards ``(n, T, K)`` of the current customers
    (a seeded sample of at most 5,000 of them); 0 with fewer than 3 months."""
    n, months = hazards.shape[:2]
    if months < 3 or n == 0:
        return 0.0
    rows = np.arange(n)
    if n > SAMPLE:
        rows = np.sort(np.random.default_rng([seed, 16, 7]).choice(n, SAMPLE, replace=False))
    h = np.asarray(hazards[rows], dtype=np.float64)
    mine = h[:, :, j]
    holders = ~(mine > 0.0).any(axis=1)
    h, mine = h[~holders], mine[~holders]
    if len(h) == 0:
        return 0.0
    step = 1.0 - mine - h[:, :, terminal].sum(axis=2)
    alive = np.cumprod(np.clip(step, 0.0, 1.0), axis=1)
    before = np.concatenate([np.ones((len(h), 1)), alive[:, :-1]], axis=1)
    rate = (before * mine).sum(axis=0) / np.maximum(before.sum(axis=0), 1e-300)
    keep = rate > 0.0
    if keep.sum() < 3:
        return 0.0
    t = np.arange(1, months + 1, dtype=np.float64)
    columns = [np.ones(months), t]
    if months >= 12:
        angle = 2.0 * np.pi * (first_month + t - 1.0) / 12.0
        columns += [np.sin(angle), np.cos(angle)]
    x = np.column_stack(columns)[keep]
    beta, *_ = np.linalg.lstsq(x, np.log(rate[keep]), rcond=None)
    return float(beta[1])


def trend_path(observed: float, model: float, horizon: int) -> np.ndarray:
    """ln g_t = (b̂_obs − b̂_model)·(t − 1), t = 1..horizon."""
    return (observed - model) * np.arange(horizon, dtype=np.float64)
