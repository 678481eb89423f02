"""`add_spatial_context` on small panels: values worked out by hand from the definitions in
DEVELOPERS.md, the lag (changing anything dated after month m−1 leaves month m alone), and
agreement with the demo simulation, which computes the same features its own way
(`neighbour_pairs` and a sparse adjacency matrix, month by month)."""

from __future__ import annotations

import dataclasses

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from shapely.geometry import box

from lifecycle._months import format_month, parse_month
from lifecycle.config import Config, SpatialSettings
from lifecycle.errors import InputError, UsageError
from lifecycle.panel import build_panel
from lifecycle.spatial import add_spatial_context
from tests._builders import make_tables

CRS = "EPSG:32625"  # invented coordinates in open ocean
X0, Y0 = 500_000.0, 4_400_000.0
CONTEXT = ["rental_share", "local_move_rate"]


def areas_west_east() -> gpd.GeoDataFrame:
    return gpd.GeoDataFrame(
        {"area_id": ["WEST", "EAST"], "rental_share": [0.2, 0.6], "label": ["w", "e"]},
        geometry=[
            box(X0 - 5_000, Y0 - 5_000, X0 + 1_000, Y0 + 5_000),
            box(X0 + 1_000, Y0 - 5_000, X0 + 7_000, Y0 + 5_000),
        ],
        crs=CRS,
    )


def with_areas(tables):
    return dataclasses.replace(tables, areas=areas_west_east(), premise_crs=CRS)


def line_tables():
    """A, B, C 300 m apart on a line (A–C 600 m), D 1.5 km away in the other area."""
    customers = [
        {"customer_id": "A", "start_month": "2026-01", "x": X0, "y": Y0},
        {
            "customer_id": "B",
            "start_month": "2026-01",
            "end_month": "2026-04",
            "end_reason": "move_out",
            "x": X0 + 300,
            "y": Y0,
        },
        {"customer_id": "C", "start_month": "2026-02", "x": X0 + 600, "y": Y0},
        {"customer_id": "D", "start_month": "2026-01", "x": X0 + 1_500, "y": Y0},
    ]
    uptakes = [
        {"customer_id": "B", "product": "fibre", "month": "2026-02"},
        {"customer_id": "C", "product": "fibre", "month": "2026-03"},
        {"customer_id": "A", "product": "tv", "month": "2026-01"},
    ]
    return with_areas(make_tables(customers, uptakes=uptakes))


def by_row(frame: pd.DataFrame, column: str) -> dict[tuple[str, str], float]:
    return {
        (str(c), str(m)): v
        for c, m, v in zip(frame["customer_id"], frame["month"], frame[column], strict=True)
    }


