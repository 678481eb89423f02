"""The contact plan: the solvers against brute force and scipy's LP, the schedule, the reasons.

References: the optimum of each small instance is found by enumerating every assignment in the
test itself (brute force); the LP relaxation by `scipy.optimize.linprog` (HiGHS); weak duality
(every Lagrangian value bounds the optimum from above, e.g. Bertsekas, "Nonlinear Programming",
2nd ed., section 6.1) is what makes the greedy's reported bound valid.
"""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import sparse
from scipy.optimize import linprog
from sklearn.linear_model import LogisticRegression

from lifecycle.decisions import (
    PLAN_COLUMNS,
    Offer,
    Phrase,
    PlanSettings,
    allocate,
    make_plan,
    reason_concept,
    schedule_weeks,
    top_reasons,
)
from lifecycle.errors import InputError, UsageError
from lifecycle.models import HazardModel

TOL = 1e-6


# -- brute force -------------------------------------------------------------------------------
def brute_force(ev, cost, capacity, budget, allowed):
    """Best total over every assignment of at most one offer per customer (−1 = none)."""
    n, n_offers = ev.shape
    every = np.array(list(itertools.product(range(-1, n_offers), repeat=n)))  # (A, n)
    on = every >= 0
    pick = every.clip(0)
    rows = np.broadcast_to(np.arange(n), every.shape)
    ok = np.all(~on | allowed[rows, pick], axis=1)
    ok &= np.where(on, cost[pick], 0.0).sum(axis=1) <= budget + 1e-9
    for o in range(n_offers):
        ok &= (every == o).sum(axis=1) <= capacity[o]
    totals = np.where(on, ev[rows, pick], 0.0).sum(axis=1)
    return float(totals[ok].max())  # the empty assignment is always feasible


@st.composite
def instances(draw):
    n = draw(st.integers(1, 6))
    n_offers = draw(st.integers(1, 3))
    money = st.integers(-20, 40).map(float)
    ev = np.array(draw(st.lists(money, min_size=n * n_offers, max_size=n * n_offers)))
    ev = ev.reshape(n, n_offers) / 4.0
    cost = np.array(draw(st.lists(st.integers(0, 10), min_size=n_offers, max_size=n_offers)))
    capacity = np.array(
        draw(st.lists(st.integers(0, n + 1), min_size=n_offers, max_size=n_offers)), float
    )
    if draw(st.booleans()):
        capacity[draw(st.integers(0, n_offers - 1))] = np.inf
    budget = float(draw(st.one_of(st.integers(0, 40), st.just(np.inf))))
    allowed = np.array(
        draw(st.lists(st.booleans(), min_size=n * n_offers, max_size=n * n_offers))
    ).reshape(n, n_offers)
    return ev, cost.astype(float), capacity, budget, allowed


def check_feasible(result, ev, cost, capacity, budget, allowed):
    chosen = result.choice >= 0
    rows = np.flatnonzero(chosen)
    offers = result.choice[chosen]
    assert allowed[rows, offers].all()
    assert (ev[rows, offers] > 0).all()
    assert cost[offers].sum() <= budget + TOL
    assert (np.bincount(offers, minlength=ev.shape[1]) <= capacity).all()
    assert result.objective == pytest.approx(ev[rows, offers].sum())
    assert result.budget_used == pytest.approx(cost[offers].sum())


@settings(max_examples=60, deadline=None)
@given(instances())
def test_exact_plan_equals_brute_force_optimum(instance):
    ev, cost, capacity, budget, allowed = instance
    result = allocate(ev, cost, capacity, budget, allowed=allowed, solver="exact", mip_gap=0.0)
    check_feasible(result, ev, cost, capacity, budget, allowed)
    best = brute_force(ev, cost, capacity, budget, allowed)
    assert result.objective == pytest.approx(best, abs=TOL)
    assert result.bound >= best - TOL
    assert result.solver == "exact"


