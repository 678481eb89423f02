"""The input checks: every contract rule on a small hand-made table, and the parsed types.

The tables are invented (tests/_tables_factory.py); each test breaks one thing and expects
one `InputError` naming the table, the column, the number of rows and example ids, counted by
hand from the rows the test changed (known truth). Month indices are compared with pandas'
`Period.ordinal` (months since 1970-01), coordinates' limits with pyproj's area of use of
EPSG:4326.
"""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pandas as pd
import pyproj
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from shapely.geometry import Point

from lifecycle.config import Config
from lifecycle.data import RawTables, check_tables, load_tables
from lifecycle.errors import InputError, UsageError
from tests._tables_factory import (
    EXTRACT,
    PREMISE_CRS,
    native_frames,
    valid_frames,
    write_csv,
    write_duckdb,
    write_parquet,
)

CONFIG = Config(extract_month=EXTRACT, premise_crs=PREMISE_CRS)


def _index(month: str) -> int:
    """Month index from pandas: Period ordinals count months from 1970-01."""
    return pd.Period(month, freq="M").ordinal + 1970 * 12


def _load(tmp_path, frames, config=CONFIG):
    return load_tables(write_csv(tmp_path / "data", frames), config)


def _fails(tmp_path, frames, *, table, column, count, examples, problem=None, config=CONFIG):
    with pytest.raises(InputError) as info:
        _load(tmp_path, frames, config)
    err = info.value
    assert (err.table, err.column, err.count, err.examples) == (table, column, count, examples)
    if problem is not None:
        assert problem in err.problem
    return err


def _edit(table, row, column, value, frames=None):
    frames = frames or valid_frames()
    frame = frames[table].copy()
    frame.loc[row, column] = value
    return frames | {table: frame}


def _add(table, frames=None, **row):
    frames = frames or valid_frames()
    frame = pd.concat([frames[table], pd.DataFrame([row])], ignore_index=True)
    return frames | {table: frame}


# --- a valid input, three ways -----------------------------------------------------------------


def test_valid_csv_tables_are_parsed_into_the_documented_types(tmp_path):
    frames = valid_frames()
    tables = _load(tmp_path, frames)
    c = tables.customers
    assert c["customer_id"].tolist() == frames["customers"]["customer_id"].tolist()  # input order
    assert c["start"].dtype == np.int32 and c["end"].dtype == np.float64
    assert c["start"].tolist() == [_index(m) for m in frames["customers"]["start_month"]]
    ends = frames["customers"]["end_month"]
    assert np.array_equal(c["end"], [np.nan if m is None else _index(m) for m in ends], True)
    assert list(c["end_reason"].cat.categories) == ["churn", "move_out", "other"]
    assert c["end_reason"].isna().tolist() == ends.isna().tolist()
    assert c["end_reason"].tolist()[1:4] == ["churn", "move_out", "other"]
    for name in ("x", "y", "monthly_margin"):
        assert c[name].dtype == np.float64
        assert c[name].tolist() == frames["customers"][name].astype(float).tolist()
    assert list(c.columns[:7]) == [
        "customer_id", "start", "end", "end_reason", "x", "y", "monthly_margin",
    ]  # fmt: skip
    assert tables.static_columns == ["plan", "household_size", "do_not_contact", "hardship"]
    assert c["plan"].dtype == "string" and c["household_size"].dtype == np.float64
    assert c["do_not_contact"].dtype == np.int8 and c["do_not_contact"].tolist() == [
        0,
        0,
        1,
        0,
        0,
        0,
    ]
    assert c["hardship"].dtype == np.int8
    assert tables.products == ["mesh", "tv"]
    assert tables.uptakes["month"].dtype == np.int32
    assert tables.uptakes["month"].tolist() == [_index(m) for m in frames["uptakes"]["month"]]
    assert tables.activity_columns == ["complaints", "data_gb"]
    assert (tables.activity[["complaints", "data_gb"]].dtypes == np.float64).all()
    assert tables.activity["complaints"].isna().sum() == 1
    assert tables.campaigns["arm"].tolist() == ["offered", "held_out", "offered"]
    assert tables.extract_month == _index(EXTRACT)
    assert tables.premise_crs == PREMISE_CRS
    assert pyproj.CRS(tables.areas.crs) == pyproj.CRS(PREMISE_CRS)
    assert tables.areas["rental_share"].tolist() == [0.35, 0.6]


