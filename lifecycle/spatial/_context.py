"""`add_spatial_context`: area attributes, local move rate and nearby adoption on the panel."""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from .._months import categorical_to_index
from ..config import Config
from ..data import Tables
from ..errors import InputError, UsageError
from ._areas import area_attributes, area_positions
from ._crs import project_premises
from ._move_rate import local_move_rates
from ._sweep import nearby_counts

log = logging.getLogger(__name__)

__all__ = ["SharedContext", "add_spatial_context", "radius_label"]

_NEVER = 2**40  # a month index later than any real one: "no end", "no uptake"


@dataclass(frozen=True)
class SharedContext:
    """The part of the spatial context that depends on other customers, computed elsewhere.

    With it, `add_spatial_context` appends the context to rows of some of the customers
    without the others' histories: the distributed route computes it from every customer's
    summary and gives each partition its share.

    Attributes
    ----------
    first
        Month index of column 0 of ``rates`` and of the counts.
    rates
        ``(areas, months)`` shrunk local move rates (`local_move_rates`).
    counts
        Per radius of ``[spatial] radii_m``, in their order: ``(n, 1 + products, months)``
        counts within the radius, laid out as `nearby_counts` gives them (quantity 0: all
        customers near; k: holders of the k-th product). Empty without products.
    slot
        Row in each of ``counts`` of every customer of the tables (−1: none).
    """

    first: int
    rates: np.ndarray
    counts: list[np.ndarray]
    slot: np.ndarray


def radius_label(radius: float) -> str:
    """The radius as it appears in column names: ``400`` for 400.0, ``250_5`` for 250.5."""
    radius = float(radius)
    return str(int(radius)) if radius.is_integer() else repr(radius).replace(".", "_")


def _checked_settings(panel: pd.DataFrame, config: Config) -> list[float]:
    """The ``[spatial]`` radii, once the move-rate window and the panel's id columns are
    checked."""
    radii = checked_radii(config)
    if config.spatial.move_rate_months < 1:
        raise UsageError(
            f"[spatial] move_rate_months was {config.spatial.move_rate_months} but is expected "
            "to be a number of months, at least 1"
        )
    for column in ("customer_id", "month"):
        if column not in panel.columns:
            raise UsageError(f"the panel has no column '{column}'; give the output of build_panel")
    return radii


def _log_context(n_attributes: int, config: Config, n_products: int, radii: list[float]) -> None:
    log.info(
        "spatial context: %d area attribute(s), local move rate over %d months, nearby "
        "adoption of %d product(s) within %s m",
        n_attributes, config.spatial.move_rate_months, n_products,
        ", ".join(radius_label(r) for r in radii),
    )  # fmt: skip


