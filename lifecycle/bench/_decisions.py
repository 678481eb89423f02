"""``lifecycle bench decisions``: the contact plan at portfolio scale, against the plain ways.

The input is synthetic and seeded: per customer a 3-month churn risk, a value at stake and
flags; per offer an effect and a cost, so that the expected value
``value × risk × (1 − hazard_ratio) − cost`` is positive for a minority of pairs, as in a real
portfolio. Budget and weekly capacities scale with the portfolio so that both bind.

Cases (each in a fresh process, timing the plan only, not the synthetic input):

* ours, greedy at full size: `make_plan` (eligibility, exclusions, cooldown, the choice with its
  Lagrangian bound, the weeks), with the gap it reports;
* ours, exact MILP at a size it solves, and ours, greedy, at that size;
* plain, at that size: `scipy.optimize.milp` on the unpruned problem (a variable for every
  customer-offer pair, HiGHS defaults);
* plain, at full size: the greedy written as a plain Python loop over the pairs sorted by
  value per cost (no bound).
"""

from __future__ import annotations

import math
import time

import numpy as np
import pandas as pd

from ._harness import Measurement, measure

_COST = (25.0, 10.0, 40.0, 15.0, 30.0)
_HAZARD_RATIO = (0.7, 0.85, 0.6, 0.8, 0.75)
_WEEKLY_SHARE = (0.002, 0.0015, 0.001, 0.001, 0.001)  # weekly capacity per customer
_BUDGET_PER_CUSTOMER = 0.4
_WEEKS = 4


def synthetic_plan_input(customers: int, offers: int, seed: int = 0):
    """A planning frame, its expected values ``(n, O)`` and the offers (seeded)."""
    from ..decisions import Eligibility, Offer

    if not 1 <= offers <= len(_COST):
        raise ValueError(f"offers must be 1..{len(_COST)}")
    rng = np.random.default_rng(seed)
    ids = np.arange(1, customers + 1, dtype=np.int64)
    risk = rng.beta(1.2, 20.0, customers)  # 3-month churn risk, mean about 6 %
    at_stake = rng.gamma(4.0, 150.0, customers)  # value kept if the customer stays
    frame = pd.DataFrame(
        {
            "customer_id": ids,
            "month": "2026-11",
            "tenure_start": rng.integers(1, 120, customers).astype(np.int16),
            "cif_churn_3m": risk,
            "do_not_contact": (rng.random(customers) < 0.02).astype(np.int8),
            "hardship": (rng.random(customers) < 0.015).astype(np.int8),
        }
    )
    offer_list = []
    ev = np.empty((customers, offers))
    for o in range(offers):
        lift = 1.0 - _HAZARD_RATIO[o]
        ev[:, o] = at_stake * risk * lift * rng.uniform(0.7, 1.3, customers) - _COST[o]
        offer_list.append(
            Offer(
                name=f"offer_{o + 1}",
                target="churn",
                cost=_COST[o],
                hazard_ratio=_HAZARD_RATIO[o],
                months=6,
                weekly_capacity=max(1, round(_WEEKLY_SHARE[o] * customers)),
                eligible=Eligibility(minimum={"tenure": 3 + 3 * o}),
            )
        )
    contacted = rng.random(customers) < 0.05
    last_contact = pd.Series(
        2026 * 12 + 10 - rng.integers(1, 12, int(contacted.sum())).astype(float),
        index=ids[contacted],
    )
    return frame, ev, tuple(offer_list), last_contact


def _settings(customers: int, solver: str):
    from ..decisions import PlanSettings

    return PlanSettings(
        budget=_BUDGET_PER_CUSTOMER * customers,
        weeks=_WEEKS,
        solver=solver,
        max_exact_customers=10**9,
        time_limit_s=600.0,
        mip_gap=1e-4,
        reasons=0,
    )


def _ours(customers: int, offers: int, solver: str) -> dict:
    from ..decisions import make_plan

    frame, ev, offer_list, last = synthetic_plan_input(customers, offers)
    start = time.perf_counter()
    plan = make_plan(frame, ev, offer_list, _settings(customers, solver), last_contact=last)
    seconds = time.perf_counter() - start
    a = plan.allocation
    return {
        "seconds": seconds,
        "note": (
            f"{a.solver}: EV {a.objective:,.0f}, bound {a.bound:,.0f}, gap "
            f"{100 * a.relative_gap:.4f}%, {len(plan.table):,} contacts"
        ),
    }


