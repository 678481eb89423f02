"""The monthly simulation of the demo portfolio: a known competing-risks process.

For each simulated month m and each customer active in m, the features are computed exactly as
the panel defines them (DEVELOPERS.md), from what was known at the end of month m − 1. Then

    λ_k = λ0_k(tenure) · exp(Σ_c β_k,c · x_c)        for k in churn, move_out, other,
    P(exit in m) = 1 − exp(−Σ_k λ_k),  the cause being k with probability λ_k / Σ_k λ_k,
    P(uptake in m | not holding) = 1 − exp(−λ_u),   λ_u = λ0_u(tenure) · exp(Σ_c β_u,c · x_c),

with the uptake drawn independently of the exit. A feature that is NaN in the panel (the lagged
activity of a customer's first month) contributes 0 to the sum. The campaign multiplies the churn
hazard of each offered customer by the hazard ratio of its segment (`_params.CAMPAIGN`, from the
features of the offer month) in the months after the offer month.
"""

from __future__ import annotations

import copy
import dataclasses
import logging
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import sparse

from .._months import parse_month
from ..spatial import gamma_poisson_rates, neighbour_pairs
from . import _params as P
from ._geography import District, build_district
from ._population import (
    ACTIVITY_NAMES,
    Population,
    draw_activity,
    new_contract_ends,
    stock_contract_ends,
)

log = logging.getLogger(__name__)

ACTIVITY_COLUMNS = ACTIVITY_NAMES
FEATURE_COLUMNS = (
    P.HOLDS,
    "season_sin",
    "season_cos",
    "monthly_margin",
    "plan_speed",
    *ACTIVITY_COLUMNS,
    "complaints_3m",
    "rental_share",
    "local_move_rate",
    P.NEARBY_ADOPTERS,
    P.NEARBY_SHARE,
)
_FLOAT32 = frozenset(
    [
        P.HOLDS,
        "season_sin",
        "season_cos",
        "monthly_margin",
        *ACTIVITY_COLUMNS,
        "complaints_3m",
        "rental_share",
        P.NEARBY_ADOPTERS,
    ]
)
STREAMS = ("geography", "portfolio", "events", "activity", "campaign")
"""Names of the independent random streams, in the order of ``SeedSequence(seed).spawn``."""


@dataclass
class Calendar:
    """Month indices of the scenario (``year * 12 + month − 1``)."""

    first: int  # first simulated month (burn-in starts here; the product launches here)
    window_start: int
    as_of: int
    campaign: int
    move_rate_months: int = 12


@dataclass
class SimulationResult:
    pop: Population
    district: District
    calendar: Calendar
    activity: dict[str, np.ndarray]
    features: dict[str, np.ndarray]
    campaigns: pd.DataFrame
    n_pairs: int
    effect_sums: np.ndarray


def calendar_for(months: int) -> Calendar:
    """The calendar of a scenario whose panel window has ``months`` months ending at AS_OF."""
    as_of = parse_month(P.AS_OF)
    window_start = as_of - months + 1
    return Calendar(
        first=window_start - P.BURN_IN_MONTHS,
        window_start=window_start,
        as_of=as_of,
        campaign=parse_month(P.CAMPAIGN_MONTH),
    )


def linear_predictor(cause: str, x: dict[str, np.ndarray]) -> np.ndarray:
    """Σ_c β_cause,c · x_c over the columns with an effect on ``cause`` (NaN counts as 0)."""
    total = 0.0
    for column, beta in P.BETA[cause].items():
        if beta != 0.0:
            total = total + beta * np.nan_to_num(np.asarray(x[column], dtype=np.float64))
    return np.broadcast_to(np.asarray(total, dtype=np.float64), np.shape(x["season_sin"])).copy()