def _move_rates(
    tables: Tables, config: Config, area: np.ndarray, first: int, last: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Customers' start and end months (end `_NEVER` while active) and the shrunk local move
    rate by area and month ``first..last``."""
    customers = tables.customers
    start = customers["start"].to_numpy(dtype=np.int64)
    end_f = customers["end"].to_numpy(dtype=np.float64)
    end = np.where(np.isnan(end_f), _NEVER, np.nan_to_num(end_f)).astype(np.int64)
    moved_out = (customers["end_reason"].astype(object) == "move_out").to_numpy(dtype=bool)
    rates = local_move_rates(
        area,
        start,
        end_f,
        moved_out,
        n_areas=len(tables.areas),
        first_month=first,
        last_month=last,
        window=config.spatial.move_rate_months,
    )
    return start, end, rates


def add_spatial_context(
    panel: pd.DataFrame,
    tables: Tables,
    *,
    config: Config | None = None,
    shared: SharedContext | None = None,
) -> pd.DataFrame:
    """The panel with the spatial context of each customer-month appended.

    Every value on the row for month m uses only what was known at the end of month m−1, with
    the definitions of DEVELOPERS.md (customer j *is a customer at the end of month t* when
    start_j ≤ t < end_j; it *holds product p* then if also its uptake month U_j ≤ t):

    - every numeric area attribute (``rental_share``, …) of the area holding the premise
      (`premise_areas`); static, so trivially known;
    - ``local_move_rate``: move-outs per active customer-month in the customer's area over
      months m−W..m−1 (W = ``[spatial] move_rate_months``), shrunk toward the overall rate by
      the gamma–Poisson empirical Bayes estimator of Clayton & Kaldor (1987, Biometrics 43,
      671–681) with Marshall's (1991, Applied Statistics 40, 283–294) moment estimates; see
      `local_move_rates` and `gamma_poisson_rates`. NaN in a month whose window holds no
      customer-month at all (the first month of the data);
    - for each product p and radius r (``[spatial] radii_m``)::

          nearby_adopters_<p>_<r>m(i, m) = #{j ≠ i : d(i, j) ≤ r, j holds p at the end of m−1}
          nearby_adoption_<p>_<r>m(i, m) = nearby_adopters / #{j ≠ i : d(i, j) ≤ r,
                                                             j is a customer at the end of m−1}

      (0 when no customer is within r). Distances are in metres in the CRS of
      `distance_crs`; the boundary is inclusive. A customer who has left stops counting from
      the month after its end month; so does its product.

    Parameters
    ----------
    panel
        The customer-month panel (`build_panel`): at least ``customer_id`` and ``month``
        (ordered categorical ``YYYY-MM``), any other columns are kept as they are.
    tables
        The checked tables the panel was built from.
    config
        Uses the ``[spatial]`` settings.
    shared
        The move rates and nearby counts, when computed elsewhere over more customers than
        ``tables`` holds (`SharedContext`); by default computed here from ``tables``.

    Returns
    -------
    pandas.DataFrame
        A new frame: the panel's columns, then the area attributes (float32),
        ``local_move_rate`` (float32), and per product, per radius,
        ``nearby_adopters_<p>_<r>m`` (int32) and ``nearby_adoption_<p>_<r>m`` (float32).

    Raises
    ------
    InputError
        For bad input data (premises in no area, missing CRS, uptakes of unknown customers,
        an area attribute named like a panel column).
    UsageError
        If the panel lacks ``customer_id`` or ``month``, names customers the tables do not
        have, already has spatial columns, or the ``[spatial]`` radii or window are not
        positive.
    """
    config = config or Config()
    radii = _checked_settings(panel, config)
    customers = tables.customers
    rows = _row_positions(panel["customer_id"], customers["customer_id"])
    months = categorical_to_index(panel["month"]).astype(np.int64)
    first, last = (int(months.min()), int(months.max())) if len(months) else (0, 0)
    month_col = months - first
    attributes = area_attributes(tables)
    products = list(tables.products)
    check_context_names(panel, list(map(str, attributes.columns)), _nearby_names(products, radii))
    area = area_positions(tables, config)
    new = {str(name): attributes[name].to_numpy()[area[rows]] for name in attributes.columns}
    if shared is not None:
        month_col = months - shared.first
        new["local_move_rate"] = shared.rates[area[rows], month_col].astype(np.float32)
        new.update(_shared_nearby(shared, rows, month_col, products, radii))
        return pd.concat([panel, pd.DataFrame(new, index=panel.index)], axis=1)
    start, end, rates = _move_rates(tables, config, area, first, last)
    new["local_move_rate"] = rates[area[rows], month_col].astype(np.float32)
    if products:
        new.update(
            _nearby_columns(
                tables, config, rows, month_col, last - first + 1, first, last, start, end, radii
            )
        )
    _log_context(len(attributes.columns), config, len(products), radii)
    context = pd.DataFrame(new, index=panel.index)
    return pd.concat([panel, context], axis=1)


def checked_radii(config: Config) -> list[float]:
    """The checked `[spatial] radii_m` (also used by the distributed context)."""
    radii = [float(r) for r in config.spatial.radii_m]
    bad = [r for r in radii if not (math.isfinite(r) and r > 0)]
    if bad or not radii:
        raise UsageError(
            f"[spatial] radii_m was {list(config.spatial.radii_m)} but each radius is expected "
            "to be a positive number of metres, e.g. [400]"
        )
    labels = [radius_label(r) for r in radii]
    if len(set(labels)) != len(labels):
        raise UsageError(f"[spatial] radii_m was {list(config.spatial.radii_m)}: a radius repeats")
    return radii


def adoption_columns(
    counts: np.ndarray, flat_row: np.ndarray, n_months: int, products: list[str], radius: float
) -> dict[str, np.ndarray]:
    """``nearby_adopters_<p>_<r>m`` and ``nearby_adoption_<p>_<r>m`` for the rows at
    ``flat_row`` of flattened counts laid out (premise, quantity, month), quantity 0 being all
    customers near and quantity k the holders of the k-th product; the share is 0 when nobody
    is near."""
    near = counts[flat_row]
    label = radius_label(radius)
    out: dict[str, np.ndarray] = {}
    for k, product in enumerate(products):
        adopters = counts[flat_row + (k + 1) * n_months]
        share = np.zeros(len(flat_row), dtype=np.float32)
        np.divide(adopters, near, out=share, where=near > 0, casting="unsafe")
        out[f"nearby_adopters_{product}_{label}m"] = adopters
        out[f"nearby_adoption_{product}_{label}m"] = share
    return out


def _nearby_names(products: list[str], radii: list[float]) -> list[str]:
    names = []
    for product in products:
        for radius in radii:
            label = radius_label(radius)
            names += [f"nearby_adopters_{product}_{label}m", f"nearby_adoption_{product}_{label}m"]
    return names


def _row_positions(panel_ids: pd.Series, customer_ids: pd.Series) -> np.ndarray:
    """Row position in the customers table of each panel row's customer."""
    index = pd.Index(customer_ids)
    if not index.is_unique:
        dup = index[index.duplicated()].unique()
        raise InputError(
            table="customers",
            column="customer_id",
            problem="has duplicate ids",
            count=int(index.duplicated(keep=False).sum()),
            examples=dup[:5],
        )
    if isinstance(panel_ids.dtype, pd.CategoricalDtype):
        by_code = index.get_indexer(panel_ids.cat.categories)
        codes = panel_ids.cat.codes.to_numpy()
        pos = np.where(codes >= 0, by_code[codes], -1)
    else:
        pos = index.get_indexer(panel_ids)
    unknown = pos < 0
    if unknown.any():
        examples = pd.unique(panel_ids[unknown])[:5]
        raise UsageError(
            f"the panel has {int(unknown.sum())} row(s) whose customer_id is not in the "
            f"customers table (e.g. {', '.join(map(str, examples))}); build the panel from "
            "the same tables"
        )
    return pos.astype(np.int64)