def _allowed(frame: pd.DataFrame, offer_list, last: pd.Series) -> np.ndarray:
    from ..decisions import cooldown_ok, eligible_mask, excluded_mask

    allowed = np.column_stack([eligible_mask(frame, o) for o in offer_list])
    allowed &= ~excluded_mask(frame, ("do_not_contact", "hardship"))[:, None]
    contact = last.reindex(frame["customer_id"].to_numpy()).to_numpy(float)
    for j, offer in enumerate(offer_list):
        allowed[:, j] &= cooldown_ok(contact, 2026 * 12 + 10, offer.cooldown_months)
    return allowed


def _plain_milp(customers: int, offers: int) -> dict:
    """The unpruned MILP: one binary per customer-offer pair, disallowed pairs bounded at 0,
    one row per customer, scipy's milp with HiGHS defaults (the gap setting aside)."""
    from scipy import sparse
    from scipy.optimize import Bounds, LinearConstraint, milp

    frame, ev, offer_list, last = synthetic_plan_input(customers, offers)
    start = time.perf_counter()
    allowed = _allowed(frame, offer_list, last)
    n, k = ev.shape
    c = -ev.reshape(-1)
    upper = allowed.reshape(-1).astype(float)
    cost = np.tile([o.cost for o in offer_list], n)
    pairs = np.arange(n * k)
    rows = [
        sparse.csr_matrix((np.ones(n * k), (pairs // k, pairs)), shape=(n, n * k)),
        sparse.csr_matrix((np.ones(n * k), (pairs % k, pairs)), shape=(k, n * k)),
        sparse.csr_matrix(cost.reshape(1, -1)),
    ]
    caps = [o.capacity(_WEEKS) for o in offer_list]
    b = np.concatenate([np.ones(n), caps, [_BUDGET_PER_CUSTOMER * customers]])
    res = milp(
        c,
        integrality=np.ones(n * k),
        bounds=Bounds(np.zeros(n * k), upper),
        constraints=LinearConstraint(sparse.vstack(rows, format="csr"), -np.inf, b),
        options={"time_limit": 600.0, "mip_rel_gap": 1e-4},
    )
    seconds = time.perf_counter() - start
    value = -res.fun if res.x is not None else math.nan
    return {"seconds": seconds, "note": f"status {res.status}: EV {value:,.0f}"}


def _plain_loop(customers: int, offers: int) -> dict:
    """The greedy as a plain Python loop: pairs by value per cost, each taken if it fits."""
    frame, ev, offer_list, last = synthetic_plan_input(customers, offers)
    start = time.perf_counter()
    allowed = _allowed(frame, offer_list, last)
    cost = [o.cost for o in offer_list]
    room = [o.capacity(_WEEKS) for o in offer_list]
    left = _BUDGET_PER_CUSTOMER * customers
    pairs = []
    for i in range(ev.shape[0]):
        for o in range(ev.shape[1]):
            if allowed[i, o] and ev[i, o] > 0:
                pairs.append((ev[i, o] / cost[o], i, o))
    pairs.sort(reverse=True)
    taken: set[int] = set()
    total = 0.0
    for _, i, o in pairs:
        if i in taken or room[o] < 1 or cost[o] > left:
            continue
        taken.add(i)
        room[o] -= 1
        left -= cost[o]
        total += ev[i, o]
    seconds = time.perf_counter() - start
    return {"seconds": seconds, "note": f"EV {total:,.0f}, {len(taken):,} contacts, no bound"}


def run_decisions_bench(
    customers: int = 1_000_000, offers: int = 3, exact_customers: int = 20_000
) -> list[Measurement]:
    """The plan at full size (greedy), and exact, greedy and the plain MILP at a size the
    exact solver handles; the plain Python greedy at full size."""
    size = f"{customers:,} × {offers} offers"
    small = f"{exact_customers:,} × {offers} offers"
    return [
        measure(
            "decisions",
            "plan (greedy + bound)",
            size,
            _ours,
            customers=customers,
            offers=offers,
            solver="greedy",
        ),
        measure(
            "decisions",
            "greedy as a Python loop",
            size,
            _plain_loop,
            role="plain",
            customers=customers,
            offers=offers,
        ),
        measure(
            "decisions",
            "plan (exact MILP, pruned)",
            small,
            _ours,
            customers=exact_customers,
            offers=offers,
            solver="exact",
        ),
        measure(
            "decisions",
            "plan (greedy + bound)",
            small,
            _ours,
            customers=exact_customers,
            offers=offers,
            solver="greedy",
        ),
        measure(
            "decisions",
            "milp on the unpruned problem",
            small,
            _plain_milp,
            role="plain",
            customers=exact_customers,
            offers=offers,
        ),
    ]
