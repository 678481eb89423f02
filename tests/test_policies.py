"""What a policy is worth: the plan against top risk, random and no contact; and the same for a
past randomised campaign by inverse-propensity weighting.

Outside sources: the discrete-time survival and cumulative incidence of a customer with
constant monthly hazards, worked by hand in plain Python (Kalbfleisch & Prentice 2002, The
Statistical Analysis of Failure Time Data, 2nd ed., sec. 8.2, the discrete-time cumulative
incidence F_k(t) = Σ S(s−1)·h_k(s)); lifelines' CoxPHFitter standard errors for the effect
model's covariance; the Horvitz–Thompson estimator and its variance under Poisson sampling
(Horvitz & Thompson 1952, JASA 47(260), 663–685; Särndal, Swensson & Wretman 1992, Model
Assisted Survey Sampling, eq. 2.8.2 and sec. 3.5) on a hand-worked example; and known-truth
simulations.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from lifelines import CoxPHFitter

from lifecycle.decisions import (
    POLICY_COLUMNS,
    Offer,
    backtest_policies,
    compare_policies,
    effect_draws,
    interval_draws,
    policy_selections,
    policy_value_ipw,
)
from lifecycle.errors import UsageError
from lifecycle.value import OfferEffectModel, customer_offer_effects, offer_values

CAUSES = ("churn", "move_out", "other_exit")
MARGIN, COST, MONTHS, HORIZON, DISCOUNT = 20.0, 5.0, 6, 12, 0.0
#: three groups: (customers, monthly churn hazard, true hazard ratio of the offer)
GROUPS = ((100, 0.06, 1.0), (100, 0.03, 0.4), (200, 0.01, 0.8))
MOVE, OTHER = 0.005, 0.002


def _scenario():
    """Constant monthly hazards per group; the high-risk group is not moved by the offer."""
    churn = np.concatenate([np.full(n, h) for n, h, _ in GROUPS])
    ratio = np.concatenate([np.full(n, r) for n, _, r in GROUPS])
    n = len(churn)
    hazards = np.empty((n, HORIZON, 3))
    hazards[..., 0] = churn[:, None]
    hazards[..., 1] = MOVE
    hazards[..., 2] = OTHER
    ids = np.array([f"c{i:03d}" for i in range(n)], dtype=object)
    return hazards, ratio, ids


def _hand_value(churn: float, ratio: float) -> tuple[float, float]:
    """Value over the horizon and the churn incidence F_churn(H), by hand (no discount):
    S(t) = Π (1 − h_c(s) − h_m − h_o), V = m Σ S(t), F_c(H) = Σ S(s−1) h_c(s)."""
    survival, value, incidence = 1.0, 0.0, 0.0
    for t in range(1, HORIZON + 1):
        h_c = churn * (ratio if t <= MONTHS else 1.0)
        incidence += survival * h_c
        survival *= 1.0 - h_c - MOVE - OTHER
        value += MARGIN * survival
    return value, incidence


OFFER = Offer(name="save", target="churn", cost=COST, hazard_ratio=0.7, months=MONTHS)


def _compare(seed: int = 0, draws: int = 200, plan_group: int = 1):
    hazards, ratio, ids = _scenario()
    n = len(ids)
    start = sum(g[0] for g in GROUPS[:plan_group])
    plan = pd.DataFrame({"customer_id": ids[start : start + 100], "offer": "save"})
    risk = (1 - (1 - hazards[:, :3, 0]).prod(axis=1))[:, None]  # 3-month churn risk
    selections = policy_selections(plan, ids, [OFFER], np.ones((n, 1), bool), risk, seed=seed)
    rng = np.random.default_rng(seed)
    spread = np.exp(0.1 * rng.standard_normal((draws, 1)))  # one common uncertain factor
    table = compare_policies(
        hazards, CAUSES, np.full(n, MARGIN), [OFFER], selections,
        {"save": ratio}, {"save": np.minimum(ratio[None, :] * spread, 1.0)},
        annual_discount=DISCOUNT, horizon=HORIZON,
    )  # fmt: skip
    return table, selections


def test_known_truth_the_plan_by_effect_beats_top_risk():
    """Known truth: the high-risk group is not moved (ratio 1), so spending the budget on it is
    worth exactly −cost per contact; the group the offer moves most is worth most."""
    table, selections = _compare()
    assert list(table.columns) == POLICY_COLUMNS
    row = table.set_index("policy")
    # top risk took exactly the unmoved high-risk group
    assert (selections["top_risk"][:100] == 0).all() and (selections["top_risk"][100:] < 0).all()
    assert row.loc["top_risk", "expected_value"] == pytest.approx(-COST * 100, abs=1e-9)
    assert row.loc["top_risk", "expected_saves"] == pytest.approx(0.0, abs=1e-12)
    # the plan's value and saves against the hand-worked survival sums
    with_offer, f_with = _hand_value(0.03, 0.4)
    without, f_without = _hand_value(0.03, 1.0)
    assert row.loc["plan", "expected_value"] == pytest.approx(
        100 * (with_offer - without - COST), rel=1e-10
    )
    assert row.loc["plan", "expected_saves"] == pytest.approx(100 * (f_without - f_with), rel=1e-10)
    assert row.loc["plan", "expected_value"] > row.loc["random", "expected_value"]
    assert row.loc["random", "expected_value"] > row.loc["top_risk", "expected_value"]
    for policy in ("plan", "top_risk", "random"):
        assert row.loc[policy, "contacts"] == 100
        assert row.loc[policy, "cost"] == pytest.approx(100 * COST)


def test_none_is_zero_everywhere():
    table, _ = _compare()
    none = table.set_index("policy").loc["none"]
    assert none["contacts"] == 0
    assert (none.drop("contacts") == 0).all()


def test_intervals_contain_the_point_estimate_and_carry_the_effects_uncertainty():
    table, _ = _compare()
    slack = 1e-9 * (1 + table["expected_value"].abs())  # a fixed ratio: draws equal the point
    assert (table["lower_90"] <= table["expected_value"] + slack).all()
    assert (table["expected_value"] <= table["upper_90"] + slack).all()
    plan = table.set_index("policy").loc["plan"]
    assert plan["upper_90"] - plan["lower_90"] > 1.0  # the draws move the plan's value


def test_same_seed_same_bytes_and_another_seed_another_random_row():
    first, _ = _compare(seed=3)
    again, _ = _compare(seed=3)
    other, _ = _compare(seed=4)
    assert first.to_csv(index=False) == again.to_csv(index=False)
    assert first.to_csv(index=False) != other.to_csv(index=False)


def test_the_plan_row_is_the_sum_of_the_plans_offer_values():
    """The plan's row equals the sum over its rows of `offer_values` (each customer valued with
    its group's single ratio, as the plan's own table would hold)."""
    hazards, ratio, _ = _scenario()
    table, selections = _compare(plan_group=2)
    chosen = np.flatnonzero(selections["plan"] == 0)
    total = 0.0
    for r in np.unique(ratio[chosen]):
        rows = chosen[ratio[chosen] == r]
        offer = Offer(name="save", target="churn", cost=COST, hazard_ratio=float(r), months=MONTHS)
        values = offer_values(
            hazards[rows], CAUSES, MARGIN, [offer], annual_discount=DISCOUNT, horizon=HORIZON
        )
        total += values["expected_value"].sum()
    plan = table.set_index("policy").loc["plan"]
    assert plan["expected_value"] == pytest.approx(total, rel=1e-10)


def test_selections_respect_the_allowed_customers_and_one_offer_each():
    hazards, _, ids = _scenario()
    n = len(ids)
    offers = [OFFER, Offer(name="keep", target="churn", cost=2.0, hazard_ratio=0.9, months=3)]
    allowed = np.ones((n, 2), bool)
    allowed[:50, :] = False  # e.g. flagged do-not-contact
    risk = np.column_stack([hazards[:, 0, 0], hazards[:, 0, 0]])
    plan = pd.DataFrame({"customer_id": ids[200:260], "offer": ["save"] * 40 + ["keep"] * 20})
    chosen = policy_selections(plan, ids, offers, allowed, risk, seed=1)
    for name in ("top_risk", "random"):
        choice = chosen[name]
        assert (choice[:50] < 0).all()
        assert np.bincount(choice[choice >= 0], minlength=2).tolist() == [40, 20]
    with pytest.raises(UsageError, match="not scored"):
        policy_selections(plan.assign(customer_id="nobody"), ids, offers, allowed, risk)


def _effect_model(covariance: pd.DataFrame) -> OfferEffectModel:
    features = pd.DataFrame(
        {"feature": ["a", "b"], "mean": [1.0, 0.0], "sd": [2.0, 1.0], "interaction": [0.3, -0.2]}
    )
    return OfferEffectModel(
        effects=pd.DataFrame(), average_hazard_ratio=0.8, varying=True, lr_statistic=10.0,
        lr_df=2, lr_p_value=0.01, penalizer=0.01, cross_validation=pd.DataFrame(),
        features=features, intercept=-0.4, reason="", covariance=covariance,
    )  # fmt: skip


def test_effect_draws_follow_the_coefficients_normal_law():
    """Known truth: the drawn log ratios of a customer have mean b0 + z·γ and variance
    (1, z) V (1, z)ᵀ."""
    names = ["intercept", "a", "b"]
    v = np.array([[0.04, 0.01, 0.0], [0.01, 0.09, 0.0], [0.0, 0.0, 0.01]])
    model = _effect_model(pd.DataFrame(v, index=names, columns=names))
    covariates = pd.DataFrame({"a": [1.0, 5.0], "b": [0.0, 2.0]})
    draws = effect_draws(model, covariates, draws=20_000, seed=0)
    assert draws.shape == (20_000, 2)
    log_draws = np.log(draws)
    point = np.log(model.predict_hazard_ratio(covariates))
    design = np.array([[1.0, 0.0, 0.0], [1.0, 2.0, 2.0]])  # (1, z) with z = (x − mean) / sd
    sd = np.sqrt(np.einsum("ij,jk,ik->i", design, v, design))
    assert (np.abs(log_draws.mean(axis=0) - point) < 4 * sd / np.sqrt(20_000)).all()
    np.testing.assert_allclose(log_draws.std(axis=0), sd, rtol=0.03)
    again = effect_draws(model, covariates, draws=50, seed=0)
    assert np.array_equal(again, effect_draws(model, covariates, draws=50, seed=0))


def test_interval_draws_match_the_offers_interval():
    offer = Offer(
        name="save", target="churn", cost=1.0, hazard_ratio=0.7, months=3,
        effect_interval=(0.5, 0.98),
    )  # fmt: skip
    draws = interval_draws(offer, 3, draws=40_000, seed=0)
    assert (draws == draws[:, :1]).all()  # one ratio for everyone in a draw
    low, high = np.percentile(draws[:, 0], [2.5, 97.5])
    assert low == pytest.approx(0.7 * np.sqrt(0.5 / 0.98), rel=0.03)
    assert high == pytest.approx(0.7 * np.sqrt(0.98 / 0.5), rel=0.03)
    fixed = Offer(name="fixed", target="churn", cost=1.0, hazard_ratio=0.7, months=3)
    assert (interval_draws(fixed, 2, draws=3, seed=0) == 0.7).all()


def test_the_effect_models_covariance_is_lifelines_variance():
    """The average effect's variance equals the square of lifelines' standard error of the arm
    in a Cox fit of the arm alone (a common effect: the model falls back to the average)."""
    rng = np.random.default_rng(5)
    n = 3_000
    offered = rng.integers(0, 2, n)
    x = rng.standard_normal(n)
    hazard = 0.05 * np.exp(0.3 * x) * np.where(offered == 1, 0.6, 1.0)
    time = rng.geometric(np.clip(hazard, 1e-6, 1))
    duration = np.minimum(time, 6)
    event = (time <= 6).astype(int)
    follow = pd.DataFrame(
        {"customer_id": np.arange(n), "offer_month": "2024-01", "offered": offered,
         "duration": duration, "event": event}
    )  # fmt: skip
    model = customer_offer_effects(follow, pd.DataFrame({"x": x}), folds=3, seed=0)
    assert not model.varying
    reference = CoxPHFitter().fit(
        pd.DataFrame({"duration": duration, "event": event, "offered": offered}),
        "duration", "event",
    )  # fmt: skip
    se = float(reference.standard_errors_["offered"])
    assert model.covariance.loc["intercept", "intercept"] == pytest.approx(se**2, rel=1e-6)


def test_inverse_propensity_value_on_a_hand_worked_example():
    """Horvitz & Thompson (1952): T = Σ_matched y/q; Var = Σ_matched (1 − q) y²/q² (Poisson
    sampling, Särndal et al. 1992 sec. 3.5). Worked by hand: p = 0.25 offered;
    customers (arm, policy, y): (1,1,10) q=.25 → 40; (1,0,0) unmatched; (0,1,6) unmatched;
    (0,0,4) q=.75 → 16/3. Total 45.333…; Var = .75·100/.0625 + .25·16/.5625 = 1200 + 7.111…"""
    total, se = policy_value_ipw(
        np.array([10.0, 0.0, 6.0, 4.0]), np.array([1, 1, 0, 0]), np.array([1, 0, 1, 0]), 0.25
    )
    assert total == pytest.approx(40 + 16 / 3)
    assert se**2 == pytest.approx(1200 + 64 / 9)


def test_inverse_propensity_recovers_a_known_policy_value():
    """Known truth: potential outcomes y0, y1 per customer; the campaign offers 30 % at random;
    the estimate of each policy's total lies within 3 standard errors of the true total, and
    over repeated campaigns its mean is the truth (unbiasedness)."""
    rng = np.random.default_rng(11)
    n = 20_000
    x = rng.uniform(size=n)
    y0 = 100 * (rng.uniform(size=n) > 0.3 + 0.2 * x)  # kept → margin 100
    lift = np.where(x > 0.5, 0.25, -0.05)  # the offer helps the high-x half, harms the rest
    y1 = 100 * (rng.uniform(size=n) > 0.3 + 0.2 * x - lift) - 10  # minus its cost
    by_effect = x > 0.5
    truths = {
        "by_effect": np.where(by_effect, y1, y0).sum(),
        "everyone": y1.sum(),
        "none": y0.sum(),
    }
    estimates = {k: [] for k in truths}
    for rep in range(40):
        offered = np.random.default_rng(rep).uniform(size=n) < 0.3
        y = np.where(offered, y1, y0)
        table = backtest_policies(
            y, (y <= 0).astype(int), offered,
            {"by_effect": by_effect, "everyone": np.ones(n, bool), "none": np.zeros(n, bool)},
        )  # fmt: skip
        for row in table.itertuples():
            estimates[row.policy].append(row.value)
            if rep == 0:
                se = (row.upper_90 - row.value) / 1.6448536269514722
                assert abs(row.value - truths[row.policy]) < 3 * se
    for name, truth in truths.items():
        values = np.array(estimates[name])
        assert abs(values.mean() - truth) < 3 * values.std() / np.sqrt(len(values))
    assert truths["by_effect"] > max(truths["everyone"], truths["none"])


def test_inverse_propensity_rejects_bad_input():
    with pytest.raises(UsageError, match="strictly between"):
        policy_value_ipw(np.ones(2), np.array([1, 0]), np.array([1, 0]), 1.0)
    with pytest.raises(UsageError, match="one value per customer"):
        policy_value_ipw(np.ones(3), np.array([1, 0]), np.array([1, 0]), 0.5)
