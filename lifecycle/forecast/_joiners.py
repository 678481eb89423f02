"""Customers who have not joined yet: how many join each month, by area, and how many of them
take each product up within the forecast horizon.

Joiner counts. The number of customers starting in month m in area a is negative binomial
(NB2, `fit_negative_binomial`) with

    ln μ_{a,m} = β_a + γ_{moy(m)} + δ·(m − as_of)/12

(γ_January = 0; month-of-year terms only when at least 24 months are fitted; the trend δ per
year, common to all areas, only with ``trend`` and at least 12 months)

fitted on the last ``months`` months up to ``as_of`` (from the first month whose leavers the
customers table lists, since an export usually omits customers who left before it begins).
An area without a single joiner in those months is expected to have none.

Their uptake. A customer who joins in forecast month s is at tenure 0 in month s. Its monthly
uptake probability k months after joining, m_a(k) (k = 1 is the month it joins), is the mean
over template customers of the area — customers who joined in the last 12 months, as they
stand at the forecast's start, with tenure set to 0 and no product held — of the model's
uptake incidence (exits compete). Joiners of month s thinned by uptake probability q are NB2
with mean μ_s·q and the same α, so the joiners' uptakes in month t (or by month t, with the
cumulative F_a) have

    mean Σ_{s≤t} μ_s·q_{t−s+1},   variance Σ_{s≤t} (μ_s·q_{t−s+1} + α·μ_s²·q_{t−s+1}²),

joiners of different months being independent. The calendar month changes the templates'
season terms only through the month the forecast starts (one curve for all arrival months).
"""

from __future__ import annotations

import logging
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..errors import UsageError
from ._counts import CountFit, fit_negative_binomial

log = logging.getLogger(__name__)

ALL_AREAS = "all"
DEFAULT_JOINER_MONTHS = 36
TEMPLATE_TENURE = 12
MAX_TEMPLATES = 5000


@dataclass(frozen=True)
class JoinerCounts:
    """Fitted monthly joiner counts by area (see the module docstring).

    Attributes
    ----------
    areas
        Every area label; ``fitted`` marks those with at least one joiner in the window.
    fit
        The NB2 regression (area dummies of the fitted areas, then 11 month-of-year dummies
        when ``season``).
    window
        First and last month index fitted.
    """

    areas: tuple[str, ...]
    fitted: tuple[bool, ...]
    season: bool
    fit: CountFit | None
    window: tuple[int, int]
    trend: bool = False

    def design(self, months: np.ndarray) -> np.ndarray:
        """Design ``(A_fitted · len(months), p)``: area-major rows of the fitted areas."""
        n_areas = sum(self.fitted)
        months = np.asarray(months, dtype=np.int64)
        area = np.repeat(np.arange(n_areas), months.size)
        month = np.tile(months, n_areas)
        width = n_areas + (11 if self.season else 0) + (1 if self.trend else 0)
        x = np.zeros((area.size, width))
        x[np.arange(area.size), area] = 1.0
        if self.season:
            moy = month % 12
            rows = np.flatnonzero(moy > 0)
            x[rows, n_areas + moy[rows] - 1] = 1.0
        if self.trend:
            x[:, -1] = (month - self.window[1]) / 12.0
        return x

    def expected(self, months: np.ndarray, params: np.ndarray | None = None) -> np.ndarray:
        """Expected joiners ``(len(areas), len(months))`` in the calendar ``months``."""
        months = np.asarray(months, dtype=np.int64)
        out = np.zeros((len(self.areas), months.size))
        if self.fit is not None:
            mu = self.fit.mean(self.design(months), params)
            out[np.asarray(self.fitted)] = mu.reshape(-1, months.size)
        return out

    def expected_draws(self, months: np.ndarray, draws: int, seed: int) -> np.ndarray:
        """Expected joiners ``(draws, areas, months)`` at coefficients drawn from N(β̂, V)."""
        months = np.asarray(months, dtype=np.int64)
        if self.fit is None:
            return np.zeros((draws, len(self.areas), months.size))
        rng = np.random.default_rng([seed, 16, 1])
        chol = np.linalg.cholesky(self.fit.cov + 1e-12 * np.eye(len(self.fit.params)))
        betas = self.fit.params + rng.standard_normal((draws, len(self.fit.params))) @ chol.T
        return np.stack([self.expected(months, b) for b in betas])