def test_lon_lat_are_kept_as_x_y_in_wgs84(tmp_path):
    frames = valid_frames()
    customers = frames["customers"].drop(columns=["x", "y"])
    customers["lon"] = ["-3.51", "-3.52", "-3.5", "-3.49", "-3.5", "-3.53"]
    customers["lat"] = ["50.71", "50.72", "50.7", "50.73", "50.7", "50.74"]
    tables = _load(tmp_path, frames | {"customers": customers}, Config(extract_month=EXTRACT))
    assert pyproj.CRS(tables.premise_crs).to_epsg() == 4326
    assert tables.customers["x"].tolist() == customers["lon"].astype(float).tolist()
    assert tables.customers["y"].tolist() == customers["lat"].astype(float).tolist()
    assert "lon" not in tables.static_columns


@pytest.mark.parametrize("name", ["customers", "uptakes", "activity", "campaigns"])
def test_parquet_folder_gives_the_same_tables(tmp_path, name):
    expected = _load(tmp_path, valid_frames())
    tables = load_tables(write_parquet(tmp_path / "pq", native_frames()), CONFIG)
    pd.testing.assert_frame_equal(getattr(tables, name), getattr(expected, name))
    assert tables.products == expected.products
    assert tables.areas.geom_equals(expected.areas).all()


@pytest.mark.parametrize("areas_from_file", [False, True])
def test_duckdb_file_gives_the_same_tables(tmp_path, areas_from_file):
    expected = _load(tmp_path, valid_frames())
    frames = native_frames()
    config = Config(extract_month=EXTRACT, premise_crs=PREMISE_CRS, areas_crs=PREMISE_CRS)
    if areas_from_file:  # areas beside the database, as GeoJSON
        frames["areas"].to_file(tmp_path / "zones.geojson", driver="GeoJSON")
        config = Config(extract_month=EXTRACT, premise_crs=PREMISE_CRS,
                        tables={"areas": "zones.geojson"})  # fmt: skip
        frames.pop("areas")
    tables = load_tables(write_duckdb(tmp_path / "portfolio.duckdb", frames), config)
    for name in ("customers", "uptakes", "activity", "campaigns"):
        pd.testing.assert_frame_equal(getattr(tables, name), getattr(expected, name))
    assert pyproj.CRS(tables.areas.crs) == pyproj.CRS(PREMISE_CRS)
    assert tables.areas.geom_equals(expected.areas).all()


def test_ids_stored_as_numbers_in_one_table_and_text_in_another_match(tmp_path):
    frames = native_frames()
    number = {f"C00{i}": 100 + i for i in range(1, 7)}
    frames["customers"]["customer_id"] = frames["customers"]["customer_id"].map(number)
    for name in ("uptakes", "activity", "campaigns"):  # these keep text ids: "101", ...
        frames[name]["customer_id"] = frames[name]["customer_id"].map(number).astype(str)
    config = Config(extract_month=EXTRACT, premise_crs=PREMISE_CRS, areas_crs=PREMISE_CRS)
    tables = load_tables(write_duckdb(tmp_path / "p.duckdb", frames), config)
    assert tables.uptakes["customer_id"].tolist() == [101, 103, 101, 105]
    for name in ("uptakes", "activity", "campaigns"):
        frame = getattr(tables, name)
        assert frame["customer_id"].dtype == tables.customers["customer_id"].dtype


def test_optional_tables_may_be_missing(tmp_path):
    tables = _load(tmp_path, valid_frames() | {"activity": None, "campaigns": None})
    assert tables.activity.empty and tables.activity_columns == []
    assert tables.activity["month"].dtype == np.int32
    assert tables.campaigns.empty
    assert list(tables.campaigns.columns) == ["customer_id", "month", "offer", "arm"]


