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


def months(values: pd.Series, fmt: str | None = None) -> tuple[np.ndarray, np.ndarray]:
    """`months_to_index`, parsing each distinct text once (a month column has few)."""
    if not is_text(values):
        return months_to_index(values, fmt=fmt)
    codes, uniques = pd.factorize(values)
    parsed, bad = months_to_index(
        pd.Series(np.asarray(uniques, dtype=object), dtype=object), fmt=fmt
    )
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


# Flag words, read in any case: 1/0, true/false, yes/no, y/n.
FLAG_WORDS = {"1": 1.0, "0": 0.0, "true": 1.0, "false": 0.0, "yes": 1.0, "no": 0.0}
FLAG_WORDS |= {"y": 1.0, "n": 0.0, "1.0": 1.0, "0.0": 0.0}


def flags(values: pd.Series) -> np.ndarray | None:
    """A flag column as float64 1.0 / 0.0 (NaN where blank), or ``None`` if some value is not
    a flag word (`FLAG_WORDS`, any case) nor a blank."""
    if pd.api.types.is_bool_dtype(values.dtype):
        return values.to_numpy(dtype=np.float64, na_value=np.nan)
    if not is_text(values):
        out = values.to_numpy(dtype=np.float64, na_value=np.nan)
        return out if np.isin(out[~np.isnan(out)], (0.0, 1.0)).all() else None
    codes, uniques = pd.factorize(values)
    words = [str(u).strip().lower() for u in uniques]
    if any(w and w not in FLAG_WORDS for w in words):
        return None
    lookup = np.array([FLAG_WORDS.get(w, np.nan) for w in words] + [np.nan], dtype=np.float64)
    return lookup[codes]


def static(values: pd.Series) -> pd.Series:
    """A static attribute: flags (0/1, true/false, yes/no, Y/N, any case) without blanks as
    int8 0/1, numbers as float64, other text as string."""
    if isinstance(values.dtype, pd.CategoricalDtype) or pd.api.types.is_datetime64_any_dtype(
        values.dtype
    ):
        return values
    flag = flags(values) if is_text(values) else None
    if flag is not None and len(flag) and not np.isnan(flag).any():
        return pd.Series(flag.astype(np.int8), index=values.index, name=values.name)
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


def beyond(values: np.ndarray, limit: float) -> np.ndarray:
    """Mask of values with ``|value| > limit`` (NaN never), after one cheap pass when none is."""
    values = np.asarray(values, dtype=np.float64)
    if not values.size:
        return np.zeros(0, dtype=bool)
    if not (np.fmax.reduce(values) > limit or np.fmin.reduce(values) < -limit):
        return np.zeros(values.size, dtype=bool)
    return np.abs(values) > limit
