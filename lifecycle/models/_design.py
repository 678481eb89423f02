"""From panel features to a numeric design matrix: one covariate encoder for every family.

Built on scikit-learn's transformers: a `sklearn.compose.ColumnTransformer` joins a
`SimpleImputer` (median, with missing indicators) for the numeric columns, a `OneHotEncoder`
for the categorical ones and a `MissingIndicator` for categorical gaps. What scikit-learn has
no transformer for stays here: choosing the levels (the reference level, or the most frequent
ones), naming the columns (``<column>_missing``, ``<column>=<level>``), the order of the
columns (each input's columns together) and dropping constant or duplicated columns.
"""

from __future__ import annotations

import logging
from collections.abc import Sequence

import numpy as np
import pandas as pd
from sklearn.compose import ColumnTransformer
from sklearn.impute import MissingIndicator, SimpleImputer
from sklearn.preprocessing import OneHotEncoder

from ..errors import InputError, UsageError

log = logging.getLogger(__name__)

MISSING_SUFFIX = "_missing"
LEVEL_SEPARATOR = "="


class CovariateDesign:
    """Turns feature columns into a float design matrix, learning every rule from training rows.

    Rules, each learned by `fit` from the training rows and applied unchanged by `transform`:

    - a numeric (or boolean) column ``c`` becomes one float column; a missing value is replaced
      by the training median ``m_c`` (the median of the non-missing training values; 0 when
      there is none), and where the training rows had a missing value an indicator
      ``c_missing`` (1 where missing, else 0) is added, so that
      ``x = m_c + (x_observed − m_c)·(1 − c_missing)``;
    - a categorical (or text) column ``c`` becomes one 0/1 column ``c=level`` per kept level.
      With ``reference_level=True`` (the Cox family) the levels are those seen in training in
      the column's category order (sorted order for text) and the first is the reference: it
      gets no column, and a level never seen in training is coded as the reference level. With
      ``reference_level=False`` (the forest) every level gets a column; ``max_levels`` keeps
      only the most frequent training levels, in order of frequency, and any other level is
      coded as all zeros. A missing value codes as all zeros, and gets ``c_missing`` as above;
    - with ``drop_uninformative=True``, a column that is constant over the training rows, or an
      exact copy of an earlier column (e.g. the missing indicators of activity columns that
      are missing on the same rows), is dropped.

    Parameters
    ----------
    reference_level
        Code categorical columns against a reference level (needed by a model with an
        intercept-free linear predictor such as Cox's), or with one column per level.
    max_levels
        Largest number of levels a categorical column keeps (``None``: all).
    drop_uninformative
        Drop constant and duplicated columns.
    dtype
        Type of the matrix `transform` returns.

    Learned attributes
    ------------------
    columns_ : tuple of str
        The input feature columns.
    medians_ : dict
        Training median of each numeric column (0 where a column has no observed value).
    levels_ : dict
        Levels of each categorical column that may get a column (with ``reference_level``,
        the reference level first).
    missing_indicators_ : tuple of str
        Columns that had missing training values (each gets ``<column>_missing``).
    transformer_ : sklearn.compose.ColumnTransformer
        The fitted scikit-learn transformer behind the matrix.
    keep_ : numpy.ndarray of bool
        Which expanded columns are kept (not constant, not a copy, not left out by `drop`).
    names_ : tuple of str
        Names of the design columns `transform` returns, in order.
    """

    def __init__(
        self,
        *,
        reference_level: bool = True,
        max_levels: int | None = None,
        drop_uninformative: bool = True,
        dtype: type = np.float64,
    ) -> None:
        self.reference_level = reference_level
        self.max_levels = max_levels
        self.drop_uninformative = drop_uninformative
        self.dtype = dtype

    def fit(self, frame: pd.DataFrame, columns: Sequence[str]) -> CovariateDesign:
        """Learn medians, levels and which columns to keep from the training rows ``frame``."""
        self.fit_transform(frame, columns)
        return self

    def fit_transform(self, frame: pd.DataFrame, columns: Sequence[str]) -> np.ndarray:
        """`fit`, then the design matrix of the same rows (built once)."""
        self.columns_ = tuple(columns)
        self.levels_ = {}
        for column in self.columns_:
            values = _column(frame, column, "fit")
            if _is_categorical(values):
                self.levels_[column] = self._learn_levels(values)
        prepared = self._prepare(frame, "fit")
        numeric = [c for c in self.columns_ if c not in self.levels_]
        codes = self._kept_codes()
        encoded = [c for c in self.levels_ if codes[c].size]
        where = {c: j for j, c in enumerate(self.columns_)}
        gaps = [c for c in self.levels_ if np.isnan(prepared[:, where[c]]).any()]
        self.transformer_ = _transformer(numeric, encoded, gaps, codes, where)
        wide = self._wide(prepared, fit=True)
        self.medians_, with_gaps = _numeric_learned(self.transformer_, numeric)
        self.missing_indicators_ = tuple(c for c in self.columns_ if c in with_gaps or c in gaps)
        names, self.order_ = self._layout(numeric, encoded, gaps)
        matrix = _reordered(wide, self.order_)
        self.keep_ = np.ones(len(names), dtype=bool)
        if self.drop_uninformative:
            self.keep_ = _informative_columns([matrix[:, j] for j in range(len(names))])
        dropped = [n for n, k in zip(names, self.keep_, strict=True) if not k]
        if dropped:
            log.debug("design: dropped constant or duplicate columns %s", dropped)
        self.names_ = tuple(n for n, k in zip(names, self.keep_, strict=True) if k)
        if not self.keep_.all():
            matrix = np.asfortranarray(matrix[:, self.keep_])
        return matrix.astype(self.dtype, copy=False)

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
        """The design matrix ``(len(frame), len(names_))`` of ``frame`` (of type ``dtype``)."""
        if not hasattr(self, "names_"):
            raise UsageError("this CovariateDesign is not fitted yet; call fit(frame, columns)")
        prepared = self._prepare(frame, "transform")
        wide = self._wide(prepared, fit=False)
        return _reordered(wide, self.order_[self.keep_]).astype(self.dtype, copy=False)

    # -- steps --------------------------------------------------------------------------------
    def _learn_levels(self, values: pd.Series) -> tuple:
        if self.reference_level:
            levels = _observed_levels(values)
        else:
            levels = tuple(values.astype("object").value_counts(dropna=True).index)
        return levels if self.max_levels is None else levels[: self.max_levels]

    def _kept_codes(self) -> dict[str, np.ndarray]:
        """The level codes that get a column: all but the reference level's, or all."""
        first = 1 if self.reference_level else 0
        return {c: np.arange(first, len(v), dtype=np.float64) for c, v in self.levels_.items()}

    def _prepare(self, frame: pd.DataFrame, step: str) -> np.ndarray:
        """Numeric columns as float64 (NaN where missing), categorical ones as level codes
        (NaN where missing, −1 for a level not kept), for the scikit-learn transformers."""
        ids = (
            frame["customer_id"].to_numpy()
            if "customer_id" in frame.columns
            else np.arange(len(frame))
        )
        out = np.empty((len(frame), len(self.columns_)), order="F")
        for j, column in enumerate(self.columns_):
            values = _column(frame, column, step)
            if column in self.levels_:
                out[:, j] = self._codes(values, column, step)
            else:
                out[:, j] = _as_float(values, column, ids)
        return out

    def _codes(self, values: pd.Series, column: str, step: str) -> np.ndarray:
        levels = self.levels_[column]
        missing = values.isna().to_numpy()
        codes = _level_codes(values, missing, levels).astype(np.float64)
        unseen = (codes < 0) & ~missing
        if self.reference_level:
            if step == "transform" and unseen.any():
                log.info(
                    "design: %d rows of '%s' hold levels not seen in training, e.g. %s; "
                    "coded as the reference level %r",
                    int(unseen.sum()),
                    column,
                    values[unseen].iloc[0],
                    levels[0] if levels else None,
                )
            codes[unseen] = 0
        codes[missing] = np.nan
        return codes

    def _wide(self, prepared: np.ndarray, *, fit: bool) -> np.ndarray:
        if self.transformer_ is None:
            return np.empty((len(prepared), 0))
        if fit:
            return self.transformer_.fit_transform(prepared)
        return self.transformer_.transform(prepared)

    def _layout(self, numeric: list[str], encoded: list[str], gaps: list[str]):
        """The design's column names, each input's columns together in input order, and where
        each one is in the transformer's output (numbers, their indicators, levels, gaps)."""
        wide: dict[tuple[str, str], int] = {}
        for column in numeric:
            wide[(column, column)] = len(wide)
        for column in numeric:
            if column in self.missing_indicators_:
                wide[(column, column + MISSING_SUFFIX)] = len(wide)
        for column in encoded:
            for code in self._kept_codes()[column]:
                name = f"{column}{LEVEL_SEPARATOR}{self.levels_[column][int(code)]}"
                wide[(column, name)] = len(wide)
        for column in gaps:
            wide[(column, column + MISSING_SUFFIX)] = len(wide)
        names, order = [], []
        for column in self.columns_:
            for (owner, name), position in wide.items():
                if owner == column:
                    names.append(name)
                    order.append(position)
        return names, np.asarray(order, dtype=np.intp)


