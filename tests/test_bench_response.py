"""``lifecycle bench response`` at a small size: it runs, and its pieces compute what they say.

Speed is never asserted. Outside source for the predicted effect: the closed form of a
discrete-time survival with one cause and a constant monthly hazard h, where the offer
multiplies h by r in its first months: F(12) = 1 − (1 − r·h)^6 (1 − h)^6 (textbook
life-table arithmetic; the competing-risk function reduces to it with one cause).
"""

from __future__ import annotations

import re
from types import SimpleNamespace

import numpy as np
import pytest

from lifecycle.bench import format_table
from lifecycle.bench._response import (
    BUDGET_SHARE,
    SUITE,
    _predicted,
    _selections,
    run_response_bench,
)


def test_predicted_effect_is_the_closed_form_with_one_cause():
    h = 0.02
    hazards = np.zeros((3, 36, 3))
    hazards[:, :, 0] = h  # churn only
    data = {
        "hazards": hazards,
        "n_terminal": 3,
        "churn": 0,
        "offer": SimpleNamespace(months=6),
        "margin": np.full(3, 10.0),
        "annual_discount": 0.0,
    }
    ratio = np.array([1.0, 0.5, 2.0])
    change, value_change, ltv, risk = _predicted(data, ratio)
    without = 1 - (1 - h) ** 12
    expected = [1 - (1 - r * h) ** 6 * (1 - h) ** 6 - without for r in ratio]
    np.testing.assert_allclose(change, expected, rtol=1e-12, atol=1e-15)
    np.testing.assert_allclose(risk, without)
    # undiscounted: lifetime value = margin × Σ_t S(t), S(t) = (1 − h)^t
    np.testing.assert_allclose(ltv, 10.0 * sum((1 - h) ** t for t in range(1, 37)))
    assert value_change[0] == 0 and value_change[1] > 0 > value_change[2]


def test_selections_spend_the_same_and_are_valued_with_the_truth():
    # five customers; contacts = round(0.2 × 5) = 1 each way
    expected_value = np.array([5.0, 1.0, -1.0, 0.0, 2.0])
    risk = np.array([0.1, 0.9, 0.2, 0.3, 0.4])
    true_effect = np.array([-0.2, 0.1, 0.0, 0.0, -0.05])
    ltv = np.array([100.0, 100.0, 50.0, 50.0, 200.0])
    out = _selections(expected_value, risk, true_effect, ltv, cost=3.0)
    assert BUDGET_SHARE == 0.2
    assert out["by_effect"] == {"contacts": 1, "cost": 3.0, "saves": 0.2, "value": 17.0}
    assert out["top_risk"]["saves"] == pytest.approx(-0.1)
    assert out["top_risk"]["value"] == pytest.approx(-13.0)
    assert out["random"]["contacts"] == 1 and out["random"]["cost"] == 3.0


def test_response_bench_runs_and_its_notes_add_up(tmp_path):
    from lifecycle.bench._models import write_demo_folder

    folder = write_demo_folder(tmp_path / "demo", 1000)
    rows = run_response_bench(1000, paths=2, folder=folder)
    assert [r.suite for r in rows] == [SUITE] * 3
    ours, plan, learner = rows
    assert re.search(r"rank correlation of predicted and true effect -?\d\.\d{3}", ours.note)
    assert "harmful segment" in ours.note and learner.role == "plain"
    pattern = r"(by effect|top risk|random) saves -?[\d.]+ churns, value (-?[\d,]+)"
    values = {k: float(v.replace(",", "")) for k, v in re.findall(pattern, plan.note)}
    found = re.search(r"by effect − top risk = ([+-][\d,]+)", plan.note)
    assert found and len(values) == 3
    assert float(found.group(1).replace(",", "")) == pytest.approx(
        values["by effect"] - values["top risk"], abs=1.0
    )
    assert re.search(r"ours -?\d\.\d{3} vs T-learner -?\d\.\d{3}", learner.note)
    # one time ratio: the T-learner's fits over ours; the selection row takes part in none
    assert format_table(rows).count("× the time") == 1
