"""Expected value of an offer: value with it − value without it − its cost.

Both values come from the same competing-risk machinery (`survival_and_incidence`): the offer
multiplies its target cause's monthly hazard by its hazard ratio in its months, and survival
and every cumulative incidence are recomputed from the changed hazards. An offer that lowers
the churn hazard therefore also raises the move-out incidence and the chance of a later product
uptake, each by exactly what the competing-risks arithmetic implies; no effect is added on
its own.
"""

from __future__ import annotations

import logging
import numbers
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
import pandas as pd

from .._layout import UPTAKE_PREFIX
from ..errors import UsageError
from ..models import survival_and_incidence, valid_hazards
from ._hazards import HazardInput, read_hazards, uptake_incidence
from ._lifetime import DEFAULT_ANNUAL_DISCOUNT, check_horizon, discount_factors, margin_matrix

log = logging.getLogger(__name__)

CHUNK_CUSTOMERS = 50_000
"""Customers valued at a time, so that memory stays bounded on large portfolios."""


@dataclass(frozen=True)
class _OfferSpec:
    name: str
    target: str
    column: int
    cost: float
    hazard_ratio: float
    months: int
    value_per_uptake: float
    ratios: np.ndarray | None = None
    """One hazard ratio per customer (in the hazards' order), or None: ``hazard_ratio``."""


def _value_blocks(h, specs, values, margins, disc, horizon_: int) -> dict[str, np.ndarray]:
    """``value_without``, ``value_with``, ``survival_change`` and ``cif_change_<cause>`` as
    ``(customers, offers)`` arrays, computed in blocks of `CHUNK_CUSTOMERS` customers."""
    n_offers = len(specs)
    columns = ["value_without", "value_with", "survival_change"] + [
        f"cif_change_{c}" for c in h.causes
    ]
    out = {name: np.empty((h.n, n_offers)) for name in columns}
    for lo in range(0, h.n, CHUNK_CUSTOMERS):
        hi = min(lo + CHUNK_CUSTOMERS, h.n)
        block = h.array[lo:hi, :horizon_, :]
        m = margins[lo:hi]
        base = _outcome(block, h)
        for j, spec in enumerate(specs):
            worth = dict(values)
            if spec.column in h.uptakes and spec.value_per_uptake:
                worth[spec.column] = spec.value_per_uptake
            # an uptake offer leaves the exits alone: only its own product's F_u changes
            only = spec.column if spec.column in h.uptakes else None
            ratio = spec.hazard_ratio if spec.ratios is None else spec.ratios[lo:hi, None]
            new = _outcome(_with_offer(block, h, spec, ratio), h, only=only, base=base)
            out["value_without"][lo:hi, j] = _value(base, m, disc, worth)
            out["value_with"][lo:hi, j] = _value(new, m, disc, worth)
            out["survival_change"][lo:hi, j] = new.survival[:, -1] - base.survival[:, -1]
            for k, cause in enumerate(h.causes):
                out[f"cif_change_{cause}"][lo:hi, j] = new.final[:, k] - base.final[:, k]
    return out


def _value_frame(h, specs, out: dict[str, np.ndarray]) -> pd.DataFrame:
    """The long table, one row per customer and offer (see `offer_values`)."""
    n_offers = len(specs)
    cost = np.array([s.cost for s in specs], dtype=np.float64)
    frame = pd.DataFrame(
        {
            "customer_id": np.repeat(h.customer_ids, n_offers),
            "offer": np.tile(np.array([s.name for s in specs], dtype=object), h.n),
            "target": np.tile(np.array([s.target for s in specs], dtype=object), h.n),
            "value_without": out["value_without"].ravel(),
            "value_with": out["value_with"].ravel(),
            "cost": np.tile(cost, h.n),
        }
    )
    frame["expected_value"] = (out["value_with"] - out["value_without"] - cost[None, :]).ravel()
    frame["survival_change"] = out["survival_change"].ravel()
    for cause in h.causes:
        frame[f"cif_change_{cause}"] = out[f"cif_change_{cause}"].ravel()
    return frame