def test_a_table_index_other_than_0_to_n_is_ignored():
    frames = native_frames()
    customers = frames["customers"].set_axis([10, 11, 12, 13, 14, 15], axis=0)
    raw = RawTables(customers=customers, uptakes=frames["uptakes"], areas=frames["areas"])
    tables = check_tables(raw, CONFIG)
    assert tables.customers.index.tolist() == list(range(6))
    assert tables.customers["plan"].tolist() == customers["plan"].tolist()


# --- tables and columns ------------------------------------------------------------------------


@pytest.mark.parametrize("name", ["customers", "uptakes", "areas"])
def test_missing_required_table(tmp_path, name):
    _fails(tmp_path, valid_frames() | {name: None}, table=name, column=None, count=0,
           examples=[], problem="missing")  # fmt: skip


@pytest.mark.parametrize(
    ("table", "column"),
    [
        ("customers", "customer_id"), ("customers", "start_month"), ("customers", "end_month"),
        ("customers", "end_reason"), ("customers", "monthly_margin"), ("customers", "y"),
        ("uptakes", "customer_id"), ("uptakes", "product"), ("uptakes", "month"),
        ("activity", "customer_id"), ("activity", "month"),
        ("campaigns", "customer_id"), ("campaigns", "month"), ("campaigns", "offer"),
        ("campaigns", "arm"), ("areas", "area_id"),
    ],
)  # fmt: skip
def test_missing_required_column(tmp_path, table, column):
    frames = valid_frames()
    frames[table] = frames[table].drop(columns=column)
    _fails(tmp_path, frames, table=table, column=column, count=0, examples=[],
           problem="is missing")  # fmt: skip


def test_x_y_without_a_crs_asks_for_premise_crs(tmp_path):
    err = _fails(tmp_path, valid_frames(), table="customers", column="x", count=0, examples=[],
                 config=Config(extract_month=EXTRACT))  # fmt: skip
    assert "[data] premise_crs" in str(err)


def test_an_unknown_premise_crs_is_a_usage_error(tmp_path):
    with pytest.raises(UsageError, match="premise_crs"):
        _load(tmp_path, valid_frames(), Config(extract_month=EXTRACT, premise_crs="EPSG:1"))


# --- customers ---------------------------------------------------------------------------------


def test_empty_customers_table(tmp_path):
    frames = valid_frames()
    frames["customers"] = frames["customers"].iloc[:0]
    _fails(tmp_path, frames, table="customers", column=None, count=0, examples=[],
           problem="no rows")  # fmt: skip


def test_duplicate_customer_ids(tmp_path):
    frames = _edit("customers", 3, "customer_id", "C002")
    _fails(tmp_path, frames, table="customers", column="customer_id", count=2,
           examples=["C002"], problem="not unique")  # fmt: skip


def test_blank_customer_id_is_shown_by_row_number(tmp_path):
    _fails(tmp_path, _edit("customers", 2, "customer_id", None), table="customers",
           column="customer_id", count=1, examples=["row 3"])  # fmt: skip


@pytest.mark.parametrize(
    ("table", "row", "column", "example"),
    [
        ("customers", 0, "start_month", "C001"),
        ("customers", 1, "end_month", "C002"),
        ("uptakes", 1, "month", "C003"),
        ("activity", 4, "month", "C003"),
        ("campaigns", 2, "month", "C006"),
    ],
)
@pytest.mark.parametrize("value", ["2025/03", "2025-13", "March 2025"])
def test_unparseable_months(tmp_path, table, row, column, example, value):
    err = _fails(tmp_path, _edit(table, row, column, value), table=table, column=column,
                 count=1, examples=[example], problem="not YYYY-MM")  # fmt: skip
    assert value in err.problem


def test_blank_start_month(tmp_path):
    _fails(tmp_path, _edit("customers", 4, "start_month", None), table="customers",
           column="start_month", count=1, examples=["C005"])  # fmt: skip


def test_end_before_start(tmp_path):
    frames = _edit("customers", 3, "end_month", "2024-12")
    _fails(tmp_path, frames, table="customers", column="end_month", count=1,
           examples=["C004"], problem="before start_month")  # fmt: skip


