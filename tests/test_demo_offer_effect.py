"""The demo's true offer effect (`lifecycle.demo.true_offer_effect`) against truth.json.

Outside source: the segment rules and hazard ratios written to truth.json, applied here to the
simulation's own features table (not to the state the function rebuilds), and the definition
of a hazard ratio: over one month, the churn incidence with the offer over the incidence
without it is the segment's ratio (up to the competing causes' share of the month, below 1 %
at the demo's monthly hazards).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from lifecycle.demo import TRUE_EFFECT_COLUMNS, simulate_demo, true_offer_effect
from lifecycle.errors import UsageError

N = 2_000


@pytest.fixture(scope="module")
def campaign():
    scenario = simulate_demo(customers=N, seed=7)
    month = scenario.truth["campaign"]["month"]
    feats = scenario.features
    offer_month = feats[feats["month"].astype(str) == month].set_index("customer_id")
    stayed = offer_month.index[
        (offer_month["churn"] + offer_month["move_out"] + offer_month["other_exit"]) == 0
    ]
    ids = [i for i in scenario.campaigns["customer_id"] if i in set(stayed)]
    truth_ratio = np.full(len(ids), np.nan)
    rows = offer_month.loc[ids].reset_index()
    for segment in scenario.truth["campaign"]["segments"]:
        hit = (
            np.ones(len(rows), dtype=bool)
            if segment["rule"] == "otherwise"
            else rows.eval(segment["rule"]).to_numpy(dtype=bool)
        )
        truth_ratio = np.where(np.isnan(truth_ratio) & hit, segment["hazard_ratio"], truth_ratio)
    return ids, truth_ratio, month


def test_one_month_ratio_is_each_segments_hazard_ratio(campaign):
    ids, truth_ratio, month = campaign
    effect = true_offer_effect(ids, month, customers=N, horizon=1, paths=2)
    assert list(effect.columns) == TRUE_EFFECT_COLUMNS
    assert effect["customer_id"].tolist() == ids
    np.testing.assert_array_equal(effect["hazard_ratio"].to_numpy(), truth_ratio)
    sums = effect.groupby("hazard_ratio")[["churn_offered", "churn_not_offered"]].sum()
    implied = sums["churn_offered"] / sums["churn_not_offered"]
    assert set(implied.index) == {0.3, 1.0, 2.5}  # truth.json: contract_end, others, complained
    for ratio, value in implied.items():
        assert value == pytest.approx(ratio, rel=0.02)


def test_twelve_month_effect_has_each_segments_sign(campaign):
    ids, _, month = campaign
    effect = true_offer_effect(ids, month, customers=N, paths=4)
    mean = effect.groupby("hazard_ratio")["effect"].mean()
    assert mean[0.3] < -0.02  # strong help near a contract end
    assert mean[2.5] > 0.02  # harm after repeated complaints
    assert abs(mean[1.0]) < 0.003  # no effect: Monte Carlo noise only
    np.testing.assert_allclose(
        effect["effect"], effect["churn_offered"] - effect["churn_not_offered"]
    )


def test_customers_not_present_are_refused():
    with pytest.raises(UsageError, match="not customers of the demo"):
        true_offer_effect(["BM9999999"], customers=N, paths=1)
    with pytest.raises(UsageError, match="month was"):
        true_offer_effect(pd.Series(["BM0000001"]), "2010-01", customers=N, paths=1)