@settings(max_examples=60, deadline=None)
@given(instances())
def test_greedy_bound_is_a_true_upper_bound(instance):
    ev, cost, capacity, budget, allowed = instance
    result = allocate(ev, cost, capacity, budget, allowed=allowed, solver="greedy")
    check_feasible(result, ev, cost, capacity, budget, allowed)
    best = brute_force(ev, cost, capacity, budget, allowed)
    assert result.objective <= best + TOL
    assert result.bound >= best - TOL
    assert result.gap == pytest.approx(result.bound - result.objective, abs=TOL)


def lp_relaxation(ev, cost, capacity, budget):
    """The LP relaxation's value with scipy's linprog (HiGHS), written out independently."""
    n, n_offers = ev.shape
    cust, offer = np.nonzero(ev > 0)
    gain = ev[cust, offer]
    k = np.arange(len(gain))
    a = sparse.vstack(
        [
            sparse.csr_matrix((np.ones(len(k)), (cust, k)), shape=(n, len(k))),
            sparse.csr_matrix((np.ones(len(k)), (offer, k)), shape=(n_offers, len(k))),
            sparse.csr_matrix(cost[offer].reshape(1, -1)),
        ]
    )
    b = np.concatenate([np.ones(n), capacity, [budget]])
    result = linprog(-gain, A_ub=a, b_ub=b, bounds=(0, 1), method="highs")
    assert result.status == 0
    return -result.fun


@pytest.mark.parametrize(
    ("budget", "capacity"),
    [(5003.0, [1e4, 1e4, 1e4]), (1e9, [60, 100, 40]), (3007.0, [50, 250, 30])],
    ids=["budget binds", "capacities bind", "both bind"],
)
def test_bounds_against_the_lp_relaxation(budget, capacity):
    rng = np.random.default_rng(11)
    ev = rng.normal(5.0, 10.0, (2000, 3)) + np.array([5.0, 0.0, 10.0])
    cost = np.array([23.0, 10.0, 41.0])  # no common divisor: the budget is used as given
    capacity = np.array(capacity)
    lp = lp_relaxation(ev, cost, capacity, budget)
    greedy = allocate(ev, cost, capacity, budget, solver="greedy")
    exact = allocate(ev, cost, capacity, budget, solver="exact", mip_gap=1e-4)
    # Lagrangian duality: every L is at least the LP value, and the least L equals it
    assert greedy.bound >= lp - 1e-9 * lp
    assert greedy.bound <= lp * (1 + 1e-6)
    assert exact.objective <= lp + 1e-9 * lp
    assert exact.bound >= exact.objective
    assert greedy.objective <= exact.objective + TOL
    assert exact.relative_gap <= 1e-4
    assert greedy.relative_gap < 1e-2
    if budget > 1e8:
        # one-per-customer and per-offer rows alone form a totally unimodular (bipartite)
        # matrix, so the LP optimum is integral (Schrijver, "Theory of Linear and Integer
        # Programming", 1986, section 19.3): the exact plan reaches it
        assert exact.objective == pytest.approx(lp, rel=1e-9)
    else:
        assert greedy.objective < lp  # the budget row makes the LP fractional here


def test_bound_uses_only_the_budget_that_can_be_spent():
    # costs in multiples of 5: a budget of 3007 can spend 3005 at most, so the bound may (and
    # does) take the LP relaxation at 3005, which is tighter than the LP at 3007
    rng = np.random.default_rng(11)
    ev = rng.normal(5.0, 10.0, (2000, 3)) + np.array([5.0, 0.0, 10.0])
    cost = np.array([25.0, 10.0, 40.0])
    capacity = np.array([50.0, 250.0, 30.0])
    greedy = allocate(ev, cost, capacity, 3007.0, solver="greedy")
    reachable = lp_relaxation(ev, cost, capacity, 3005.0)
    assert greedy.bound == pytest.approx(reachable, rel=1e-6)
    assert greedy.bound < lp_relaxation(ev, cost, capacity, 3007.0) - 1.0
    exact = allocate(ev, cost, capacity, 3007.0, solver="exact", mip_gap=0.0)
    assert exact.objective == pytest.approx(exact.bound, rel=1e-9)
    assert exact.budget_used <= 3005.0


