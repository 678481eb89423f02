"""Uptake forecast: how many current customers will take each product up, month by month.

Settings in ``lifecycle.toml`` (all optional; ``lifecycle settings`` prints every setting)::

    [forecast]
    horizon_months = 12        # months forecast, whole number in [1, 120] (6–24 is typical)
    levels = [0.9]             # prediction-interval levels, each in (0, 1); columns are named
                               # lower_<100·level>, upper_<100·level> (0.9 → lower_90)
    method = "auto"            # auto | exact | rna: how the Poisson-binomial is computed
    exact_max = 20000          # auto computes groups up to this size exactly
    joiners = true             # add the uptakes of customers who join during the horizon
    joiner_months = 36         # months of joiner counts fitted, whole number in [1, 240]
    joiner_trend = true        # joiner counts with a log-linear trend (with >= 12 months)
    draws = 200                # draws of what is not known about the models (hazard level,
                               # joiner counts) mixed into the intervals; 0: outcome noise only
    seed = 0                   # seed of those draws
    level_trend = true         # carry the recent trend of the uptake rate that the models'
                               # held features lack (lifecycle.forecast._trend)

    [forecast.launch]          # a launch without history (see lifecycle.forecast._bass)
"""

from __future__ import annotations

import logging
import math
import numbers
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from .._layout import UPTAKE_PREFIX
from .._months import format_month, parse_month
from ..config import Config
from ..errors import UsageError
from ..models import uptake_incidence
from ..value import HazardInput, check_horizon, read_hazards
from ._intervals import combined_quantiles
from ._joiners import JoinerPart
from ._poisson_binomial import EXACT_MAX, METHODS, _method, grid_cdf, mixture_quantiles

log = logging.getLogger(__name__)

ALL_AREAS = "all"
DEFAULT_HORIZON_MONTHS = 12
MAX_HORIZON_MONTHS = 120


@dataclass(frozen=True)
class ForecastSettings:
    """The ``[forecast]`` section (see the module docstring)."""

    horizon_months: int = DEFAULT_HORIZON_MONTHS
    levels: tuple[float, ...] = (0.9,)
    method: str = "auto"
    exact_max: int = EXACT_MAX
    joiners: bool = True
    joiner_months: int = 36
    joiner_trend: bool = True
    draws: int = 200
    seed: int = 0
    level_trend: bool = True


def forecast_settings(config: Config) -> ForecastSettings:
    """Read and check the ``[forecast]`` section of a config (defaults where it is silent)."""
    src = str(config.source) if config.source else "config"
    raw = config.raw.get("forecast", {})
    if not isinstance(raw, dict):
        raise UsageError(f"{src}: [forecast] must be a table of settings")
    allowed = [
        "draws", "exact_max", "horizon_months", "joiner_months", "joiner_trend", "joiners",
        "launch", "level_trend", "levels", "method", "seed",
    ]  # fmt: skip
    unknown = sorted(set(raw) - set(allowed))
    if unknown:
        raise UsageError(
            f"{src}: [forecast] has unknown setting(s) {unknown}; allowed are {allowed}"
        )
    horizon = raw.get("horizon_months", DEFAULT_HORIZON_MONTHS)
    if not _whole(horizon) or not 1 <= horizon <= MAX_HORIZON_MONTHS:
        raise UsageError(
            f"{src}: [forecast] horizon_months was {horizon!r} but is expected to be a whole "
            f"number in [1, {MAX_HORIZON_MONTHS}]"
        )
    levels = raw.get("levels", [0.9])
    method = raw.get("method", "auto")
    if method not in METHODS:
        raise UsageError(
            f"{src}: [forecast] method was {method!r} but is expected to be in {list(METHODS)}"
        )
    exact_max = raw.get("exact_max", EXACT_MAX)
    if not _whole(exact_max) or exact_max < 0:
        raise UsageError(
            f"{src}: [forecast] exact_max was {exact_max!r} but is expected to be a whole "
            "number >= 0"
        )
    flags = {}
    for key in ("joiners", "joiner_trend", "level_trend"):
        flags[key] = raw.get(key, True)
        if not isinstance(flags[key], bool):
            raise UsageError(
                f"{src}: [forecast] {key} was {flags[key]!r} but is expected true or false"
            )
    whole = {"joiner_months": (36, 1, 240), "draws": (200, 0, 10_000), "seed": (0, 0, 2**32 - 1)}
    numbers_ = {}
    for key, (default, lo, hi) in whole.items():
        value = raw.get(key, default)
        if not _whole(value) or not lo <= value <= hi:
            raise UsageError(
                f"{src}: [forecast] {key} was {value!r} but is expected to be a whole number in "
                f"[{lo}, {hi}]"
            )
        numbers_[key] = int(value)
    return ForecastSettings(
        **flags,
        **numbers_,
        horizon_months=int(horizon),
        levels=_levels(levels, f"{src}: [forecast] levels"),
        method=method,
        exact_max=int(exact_max),
    )