def test_end_reason_without_end_month(tmp_path):
    frames = _edit("customers", [0, 5], "end_reason", "churn")
    _fails(tmp_path, frames, table="customers", column="end_month", count=2,
           examples=["C001", "C006"], problem="end_reason is given")  # fmt: skip


def test_end_month_without_end_reason(tmp_path):
    frames = _edit("customers", 2, "end_reason", None)
    _fails(tmp_path, frames, table="customers", column="end_reason", count=1,
           examples=["C003"], problem="end_month is given")  # fmt: skip


def test_unknown_end_reasons_and_their_mapping(tmp_path):
    frames = _edit("customers", [1, 2], "end_reason", ["SW", "MV"])
    err = _fails(tmp_path, frames, table="customers", column="end_reason", count=2,
                 examples=["C002", "C003"])  # fmt: skip
    assert "MV" in err.problem and "SW" in err.problem and "[reasons]" in err.fix
    config = Config(extract_month=EXTRACT, premise_crs=PREMISE_CRS,
                    reasons={"SW": "churn", "MV": "move_out"})  # fmt: skip
    tables = load_tables(tmp_path / "data", config)
    assert tables.customers["end_reason"].tolist()[1:4] == ["churn", "move_out", "other"]


@pytest.mark.parametrize(
    ("value", "problem"), [("-5", "is negative"), (None, "is blank"), ("lots", "not a number")]
)
def test_monthly_margin(tmp_path, value, problem):
    _fails(tmp_path, _edit("customers", 1, "monthly_margin", value), table="customers",
           column="monthly_margin", count=1, examples=["C002"], problem=problem)  # fmt: skip


@pytest.mark.parametrize(
    ("column", "value", "problem"),
    [("x", "east", "not a number"), ("y", None, "is blank"), ("x", "inf", "not a number")],
)
def test_projected_coordinates(tmp_path, column, value, problem):
    _fails(tmp_path, _edit("customers", 5, column, value), table="customers", column=column,
           count=1, examples=["C006"], problem=problem)  # fmt: skip


@pytest.mark.parametrize(("column", "bound"), [("lon", 0), ("lat", 1), ("lon", 2), ("lat", 3)])
def test_lon_lat_out_of_range(tmp_path, column, bound):
    # Limits: pyproj's area of use of EPSG:4326 (west, south, east, north).
    limit = pyproj.CRS("EPSG:4326").area_of_use.bounds[bound]
    frames = valid_frames()
    customers = frames["customers"].drop(columns=["x", "y"]).assign(lon="-3.5", lat="50.7")
    customers.loc[0, column] = str(limit)  # the limit itself is allowed
    customers.loc[4, column] = str(limit + (0.01 if limit > 0 else -0.01))
    _fails(tmp_path, frames | {"customers": customers}, table="customers", column=column,
           count=1, examples=["C005"], problem="outside",
           config=Config(extract_month=EXTRACT))  # fmt: skip


@pytest.mark.parametrize("flag", ["do_not_contact", "hardship"])
@pytest.mark.parametrize("value", ["maybe", None, "2"])
def test_decision_flags_must_be_0_or_1(tmp_path, flag, value):
    _fails(tmp_path, _edit("customers", 3, flag, value), table="customers", column=flag,
           count=1, examples=["C004"])  # fmt: skip


# --- months later than the extract month --------------------------------------------------------


@pytest.mark.parametrize(
    ("table", "row", "column", "example"),
    [
        ("customers", 5, "start_month", "C006"),
        ("customers", 1, "end_month", "C002"),
        ("uptakes", 3, "month", "C005"),
        ("activity", 5, "month", "C006"),
        ("campaigns", 2, "month", "C006"),
    ],
)
def test_months_later_than_the_extract_month(tmp_path, table, row, column, example):
    _fails(tmp_path, _edit(table, row, column, "2026-07"), table=table, column=column, count=1,
           examples=[example], problem="later than the extract month 2026-06")  # fmt: skip


