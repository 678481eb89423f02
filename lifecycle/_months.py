"""Calendar months as integers.

Internally a month is an integer index, ``year * 12 + (month - 1)``, so that month arithmetic
is integer arithmetic and a panel of millions of rows stays cheap. At the edges (files, the
command line) a month is the text ``YYYY-MM``.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

from .errors import UsageError

_MONTH_RE = re.compile(r"^\s*(\d{4})-(\d{1,2})\s*$")


def parse_month(text: str, *, what: str = "month") -> int:
    """Parse one ``YYYY-MM`` string into a month index, or raise `UsageError`."""
    match = _MONTH_RE.match(str(text))
    if not match or not 1 <= int(match.group(2)) <= 12:
        raise UsageError(f"{what} was {text!r} but is expected as YYYY-MM, e.g. 2026-03")
    return int(match.group(1)) * 12 + int(match.group(2)) - 1


def format_month(index: int) -> str:
    """The ``YYYY-MM`` text of a month index."""
    year, month0 = divmod(int(index), 12)
    return f"{year:04d}-{month0 + 1:02d}"


def month_labels(indices: np.ndarray) -> np.ndarray:
    """``YYYY-MM`` texts for an array of month indices (object array)."""
    uniq, inverse = np.unique(np.asarray(indices), return_inverse=True)
    labels = np.array([format_month(i) for i in uniq], dtype=object)
    return labels[inverse]


YEAR_MIN, YEAR_MAX = 1900, 2200  # months outside these years are refused as impossible

# YYYY-MM, YYYY-MM-DD, or an ISO 8601 date-time (``T`` or a space, then a time and an optional
# zone); the day and the time are checked, then dropped.
_MONTH_TEXT = (
    r"^(\d{4})-(\d{1,2})"
    r"(?:-(\d{1,2})(?:[T ]\d{2}:\d{2}(?::\d{2}(?:\.\d+)?)?(?:Z|[+-]\d{2}:?\d{2})?)?)?$"
)


def months_to_index(values: pd.Series, *, fmt: str | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Month indices for a column of months (text, dates or periods).

    Text is read as ``YYYY-MM``, ``YYYY-MM-DD`` or an ISO 8601 date-time such as
    ``2024-03-17T09:30:00Z`` (the day and time are checked, then dropped); ``fmt``, a
    ``strftime`` format such as ``"%d/%m/%Y"``, is tried for text that is none of these.
    A date that does not exist (``2024-01-45``, ``2024-13``, ``2023-02-29``) or whose year lies
    outside ``YEAR_MIN..YEAR_MAX`` (1900..2200) is bad.

    Returns ``(index, bad)``: ``index`` is float64 with NaN where the value is blank or bad,
    and ``bad`` is a boolean mask of values that are present but not a month. The caller
    decides whether blanks are allowed and how to report bad values.
    """
    if isinstance(values.dtype, pd.PeriodDtype):
        out = np.where(values.isna(), np.nan, values.dt.year * 12 + values.dt.month - 1)
        return _in_years(out.astype("float64"), np.zeros(len(values), dtype=bool))
    if pd.api.types.is_datetime64_any_dtype(values):
        out = (values.dt.year * 12 + values.dt.month - 1).to_numpy(dtype="float64")
        return _in_years(out, np.zeros(len(values), dtype=bool))
    if not (values.dtype == object or isinstance(values.dtype, pd.StringDtype)):
        values = values.astype(object)
    text = values.astype("string").str.strip()
    blank = (text.isna() | (text == "")).to_numpy(dtype=bool)
    parts = text.str.extract(_MONTH_TEXT)
    year = pd.to_numeric(parts[0], errors="coerce")
    month = pd.to_numeric(parts[1], errors="coerce")
    day = pd.to_numeric(parts[2], errors="coerce")
    ok = year.notna() & month.between(1, 12)
    has_day = ok & day.notna()
    if has_day.any():
        real = pd.to_datetime(
            pd.DataFrame({"year": year[has_day], "month": month[has_day], "day": day[has_day]}),
            errors="coerce",
        )
        ok[has_day] = real.notna().to_numpy()
    index = (year * 12 + month - 1).where(ok).to_numpy(dtype="float64")
    if fmt:
        other = ~ok.to_numpy(dtype=bool) & ~blank
        if other.any():
            dates = pd.to_datetime(text[other], format=fmt, errors="coerce")
            index[other] = (dates.dt.year * 12 + dates.dt.month - 1).to_numpy(dtype="float64")
    bad = ~blank & np.isnan(index)
    index[blank] = np.nan
    return _in_years(index, bad)


def _in_years(index: np.ndarray, bad: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Months outside ``YEAR_MIN..YEAR_MAX`` marked bad (and NaN)."""
    outside = (index < YEAR_MIN * 12) | (index > YEAR_MAX * 12 + 11)
    if outside.any():
        index = index.copy()
        index[outside] = np.nan
        bad = bad | outside
    return index, bad


def month_categorical(indices: np.ndarray) -> pd.Categorical:
    """An ordered categorical of ``YYYY-MM`` labels covering ``min..max`` of ``indices``.

    Codes are ``index - min``, so a 48-month panel stores one byte per row for the month.
    """
    indices = np.asarray(indices)
    if indices.size == 0:
        return pd.Categorical([], categories=[], ordered=True)
    lo, hi = int(indices.min()), int(indices.max())
    categories = [format_month(i) for i in range(lo, hi + 1)]
    codes = (indices - lo).astype(np.int16 if hi - lo >= 127 else np.int8)
    return pd.Categorical.from_codes(codes, categories=categories, ordered=True)


def categorical_to_index(values: pd.Series) -> np.ndarray:
    """Month indices from a column made by `month_categorical` (or any ``YYYY-MM`` column)."""
    if isinstance(values.dtype, pd.CategoricalDtype):
        lookup = np.array([parse_month(c) for c in values.cat.categories], dtype=np.int32)
        codes = values.cat.codes.to_numpy()
        return lookup[codes]
    index, bad = months_to_index(values)
    if bad.any() or np.isnan(index).any():
        raise UsageError("month column has values that are not YYYY-MM")
    return index.astype(np.int32)