def offer_values(
    hazards: np.ndarray | pd.DataFrame,
    causes: Sequence[str] | None,
    margin: float | np.ndarray | pd.Series | pd.DataFrame,
    offers: Sequence[Any],
    *,
    annual_discount: float = DEFAULT_ANNUAL_DISCOUNT,
    horizon: int | None = None,
    uptake_values: Mapping[str, float] | None = None,
    customer_ids: Sequence[object] | np.ndarray | None = None,
    hazard_ratios: Mapping[str, Sequence[float] | np.ndarray | pd.Series] | None = None,
) -> pd.DataFrame:
    """Expected value of each offer for each customer, competing risks accounted for.

    For customer i and offer o (target cause c, hazard ratio θ, effect months M, cost C):

    - the offer's hazards are h'_c(t) = θ·h_c(t) for t ≤ M, every other hazard unchanged
      (when θ > 1 the raised hazard is capped so that the month's competing hazards still add
      up to at most 1);
    - with S(t), F_k(t) from `survival_and_incidence` (discrete-time Aalen–Johansen over the
      terminal causes; an uptake u competes with them, F_u(t) = Σ_{s≤t} S_u(s−1)·h_u(s)), the
      value over the horizon H is

      .. math::

          V = \\sum_{t=1}^{H} m(t)\\,S(t)\\,\\delta^t
              + \\sum_u v_u \\sum_{t=1}^{H} \\bigl(F_u(t) - F_u(t-1)\\bigr)\\,\\delta^t,
          \\qquad \\delta = (1 + d)^{-1}

      (margin received at the end of each month while still a customer; the value v_u of an
      uptake is a lump sum in the month of uptake; d the monthly discount rate from the
      annual one, as in `lifetime_value`);
    - ``expected_value = V(with the offer) − V(without it) − C``.

    An offer with θ = 1 therefore has expected value −C exactly. With ``hazard_ratios``, θ is
    the customer's own ratio θ_i for the offers named there (learnt per customer from a
    randomised campaign, `lifecycle.cycle.customer_effects`); equal θ_i give exactly the
    single-ratio result.

    Parameters
    ----------
    hazards
        Monthly cause-specific hazards: an array ``(n, T, K)`` in the order of ``causes``, or
        the DataFrame of `HazardModel.predict_hazard` (then ``causes`` may be ``None``).
    causes
        Cause names (terminal causes, then ``uptake_<product>``).
    margin
        Monthly margin: a number, one per customer, or ``(n, T')`` per customer and month.
    offers
        Objects with ``name``, ``target`` (a cause), ``cost``, ``hazard_ratio``, ``months``
        and, for uptake offers, ``value_per_uptake`` (such as `lifecycle.decisions.Offer`).
    annual_discount
        Yearly discount rate, converted to monthly as ``(1 + a)^(1/12) − 1``.
    horizon
        H, the months valued; default all months of ``hazards``.
    uptake_values
        Value of one uptake of a product (``product`` or ``uptake_<product>`` → value),
        counted in every value, so that a retention offer is credited with the uptakes it
        makes possible. An uptake offer values its own product at its ``value_per_uptake``
        (when that is set). Default: none (an uptake offer still counts its own product).
    customer_ids
        Ids for an array input (default 0..n−1, or the DataFrame's ids).
    hazard_ratios
        Offer name → one hazard ratio per customer, aligned with the customers of
        ``hazards`` (a Series indexed by customer id is aligned by its index), used instead of
        that offer's single ``hazard_ratio``. Offers not named keep their single ratio.

    Returns
    -------
    pandas.DataFrame
        One row per customer and offer (customer-major, offers in the order given):
        ``customer_id``, ``offer``, ``target``, ``value_without``, ``value_with``, ``cost``,
        ``expected_value``, ``survival_change`` (ΔS(H)) and ``cif_change_<cause>`` (ΔF_k(H)
        for every cause).
    """
    h = read_hazards(hazards, causes, customer_ids)
    horizon_ = check_horizon(horizon, h.months, covered="the hazards")
    specs = _with_own_ratios([_spec(o, h) for o in _as_list(offers)], hazard_ratios, h)
    values = _product_values(uptake_values, h)
    margins = margin_matrix(margin, h.n, horizon_)
    disc = discount_factors(horizon_, annual_discount)
    frame = _value_frame(h, specs, _value_blocks(h, specs, values, margins, disc, horizon_))
    log.info(
        "valued %d offer(s) for %d customers over %d months (annual discount %.3g)",
        len(specs), h.n, horizon_, annual_discount,
    )  # fmt: skip
    return frame