def test_auto_switches_to_greedy_above_the_size_limit():
    rng = np.random.default_rng(3)
    ev = rng.normal(2.0, 5.0, (300, 2))
    args = (ev, np.array([3.0, 5.0]), np.array([40.0, 40.0]), 200.0)
    assert allocate(*args, max_exact_customers=1000).solver == "exact"
    assert allocate(*args, max_exact_customers=10).solver == "greedy"


def test_allocate_rejects_bad_input():
    with pytest.raises(UsageError, match="one value per offer"):
        allocate(np.ones((3, 2)), np.ones(3), np.ones(2), 10.0)
    with pytest.raises(UsageError, match="budget"):
        allocate(np.ones((3, 2)), np.ones(2), np.ones(2), -1.0)
    with pytest.raises(UsageError, match="solver"):
        allocate(np.ones((3, 2)), np.ones(2), np.ones(2), 1.0, solver="fast")
    with pytest.raises(UsageError, match="finite"):
        allocate(np.full((3, 2), np.inf), np.ones(2), np.ones(2), 1.0)


# -- the schedule --------------------------------------------------------------------------------
@settings(max_examples=50, deadline=None)
@given(
    st.integers(1, 4),
    st.lists(st.integers(1, 5), min_size=1, max_size=3),
    st.integers(0, 2**31 - 1),
)
def test_schedule_respects_capacity_and_urgency(weeks, capacity, seed):
    rng = np.random.default_rng(seed)
    counts = [int(rng.integers(0, c * weeks + 1)) for c in capacity]
    offer = rng.permutation(np.repeat(np.arange(len(capacity)), counts))
    urgency = rng.choice([0.01, 0.02, 0.05, np.nan], size=len(offer))
    week = schedule_weeks(offer, urgency, capacity, weeks)
    assert ((week >= 1) & (week <= weeks)).all()
    for o, cap in enumerate(capacity):
        weeks_of = week[offer == o]
        assert np.bincount(weeks_of, minlength=weeks + 1).max(initial=0) <= cap
        # every contact of a week is at least as urgent as every contact of a later week
        u = np.nan_to_num(urgency[offer == o], nan=-np.inf)
        for w in range(1, weeks):
            if (weeks_of == w).any() and (weeks_of > w).any():
                assert u[weeks_of == w].min() >= u[weeks_of > w].max()
        # weeks are filled in order: no week is used while an earlier one has room
        for w in range(1, weeks):
            if (weeks_of > w).any():
                assert (weeks_of == w).sum() == cap


def test_schedule_refuses_more_contacts_than_room():
    with pytest.raises(UsageError, match="room for 2 a week"):
        schedule_weeks(np.zeros(5, int), np.ones(5), [2], 2)
    assert (schedule_weeks(np.zeros(5, int), np.ones(5), [None], 2) == 1).all()


# -- the whole plan ----------------------------------------------------------------------------
OFFERS = (
    Offer("loyalty_credit", "churn", cost=20.0, hazard_ratio=0.7, months=6, weekly_capacity=3),
    Offer(
        "keep_on_move",
        "move_out",
        cost=10.0,
        hazard_ratio=0.8,
        months=3,
        cooldown_months=1,
        weekly_capacity=2,
    ),
)


def planning_frame(n=40, seed=5):
    rng = np.random.default_rng(seed)
    return pd.DataFrame(
        {
            "customer_id": [f"C{i:03d}" for i in range(n)],
            "month": "2026-11",
            "tenure_start": rng.integers(1, 60, n),
            "cif_churn_3m": rng.uniform(0, 0.2, n),
            "cif_move_out_3m": rng.uniform(0, 0.1, n),
            "do_not_contact": (np.arange(n) % 7 == 0).astype(int),
            "hardship": np.where(np.arange(n) % 11 == 0, "yes", "no"),
        }
    )