@dataclass
class World:
    """The whole state of the simulated district at the end of a month: customers, who
    occupies each premise, and the area move-out counts and exposure by month."""

    customers: int  # target portfolio size
    cal: Calendar
    district: District
    adjacency: sparse.csr_matrix
    pop: Population
    occupant: np.ndarray
    moveouts: np.ndarray  # (months since first − W, areas)
    exposure: np.ndarray
    n_pairs: int = 0  # premise pairs within the radius
    campaign: pd.DataFrame | None = None
    # Σ over offered customer-months in the effect window of the churn hazard without the
    # offer times the customer's hazard ratio, and of the hazard without it.
    effect_sums: np.ndarray = dataclasses.field(default_factory=lambda: np.zeros(2))

    def branch(self) -> World:
        """A copy whose future can be simulated without touching this one (the district and
        its adjacency, which never change, are shared)."""
        return dataclasses.replace(
            self,
            pop=copy.deepcopy(self.pop),
            occupant=self.occupant.copy(),
            moveouts=self.moveouts.copy(),
            exposure=self.exposure.copy(),
            effect_sums=self.effect_sums.copy(),
        )


@dataclass
class Month:
    """What happened in one simulated month to the customers ``active`` in it."""

    active: np.ndarray
    x: dict[str, np.ndarray]
    lam: dict[str, np.ndarray]  # exit hazards, the campaign effect included
    lam_u: np.ndarray  # uptake hazard, NaN where the product is held
    cause: np.ndarray  # 0 stays, 1.. index into CAUSES + 1
    takes_up: np.ndarray
    effect: np.ndarray
    activity: dict[str, np.ndarray]


def random_streams(seed: int | list[int]) -> dict[str, np.random.Generator]:
    """One generator per name of `STREAMS`, from ``SeedSequence(seed).spawn``."""
    spawned = np.random.SeedSequence(seed).spawn(len(STREAMS))
    return {name: np.random.default_rng(s) for name, s in zip(STREAMS, spawned, strict=True)}


def start_world(
    customers: int, months: int, rng: dict[str, np.random.Generator], *, extra_months: int = 0
) -> World:
    """The district and its stock of customers before the first simulated month.

    ``extra_months``: room for simulating that many months past the calendar's last month.
    """
    cal = calendar_for(months)
    district = build_district(customers, rng["geography"])
    n_premises = district.premise_x.size
    pairs = neighbour_pairs(district.premise_x, district.premise_y, P.RADIUS_M)
    log.info("district: %d premises, %d pairs within %d m", n_premises, len(pairs), P.RADIUS_M)
    adjacency = _adjacency(pairs, n_premises)
    n_sim = cal.as_of - cal.first + 1 + extra_months
    capacity = customers + int(customers * (P.PORTFOLIO["arrival_rate"] + 0.01) * n_sim) + 100
    pop = Population(capacity)
    occupant = np.full(n_premises, -1, dtype=np.int64)
    _add_stock(pop, occupant, customers, cal.first, rng["portfolio"])

    # Move-outs and active customer-months per area, by month from first − W (the stock's
    # months before the simulation count as exposure; nobody in the tables moved out then).
    w = cal.move_rate_months
    n_areas = district.area_id.size
    moveouts = np.zeros((n_sim + w, n_areas))
    exposure = np.zeros((n_sim + w, n_areas))
    stock_area = district.premise_area[pop.premise[: pop.n]]
    for t in range(cal.first - w, cal.first):
        exposure[t - cal.first + w] = np.bincount(
            stock_area[pop.start[: pop.n] <= t], minlength=n_areas
        )
    return World(customers, cal, district, adjacency, pop, occupant, moveouts, exposure, len(pairs))