def _transformer(
    numeric: list[str],
    encoded: list[str],
    gaps: list[str],
    codes: dict[str, np.ndarray],
    where: dict[str, int],
) -> ColumnTransformer | None:
    """scikit-learn's transformers: median imputation (`observed_median`) with indicators of
    the columns that had gaps, one-hot coding of the kept level codes (any other code: all
    zeros), and indicators of categorical gaps."""
    parts = []
    if numeric:
        imputer = SimpleImputer(
            strategy=observed_median, add_indicator=True, keep_empty_features=True
        )
        parts.append(("numbers", imputer, [where[c] for c in numeric]))
    if encoded:
        categories = [codes[c] for c in encoded]
        onehot = OneHotEncoder(categories=categories, handle_unknown="ignore", sparse_output=False)
        parts.append(("levels", onehot, [where[c] for c in encoded]))
    if gaps:
        parts.append(("gaps", MissingIndicator(features="missing-only"), [where[c] for c in gaps]))
    if not parts:
        return None
    return ColumnTransformer(parts, sparse_threshold=0, verbose_feature_names_out=False)


def observed_median(values: np.ndarray) -> float:
    """The median of a column's observed values, 0 when there is none: the imputer's statistic
    (scikit-learn's own ``strategy="median"`` sorts a masked array, several times slower)."""
    return float(np.median(values)) if values.size else 0.0


def _numeric_learned(transformer: ColumnTransformer | None, numeric: list[str]):
    """Training medians of the numeric columns, and those that had gaps."""
    if not numeric:
        return {}, set()
    imputer = transformer.named_transformers_["numbers"]
    medians = {c: float(m) for c, m in zip(numeric, imputer.statistics_, strict=True)}
    with_gaps = {numeric[j] for j in imputer.indicator_.features_}
    return medians, with_gaps


def _reordered(wide: np.ndarray, order: np.ndarray) -> np.ndarray:
    """The columns ``order`` of ``wide`` as one column-major float64 matrix."""
    return np.asfortranarray(wide[:, order], dtype=np.float64)


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


def _as_float(values: pd.Series, column: str, ids: np.ndarray) -> np.ndarray:
    if not (pd.api.types.is_numeric_dtype(values.dtype) or pd.api.types.is_bool_dtype(values)):
        raise InputError(
            table="panel",
            column=column,
            problem=f"has dtype {values.dtype}; a feature must be numeric, boolean or categorical",
            count=len(values),
            fix="convert the column, or leave it out of the panel's features",
        )
    return finite_numbers(values, column, ids)


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