def test_plan_honours_flags_cooldown_budget_and_capacity():
    frame = planning_frame()
    n = len(frame)
    ev = np.column_stack([np.linspace(50, 1, n), np.linspace(1, 30, n)])
    ev[3, :] = -5.0  # never worth it
    last = pd.Series({"C001": 2026 * 12 + 8, "C002": 2026 * 12 + 9, "C004": 2026 * 12 + 6})
    plan = make_plan(
        frame, ev, OFFERS, PlanSettings(budget=150.0, weeks=2, solver="exact"), last_contact=last
    )
    table = plan.table
    assert list(table.columns) == PLAN_COLUMNS
    flagged = set(frame.loc[(frame.do_not_contact == 1) | (frame.hardship == "yes"), "customer_id"])
    assert "C000" in flagged and not flagged & set(table.customer_id)  # C000 has the top EV
    # plan month 2026-11 (index 2026*12+10): C001 (2026-09) and C002 (2026-10) are within the
    # 3-month cooldown of loyalty_credit; C002 is within keep_on_move's 1 month too
    assert not ((table.customer_id == "C001") & (table.offer == "loyalty_credit")).any()
    assert "C002" not in set(table.customer_id)
    assert "C003" not in set(table.customer_id)
    assert table.cost.sum() <= 150.0
    assert (table.expected_value > 0).all()
    assert table.customer_id.is_unique
    for offer in OFFERS:
        weeks = table.loc[table.offer == offer.name, "week"]
        assert weeks.value_counts().max() <= offer.weekly_capacity
    assert plan.summary()["excluded_customers"] == len(flagged)
    # why they were left out, per flag, counted from the frame itself
    assert plan.summary()["excluded_by"] == {
        "do_not_contact": int((frame.do_not_contact == 1).sum()),
        "hardship": int((frame.hardship == "yes").sum()),
    }
    assert plan.summary()["budget_used"] == pytest.approx(table.cost.sum())


def test_plan_sorted_by_week_then_urgency_and_same_from_long_values():
    frame = planning_frame(seed=9)
    rng = np.random.default_rng(9)
    ev = rng.uniform(-5, 40, (len(frame), 2))
    settings_ = PlanSettings(budget=1e6, weeks=3)
    plan = make_plan(frame, ev, OFFERS, settings_)
    table = plan.table
    urgency = np.where(
        table.offer == "loyalty_credit",
        table.customer_id.map(frame.set_index("customer_id").cif_churn_3m),
        table.customer_id.map(frame.set_index("customer_id").cif_move_out_3m),
    )
    key = list(zip(table.week, -urgency, strict=True))
    assert key == sorted(key)
    # without a budget limit, capacity binds: 3 a week × 3 weeks and 2 a week × 3 weeks
    assert plan.allocation.counts == (9, 6)
    long = pd.DataFrame(
        {
            "customer_id": np.repeat(frame.customer_id, 2),
            "offer": [o.name for o in OFFERS] * len(frame),
            "expected_value": ev.reshape(-1),
        }
    )
    again = make_plan(frame, long, OFFERS, settings_)
    pd.testing.assert_frame_equal(again.table, table)


def test_long_expected_values_are_checked():
    frame = planning_frame(n=3)
    long = pd.DataFrame(
        {"customer_id": ["C000", "C000"], "offer": ["loyalty_credit"] * 2, "expected_value": [1, 2]}
    )
    with pytest.raises(InputError, match="two expected values"):
        make_plan(frame, long, OFFERS, PlanSettings(budget=10.0))
    long["offer"] = ["loyalty_credit", "mystery"]
    with pytest.raises(UsageError, match=r"\['mystery'\] that are not configured"):
        make_plan(frame, long, OFFERS, PlanSettings(budget=10.0))


def test_plan_needs_its_urgency_column():
    frame = planning_frame().drop(columns="cif_move_out_3m")
    with pytest.raises(UsageError, match="cif_move_out_3m"):
        make_plan(frame, np.ones((len(frame), 2)), OFFERS, PlanSettings(budget=10.0))


# -- reasons -------------------------------------------------------------------------------------
class OneFeatureModel(HazardModel):
    """Known truth: the churn hazard depends on complaints_3m only, h = 0.01·exp(0.5·c);
    move-out and other exits are constant."""

    def __init__(self):
        pass

    def _hazard_array(self, future, n, horizon):
        c = future["complaints_3m"].to_numpy(float).reshape(n, horizon)
        out = np.empty((n, horizon, 3))
        out[..., 0] = 0.01 * np.exp(0.5 * c)
        out[..., 1] = 0.004
        out[..., 2] = 0.001
        return out


