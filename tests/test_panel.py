"""The customer-month panel: exposure, events, lags and invariances (property tests)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from lifecycle._months import format_month, parse_month
from lifecycle.config import Config, PanelSettings
from lifecycle.errors import InputError, UsageError
from lifecycle.panel import build_panel, build_snapshot, panel_layout
from tests._builders import make_tables

AS_OF = parse_month("2026-10")
WINDOW = 12
CONFIG = Config(panel=PanelSettings(window_months=WINDOW, trailing_sums={"complaints": 3}))
REASONS = ["churn", "move_out", "other"]


@st.composite
def portfolios(draw):
    """Random valid tables: starts before, inside and after the window; data after as_of."""
    extract = AS_OF + 4
    n = draw(st.integers(1, 12))
    customers, uptakes, activity = [], [], []
    for i in range(n):
        start = draw(st.integers(AS_OF - 20, extract))
        end = draw(st.one_of(st.none(), st.integers(start, extract)))
        row = dict(customer_id=i, start_month=format_month(start))
        if end is not None:
            row.update(end_month=format_month(end), end_reason=draw(st.sampled_from(REASONS)))
        customers.append(row)
        last = extract if end is None else end
        if draw(st.booleans()):
            uptakes.append(
                dict(
                    customer_id=i,
                    product="gadget",
                    month=format_month(draw(st.integers(start, last))),
                )
            )
        for month in sorted(draw(st.sets(st.integers(start, last), max_size=6))):
            activity.append(
                dict(
                    customer_id=i,
                    month=format_month(month),
                    complaints=draw(st.integers(0, 3)),
                    bill=draw(st.floats(0, 100, allow_nan=False, width=32)),
                )
            )
    return dict(customers=customers, uptakes=uptakes, activity=activity, extract=extract)


def _build(p):
    tables = make_tables(
        p["customers"],
        uptakes=p["uptakes"],
        activity=p["activity"],
        extract_month=format_month(p["extract"]),
        activity_columns=("complaints", "bill"),
        products=("gadget",),
    )
    return build_panel(tables, AS_OF, config=CONFIG)


def _span(row):
    start = parse_month(row["start_month"])
    end = parse_month(row["end_month"]) if "end_month" in row else None
    first = max(start, AS_OF - WINDOW + 1)
    last = AS_OF if end is None else min(end, AS_OF)
    return first, last, end


@settings(max_examples=60, deadline=None)
@given(portfolios())
def test_exposure_months_add_up_and_one_terminal_event_in_last_row(p):
    panel = _build(p)
    counts = panel.groupby("customer_id", observed=True).size()
    layout = panel_layout(panel)
    for row in p["customers"]:
        first, last, end = _span(row)
        assert counts.get(row["customer_id"], 0) == max(0, last - first + 1)
        mine = panel[panel["customer_id"] == row["customer_id"]]
        if mine.empty:
            continue
        events = mine[list(layout.terminal_causes)].to_numpy()
        assert events.sum() <= 1
        ended_in_view = end is not None and end <= AS_OF
        assert events.sum() == int(ended_in_view)
        if ended_in_view:
            assert events[-1].sum() == 1
            cause = {"churn": "churn", "move_out": "move_out", "other": "other_exit"}
            assert mine[cause[row["end_reason"]]].iloc[-1] == 1
    # exposure of the whole panel: rows equal the summed active months
    assert len(panel) == sum(max(0, _span(r)[1] - _span(r)[0] + 1) for r in p["customers"])


@st.composite
def portfolio_and_perturbation(draw):
    p = draw(portfolios())
    m = draw(st.integers(AS_OF - WINDOW + 1, AS_OF))
    extract = p["extract"]
    q = {k: [dict(r) for r in v] if isinstance(v, list) else v for k, v in p.items()}
    for row in q["customers"]:
        if "end_month" in row and parse_month(row["end_month"]) >= m:
            new_end = draw(st.one_of(st.none(), st.integers(m, extract)))
            if new_end is None:
                row.pop("end_month")
                row.pop("end_reason")
            else:
                row["end_month"] = format_month(new_end)
                row["end_reason"] = draw(st.sampled_from(REASONS))
    kept = []
    for up in q["uptakes"]:
        if parse_month(up["month"]) >= m:
            if draw(st.booleans()):
                continue
            up["month"] = format_month(draw(st.integers(m, extract)))
        kept.append(up)
    q["uptakes"] = kept
    for act in q["activity"]:
        if parse_month(act["month"]) >= m:
            act["complaints"] = draw(st.integers(0, 9))
            act["bill"] = draw(st.floats(0, 500, allow_nan=False, width=32))
    q["customers"].append(dict(customer_id=999, start_month=format_month(m)))
    q["activity"].append(dict(customer_id=0, month=format_month(m), complaints=7, bill=1.0))
    return p, q, m


@settings(max_examples=60, deadline=None)
@given(portfolio_and_perturbation())
def test_data_dated_after_m_minus_1_leaves_month_m_unchanged(case):
    p, q, m = case
    before, after = _build(p), _build(q)
    layout = panel_layout(before)
    cut = format_month(m)

    def rows_up_to_m(panel):
        month = panel["month"].astype(str)
        keep = (month <= cut) & (panel["customer_id"] != 999)
        out = panel[keep].copy()
        # the outcomes of month m itself are dated m, so they may change
        out["month"] = out["month"].astype(str)
        at_m = out["month"] == cut
        out.loc[at_m, list(layout.causes)] = 0
        return out.reset_index(drop=True)

    pd.testing.assert_frame_equal(rows_up_to_m(before), rows_up_to_m(after))


@settings(max_examples=40, deadline=None)
@given(portfolios(), st.randoms(use_true_random=False))
def test_relabelling_ids_changes_nothing(p, rnd):
    ids = [r["customer_id"] for r in p["customers"]]
    new = [f"acct-{k}" for k in range(len(ids))]
    rnd.shuffle(new)
    mapping = dict(zip(ids, new, strict=True))
    q = {k: [dict(r) for r in v] if isinstance(v, list) else v for k, v in p.items()}
    for table in ("customers", "uptakes", "activity"):
        for row in q[table]:
            row["customer_id"] = mapping[row["customer_id"]]
    before, after = _build(p), _build(q)
    assert after["customer_id"].astype(str).tolist() == [
        mapping[i] for i in before["customer_id"].tolist()
    ]
    pd.testing.assert_frame_equal(
        before.drop(columns="customer_id"), after.drop(columns="customer_id")
    )


def test_lags_trailing_sums_uptake_and_season_by_hand():
    tables = make_tables(
        [dict(customer_id=1, start_month="2026-06"), dict(customer_id=2, start_month="2026-08")],
        uptakes=[dict(customer_id=1, product="gadget", month="2026-08")],
        activity=[
            dict(customer_id=1, month="2026-06", complaints=1, bill=10.0),
            dict(customer_id=1, month="2026-07", complaints=2, bill=20.0),
            dict(customer_id=1, month="2026-09", complaints=4, bill=40.0),
            dict(customer_id=1, month="2026-10", complaints=8, bill=80.0),  # month of as_of: unused
        ],
    )
    panel = build_panel(tables, "2026-10", config=CONFIG)
    one = panel[panel["customer_id"] == 1].set_index(
        panel["month"][panel["customer_id"] == 1].astype(str)
    )
    assert one.index.tolist() == ["2026-06", "2026-07", "2026-08", "2026-09", "2026-10"]
    np.testing.assert_array_equal(one["tenure_start"], [0, 1, 2, 3, 4])
    # value of month m−1; no activity in August, so September's row has none
    np.testing.assert_array_equal(one["bill"], [np.nan, 10, 20, np.nan, 40])
    # trailing three months m−3..m−1, missing months count as 0
    np.testing.assert_array_equal(one["complaints_3m"], [0, 1, 3, 3, 6])
    np.testing.assert_array_equal(one["uptake_gadget"], [0, 0, 1, 0, 0])
    np.testing.assert_array_equal(one["holds_gadget"], [0, 0, 0, 1, 1])
    # season: June is month 6 → angle 2π·5/12
    assert one.loc["2026-06", "season_sin"] == pytest.approx(np.sin(2 * np.pi * 5 / 12), abs=1e-6)
    layout = panel_layout(panel)
    assert layout.uptake_causes == ("uptake_gadget",)
    assert layout.features[:3] == ("holds_gadget", "season_sin", "season_cos")
    assert str(panel["tenure_start"].dtype) == "int16"
    assert str(panel["churn"].dtype) == "int8"


def test_as_of_after_extract_month_is_refused():
    tables = make_tables([dict(customer_id=1, start_month="2026-01")], extract_month="2026-10")
    with pytest.raises(UsageError, match="only covers months up to 2026-10"):
        build_panel(tables, "2026-11")


def test_product_name_that_cannot_be_a_column_is_refused():
    tables = make_tables(
        [dict(customer_id=1, start_month="2026-01")],
        uptakes=[dict(customer_id=1, product="backup line", month="2026-03")],
    )
    with pytest.raises(InputError, match=r"uptakes.*product.*backup line"):
        build_panel(tables, "2026-10")


@settings(max_examples=40, deadline=None)
@given(portfolios())
def test_snapshot_is_next_months_panel_row_of_customers_present_at_as_of(p):
    tables = make_tables(
        p["customers"],
        uptakes=p["uptakes"],
        activity=p["activity"],
        extract_month=format_month(p["extract"]),
        activity_columns=("complaints", "bill"),
        products=("gadget",),
    )
    snapshot = build_snapshot(tables, AS_OF, config=CONFIG)
    following = build_panel(tables, AS_OF + 1, config=CONFIG)
    layout = panel_layout(following)
    expected = following[following["month"].astype(str) == format_month(AS_OF + 1)]
    expected = expected[expected["tenure_start"] >= 1].drop(columns=list(layout.causes))
    pd.testing.assert_frame_equal(
        snapshot.astype({"month": str}), expected.reset_index(drop=True).astype({"month": str})
    )
    present = {
        r["customer_id"]
        for r in p["customers"]
        if parse_month(r["start_month"]) <= AS_OF
        and ("end_month" not in r or parse_month(r["end_month"]) > AS_OF)
    }
    assert set(snapshot["customer_id"]) == present