def test_hand_worked_line():
    tables = line_tables()
    config = Config(spatial=SpatialSettings(radii_m=(400.0, 250.5)))
    panel = build_panel(tables, "2026-06", config=config)
    out = add_spatial_context(panel, tables, config=config)

    names = list(out.columns[len(panel.columns) :])
    assert names == [
        "rental_share",
        "local_move_rate",
        "nearby_adopters_fibre_400m",
        "nearby_adoption_fibre_400m",
        "nearby_adopters_fibre_250_5m",
        "nearby_adoption_fibre_250_5m",
        "nearby_adopters_tv_400m",
        "nearby_adoption_tv_400m",
        "nearby_adopters_tv_250_5m",
        "nearby_adoption_tv_250_5m",
    ]
    assert out["rental_share"].dtype == np.float32 and out["local_move_rate"].dtype == np.float32
    assert out["nearby_adopters_fibre_400m"].dtype == np.int32
    assert out["nearby_adoption_fibre_400m"].dtype == np.float32
    pd.testing.assert_frame_equal(out[panel.columns], panel)

    months = [format_month(parse_month("2026-01") + k) for k in range(6)]
    adopters = by_row(out, "nearby_adopters_fibre_400m")
    share = by_row(out, "nearby_adoption_fibre_400m")
    # B holds fibre at the end of Feb and Mar (it moved out in Apr): A sees it in Mar, Apr.
    # B is a customer at the end of Jan–Mar: A's denominator is 1 in Feb–Apr.
    assert [adopters["A", m] for m in months] == [0, 0, 1, 1, 0, 0]
    assert [share["A", m] for m in months] == [0, 0, 1, 1, 0, 0]
    # B sees A (customer from the end of Jan, never holds) and C (customer from the end of
    # Feb, holds from the end of Mar): adopters 0,0,0,1 over customers 0,1,2,2.
    assert [adopters["B", m] for m in months[:4]] == [0, 0, 0, 1]
    assert [share["B", m] for m in months[:4]] == [0, 0, 0, 0.5]
    # C sees only B: holder in Mar, Apr; customer in Feb–Apr.
    assert [adopters["C", m] for m in months[1:]] == [0, 1, 1, 0, 0]
    assert [share["C", m] for m in months[1:]] == [0, 1, 1, 0, 0]
    assert out.loc[out["customer_id"] == "D", "nearby_adopters_fibre_400m"].eq(0).all()
    # nobody is within 250.5 m
    assert out["nearby_adopters_fibre_250_5m"].eq(0).all()
    assert out["nearby_adoption_tv_250_5m"].eq(0).all()
    # A holds tv from the end of Jan; only B is near A: Feb–Apr.
    tv = by_row(out, "nearby_adopters_tv_400m")
    assert [tv["B", m] for m in months[:4]] == [0, 1, 1, 1]
    assert out.loc[out["customer_id"] != "B", "nearby_adopters_tv_400m"].eq(0).all()

    rental = by_row(out, "rental_share")
    assert rental["A", "2026-01"] == np.float32(0.2) and rental["D", "2026-01"] == np.float32(0.6)
    # Move rate: nothing at all before Jan (NaN); no move-out before May (0); B's move-out in
    # Apr counts from May. May: WEST y=1, n = 4 (A) + 4 (B) + 3 (C) = 11; EAST y=0, n=4. With
    # m = 1/15, s² = 44/27225 < m/n̄ = 2/225, so Marshall's A = 0 and both get 1/15.
    # June: n = 13 and 5, m = 1/18, s² = 65/54756 < 1/162: both 1/18.
    rate = by_row(out, "local_move_rate")
    assert np.isnan(rate["A", "2026-01"])
    assert all(rate[c, m] == 0 for c in "ACD" for m in months[1:4])
    assert rate["A", "2026-05"] == pytest.approx(1 / 15) == rate["D", "2026-05"]
    assert rate["C", "2026-06"] == pytest.approx(1 / 18) == rate["D", "2026-06"]


def test_input_panel_is_not_changed_and_ids_can_be_relabelled():
    tables = line_tables()
    panel = build_panel(tables, "2026-06")
    before = panel.copy()
    out = add_spatial_context(panel, tables)
    pd.testing.assert_frame_equal(panel, before)
    relabel = {"A": "Z9", "B": "K2", "C": "A7", "D": "B1"}
    customers = tables.customers.assign(customer_id=tables.customers["customer_id"].map(relabel))
    uptakes = tables.uptakes.assign(customer_id=tables.uptakes["customer_id"].map(relabel))
    renamed = dataclasses.replace(tables, customers=customers, uptakes=uptakes)
    out2 = add_spatial_context(build_panel(renamed, "2026-06"), renamed)
    new_cols = [c for c in out.columns if c not in panel.columns]
    pd.testing.assert_frame_equal(
        out[new_cols].reset_index(drop=True), out2[new_cols].reset_index(drop=True)
    )


# --- the lag: perturbing anything dated after m − 1 leaves month m's context unchanged --------

FIRST = parse_month("2025-06")
AS_OF = parse_month("2026-01")


