"""``lifecycle bench decisions``, scoring to plan: a fitted model's hazards for a whole portfolio,
turned into scores, lifetime values, offer values and the contact plan.

The input is synthetic and seeded (`synthetic_scoring_input`): a boosted model
(`lifecycle.models.BoostedHazard`) fitted on the panel of a small synthetic portfolio
(`lifecycle.bench._synthetic.synthetic_tables`), and the scoring snapshot of a large one built
from the same generator by `lifecycle.panel.build_snapshot`, with seeded do-not-contact and
hardship flags and past contacts. Three offers: a churn credit, a move-out transfer and a trial
of the synthetic product, with budget and weekly capacities that scale with the portfolio.

The measured core (`score_value_plan`), everything after the model and the snapshot exist:

1. hazards for months 1..24 of every customer (`HazardModel.hazard_array`, in blocks of
   customers so that the repeated future rows never exist for the whole portfolio at once);
2. `lifecycle.models.score_customers` (survival and cumulative incidence at 3, 6, 12 months);
3. `lifecycle.value.lifetime_value` over 24 months from ``S(t)`` of the same hazards;
4. `lifecycle.value.offer_values` for every customer and offer;
5. `lifecycle.decisions.make_plan` (greedy with its Lagrangian bound at this size, weeks,
   reasons for the planned rows).

Checks made on the way, reported in the note: survival plus the cumulative incidences of the
terminal causes add up to 1 at every horizon; the hazards predicted block by block equal those
predicted in one call for a random sample of customers; the plan keeps within the budget and
every offer's capacity and selects no excluded customer.
"""

from __future__ import annotations

import logging
import math
import time
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from ._harness import Measurement, measure

if TYPE_CHECKING:
    from ..decisions import Offer, Plan, PlanSettings
    from ..models import BoostedHazard

log = logging.getLogger(__name__)

SCORE_MONTHS = 24  # months of hazards predicted, and the lifetime-value horizon
HORIZONS = (3, 6, 12)
ANNUAL_DISCOUNT = 0.08
TRAIN_MONTHS = 24
BLOCK_CUSTOMERS = 50_000  # customers whose future rows are predicted at once
WEEKS = 4
# per customer in the portfolio: the budget, and each offer's weekly capacity
BUDGET_PER_CUSTOMER = 0.06
WEEKLY_SHARE = (0.0015, 0.0005, 0.001)
PRESENT_SHARE = 0.5  # about 56 % of the generator's customers are present at its extract month
SAMPLE_CHECK = 500  # customers whose blocked hazards are compared with one call


def scoring_offers(customers: int) -> tuple[Offer, ...]:
    """The three offers of the benchmark, capacities scaled to ``customers``."""
    from ..decisions import Eligibility, Offer

    def capacity(share: float) -> int:
        return max(1, round(share * customers))

    return (
        Offer(
            name="loyalty_credit",
            target="churn",
            cost=8.0,
            hazard_ratio=0.75,
            months=6,
            cooldown_months=3,
            weekly_capacity=capacity(WEEKLY_SHARE[0]),
            eligible=Eligibility(minimum={"tenure": 3}),
        ),
        Offer(
            name="moving_transfer",
            target="move_out",
            cost=5.0,
            hazard_ratio=0.7,
            months=3,
            cooldown_months=3,
            weekly_capacity=capacity(WEEKLY_SHARE[1]),
        ),
        Offer(
            name="gadget_trial",
            target="uptake_gadget",
            cost=2.0,
            hazard_ratio=1.8,
            months=3,
            value_per_uptake=60.0,
            cooldown_months=3,
            weekly_capacity=capacity(WEEKLY_SHARE[2]),
            eligible=Eligibility(not_holding=("gadget",)),
        ),
    )


def plan_settings(customers: int) -> PlanSettings:
    """Budget and weeks scaled to ``customers``; the greedy allocation, with its bound."""
    from ..decisions import PlanSettings

    return PlanSettings(
        budget=BUDGET_PER_CUSTOMER * customers,
        weeks=WEEKS,
        solver="greedy",
        urgency="cif_{target}_3m",
        reasons=3,
    )


@dataclass
class ScoringInput:
    """What `score_value_plan` starts from (built outside the measured time)."""

    model: BoostedHazard  # fitted
    snapshot: pd.DataFrame  # one row per customer, features for the first month predicted
    flags: pd.DataFrame  # customer_id, do_not_contact, hardship
    last_contact: pd.Series  # month index of the last contact, by customer_id
    fit_seconds: float
    train_rows: int


