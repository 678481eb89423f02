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

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from lifecycle.decisions import Offer
from lifecycle.errors import UsageError
from lifecycle.value import discount_factors, offer_values
from tests._builders import scenario_tables

CAUSES = ["churn", "move_out", "other_exit", "uptake_backup_line"]
FAST = settings(max_examples=30, deadline=None)


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

    n = 6
    frame = pd.DataFrame(
        {
            "customer_id": [f"c{i}" for i in range(n)],
            "cif_churn_3m": np.linspace(0.01, 0.3, n),  # c5 is the most at risk
            "do_not_contact": 0,
            "hardship": 0,
        }
    )
    offer = Offer("credit", "churn", cost=10.0, hazard_ratio=0.6, months=6)
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


# -- own effects in the cycle, on the demo --------------------------------------------------
@pytest.fixture(scope="module")
def demo_effects(tmp_path_factory):
    from lifecycle.cycle import customer_effects, panel_with_context, snapshot_with_context
    from lifecycle.decisions import offers_from_config
    from lifecycle.demo import simulate_demo

    scenario = simulate_demo(customers=20_000, seed=7)  # the default demo
    folder = tmp_path_factory.mktemp("plan-by-effect")
    tables, config = scenario_tables(scenario, folder)
    month = tables.extract_month
    panel = panel_with_context(tables, month, config)
    snapshot = snapshot_with_context(tables, month, config)
    offers = offers_from_config(config)
    effects = customer_effects(tables, config, offers, snapshot, panel=panel)
    return scenario, folder, tables, config, offers, panel, snapshot, effects


def _true_ratios(frame: pd.DataFrame, truth: dict) -> np.ndarray:
    """The true ratio per row from truth.json alone: the first segment whose rule holds."""
    out = np.full(len(frame), np.nan)
    for segment in truth["campaign"]["segments"]:
        rule = segment["rule"]
        hit = np.ones(len(frame), bool) if rule == "otherwise" else frame.eval(rule).to_numpy()
        out = np.where(np.isnan(out) & hit, segment["hazard_ratio"], out)
    return out


def test_scored_customers_get_their_own_effect_of_the_campaign_offer(demo_effects):
    """Against the demo's truth (truth.json's segment rules on the snapshot's features): the
    own ratios rank the scored customers like the true ones, and the harmful segment is
    predicted harmful on average."""
    from scipy import stats

    from lifecycle.cycle import CustomerEffects

    scenario, _, _, _, _, _, snapshot, effects = demo_effects
    assert set(effects) == {"loyalty_credit"}  # the only offer with a randomised campaign
    effect = effects["loyalty_credit"]
    assert isinstance(effect, CustomerEffects) and effect.model.varying, effect.model.reason
    ids = snapshot["customer_id"].to_numpy()
    assert (effect.hazard_ratio.index.to_numpy() == ids).all()
    assert "tenure_start" in effect.features and "rental_share" not in effect.features
    true = _true_ratios(snapshot, scenario.truth)
    own = effect.hazard_ratio.to_numpy()
    assert stats.spearmanr(own, true).statistic >= 0.5
    by_name = {s["name"]: s["hazard_ratio"] for s in scenario.truth["campaign"]["segments"]}
    harmful = own[true == by_name["complained"]].mean()
    strong = own[true == by_name["contract_end"]].mean()
    none = own[true == by_name["others"]].mean()
    assert strong < none < harmful and harmful > 1.0, (strong, none, harmful)


def test_own_effects_drive_values_harm_and_effect_columns(demo_effects):
    from lifecycle.cycle import effect_columns
    from lifecycle.cycle._effects import effect_flags, own_hazard_ratios
    from lifecycle.value import offer_values

    _, _, _, _, offers, _, _, effects = demo_effects
    ratios = effects["loyalty_credit"].hazard_ratio
    harmed, responsive = effect_flags(effects, offers)
    np.testing.assert_array_equal(harmed["loyalty_credit"].to_numpy(), ratios.to_numpy() > 1)
    assert not (harmed["loyalty_credit"] & responsive["loyalty_credit"]).any()
    # a few customers, constant hazards: the effect column is cif_change of the target
    pick = ratios.index[[0, 1, 2]]
    hazards = np.broadcast_to(np.array([0.02, 0.005, 0.002, 0.01]), (3, 36, 4)).copy()
    own = {"loyalty_credit": ratios.loc[pick]}
    values = offer_values(hazards, CAUSES, 20.0, offers, customer_ids=pick, hazard_ratios=own)
    columns = effect_columns(values, offers).set_index("customer_id")
    assert list(columns.columns) == [f"effect_{o.name}" for o in offers]
    loyalty = values.loc[values["offer"] == "loyalty_credit"].set_index("customer_id")
    np.testing.assert_array_equal(columns["effect_loyalty_credit"], loyalty["cif_change_churn"])
    # harm (ratio > 1) and a raised churn incidence go together
    assert ((columns["effect_loyalty_credit"] > 0) == (ratios.loc[pick] > 1)).all()
    assert own_hazard_ratios(effects)["loyalty_credit"] is ratios