def known_truth_model():
    model = OneFeatureModel()
    model.terminal_causes_ = ("churn", "move_out", "other_exit")
    model.uptake_causes_ = ()
    model.features_ = ("season_sin", "complaints_3m", "rental_share", "plan_speed")
    return model


def snapshot_frame(n=12, seed=2):
    rng = np.random.default_rng(seed)
    return pd.DataFrame(
        {
            "customer_id": np.arange(n),
            "month": pd.Categorical(["2026-11"] * n),
            "tenure_start": np.full(n, 10, dtype=np.int16),
            "season_sin": np.float32(0.0),
            "complaints_3m": rng.integers(0, 5, n).astype(np.float32),
            "rental_share": rng.uniform(0, 1, n).astype(np.float32),
            "plan_speed": pd.Categorical(rng.choice(["100", "300"], n)),
        }
    )


def test_reasons_name_the_feature_that_drives_a_known_hazard():
    model = known_truth_model()
    snap = snapshot_frame()
    reasons = top_reasons(model, snap, "churn", k=3)
    median = float(np.median(snap.complaints_3m))
    above = snap.loc[snap.complaints_3m > median]
    assert set(reasons.customer_id) == set(above.customer_id)  # only complaints can raise it
    assert (reasons.feature == "complaints_3m").all() and (reasons["rank"] == 1).all()
    # the effect is exactly h(c) − h(median) of the known hazard
    expected = 0.01 * (np.exp(0.5 * above.complaints_3m) - np.exp(0.5 * median))
    assert reasons.effect.to_numpy() == pytest.approx(expected.to_numpy(), rel=1e-6)
    for _, row in reasons.iterrows():
        count = int(row.value)
        assert row.phrase == f"{count} complaint{'' if count == 1 else 's'} in the last quarter"


def test_reasons_take_a_stored_reference_and_phrase_fallbacks():
    model = known_truth_model()
    snap = snapshot_frame()
    reasons = top_reasons(model, snap, "churn", k=2, reference={"complaints_3m": 0.0})
    assert set(reasons.customer_id) == set(snap.customer_id[snap.complaints_3m > 0])
    own = (Phrase("complaints_(?P<k>\\d)m", "unhappy ({value:.0f} in {k} months)"),)
    again = top_reasons(model, snap, "churn", reference={"complaints_3m": 0.0}, phrases=own)
    assert again.phrase.str.match(r"unhappy \(\d in 3 months\)").all()
    plain = top_reasons(model, snap, "churn", reference={"complaints_3m": 0.0}, phrases=())
    assert plain.phrase.str.match(r"complaints_3m is high \(\d\)").all()
    with pytest.raises(UsageError, match="not modelled"):
        top_reasons(model, snap, "uptake_backup_line")


class LogisticHazard(HazardModel):
    """A discrete-time hazard per cause by scikit-learn's logistic regression on person-months
    (a reference library), for a simulation whose churn depends on complaints_3m only."""

    def __init__(self):
        pass

    def _fit(self, panel):
        x = panel[list(self.features_)].to_numpy(float)
        self.fits_ = [
            LogisticRegression(C=1e4, max_iter=2000).fit(x, panel[c]) for c in self.causes_
        ]

    def _hazard_array(self, future, n, horizon):
        x = future[list(self.features_)].to_numpy(float)
        columns = [f.predict_proba(x)[:, 1] for f in self.fits_]
        return np.stack(columns, axis=-1).reshape(n, horizon, len(columns))


