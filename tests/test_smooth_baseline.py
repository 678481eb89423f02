"""A baseline hazard that neither spikes nor drops to 0 where few customers are at risk."""

from __future__ import annotations

import pickle

import numpy as np
import pandas as pd
import pytest
from lifelines import NelsonAalenFitter
from lifelines.datasets import load_dd

import lifecycle.evaluation
from lifecycle._months import month_categorical, parse_month
from lifecycle.models import CauseSpecificCox, TenureLifeTable
from lifecycle.models._smooth import smoothed_rates


def test_smoothed_rates_worked_by_hand():
    # events (0, 0, 10, 0, 0), exposure 100 a month, min_events 10. Month 2 holds 10 events:
    # w = 0, rate 0.1 (raw). Month 1 needs w = 1 (months 0..2): K = 1 − (u/2)², u = −1, 0, 1
    # → 0.75, 1, 0.75; rate = 0.75·10 / (100·2.5) = 0.03. Month 0 needs w = 2 (months 0..2 at
    # the edge, K(u/3) = 1, 8/9, 5/9): rate = (5/9)·10 / (100·(1 + 8/9 + 5/9)) = 5/220.
    rates, tail = smoothed_rates(
        np.array([0, 0, 10, 0, 0.0]), np.full(5, 100.0), min_events=10, tail_months=2
    )
    np.testing.assert_allclose(rates, [5 / 220, 0.03, 0.1, 0.03, 5 / 220], rtol=1e-12)
    # tail: the last months back until ≥ 2 months and ≥ 10 events: months 2..4 → 10 / 300
    assert tail == pytest.approx(10 / 300, rel=1e-12)
    raw, _ = smoothed_rates(np.array([0, 0, 10, 0, 0.0]), np.full(5, 100.0), min_events=0)
    np.testing.assert_allclose(raw, [0, 0, 0.1, 0, 0])


def _dd_panel() -> pd.DataFrame:
    """lifelines' democracy–dictatorship data (load_dd: 1808 regimes, duration in years, 1–47)
    as a yearly panel: one row per regime per year at risk, the exit in the last year when
    observed."""
    dd = load_dd()
    duration = dd["duration"].to_numpy()
    rows = np.repeat(np.arange(len(dd)), duration)
    tenure = np.concatenate([np.arange(d) for d in duration])
    last = tenure == duration[rows] - 1
    return pd.DataFrame(
        {
            "customer_id": rows,
            "month": month_categorical(parse_month("2000-01") + tenure),
            "tenure_start": tenure.astype(np.int16),
            "tenure_stop": (tenure + 1).astype(np.int16),
            "churn": (last & (dd["observed"].to_numpy()[rows] == 1)).astype(np.int8),
            "move_out": np.zeros(rows.size, dtype=np.int8),
            "other_exit": np.zeros(rows.size, dtype=np.int8),
        }
    )


def test_smoothed_life_table_stays_close_to_nelson_aalen_where_data_are_dense():
    dd = load_dd()
    # Reference: lifelines' NelsonAalenFitter on the same data (no ties correction between
    # years: the yearly grid is the data's own). Where at least 100 regimes are at risk, the
    # smoothed cumulative hazard is within 3 % of it; past that it is never 0 while regimes
    # are at risk.
    naf = NelsonAalenFitter(nelson_aalen_smoothing=False).fit(dd["duration"], dd["observed"])
    reference = naf.cumulative_hazard_.iloc[:, 0]
    panel = _dd_panel()
    model = TenureLifeTable().fit(panel)
    at_risk = panel.groupby("tenure_stop").size()
    years = at_risk.index.to_numpy()
    cumulative = pd.Series(np.cumsum(model.hazard_[years, 0]), index=years)
    dense = at_risk.index[at_risk >= 100]
    ours = cumulative.loc[dense]
    np.testing.assert_allclose(ours, reference.reindex(dense, method="ffill"), rtol=0.03)
    assert (model.hazard_[years, 0] > 0).all()
    raw = TenureLifeTable(min_events=0).fit(panel)
    assert (raw.hazard_[years, 0] == 0).any()  # what the smoothing is for: raw zeros
    # raw and lifelines agree exactly (the same estimator)
    np.testing.assert_allclose(
        np.cumsum(raw.hazard_[years, 0]), reference.reindex(years, method="ffill"), rtol=1e-12
    )


