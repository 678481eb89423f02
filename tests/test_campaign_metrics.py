"""The backtest's campaign metrics: ``qini`` (cross-fitted per-customer offer effects on a
randomised campaign) and the ``[evaluation]`` settings.

Outside sources: a known-truth simulation (two segments with hazard ratios 0.3 and 2.0,
exponential times) whose effect a good ranking must find; the demo's own simulated features
(its features table, not the panel) for the offer month's covariates. The Qini coefficient
itself is checked against scikit-uplift in test_uplift_metrics.py.
"""

from __future__ import annotations

import logging

import numpy as np
import pandas as pd
import pytest

from lifecycle._months import parse_month
from lifecycle.config import Config
from lifecycle.evaluation._backtest import _default_snapshot
from lifecycle.evaluation._campaign_metrics import (
    CampaignMetricSettings,
    CampaignQini,
    campaign_metric_settings,
    cross_fitted_qini,
)
from lifecycle.value import campaign_covariates, campaign_follow_up
from tests._builders import scenario_tables

FEATURES = ("contract_ending", "tenure_start", "complaints_3m")


def _known_truth(n: int, seed: int) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Half offered at random; monthly churn hazard 0.05, times 0.3 if offered and x = 1,
    times 2.0 if offered and x = 0; six months of follow-up."""
    rng = np.random.default_rng(seed)
    x = rng.integers(0, 2, n).astype(float)
    noise = rng.normal(size=n)
    offered = rng.permutation(np.arange(n) < n // 2).astype(int)
    ratio = np.where(offered == 1, np.where(x == 1, 0.3, 2.0), 1.0)
    time = np.ceil(rng.exponential(1 / (0.05 * ratio)))
    follow = pd.DataFrame(
        {
            "customer_id": [f"c{i}" for i in range(n)],
            "offer_month": "2025-01",
            "offered": offered,
            "duration": np.minimum(time, 6).astype(int),
            "event": (time <= 6).astype(int),
        }
    )
    return follow, pd.DataFrame({"x": x, "noise": noise})


def test_cross_fitted_qini_finds_a_known_varying_effect():
    follow, covariates = _known_truth(4000, seed=3)
    assert cross_fitted_qini(follow, covariates) > 0.1
    # without the feature that carries the variation, nothing to rank by
    assert abs(cross_fitted_qini(follow, covariates[["noise"]])) < 0.05


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    from lifecycle.demo import simulate_demo

    scenario = simulate_demo(customers=2000, seed=7)
    tables, config = scenario_tables(scenario, tmp_path_factory.mktemp("qini"))
    return scenario, tables, config


def test_qini_row_of_a_campaign_in_the_outcome_window(demo):
    scenario, tables, config = demo
    settings = CampaignMetricSettings(effect_features=FEATURES)
    scorer = CampaignQini(tables, config, settings, _default_snapshot)
    campaign = parse_month(scenario.truth["campaign"]["month"])
    # outside the window (the cutoff at or after the offer month, or too far before): no row
    assert scorer.rows(campaign, [3, 6, 12]) == []
    assert scorer.rows(campaign - 4, [3]) == []
    (row,) = scorer.rows(campaign - 2, [3, 6, 12])
    follow = campaign_follow_up(tables, "loyalty_credit", target="churn", months=6)
    assert row["family"] == "offer_effect:loyalty_credit"
    assert (row["cause"], row["horizon"], row["metric"]) == ("churn", 6, "qini")
    assert (row["n"], row["events"]) == (len(follow), int(follow["event"].sum()))
    # the same coefficient from the simulation's own offer-month features
    panel = scenario.features.assign(month=scenario.features["month"].astype(str))
    covariates = campaign_covariates(panel, follow, list(FEATURES))
    assert row["value"] == pytest.approx(cross_fitted_qini(follow, covariates), abs=1e-12)


def test_no_qini_row_without_features_or_enough_customers(demo, caplog):
    scenario, tables, config = demo
    campaign = parse_month(scenario.truth["campaign"]["month"])
    caplog.set_level(logging.INFO, logger="lifecycle.evaluation._campaign_metrics")
    none = CampaignQini(tables, config, CampaignMetricSettings(), _default_snapshot)
    assert none.rows(campaign - 2, [12]) == []
    assert "no [evaluation] effect_features" in caplog.text
    few = CampaignMetricSettings(effect_features=FEATURES, qini_min_rows=10**6)
    assert CampaignQini(tables, config, few, _default_snapshot).rows(campaign - 2, [12]) == []
    assert "at least 1000000" in caplog.text


def test_settings_are_read_with_their_defaults():
    assert campaign_metric_settings(None) == CampaignMetricSettings()
    read = campaign_metric_settings(
        Config(raw={"evaluation": {"emp_clv": 150, "effect_features": ["a", "b"]}})
    )
    assert read.emp_clv == 150.0 and read.effect_features == ("a", "b")
    assert read.emp_alpha == 6.0 and read.qini_min_rows == 200