def forecast_uptake(
    hazards: np.ndarray | pd.DataFrame,
    causes: Sequence[str] | None = None,
    *,
    start_month: str | int,
    areas: Sequence[object] | np.ndarray | pd.Series | None = None,
    horizon: int | None = None,
    bootstrap: Sequence[np.ndarray | pd.DataFrame] | None = None,
    levels: Sequence[float] = (0.9,),
    method: str = "auto",
    exact_max: int = EXACT_MAX,
    customer_ids: Sequence[object] | np.ndarray | None = None,
    joiners: Mapping[tuple[str, str], JoinerPart] | None = None,
    level_draws: Mapping[str, np.ndarray] | None = None,
    level_trend: Mapping[str, np.ndarray] | None = None,
) -> pd.DataFrame:
    """Expected new adopters of each product per month, by area and in total, with intervals.

    For customer i and product u, with the monthly uptake hazard h_u competing with the
    terminal causes (a customer who leaves first cannot take the product up), the cumulative
    incidence from `survival_and_incidence` is

        F_u,i(t) = Σ_{s ≤ t} S_u,i(s−1)·h_u,i(s),
        S_u,i(t) = Π_{s ≤ t} (1 − h_u,i(s) − Σ_k h_k,i(s)),

    and the probability of taking it up in month t is p_i(t) = F_u,i(t) − F_u,i(t−1).
    A group's number of new adopters in month t is a sum of independent Bernoulli(p_i(t)):
    Poisson-binomial, with mean Σ_i p_i(t) (``expected``) and equal-tailed prediction
    intervals from its quantiles (see `lifecycle.forecast.poisson_binomial_quantiles`). The
    cumulative number of adopters by month t is Poisson-binomial in F_u,i(t) (a customer takes
    a product up at most once).

    With ``bootstrap`` (hazards of the same customers from B refits of the model on
    resampled data) the intervals are quantiles of the equal-weight mixture of the B refits'
    Poisson-binomial distributions, so that they also carry the model's uncertainty;
    ``expected`` stays that of ``hazards``.

    With ``joiners`` (`lifecycle.forecast.joiner_uptake`: customers who join during the
    horizon), each group's count is the current customers' plus the joiners' (negative
    binomial, independent), ``expected = expected_current + expected_joiners``. With
    ``level_draws`` (B log-level draws ε_b of each product's uptake hazard, ``(B,)``, or per
    month ``(B, T)``) and the joiners' own coefficient draws, the intervals are those of the
    mixture over the B draws of the expected count, Σ_t e^{ε_b,t}·(current_t + joiners_b,t)
    (`lifecycle.forecast._intervals`), so they carry what is not known about the models as
    well as the outcome noise. With ``level_trend`` (ln g_t of each product, ``(T,)``, from
    `lifecycle.forecast._trend`: the trend of the uptake rate the models' held features
    lack), month t's uptake probabilities of the current customers become g_t·p_i(t) (the
    cumulative F_u,i capped at 1) and the joiners' monthly means and variances are multiplied
    by g_t, before everything above.

    Parameters
    ----------
    hazards
        Hazards of the current customers for months 1..T after the last data month: the
        DataFrame of `HazardModel.predict_hazard` or an array ``(n, T, K)`` with ``causes``.
        A customer who holds a product already must have uptake hazard 0 for it (as
        ``predict_hazard`` gives).
    start_month
        The calendar month of month 1 (``YYYY-MM`` or a month index).
    areas
        Area of each customer: a Series indexed by customer id, or ``n`` values in the
        customers' order. ``None``: the total only.
    horizon
        Months forecast (default: all T).
    levels
        Prediction-interval levels, each in (0, 1).
    method, exact_max
        How the Poisson-binomial is computed (``auto``, ``exact``, ``rna``).

    Returns
    -------
    pandas.DataFrame
        ``month`` (``YYYY-MM``), ``area_id`` (text; ``"all"`` for the total), ``product``,
        ``expected``, ``expected_current``, ``expected_joiners``, ``lower_<L>``, ``upper_<L>``
        for each level, ``cumulative_expected``, ``cumulative_expected_current``,
        ``cumulative_expected_joiners``, ``cumulative_lower_<L>``, ``cumulative_upper_<L>``.
        Sorted by product, area (total first) and month.
    """
    h = read_hazards(hazards, causes, customer_ids)
    horizon_ = check_horizon(horizon, h.months, covered="the hazards")
    if not h.uptakes:
        raise UsageError(f"the hazards have no uptake_<product> cause: {list(h.causes)}")
    first = _start(start_month)
    level_list = _levels(levels, "levels")
    quantiles = [q for lv in level_list for q in ((1.0 - lv) / 2.0, (1.0 + lv) / 2.0)]
    refits = [_refit(b, h, horizon_, i) for i, b in enumerate(bootstrap or ())]
    if refits and (joiners or level_draws):
        raise UsageError("bootstrap refits cannot be combined with joiners or level_draws")
    groups = _groups(areas, h)
    months = [format_month(first + t) for t in range(horizon_)]

    parts = []
    for j in h.uptakes:
        product = h.causes[j].removeprefix(UPTAKE_PREFIX)
        cum = uptake_incidence(h.array[:, :horizon_], h.terminal, j)
        monthly = np.diff(cum, axis=1, prepend=0.0)
        growth = _growth(level_trend, product, horizon_)
        if growth is not None:
            cum = np.minimum(np.cumsum(monthly * growth, axis=1), 1.0)
            monthly = np.diff(cum, axis=1, prepend=0.0)
        levels_b = None if not level_draws else np.asarray(level_draws[product], dtype=float)
        for area, rows in groups:
            extra = _grown(_joiner_part(joiners, product, area, horizon_), growth)
            frame = {"month": months, "area_id": area, "product": product}
            for kind, prefix, probs in ((0, "", monthly), (1, "cumulative_", cum)):
                current = probs[rows].sum(axis=0)
                joining = extra.mean[kind] if extra is not None else np.zeros(horizon_)
                frame[f"{prefix}expected"] = current + joining
                frame[f"{prefix}expected_current"] = current
                frame[f"{prefix}expected_joiners"] = joining
                if extra is None and levels_b is None:
                    bounds = _bounds(probs, rows, refits, h, j, bool(kind), quantiles, method,
                                     exact_max)  # fmt: skip
                else:
                    bounds = _combined(probs[rows].T, monthly[rows].sum(axis=0), extra, kind,
                                       levels_b, quantiles, method, exact_max)  # fmt: skip
                _put(frame, prefix, level_list, bounds)
            parts.append(pd.DataFrame(frame))
        log.info(
            "uptake forecast for %s: %.1f expected adopters among %d customers over %d months "
            "from %s",
            product, float(cum[:, -1].sum()), h.n, horizon_, months[0],
        )  # fmt: skip
    return pd.concat(parts, ignore_index=True)


