"""Launches without history: the Bass (1969) diffusion model.

Bass, F. M. (1969), "A new product growth for model consumer durables", Management Science
15(5): among a market of m eventual adopters, the share F(t) that has adopted by time t obeys
dF/dt = (p + q·F)(1 − F), p the coefficient of innovation, q that of imitation, so that

    F(t) = (1 − e^{−(p+q)t}) / (1 + (q/p)·e^{−(p+q)t}),

and adoptions peak at t* = ln(q/p)/(p + q) (when q > p; else at the launch). In month k after
a launch (k = 1 is the launch month) the expected adopters are m·(F(k) − F(k − 1)).

A launch forecast takes p, q and the market share from a comparable past product in the data
(`fit_bass` on its monthly uptakes since its first, as shares of the customers), or from
``[forecast.launch]``. The imitation is local: each area's q_a is fitted with p held at the
portfolio's, shrunk towards the portfolio's q by its adopters (weight n_a/(n_a + 50)), since
imitation works through neighbours who already hold the product. An area's adopters in month k
are Binomial(N_a, s·(F_a(k) − F_a(k − 1))) with N_a its customers today and s the market share
(by month k: s·F_a(k)); the intervals are those quantiles (outcome noise only).

Settings (all optional; used when no comparable product is named)::

    [forecast.launch]
    innovation = 0.01          # p, per month, > 0
    imitation = 0.2            # q, per month, >= 0
    market_share = 0.3         # share of customers who eventually take it up, in (0, 1]
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import optimize, stats

from .._months import format_month
from ..config import Config
from ..errors import UsageError

log = logging.getLogger(__name__)

LOCAL_SHRINK = 50.0
"""Adopters at which an area's own imitation coefficient gets half the weight."""


def bass_cumulative(t: float | np.ndarray, p: float, q: float) -> np.ndarray:
    """F(t) = (1 − e^{−(p+q)t}) / (1 + (q/p)·e^{−(p+q)t}), the share adopted by time t."""
    t = np.asarray(t, dtype=np.float64)
    e = np.exp(-(p + q) * t)
    return (1.0 - e) / (1.0 + (q / p) * e)


def bass_peak_time(p: float, q: float) -> float:
    """t* = ln(q/p)/(p + q): when adoptions peak (0 when q <= p: they fall from the launch)."""
    return math.log(q / p) / (p + q) if q > p else 0.0


@dataclass(frozen=True)
class BassFit:
    """Bass coefficients: ``p`` (innovation), ``q`` (imitation) per month, and ``m`` (the
    eventual adopters, or their share when fitted to shares)."""

    p: float
    q: float
    m: float

    def adopters(self, months: int) -> np.ndarray:
        """Expected adopters in months 1..months after the launch: m·(F(k) − F(k − 1))."""
        return self.m * np.diff(bass_cumulative(np.arange(months + 1), self.p, self.q))


def fit_bass(adopters: np.ndarray, *, m: float | None = None) -> BassFit:
    """Fit p, q (and m unless given) to adopters per month since the launch by least squares
    on m·(F(k) − F(k − 1)) (the form Bass 1969 fitted)."""
    y = np.asarray(adopters, dtype=np.float64)
    if y.ndim != 1 or y.size < 3 or np.any(y < 0) or y.sum() <= 0:
        raise UsageError(
            f"fit_bass needs at least 3 months of adopter counts >= 0, some above 0; got {y[:6]}"
        )
    k = np.arange(y.size + 1)
    total = y.sum()

    def residuals(theta: np.ndarray) -> np.ndarray:
        p, q = np.exp(theta[:2])
        mm = m if m is not None else np.exp(theta[2])
        return mm * np.diff(bass_cumulative(k, p, q)) - y

    best = None
    for p0, q0 in ((0.01, 0.1), (0.003, 0.3), (0.05, 0.05)):
        start = [math.log(p0), math.log(q0)] + ([] if m is not None else [math.log(total * 1.5)])
        found = optimize.least_squares(residuals, np.array(start), method="lm", xtol=1e-12)
        if best is None or found.cost < best.cost:
            best = found
    p, q = np.exp(best.x[:2])
    return BassFit(float(p), float(q), float(m if m is not None else np.exp(best.x[2])))


def _fit_local(
    counts: np.ndarray, sizes: np.ndarray, pooled: BassFit
) -> tuple[float, float, np.ndarray]:
    """Common p and market share, one q per area: least squares over every area's monthly
    adopters ``counts`` ``(A, months)`` with ``sizes`` customers each, then each q_a shrunk
    towards the pooled q by its adopters (weight n_a/(n_a + `LOCAL_SHRINK`))."""
    k = np.arange(counts.shape[1] + 1)

    def residuals(theta: np.ndarray) -> np.ndarray:
        p, share = math.exp(theta[0]), math.exp(theta[1])
        qs = np.exp(theta[2:])
        grid = np.diff(bass_cumulative(k[None, :], p, qs[:, None]), axis=1)
        return (share * sizes[:, None] * grid - counts).ravel()

    start = np.concatenate(
        [[math.log(pooled.p), math.log(pooled.m)], np.full(len(sizes), math.log(pooled.q))]
    )
    found = optimize.least_squares(residuals, start, method="trf", xtol=1e-10)
    p, share = math.exp(found.x[0]), min(math.exp(found.x[1]), 1.0)
    w = counts.sum(axis=1) / (counts.sum(axis=1) + LOCAL_SHRINK)
    qs = np.exp(w * found.x[2:] + (1.0 - w) * math.log(max(pooled.q, 1e-12)))
    return p, share, qs