def fit_joiner_counts(
    starts: np.ndarray,
    areas: Sequence[object] | np.ndarray,
    as_of: int,
    *,
    all_areas: Sequence[object] | None = None,
    months: int = DEFAULT_JOINER_MONTHS,
    first_complete: int | None = None,
    trend: bool = True,
) -> JoinerCounts:
    """Fit the monthly joiner counts by area up to ``as_of`` (see the module docstring).

    Parameters
    ----------
    starts
        Start month index of every customer in the customers table.
    areas
        Area of each customer (same order).
    as_of
        The last month fitted.
    all_areas
        Every area that may receive joiners (default: those in ``areas``).
    months
        Months fitted, ending at ``as_of``.
    first_complete
        The first month whose joiners are all listed (default: no limit).
    trend
        Fit a common log-linear trend (with at least 12 months).
    """
    starts = np.asarray(starts, dtype=np.int64)
    labels = pd.Series(np.asarray(areas, dtype=object)).astype(str).to_numpy(dtype=object)
    names = sorted({str(a) for a in (all_areas if all_areas is not None else labels)})
    first = as_of - months + 1
    if first_complete is not None:
        first = max(first, int(first_complete))
    if first > as_of:
        raise UsageError(f"joiners: no complete month to fit before {as_of}")
    window = np.arange(first, as_of + 1)
    keep = (starts >= first) & (starts <= as_of)
    codes = pd.Index(names).get_indexer(labels[keep])
    if (codes < 0).any():
        raise UsageError("joiners: customers in areas not among all_areas")
    counts = np.zeros((len(names), window.size))
    np.add.at(counts, (codes, starts[keep] - first), 1.0)
    fitted = counts.sum(axis=1) > 0
    season = window.size >= 24
    model = JoinerCounts(
        tuple(names), tuple(bool(f) for f in fitted), season, None, (first, as_of),
        trend=bool(trend and window.size >= 12),
    )  # fmt: skip
    if not fitted.any():
        log.info("joiners: nobody joined in the %d months fitted; none expected", window.size)
        return model
    x = model.design(window)
    fit = fit_negative_binomial(x, counts[fitted].reshape(-1))
    log.info(
        "joiners: %d joined in %d months over %d areas; NB2 dispersion %.3f",
        int(counts.sum()), window.size, int(fitted.sum()), fit.alpha,
    )  # fmt: skip
    return JoinerCounts(model.areas, model.fitted, season, fit, model.window, model.trend)


@dataclass(frozen=True)
class JoinerPart:
    """One product and area: joiners' uptakes per month (row 0) and by month (row 1).

    ``mean`` and ``var`` are ``(2, H)``; ``draws`` ``(B, 2, H)`` the means at drawn joiner-count
    coefficients (``None`` without draws)."""

    mean: np.ndarray
    var: np.ndarray
    draws: np.ndarray | None


def joiner_uptake(
    counts: JoinerCounts,
    curves: Mapping[str, Mapping[str, np.ndarray]],
    start_month: int,
    horizon: int,
    *,
    draws: int = 0,
    seed: int = 0,
) -> dict[tuple[str, str], JoinerPart]:
    """Joiners' expected uptakes by product and area (and the total, ``"all"``).

    ``curves[product][area]`` is m_a(k), k = 1..horizon (monthly uptake probability after
    joining); an area without its own curve takes ``curves[product]["all"]``.
    """
    months = start_month + np.arange(horizon)
    mu = counts.expected(months)
    mu_draws = counts.expected_draws(months, draws, seed) if draws else None
    alpha = counts.fit.alpha if counts.fit is not None else 0.0
    # lag[t, s] = t − s for s ≤ t: joiners of month s seen in month t
    lag = np.arange(horizon)[:, None] - np.arange(horizon)[None, :]
    valid = lag >= 0
    out: dict[tuple[str, str], JoinerPart] = {}
    for product, by_area in curves.items():
        totals = [np.zeros((2, horizon)), np.zeros((2, horizon))]
        total_draws = np.zeros((draws, 2, horizon)) if draws else None
        for a, area in enumerate(counts.areas):
            curve = np.asarray(by_area.get(area, by_area[ALL_AREAS]), dtype=np.float64)[:horizon]
            q = np.stack([curve, np.cumsum(curve)])  # (2, H)
            weights = np.where(valid[None], q[:, np.clip(lag, 0, None)], 0.0)  # (2, t, s)
            mean = weights @ mu[a]
            var = weights @ mu[a] + alpha * (weights**2) @ (mu[a] ** 2)
            part_draws = None
            if mu_draws is not None:
                part_draws = np.einsum("kts,bs->bkt", weights, mu_draws[:, a])
                total_draws += part_draws
            out[(product, area)] = JoinerPart(mean, var, part_draws)
            totals[0] += mean
            totals[1] += var
        out[(product, ALL_AREAS)] = JoinerPart(totals[0], totals[1], total_draws)
    return out


def template_rows(snapshot: pd.DataFrame, *, seed: int = 0) -> np.ndarray:
    """Positions of the template customers in ``snapshot``: those who joined in the last
    `TEMPLATE_TENURE` months (everyone when nobody did), at most `MAX_TEMPLATES` (a seeded
    sample, kept in snapshot order)."""
    tenure = snapshot["tenure_start"].to_numpy()
    rows = np.flatnonzero(tenure <= TEMPLATE_TENURE)
    if rows.size == 0:
        rows = np.arange(len(snapshot))
    if rows.size > MAX_TEMPLATES:
        rng = np.random.default_rng([seed, 16, 2])
        rows = np.sort(rng.choice(rows, size=MAX_TEMPLATES, replace=False))
    return rows