def level_suffix(level: float) -> str:
    """Column suffix of an interval level: 0.9 → ``90``, 0.975 → ``97_5``."""
    return f"{round(100.0 * level, 6):g}".replace(".", "_")


def _bounds(
    probs: np.ndarray,
    rows: np.ndarray,
    refits: list[np.ndarray],
    h: HazardInput,
    j: int,
    cumulative: bool,
    quantiles: list[float],
    method: str,
    exact_max: int,
) -> np.ndarray:
    """Quantiles ``(months, len(quantiles))`` of the group's count, month by month."""

    def components() -> Iterator[np.ndarray]:
        if not refits:
            yield probs[rows].T
            return
        for array in refits:
            cum = uptake_incidence(array[rows], h.terminal, j)
            yield (cum if cumulative else np.diff(cum, axis=1, prepend=0.0)).T

    return mixture_quantiles(components(), quantiles, method=method, exact_max=exact_max)


def _combined(
    probs: np.ndarray,
    current_monthly: np.ndarray,
    extra: JoinerPart | None,
    kind: int,
    levels_b: np.ndarray | None,
    quantiles: list[float],
    method: str,
    exact_max: int,
) -> np.ndarray:
    """Quantiles ``(months, len(quantiles))`` of current plus joiners' uptakes, over the draws
    of the expected count (`lifecycle.forecast._intervals.combined_quantiles`).

    Draw b scales month t's expected uptakes (current and joiners', the joiners' at their own
    drawn coefficients) by e^{ε_b,t}; the cumulative expected count of draw b is the sum of
    its months."""
    lo, cdf = grid_cdf(probs, _method(method, probs, exact_max))
    horizon = current_monthly.size
    mean = var = shifts = None
    joining = np.zeros(horizon)
    joining_b = None
    if extra is not None:
        mean, var, joining = extra.mean[kind], extra.var[kind], extra.mean[0]
        if extra.draws is not None:
            joining_b = extra.draws[:, 0]  # (B, months), monthly
    if levels_b is not None or joining_b is not None:
        b = levels_b.shape[0] if levels_b is not None else joining_b.shape[0]
        if levels_b is None:
            scale = np.ones((b, horizon))
        else:
            eps = levels_b if levels_b.ndim == 2 else np.repeat(levels_b[:, None], horizon, 1)
            scale = np.exp(eps[:, :horizon])
        drawn = joining_b if joining_b is not None else np.broadcast_to(joining, (b, horizon))
        if drawn.shape[0] != b:
            raise UsageError(f"{drawn.shape[0]} joiner draws but {b} level draws")
        totals = scale * (current_monthly[None, :] + drawn)  # (B, months)
        expected = current_monthly + joining
        if kind:
            totals, expected = np.cumsum(totals, axis=1), np.cumsum(expected)
        shifts = (totals - expected[None, :]).T
    qs = np.asarray(quantiles, dtype=np.float64)
    return combined_quantiles(lo, cdf, qs, add_mean=mean, add_var=var, shifts=shifts)


