"""Checking the input tables against the data contract, and parsing them into `Tables`.

Every problem found becomes one `InputError`: the first one, in this order: tables that are
missing, columns that are missing, then the values of ``customers``, ``uptakes``, ``activity``,
``campaigns`` and ``areas``, each table's checks in the order a reader would mend them (ids,
months, the dates against each other, then the other columns). The error names the table, the
column, how many rows are affected and up to five example customer ids (or ``row N``, the Nth
data row counting from 1, where a row has no id).

Everything is vectorised, so that a million customers and tens of millions of activity rows
are checked in seconds: months are parsed once per distinct value, ids are looked up with
`pandas.Index.get_indexer`.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from .._months import YEAR_MAX, YEAR_MIN, format_month
from ..config import REASONS, Config
from ..errors import InputError, UsageError, cut_text
from ._areas import check_areas, check_overlaps
from ._coordinates import coordinate_columns, premise_coordinates
from ._flags import FLAG_COLUMNS, check_flag, own_flag_words, plan_flag_columns
from ._parse import (
    beyond,
    blank,
    months,
    numbers,
    plain_index,
    static,
    text_ids,
)
from ._read import read_raw_tables
from ._report import Report, values_of
from ._tables import RawTables, Tables

__all__ = ["check_tables", "load_tables"]

log = logging.getLogger(__name__)

REQUIRED_TABLES = ("customers", "uptakes", "areas")
REQUIRED_COLUMNS = {
    "customers": ("customer_id", "start_month", "end_month", "end_reason", "monthly_margin"),
    "uptakes": ("customer_id", "product", "month"),
    "activity": ("customer_id", "month"),
    "campaigns": ("customer_id", "month", "offer", "arm"),
    "areas": ("area_id", "geometry"),
}
ARMS = ("offered", "held_out")
_COORDINATES = ("x", "y", "lon", "lat")
_RESERVED = ("start", "end")  # names of parsed customer columns
_POLYGONS = ("Polygon", "MultiPolygon")


def load_tables(source: str | Path, config: Config | None = None) -> Tables:
    """Read the input tables from ``source`` and check them: `read_raw_tables` then `check_tables`.

    Parameters
    ----------
    source
        A folder of CSV / Parquet files (areas as GeoPackage, GeoJSON or GeoParquet) or a DuckDB
        database file.
    config
        Settings; ``None`` gives the defaults.

    Raises
    ------
    InputError
        At the first table, column or value that breaks the data contract.
    UsageError
        When ``source`` does not exist or a setting (a CRS, a reason mapping) is malformed.
    """
    config = config or Config()
    return check_tables(read_raw_tables(source, config), config)


def check_tables(raw: RawTables, config: Config) -> Tables:
    """Check tables as read against the data contract and parse them into working types.

    Months become integer indices ``m = 12·year + (month − 1)``. A customer is active in the
    months ``start ≤ m ≤ end`` (no upper bound while ``end`` is blank); activity rows and uptakes
    must fall in those months. No month of any table may be later than the extract month
    ``config.extract_month_index()``; when that is not set, the extract month is inferred: the
    last month in which any customer start or end, uptake, activity or campaign row is dated
    (logged). Months may be ``YYYY-MM``, ``YYYY-MM-DD``, an ISO date-time or a ``[formats]``
    format; a date that does not exist or lies outside the years 1900..2200 is refused. End
    reasons are mapped through ``config.reasons`` onto ``churn``, ``move_out`` and ``other``;
    campaign offers and arms through ``[campaigns]``, and when ``[[offers]]`` are configured
    every campaign offer must be one of them. Other customer columns are the static
    attributes: flags (1/0, true/false, yes/no, Y/N in any case) without blanks become int8,
    numbers (or text that all reads as numbers) float64, other text ``string``. The decision
    flags ``do_not_contact`` and ``hardship``, when given, must be flags on every row. Numbers
    must be finite and not absurd (``MONEY_MAX`` for the margin, ``VALUE_MAX`` otherwise).
    Areas are checked by `check_areas` and `check_overlaps`. Errors name the input's own
    column beside ours where ``[columns.<table>]`` maps it.

    Returns
    -------
    Tables
        Typed as its docstring says; customers keep their input order.

    Raises
    ------
    InputError
        At the first problem found (see the module docstring for the order).
    UsageError
        When ``config`` holds a CRS pyproj does not know or a reason mapped onto no cause.
    """
    try:
        return _check_all(raw, config)
    except InputError as exc:
        raise exc.with_source_names(config.columns) from None


def _check_all(raw: RawTables, config: Config) -> Tables:
    configured = config.extract_month_index()
    extract = float("inf") if configured is None else configured  # inf: checked after parsing
    _check_presence(raw)
    for name in ("customers", "uptakes", "activity", "campaigns", "areas"):
        frame = getattr(raw, name)
        if frame is not None:
            _check_columns(name, frame)
    x_name, y_name, premise_crs = coordinate_columns(raw.customers, config)

    customers, static_columns = _check_customers(raw.customers, config, extract, x_name, y_name)
    known = _Customers.of(customers)
    uptakes = _check_uptakes(raw.uptakes, known, extract, config)
    activity, activity_columns = _check_activity(raw.activity, known, extract, config)
    campaigns = _check_campaigns(raw.campaigns, known, extract, config)
    areas = check_areas(raw.areas, config, raw.sources.get("areas"))
    check_overlaps(areas, customers, premise_crs, config)
    if configured is None:
        extract = _inferred_extract(customers, uptakes, activity, campaigns)
    products = sorted(pd.unique(uptakes["product"]).tolist())
    log.info(
        "checked %d customers, %d uptakes of %d products, %d activity rows, %d campaign rows, "
        "%d areas; extract month %s",
        len(customers), len(uptakes), len(products), len(activity), len(campaigns),
        len(areas), format_month(extract),
    )  # fmt: skip
    return Tables(
        customers=customers,
        uptakes=uptakes,
        areas=areas,
        activity=activity,
        campaigns=campaigns,
        premise_crs=premise_crs,
        extract_month=int(extract),
        extract_inferred=configured is None,
        products=products,
        static_columns=static_columns,
        activity_columns=activity_columns,
    )


# --- tables and columns ------------------------------------------------------------------------


def _check_presence(raw: RawTables) -> None:
    for name in REQUIRED_TABLES:
        if getattr(raw, name) is None:
            files = (
                "areas.gpkg, areas.geojson or areas.parquet"
                if name == "areas"
                else (f"{name}.csv or {name}.parquet")
            )
            raise InputError(
                table=name,
                column=None,
                problem="is missing; it is required",
                fix=f"Add {files} to the data folder (or a DuckDB table named {name}), "
                f"or point [tables] {name} at it",
            )


def _check_columns(table: str, frame: pd.DataFrame) -> None:
    columns = set(frame.columns)
    if table == "areas":
        try:
            columns.add(frame.geometry.name)
            columns.add("geometry")
        except AttributeError:  # a plain DataFrame, or a GeoDataFrame without geometry
            pass
    for column in REQUIRED_COLUMNS[table]:
        if column not in columns:
            raise InputError(
                table=table,
                column=column,
                problem=f"is missing; the columns are {sorted(map(str, frame.columns))}",
                fix=f'Rename your column, or map it in [columns.{table}] {column} = "yours"',
            )
    if table == "customers":
        for column in _RESERVED:
            if column in columns:
                raise InputError(
                    table=table,
                    column=column,
                    problem="has a name the checked table uses for the parsed start/end month",
                    fix="Rename it",
                )


@dataclass(frozen=True)
class _Customers:
    """The checked customers, for looking up the rows of the other tables."""

    ids: pd.Series
    index: pd.Index
    start: np.ndarray  # int64
    end: np.ndarray  # float64, +inf while active

    @classmethod
    def of(cls, customers: pd.DataFrame) -> _Customers:
        end = customers["end"].to_numpy(dtype=np.float64)
        return cls(
            ids=customers["customer_id"],
            index=pd.Index(customers["customer_id"]),
            start=customers["start"].to_numpy(dtype=np.int64),
            end=np.where(np.isnan(end), np.inf, end),
        )

    def positions(self, ids: pd.Series) -> tuple[np.ndarray, pd.Series]:
        """Row of each id in the customers table (−1 if unknown), and the ids in its dtype.

        Ids stored with another type (text in one table, integers in another) are matched by
        their text.
        """
        if isinstance(ids.dtype, pd.CategoricalDtype):
            lookup = np.append(self.index.get_indexer(ids.cat.categories), -1)
            pos = lookup[ids.cat.codes.to_numpy()]
        else:
            pos = self.index.get_indexer(ids)
        if (pos < 0).any() and ids.dtype != self.ids.dtype:
            text = pd.Index(text_ids(self.ids))
            if text.is_unique:
                alt = text.get_indexer(text_ids(ids))
                if (alt >= 0).sum() > (pos >= 0).sum():
                    pos = alt
        if ids.dtype != self.ids.dtype and (pos >= 0).all():
            ids = pd.Series(self.ids.to_numpy()[pos], name=ids.name)
        return pos, ids


# --- customers ---------------------------------------------------------------------------------


def _check_customers(
    raw: pd.DataFrame, config: Config, extract: int, x_name: str, y_name: str
) -> tuple[pd.DataFrame, list[str]]:
    raw = plain_index(raw)
    if raw.empty:
        raise InputError(
            table="customers", column=None, problem="has no rows", fix="Export the customers"
        )
    report = Report("customers", raw["customer_id"])
    ids = raw["customer_id"]
    report.fail("customer_id", "is blank", blank(ids))
    report.fail("customer_id", "is not unique", ids.duplicated(keep=False).to_numpy())

    start, bad_start = months(raw["start_month"], config.month_format("customers", "start_month"))
    end, bad_end = months(raw["end_month"], config.month_format("customers", "end_month"))
    report.fail("start_month", _not_month(raw["start_month"], bad_start), bad_start, _MONTH_FIX)
    report.fail("start_month", "is blank; every customer needs a start month", np.isnan(start))
    report.fail("end_month", _not_month(raw["end_month"], bad_end), bad_end, _MONTH_FIX)
    report.fail("start_month", _future(extract), start > extract, _FUTURE_FIX)
    report.fail("end_month", _future(extract), end > extract, _FUTURE_FIX)
    report.fail("end_month", "is before start_month", end < start)

    reason = _blank_reasons(_end_reasons(raw["end_reason"], config, report), end, config)
    report.fail(
        "end_month",
        "is blank but end_reason is given",
        np.isnan(end) & ~np.asarray(reason.isna()),
        "Give the month the customer left, or blank the reason if the customer is active",
    )
    report.fail(
        "end_reason",
        "is blank but end_month is given",
        ~np.isnan(end) & np.asarray(reason.isna()),
        f"Give the reason ({', '.join(REASONS)}, or your code mapped in [reasons]), or name "
        'the reason of every such customer in [data] blank_end_reason (e.g. "other")',
    )

    margin, bad = numbers(raw["monthly_margin"])
    report.fail("monthly_margin", "is not a number", bad)
    report.fail("monthly_margin", "is blank", np.isnan(margin))
    report.fail("monthly_margin", "is negative", margin < 0)
    report.fail(
        "monthly_margin",
        f"is absurdly large (more than {MONEY_MAX:g} a month)",
        margin > MONEY_MAX,
        "Check the unit and the export of the margin",
    )

    x, y = premise_coordinates(raw, x_name, y_name, report)
    out = pd.DataFrame(
        {
            "customer_id": ids,
            "start": start.astype(np.int32),
            "end": end,
            "end_reason": reason,
            "x": x,
            "y": y,
            "monthly_margin": margin,
        }
    )
    skip = set(REQUIRED_COLUMNS["customers"]) | set(_COORDINATES)
    static_columns = [c for c in raw.columns if c not in skip]
    plan_flags = plan_flag_columns(config)
    raw = own_flag_words(raw, config, [*FLAG_COLUMNS, *plan_flags])
    for name in static_columns:
        if name in FLAG_COLUMNS:
            check_flag(raw[name], name, report)
        elif name in plan_flags:
            check_flag(raw[name], name, report, plan_flags[name])
        out[name] = static(raw[name])
        if pd.api.types.is_float_dtype(out[name].dtype):
            values = out[name].to_numpy()
            report.fail(
                name, f"has absurd values (|value| > {VALUE_MAX:g})",
                beyond(values, VALUE_MAX), "Check the unit and the export",
            )  # fmt: skip
    return out, static_columns


def _future(extract: float) -> str:
    return "" if np.isinf(extract) else f"is later than the extract month {format_month(extract)}"


def _inferred_extract(*frames: pd.DataFrame) -> int:
    """The last month in which any row is dated: customer starts and ends, uptakes, activity
    and campaign months."""
    customers, *others = frames
    latest = [customers["start"].max(), np.nanmax(customers["end"].to_numpy(), initial=-1)]
    latest += [int(f["month"].max()) for f in others if len(f)]
    extract = int(max(latest))
    log.info(
        "extract month %s inferred from the data (the last month in which a row is dated); "
        "set [data] extract_month to fix it",
        format_month(extract),
    )
    return extract


_FUTURE_FIX = "Set [data] extract_month to the last month the data covers, or remove the later rows"


def _not_month(values: pd.Series, bad: np.ndarray) -> str:
    return (
        f"has values that are not YYYY-MM months (nor YYYY-MM-DD or an ISO date-time; a real "
        f"date in the years {YEAR_MIN}..{YEAR_MAX}), e.g. {values_of(values, bad, 3)}"
    )


_MONTH_FIX = (
    "Write the dates as YYYY-MM or YYYY-MM-DD, or give their format in [formats], e.g. "
    'customers = "%d/%m/%Y"'
)
MONEY_MAX = 1e9  # a monthly margin above this is refused as absurd
VALUE_MAX = 1e15  # any other number above this in magnitude is refused as absurd


def _end_reasons(values: pd.Series, config: Config, report: Report) -> pd.Categorical:
    """End-reason codes mapped onto ``churn`` / ``move_out`` / ``other``."""
    wrong = {k: v for k, v in config.reasons.items() if v not in REASONS}
    if wrong:
        raise UsageError(f"[reasons] maps onto {wrong}; each must be one of {list(REASONS)}")
    mapping = {r: r for r in REASONS} | {str(k): v for k, v in config.reasons.items()}
    codes, uniques = pd.factorize(values)
    # the codes' own dtype, so that whole numbers stored as floats (11.0: a number column with
    # blanks, as pandas writes it) read as the codes 11 mapped in [reasons]
    texts = [str(t).strip() for t in text_ids(pd.Series(np.asarray(uniques)))]
    mapped = np.array([mapping.get(t, "" if t else None) for t in texts] + [None], dtype=object)
    unknown = np.array([m == "" for m in mapped], dtype=bool)
    flagged = unknown[codes]
    odd = sorted({t for t, u in zip(texts, unknown, strict=False) if u})[:5]
    report.fail(
        "end_reason",
        f"has unknown codes {[cut_text(t) for t in odd]}; known are {sorted(mapping)}",
        flagged,
        'Map each code onto churn, move_out or other in [reasons], e.g. CODE = "churn"',
    )
    return pd.Categorical(mapped[codes], categories=list(REASONS))


def _blank_reasons(reason: pd.Categorical, end: np.ndarray, config: Config) -> pd.Categorical:
    """Customers who left with a blank reason, given ``[data] blank_end_reason`` (logged)."""
    from ..config import setting

    fill = setting(config, "data.blank_end_reason")
    missing = ~np.isnan(end) & np.asarray(reason.isna())
    if fill is None or not missing.any():
        return reason
    log.info(
        "%d customer(s) who left with a blank end reason count as %s ([data] blank_end_reason)",
        int(missing.sum()), fill,
    )  # fmt: skip
    out = reason.copy()
    out[missing] = fill
    return out


# --- uptakes, activity, campaigns --------------------------------------------------------------


def _rows_of_customers(
    table: str, raw: pd.DataFrame, known: _Customers, extract: float, config: Config
) -> tuple[np.ndarray, pd.Series, np.ndarray, Report]:
    """The checks every customer-month table shares: ids known, months present and not later
    than the extract month. Returns (customer rows, ids, month indices, report)."""
    report = Report(table, raw["customer_id"])
    # Only missing ids here: ids of spaces are not customers, reported just below.
    report.fail("customer_id", "is blank", raw["customer_id"].isna().to_numpy())
    pos, ids = known.positions(raw["customer_id"])
    report.fail(
        "customer_id",
        "is not in the customers table",
        pos < 0,
        "Remove these rows, or add the customers",
    )
    report = Report(table, ids)
    month, bad = months(raw["month"], config.month_format(table, "month"))
    report.fail("month", _not_month(raw["month"], bad), bad, _MONTH_FIX)
    report.fail("month", "is blank", np.isnan(month))
    report.fail("month", _future(extract), month > extract, _FUTURE_FIX)
    return pos, ids, month.astype(np.int32), report


def _duplicated(pos: np.ndarray, other: np.ndarray) -> np.ndarray:
    """Rows sharing their (customer, other) pair with another row; ``other`` ≥ 0 integers."""
    if len(pos) < 2:
        return np.zeros(len(pos), dtype=bool)
    lo = int(other.min())
    key = pos.astype(np.int64) * (int(other.max()) - lo + 1) + (other.astype(np.int64) - lo)
    if (np.diff(key) > 0).all():  # sorted input, the usual case: no hashing needed
        return np.zeros(len(pos), dtype=bool)
    return pd.Series(key).duplicated(keep=False).to_numpy()


def _empty(known: _Customers, text_columns: tuple[str, ...]) -> pd.DataFrame:
    """An absent optional table: ``customer_id`` (the customers' dtype), ``month``, text."""
    columns = {"customer_id": pd.Series([], dtype=known.ids.dtype), "month": np.array([], np.int32)}
    return pd.DataFrame(columns | {c: pd.Series([], dtype=object) for c in text_columns})


def _check_uptakes(
    raw: pd.DataFrame, known: _Customers, extract: float, config: Config
) -> pd.DataFrame:
    raw = plain_index(raw)
    pos, ids, month, report = _rows_of_customers("uptakes", raw, known, extract, config)
    report.fail("product", "is blank", blank(raw["product"]))
    product = raw["product"].astype(str)
    names, kinds = pd.factorize(product)
    wrong = np.append([not str(k).isidentifier() for k in kinds], False)[names]
    report.fail(
        "product",
        f"has names that cannot be column names, e.g. {values_of(product, wrong, 3)}; a product "
        "name becomes part of column names (uptake_<product>, holds_<product>)",
        wrong,
        "Use letters, digits and _ only, not starting with a digit (e.g. fibre_plus)",
    )
    codes, _ = pd.factorize(product)
    report.fail(
        "product",
        "has more than one row for the same customer and product; give the first month only",
        _duplicated(pos, codes),
    )
    report.fail("month", "is before the customer's start_month", month < known.start[pos])
    report.fail("month", "is after the customer's end_month", month > known.end[pos])
    return pd.DataFrame({"customer_id": ids, "product": product.astype(object), "month": month})


def _check_activity(
    raw: pd.DataFrame | None, known: _Customers, extract: float, config: Config
) -> tuple[pd.DataFrame, list[str]]:
    if raw is None:
        return _empty(known, ()), []
    raw = plain_index(raw)
    pos, ids, month, report = _rows_of_customers("activity", raw, known, extract, config)
    report.fail(
        "month",
        "has more than one row for the same customer and month",
        _duplicated(pos, month),
    )
    outside = (month < known.start[pos]) | (month > known.end[pos])
    report.fail(
        "month",
        "is outside the customer's active months (start_month..end_month)",
        outside,
        "Remove activity from before the start or after the end",
    )
    columns = [c for c in raw.columns if c not in ("customer_id", "month")]
    data: dict[str, object] = {"customer_id": ids, "month": month}
    for name in columns:
        values, bad = numbers(raw[name])
        if bad.any():
            report.fail(
                name, f"is not a number, e.g. {values_of(raw[name], bad, 3)}", bad,
                "Activity columns must be numeric; blank means unknown",
            )  # fmt: skip
        report.fail(
            name, f"has absurd values (|value| > {VALUE_MAX:g})",
            beyond(values, VALUE_MAX), "Check the unit and the export",
        )  # fmt: skip
        data[name] = values
    return pd.DataFrame(data, copy=False), list(columns)


def _check_campaigns(
    raw: pd.DataFrame | None, known: _Customers, extract: float, config: Config
) -> pd.DataFrame:
    """Campaign rows, with the export's offer codes and arm labels mapped through
    ``[campaigns] offers`` and ``arms``. When ``[[offers]]`` are configured, every offer must
    be one of them (after the mapping): an unknown code would otherwise be ignored in silence."""
    if raw is None:
        return _empty(known, ("offer", "arm"))
    raw = plain_index(raw)
    _, ids, month, report = _rows_of_customers("campaigns", raw, known, extract, config)
    report.fail("offer", "is blank", blank(raw["offer"]))
    offer = raw["offer"].astype(str).str.strip()
    if config.campaigns.offers:
        offer = offer.replace(config.campaigns.offers)
    configured = _configured_offers(config)
    unknown = ~offer.isin(configured).to_numpy(dtype=bool)
    if configured and unknown.any():
        report.fail(
            "offer",
            f"names offers that are not configured: {values_of(offer, unknown)}; the "
            f"configured [[offers]] are {configured}",
            unknown,
            "Map each code onto a configured offer in lifecycle.toml, e.g. [campaigns] "
            f'offers = {{ {values_of(offer, unknown, 1)[0]} = "{configured[0]}" }}, or add the '
            "offer to [[offers]]",
        )
    arm = raw["arm"].astype("string").str.strip()
    if config.campaigns.arms:
        arm = arm.replace(config.campaigns.arms)
    wrong = ~arm.isin(ARMS).to_numpy(dtype=bool)
    report.fail(
        "arm",
        f"is not one of {list(ARMS)}: {values_of(raw['arm'], wrong)}",
        wrong,
        "Write offered for customers who got the offer, held_out for the random hold-out, "
        'or map your labels in lifecycle.toml: [campaigns] arms = { T = "offered", '
        'C = "held_out" }',
    )
    return pd.DataFrame(
        {
            "customer_id": ids,
            "month": month,
            "offer": offer.astype(object),
            "arm": arm.astype(object),
        }
    )


def _configured_offers(config: Config) -> list[str]:
    """The names of the ``[[offers]]`` (read in full, and checked, by `lifecycle.decisions`)."""
    from ..decisions import offers_from_config

    return [offer.name for offer in offers_from_config(config)]