def as_joiners(templates: pd.DataFrame) -> pd.DataFrame:
    """Template rows as customers who join in the first forecast month: tenure 0, no product."""
    out = templates.copy()
    out["tenure_start"] = np.zeros(len(out), dtype=out["tenure_start"].dtype)
    if "tenure_stop" in out:
        out["tenure_stop"] = np.ones(len(out), dtype=out["tenure_stop"].dtype)
    for column in out.columns:
        if column.startswith("holds_"):
            out[column] = np.zeros(len(out), dtype=out[column].dtype)
    return out.reset_index(drop=True)


def level_draws(
    events: Mapping[str, float],
    draws: int,
    seed: int,
    *,
    drift: Mapping[str, tuple[float, float]] | None = None,
    horizon: int = 1,
) -> dict[str, np.ndarray]:
    """Log-level draws ε_b,t of each product's uptake hazard in forecast months t = 1..horizon,
    ``(draws, horizon)`` (``{}`` without draws):

        ε_b,t = ε_b + δ_b·t,   ε_b ~ N(0, 1/D),   δ_b ~ N(0, b̂² + se(b̂)²).

    1/D is the variance of the hazard's overall level estimated from D uptake events (as for a
    Poisson rate); δ is a drift of the level during the horizon, as fast as the product's
    observed uptake rate moved per month lately (b̂, from `uptake_rate_drift`, with month-of-year
    terms in the forecast), either way: covariates are held at their values at the start of
    the forecast, so a level that keeps moving (e.g. as neighbours adopt) is something the
    models do not know. The draws spread around the forecast's path, which carries the part of
    that trend the models lack when ``[forecast] level_trend`` is on
    (`lifecycle.forecast._trend`)."""
    if not draws:
        return {}
    out = {}
    t = np.arange(1, horizon + 1, dtype=np.float64)
    for i, (product, d) in enumerate(sorted(events.items())):
        rng = np.random.default_rng([seed, 16, 3, i])
        sd = 1.0 / np.sqrt(max(float(d), 1.0))
        level = sd * rng.standard_normal(draws)
        slope, se = (drift or {}).get(product, (0.0, 0.0))
        step = np.hypot(slope, se) * rng.standard_normal(draws)
        out[product] = level[:, None] + step[:, None] * t[None, :]
    return out


def uptake_rate_drift(
    starts: np.ndarray,
    ends: np.ndarray,
    taken: np.ndarray,
    as_of: int,
    months: int = 24,
    *,
    season: bool = False,
) -> tuple[float, float]:
    """Slope b̂ (per month) of the log monthly uptake rate over the last ``months`` months up
    to ``as_of``, and its standard error: Poisson regression of the month's uptakes on
    a + b·(m − as_of) (with ``season``, plus c·sin(2πm/12) + e·cos(2πm/12), so that a season
    does not pass for a trend) with the log of the customers at risk (active, not holding the
    product) as offset.

    ``starts``, ``ends`` (NaN while active) and ``taken`` (uptake month, NaN if never) are per
    customer."""
    m = np.arange(as_of - months + 1, as_of + 1)
    starts = np.asarray(starts, dtype=np.float64)[:, None]
    ends = np.nan_to_num(np.asarray(ends, dtype=np.float64), nan=np.inf)[:, None]
    taken = np.nan_to_num(np.asarray(taken, dtype=np.float64), nan=np.inf)[:, None]
    active = (starts <= m) & (ends >= m)
    at_risk = (active & (taken >= m)).sum(axis=0).astype(np.float64)
    events = (active & (taken == m)).sum(axis=0).astype(np.float64)
    keep = at_risk > 0
    if keep.sum() < 3 or events[keep].sum() < 1:
        return 0.0, 0.0
    columns = [np.ones(keep.sum()), (m[keep] - as_of).astype(np.float64)]
    if season and keep.sum() >= 6:
        angle = 2.0 * np.pi * m[keep] / 12.0
        columns += [np.sin(angle), np.cos(angle)]
    x = np.column_stack(columns)
    offset = np.log(at_risk[keep])
    y = events[keep]
    beta = np.zeros(x.shape[1])
    beta[0] = np.log(y.sum() / at_risk[keep].sum())
    for _ in range(50):
        mu = np.exp(offset + x @ beta)
        info = (x * mu[:, None]).T @ x
        step = np.linalg.solve(info, x.T @ (y - mu))
        beta += step
        if np.max(np.abs(step)) < 1e-12:
            break
    mu = np.exp(offset + x @ beta)
    cov = np.linalg.inv((x * mu[:, None]).T @ x)
    return float(beta[1]), float(np.sqrt(cov[1, 1]))