def test_life_table_pickled_under_its_old_module_still_loads(monkeypatch):
    """The class moved from lifecycle.evaluation._baseline to lifecycle.models; a pickle that
    names the old module path still loads, as the same class with the same hazards."""
    model = TenureLifeTable().fit(_dd_panel())
    monkeypatch.setattr(TenureLifeTable, "__module__", "lifecycle.evaluation._baseline")
    old = pickle.dumps(model, protocol=pickle.HIGHEST_PROTOCOL)
    monkeypatch.undo()
    assert b"lifecycle.evaluation._baseline" in old and b"lifecycle.models" not in old
    again = pickle.loads(old)
    assert type(again) is TenureLifeTable
    np.testing.assert_array_equal(again.hazard_, model.hazard_)
    assert lifecycle.evaluation.TenureLifeTable is TenureLifeTable  # still named there too


def _sparse_tenure_portfolio(seed: int = 2) -> pd.DataFrame:
    """Known truth: churn 0.5 %·exp(0.3 x) a month, flat in tenure (moves 0.3 %); 85 % of the
    customers at tenures 0–47, 15 % spread thinly over tenures 100–179; 24 months followed."""
    rng = np.random.default_rng(seed)
    n, months = 3000, 24
    first = np.where(rng.random(n) < 0.85, rng.integers(0, 48, n), rng.integers(100, 180, n))
    x = rng.normal(size=n)
    parts = []
    alive = np.ones(n, dtype=bool)
    for t in range(months):
        who = np.flatnonzero(alive)
        draw = rng.random(who.size)
        churn = draw < 0.005 * np.exp(0.3 * x[who])
        move = ~churn & (draw > 1 - 0.003)
        parts.append(
            pd.DataFrame(
                {"customer_id": who, "t": t, "churn": churn, "move_out": move, "x": x[who]}
            )
        )
        alive[who[churn | move]] = False
    rows = pd.concat(parts).sort_values(["customer_id", "t"], kind="stable")
    tenure = first[rows["customer_id"].to_numpy()] + rows["t"].to_numpy()
    return pd.DataFrame(
        {
            "customer_id": rows["customer_id"].to_numpy(),
            "month": month_categorical(parse_month("2024-01") + rows["t"].to_numpy()),
            "tenure_start": tenure.astype(np.int16),
            "tenure_stop": (tenure + 1).astype(np.int16),
            "churn": rows["churn"].to_numpy().astype(np.int8),
            "move_out": rows["move_out"].to_numpy().astype(np.int8),
            "other_exit": np.zeros(len(rows), dtype=np.int8),
            "x": rows["x"].to_numpy().astype(np.float32),
        }
    )


def _top(model, snapshot: pd.DataFrame) -> tuple[np.ndarray, float, float]:
    """Predicted hazards, the share of the top 1 % (by next month's churn hazard) on the most
    common tenure value among them, and the share of them at the sparse tenures (≥ 100)."""
    hazard = model.predict_hazard(snapshot, 12)["churn"].to_numpy().reshape(len(snapshot), 12)
    top = np.argsort(-hazard[:, 0], kind="stable")[: len(snapshot) // 100]
    tenure = snapshot["tenure_start"].to_numpy()[top]
    return hazard, np.bincount(tenure).max() / top.size, float(np.mean(tenure >= 100))


def test_long_sparse_tenures_get_no_zero_hazard_and_no_pile_at_the_top():
    panel = _sparse_tenure_portfolio()
    month = panel["month"].cat.codes.to_numpy()
    snapshot = panel[month == month.max()].drop(columns=["churn", "move_out", "other_exit"])
    sparse_share = float(np.mean(snapshot["tenure_start"].to_numpy() >= 100))
    hazard, pile, sparse = _top(CauseSpecificCox().fit(panel), snapshot)
    raw_hazard, raw_pile, raw_sparse = _top(
        CauseSpecificCox(baseline_min_events=0).fit(panel), snapshot
    )
    # the raw Breslow baseline is 0 in tenure months without a churn (the fault) ...
    assert (raw_hazard == 0).mean() > 0.05
    # ... the smoothed one never is, where customers are at risk
    assert (hazard > 0).all()
    # the truth is flat in tenure, so the top 1 % should hold the sparse tenures about in
    # their share of the portfolio, spread over tenure values; the raw baseline's spikes
    # crowd them there instead
    assert sparse <= 2 * sparse_share < raw_sparse
    assert pile <= 0.2 < raw_pile
