"""From panel features to a numeric design matrix (shared by the model families)."""

from __future__ import annotations

import logging
from collections.abc import Sequence

import numpy as np
import pandas as pd

from ..errors import InputError, UsageError

log = logging.getLogger(__name__)

MISSING_SUFFIX = "_missing"
LEVEL_SEPARATOR = "="


class CovariateDesign:
    """Turns feature columns into a float design matrix, learning every rule from training rows.

    Rules, each learned by `fit` from the training rows and applied unchanged by `transform`:

    - a numeric (or boolean) column ``c`` becomes one float column; a missing value is replaced
      by the training median ``m_c`` (the median of the non-missing training values), and where
      the training rows had a missing value an indicator ``c_missing`` (1 where missing, else 0)
      is added, so that ``x = m_c + (x_observed − m_c)·(1 − c_missing)``;
    - a categorical (or text) column ``c`` becomes one 0/1 column ``c=level`` per level seen in
      training except the first (the reference level: the first observed level in the
      column's category order, or in sorted order for text); a level never seen in training
      is coded as the reference level; a missing value gets ``c_missing`` as above;
    - a column that is constant over the training rows, or an exact copy of an earlier column
      (e.g. the missing indicators of activity columns that are missing on the same rows), is
      dropped.

    Learned attributes
    ------------------
    columns_ : tuple of str
        The input feature columns.
    medians_ : dict
        Training median of each numeric column (0 where a column has no observed value).
    levels_ : dict
        Observed levels of each categorical column, reference level first.
    missing_indicators_ : tuple of str
        Columns that had missing training values (each gets ``<column>_missing``).
    keep_ : numpy.ndarray of bool
        Which expanded columns are kept (not constant, not a copy, not left out by `drop`).
    names_ : tuple of str
        Names of the design columns `transform` returns, in order.
    """

    def fit(self, frame: pd.DataFrame, columns: Sequence[str]) -> CovariateDesign:
        """Learn medians, levels and which columns to keep from the training rows ``frame``."""
        self._learn(frame, columns)
        return self

    def fit_transform(self, frame: pd.DataFrame, columns: Sequence[str]) -> np.ndarray:
        """`fit`, then the design matrix of the same rows (built once)."""
        blocks = self._learn(frame, columns)
        return _stack(blocks, self.keep_, len(frame))

    def _learn(self, frame: pd.DataFrame, columns: Sequence[str]) -> list[np.ndarray]:
        self.columns_ = tuple(columns)
        self.medians_: dict[str, float] = {}
        self.levels_: dict[str, tuple] = {}
        missing: list[str] = []
        for column in self.columns_:
            values = _column(frame, column, "fit")
            if _is_categorical(values):
                self.levels_[column] = _observed_levels(values)
            else:
                numbers = _as_float(values, column)
                observed = numbers[~np.isnan(numbers)]
                self.medians_[column] = float(np.median(observed)) if observed.size else 0.0
            if values.isna().any():
                missing.append(column)
        self.missing_indicators_ = tuple(missing)
        names, blocks = self._expand(frame)
        keep = _informative_columns(blocks)
        dropped = [n for n, k in zip(names, keep, strict=True) if not k]
        if dropped:
            log.debug("design: dropped constant or duplicate columns %s", dropped)
        self.keep_ = keep
        self.names_ = tuple(n for n, k in zip(names, keep, strict=True) if k)
        return blocks

    def drop(self, names: Sequence[str]) -> CovariateDesign:
        """Leave the design columns ``names`` out of `transform` from now on (a family may find
        columns it cannot use, e.g. ones that carry no information for its likelihood)."""
        unknown = [n for n in names if n not in self.names_]
        if unknown:
            raise UsageError(f"CovariateDesign.drop: {unknown} are not design columns")
        positions = np.flatnonzero(self.keep_)
        for j, name in zip(positions, self.names_, strict=True):
            if name in names:
                self.keep_[j] = False
        self.names_ = tuple(n for n in self.names_ if n not in names)
        return self

    def transform(self, frame: pd.DataFrame) -> np.ndarray:
        """The design matrix ``(len(frame), len(names_))`` of ``frame`` (float64)."""
        if not hasattr(self, "names_"):
            raise UsageError("this CovariateDesign is not fitted yet; call fit(frame, columns)")
        _, blocks = self._expand(frame)
        return _stack(blocks, self.keep_, len(frame))

    # -- helpers ------------------------------------------------------------------------------
    def _expand(self, frame: pd.DataFrame) -> tuple[list[str], list[np.ndarray]]:
        names: list[str] = []
        blocks: list[np.ndarray] = []
        for column in self.columns_:
            values = _column(frame, column, "transform")
            missing = values.isna().to_numpy()
            if column in self.levels_:
                levels = self.levels_[column]
                codes = _level_codes(values, missing, levels)
                unseen = (codes < 0) & ~missing
                if unseen.any():
                    log.info(
                        "design: %d rows of '%s' hold levels not seen in training, e.g. %s; "
                        "coded as the reference level %r",
                        int(unseen.sum()),
                        column,
                        values[unseen].iloc[0],
                        levels[0],
                    )
                for j, level in enumerate(levels[1:], start=1):
                    names.append(f"{column}{LEVEL_SEPARATOR}{level}")
                    blocks.append((codes == j).astype(np.float64))
            else:
                numbers = _as_float(values, column)
                names.append(column)
                blocks.append(np.where(missing, self.medians_[column], numbers))
            if column in self.missing_indicators_:
                names.append(column + MISSING_SUFFIX)
                blocks.append(missing.astype(np.float64))
        return names, blocks


