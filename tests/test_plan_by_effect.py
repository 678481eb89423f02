"""Plans by each customer's own offer effect.

References:
- Constant monthly hazards: the discrete-time competing-risks recursion
  S(t) = S(t−1)(1 − Σh), F_k(t) = Σ S(s−1)h_k has the geometric closed forms
  S(t) = a^t, F_k(t) = h_k(1 − a^t)/(1 − a) with a = 1 − Σh (geometric series); with margin m
  at the end of each month and monthly discount factor δ, V = m·Σ_{t≤H} (aδ)^t.
- The demo's true segment effects (lifecycle.demo's campaign_hazard_ratios, the rules written
  to truth.json).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from lifecycle.errors import UsageError
from lifecycle.value import discount_factors, offer_values

CAUSES = ["churn", "move_out", "other_exit", "uptake_backup_line"]
FAST = settings(max_examples=30, deadline=None)


@dataclass(frozen=True)
class Offer:
    name: str
    target: str
    cost: float
    hazard_ratio: float
    months: int
    value_per_uptake: float = 0.0


def _hazards(n: int, horizon: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    h = rng.uniform(0.001, 0.04, size=(n, horizon, len(CAUSES)))
    return h


@FAST
@given(
    ratio=st.floats(0.05, 2.5),
    n=st.integers(1, 6),
    seed=st.integers(0, 10_000),
    months=st.integers(1, 12),
)
def test_equal_own_ratios_give_exactly_the_single_ratio_result(ratio, n, seed, months):
    hazards = _hazards(n, 12, seed)
    offer = Offer("credit", "churn", 20.0, ratio, months)
    single = offer_values(hazards, CAUSES, 30.0, [offer])
    own = offer_values(hazards, CAUSES, 30.0, [offer], hazard_ratios={"credit": [ratio] * n})
    pd.testing.assert_frame_equal(single, own, check_exact=True)


@FAST
@given(n=st.integers(1, 6), seed=st.integers(0, 10_000), cost=st.floats(0.0, 100.0))
def test_an_own_ratio_of_one_is_worth_minus_the_cost(n, seed, cost):
    hazards = _hazards(n, 12, seed)
    offers = [Offer("credit", "churn", cost, 0.5, 6), Offer("stay", "move_out", 5.0, 0.8, 3)]
    values = offer_values(
        hazards, CAUSES, 30.0, offers, hazard_ratios={"credit": np.ones(n)}
    ).set_index("offer")
    np.testing.assert_array_equal(values.loc["credit", "expected_value"], -cost)
    np.testing.assert_array_equal(values.loc["credit", "cif_change_churn"], 0.0)
    # the offer not named keeps its single ratio: it changes the move-out incidence
    assert (values.loc["stay", "cif_change_move_out"] < 0).all()


def test_own_ratios_match_the_geometric_closed_form():
    """Each customer's value with its own ratio θ_i on a constant churn hazard over the whole
    horizon is m·Σ (a_i δ)^t with a_i = 1 − θ_i h_churn − h_other (geometric series)."""
    rates = np.array([0.03, 0.01, 0.005, 0.0])
    ratios = np.array([0.3, 1.0, 2.5])
    hazards = np.broadcast_to(rates, (3, 24, 4)).copy()
    offer = Offer("credit", "churn", 10.0, 0.7, 24)
    ids = ["a", "b", "c"]
    got = offer_values(
        hazards,
        CAUSES,
        20.0,
        [offer],
        customer_ids=ids,
        hazard_ratios={"credit": pd.Series(ratios[::-1], index=ids[::-1])},  # aligned by id
    )
    delta = discount_factors(24, 0.08)
    for i, theta in enumerate(ratios):
        a = 1.0 - theta * rates[0] - rates[1] - rates[2]
        expected_with = 20.0 * np.sum(a ** np.arange(1, 25) * delta)
        assert got["value_with"].iloc[i] == pytest.approx(expected_with, rel=1e-12)
        f_churn = theta * rates[0] * (1 - a**24) / (1 - a)
        a0 = 1.0 - rates[:3].sum()
        f_base = rates[0] * (1 - a0**24) / (1 - a0)
        assert got["cif_change_churn"].iloc[i] == pytest.approx(f_churn - f_base, rel=1e-10)
    assert got["expected_value"].iloc[1] == pytest.approx(-10.0, abs=1e-12)
    assert got["expected_value"].iloc[2] < -10.0 < got["expected_value"].iloc[0]


def test_bad_own_ratios_are_refused():
    hazards = _hazards(3, 6, 0)
    offer = Offer("credit", "churn", 10.0, 0.7, 6)
    with pytest.raises(UsageError, match="3 customers"):
        offer_values(hazards, CAUSES, 20.0, [offer], hazard_ratios={"credit": [0.5, 0.5]})
    with pytest.raises(UsageError, match="offers"):
        offer_values(hazards, CAUSES, 20.0, [offer], hazard_ratios={"other": [1, 1, 1]})
    with pytest.raises(UsageError, match="negative"):
        offer_values(hazards, CAUSES, 20.0, [offer], hazard_ratios={"credit": [1, -1, 1]})
    with pytest.raises(UsageError, match="no ratio"):
        offer_values(
            hazards, CAUSES, 20.0, [offer], hazard_ratios={"credit": pd.Series([1.0], index=[0])}
        )


# -- the plan's rule on harm ----------------------------------------------------------------
def _harm_case():
    from lifecycle.decisions import Offer as PlanOffer

    n = 6
    frame = pd.DataFrame(
        {
            "customer_id": [f"c{i}" for i in range(n)],
            "cif_churn_3m": np.linspace(0.01, 0.3, n),  # c5 is the most at risk
            "do_not_contact": 0,
            "hardship": 0,
        }
    )
    offer = PlanOffer("credit", "churn", cost=10.0, hazard_ratio=0.6, months=6)
    ev = np.linspace(5.0, 500.0, n)[:, None]  # c5 has by far the most value at risk
    harmed = pd.DataFrame(
        {"credit": [False, False, False, False, False, True]}, index=frame.customer_id
    )
    return frame, offer, ev, harmed


def test_a_harmed_customer_with_high_value_at_risk_is_not_planned():
    from lifecycle.decisions import PlanSettings, make_plan

    frame, offer, ev, harmed = _harm_case()
    plan = make_plan(frame, ev, [offer], PlanSettings(budget=20.0), harmed=harmed)
    # two contacts fit the budget: the best two of the unharmed (c4, c3), never c5
    assert sorted(plan.table["customer_id"]) == ["c3", "c4"]
    figures = plan.summary()["offers"]["credit"]
    assert figures["predicted_harmed"] == 1 and figures["harmed_planned"] == 0
    assert figures["limited_by"] == "budget"
    # with budget for all, what left the offer short is the harm rule
    everyone = make_plan(frame, ev, [offer], PlanSettings(budget=1e6), harmed=harmed)
    assert "c5" not in set(everyone.table["customer_id"]) and len(everyone.table) == 5
    assert everyone.summary()["offers"]["credit"]["limited_by"] == "predicted harm"


def test_a_harmed_customer_is_planned_when_the_settings_allow_it():
    from lifecycle.decisions import PlanSettings, make_plan

    frame, offer, ev, harmed = _harm_case()
    settings_ = PlanSettings(budget=20.0, contact_when_harmful=True)
    plan = make_plan(frame, ev, [offer], settings_, harmed=harmed)
    assert sorted(plan.table["customer_id"]) == ["c4", "c5"]
    figures = plan.summary()["offers"]["credit"]
    assert figures["predicted_harmed"] == 1 and figures["harmed_planned"] == 1


def test_a_strong_responder_gets_the_reason_first():
    from lifecycle.decisions import RESPONDS_REASON, PlanSettings, make_plan

    frame, offer, ev, _ = _harm_case()
    responsive = pd.DataFrame({"credit": [False] * 5 + [True]}, index=frame.customer_id)
    plan = make_plan(frame, ev, [offer], PlanSettings(budget=20.0), responsive=responsive)
    reasons = plan.table.set_index("customer_id")["reasons"]
    assert reasons["c5"].startswith(RESPONDS_REASON + "; ")
    assert RESPONDS_REASON not in reasons["c4"] and reasons["c4"]