def test_reasons_recover_the_driver_of_a_simulated_hazard():
    rng = np.random.default_rng(42)
    n, months = 3000, 12
    complaints = rng.poisson(0.6, (n, months)).astype(float)
    rental = np.repeat(rng.uniform(0, 1, (n, 1)), months, axis=1)
    margin = np.repeat(rng.normal(40, 8, (n, 1)), months, axis=1)
    churn_p = 1 / (1 + np.exp(-(-4.0 + 0.9 * complaints)))  # truth: complaints only
    u = rng.uniform(size=(n, months))
    churn = u < churn_p
    move = (u >= churn_p) & (u < churn_p + 0.01)
    other = (u >= churn_p + 0.01) & (u < churn_p + 0.013)
    event = churn | move | other
    at_risk = (np.cumsum(event, axis=1) - event) == 0  # rows up to and including the event
    i, t = np.nonzero(at_risk)
    panel = pd.DataFrame(
        {
            "customer_id": i,
            "month": pd.Categorical([f"2025-{m + 1:02d}" for m in t]),
            "tenure_start": t.astype(np.int16),
            "tenure_stop": (t + 1).astype(np.int16),
            "churn": churn[i, t].astype(np.int8),
            "move_out": move[i, t].astype(np.int8),
            "other_exit": other[i, t].astype(np.int8),
            "complaints_3m": complaints[i, t],
            "rental_share": rental[i, t],
            "monthly_margin": margin[i, t],
        }
    )
    model = LogisticHazard().fit(panel)
    snap = panel.groupby("customer_id").head(1).head(400).reset_index(drop=True)
    snap = snap.drop(columns=["churn", "move_out", "other_exit"])
    reasons = top_reasons(model, snap, "churn", k=3)
    high = set(snap.customer_id[snap.complaints_3m >= 2])
    first = reasons[reasons["rank"] == 1].set_index("customer_id")
    assert high <= set(first.index)
    assert (first.loc[sorted(high), "feature"] == "complaints_3m").all()
    # for each of them, the true driver's effect dwarfs what a noise feature adds
    effect = reasons.pivot(index="customer_id", columns="feature", values="effect").fillna(0.0)
    noise = effect.drop(columns="complaints_3m").max(axis=1)
    assert (noise[sorted(high)] < 0.2 * effect.loc[sorted(high), "complaints_3m"]).all()


def test_plan_rows_carry_reasons_from_the_model():
    model = known_truth_model()
    snap = snapshot_frame(n=12)
    frame = snap.assign(cif_churn_3m=0.03 * snap.complaints_3m, do_not_contact=0, hardship=0)
    ev = np.column_stack([10.0 + snap.complaints_3m.to_numpy(float)])
    offers = (Offer("loyalty_credit", "churn", cost=5.0, hazard_ratio=0.7, months=6),)
    plan = make_plan(frame, ev, offers, PlanSettings(budget=1e3), model=model)
    table = plan.table.set_index("customer_id")
    median = float(np.median(snap.complaints_3m))
    typical = float(np.median(frame.cif_churn_3m))
    for cid, value in zip(snap.customer_id, snap.complaints_3m, strict=True):
        if value > median:
            assert table.at[cid, "reasons"].endswith("in the last quarter")
        else:  # nothing raises its hazard: its risk against the portfolio is the reason
            risk = 0.03 * value
            assert table.at[cid, "reasons"] == (
                f"churn risk {risk:.0%} within 3 months (portfolio median {typical:.0%})"
            )


def test_reasons_leave_out_features_that_barely_move_the_hazard():
    """Known hazard h = 0.01·exp(0.5·c) with reference c = 0: the effect's share of h is
    1 − exp(−0.5·c), at least 0.5 exactly when c ≥ 2 ln 2 ≈ 1.39 (worked by hand)."""
    model = known_truth_model()
    snap = snapshot_frame(n=40)
    reasons = top_reasons(
        model, snap, "churn", reference={"complaints_3m": 0.0}, min_relative_effect=0.5
    )
    assert set(reasons.customer_id) == set(snap.customer_id[snap.complaints_3m >= 2])
    assert set(snap.customer_id[snap.complaints_3m == 1])  # the case left out does occur


class ConceptModel(HazardModel):
    """Known truth: churn rises with the neighbours' count and falls with their share (as a
    boosted model can learn), rises with the area's rental share and with tenure past 30."""

    def __init__(self):
        pass

    def _hazard_array(self, future, n, horizon):
        count = future["nearby_adopters_leak_cover_400m"].to_numpy(float)
        share = future["nearby_adoption_leak_cover_400m"].to_numpy(float)
        rental = future["rental_share"].to_numpy(float)
        tenure = future["tenure_start"].to_numpy(float)
        h = 0.01 * np.exp(0.05 * count - 2.0 * share + 1.5 * rental + 0.8 * (tenure > 30))
        out = np.empty((n, horizon, 3))
        out[..., 0] = h.reshape(n, horizon)
        out[..., 1] = 0.004
        out[..., 2] = 0.001
        return out