@dataclass
class _Outcome:
    """What one hazard block implies: S(1..H), F_k(H) for every cause, F_u(1..H) per uptake."""

    survival: np.ndarray
    final: np.ndarray
    uptake: dict[int, np.ndarray]


def _outcome(
    block: np.ndarray, h: HazardInput, *, only: int | None = None, base: _Outcome | None = None
) -> _Outcome:
    """Survival and incidences of a hazard block through `survival_and_incidence`.

    With ``only`` (an uptake column) and ``base``, only that uptake's incidence is recomputed;
    the rest is taken from ``base`` (valid when only that uptake's hazard differs).
    """
    if only is not None and base is not None:
        f_u = uptake_incidence(block, h.terminal, only)
        final = base.final.copy()
        final[:, only] = f_u[:, -1]
        return _Outcome(base.survival, final, {**base.uptake, only: f_u})
    survival, incidence = survival_and_incidence(block[..., h.terminal])
    final = np.empty((block.shape[0], len(h.causes)))
    final[:, h.terminal] = incidence[:, -1, :]
    uptake = {}
    for j in h.uptakes:
        uptake[j] = uptake_incidence(block, h.terminal, j)
        final[:, j] = uptake[j][:, -1]
    return _Outcome(survival, final, uptake)


def _value(
    outcome: _Outcome, margins: np.ndarray, disc: np.ndarray, worth: Mapping[int, float]
) -> np.ndarray:
    """V = Σ_t m(t)·S(t)·δ^t + Σ_u v_u Σ_t (F_u(t) − F_u(t−1))·δ^t."""
    value = (margins * outcome.survival) @ disc
    for j, v in worth.items():
        if v:
            value = value + v * (np.diff(outcome.uptake[j], axis=-1, prepend=0.0) @ disc)
    return value


def _with_offer(
    block: np.ndarray, h: HazardInput, spec: _OfferSpec, ratio: float | np.ndarray
) -> np.ndarray:
    """The hazards with the offer: the target's hazard times θ in months 1..M (``ratio``: θ,
    or one θ_i per customer of the block as a column ``(n, 1)``).

    A raised hazard (θ > 1) is made valid again by the models' one rule (`valid_hazards`):
    terminal hazards summing past 1 are split in continuous time, and each uptake is capped
    at 1 minus the terminal ones.
    """
    out = block.copy()
    months = min(spec.months, block.shape[1])
    out[:, :months, spec.column] *= ratio
    if np.any(np.asarray(ratio) > 1.0):
        order = h.terminal + h.uptakes
        back = np.argsort(order)
        out = valid_hazards(out[..., order], len(h.terminal))[..., back]
    return out