def synthetic_scoring_input(
    customers: int,
    *,
    train_customers: int = 20_000,
    n_threads: int | None = 1,
    model_params: dict | None = None,
    seed: int = 0,
) -> ScoringInput:
    """A boosted model fitted on a small synthetic portfolio, and a snapshot of ``customers``.

    The model is fitted on the panel of ``train_customers`` synthetic customers over
    `TRAIN_MONTHS` months; the snapshot holds the first ``customers`` customers present at the
    extract month of a second synthetic portfolio (seeded differently), each with its
    features for the next month. Flags and past contacts are drawn with the seed.
    """
    from ..config import Config, PanelSettings
    from ..models import BoostedHazard
    from ..panel import build_panel, build_snapshot
    from ._synthetic import synthetic_tables

    train = synthetic_tables(train_customers, TRAIN_MONTHS, seed=seed)
    panel = build_panel(
        train, int(train.extract_month), config=Config(panel=PanelSettings(TRAIN_MONTHS))
    )
    model = BoostedHazard(n_threads=n_threads, random_state=seed, **(model_params or {}))
    began = time.perf_counter()
    model.fit(panel)
    fit_seconds = time.perf_counter() - began
    train_rows = len(panel)
    del panel, train

    drawn = math.ceil(customers / PRESENT_SHARE)
    tables = synthetic_tables(drawn, 2, seed=seed + 1)
    snapshot = build_snapshot(
        tables, int(tables.extract_month), config=Config(panel=PanelSettings(2))
    )
    if len(snapshot) < customers:
        raise RuntimeError(f"only {len(snapshot)} of {drawn} synthetic customers are present")
    snapshot = snapshot.iloc[:customers].reset_index(drop=True)
    del tables

    rng = np.random.default_rng(seed + 2)
    ids = snapshot["customer_id"].to_numpy()
    flags = pd.DataFrame(
        {
            "customer_id": ids,
            "do_not_contact": (rng.random(customers) < 0.02).astype(np.int8),
            "hardship": (rng.random(customers) < 0.015).astype(np.int8),
        }
    )
    contacted = rng.random(customers) < 0.05
    plan_month = _first_month(snapshot)
    last_contact = pd.Series(
        (plan_month - rng.integers(1, 12, int(contacted.sum()))).astype(np.float64),
        index=ids[contacted],
    )
    return ScoringInput(model, snapshot, flags, last_contact, fit_seconds, train_rows)


def _first_month(snapshot: pd.DataFrame) -> int:
    from .._months import categorical_to_index

    return int(categorical_to_index(snapshot["month"])[0])


def hazards_in_blocks(
    model: BoostedHazard, snapshot: pd.DataFrame, months: int, block: int = BLOCK_CUSTOMERS
) -> np.ndarray:
    """``model.hazard_array(snapshot, months)`` computed ``block`` customers at a time.

    The hazards of a customer depend on its own snapshot row only, so the blocks give the
    same array as one call, while the repeated future rows (``months`` per customer) exist for
    one block at a time.
    """
    n = len(snapshot)
    out = np.empty((n, months, len(model.causes_)))
    for lo in range(0, n, block):
        hi = min(lo + block, n)
        out[lo:hi] = model.hazard_array(snapshot.iloc[lo:hi], months)
    return out


@dataclass
class ScoringResult:
    """What `score_value_plan` produced, with the seconds of each step."""

    hazards: np.ndarray
    scores: pd.DataFrame
    lifetime_value: np.ndarray
    offer_values: pd.DataFrame
    plan: Plan
    seconds: dict[str, float]


def score_value_plan(data: ScoringInput, customers: int) -> ScoringResult:
    """Hazards, scores, lifetime values, offer values and the plan of ``data.snapshot``."""
    from ..decisions import make_plan
    from ..models import score_customers, survival_and_incidence
    from ..value import lifetime_value, offer_values

    model, snapshot = data.model, data.snapshot
    offers = scoring_offers(customers)
    seconds: dict[str, float] = {}
    clock = time.perf_counter()

    def lap(step: str) -> None:
        nonlocal clock
        now = time.perf_counter()
        seconds[step] = now - clock
        clock = now

    hazards = hazards_in_blocks(model, snapshot, SCORE_MONTHS)
    lap("hazards")
    scores = score_customers(model, snapshot, HORIZONS, hazards=hazards)
    lap("scores")
    k = len(model.terminal_causes_)
    margin = snapshot["monthly_margin"].to_numpy(dtype=np.float64)
    survival, _ = survival_and_incidence(hazards[..., :k])
    ltv = lifetime_value(survival, margin, annual_discount=ANNUAL_DISCOUNT)
    scores["lifetime_value"] = ltv
    del survival
    lap("lifetime value")
    values = offer_values(
        hazards,
        model.causes_,
        margin,
        offers,
        annual_discount=ANNUAL_DISCOUNT,
        horizon=SCORE_MONTHS,
        customer_ids=snapshot["customer_id"].to_numpy(),
    )
    lap("offer values")
    # customer-major, offers in the order given: one row of the (n, offers) matrix each
    ev = values["expected_value"].to_numpy().reshape(len(snapshot), len(offers))
    frame = snapshot.merge(scores, on="customer_id", how="left", validate="1:1").merge(
        data.flags, on="customer_id", how="left", validate="1:1"
    )
    plan = make_plan(
        frame,
        ev,
        offers,
        plan_settings(customers),
        last_contact=data.last_contact,
        model=model,
        snapshot=snapshot,
    )
    lap("plan")
    return ScoringResult(hazards, scores, ltv, values, plan, seconds)