def _joiner_part(
    joiners: Mapping[tuple[str, str], JoinerPart] | None, product: str, area: str, horizon: int
) -> JoinerPart | None:
    if not joiners:
        return None
    part = joiners.get((product, area))
    if part is None:
        return None
    if part.mean.shape[-1] < horizon:
        raise UsageError(f"joiners of {product} in {area} cover fewer than {horizon} months")
    cut = slice(0, horizon)
    draws = None if part.draws is None else part.draws[..., cut]
    return JoinerPart(part.mean[:, cut], part.var[:, cut], draws)


def _growth(
    level_trend: Mapping[str, np.ndarray] | None, product: str, horizon: int
) -> np.ndarray | None:
    """g_t = exp(ln g_t), t = 1..horizon, of a product (``None`` without a trend)."""
    if not level_trend or level_trend.get(product) is None:
        return None
    path = np.asarray(level_trend[product], dtype=np.float64)
    if path.ndim != 1 or path.size < horizon or not np.isfinite(path[:horizon]).all():
        raise UsageError(
            f"level_trend of {product} needs {horizon} finite monthly values; it has shape "
            f"{path.shape}"
        )
    return np.exp(path[:horizon])


def _grown(part: JoinerPart | None, growth: np.ndarray | None) -> JoinerPart | None:
    """The joiners' part with month t's mean and variance multiplied by g_t (cumulative: the
    sums of the grown months; its variance by the ratio of the grown to the plain mean)."""
    if part is None or growth is None:
        return part
    monthly = part.mean[0] * growth
    cumulative = np.cumsum(monthly)
    ratio = np.divide(cumulative, part.mean[1], out=np.ones_like(cumulative),
                      where=part.mean[1] > 0)  # fmt: skip
    mean = np.stack([monthly, cumulative])
    var = np.stack([part.var[0] * growth, part.var[1] * ratio])
    draws = None
    if part.draws is not None:
        grown = part.draws[:, 0] * growth[None, :]
        draws = np.stack([grown, np.cumsum(grown, axis=1)], axis=1)
    return JoinerPart(mean, var, draws)


