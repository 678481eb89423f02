"""The demo's true process as a yardstick: forward simulation from the exact state at a cutoff."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from lifecycle._months import format_month, parse_month
from lifecycle.bench._yardstick import goal_note, truth_comparison
from lifecycle.demo import simulate_demo, true_incidence
from lifecycle.demo._params import campaign_hazard_ratios
from lifecycle.errors import UsageError

SIZE = dict(customers=3000, seed=3, months=24)
CUTOFF = "2025-10"


@pytest.fixture(scope="module")
def scenario():
    return simulate_demo(**SIZE)


@pytest.fixture(scope="module")
def truth():
    return true_incidence(CUTOFF, horizon=12, paths=20, **SIZE)


def test_first_month_is_the_true_hazard_of_the_features_table(scenario, truth):
    """Month 1 after the cutoff depends only on the state at the cutoff, so the estimate is
    exact there: it must equal the month's probabilities from the hazards the simulation used
    (the features table), whatever the futures drawn."""
    f = scenario.features
    month = f[f["month"].astype(str) == format_month(parse_month(CUTOFF) + 1)]
    ids = month["customer_id"].astype(str).to_numpy()
    month = month[np.isin(ids, truth.customer_id)]
    lam = month[["hazard_churn", "hazard_move_out", "hazard_other_exit"]].to_numpy()
    total = lam.sum(axis=1)
    expected = -np.expm1(-total)[:, None] * lam / total[:, None]
    got = truth.frame(1).set_index("customer_id").loc[month["customer_id"].astype(str)]
    assert len(got) == len(truth.customer_id)  # every customer present at the cutoff
    np.testing.assert_allclose(got[["churn", "move_out", "other_exit"]], expected, atol=1e-14)
    hazard_u = month[next(c for c in month if c.startswith("hazard_uptake_"))].to_numpy()
    np.testing.assert_allclose(got.iloc[:, 3], -np.expm1(-np.nan_to_num(hazard_u)), atol=1e-14)


def test_incidence_is_a_probability_growing_with_the_horizon(truth):
    inc = truth.incidence
    assert inc.shape == (truth.customer_id.size, 12, 4)
    assert np.all(np.diff(inc, axis=1) >= -1e-15)
    assert np.all(inc[:, :, :3].sum(axis=2) <= 1 + 1e-12)
    assert np.all((inc >= 0) & (inc <= 1))


def test_same_seed_same_scores_and_bad_arguments():
    a = true_incidence(CUTOFF, horizon=3, paths=2, **SIZE)
    b = true_incidence(CUTOFF, horizon=3, paths=2, **SIZE)
    np.testing.assert_array_equal(a.incidence, b.incidence)
    with pytest.raises(UsageError, match="cutoff"):
        true_incidence("2020-01", **SIZE)


def test_realised_twelve_months_agree_with_the_true_incidence(scenario, truth):
    """The data are one draw of the same process: the realised share of churn and move-outs
    in the 12 months after the cutoff lies within 4 standard deviations of the mean true
    incidence (a Poisson-binomial sum; common practice for a seeded check)."""
    customers = scenario.customers.set_index("customer_id")
    ends = customers.loc[truth.customer_id]
    c = parse_month(CUTOFF)
    end = pd.to_datetime(ends["end_month"].astype("string"), format="%Y-%m")
    end_index = (end.dt.year * 12 + end.dt.month - 1).to_numpy(dtype=np.float64)
    within = (end_index > c) & (end_index <= c + 12)
    for k, reason in enumerate(["churn", "move_out"]):
        p = truth.incidence[:, 11, k]
        observed = np.sum(within & (ends["end_reason"].astype("string") == reason).to_numpy())
        sd = np.sqrt(np.sum(p * (1 - p)))
        assert abs(observed - p.sum()) <= 4 * sd, (reason, observed, p.sum(), sd)


def _month(features: pd.DataFrame, month: str) -> pd.DataFrame:
    return features[features["month"].astype(str) == month].set_index("customer_id")


def test_truth_knowable_at_the_cutoff_gives_every_offered_customer_the_average(scenario, truth):
    """With ``campaign_effect="average"`` the first month after the cutoff is again exact: the
    hazards the simulation used (features table), the offered customers' churn hazard divided
    by their own ratio (their segment's, from the offer month's features) and multiplied by
    the campaign's average, ``Σ λ_i·hr_i / Σ λ_i`` over the effect-window months up to the
    cutoff, computed here from the same table."""
    knowable = true_incidence(CUTOFF, horizon=1, paths=1, campaign_effect="average", **SIZE)
    f = scenario.features
    arm = scenario.campaigns.set_index("customer_id")["arm"].astype(str)
    offered = arm.index[arm == "offered"].astype(str)
    own_ratio = pd.Series(
        campaign_hazard_ratios(_month(f, "2025-09").loc[offered].reset_index()),
        index=offered,
    )
    window = _month(f, CUTOFF)  # the only effect month up to the cutoff
    window = window[window["offer_loyalty_credit"] == 1]
    seen = window["hazard_churn"]
    without = seen / own_ratio.loc[window.index.astype(str)].to_numpy()
    assert knowable.campaign_ratio == pytest.approx(seen.sum() / without.sum(), rel=1e-12)
    assert 0.3 < knowable.campaign_ratio < 2.5 and truth.campaign_ratio is None

    month = _month(f, format_month(parse_month(CUTOFF) + 1))
    month = month[month.index.astype(str).isin(knowable.customer_id)]
    lam = month[["hazard_churn", "hazard_move_out", "hazard_other_exit"]].to_numpy()
    mine = month.index.astype(str).isin(offered) & (month["offer_loyalty_credit"] == 1).to_numpy()
    mine_ids = month.index[mine].astype(str)
    lam[mine, 0] *= knowable.campaign_ratio / own_ratio.loc[mine_ids].to_numpy()
    assert mine.sum() > 100
    total = lam.sum(axis=1)
    expected = -np.expm1(-total)[:, None] * lam / total[:, None]
    got = knowable.frame(1).set_index("customer_id").loc[month.index.astype(str)]
    np.testing.assert_allclose(got[["churn", "move_out", "other_exit"]], expected, atol=1e-14)


def test_no_effect_month_seen_means_no_effect_known():
    """At the offer month itself no month of the effect window has passed: nothing of the
    effect can be known, so the knowable truth gives every offered customer the ratio 1."""
    knowable = true_incidence("2025-09", horizon=1, paths=1, campaign_effect="average", **SIZE)
    assert knowable.campaign_ratio == 1.0
    with pytest.raises(UsageError, match="campaign_effect"):
        true_incidence(CUTOFF, horizon=1, paths=1, campaign_effect="mean", **SIZE)


def test_truth_compared_with_itself_has_ratio_one():
    rng = np.random.default_rng(0)
    n = 400
    p = rng.uniform(0.01, 0.3, n)
    months = rng.integers(1, 13, n)
    event = rng.random(n) < p
    outcomes = pd.DataFrame(
        {
            "customer_id": [f"c{i}" for i in range(n)],
            "months": np.where(event, months, 12),
            "cause": pd.Categorical(
                np.where(event, "churn", None), categories=["churn", "move_out", "other_exit"]
            ),
        }
    )
    truth = pd.DataFrame({"customer_id": outcomes["customer_id"], "churn": p})
    incidence = np.repeat(p[:, None, None], 12, axis=1)
    same = truth_comparison(outcomes, incidence, ("churn",), truth)["churn"]
    assert same["ratio"] == pytest.approx(1.0) and same["brier_diff"] == 0.0
    noisy = truth_comparison(
        outcomes, incidence + rng.normal(0, 0.1, incidence.shape), ("churn",), truth
    )["churn"]
    assert noisy["ratio"] < 1.0 and noisy["brier_diff"] > 0.0
    note = goal_note({"a": {"churn": same}, "b": {"churn": noisy}})
    assert "churn 1.000 (a, " in note