def test_the_extract_month_defaults_to_the_last_month_dated_in_the_data(tmp_path):
    # Known truth: the latest month of the factory's tables is read off them by hand here.
    frames = valid_frames()
    dated = [frames["customers"]["start_month"], frames["customers"]["end_month"]]
    dated += [frames[t]["month"] for t in ("uptakes", "activity", "campaigns")]
    latest = max(str(m) for column in dated for m in column.dropna())
    tables = _load(tmp_path, frames, Config(premise_crs=PREMISE_CRS))
    assert tables.extract_month == _index(latest)
    # A later start moves it; today's date never enters (a month in 2031 is accepted).
    frames = _add("customers", customer_id="C099", start_month="2031-02", x=500100.0,
                  y=5700100.0, monthly_margin="10", do_not_contact="0", hardship="0")  # fmt: skip
    assert _load(tmp_path, frames, Config(premise_crs=PREMISE_CRS)).extract_month == _index(
        "2031-02"
    )


# --- uptakes, activity, campaigns --------------------------------------------------------------


@pytest.mark.parametrize("table", ["uptakes", "activity", "campaigns"])
def test_rows_for_unknown_customers(tmp_path, table):
    frames = _edit(table, [0, 1], "customer_id", ["C999", "c001"])
    _fails(tmp_path, frames, table=table, column="customer_id", count=2,
           examples=["C999", "c001"], problem="not in the customers table")  # fmt: skip


def test_duplicate_uptakes_of_one_product(tmp_path):
    frames = _add("uptakes", customer_id="C001", product="tv", month="2025-01")
    _fails(tmp_path, frames, table="uptakes", column="product", count=2, examples=["C001"])


def test_blank_product(tmp_path):
    _fails(tmp_path, _edit("uptakes", 2, "product", " "), table="uptakes", column="product",
           count=1, examples=["C001"])  # fmt: skip


@pytest.mark.parametrize(
    ("row", "month", "problem"),
    [(1, "2023-10", "before the customer's start"), (0, "2023-12", "before the customer's start")],
)
def test_uptake_before_start(tmp_path, row, month, problem):
    example = valid_frames()["uptakes"].loc[row, "customer_id"]
    _fails(tmp_path, _edit("uptakes", row, "month", month), table="uptakes", column="month",
           count=1, examples=[example], problem=problem)  # fmt: skip


def test_uptake_after_end(tmp_path):
    frames = _add("uptakes", customer_id="C002", product="tv", month="2025-07")
    _fails(tmp_path, frames, table="uptakes", column="month", count=1, examples=["C002"],
           problem="after the customer's end")  # fmt: skip
    # the end month itself is still a month of the customer
    _load(tmp_path / "ok", _add("uptakes", customer_id="C002", product="tv", month="2025-06"))


def test_activity_outside_active_months(tmp_path):
    frames = _add("activity", customer_id="C002", month="2025-07", complaints="0", data_gb="1")
    frames = _add("activity", frames, customer_id="C006", month="2025-12", data_gb="1")
    _fails(tmp_path, frames, table="activity", column="month", count=2,
           examples=["C002", "C006"], problem="outside the customer's active months")  # fmt: skip


def test_activity_month_given_twice(tmp_path):
    frames = _add("activity", customer_id="C001", month="2026-04", complaints="1", data_gb="1")
    _fails(tmp_path, frames, table="activity", column="month", count=2, examples=["C001"],
           problem="more than one row")  # fmt: skip


@pytest.mark.parametrize("value", ["many", "1,5", "NaN"])
def test_non_numeric_activity_values(tmp_path, value):
    err = _fails(tmp_path, _edit("activity", 2, "complaints", value), table="activity",
                 column="complaints", count=1, examples=["C002"])  # fmt: skip
    assert value in err.problem


def test_campaign_arm_must_be_offered_or_held_out(tmp_path):
    frames = _edit("campaigns", [0, 2], "arm", ["control", "Offered"])
    err = _fails(tmp_path, frames, table="campaigns", column="arm", count=2,
                 examples=["C001", "C006"])  # fmt: skip
    assert "control" in err.problem and "held_out" in err.problem


# --- areas -------------------------------------------------------------------------------------


def _areas_without_crs(tmp_path):
    folder = write_csv(tmp_path / "data", valid_frames() | {"areas": None})
    valid_frames()["areas"].set_crs(None, allow_override=True).to_parquet(folder / "areas.parquet")
    return folder


