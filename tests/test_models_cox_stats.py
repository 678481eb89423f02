"""Log partial likelihood and likelihood-ratio test of `CauseSpecificCox`."""

from __future__ import annotations

import numpy as np
import pytest
from lifelines import CoxPHFitter
from lifelines.datasets import load_rossi

from lifecycle.models import CauseSpecificCox
from tests.test_models_cox import ROSSI_FEATURES, _panel_frame


@pytest.fixture(scope="module")
def rossi():
    data = load_rossi()
    panel = _panel_frame(
        np.arange(len(data)),
        np.zeros(len(data), dtype=np.int16),
        data["week"].to_numpy(np.int16),
        {"churn": data["arrest"]},
        data[ROSSI_FEATURES],
    )
    return data, CauseSpecificCox().fit(panel)


def test_rossi_log_likelihood_matches_lifelines(rossi):
    data, model = rossi
    reference = CoxPHFitter().fit(data, duration_col="week", event_col="arrest")  # Efron ties
    np.testing.assert_allclose(model.log_likelihood_["churn"], reference.log_likelihood_, rtol=1e-8)
    # lifelines prints "partial log-likelihood = -658.75" for this fit (its Rossi example).
    assert round(model.log_likelihood_["churn"], 2) == -658.75
    # Causes without events: the empty partial likelihood, log 1 = 0.
    assert model.log_likelihood_["move_out"] == 0.0


def test_rossi_likelihood_ratio_test_matches_lifelines_and_r(rossi):
    data, model = rossi
    reference = CoxPHFitter().fit(data, duration_col="week", event_col="arrest")
    expected = reference.log_likelihood_ratio_test()
    table = model.likelihood_ratio_test().set_index("cause")
    assert list(table.columns) == ["statistic", "df", "p"]
    row = table.loc["churn"]
    np.testing.assert_allclose(row["statistic"], expected.test_statistic, rtol=1e-7)
    assert row["df"] == expected.degrees_freedom == 7
    np.testing.assert_allclose(row["p"], expected.p_value, rtol=1e-6)
    # R's coxph on Rossi prints "Likelihood ratio test=33.27 on 7 df, p=2.362e-05" (Fox &
    # Weisberg, "Cox Proportional-Hazards Regression for Survival Data in R"; from memory).
    assert round(row["statistic"], 2) == 33.27
    assert np.isnan(table.loc["move_out", "p"]) and table.loc["move_out", "df"] == 0


def test_weighted_log_likelihood_of_sampled_fit_estimates_the_full_one(rossi):
    data, full = rossi
    panel = _panel_frame(
        np.arange(len(data)),
        np.zeros(len(data), dtype=np.int16),
        data["week"].to_numpy(np.int16),
        {"churn": data["arrest"]},
        data[ROSSI_FEATURES],
    )
    sampled = CauseSpecificCox(sample_fraction=0.7, random_state=3).fit(panel)
    # Same order of magnitude, not equal (common practice: a weighted sample estimates it).
    ratio = sampled.log_likelihood_["churn"] / full.log_likelihood_["churn"]
    assert 0.8 < ratio < 1.2
    assert sampled.log_likelihood_["churn"] != full.log_likelihood_["churn"]
