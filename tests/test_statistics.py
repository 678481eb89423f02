"""Analyst statistics: Harrell's C, the integrated Brier score, the log-rank test, and
`life_table` refusing rows that are not a panel."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from lifelines.datasets import load_leukemia, load_rossi
from lifelines.statistics import logrank_test as lifelines_logrank
from lifelines.statistics import multivariate_logrank_test
from lifelines.utils import concordance_index
from sksurv.datasets import load_veterans_lung_cancer
from sksurv.linear_model import CoxPHSurvivalAnalysis
from sksurv.metrics import concordance_index_censored
from sksurv.metrics import integrated_brier_score as sksurv_ibs
from sksurv.preprocessing import OneHotEncoder

from lifecycle.errors import InputError, UsageError
from lifecycle.evaluation import harrell_concordance, integrated_brier_score, logrank_test
from lifecycle.panel import life_table


@pytest.fixture(scope="module")
def rossi():
    return load_rossi()


# -- Harrell's C ----------------------------------------------------------------------------------
def test_harrell_matches_sksurv_and_lifelines_on_rossi(rossi):
    # Rossi recidivism data shipped in lifelines; a linear score with ties in time and in risk.
    risk = np.round(0.3 * rossi["prio"] - 0.5 * rossi["fin"] - 0.05 * rossi["age"], 6)
    ours = harrell_concordance(rossi["week"], rossi["arrest"], risk)
    reference = concordance_index_censored(
        rossi["arrest"].astype(bool), rossi["week"].astype(float), risk.to_numpy()
    )[0]  # sksurv.metrics.concordance_index_censored
    np.testing.assert_allclose(ours, reference, rtol=1e-12)
    # lifelines.utils.concordance_index takes scores where higher means longer survival.
    np.testing.assert_allclose(ours, concordance_index(rossi["week"], -risk, rossi["arrest"]))
    # An integer score with many ties in risk (prior convictions).
    np.testing.assert_allclose(
        harrell_concordance(rossi["week"], rossi["arrest"], rossi["prio"]),
        concordance_index(rossi["week"], -rossi["prio"], rossi["arrest"]),
        rtol=1e-12,
    )


def test_harrell_cause_specific_treats_other_causes_as_censored(rossi):
    rng = np.random.default_rng(4)
    # Recode half of the arrests as a second cause: for cause 1 they are censorings.
    event = rossi["arrest"].to_numpy() * np.where(rng.random(len(rossi)) < 0.5, 1, 2)
    risk = rossi["prio"].to_numpy(dtype=float)
    censored_view = (event == 1).astype(int)
    np.testing.assert_allclose(
        harrell_concordance(rossi["week"], event, risk, cause=1),
        concordance_index(rossi["week"], -risk, censored_view),  # lifelines
        rtol=1e-12,
    )
    assert harrell_concordance(rossi["week"], event, risk, cause=2) != harrell_concordance(
        rossi["week"], event, risk, cause=1
    )


def test_harrell_of_a_perfect_and_a_reversed_score():
    time = np.array([1.0, 2.0, 3.0, 4.0])
    event = np.array([1, 1, 1, 0])
    assert harrell_concordance(time, event, -time) == 1.0
    assert harrell_concordance(time, event, time) == 0.0


# -- integrated Brier score -----------------------------------------------------------------------
def test_integrated_brier_matches_sksurv_on_veterans():
    # Veterans' lung cancer trial shipped in scikit-survival, as in its user guide.
    x, y = load_veterans_lung_cancer()
    x = OneHotEncoder().fit_transform(x)
    model = CoxPHSurvivalAnalysis().fit(x, y)
    times = np.percentile(y["Survival_in_days"], np.linspace(10, 80, 15))
    survival = np.vstack([fn(times) for fn in model.predict_survival_function(x)])
    expected = sksurv_ibs(y, y, survival, times)
    ours = integrated_brier_score(y["Survival_in_days"], y["Status"], 1.0 - survival, times)
    np.testing.assert_allclose(ours, expected, rtol=1e-10)


def test_integrated_brier_needs_two_times(rossi):
    with pytest.raises(UsageError, match="at least two"):
        integrated_brier_score(rossi["week"], rossi["arrest"], np.zeros((len(rossi), 1)), [10])


# -- log-rank test --------------------------------------------------------------------------------
def test_logrank_two_groups_matches_lifelines_and_published_value():
    # Freireich et al. (1963) leukaemia remission data as shipped in lifelines (load_leukemia).
    data = load_leukemia()
    result = logrank_test(data["t"], data["status"], data["Rx"])
    a, b = data[data["Rx"] == 0], data[data["Rx"] == 1]
    reference = lifelines_logrank(a["t"], b["t"], a["status"], b["status"])
    np.testing.assert_allclose(result.statistic, reference.test_statistic, rtol=1e-10)
    np.testing.assert_allclose(result.p_value, reference.p_value, rtol=1e-8)
    assert result.df == 1
    # Kleinbaum & Klein, "Survival Analysis: A Self-Learning Text", ch. 2: log-rank
    # chi-square 16.79 for these data (from memory).
    assert round(result.statistic, 2) == 16.79
    np.testing.assert_allclose(result.observed.sum(), data["status"].sum())
    # Its 6-MP arm (Rx = 0) is the arm tabulated by Gehan (1965) in tests/data/gehan_6mp.csv.
    gehan = pd.read_csv(Path(__file__).parent / "data" / "gehan_6mp.csv")
    arm = a.sort_values(["t", "status"], ascending=[True, False])
    assert arm["t"].tolist() == sorted(gehan["weeks"])
    assert sorted(zip(arm["t"], arm["status"], strict=True)) == sorted(
        zip(gehan["weeks"], gehan["relapse"], strict=True)
    )


def test_logrank_four_groups_matches_lifelines_multivariate(rossi):
    group = rossi["fin"] * 2 + rossi["wexp"]
    result = logrank_test(rossi["week"], rossi["arrest"], group)
    reference = multivariate_logrank_test(rossi["week"], group, rossi["arrest"])
    np.testing.assert_allclose(result.statistic, reference.test_statistic, rtol=1e-10)
    np.testing.assert_allclose(result.p_value, reference.p_value, rtol=1e-8)
    assert result.df == reference.degrees_of_freedom == 3


def test_logrank_cause_specific_and_one_group_refused(rossi):
    event = rossi["arrest"].to_numpy() * 2  # all arrests coded as cause 2
    result = logrank_test(rossi["week"], event, rossi["fin"], cause=1)
    assert result.statistic == 0.0 and result.observed.sum() == 0
    with pytest.raises(UsageError, match="two or more groups"):
        logrank_test(rossi["week"], rossi["arrest"], np.zeros(len(rossi)))


# -- life_table refuses rows that are not a panel -------------------------------------------------
def _subject_rows(rossi) -> pd.DataFrame:
    return pd.DataFrame(
        {
            "customer_id": np.arange(len(rossi)),
            "month": "2026-01",
            "tenure_start": 0,
            "tenure_stop": rossi["week"].to_numpy(),
            "churn": rossi["arrest"].to_numpy(),
            "move_out": 0,
            "other_exit": 0,
        }
    )


def test_life_table_refuses_one_row_per_subject(rossi):
    with pytest.raises(InputError, match="span other than one month") as info:
        life_table(_subject_rows(rossi), "churn")
    assert info.value.count == int((rossi["week"] != 1).sum())  # a week-1 arrest spans one
    assert info.value.examples[:2] == [0, 1]


def test_life_table_refuses_missing_tenure_and_repeated_months(rossi):
    rows = _subject_rows(rossi).drop(columns="tenure_start")
    with pytest.raises(InputError, match="missing"):
        life_table(rows, "churn")
    months = _subject_rows(rossi).iloc[:3].copy()
    months["tenure_stop"] = 1
    months["customer_id"] = 7
    with pytest.raises(InputError, match="more than one row") as info:
        life_table(months, "churn")
    assert info.value.examples == [7]
