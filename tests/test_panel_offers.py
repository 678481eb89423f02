"""Past offers as panel features: months since received and the effect window, no leakage."""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from lifecycle._months import format_month, parse_month
from lifecycle.config import Config, PanelSettings
from lifecycle.models import future_rows
from lifecycle.panel import build_panel
from lifecycle.panel._offers import offer_schedules

from ._builders import make_tables

AS_OF = parse_month("2026-10")
OFFERS = [
    {"name": "credit", "target": "churn", "cost": 1.0, "hazard_ratio": 0.8, "months": 2},
    {"name": "move_help", "target": "move_out", "cost": 1.0, "hazard_ratio": 0.8, "months": 3},
]
CONFIG = Config(panel=PanelSettings(window_months=12), raw={"offers": OFFERS})


def _panel(campaigns, customers=None):
    customers = customers or [
        {"customer_id": 1, "start_month": "2026-01"},
        {"customer_id": 2, "start_month": "2026-01"},
    ]
    tables = make_tables(customers, campaigns=campaigns)
    return build_panel(tables, AS_OF, config=CONFIG)


def test_offer_features_by_hand():
    panel = _panel(
        [
            {"customer_id": 1, "month": "2026-03", "offer": "credit", "arm": "offered"},
            {"customer_id": 1, "month": "2026-07", "offer": "credit", "arm": "offered"},
            {"customer_id": 2, "month": "2026-03", "offer": "credit", "arm": "held_out"},
            {"customer_id": 2, "month": "2026-03", "offer": "unknown", "arm": "offered"},
        ]
    )
    one = panel[panel["customer_id"] == 1]
    one = one.set_index(one["month"].astype(str))
    # worked from the definitions: received 2026-03 and 2026-07, window 2 months; the row of
    # month m sees the offers of months ≤ m − 1
    since = one["offer_credit_months_since"]
    assert np.isnan(since.loc["2026-03"])
    assert since.loc[["2026-04", "2026-05", "2026-06", "2026-07", "2026-08"]].tolist() == [
        1, 2, 3, 4, 1,
    ]  # fmt: skip
    active = one["offer_credit_active"]
    months = ["2026-03", "2026-04", "2026-05", "2026-06", "2026-08", "2026-10"]
    assert active.loc[months].tolist() == [0, 1, 1, 0, 1, 0]
    two = panel[panel["customer_id"] == 2]
    assert two["offer_credit_months_since"].isna().all()  # held out: never received
    assert (two["offer_credit_active"] == 0).all()
    # an offer without campaign rows, or not configured, gives no column
    assert not any("move_help" in c or "unknown" in c for c in panel.columns)
    # nor does one whose receipts no row can see yet (a panel as of the campaign month)
    early = build_panel(make_tables([{"customer_id": 1, "start_month": "2026-01"}], campaigns=[
        {"customer_id": 1, "month": "2026-03", "offer": "credit", "arm": "offered"}
    ]), "2026-03", config=CONFIG)  # fmt: skip
    assert not any(c.startswith("offer_") for c in early.columns)


def test_the_projection_reproduces_later_rows_when_nothing_new_is_received():
    panel = _panel([{"customer_id": 1, "month": "2026-02", "offer": "credit", "arm": "offered"}])
    one = panel[panel["customer_id"] == 1].reset_index(drop=True)
    # from the row of 2026-03 (one month after receipt) five months on: the projected months
    # since and window flag equal the panel's own later rows
    future = future_rows(one.iloc[[2]], 5, offer_schedules(CONFIG))
    actual = one.iloc[2:7]
    for column in ("offer_credit_months_since", "offer_credit_active"):
        np.testing.assert_array_equal(future[column].to_numpy(), actual[column].to_numpy())
    assert actual["offer_credit_active"].tolist() == [1, 1, 0, 0, 0]  # the test can fail


@st.composite
def _campaigns_and_cut(draw):
    rows = []
    for _ in range(draw(st.integers(1, 8))):
        rows.append(
            {
                "customer_id": draw(st.integers(1, 3)),
                "month": format_month(draw(st.integers(AS_OF - 11, AS_OF))),
                "offer": draw(st.sampled_from(["credit", "move_help"])),
                "arm": draw(st.sampled_from(["offered", "held_out"])),
            }
        )
    m = draw(st.integers(AS_OF - 10, AS_OF))
    changed = [dict(r) for r in rows if parse_month(r["month"]) < m]
    for r in rows:
        if parse_month(r["month"]) >= m and draw(st.booleans()):
            changed.append({**r, "arm": draw(st.sampled_from(["offered", "held_out"]))})
    changed.append(
        {"customer_id": 1, "month": format_month(m), "offer": "credit", "arm": "offered"}
    )
    return rows, changed, m


@settings(max_examples=40, deadline=None, derandomize=True)
@given(_campaigns_and_cut())
def test_offers_dated_m_or_later_leave_the_rows_up_to_m_unchanged(case):
    rows, changed, m = case
    customers = [{"customer_id": i, "start_month": "2025-11"} for i in (1, 2, 3)]
    before, after = _panel(rows, customers), _panel(changed, customers)
    month = before["month"].astype(str).to_numpy()
    keep = month <= format_month(m)
    columns = [c for c in after.columns if c.startswith("offer_")]
    for c in columns:
        values = before[c].to_numpy()[keep] if c in before else np.full(keep.sum(), np.nan)
        if c.endswith("_active") and c not in before:
            values = np.zeros(keep.sum())
        np.testing.assert_array_equal(after[c].to_numpy()[keep], values)