def _stack(blocks: list[np.ndarray], keep: np.ndarray, n: int) -> np.ndarray:
    """The kept blocks as one column-major float64 matrix ``(n, keep.sum())``."""
    out = np.empty((n, int(keep.sum())), dtype=np.float64, order="F")
    for j, block in enumerate(b for b, k in zip(blocks, keep, strict=True) if k):
        out[:, j] = block
    return out


def _column(frame: pd.DataFrame, column: str, step: str) -> pd.Series:
    if column not in frame.columns:
        raise UsageError(f"CovariateDesign.{step}: the frame lacks the feature column '{column}'")
    return frame[column]


def _is_categorical(values: pd.Series) -> bool:
    return isinstance(values.dtype, pd.CategoricalDtype) or (
        values.dtype == object or pd.api.types.is_string_dtype(values.dtype)
    )


def _level_codes(values: pd.Series, missing: np.ndarray, levels: tuple) -> np.ndarray:
    """Position of each value in ``levels`` (−1 for missing or unseen values)."""
    if isinstance(values.dtype, pd.CategoricalDtype):
        keys = values.astype(object).to_numpy()
    else:
        keys = np.where(missing, None, values.astype(str).to_numpy())
    return pd.Categorical(keys, categories=list(levels)).codes


def _observed_levels(values: pd.Series) -> tuple:
    present = values.dropna()
    if isinstance(values.dtype, pd.CategoricalDtype):
        seen = set(present.unique().tolist())
        return tuple(c for c in values.cat.categories if c in seen)
    return tuple(sorted(present.astype(str).unique().tolist()))


def _as_float(values: pd.Series, column: str) -> np.ndarray:
    if not (pd.api.types.is_numeric_dtype(values.dtype) or pd.api.types.is_bool_dtype(values)):
        raise InputError(
            table="panel",
            column=column,
            problem=f"has dtype {values.dtype}; a feature must be numeric, boolean or categorical",
            count=len(values),
            fix="convert the column, or leave it out of the panel's features",
        )
    return finite_numbers(values, column, np.arange(len(values)))


def finite_numbers(values: pd.Series, column: str, ids: np.ndarray) -> np.ndarray:
    """``values`` as float64 (NaN where missing), or `InputError` naming the rows (by ``ids``)
    that hold an infinite value."""
    numbers = values.to_numpy(dtype=np.float64, na_value=np.nan)
    infinite = np.isinf(numbers)
    if infinite.any():
        raise InputError(
            table="panel",
            column=column,
            problem="holds infinite values",
            count=int(infinite.sum()),
            examples=np.asarray(ids)[infinite],
            fix="replace them by a finite value or by a missing value",
        )
    return numbers


def _informative_columns(blocks: list[np.ndarray]) -> np.ndarray:
    """Mask of columns that vary over the rows and are not exact copies of an earlier column."""
    keep = np.zeros(len(blocks), dtype=bool)
    seen: dict[int, list[int]] = {}
    for j, col in enumerate(blocks):
        if col.size == 0 or col.min() == col.max():
            continue
        key = hash(np.ascontiguousarray(col).tobytes())
        if any(np.array_equal(blocks[i], col) for i in seen.get(key, [])):
            continue
        seen.setdefault(key, []).append(j)
        keep[j] = True
    return keep