def simulate(
    customers: int, seed: int, months: int, *, keep_features: bool = True
) -> SimulationResult:
    """Run the demo process for a portfolio of about ``customers`` customers.

    Without ``keep_features`` the per-customer-month features and hazards are not kept (the
    result's ``features`` is empty): the input tables and the truth do not need them, and at
    a million customers they are the largest part of the memory. The random draws, and so the
    tables, are the same either way.
    """
    rng = random_streams(seed)
    world = start_world(customers, months, rng)
    cal = world.cal
    activity_parts: list[dict[str, np.ndarray]] = []
    feature_parts: list[dict[str, np.ndarray]] = []
    for m in range(cal.first, cal.as_of + 1):
        month = simulate_month(world, m, rng)
        active = month.active
        activity_parts.append(
            {"customer": active, "month": np.full(active.size, m), **month.activity}
        )
        if keep_features and m >= cal.window_start:
            feature_parts.append(
                _feature_row(
                    active, m, month.x, month.cause, month.takes_up, month.effect, month.lam,
                    month.lam_u,
                )
            )  # fmt: skip
    return SimulationResult(
        pop=world.pop,
        district=world.district,
        calendar=cal,
        activity=_stack(activity_parts),
        features=_stack(feature_parts) if feature_parts else {},
        campaigns=world.campaign,
        n_pairs=world.n_pairs,
        effect_sums=world.effect_sums,
    )


def simulate_month(world: World, m: int, rng: dict[str, np.random.Generator]) -> Month:
    """Simulate month ``m`` from the state at the end of ``m − 1``; ``world`` moves to the end
    of ``m``. The draws are taken from ``rng`` in a fixed order (same streams, same month)."""
    cal, pop, occupant, district = world.cal, world.pop, world.occupant, world.district
    # --- the state at the end of month m - 1 -----------------------------------------------
    occupied = occupant >= 0
    holder = np.zeros(occupant.size, dtype=bool)
    holder[occupied] = (pop.uptake[occupant[occupied]] >= 0) & (
        pop.uptake[occupant[occupied]] <= m - 1
    )
    near_customers = world.adjacency @ occupied.astype(np.float64)
    near_holders = world.adjacency @ holder.astype(np.float64)
    w = cal.move_rate_months
    row = m - cal.first + w
    with np.errstate(divide="ignore"):  # an area without exposure gets the overall rate
        move_rate = gamma_poisson_rates(
            world.moveouts[row - w : row].sum(0), world.exposure[row - w : row].sum(0)
        )
    n_alive = int(occupied.sum())

    # --- arrivals: new customers on premises free at the end of m - 1 -----------------------
    if m > cal.first:
        _add_arrivals(pop, occupant, world.customers, n_alive, m, rng["portfolio"])
    active = np.flatnonzero((pop.start[: pop.n] <= m) & (pop.end[: pop.n] < 0))

    # --- features of month m (known at the end of m - 1) ------------------------------------
    premise = pop.premise[active]
    area = district.premise_area[premise]
    x = _features(pop, active, m, district, area, near_customers[premise], near_holders[premise])
    x["local_move_rate"] = move_rate[area]

    # --- hazards and events -----------------------------------------------------------------
    lam = {k: P.BASELINE[k](x["tenure"]) * np.exp(linear_predictor(k, x)) for k in P.CAUSES}
    effect = np.zeros(active.size, dtype=np.int8)
    if cal.campaign < m <= cal.campaign + P.CAMPAIGN["effect_months"]:
        effect = pop.offered[active].astype(np.int8)
        ratio = np.where(effect == 1, pop.offer_hr[active], 1.0)
        world.effect_sums += [
            (lam["churn"] * ratio)[effect == 1].sum(),
            lam["churn"][effect == 1].sum(),
        ]
        lam["churn"] = lam["churn"] * ratio
    holds = x[P.HOLDS] == 1
    lam_u = P.BASELINE[P.PRODUCT](x["tenure"]) * np.exp(linear_predictor(P.PRODUCT, x))
    lam_u[holds] = np.nan
    total = lam["churn"] + lam["move_out"] + lam["other"]
    ev = rng["events"]
    exits = ev.random(active.size) < -np.expm1(-total)
    pick = ev.random(active.size) * total
    cause = np.where(pick < lam["churn"], 1, np.where(pick < lam["churn"] + lam["move_out"], 2, 3))
    cause = np.where(exits, cause, 0).astype(np.int8)
    takes_up = ~holds & (ev.random(active.size) < -np.expm1(-np.nan_to_num(lam_u)))

    if m == cal.campaign:
        world.campaign = _run_campaign(pop, active, x, m, rng["campaign"])

    # --- activity of month m ----------------------------------------------------------------
    n_areas = district.area_id.size
    outage = (
        rng["activity"].random(n_areas)
        < P.ACTIVITY["complaints"]["outage_probability_per_area_month"]
    )
    values = draw_activity(pop, active, m, outage, area, rng["activity"])
    for name in ACTIVITY_COLUMNS:
        pop.prev[name][active] = values[name]
    hist = pop.complaints_hist
    hist[active, 1:] = hist[active, :2]
    hist[active, 0] = values["complaints"]

    # --- the end of month m -----------------------------------------------------------------
    world.exposure[row] = np.bincount(area, minlength=n_areas)
    world.moveouts[row] = np.bincount(area[cause == 2], minlength=n_areas)
    leaving = active[cause > 0]
    pop.end[leaving] = m
    pop.reason[leaving] = cause[cause > 0]
    occupant[pop.premise[leaving]] = -1
    pop.uptake[active[takes_up]] = m
    return Month(active, x, lam, lam_u, cause, takes_up, effect, values)


