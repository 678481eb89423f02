"""Parsing input columns (text from CSV, or native types from Parquet and DuckDB) into
working types, marking what does not parse so that the checks can name it."""

from __future__ import annotations

import numpy as np
import pandas as pd

from .._months import months_to_index


def plain_index(frame: pd.DataFrame) -> pd.DataFrame:
    """The frame indexed 0..n−1 (as read), without copying its columns."""
    if isinstance(frame.index, pd.RangeIndex) and frame.index.start == 0 and frame.index.step == 1:
        return frame
    frame = frame.copy(deep=False)
    frame.index = pd.RangeIndex(len(frame))
    return frame


def is_text(values: pd.Series) -> bool:
    return values.dtype == object or isinstance(values.dtype, pd.StringDtype | pd.CategoricalDtype)


def blank(values: pd.Series) -> np.ndarray:
    """Missing values, and text that is empty or only spaces."""
    missing = values.isna().to_numpy(dtype=bool)
    if is_text(values) and not missing.all():
        codes, uniques = pd.factorize(values)
        empty = np.array([isinstance(u, str) and not u.strip() for u in uniques], dtype=bool)
        if empty.any():
            missing |= np.append(empty, False)[codes]
    return missing


def months(values: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """`months_to_index`, parsing each distinct text once (a month column has few)."""
    if not is_text(values):
        return months_to_index(values)
    codes, uniques = pd.factorize(values)
    parsed, bad = months_to_index(pd.Series(np.asarray(uniques, dtype=object), dtype=object))
    return np.append(parsed, np.nan)[codes], np.append(bad, False)[codes]


def numbers(values: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """``(float64 values, bad)``: ``bad`` marks values present but not a finite number."""
    if pd.api.types.is_bool_dtype(values.dtype):
        return values.to_numpy(dtype=np.float64, na_value=np.nan), np.zeros(len(values), bool)
    if pd.api.types.is_numeric_dtype(values.dtype):
        out = values.to_numpy(dtype=np.float64, na_value=np.nan)
        return out, np.isinf(out)
    codes, uniques = pd.factorize(values)
    if len(uniques) <= len(values) // 2:  # few distinct texts: parse each once
        parsed = to_float(pd.Series(np.asarray(uniques, dtype=object), dtype=object))
        out = np.append(parsed, np.nan)[codes]
    else:
        out = to_float(values if values.dtype == object else values.astype(object))
    bad = ~np.isfinite(out) & (codes >= 0)
    if bad.any():
        bad &= ~blank(values)
        out[~np.isfinite(out)] = np.nan
    return out, bad


def to_float(values: pd.Series) -> np.ndarray:
    return pd.to_numeric(values, errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)


def static(values: pd.Series) -> pd.Series:
    """A static attribute: 0/1 flags as int8, numbers as float64, other text as string."""
    if isinstance(values.dtype, pd.CategoricalDtype) or pd.api.types.is_datetime64_any_dtype(
        values.dtype
    ):
        return values
    numeric, bad = numbers(values)
    if bad.any() or (is_text(values) and np.isnan(numeric).all() and values.notna().any()):
        return values.astype("string")
    if not np.isnan(numeric).any() and np.isin(numeric, (0.0, 1.0)).all() and len(numeric):
        return pd.Series(numeric.astype(np.int8), index=values.index, name=values.name)
    return pd.Series(numeric, index=values.index, name=values.name)


def text_ids(values: pd.Series) -> pd.Series:
    """Ids as text, integral floats without ``.0``, for matching ids read with other types."""
    if pd.api.types.is_float_dtype(values.dtype):
        whole = values.notna() & (values % 1 == 0)
        text = values.astype(object).where(~whole, values[whole].astype("int64"))
        return text.astype(str).where(values.notna())
    return values.astype(str).where(values.notna())
