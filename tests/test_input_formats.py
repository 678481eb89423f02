"""Forgiving input formats: months as YYYY-MM, days or ISO date-times, checked against Python's
own calendar (the standard library's `datetime`, the outside reference); flag words; the new
settings of `lifecycle.toml`; example ids cut in messages."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from lifecycle._months import YEAR_MAX, YEAR_MIN, months_to_index
from lifecycle.config import load_config
from lifecycle.data._parse import flags, static
from lifecycle.errors import InputError, UsageError


def _reference(text: str) -> float:
    """The month index by the standard library: NaN when Python says the date does not exist."""
    try:
        if len(text) <= 7:
            day = dt.date.fromisoformat(text + "-01")
        else:
            day = dt.datetime.fromisoformat(text).date()
    except ValueError:
        return np.nan
    if not YEAR_MIN <= day.year <= YEAR_MAX:
        return np.nan
    return day.year * 12 + day.month - 1


@settings(max_examples=300, deadline=None)
@given(
    year=st.integers(0, 9999),
    month=st.integers(0, 14),
    day=st.integers(0, 33),
    form=st.sampled_from(["month", "day", "datetime", "datetime_z", "datetime_offset"]),
)
def test_months_agree_with_the_standard_library_calendar(year, month, day, form):
    text = f"{year:04d}-{month:02d}"
    if form != "month":
        text += f"-{day:02d}"
    text += {"datetime": "T09:30:00", "datetime_z": "T09:30:00Z"}.get(form, "")
    text += "T23:59:59.5+02:00" if form == "datetime_offset" else ""
    index, bad = months_to_index(pd.Series([text], dtype=object))
    expected = _reference(text)
    assert bool(bad[0]) == bool(np.isnan(expected)), text
    if not np.isnan(expected):
        assert index[0] == expected


def test_a_configured_format_reads_other_dates_and_the_standard_forms_still_work():
    values = pd.Series(["17/03/2024", "2024-05", "31/02/2024", ""], dtype=object)
    index, bad = months_to_index(values, fmt="%d/%m/%Y")
    # 31/02 does not exist (datetime.strptime refuses it too):
    with pytest.raises(ValueError):
        dt.datetime.strptime("31/02/2024", "%d/%m/%Y")
    assert index[:2].tolist() == [2024 * 12 + 2, 2024 * 12 + 4]
    assert bad.tolist() == [False, False, True, False] and np.isnan(index[3])


def test_dates_read_as_timestamps_outside_the_years_are_bad():
    values = pd.Series(pd.to_datetime(["1899-12-31", "2024-07-04"]))
    index, bad = months_to_index(values)
    assert bad.tolist() == [True, False] and index[1] == 2024 * 12 + 6


@pytest.mark.parametrize(
    ("words", "expected"),
    [
        (["Y", "n", "YES", "no", "True", "false", "1", "0"], [1, 0, 1, 0, 1, 0, 1, 0]),
        (["y", None, "N"], [1, np.nan, 0]),
    ],
)
def test_flag_words_in_any_case(words, expected):
    assert np.array_equal(flags(pd.Series(words, dtype=object)), expected, equal_nan=True)


def test_flag_columns_become_int8_and_other_text_stays_text():
    assert static(pd.Series(["Y", "n", "N"], dtype=object)).dtype == np.int8
    assert static(pd.Series(["Y", "maybe"], dtype=object)).dtype == "string"
    assert flags(pd.Series(["Y", "maybe"], dtype=object)) is None


def test_example_ids_are_cut_to_a_readable_length():
    err = InputError(
        table="customers", column="customer_id", problem="is not unique", count=2,
        examples=["A" * 100_000, "B"],
    )  # fmt: skip
    assert len(str(err)) < 200 and "A" * 39 + "…" in str(err)
    assert err.examples[0] == "A" * 100_000  # the error keeps the full id for callers


def test_messages_name_the_exports_column_beside_ours():
    err = InputError(table="customers", column="end_month", problem="is bad", count=1)
    named = err.with_source_names({"customers": {"end_month": "leave_date"}})
    assert str(named).startswith("table 'customers', column 'leave_date' (end_month): is bad")
    assert err.with_source_names({}) is err


def _config(tmp_path, text):
    path = tmp_path / "lifecycle.toml"
    path.write_text(text, encoding="utf-8")
    return load_config(path)


def test_the_new_settings_are_read(tmp_path):
    config = _config(
        tmp_path,
        '[formats]\ncustomers = "%d/%m/%Y"\nactivity.month = "%m/%Y"\n'
        '[campaigns]\noffers = { WB10 = "loyalty" }\narms = { T = "offered", C = "held_out" }\n'
        '[spatial]\noverlaps = "smallest"\n',
    )
    assert config.month_format("customers", "end_month") == "%d/%m/%Y"
    assert config.month_format("activity", "month") == "%m/%Y"
    assert config.month_format("uptakes", "month") is None
    assert config.campaigns.offers == {"WB10": "loyalty"}
    assert config.campaigns.arms == {"T": "offered", "C": "held_out"}
    assert config.spatial.overlaps == "smallest"
    assert config.extract_month_index() is None  # inferred from the data, never today


@pytest.mark.parametrize(
    ("text", "needle"),
    [
        ('[formats]\nbilling = "%d/%m/%Y"\n', "names no table"),
        ('[formats]\ncustomers = "dd/mm/yyyy"\n', "date format"),
        ('[campaigns]\narms = { T = "treated" }\n', "offered"),
        ("[campaigns]\noffers = 5\n", "table of texts"),
        ("[campaigns]\nlabels = {}\n", "unknown setting"),
        ('[spatial]\noverlaps = "largest"\n', "smallest"),
    ],
)
def test_malformed_new_settings_are_usage_errors(tmp_path, text, needle):
    with pytest.raises(UsageError, match=needle):
        _config(tmp_path, text)
