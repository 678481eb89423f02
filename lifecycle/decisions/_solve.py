"""Choosing offers: at most one per customer, the most expected value within budget and capacity.

The problem. Customers i, offers o, expected value ``e_io``, cost per contact ``c_o``, budget
``B``, capacity ``K_o`` (contacts of offer o in the period), and a mask of allowed pairs::

    maximise   Σ_io e_io x_io
    subject to Σ_o x_io ≤ 1           for every customer i
               Σ_i x_io ≤ K_o         for every offer o
               Σ_io c_o x_io ≤ B
               x_io ∈ {0, 1},  x_io = 0 where the pair is not allowed

Pairs with ``e_io ≤ 0`` never help the objective, so only allowed pairs with positive value
(and a cost within the budget, and an offer with capacity) are kept: the candidates.

Two solvers, each reporting an upper bound U on the optimum, so that the gap ``U − objective``
is known either way:

* ``exact``: the mixed-integer programme over the candidates with `scipy.optimize.milp`
  (HiGHS), written with integer contact counts per offer and continuous x (see `_exact`: the
  same optimum, far fewer branches); U is HiGHS's dual bound (at most the LP relaxation's
  value).

When every cost is a whole number of cents, B is first rounded down to what can be spent (a
multiple of the costs' greatest common divisor): the same plans, a tighter bound.
* ``greedy``: for very large portfolios. Prices come from the Lagrangian dual, which relaxes
  the budget (price λ ≥ 0) and the capacities (prices μ_o ≥ 0)::

      L(λ, μ) = Σ_i max(0, max_o (e_io − λ c_o − μ_o)) + λ B + Σ_o μ_o K_o

  Every L(λ, μ) is an upper bound on the optimum (weak duality), and its minimum equals the LP
  relaxation's value. It is minimised by Kelley's cutting-plane method over the O + 1 prices,
  which also certifies how close the bound is to that minimum. Pairs are then taken greedily,
  in order of a key, skipping what no longer fits; three keys are tried (reduced profit
  ``e − λc − μ_o``, value per cost ``e/c``, value ``e``) and the best plan is kept.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass

import numpy as np
from scipy import sparse
from scipy.optimize import Bounds, LinearConstraint, linprog, milp

from ..errors import UsageError

log = logging.getLogger(__name__)

__all__ = ["Allocation", "allocate"]

_EPS = 1e-9


@dataclass(frozen=True)
class Allocation:
    """The chosen offers and how good the choice is.

    Attributes
    ----------
    choice
        ``(n,)`` int: the offer index chosen for each customer, −1 for none.
    objective
        Σ of the expected values of the chosen pairs.
    bound
        An upper bound on the best objective any feasible plan reaches.
    solver
        ``"exact"`` or ``"greedy"``.
    status
        The solver's own words (e.g. optimal, time limit reached).
    budget_used
        Σ of the costs of the chosen pairs.
    counts
        Chosen contacts per offer.
    candidates
        Allowed pairs with positive value that fit budget and capacity (the problem's size).
    """

    choice: np.ndarray
    objective: float
    bound: float
    solver: str
    status: str
    budget_used: float
    counts: tuple[int, ...]
    candidates: int

    @property
    def gap(self) -> float:
        """Absolute optimality gap: ``bound − objective`` (≥ 0)."""
        return max(self.bound - self.objective, 0.0)

    @property
    def relative_gap(self) -> float:
        """``gap / bound`` (0 when the bound is 0)."""
        return self.gap / self.bound if self.bound > 0 else 0.0


def allocate(
    ev: np.ndarray,
    cost: np.ndarray,
    capacity: np.ndarray,
    budget: float,
    *,
    allowed: np.ndarray | None = None,
    solver: str = "auto",
    max_exact_customers: int = 50_000,
    time_limit_s: float = 60.0,
    mip_gap: float = 1e-4,
) -> Allocation:
    """Choose at most one offer per customer to maximise total expected value.

    Parameters
    ----------
    ev
        ``(n, O)`` expected value of each customer-offer pair (NaN: not allowed).
    cost
        ``(O,)`` cost of one contact per offer (≥ 0).
    capacity
        ``(O,)`` most contacts per offer in the period (``inf``: no limit).
    budget
        Most total cost (``inf``: no limit).
    allowed
        ``(n, O)`` boolean mask of allowed pairs (eligibility, exclusions, cooldown); default
        all.
    solver
        ``"exact"`` (MILP), ``"greedy"``, or ``"auto"``: exact when the candidates belong to at
        most ``max_exact_customers`` customers.
    time_limit_s, mip_gap
        The exact solver's time limit and relative gap at which it may stop.
    """
    ev, cost, capacity = _checked_inputs(ev, cost, capacity, budget, solver)
    n, n_offers = ev.shape
    mask = np.isfinite(ev) & (ev > 0)
    if allowed is not None:
        allowed = np.asarray(allowed, dtype=bool)
        if allowed.shape != ev.shape:
            raise UsageError(f"allowed has shape {allowed.shape} but expected values {ev.shape}")
        mask &= allowed
    mask &= (cost <= budget + _EPS)[None, :] & (np.floor(capacity + _EPS) >= 1)[None, :]
    budget = _spendable(budget, cost[mask.any(axis=0)])
    rows = np.flatnonzero(mask.any(axis=1))
    sub = mask[rows]
    values = np.where(sub, ev[rows], -np.inf)
    capacity = np.floor(capacity + _EPS)
    candidates = int(sub.sum())
    use_exact = solver == "exact" or (solver == "auto" and len(rows) <= max_exact_customers)
    log.info(
        "plan: %d candidate pairs over %d customers, %s solver",
        candidates,
        len(rows),
        "exact" if use_exact else "greedy",
    )
    picked, bound, name, status = _solve(
        values, cost, capacity, budget, candidates, use_exact, time_limit_s, mip_gap
    )
    choice = np.full(n, -1, dtype=np.int64)
    choice[rows] = picked if candidates else -1
    chosen = choice >= 0
    objective = float(ev[chosen, choice[chosen]].sum())
    spent = float(cost[choice[chosen]].sum())
    counts = tuple(int(c) for c in np.bincount(choice[chosen], minlength=n_offers))
    return Allocation(
        choice=choice,
        objective=objective,
        bound=max(float(bound), objective),
        solver=name,
        status=status,
        budget_used=spent,
        counts=counts,
        candidates=candidates,
    )


def _checked_inputs(
    ev: np.ndarray, cost: np.ndarray, capacity: np.ndarray, budget: float, solver: str
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The expected values ``(n, O)``, costs and capacities ``(O,)`` as float arrays, checked
    with the budget and the solver's name (see `allocate`)."""
    ev = np.asarray(ev, dtype=float)
    if ev.ndim != 2:
        raise UsageError(
            f"expected values must be an (customers, offers) array; got shape {ev.shape}"
        )
    n_offers = ev.shape[1]
    cost = np.asarray(cost, dtype=float).reshape(-1)
    capacity = np.asarray(capacity, dtype=float).reshape(-1)
    if cost.shape != (n_offers,) or capacity.shape != (n_offers,):
        raise UsageError(
            f"cost and capacity need one value per offer ({n_offers}); got {cost.shape[0]} and "
            f"{capacity.shape[0]}"
        )
    if np.any(~np.isfinite(cost)) or np.any(cost < 0) or np.any(np.isnan(capacity)):
        raise UsageError(
            f"costs must be finite and ≥ 0, capacities numbers; got {cost}, {capacity}"
        )
    if math.isnan(budget) or budget < 0:
        raise UsageError(f"budget was {budget} but must be ≥ 0")
    if solver not in ("auto", "exact", "greedy"):
        raise UsageError(
            f"solver was {solver!r} but is expected to be in ['auto', 'exact', 'greedy']"
        )
    if np.isinf(ev).any():
        raise UsageError("expected values must be finite (NaN marks a pair that is not allowed)")
    return ev, cost, capacity


def _solve(
    values: np.ndarray,
    cost: np.ndarray,
    capacity: np.ndarray,
    budget: float,
    candidates: int,
    use_exact: bool,
    time_limit_s: float,
    mip_gap: float,
) -> tuple[np.ndarray, float, str, str]:
    """The chosen offer per candidate customer (−1: none), the bound, the solver used and its
    status; the greedy when the exact solver finds no plan in time."""
    if candidates == 0:
        picked, bound, name, status = (
            np.full(0, -1),
            0.0,
            "exact" if use_exact else "greedy",
            "nothing to choose",
        )
    elif use_exact:
        picked, bound, status = _exact(values, cost, capacity, budget, time_limit_s, mip_gap)
        name = "exact"
        if picked is None:
            log.warning(
                "the exact solver found no plan within %s s; using the greedy", time_limit_s
            )
            picked, bound, status = _greedy(values, cost, capacity, budget)
            name, status = "greedy", f"exact solver stopped without a plan; {status}"
    else:
        picked, bound, status = _greedy(values, cost, capacity, budget)
        name = "greedy"
    return picked, bound, name, status


def _spendable(budget: float, cost: np.ndarray) -> float:
    """The most any plan can spend within ``budget``: when the costs are whole cents, spends
    are multiples of their greatest common divisor g, so the budget can be rounded down to a
    multiple of g. Same plans, tighter LP relaxation (and so a tighter bound and faster MILP)."""
    if not np.isfinite(budget) or len(cost) == 0:
        return budget
    cents = np.round(cost * 100.0)
    if np.any(np.abs(cost * 100.0 - cents) > 1e-6) or cents.max() > 2**53:
        return budget
    g = int(np.gcd.reduce(cents.astype(np.int64)))
    if g == 0:
        return budget
    step = g / 100.0
    return step * math.floor(budget / step + 1e-9)


# -- exact -----------------------------------------------------------------------------------
def _exact(
    values: np.ndarray,
    cost: np.ndarray,
    capacity: np.ndarray,
    budget: float,
    time_limit_s: float,
    mip_gap: float,
) -> tuple[np.ndarray | None, float, str]:
    """The MILP over the candidate pairs (``values`` is −inf elsewhere).

    Since the cost of a contact depends on the offer only, the budget constrains the counts
    k_o = Σ_i x_io alone. The programme is written with x continuous in [0, 1] and the O counts
    integer: for fixed whole counts, the rows "one offer per customer" and "k_o contacts of
    offer o" form the incidence matrix of a bipartite graph, which is totally unimodular, so
    every vertex has whole x (Schrijver 1986, "Theory of Linear and Integer Programming",
    section 19.3). HiGHS then branches on O counts instead of one binary per pair, and the
    optimum is that of the all-binary programme.
    """
    m, n_offers = values.shape
    cust, offer = np.nonzero(np.isfinite(values))
    gain = values[cust, offer]
    n_pairs = len(gain)
    counts = np.bincount(offer, minlength=n_offers)
    top = np.minimum(capacity, counts)
    if m == n_pairs and np.all(counts <= capacity) and float(np.dot(cost, counts)) <= budget:
        picked = np.full(m, -1, dtype=np.int64)  # one candidate each, and everything fits
        picked[cust] = offer
        return picked, float(gain.sum()), "every candidate fits"
    constraint = _constraints(cust, offer, m, n_offers, cost, top, budget)
    objective = np.concatenate([-gain, np.zeros(n_offers)])
    high = np.concatenate([np.ones(n_pairs), top])
    options = {"time_limit": float(time_limit_s), "disp": False, "presolve": False}
    res = milp(
        objective,
        integrality=np.concatenate([np.zeros(n_pairs), np.ones(n_offers)]),
        bounds=Bounds(np.zeros(n_pairs + n_offers), high),
        constraints=constraint,
        options={**options, "mip_rel_gap": float(mip_gap)},
    )
    if res.x is None:
        return None, math.inf, str(res.message)
    x = _whole_pairs(res, objective, high, constraint, options, n_pairs)
    take = x > 0.5
    picked = np.full(m, -1, dtype=np.int64)
    picked[cust[take]] = offer[take]
    picked = _repair(picked, values, cost, capacity, budget)
    dual = getattr(res, "mip_dual_bound", None)
    bound = -float(dual) if dual is not None and np.isfinite(dual) else math.inf
    if not np.isfinite(bound):
        bound = _lagrangian_bound(values, cost, capacity, budget)[0]
    return picked, bound, str(res.message)


def _constraints(
    cust: np.ndarray,
    offer: np.ndarray,
    m: int,
    n_offers: int,
    cost: np.ndarray,
    top: np.ndarray,
    budget: float,
) -> LinearConstraint:
    """The MILP's rows over the pair variables and the O counts k_o: at most one offer per
    customer with more than one pair, ``Σ_i x_io − k_o = 0``, and the budget on the counts
    when the capacities alone could exceed it."""
    n_pairs = len(cust)
    blocks, lower, upper = [], [], []
    per_customer = np.bincount(cust, minlength=m)
    shared = per_customer[cust] > 1  # a customer with one pair needs no row: its bound is 1
    if shared.any():
        row = np.cumsum(per_customer > 1)[cust[shared]] - 1
        blocks.append((row, np.flatnonzero(shared), np.ones(shared.sum()), int(row.max()) + 1))
        lower.append(np.full(blocks[-1][3], -np.inf))
        upper.append(np.ones(blocks[-1][3]))
    # Σ_i x_io − k_o = 0, with k_o the (integer) variable n_pairs + o
    blocks.append(
        (
            np.concatenate([offer, np.arange(n_offers)]),
            np.concatenate([np.arange(n_pairs), n_pairs + np.arange(n_offers)]),
            np.concatenate([np.ones(n_pairs), -np.ones(n_offers)]),
            n_offers,
        )
    )
    lower.append(np.zeros(n_offers))
    upper.append(np.zeros(n_offers))
    if float(np.dot(cost, top)) > budget:
        blocks.append((np.zeros(n_offers, dtype=np.int64), n_pairs + np.arange(n_offers), cost, 1))
        lower.append(np.array([-np.inf]))
        upper.append(np.array([budget]))
    offsets = np.cumsum([0] + [b[3] for b in blocks])
    matrix = sparse.csr_matrix(
        (
            np.concatenate([b[2] for b in blocks]),
            (
                np.concatenate([b[0] + off for b, off in zip(blocks, offsets, strict=False)]),
                np.concatenate([b[1] for b in blocks]),
            ),
        ),
        shape=(int(offsets[-1]), n_pairs + n_offers),
    )
    return LinearConstraint(matrix, np.concatenate(lower), np.concatenate(upper))


def _whole_pairs(res, objective, high, constraint, options, n_pairs: int) -> np.ndarray:
    """The pair variables of the MILP's solution, at a whole vertex (see `_exact`)."""
    x = res.x[:n_pairs]
    if np.abs(x - np.round(x)).max(initial=0.0) > 1e-6:
        # not a vertex (e.g. from a primal heuristic): fix the counts and take a simplex
        # vertex of the remaining LP, which is whole by total unimodularity
        k = np.round(res.x[n_pairs:])
        fixed = milp(
            objective,
            bounds=Bounds(
                np.concatenate([np.zeros(n_pairs), k]), np.concatenate([high[:n_pairs], k])
            ),
            constraints=constraint,
            options=options,
        )
        if fixed.x is not None:
            x = fixed.x[:n_pairs]
    return x


def _repair(
    picked: np.ndarray, values: np.ndarray, cost: np.ndarray, capacity: np.ndarray, budget: float
) -> np.ndarray:
    """Drop the least valuable pairs while a rounded MILP solution breaks a capacity or the
    budget (HiGHS accepts solutions within its feasibility tolerance, ~1e-7; we accept none)."""
    rows = np.flatnonzero(picked >= 0)
    rows = rows[np.argsort(values[rows, picked[rows]], kind="stable")]  # least valuable first
    keep = np.ones(len(rows), dtype=bool)
    for o in range(len(cost)):
        at = np.flatnonzero(picked[rows] == o)
        excess = len(at) - capacity[o]
        if excess > 0:
            keep[at[: int(excess)]] = False
    spend = np.cumsum(np.where(keep, cost[picked[rows]], 0.0)[::-1])[::-1]  # spend of rows[i:]
    over = spend > budget * (1 + 1e-12) + _EPS
    if over.any():
        keep[: np.flatnonzero(over)[-1] + 1] = False
    if not keep.all():
        log.info("plan: dropped %d pairs the exact solver took within its tolerance", (~keep).sum())
        picked = picked.copy()
        picked[rows[~keep]] = -1
    return picked


# -- greedy with a Lagrangian bound ----------------------------------------------------------
def _greedy(
    values: np.ndarray, cost: np.ndarray, capacity: np.ndarray, budget: float
) -> tuple[np.ndarray, float, str]:
    bound, lam, mu = _lagrangian_bound(values, cost, capacity, budget)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(cost > 0, values / np.where(cost > 0, cost, 1.0), np.inf)
    ratio = np.where(np.isfinite(values), ratio, -np.inf)
    keys = {
        "reduced profit": values - lam * cost[None, :] - mu[None, :],
        "value per cost": ratio,
        "value": values,
    }
    best, best_total, best_key = None, -math.inf, ""
    for name, key in keys.items():
        picked = _take_in_order(key, values, cost, capacity, budget)
        total = float(
            np.where(picked >= 0, values[np.arange(len(picked)), picked.clip(0)], 0.0).sum()
        )
        if total > best_total:
            best, best_total, best_key = picked, total, name
    return (
        best,
        bound,
        f"greedy by {best_key}; Lagrangian prices λ={lam:.4g}, μ={np.round(mu, 4).tolist()}",
    )


def _lagrangian_bound(
    values: np.ndarray,
    cost: np.ndarray,
    capacity: np.ndarray,
    budget: float,
    iterations: int = 200,
    tolerance: float = 1e-7,
) -> tuple[float, float, np.ndarray]:
    """Minimise L(λ, μ) by Kelley's cutting-plane method; return (the least L seen, λ, μ).

    L is convex and piecewise linear in its O + 1 prices, and each evaluation gives its value
    and a subgradient (``B − spend`` for λ, ``K_o − count_o`` for μ_o, from the customers'
    best reduced choices). The cuts ``L(y) ≥ L(y_j) + g_j·(y − y_j)`` form a model whose
    minimum over a box that holds the optimum (solved with `scipy.optimize.linprog`) is both
    the next point and a lower limit on min L; the method stops when the least L seen is
    within ``tolerance`` (relative) of that limit (Kelley 1960, "The cutting-plane method for
    solving convex programs", J. SIAM 8(4), 703-712).
    """
    columns = np.ascontiguousarray(values.T)
    n_offers = columns.shape[0]
    priced = np.isfinite(capacity)
    room = np.where(priced, capacity, 0.0)
    top = np.array([c[np.isfinite(c)].max(initial=0.0) for c in columns])
    upper = np.zeros(n_offers + 1)  # beyond these prices L only grows
    if np.isfinite(budget) and budget < _max_spend(columns, cost):
        paid = cost > 0
        upper[0] = float(np.max(top[paid] / cost[paid], initial=0.0))
    upper[1:] = np.where(priced, top, 0.0)
    budget_term = budget if upper[0] > 0 else 0.0

    def evaluate(y: np.ndarray) -> tuple[float, np.ndarray]:
        best, choice = _best_choice(columns, y[0] * cost + y[1:])
        taken = choice[choice >= 0]
        counts = np.bincount(taken, minlength=n_offers)
        value = float(best.sum() + y[0] * budget_term + np.dot(y[1:], room))
        slope = np.concatenate([[budget_term - cost[taken].sum()], room - counts])
        return value, slope

    y = np.zeros(n_offers + 1)
    cuts, rhs = [], []
    least, at = math.inf, y
    objective = np.zeros(n_offers + 2)
    objective[-1] = 1.0  # minimise t over (y, t)
    bounds = [(0.0, u) for u in upper] + [(None, None)]
    for _ in range(iterations):
        value, slope = evaluate(y)
        if value < least:
            least, at = value, y
        cuts.append(np.concatenate([slope, [-1.0]]))
        rhs.append(float(slope @ y) - value)
        model = linprog(objective, A_ub=np.array(cuts), b_ub=np.array(rhs), bounds=bounds)
        if model.status != 0 or least - model.fun <= tolerance * max(abs(least), 1.0):
            break
        y = model.x[:-1]
    return least, float(at[0]), at[1:].copy()


def _best_choice(columns: np.ndarray, shift: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per customer, ``max(0, max_o (columns[o] − shift[o]))`` and the offer that gives it
    (−1 when nothing is worth taking)."""
    best = np.zeros(columns.shape[1])
    choice = np.full(columns.shape[1], -1, dtype=np.int64)
    for o in range(columns.shape[0]):
        reduced = columns[o] - shift[o]
        better = reduced > best
        np.copyto(best, reduced, where=better)
        choice[better] = o
    return best, choice


def _max_spend(columns: np.ndarray, cost: np.ndarray) -> float:
    """Spend if every customer took its costliest candidate (an upper limit on any plan)."""
    costly = np.zeros(columns.shape[1])
    for o in range(columns.shape[0]):
        costly = np.maximum(costly, np.where(np.isfinite(columns[o]), cost[o], 0.0))
    return float(costly.sum())


def _take_in_order(
    key: np.ndarray, values: np.ndarray, cost: np.ndarray, capacity: np.ndarray, budget: float
) -> np.ndarray:
    """Take pairs in decreasing ``key``, skipping any that no longer fits.

    Works in rounds: each unassigned customer puts forward its best remaining pair; in key
    order, a pair is taken while its offer has room and the spend stays within budget; pairs
    that can no longer fit are dropped and the rest try again.
    """
    m = values.shape[0]
    key = np.where(np.isfinite(values), key, -np.inf)
    picked = np.full(m, -1, dtype=np.int64)
    room = capacity.copy()
    left = float(budget)
    while True:
        closed = (room < 1) | (cost > left + _EPS)
        if closed.all():
            break
        key[:, closed] = -np.inf
        open_rows = np.flatnonzero((picked < 0) & np.isfinite(key.max(axis=1)))
        if len(open_rows) == 0:
            break
        offer = key[open_rows].argmax(axis=1)
        order = np.argsort(-key[open_rows, offer], kind="stable")
        rows, offer = open_rows[order], offer[order]
        fits = np.zeros(len(rows), dtype=bool)
        for o in np.unique(offer):
            at = np.flatnonzero(offer == o)
            fits[at[: int(min(room[o], len(at)))]] = True
        spend = np.cumsum(np.where(fits, cost[offer], 0.0))
        take = fits & (spend <= left + _EPS)
        picked[rows[take]] = offer[take]
        room -= np.bincount(offer[take], minlength=len(room))
        left -= float(cost[offer[take]].sum())
        key[rows[take], :] = -np.inf
    return picked
