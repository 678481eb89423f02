"""Customers of the demo: their static attributes, contracts and monthly activity draws.

All state lives in `Population`, a set of arrays indexed by customer number (the order in which
customers are created: the stock first, then each month's arrivals). Customer ``i`` is written
with the id ``BM`` followed by ``i + 1`` on seven digits.
"""

from __future__ import annotations

import numpy as np

from . import _params as P

NO_TERM = -1_000_000
"""Contract end month of a customer who rolls monthly (no fixed term)."""

PLANS = tuple(P.STATIC["plan_speed"])
ACTIVITY_NAMES = (
    "bill_shock",
    "complaints",
    "late_payment",
    "contract_months_left",
    "contract_ending",
)
_PLAN_P = np.array([P.STATIC["plan_speed"][k] for k in PLANS])
_PLAN_MARGIN = np.array([P.STATIC["margin_by_plan"][k] for k in PLANS])
_TERMS = np.array([int(k) for k in P.ACTIVITY["contract"]["new_customer_terms"]])
_TERM_P = np.array(list(P.ACTIVITY["contract"]["new_customer_terms"].values()))


class Population:
    """Arrays of customer state with room for ``capacity`` customers.

    Lagged activity (``prev_*``) holds each customer's value of the previous month, NaN when the
    customer had no activity row then; ``complaints_hist`` holds the complaints of the last
    three months (column 0 = last month), 0 where there was no row.
    """

    def __init__(self, capacity: int) -> None:
        self.n = 0
        self.start = np.zeros(capacity, dtype=np.int64)
        self.end = np.full(capacity, -1, dtype=np.int64)
        self.reason = np.zeros(capacity, dtype=np.int8)  # 0 active, 1.. index into CAUSES + 1
        self.uptake = np.full(capacity, -1, dtype=np.int64)
        self.premise = np.zeros(capacity, dtype=np.int64)
        self.plan = np.zeros(capacity, dtype=np.int8)
        self.margin = np.zeros(capacity, dtype=np.float64)
        self.do_not_contact = np.zeros(capacity, dtype=bool)
        self.hardship = np.zeros(capacity, dtype=bool)
        self.complaint_mu = np.zeros(capacity, dtype=np.float64)
        self.contract_end = np.full(capacity, NO_TERM, dtype=np.int64)
        self.offered = np.zeros(capacity, dtype=bool)
        self.offer_hr = np.ones(capacity, dtype=np.float64)  # true effect if offered
        self.prev = {name: np.full(capacity, np.nan, dtype=np.float64) for name in ACTIVITY_NAMES}
        self.complaints_hist = np.zeros((capacity, 3), dtype=np.float64)

    def grow(self, extra: int) -> None:
        """Make room for ``extra`` more customers."""
        need = self.n + extra
        if need <= self.start.size:
            return
        size = max(need, int(self.start.size * 1.5))
        fills = {"end": -1, "uptake": -1, "contract_end": NO_TERM, "offer_hr": 1.0}
        for name, value in list(vars(self).items()):
            if isinstance(value, np.ndarray):
                setattr(self, name, _grow(value, size, fills.get(name, 0)))
        self.prev = {k: _grow(v, size, np.nan) for k, v in self.prev.items()}

    def add(
        self, start: np.ndarray, premise: np.ndarray, contract_end: np.ndarray, rng
    ) -> np.ndarray:
        """Add customers with the given start months, premises and contract end months; draw
        their static attributes. Returns their indices."""
        k = start.size
        self.grow(k)
        idx = np.arange(self.n, self.n + k)
        self.n += k
        self.start[idx] = start
        self.premise[idx] = premise
        self.contract_end[idx] = contract_end
        plan = rng.choice(len(PLANS), size=k, p=_PLAN_P)
        self.plan[idx] = plan
        margin = _PLAN_MARGIN[plan] + rng.normal(0.0, P.STATIC["margin_sd"], k)
        self.margin[idx] = np.round(np.maximum(margin, 5.0), 2)
        self.do_not_contact[idx] = rng.random(k) < P.STATIC["do_not_contact_probability"]
        self.hardship[idx] = rng.random(k) < P.STATIC["hardship_probability"]
        spec = P.ACTIVITY["complaints"]
        shape = spec["mu_gamma_shape"]
        self.complaint_mu[idx] = spec["mu_mean"] * rng.gamma(shape, 1.0 / shape, k)
        return idx


def _grow(values: np.ndarray, size: int, fill: float) -> np.ndarray:
    out = np.full((size, *values.shape[1:]), fill, dtype=values.dtype)
    out[: values.shape[0]] = values
    return out


def new_contract_ends(start: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Contract end months of customers starting at ``start``: a 12- or 24-month term (end =
    start + term − 1) or none (`NO_TERM`)."""
    term = rng.choice(_TERMS, size=start.size, p=_TERM_P)
    return np.where(term > 0, start + term - 1, NO_TERM)


def stock_contract_ends(start: np.ndarray, first: int, rng: np.random.Generator) -> np.ndarray:
    """Contract end months at the first simulated month ``first`` of customers who started
    earlier: still in their first term, in a renewed 12-month term with uniform months left, or
    rolling monthly."""
    end = new_contract_ends(start, rng)
    lapsed = end < first
    renewed = rng.random(start.size) < P.ACTIVITY["contract"]["stock_in_renewed_term_probability"]
    renewed_end = first + rng.integers(0, P.ACTIVITY["contract"]["renewal_term_months"], start.size)
    return np.where(lapsed, np.where(renewed, renewed_end, NO_TERM), end)


def draw_activity(
    pop: Population,
    active: np.ndarray,
    month: int,
    outage: np.ndarray,
    area: np.ndarray,
    rng: np.random.Generator,
) -> dict[str, np.ndarray]:
    """Activity values of month ``month`` for the customers ``active`` (see ``ACTIVITY``).

    Renews contracts whose term ended last month (probability ``renewal_probability``), then
    returns ``bill_shock``, ``complaints``, ``late_payment``, ``contract_months_left`` and
    ``contract_ending`` as integer arrays aligned with ``active``.
    """
    k = active.size
    spec = P.ACTIVITY
    bill = spec["bill_shock"]
    review = month % 12 + 1 == bill["price_review_month_of_year"]
    p_bill = bill["probability_in_price_review_month"] if review else bill["probability"]
    bill_shock = rng.random(k) < p_bill

    boost = spec["complaints"]["outage_boost"] * outage[area]
    complaints = rng.poisson(pop.complaint_mu[active] + boost)

    late = spec["late_payment"]
    was_late = pop.prev["late_payment"][active] == 1.0
    hardship = pop.hardship[active]
    p_late = np.where(
        was_late,
        np.where(hardship, late["p_late_after_late_hardship"], late["p_late_after_late"]),
        np.where(hardship, late["p_late_after_on_time_hardship"], late["p_late_after_on_time"]),
    )
    late_payment = rng.random(k) < p_late

    contract = spec["contract"]
    renew = (pop.contract_end[active] == month - 1) & (
        rng.random(k) < contract["renewal_probability"]
    )
    pop.contract_end[active[renew]] = month + contract["renewal_term_months"] - 1
    left = pop.contract_end[active] - month
    return {
        "bill_shock": bill_shock.astype(np.int8),
        "complaints": complaints.astype(np.int16),
        "late_payment": late_payment.astype(np.int8),
        "contract_months_left": np.maximum(left, 0).astype(np.int16),
        "contract_ending": ((left >= 0) & (left <= 1)).astype(np.int8),
    }