def _put(frame: dict, prefix: str, levels: tuple[float, ...], bounds: np.ndarray) -> None:
    for i, level in enumerate(levels):
        suffix = level_suffix(level)
        frame[f"{prefix}lower_{suffix}"] = bounds[:, 2 * i]
        frame[f"{prefix}upper_{suffix}"] = bounds[:, 2 * i + 1]


def _refit(hazards: np.ndarray | pd.DataFrame, h: HazardInput, horizon: int, i: int) -> np.ndarray:
    what = f"bootstrap[{i}]"
    b = read_hazards(hazards, h.causes, what=what)
    if b.n != h.n or b.months < horizon:
        raise UsageError(
            f"{what} has shape {b.array.shape} but needs the same {h.n} customers and at least "
            f"{horizon} months"
        )
    return b.array[:, :horizon]


def _groups(
    areas: Sequence[object] | np.ndarray | pd.Series | None, h: HazardInput
) -> list[tuple[str, np.ndarray]]:
    everyone = (ALL_AREAS, np.arange(h.n))
    if areas is None:
        return [everyone]
    if isinstance(areas, pd.Series):
        if areas.index.has_duplicates:
            raise UsageError("areas: a Series of areas needs each customer id once in its index")
        values = areas.reindex(h.customer_ids).to_numpy(dtype=object)
    else:
        values = np.asarray(areas, dtype=object)
    if values.shape != (h.n,):
        raise UsageError(f"areas has {values.size} values but there are {h.n} customers")
    missing = pd.isna(values)
    if missing.any():
        raise UsageError(
            f"areas: {int(missing.sum())} customer(s) have no area, e.g. "
            f"{h.customer_ids[missing][:5].tolist()}"
        )
    labels = pd.Series(values, dtype=object).astype(str).to_numpy(dtype=object)
    if (labels == ALL_AREAS).any():
        raise UsageError(f"areas: {ALL_AREAS!r} is reserved for the total; rename that area")
    codes, uniques = pd.factorize(labels, sort=True)
    order = np.argsort(codes, kind="stable")
    splits = np.split(order, np.cumsum(np.bincount(codes, minlength=len(uniques)))[:-1])
    return [everyone, *((str(u), rows) for u, rows in zip(uniques, splits, strict=True))]


def _start(start_month: str | int) -> int:
    if isinstance(start_month, str):
        return parse_month(start_month, what="start_month")
    if not _whole(start_month):
        raise UsageError(f"start_month was {start_month!r} but is expected as YYYY-MM")
    return int(start_month)


def _levels(levels: object, what: str) -> tuple[float, ...]:
    items = [levels] if isinstance(levels, numbers.Real) else levels
    try:
        out = tuple(float(v) for v in items)  # type: ignore[union-attr]
    except (TypeError, ValueError):
        out = ()
    if not out or not all(math.isfinite(v) and 0.0 < v < 1.0 for v in out):
        raise UsageError(
            f"{what} was {levels!r} but is expected to be levels in (0, 1), e.g. [0.9]"
        )
    if len({level_suffix(v) for v in out}) != len(out):
        raise UsageError(f"{what} was {levels!r}; each level may appear once")
    return out


def _whole(value: object) -> bool:
    return isinstance(value, numbers.Integral) and not isinstance(value, bool)