def concept_case(n=60, seed=4):
    rng = np.random.default_rng(seed)
    model = ConceptModel()
    model.terminal_causes_ = ("churn", "move_out", "other_exit")
    model.uptake_causes_ = ()
    model.features_ = (
        "nearby_adopters_leak_cover_400m",
        "nearby_adoption_leak_cover_400m",
        "rental_share",
    )
    snap = pd.DataFrame(
        {
            "customer_id": np.arange(n),
            "month": pd.Categorical(["2026-11"] * n),
            "tenure_start": rng.integers(1, 48, n).astype(np.int16),
            "nearby_adopters_leak_cover_400m": rng.integers(0, 40, n).astype(np.float32),
            "nearby_adoption_leak_cover_400m": rng.uniform(0, 0.5, n).astype(np.float32),
            "rental_share": rng.uniform(0, 1, n).astype(np.float32),
        }
    )
    return model, snap


def test_reasons_of_one_concept_never_contradict_each_other():
    model, snap = concept_case()
    reasons = top_reasons(model, snap, "churn", k=3, hidden=())
    per = reasons.assign(concept=reasons.feature.map(reason_concept))
    assert not per.duplicated(["customer_id", "concept"]).any()
    assert (per.concept == "nearby leak_cover").any()
    # the one kept is the stronger of the two: recompute both effects by hand
    for row in reasons[reasons.feature.str.startswith("nearby_")].itertuples():
        x = snap.set_index("customer_id").loc[row.customer_id]
        h = 0.01 * np.exp(
            0.05 * x.nearby_adopters_leak_cover_400m
            - 2.0 * x.nearby_adoption_leak_cover_400m
            + 1.5 * x.rental_share
            + 0.8 * (x.tenure_start > 30)
        )
        med_count = float(np.median(snap.nearby_adopters_leak_cover_400m))
        med_share = float(np.median(snap.nearby_adoption_leak_cover_400m))
        e_count = h * (1 - np.exp(0.05 * (med_count - x.nearby_adopters_leak_cover_400m)))
        e_share = h * (1 - np.exp(-2.0 * (med_share - x.nearby_adoption_leak_cover_400m)))
        assert row.effect == pytest.approx(max(e_count, e_share), rel=1e-5)
    # ranks are ordered by size
    for _, part in reasons.groupby("customer_id"):
        assert list(part.sort_values("rank").effect) == sorted(part.effect, reverse=True)


def test_tenure_that_drives_the_risk_is_said_in_words():
    model, snap = concept_case()
    reasons = top_reasons(model, snap, "churn", k=3, hidden=("rental_share",))
    median = float(np.median(snap.tenure_start))
    assert median <= 30  # so tenure above 30 raises the hazard against the portfolio
    long = set(snap.customer_id[snap.tenure_start > 30])
    tenure = reasons[reasons.feature == "tenure_start"]
    assert set(tenure.customer_id) == long
    for row in tenure.itertuples():
        assert row.phrase.startswith(f"{int(row.value)} months as a customer, a tenure at which")
        assert "switching away is more common" in row.phrase


def test_area_attributes_are_not_reasons_unless_allowed():
    model, snap = concept_case()
    frame = snap.assign(cif_churn_3m=0.05, do_not_contact=0, hardship=0)
    ev = np.full((len(snap), 1), 10.0)
    offers = (Offer("loyalty_credit", "churn", cost=5.0, hazard_ratio=0.7, months=6),)
    hidden = make_plan(frame, ev, offers, PlanSettings(budget=1e3), model=model)
    assert (hidden.table.reasons != "").all()
    assert not hidden.table.reasons.str.contains("renters").any()
    allowed = make_plan(frame, ev, offers, PlanSettings(budget=1e3, area_reasons=True), model=model)
    assert allowed.table.reasons.str.contains("renters").any()