def _adjacency(pairs: np.ndarray, n: int) -> sparse.csr_matrix:
    """Symmetric 0/1 matrix of premises within the radius (no diagonal), built directly in
    CSR form with 32-bit indices to keep large districts small."""
    rows = np.concatenate([pairs[:, 0], pairs[:, 1]]).astype(np.int32)
    cols = np.concatenate([pairs[:, 1], pairs[:, 0]]).astype(np.int32)
    order = np.argsort(rows, kind="stable")
    cols = cols[order]
    indptr = np.zeros(n + 1, dtype=np.int32)
    np.cumsum(np.bincount(rows, minlength=n), out=indptr[1:])
    data = np.ones(cols.size, dtype=np.float64)
    return sparse.csr_matrix((data, cols, indptr), shape=(n, n))


def _add_stock(pop: Population, occupant: np.ndarray, n: int, first: int, rng) -> None:
    """The customers present at the first simulated month, with tenures up to the cap.

    Tenure τ at ``first`` is 1 + floor of an exponential (mean ``stock_tenure_mean_months``)
    truncated so that τ ≤ ``stock_tenure_max_months``.
    """
    mean = P.PORTFOLIO["stock_tenure_mean_months"]
    cap = P.PORTFOLIO["stock_tenure_max_months"]
    u = rng.random(n)
    tenure = 1 + np.floor(-mean * np.log1p(-u * -np.expm1(-(cap - 1) / mean))).astype(np.int64)
    tenure = np.minimum(tenure, cap)
    start = first - tenure
    premise = rng.choice(occupant.size, size=n, replace=False)
    idx = pop.add(start, premise, stock_contract_ends(start, first, rng), rng)
    occupant[premise] = idx


def _add_arrivals(
    pop: Population, occupant: np.ndarray, target: int, n_alive: int, m: int, rng
) -> None:
    rate = P.PORTFOLIO["arrival_rate"] * target + P.PORTFOLIO["arrival_feedback"] * (
        target - n_alive
    )
    free = np.flatnonzero(occupant < 0)
    k = min(int(rng.poisson(max(rate, 0.0))), free.size)
    if k == 0:
        return
    premise = np.sort(rng.choice(free, size=k, replace=False))
    start = np.full(k, m, dtype=np.int64)
    idx = pop.add(start, premise, new_contract_ends(start, rng), rng)
    occupant[premise] = idx