@st.composite
def portfolios(draw):
    n = draw(st.integers(2, 18))
    rows, uptakes = [], []
    for i in range(n):
        start = draw(st.integers(FIRST - 6, AS_OF))
        end = draw(st.one_of(st.none(), st.integers(start, AS_OF + 3)))
        row = {
            "customer_id": f"K{i:02d}",
            "start_month": format_month(start),
            "x": X0 + 150.0 * draw(st.integers(0, 9)),  # straddles the WEST/EAST border
            "y": Y0 + 150.0 * draw(st.integers(0, 3)),
        }
        if end is not None:
            row["end_month"] = format_month(end)
            row["end_reason"] = draw(st.sampled_from(["churn", "move_out", "other"]))
        rows.append(row)
        for product in ("fibre", "tv"):
            if draw(st.booleans()):
                month = draw(st.integers(start, end if end is not None else AS_OF + 3))
                uptakes.append(
                    {
                        "customer_id": row["customer_id"],
                        "product": product,
                        "month": format_month(month),
                    }
                )
    cut = draw(st.integers(FIRST + 1, AS_OF))
    return rows, uptakes, cut


def perturb_after(rows, uptakes, cut, draw):
    """Change every date at or after ``cut`` (so after cut − 1) at random, keep the rest."""
    new_rows = []
    for row in rows:
        row = dict(row)
        start = parse_month(row["start_month"])
        if start >= cut:
            start = draw(st.integers(cut, AS_OF + 2))
            row["start_month"] = format_month(start)
        end = parse_month(row["end_month"]) if "end_month" in row else None
        if end is None or end >= cut:
            end = draw(st.one_of(st.none(), st.integers(max(cut, start), AS_OF + 3)))
            row.pop("end_month", None)
            row.pop("end_reason", None)
            if end is not None:
                row["end_month"] = format_month(end)
                row["end_reason"] = draw(st.sampled_from(["churn", "move_out", "other"]))
        new_rows.append(row)
    ends = {
        r["customer_id"]: parse_month(r["end_month"]) if "end_month" in r else AS_OF + 3
        for r in new_rows
    }
    starts = {r["customer_id"]: parse_month(r["start_month"]) for r in new_rows}
    new_uptakes = []
    for u in uptakes:
        month = parse_month(u["month"])
        who = u["customer_id"]
        if month >= cut:
            if draw(st.booleans()):
                continue  # the uptake disappears
            lo = max(cut, starts[who])
            if lo > ends[who]:
                continue
            month = draw(st.integers(lo, ends[who]))
        new_uptakes.append({**u, "month": format_month(month)})
    # and a newcomer who arrives at the cut, next to everybody
    new_rows.append({"customer_id": "NEW", "start_month": format_month(cut), "x": X0, "y": Y0})
    return new_rows, new_uptakes


def context_of(rows, uptakes):
    tables = with_areas(make_tables(rows, uptakes=uptakes, products=("fibre", "tv")))
    config = Config(spatial=SpatialSettings(radii_m=(400.0, 600.0), move_rate_months=3))
    panel = build_panel(tables, format_month(AS_OF), config=config)
    return add_spatial_context(panel, tables, config=config)


@settings(max_examples=40, deadline=None)
@given(portfolios(), st.data())
def test_changing_the_future_leaves_month_m_alone(portfolio, data):
    rows, uptakes, cut = portfolio
    new_rows, new_uptakes = perturb_after(rows, uptakes, cut, data.draw)
    before = context_of(rows, uptakes)
    after = context_of(new_rows, new_uptakes)
    columns = [c for c in after.columns if c in CONTEXT or c.startswith("nearby_")]
    keep = [format_month(m) for m in range(FIRST, cut + 1)]
    b = before[before["month"].astype(str).isin(keep)]
    a = after[after["month"].astype(str).isin(keep) & (after["customer_id"] != "NEW")]
    # A start moved to or from the cut month adds or removes that customer's row for it; every
    # customer-month present both times must have the same context.
    merged = b.merge(a, on=["customer_id", "month"], suffixes=("", "_new"))
    assert len(merged) >= len(b) - sum(r["start_month"] == format_month(cut) for r in rows)
    for column in columns:
        np.testing.assert_array_equal(
            merged[column].to_numpy(), merged[column + "_new"].to_numpy(), err_msg=column
        )