def test_own_effects_can_be_turned_off(demo_effects, tmp_path):
    from lifecycle.config import load_config
    from lifecycle.cycle import customer_effects

    _, folder, tables, _, offers, panel, snapshot, _ = demo_effects
    text = (folder / "lifecycle.toml").read_text() + "\n"
    off = tmp_path / "lifecycle.toml"
    if "[value]" in text:
        off.write_text(text.replace("[value]", "[value]\ncustomer_effects = false", 1))
    else:
        off.write_text(text + "[value]\ncustomer_effects = false\n")
    assert customer_effects(tables, load_config(off), offers, snapshot, panel=panel) == {}
    chosen = tmp_path / "chosen.toml"
    chosen.write_text(
        text.replace("[value]", '[value]\neffect_features = ["nothing_here"]', 1)
        if "[value]" in text
        else text + '[value]\neffect_features = ["nothing_here"]\n'
    )
    with pytest.raises(UsageError, match="nothing_here"):
        customer_effects(tables, load_config(chosen), offers, snapshot, panel=panel)


def test_the_report_says_which_effects_were_used_and_how_many_are_harmed():
    from lifecycle.report._blocks import Section
    from lifecycle.report._sections_plan import _offer_limits, _own_effects_text

    effects = {
        "credit": {
            "hazard_ratio": 0.6,
            "from": "campaigns",
            "per_customer": True,
            "reason": "the effect varies (p = 0.001)",
        },
        "trial": {
            "hazard_ratio": 0.8,
            "from": "campaigns",
            "per_customer": False,
            "reason": "no evidence that the effect varies",
        },
        "move": {"hazard_ratio": 0.7, "from": "settings", "per_customer": False},
        # a randomised campaign whose fit per customer failed: not "no randomised campaign"
        "letter": {"hazard_ratio": 0.9, "from": "campaigns", "per_customer": False},
    }
    figures = {"predicted_harmed": 12, "harmed_planned": 0, "limited_by": "predicted harm"}
    base = {"candidates": 50, "eligible": 40, "positive_value": 30, "chosen": 0, "spend": 0.0}
    offers = {"credit": {**base, **figures}}
    section = Section("plan", "Plan")
    _own_effects_text(section, effects, offers)
    _offer_limits(section, offers, "")
    text = " ".join(b.text for b in section.blocks if b.kind == "text")
    assert "credit: each customer's own effect" in text and "12 customers predicted harmed" in text
    assert "trial: the campaign's average effect" in text
    assert "move: one effect for everyone" in text
    assert "letter: the campaign's average effect (its campaign could not give" in text
    assert "letter: one effect for everyone" not in text
    assert "predicted to be harmed" in text  # why credit got no contacts


def test_harm_and_strong_response_are_read_from_the_own_ratios():
    """Worked by hand: average ratio 0.6 (log −0.51); a customer responds more than most when
    its log ratio is at most −0.61 and in the strongest quarter; harm is a ratio above 1 for a
    retention offer and below 1 for an uptake offer."""
    from types import SimpleNamespace

    from lifecycle.cycle import CustomerEffects
    from lifecycle.cycle._effects import harmful, stronger_than_average

    ids = [f"c{i}" for i in range(8)]
    ratios = pd.Series([0.2, 0.3, 0.55, 0.6, 0.7, 0.9, 1.0, 1.4], index=ids)
    model = SimpleNamespace(varying=True, average_hazard_ratio=0.6, reason="")
    effect = CustomerEffects("credit", model, ratios, ("x",))
    # quartile of log ratios: between c1 and c2; 0.3 < 0.6·e^−0.1 = 0.543
    assert stronger_than_average(effect, ids).tolist() == [True, True] + [False] * 6
    flat = CustomerEffects("credit", SimpleNamespace(varying=False, average_hazard_ratio=0.6),
                           ratios, ("x",))  # fmt: skip
    assert not stronger_than_average(flat, ids).any()
    retention = SimpleNamespace(target="churn")
    uptake = SimpleNamespace(target="uptake_backup_line")
    assert harmful(retention, ratios).tolist() == [False] * 7 + [True]
    assert harmful(uptake, ratios).tolist() == [True] * 6 + [False, False]


def test_a_campaign_whose_fit_fails_keeps_the_single_ratio(demo_effects, monkeypatch, caplog):
    """A small campaign can make the interaction fit diverge (lifelines' ConvergenceError,
    seen on an 800-customer demo): the offer then keeps its single ratio, with a warning."""
    from lifelines.exceptions import ConvergenceError

    import lifecycle.value
    from lifecycle.cycle import customer_effects

    _, _, tables, config, offers, panel, snapshot, _ = demo_effects

    def diverge(*args, **kwargs):
        raise ConvergenceError("delta contains nan value(s). Convergence halted.")

    monkeypatch.setattr(lifecycle.value, "customer_offer_effects", diverge)
    assert customer_effects(tables, config, offers, snapshot, panel=panel) == {}
    assert "its single hazard ratio is used (ConvergenceError" in caplog.text