def _spec(offer: Any, h: HazardInput) -> _OfferSpec:
    missing = [
        a for a in ("name", "target", "cost", "hazard_ratio", "months") if not hasattr(offer, a)
    ]
    if missing:
        raise UsageError(
            f"an offer must have name, target, cost, hazard_ratio and months; "
            f"{offer!r} lacks {missing}"
        )
    name = str(offer.name)
    if offer.target not in h.causes:
        raise UsageError(
            f"offer {name!r}: target was {offer.target!r} but the hazards have the causes "
            f"{list(h.causes)}"
        )
    cost = _real(offer.cost, f"offer {name!r}: cost", low=0.0)
    ratio = _real(offer.hazard_ratio, f"offer {name!r}: hazard_ratio", low=0.0)
    months = offer.months
    if isinstance(months, bool) or not isinstance(months, numbers.Integral) or months < 1:
        raise UsageError(
            f"offer {name!r}: months was {months!r} but is expected to be a whole number >= 1"
        )
    per_uptake = _real(getattr(offer, "value_per_uptake", 0.0) or 0.0, "value_per_uptake", low=0)
    return _OfferSpec(
        name=name,
        target=str(offer.target),
        column=h.causes.index(offer.target),
        cost=cost,
        hazard_ratio=ratio,
        months=int(months),
        value_per_uptake=per_uptake,
    )


def _with_own_ratios(
    specs: list[_OfferSpec], ratios: Mapping[str, Any] | None, h: HazardInput
) -> list[_OfferSpec]:
    """The specs with each named offer's per-customer ratios attached (checked)."""
    if not ratios:
        return specs
    names = [s.name for s in specs]
    unknown = [k for k in ratios if str(k) not in names]
    if unknown:
        raise UsageError(f"hazard_ratios names the offers {unknown} but the offers are {names}")
    out = []
    for spec in specs:
        given = ratios.get(spec.name)
        if given is None:
            out.append(spec)
            continue
        if isinstance(given, pd.Series):
            aligned = given.reindex(pd.Index(h.customer_ids))
            if aligned.isna().any():
                lost = pd.Index(h.customer_ids)[aligned.isna().to_numpy()][:5].tolist()
                raise UsageError(
                    f"hazard_ratios[{spec.name!r}] has no ratio for {int(aligned.isna().sum())} "
                    f"customers of the hazards (for example {lost})"
                )
            given = aligned
        values = np.asarray(given, dtype=np.float64).reshape(-1)
        if len(values) != h.n:
            raise UsageError(
                f"hazard_ratios[{spec.name!r}] has {len(values)} values but the hazards have "
                f"{h.n} customers; give one ratio per customer, in the hazards' order"
            )
        if not (np.isfinite(values) & (values >= 0)).all():
            raise UsageError(
                f"hazard_ratios[{spec.name!r}] holds missing, infinite or negative values; "
                "each must be a finite number >= 0"
            )
        out.append(replace(spec, ratios=values))
    return out


def _product_values(values: Mapping[str, float] | None, h: HazardInput) -> dict[int, float]:
    out: dict[int, float] = {}
    for key, value in (values or {}).items():
        cause = key if str(key).startswith(UPTAKE_PREFIX) else UPTAKE_PREFIX + str(key)
        if cause not in h.causes:
            products = [h.causes[j].removeprefix(UPTAKE_PREFIX) for j in h.uptakes]
            raise UsageError(
                f"uptake_values names the product {key!r} but the hazards have the products "
                f"{products}"
            )
        out[h.causes.index(cause)] = _real(value, f"uptake_values[{key!r}]", low=0.0)
    return out


def _as_list(offers: Sequence[Any]) -> list[Any]:
    items = list(offers) if not hasattr(offers, "target") else [offers]
    if not items:
        raise UsageError("no offers were given to value")
    names = [str(o.name) for o in items if hasattr(o, "name")]
    if len(set(names)) != len(names):
        raise UsageError(f"offer names must be unique; got {names}")
    return items


def _real(value: object, what: str, *, low: float) -> float:
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise UsageError(f"{what} was {value!r} but is expected to be a number >= {low}")
    value = float(value)
    if not np.isfinite(value) or value < low:
        raise UsageError(f"{what} was {value!r} but is expected to be a finite number >= {low}")
    return value
