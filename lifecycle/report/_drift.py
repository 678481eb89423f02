"""Drift: how far this month's features and scores moved from last month's.

The measure is the population stability index (PSI) over bins fixed by the reference month.
The thresholds 0.1 (watch) and 0.25 (act) are common practice in credit and churn scoring,
not a statistical test: below 0.1 a shift is usually small, above 0.25 it usually matters.
"""

from __future__ import annotations

import logging
from collections.abc import Iterable, Sequence

import numpy as np
import pandas as pd

from .._layout import ID_COLUMNS, TERMINAL_CAUSES, UPTAKE_PREFIX
from ..errors import UsageError

log = logging.getLogger(__name__)

__all__ = ["ACT_PSI", "DRIFT_COLUMNS", "WATCH_PSI", "drift_table", "population_stability_index"]

WATCH_PSI = 0.1
"""PSI at or above which a variable is flagged ``watch`` (common practice)."""
ACT_PSI = 0.25
"""PSI at or above which a variable is flagged ``act`` (common practice)."""
SHARE_FLOOR = 1e-4
"""Shares below this are raised to it before the logarithm, so an empty bin gives a large but
finite term (common practice: a small constant in place of an empty bin's zero share)."""
CALENDAR_COLUMNS = ("season_sin", "season_cos")
"""Known calendar terms: they differ between months by design, so they are never drift."""
DRIFT_COLUMNS = ["variable", "kind", "psi", "bins", "status"]


def population_stability_index(
    expected: Sequence[object] | np.ndarray | pd.Series,
    actual: Sequence[object] | np.ndarray | pd.Series,
    bins: int = 10,
    *,
    floor: float = SHARE_FLOOR,
) -> float:
    """Population stability index of ``actual`` against the reference ``expected``.

    With ``e_i`` and ``a_i`` the shares of the reference and of the new values in bin i,

        PSI = Σ_i (a_i − e_i) · ln(a_i / e_i),

    which is the symmetrised Kullback–Leibler divergence ``KL(a‖e) + KL(e‖a)`` of the two
    binned distributions: 0 when the shares agree, larger the more they differ.

    Bins. Numeric values are cut near the reference's quantiles ``q_{1/b}, …, q_{(b−1)/b}``
    (``numpy.quantile``, linear interpolation): each cut is moved to the midpoint between the
    two distinct reference values around its quantile (the value at the quantile, if there is
    one, stays below the cut), so a cut never falls on a value the reference holds and a
    small shift of a much-repeated value (an area's rate, shared by all its customers) does
    not move it into another bin. For continuous data this is the plain quantile cut. Equal
    cuts are merged, so a feature with many ties gets fewer bins (a 0/1 flag gets two); the
    first and last bins are open-ended. Text, categorical and boolean values get one bin per
    value. Missing values (NaN, None) get a bin of their own. A share below ``floor`` is
    raised to ``floor``.

    Parameters
    ----------
    expected
        Reference values (last month).
    actual
        New values (this month).
    bins
        Number of quantile bins for numeric values (≥ 2).
    floor
        Smallest share used in the formula (> 0).

    Returns
    -------
    float
    """
    psi, _ = _psi(expected, actual, bins, floor)
    return psi


def drift_table(
    reference: pd.DataFrame,
    current: pd.DataFrame,
    columns: Iterable[str] | None = None,
    *,
    kind: str = "feature",
    bins: int = 10,
    watch: float = WATCH_PSI,
    act: float = ACT_PSI,
) -> pd.DataFrame:
    """PSI of each column of ``current`` against ``reference``, flagged by threshold.

    Parameters
    ----------
    reference, current
        Last month's and this month's rows (e.g. two snapshots, or two months' scores).
    columns
        Columns to compare. Default: every column the two frames share except the ids
        (``customer_id``, ``month``, ``tenure_stop``), cause columns and the calendar terms
        ``season_sin``/``season_cos``, which differ between months by design.
    kind
        Label of the rows (``feature`` or ``score``).
    bins
        Quantile bins (see `population_stability_index`).
    watch, act
        Thresholds: ``status`` is ``act`` when PSI ≥ ``act``, ``watch`` when PSI ≥ ``watch``,
        else ``ok``.

    Returns
    -------
    pandas.DataFrame
        ``variable``, ``kind``, ``psi``, ``bins`` (bins used), ``status``; in column order.
    """
    if not 0 < watch <= act:
        raise UsageError(f"thresholds were watch={watch}, act={act}; need 0 < watch <= act")
    if columns is None:
        skip = {c for c in ID_COLUMNS if c != "tenure_start"} | set(TERMINAL_CAUSES)
        skip |= set(CALENDAR_COLUMNS)
        columns = [
            c
            for c in current.columns
            if c in reference.columns and c not in skip and not str(c).startswith(UPTAKE_PREFIX)
        ]
    else:
        columns = list(columns)
        missing = [c for c in columns if c not in reference or c not in current]
        if missing:
            raise UsageError(f"drift columns {missing} are not in both frames")
    rows = []
    for column in columns:
        psi, used = _psi(reference[column], current[column], bins, SHARE_FLOOR)
        status = "act" if psi >= act else "watch" if psi >= watch else "ok"
        rows.append(dict(variable=str(column), kind=kind, psi=psi, bins=used, status=status))
    out = pd.DataFrame(rows, columns=DRIFT_COLUMNS)
    flagged = out[out["status"] != "ok"]
    if len(flagged):
        log.info("drift: %d %s(s) flagged: %s", len(flagged), kind, ", ".join(flagged["variable"]))
    return out


