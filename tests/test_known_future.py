"""Features whose future is known: projected month by month when predicting ahead."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from lifecycle._months import month_categorical, parse_month
from lifecycle.config import load_config
from lifecycle.errors import UsageError
from lifecycle.models import CauseSpecificCox, future_rows
from lifecycle.models._boosted import _Columns, _Design
from lifecycle.models._families import make_model
from lifecycle.panel._future import check_known_future, project_known_future

DEMO = {"contract_months_left": "countdown", "contract_ending": "within:contract_months_left:1"}


def _demo_definitions(end: int, t: int) -> tuple[float, float]:
    """The demo's own definitions (lifecycle/demo/_params.py, ACTIVITY["contract"]) of the
    activity values of month t for a contract ending in month ``end``, without renewals."""
    return float(max(end - t, 0)), float(0 <= end - t <= 1)


@settings(max_examples=60, deadline=None, derandomize=True)
@given(end=st.integers(-30, 40), horizon=st.integers(1, 24))
def test_countdown_and_contract_end_flag_follow_the_demo_definitions(end, horizon):
    # the snapshot row of month m holds the values of month m − 1 = 0; its month-k row those
    # of month k − 1, which the projection must reproduce from the snapshot alone
    left, ending = _demo_definitions(end, 0)
    snapshot = pd.DataFrame(
        {
            "customer_id": [1],
            "month": month_categorical(np.array([parse_month("2026-01")])),
            "tenure_start": np.array([5], dtype=np.int16),
            "tenure_stop": np.array([6], dtype=np.int16),
            "contract_months_left": np.array([left], dtype=np.float32),
            "contract_ending": np.array([ending], dtype=np.float32),
            "other": np.array([3.0], dtype=np.float32),
        }
    )
    future = future_rows(snapshot, horizon, DEMO)
    expected = np.array([_demo_definitions(end, k) for k in range(horizon)])
    np.testing.assert_array_equal(future["contract_months_left"], expected[:, 0])
    np.testing.assert_array_equal(future["contract_ending"], expected[:, 1])
    assert (future["other"] == 3.0).all()  # not declared: held at the snapshot
    np.testing.assert_array_equal(future["tenure_start"], 5 + np.arange(horizon))


def test_until_holds_a_status_while_its_countdown_lasts_and_nan_stays_nan():
    frame = pd.DataFrame(
        {"promo_left": [2.0, 2.0, 2.0, 2.0, np.nan], "on_promo": [1.0, 1.0, 1.0, 1.0, 1.0]}
    )
    steps = np.array([0, 1, 2, 3, 1])
    project_known_future(frame, steps, {"promo_left": "countdown", "on_promo": "until:promo_left"})
    # worked by hand: left 2, 1, 0, 0 after 0..3 months; the status stays while left > 0
    np.testing.assert_array_equal(frame["promo_left"].to_numpy()[:4], [2, 1, 0, 0])
    np.testing.assert_array_equal(frame["on_promo"].to_numpy()[:4], [1, 1, 0, 0])
    assert np.isnan(frame["promo_left"].iloc[4]) and frame["on_promo"].iloc[4] == 1.0


@pytest.mark.parametrize(
    "schedule, fragment",
    [
        ({"a": "countsideways"}, "is not a schedule"),
        ({"a": "upto:b:2"}, 'must itself be declared "countup"'),
        ({"a": "within:b"}, "is not a schedule"),
        ({"a": "within:b:x"}, "is not a schedule"),
        ({"a": 3}, "is not a schedule"),
        ({"a": "until:b"}, "must itself be declared"),
    ],
)
def test_bad_schedules_are_refused_with_the_fix(schedule, fragment):
    with pytest.raises(UsageError, match=fragment):
        check_known_future(schedule)


def test_the_setting_reaches_the_families(tmp_path):
    path = tmp_path / "lifecycle.toml"
    path.write_text(
        '[panel]\nknown_future = { contract_months_left = "countdown" }\n', encoding="utf-8"
    )
    config = load_config(path)
    assert config.panel.known_future == {"contract_months_left": "countdown"}
    assert make_model("cox", config).known_future == {
        "contract_months_left": "countdown"
    }  # no offers
    assert make_model("boosted", config).known_future == {"contract_months_left": "countdown"}
    path.write_text('[panel]\nknown_future = { x = "later" }\n', encoding="utf-8")
    with pytest.raises(UsageError, match="known_future"):
        load_config(path)


def test_boosted_lagged_training_rows_see_the_projection_prediction_sees():
    # a customer's rows of months 0..3: row i takes its inputs from row i − lag + 1
    panel = pd.DataFrame(
        {
            "tenure_start": np.arange(4, dtype=np.int16),
            "contract_months_left": np.array([3, 2, 1, 0], dtype=np.float32),
            "contract_ending": np.array([0, 0, 1, 1], dtype=np.float32),
        }
    )
    own = _Columns(panel, list(panel.columns))
    lag = np.array([1, 2, 3, 4], dtype=np.int16)
    rows = _Design(own, np.zeros(4, dtype=np.int64), lag, DEMO).rows(np.ones(4, dtype=bool))
    # every row's snapshot is row 0 (3 months left); projected lag − 1 months on, the inputs
    # equal the rows' own values
    np.testing.assert_array_equal(rows["contract_months_left"], [3, 2, 1, 0])
    np.testing.assert_array_equal(rows["contract_ending"], [0, 0, 1, 1])


def test_cox_predicts_the_contract_end_spike_months_ahead():
    # known truth: churn hazard 0.02 a month, ×5 in the month the contract-end flag is on
    rng = np.random.default_rng(11)
    n, months = 3000, 24
    end = rng.integers(0, 30, n)
    rows = []
    for i in range(n):
        for t in range(months):
            left, ending = _demo_definitions(end[i], t - 1)
            churn = rng.random() < 0.02 * (5.0 if ending else 1.0)
            rows.append((i, t, left, ending, churn))
            if churn:
                break
    frame = pd.DataFrame(rows, columns=["customer_id", "t", "left", "ending", "churn"])
    panel = pd.DataFrame(
        {
            "customer_id": frame["customer_id"],
            "month": month_categorical(parse_month("2024-01") + frame["t"].to_numpy()),
            "tenure_start": frame["t"].astype(np.int16),
            "tenure_stop": (frame["t"] + 1).astype(np.int16),
            "churn": frame["churn"].astype(np.int8),
            "move_out": np.zeros(len(frame), dtype=np.int8),
            "other_exit": np.zeros(len(frame), dtype=np.int8),
            "contract_months_left": frame["left"].astype(np.float32),
            "contract_ending": frame["ending"].astype(np.float32),
        }
    )
    model = CauseSpecificCox(known_future=DEMO).fit(panel)
    held = CauseSpecificCox().fit(panel)
    snapshot = panel.drop(columns=["churn", "move_out", "other_exit"]).iloc[[0]].copy()
    snapshot[["contract_months_left", "contract_ending"]] = [6.0, 0.0]
    projected = model.predict_hazard(snapshot, 12)["churn"].to_numpy()
    flat = held.predict_hazard(snapshot, 12)["churn"].to_numpy()
    # the flag is on in months 6 and 7 ahead (5 and 6 months after the snapshot row)
    assert projected[5] > 3 * projected[3] and projected[6] > 3 * projected[8]
    assert flat[5] < 1.5 * flat[3]  # held at the snapshot, no spike is predicted