def launch_settings(config: Config) -> BassFit | None:
    """``[forecast.launch]`` as a `BassFit` (``m`` the market share), or ``None`` if absent."""
    raw = config.raw.get("forecast", {}).get("launch")
    if raw is None:
        return None
    src = str(config.source) if config.source else "config"
    allowed = ["imitation", "innovation", "market_share"]
    if not isinstance(raw, dict) or sorted(raw) != allowed:
        raise UsageError(f"{src}: [forecast.launch] needs exactly the settings {allowed}")
    p, q, s = (raw["innovation"], raw["imitation"], raw["market_share"])
    ok = all(isinstance(v, int | float) and not isinstance(v, bool) for v in (p, q, s))
    if not ok or not (p > 0 and q >= 0 and 0 < s <= 1):
        raise UsageError(
            f"{src}: [forecast.launch] was innovation={p!r}, imitation={q!r}, "
            f"market_share={s!r}; expected innovation > 0, imitation >= 0, market_share in (0, 1]"
        )
    return BassFit(float(p), float(q), float(s))


def launch_forecast(
    tables,
    customer_areas: pd.Series,
    *,
    launch_month: int,
    horizon: int,
    name: str,
    comparable: str | None = None,
    settings: BassFit | None = None,
    levels: tuple[float, ...] = (0.9,),
) -> pd.DataFrame:
    """Expected adopters of a product launched in ``launch_month``, by area and in total.

    Coefficients from ``comparable`` (a product in ``tables.uptakes``), else ``settings``
    (see the module docstring). Columns as `forecast_uptake`'s: ``month``, ``area_id``,
    ``product``, ``expected``, ``lower_<L>``, ``upper_<L>``, ``cumulative_*``.
    """
    from ._uptake import level_suffix

    customers = tables.customers
    ends = customers["end"].to_numpy()
    active = np.isnan(ends) | (ends > tables.extract_month)
    ids = customers["customer_id"].to_numpy()[active]
    labels = customer_areas.reindex(ids).astype(str).to_numpy(dtype=object)
    areas = sorted(set(labels))
    if comparable is not None:
        fit, local = _from_comparable(tables, customer_areas, comparable, areas)
    elif settings is not None:
        fit, local = settings, dict.fromkeys(areas, settings.q)
    else:
        raise UsageError(
            "a launch forecast needs a comparable product (--comparable) or [forecast.launch] "
            "innovation, imitation and market_share"
        )
    k = np.arange(horizon + 1)
    months = [format_month(launch_month + i) for i in range(horizon)]
    groups = [("all", labels == labels)] + [(a, labels == a) for a in areas]
    parts = []
    for area, mask in groups:
        n = int(mask.sum())
        if area == "all":
            cum_share = sum(
                (labels == a).sum() * bass_cumulative(k, fit.p, local[a]) for a in areas
            ) / max(n, 1)
        else:
            cum_share = bass_cumulative(k, fit.p, local[area])
        cum = fit.m * cum_share[1:]
        monthly = np.diff(fit.m * cum_share)
        frame = {"month": months, "area_id": area, "product": name}
        for prefix, prob in (("", monthly), ("cumulative_", cum)):
            frame[f"{prefix}expected"] = n * prob
            for level in levels:
                lo, hi = stats.binom.ppf([(1 - level) / 2, (1 + level) / 2], n, prob[:, None]).T
                frame[f"{prefix}lower_{level_suffix(level)}"] = lo.astype(np.int64)
                frame[f"{prefix}upper_{level_suffix(level)}"] = hi.astype(np.int64)
        parts.append(pd.DataFrame(frame))
    log.info(
        "launch of %s in %s: p=%.4f, q=%.4f, market share %.3f, peak after %.1f months",
        name, months[0], fit.p, fit.q, fit.m, bass_peak_time(fit.p, fit.q),
    )  # fmt: skip
    return pd.concat(parts, ignore_index=True)


def _from_comparable(tables, customer_areas, product: str, areas: list[str]):
    up = tables.uptakes[tables.uptakes["product"] == product]
    if up.empty:
        raise UsageError(
            f"comparable product {product!r} has no uptakes; products in the data: "
            f"{list(tables.products)}"
        )
    first = int(up["month"].min())
    span = tables.extract_month - first + 1
    counts = np.bincount(up["month"].to_numpy() - first, minlength=span).astype(np.float64)
    customers = tables.customers
    alive = customers["start"].to_numpy() <= first
    ended = customers["end"].to_numpy()
    alive &= ~(ended < first)
    base = max(int(alive.sum()), 1)
    fit = fit_bass(counts / base)
    if fit.m > 1.0:
        fit = fit_bass(counts / base, m=1.0)
    by_area = customer_areas.reindex(up["customer_id"].to_numpy()).astype(str).to_numpy(object)
    area_base = customer_areas.reindex(customers["customer_id"].to_numpy()[alive]).astype(str)
    sizes = np.array([max(int((area_base == a).sum()), 1) for a in areas], dtype=np.float64)
    grid = np.stack(
        [np.bincount(up["month"].to_numpy()[by_area == a] - first, minlength=span) for a in areas]
    ).astype(np.float64)
    p, share, qs = _fit_local(grid, sizes, fit)
    return BassFit(p, fit.q, share), dict(zip(areas, qs.tolist(), strict=True))