def consistency(data: ScoringInput, result: ScoringResult, customers: int) -> dict[str, float]:
    """The checks of the module docstring, as numbers (0 or True where all is well).

    ``total_error``: max over customers and horizons of ``|S(h) + Σ_k F_k(h) − 1|`` (terminal
    causes); ``block_error``: max ``|blocked − one call|`` of the hazards of a random sample of
    customers; ``over_budget``: plan cost minus budget (≤ 0); ``over_capacity``: the largest
    number of contacts of an offer beyond its capacity (≤ 0); ``excluded_selected``: planned
    customers flagged do-not-contact or hardship.
    """
    model, scores, plan = data.model, result.scores, result.plan
    total = 0.0
    for h in HORIZONS:
        cif = sum(scores[f"cif_{c}_{h}m"].to_numpy() for c in model.terminal_causes_)
        total = max(total, float(np.abs(scores[f"survival_{h}m"].to_numpy() + cif - 1).max()))
    rng = np.random.default_rng(5)
    n = len(data.snapshot)
    sample = np.sort(rng.choice(n, size=min(SAMPLE_CHECK, n), replace=False))
    once = model.hazard_array(data.snapshot.iloc[sample], SCORE_MONTHS)
    block_error = float(np.abs(once - result.hazards[sample]).max())
    offers = plan.offers
    settings = plan_settings(customers)
    table = plan.table
    counts = table["offer"].value_counts()
    over_capacity = max(int(counts.get(o.name, 0)) - o.capacity(settings.weeks) for o in offers)
    flagged = data.flags.set_index("customer_id").loc[table["customer_id"]]
    excluded = int(((flagged["do_not_contact"] == 1) | (flagged["hardship"] == 1)).sum())
    return {
        "total_error": total,
        "block_error": block_error,
        "over_budget": float(table["cost"].sum() - settings.budget),
        "over_capacity": float(over_capacity),
        "excluded_selected": float(excluded),
    }


def _case(
    customers: int,
    train_customers: int,
    n_threads: int | None,
    model_params: dict | None,
    seed: int,
) -> dict:
    data = synthetic_scoring_input(
        customers,
        train_customers=train_customers,
        n_threads=n_threads,
        model_params=model_params,
        seed=seed,
    )
    result = score_value_plan(data, customers)
    seconds = sum(result.seconds.values())
    checks = consistency(data, result, customers)
    a = result.plan.allocation
    model = data.model
    trees = sum(
        m.n_iter_ * m.n_trees_per_iteration_
        for m in [model.terminal_model_, *model.uptake_models_.values()]
        if m is not None
    )
    steps = ", ".join(f"{k} {v:.1f}s" for k, v in result.seconds.items())
    ok = (
        checks["total_error"] < 1e-9
        and checks["block_error"] == 0.0
        and checks["over_budget"] <= 1e-6
        and checks["over_capacity"] <= 0
        and checks["excluded_selected"] == 0
    )
    note = (
        f"{steps}; {a.solver}: EV {a.objective:,.0f}, bound {a.bound:,.0f}, gap "
        f"{100 * a.relative_gap:.4f}%, {len(result.plan.table):,} contacts; model fitted on "
        f"{data.train_rows:,} rows in {data.fit_seconds:.1f}s (not counted), {trees} trees, "
        f"{n_threads or 'all'} thread(s); checks {'hold' if ok else 'FAIL'} "
        f"(S+ΣF−1 {checks['total_error']:.1e}, blocks vs one call {checks['block_error']:.1e}, "
        f"budget {checks['over_budget']:+,.0f}, capacity {checks['over_capacity']:+.0f}, "
        f"excluded {checks['excluded_selected']:.0f})"
    )
    return {"seconds": seconds, "note": note}


def run_scoring_bench(
    customers: int = 1_000_000,
    *,
    train_customers: int = 20_000,
    n_threads: int | None = 2,
    model_params: dict | None = None,
    seed: int = 0,
) -> list[Measurement]:
    """Scoring, lifetime value, offer values and the plan for ``customers`` × 3 offers
    (target: at most 120 s and 6 GB on 2 cores), in a fresh process."""
    return [
        measure(
            "decisions",
            "score + value + 3 offers + plan",
            # not the plan cases' size label: the harness pairs cases of equal size for ratios
            f"{customers:,} customers",
            _case,
            customers=customers,
            train_customers=train_customers,
            n_threads=n_threads,
            model_params=model_params,
            seed=seed,
        )
    ]