# -- why each offer got what it got ---------------------------------------------------------
def test_offer_figures_say_what_held_each_offer_back():
    """Five offers built so that each limit holds by construction (worked by hand)."""
    n = 10
    frame = pd.DataFrame(
        {
            "customer_id": np.arange(n),
            "tenure": np.arange(n, dtype=float),
            "cif_churn_3m": np.linspace(0.01, 0.1, n),
            "cif_move_out_3m": np.linspace(0.01, 0.1, n),
            "do_not_contact": 0,
            "hardship": 0,
        }
    )
    offers = (
        # nobody has 100 months of tenure: eligibility
        Offer("far", "churn", cost=1.0, hazard_ratio=0.9, months=3, eligible=_min_tenure(100)),
        # everyone eligible, nobody worth it: no positive value
        Offer("dear", "churn", cost=1.0, hazard_ratio=0.9, months=3),
        # worth it for all, 2 a week for one week: capacity
        Offer("small", "move_out", cost=1.0, hazard_ratio=0.9, months=3, weekly_capacity=2),
        # worth it for customers 0-4 only, after the capacity-bound offer
        Offer("rest", "churn", cost=3.0, hazard_ratio=0.9, months=3),
    )
    ev = np.full((n, 4), np.nan)
    ev[:, 0] = 5.0
    ev[:, 1] = -1.0
    ev[:, 2] = 10.0
    ev[:, 3] = np.where(np.arange(n) < 5, 4.0, -1.0)
    plan = make_plan(frame, ev, offers, PlanSettings(budget=8.0, weeks=1))
    figures = plan.summary()["offers"]
    assert figures["far"]["limited_by"] == "eligibility" and figures["far"]["eligible"] == 0
    assert figures["dear"]["limited_by"] == "no positive value"
    assert figures["dear"]["eligible"] == n and figures["dear"]["positive_value"] == 0
    assert figures["small"]["chosen"] == 2 and figures["small"]["limited_by"] == "capacity"
    # 8 of budget: 2 × 1 for "small", then two of "rest" at 3 each; a third would pass it
    assert figures["rest"]["chosen"] == 2 and figures["rest"]["limited_by"] == "budget"
    assert figures["rest"]["spend"] == 6.0 and figures["rest"]["positive_value"] == 5
    assert set(figures) == {"far", "dear", "small", "rest"}
    assert all(f["candidates"] == n for f in figures.values())
    # nothing held back: everyone worth it was planned
    easy = make_plan(frame, ev[:, 3:], offers[3:], PlanSettings(budget=1e6))
    assert easy.summary()["offers"]["rest"] == {
        "candidates": n,
        "eligible": n,
        "allowed": n,
        "positive_value": 5,
        "chosen": 5,
        "spend": 15.0,
        "capacity": None,
        "limited_by": "none",
        "predicted_harmed": 0,
        "harmed_planned": 0,
    }


def _min_tenure(months):
    from lifecycle.decisions import Eligibility

    return Eligibility(minimum={"tenure": float(months)})


def test_reasons_come_from_the_family_used_for_the_cause():
    """A champion whose churn hazard comes from one family and the other causes from another:
    churn reasons name only the churn family's driver (complaints), never what drives the
    other family's churn hazard (neighbours, rental share, tenure), though both see every
    feature; the effects are those of the churn family alone."""
    from lifecycle.models._champion import ChampionModel

    churn_family = known_truth_model()  # churn rises with complaints_3m only
    other_family, snap = concept_case()  # its churn rises with neighbours, rental, tenure
    snap = snap.assign(complaints_3m=np.random.default_rng(3).integers(0, 5, len(snap)))
    champion = ChampionModel()
    champion.terminal_causes_ = ("churn", "move_out", "other_exit")
    champion.uptake_causes_ = ()
    champion.features_ = (*other_family.features_, "complaints_3m")
    champion.cause_family_ = {"churn": "one", "move_out": "two", "other_exit": "two"}
    churn_family.features_ = champion.features_
    other_family.features_ = champion.features_
    champion.fitted_ = {"one": churn_family, "two": other_family}
    reasons = top_reasons(champion, snap, "churn", k=3, hidden=())
    assert set(reasons.feature) == {"complaints_3m"}
    alone = top_reasons(churn_family, snap, "churn", k=3, hidden=())
    assert reasons.effect.to_numpy() == pytest.approx(alone.effect.to_numpy(), rel=1e-9)