# -- pieces ----------------------------------------------------------------------------------
def _psi(expected: object, actual: object, bins: int, floor: float) -> tuple[float, int]:
    if isinstance(bins, bool) or not isinstance(bins, int | np.integer) or bins < 2:
        raise UsageError(f"bins was {bins!r} but is expected to be a whole number >= 2")
    if not 0 < floor < 1:
        raise UsageError(f"floor was {floor!r} but is expected to lie in (0, 1)")
    e = pd.Series(np.asarray(expected, dtype=object) if _is_plain_list(expected) else expected)
    a = pd.Series(np.asarray(actual, dtype=object) if _is_plain_list(actual) else actual)
    if len(e) == 0 or len(a) == 0:
        raise UsageError("the population stability index needs values in both samples")
    e_codes, a_codes, n_bins = _bin_codes(e.reset_index(drop=True), a.reset_index(drop=True), bins)
    e_share = np.bincount(e_codes, minlength=n_bins) / len(e_codes)
    a_share = np.bincount(a_codes, minlength=n_bins) / len(a_codes)
    used = (e_share > 0) | (a_share > 0)
    e_share = np.maximum(e_share[used], floor)
    a_share = np.maximum(a_share[used], floor)
    return float(np.sum((a_share - e_share) * np.log(a_share / e_share))), int(used.sum())


def _is_plain_list(values: object) -> bool:
    return isinstance(values, list | tuple)


def _numeric(values: pd.Series) -> bool:
    if isinstance(values.dtype, pd.CategoricalDtype) or pd.api.types.is_bool_dtype(values):
        return False
    if pd.api.types.is_numeric_dtype(values):
        return True
    converted = pd.to_numeric(values, errors="coerce")
    return bool(converted.notna().sum() == values.notna().sum())


def _floats(values: pd.Series) -> np.ndarray:
    return pd.to_numeric(values, errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)


def _edges(reference: np.ndarray, bins: int) -> np.ndarray:
    """Cut points: each reference quantile moved to the midpoint between the two distinct
    reference values around it, so that the cut never falls on a value the data hold."""
    distinct = np.unique(reference)
    if distinct.size < 2:
        return np.array([])
    q = np.quantile(reference, np.arange(1, bins) / bins)
    above = np.searchsorted(distinct, q, side="left")  # distinct[above] >= q
    on_value = distinct[np.minimum(above, distinct.size - 1)] == q
    upper = np.where(on_value, above + 1, above)
    keep = upper < distinct.size
    upper = upper[keep]
    return np.unique((distinct[upper - 1] + distinct[upper]) / 2.0)


def _bin_codes(e: pd.Series, a: pd.Series, bins: int) -> tuple[np.ndarray, np.ndarray, int]:
    """Bin index of every value; the last bin holds the missing values."""
    if _numeric(e) and _numeric(a):
        ev = _floats(e)
        av = _floats(a)
        reference = ev[~np.isnan(ev)]
        edges = _edges(reference, bins)
        n = edges.size + 1

        def codes(v: np.ndarray) -> np.ndarray:
            out = np.searchsorted(edges, v, side="left")
            return np.where(np.isnan(v), n, out)

        return codes(ev), codes(av), n + 1
    e_text, a_text = e.astype("string"), a.astype("string")
    levels = sorted(set(e_text.dropna()) | set(a_text.dropna()))
    n = len(levels)

    def text_codes(v: pd.Series) -> np.ndarray:
        c = pd.Categorical(v, categories=levels).codes.astype(np.int64)
        return np.where(c < 0, n, c)

    return text_codes(e_text), text_codes(a_text), n + 1
