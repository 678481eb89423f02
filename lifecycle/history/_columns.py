"""How a frame is stored in the history and restored exactly: one SQL type per column, and
the pandas dtype (with the categories of a categorical) kept beside it."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..errors import InputError, UsageError

#: The storage key columns of the history's frame tables; no frame may use these names.
KEYS = ("run_month", "row_order")


@dataclass(frozen=True)
class Column:
    """One stored column: its name, pandas dtype, SQL type and categories."""

    name: str
    dtype: str
    sql_type: str
    categories: list[str] | None = None
    ordered: bool | None = None


def prepared(
    frame: pd.DataFrame, table: str, *, required: tuple[str, ...], unique: bool = True
) -> tuple[pd.DataFrame, list[Column]]:
    """The frame as it is stored (``customer_id`` as text, categoricals as text) and the
    description of its columns that restores it."""
    if not isinstance(frame, pd.DataFrame):
        raise UsageError(f"{table} must be a pandas DataFrame; got {type(frame).__name__}")
    names = list(frame.columns)
    bad_names = [n for n in names if not isinstance(n, str) or not n]
    if bad_names:
        raise UsageError(f"{table} has column names that are not text: {bad_names[:5]}")
    lowered = pd.Series([n.lower() for n in names])
    if lowered.duplicated().any():
        twins = sorted({n for n in names if (lowered == n.lower()).sum() > 1})
        raise UsageError(
            f"{table} has columns whose names differ only in case or repeat: {twins}; the "
            "history stores names without regard to case"
        )
    reserved = [n for n in names if n.lower() in KEYS]
    if reserved:
        raise UsageError(f"{table} has columns {reserved}, names the history keeps for itself")
    missing = [c for c in required if c not in names]
    if missing:
        raise UsageError(
            f"{table} lacks the columns {missing}; it has {names[:12]}"
            + (" …" if len(names) > 12 else "")
        )
    stored: dict[str, object] = {}
    columns: list[Column] = []
    for name in names:
        values, column = _stored_column(frame[name], table, name, is_id=name == "customer_id")
        stored[name] = values
        columns.append(column)
    out = pd.DataFrame(stored, index=pd.RangeIndex(len(frame)))
    ids = out["customer_id"]
    if ids.isna().any():
        where = np.flatnonzero(ids.isna().to_numpy())
        raise InputError(
            table=table, column="customer_id", problem="customer_id is blank",
            count=where.size, examples=[f"row {i}" for i in where],
        )  # fmt: skip
    if unique and ids.duplicated().any():
        twice = ids[ids.duplicated(keep=False)]
        raise InputError(
            table=table, column="customer_id", problem="customer_id repeats",
            count=int(twice.size), examples=twice.unique(),
            fix="give one row per customer",
        )  # fmt: skip
    return out, columns


def _stored_column(
    series: pd.Series, table: str, name: str, *, is_id: bool
) -> tuple[object, Column]:
    dtype = series.dtype
    if isinstance(dtype, pd.CategoricalDtype):
        categories = dtype.categories
        if not all(isinstance(c, str) for c in categories):
            raise _unsupported(series, table, name, "categories that are not text")
        text = series.astype(object).where(series.notna(), None)
        return text, Column(
            name, "category", "VARCHAR", [str(c) for c in categories], bool(dtype.ordered)
        )
    if isinstance(dtype, pd.StringDtype):
        text = series.astype(object).where(series.notna(), None)
        return text, Column(name, f"string[{dtype.storage}]", "VARCHAR")
    if pd.api.types.is_object_dtype(dtype):
        values = series.to_numpy()
        present = series.notna().to_numpy()
        not_text = [v for v in values[present] if not isinstance(v, str)]
        if not_text:
            raise _unsupported(series, table, name, "values that are not text", not_text)
        return series.where(series.notna(), None), Column(name, "object", "VARCHAR")
    if is_id:
        if pd.api.types.is_integer_dtype(dtype):
            text = series.astype(object).where(series.notna(), None)
            text = text.map(lambda v: v if v is None else str(int(v)))
            return text, Column(name, str(dtype), "VARCHAR")
        raise _unsupported(series, table, name, f"dtype {dtype}; ids must be text or integers")
    if pd.api.types.is_bool_dtype(dtype):
        return series, Column(name, str(dtype), "BOOLEAN")
    if pd.api.types.is_integer_dtype(dtype):
        if dtype == np.uint64 and len(series) and series.max() > np.iinfo(np.int64).max:
            raise _unsupported(series, table, name, "integers beyond the 64-bit signed range")
        return series, Column(name, str(dtype), "BIGINT")
    if pd.api.types.is_float_dtype(dtype):
        return series, Column(name, str(dtype), "DOUBLE")
    raise _unsupported(series, table, name, f"dtype {dtype}")


def _unsupported(
    series: pd.Series, table: str, name: str, what: str, examples: list | None = None
) -> InputError:
    return InputError(
        table=table,
        column=name,
        problem=f"column has {what}, which the score history cannot store",
        count=len(examples) if examples is not None else len(series),
        examples=examples if examples is not None else series.head(5).tolist(),
        fix="store numbers, booleans or text (plain or categorical)",
    )


def restored(raw: pd.DataFrame, columns: list[Column]) -> pd.DataFrame:
    """The frame as written, from the stored columns ``raw`` (in the order of ``columns``)."""
    out = {}
    for position, column in enumerate(columns):
        values = raw.iloc[:, position]
        if column.dtype == "category":
            out[column.name] = pd.Categorical(
                values.astype(object), categories=column.categories, ordered=bool(column.ordered)
            )
        elif column.dtype == "object":
            out[column.name] = values.astype(object)
        else:
            out[column.name] = values.astype(column.dtype)
    return pd.DataFrame(out, index=pd.RangeIndex(len(raw)))