# --- agreement with the demo simulation -----------------------------------------------------


def test_agrees_with_the_demo_simulation(tmp_path):
    from lifecycle.config import load_config
    from lifecycle.data import load_tables
    from lifecycle.demo import simulate_demo, write_demo

    write_demo(tmp_path / "demo", customers=1500, seed=11)
    config = load_config(tmp_path / "demo" / "lifecycle.toml")
    tables = load_tables(tmp_path / "demo", config)
    out = add_spatial_context(build_panel(tables, "2026-10", config=config), tables, config=config)
    sim = simulate_demo(customers=1500, seed=11).features
    key = ["customer_id", "month"]
    ours = out.assign(customer_id=out["customer_id"].astype(str), month=out["month"].astype(str))
    theirs = sim.assign(customer_id=sim["customer_id"].astype(str), month=sim["month"].astype(str))
    merged = ours.merge(theirs, on=key, suffixes=("", "_sim"), validate="1:1")
    assert len(merged) == len(ours) == len(theirs)
    adopters = "nearby_adopters_backup_line_400m"
    np.testing.assert_array_equal(merged[adopters], merged[adopters + "_sim"])
    for column in ("rental_share", "local_move_rate", "nearby_adoption_backup_line_400m"):
        np.testing.assert_allclose(
            merged[column].to_numpy(float), merged[column + "_sim"].to_numpy(float), rtol=1e-6
        )


# --- refusals -------------------------------------------------------------------------------


def test_refusals():
    tables = line_tables()
    panel = build_panel(tables, "2026-06")
    with pytest.raises(UsageError, match="no column 'month'"):
        add_spatial_context(panel.drop(columns="month"), tables)
    stranger = panel.copy()
    stranger["customer_id"] = stranger["customer_id"].astype(str).replace({"A": "Q"})
    with pytest.raises(UsageError, match="not in the customers table"):
        add_spatial_context(stranger, tables)
    once = add_spatial_context(panel, tables)
    with pytest.raises(UsageError, match="already has spatial context"):
        add_spatial_context(once, tables)
    for radii in ((0.0,), (-5.0,), (400.0, 400)):
        with pytest.raises(UsageError, match="radii_m"):
            add_spatial_context(
                panel, tables, config=Config(spatial=SpatialSettings(radii_m=radii))
            )
    with pytest.raises(UsageError, match="move_rate_months"):
        add_spatial_context(
            panel, tables, config=Config(spatial=SpatialSettings(move_rate_months=0))
        )
    clash = tables.areas.rename(columns={"rental_share": "tenure_start"})
    with pytest.raises(InputError) as info:
        add_spatial_context(panel, dataclasses.replace(tables, areas=clash))
    assert (info.value.table, info.value.column) == ("areas", "tenure_start")
    ghost = pd.concat(
        [tables.uptakes, pd.DataFrame({"customer_id": ["G"], "product": ["tv"], "month": [1]})]
    )
    with pytest.raises(InputError) as info:
        add_spatial_context(panel, dataclasses.replace(tables, uptakes=ghost))
    assert (info.value.table, info.value.count, info.value.examples) == ("uptakes", 1, ["G"])


def test_empty_panel_gets_empty_columns():
    tables = line_tables()
    panel = build_panel(tables, "2026-06").iloc[:0]
    out = add_spatial_context(panel, tables)
    assert len(out) == 0
    assert "nearby_adoption_tv_400m" in out.columns and "local_move_rate" in out.columns