def _features(
    pop: Population,
    active: np.ndarray,
    m: int,
    district: District,
    area: np.ndarray,
    near_customers: np.ndarray,
    near_holders: np.ndarray,
) -> dict[str, np.ndarray]:
    """The panel's features of month ``m`` for ``active`` (DEVELOPERS.md, panel contract)."""
    sin, cos = P.season_terms(m)
    uptake = pop.uptake[active]
    x: dict[str, np.ndarray] = {
        "tenure": (m - pop.start[active]).astype(np.int64),
        P.HOLDS: ((uptake >= 0) & (uptake < m)).astype(np.int8),
        # season and area attributes are float32 in the panel; use exactly those values
        "season_sin": np.full(active.size, float(np.float32(sin))),
        "season_cos": np.full(active.size, float(np.float32(cos))),
        # float32 like the panel's column, so the hazard uses exactly the panel's value
        "monthly_margin": pop.margin[active].astype(np.float32).astype(np.float64),
        "plan_speed": pop.plan[active],
    }
    for name in ACTIVITY_COLUMNS:
        x[name] = pop.prev[name][active].copy()
    x["complaints_3m"] = pop.complaints_hist[active].sum(axis=1)
    x["rental_share"] = district.rental_share[area].astype(np.float32).astype(np.float64)
    x[P.NEARBY_ADOPTERS] = near_holders
    x[P.NEARBY_SHARE] = np.divide(
        near_holders, near_customers, out=np.zeros(active.size), where=near_customers > 0
    )
    return x


def _run_campaign(
    pop: Population, active: np.ndarray, x: dict[str, np.ndarray], m: int, rng
) -> pd.DataFrame:
    """Offer the loyalty credit to a random half of the eligible customers of month ``m``:
    those whose fixed term ends within a month or who are already out of contract. Each
    eligible customer's true hazard ratio comes from its segment (features of month ``m``)."""
    keep = (x["contract_months_left"] <= 1) & ~pop.do_not_contact[active] & ~pop.hardship[active]
    eligible = active[keep]
    frame = pd.DataFrame({name: values[keep] for name, values in x.items()})
    frame["tenure_start"] = x["tenure"][keep]
    pop.offer_hr[eligible] = P.campaign_hazard_ratios(frame)
    order = rng.permutation(eligible.size)
    offered = np.zeros(eligible.size, dtype=bool)
    offered[order[: eligible.size // 2]] = True
    pop.offered[eligible[offered]] = True
    return pd.DataFrame(
        {
            "customer": eligible,
            "month": m,
            "offer": P.CAMPAIGN["offer"],
            "arm": np.where(offered, "offered", "held_out"),
        }
    )


def _feature_row(active, m, x, cause, takes_up, effect, lam, lam_u) -> dict:
    """One month of the features table: ids, events, features and the hazards used.

    Columns the panel keeps as float32 (season, static, lagged activity, area attributes) are
    float32 here too, and the hazards were computed from those float32 values; the spatial
    rates and the hazards are float64.
    """
    out = {
        "customer": active.astype(np.int32),
        "month": np.full(active.size, m, dtype=np.int32),
        "tenure_start": x["tenure"].astype(np.int16),
        "churn": (cause == 1).astype(np.int8),
        "move_out": (cause == 2).astype(np.int8),
        "other_exit": (cause == 3).astype(np.int8),
        f"uptake_{P.PRODUCT}": takes_up.astype(np.int8),
    }
    for name in FEATURE_COLUMNS:
        value = x[name]
        if name == "plan_speed":
            out[name] = value.astype(np.int8)
        elif name in _FLOAT32:
            out[name] = value.astype(np.float32)
        else:
            out[name] = value.astype(np.float64)
    out[f"offer_{P.CAMPAIGN['offer']}"] = effect
    out["hazard_churn"] = lam["churn"]
    out["hazard_move_out"] = lam["move_out"]
    out["hazard_other_exit"] = lam["other"]
    out[f"hazard_uptake_{P.PRODUCT}"] = lam_u
    return out


def _stack(parts: list[dict[str, np.ndarray]]) -> dict[str, np.ndarray]:
    """Concatenate monthly parts column by column, sorted by customer then month; the parts
    are emptied as they are used, so that the peak memory stays near one copy."""
    customer = np.concatenate([part["customer"] for part in parts])
    month = np.concatenate([part["month"] for part in parts])
    order = np.lexsort((month, customer))
    out = {"customer": customer[order], "month": month[order]}
    del customer, month
    for name in [k for k in parts[0] if k not in out]:
        out[name] = np.concatenate([part.pop(name) for part in parts])[order]
    parts.clear()
    return out