def _uptake_months(tables: Tables, products: list[str]) -> np.ndarray:
    """First uptake month per customer (rows) and product (columns); ``_NEVER`` where none."""
    uptakes = tables.uptakes
    months = np.full((len(tables.customers), len(products)), _NEVER, dtype=np.int64)
    if uptakes is None or len(uptakes) == 0:
        return months
    pos = pd.Index(tables.customers["customer_id"]).get_indexer(uptakes["customer_id"])
    unknown = pos < 0
    if unknown.any():
        raise InputError(
            table="uptakes",
            column="customer_id",
            problem="names customers that are not in the customers table",
            count=int(unknown.sum()),
            examples=uptakes["customer_id"].to_numpy()[unknown][:5],
        )
    column = pd.Index(products).get_indexer(uptakes["product"].astype(str))
    month = uptakes["month"].to_numpy(dtype=np.int64)
    known = column >= 0
    np.minimum.at(months, (pos[known], column[known]), month[known])
    return months


def _nearby_columns(
    tables: Tables,
    config: Config,
    rows: np.ndarray,
    month_col: np.ndarray,
    n_months: int,
    first: int,
    last: int,
    start: np.ndarray,
    end: np.ndarray,
    radii: list[float],
) -> dict[str, np.ndarray]:
    """The nearby-adoption columns for the panel rows, per product and radius."""
    products = list(tables.products)
    columns: dict[str, np.ndarray] = {}
    if len(rows) == 0:
        for name in _nearby_names(products, radii):
            dtype = np.int32 if name.startswith("nearby_adopters_") else np.float32
            columns[name] = np.zeros(0, dtype=dtype)
        return columns
    x, y, _ = project_premises(tables, config)
    uptake = _uptake_months(tables, products)
    # Only customers in the panel need counts, and only customers who are customers at the
    # end of some month first-1 .. last-1 can count for anyone.
    in_panel = np.zeros(len(start), dtype=bool)
    in_panel[rows] = True
    counts_somewhere = (start + 1 <= last) & (end >= first)
    keep = np.flatnonzero(in_panel | counts_somewhere)
    slot = np.full(len(start), -1, dtype=np.int64)
    slot[keep] = np.arange(len(keep))
    # j counts in month m for customers when m ∈ [start_j + 1, end_j], for holders of p when
    # m ∈ [max(start_j, U_j) + 1, end_j] (offsets from the first panel month)
    s, e = start[keep] - first, end[keep] - first
    intervals = [(s + 1, e)]
    for k in range(len(products)):
        u = uptake[keep, k]
        lo = np.where(u >= _NEVER, _NEVER, np.maximum(start[keep], u) + 1 - first)
        intervals.append((lo, e))
    n_q = len(intervals)
    flat_row = slot[rows] * (n_q * n_months) + month_col
    for radius in radii:
        counts = nearby_counts(x[keep], y[keep], radius, intervals, n_months).reshape(-1)
        columns.update(adoption_columns(counts, flat_row, n_months, products, radius))
        del counts
    return {name: columns[name] for name in _nearby_names(products, radii)}


def _shared_nearby(
    shared: SharedContext,
    rows: np.ndarray,
    month_col: np.ndarray,
    products: list[str],
    radii: list[float],
) -> dict[str, np.ndarray]:
    """The nearby-adoption columns for the panel rows from counts computed elsewhere."""
    columns: dict[str, np.ndarray] = {}
    if not products:
        return columns
    for counts, radius in zip(shared.counts, radii, strict=True):
        n_q, n_months = counts.shape[1], counts.shape[2]
        flat_row = shared.slot[rows] * (n_q * n_months) + month_col
        columns.update(adoption_columns(counts.reshape(-1), flat_row, n_months, products, radius))
    return {name: columns[name] for name in _nearby_names(products, radii)}


def check_context_names(panel: pd.DataFrame, attributes: list[str], nearby: list[str]) -> None:
    """Refuse a second run, and area attributes that would shadow a panel or context column."""
    clash = [c for c in ["local_move_rate", *nearby] if c in panel.columns]
    if clash:
        raise UsageError(
            f"the panel already has spatial context columns {clash[:5]}; add the context once"
        )
    for name in attributes:
        if name in panel.columns or name == "local_move_rate" or name in nearby:
            raise InputError(
                table="areas",
                column=name,
                problem="has the name of a panel or spatial context column, so it cannot "
                "become a feature",
                fix="rename the area attribute in the areas file",
            )