def test_areas_without_a_crs(tmp_path):
    with pytest.raises(InputError) as info:
        load_tables(_areas_without_crs(tmp_path), CONFIG)
    assert (info.value.table, info.value.column) == ("areas", "geometry")
    assert "areas_crs" in str(info.value)


def test_areas_crs_from_the_config(tmp_path):
    config = Config(extract_month=EXTRACT, premise_crs=PREMISE_CRS, areas_crs="EPSG:32630")
    tables = load_tables(_areas_without_crs(tmp_path), config)
    assert tables.areas.crs.to_epsg() == 32630


def test_duplicate_area_ids(tmp_path):
    frames = _edit("areas", 1, "area_id", "NORTHFIELD")
    _fails(tmp_path, frames, table="areas", column="area_id", count=2, examples=["NORTHFIELD"],
           problem="not unique")  # fmt: skip


def test_areas_must_be_polygons(tmp_path):
    frames = valid_frames()
    areas = frames["areas"].copy()
    areas.loc[1, "geometry"] = Point(501_000, 5_600_000)
    err = _fails(tmp_path, frames | {"areas": areas}, table="areas", column="geometry",
                 count=1, examples=["SOUTHMERE"])  # fmt: skip
    assert "Point" in err.problem


# --- the message and properties ----------------------------------------------------------------


def test_message_names_table_column_count_and_examples(tmp_path):
    frames = _edit("activity", [0, 1, 2, 3, 4, 5], "month", "2027-01")
    with pytest.raises(InputError) as info:
        _load(tmp_path, frames)
    message = str(info.value)
    assert "'activity'" in message and "'month'" in message
    assert "(6 rows" in message
    assert "e.g. C001, C002, C003, C006" in message  # distinct ids, in row order


def test_at_most_five_example_ids_are_given(tmp_path):
    frames = _edit("customers", list(range(6)), "monthly_margin", "-1")
    _fails(tmp_path, frames, table="customers", column="monthly_margin", count=6,
           examples=["C001", "C002", "C003", "C004", "C005"])  # fmt: skip


def _raw(starts: list[str], activity_months: list[str]) -> RawTables:
    n = len(starts)
    customers = pd.DataFrame(
        {
            "customer_id": [f"K{i}" for i in range(n)],
            "start_month": starts,
            "end_month": [None] * n,
            "end_reason": [None] * n,
            "monthly_margin": ["10"] * n,
            "lon": ["0"] * n,
            "lat": ["0"] * n,
        }
    )
    uptakes = pd.DataFrame(columns=["customer_id", "product", "month"])
    areas = gpd.GeoDataFrame({"area_id": ["A"]}, geometry=[Point(0, 0).buffer(1)], crs=4326)
    activity = pd.DataFrame({"customer_id": "K0", "month": activity_months})
    return RawTables(customers=customers, uptakes=uptakes, areas=areas, activity=activity)


months = st.tuples(st.integers(1900, 2100), st.integers(1, 12))


@settings(max_examples=40, deadline=None)
@given(st.lists(months, min_size=1, max_size=8), st.booleans())
def test_start_months_agree_with_pandas_periods(starts, padded):
    texts = [f"{y}-{m:02d}" if padded else f"{y}-{m}" for y, m in starts]
    tables = check_tables(_raw(texts, []), Config(extract_month="2100-12"))
    assert tables.customers["start"].tolist() == [_index(f"{y}-{m:02d}") for y, m in starts]


@settings(max_examples=25, deadline=None)
@given(st.integers(0, 30), st.integers(1, 30), st.randoms(use_true_random=False))
def test_the_count_is_the_number_of_late_rows_whatever_their_order(ok, late, random):
    # K0 starts 2000-01; the extract month is 2010-12: rows after it are late.
    rows = [f"{2000 + i // 12}-{i % 12 + 1:02d}" for i in range(ok)]
    rows += [f"{2011 + i // 12}-{i % 12 + 1:02d}" for i in range(late)]
    random.shuffle(rows)
    with pytest.raises(InputError) as info:
        check_tables(_raw(["2000-01"], rows), Config(extract_month="2010-12"))
    assert (info.value.table, info.value.column, info.value.count) == ("activity", "month", late)
