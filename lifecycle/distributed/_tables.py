"""`PartitionedTables`: checked input tables split by customer, held on the cluster.

Partition p holds a `Tables` with a contiguous run of the customers table (in its order) and
every uptake, activity and campaign row of those customers; the areas are whole in each. Next to
it sits a `Summary` of those customers: a few numbers per customer (start, end, area, projected
premise, uptake months) — all that the spatial context needs of *other* customers, so that the
context can be computed from every customer's summary without any partition's monthly rows.
"""

from __future__ import annotations

import dataclasses
import logging
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd
from pyproj import CRS, Transformer

from ..config import Config
from ..data import Tables
from ..errors import InputError
from ..spatial import area_positions, distance_crs, project_premises

if TYPE_CHECKING:
    from distributed import Client, Future

log = logging.getLogger(__name__)

NEVER = 2**40
"""A month index later than any real one: "no end", "no uptake" (as in the spatial context)."""


@dataclass
class PartitionedTables:
    """Checked input tables split into partitions of customers, on a Dask cluster.

    Build it with `distribute_tables`. Partition p covers customers ``offsets[p]`` to
    ``offsets[p + 1] − 1`` of the customers table (in its order), with all their rows of the
    other tables.

    Attributes
    ----------
    client
        The `distributed.Client`.
    parts
        Futures of one `lifecycle.Tables` per partition. Each lists every product of the
        whole portfolio in ``products``, so every partition's panel has the same columns.
    summaries
        Futures of one `Summary` per partition.
    shared
        Future of the `Shared` facts of the whole table (id and text categories).
    config
        The settings, with ``[spatial] distance_crs`` fixed to the CRS chosen for the whole
        portfolio (it depends on the extent of all premises).
    products, offsets, n_areas, extract_month, premise_crs
        Facts of the whole table.
    """

    client: Client
    parts: list[Future]
    summaries: list[Future]
    shared: Future
    config: Config
    products: tuple[str, ...]
    offsets: np.ndarray
    n_areas: int
    extract_month: int
    premise_crs: str

    @property
    def npartitions(self) -> int:
        return len(self.parts)

    @property
    def n_customers(self) -> int:
        return int(self.offsets[-1])

    def __repr__(self) -> str:
        return (
            f"PartitionedTables({self.n_customers} customers in {self.npartitions} partitions, "
            f"products {list(self.products)})"
        )


@dataclass(frozen=True)
class Summary:
    """What the spatial context needs of each customer of a partition (customers-table order).

    Attributes
    ----------
    ids
        ``customer_id`` values.
    start, end
        Month indices; ``end`` is float64, NaN while active.
    moved_out
        True where the end reason is ``move_out``.
    area
        Row position in ``areas`` of the area holding the premise (`area_positions`).
    x, y
        Premise coordinates in metres in the distance CRS (`project_premises`).
    uptake
        ``(n, products)`` int64: first month holding each product, `NEVER` where none.
    levels
        For each text static column: its distinct values, sorted (as `build_panel` codes them).
    """

    ids: np.ndarray
    start: np.ndarray
    end: np.ndarray
    moved_out: np.ndarray
    area: np.ndarray
    x: np.ndarray
    y: np.ndarray
    uptake: np.ndarray
    levels: dict[str, pd.Index]


@dataclass(frozen=True)
class Shared:
    """Facts of the whole customers table that each partition's output must share.

    Attributes
    ----------
    id_categories
        Categories of a text ``customer_id`` column: every id as text, in table order (as
        `build_panel` makes them); ``None`` for integer ids.
    levels
        Categories of each text static column over all customers.
    """

    id_categories: pd.Index | None
    levels: dict[str, pd.Index]


def assemble(client: Client, parts: list[Future], config: Config) -> PartitionedTables:
    """`PartitionedTables` from futures of checked `Tables`, one per partition.

    Checks that the partitions agree on their columns and types, sets the products of the
    whole portfolio in each, fixes the distance CRS from all premises, and summarises.
    """
    metas = client.gather([client.submit(_meta, t) for t in parts])
    _check_agreement(metas)
    products = tuple(sorted(set().union(*(m["products"] for m in metas))))
    parts = [client.submit(_with_products, t, products) for t in parts]
    config = _with_distance_crs(client, parts, config, metas[0]["premise_crs"])
    summaries = [client.submit(summarise, t, config, products) for t in parts]
    shared = client.submit(_shared, summaries, bool(metas[0]["integer_ids"]))
    sizes = np.array([m["customers"] for m in metas], dtype=np.int64)
    offsets = np.concatenate([[0], np.cumsum(sizes)]).astype(np.int64)
    out = PartitionedTables(
        client=client,
        parts=parts,
        summaries=summaries,
        shared=shared,
        config=config,
        products=products,
        offsets=offsets,
        n_areas=int(metas[0]["areas"]),
        extract_month=int(metas[0]["extract_month"]),
        premise_crs=str(metas[0]["premise_crs"]),
    )
    log.info("%r", out)
    return out


def _meta(tables: Tables) -> dict[str, object]:
    ids = tables.customers["customer_id"]
    kinds = {}
    for name in tables.static_columns:
        values = tables.customers[name]
        numeric = pd.api.types.is_numeric_dtype(values.dtype)
        kinds[name] = "number" if numeric and not pd.api.types.is_bool_dtype(values) else "text"
    return {
        "customers": len(tables.customers),
        "products": list(tables.products),
        "static_columns": list(tables.static_columns),
        "kinds": kinds,
        "activity_columns": list(tables.activity_columns),
        "integer_ids": pd.api.types.is_integer_dtype(ids.dtype)
        and not isinstance(ids.dtype, pd.CategoricalDtype),
        "premise_crs": tables.premise_crs,
        "extract_month": tables.extract_month,
        "areas": len(tables.areas),
    }


def _check_agreement(metas: list[dict[str, object]]) -> None:
    """Partitions read from separate files must have the same columns, typed alike."""
    first = metas[0]
    for p, meta in enumerate(metas[1:], start=1):
        for key, table in (("static_columns", "customers"), ("activity_columns", "activity")):
            if meta[key] != first[key]:
                raise InputError(
                    table=table,
                    column=None,
                    problem=f"partition {p} has the columns {meta[key]} but partition 0 has "
                    f"{first[key]}",
                    fix="give every part file the same columns",
                )
        for name, kind in meta["kinds"].items():  # type: ignore[union-attr]
            if kind != first["kinds"][name]:  # type: ignore[index]
                raise InputError(
                    table="customers",
                    column=name,
                    problem=f"reads as {first['kinds'][name]} in partition 0 but as {kind} in "  # type: ignore[index]
                    f"partition {p}",
                    fix="write the column with one type in every part file",
                )
        if meta["integer_ids"] != first["integer_ids"]:
            raise InputError(
                table="customers",
                column="customer_id",
                problem=f"is integer in one partition but text in another (partition {p})",
                fix="write customer_id with one type in every part file",
            )


def _with_products(tables: Tables, products: tuple[str, ...]) -> Tables:
    return dataclasses.replace(tables, products=list(products))


def _with_distance_crs(
    client: Client, parts: list[Future], config: Config, premise_crs: str
) -> Config:
    """The config with ``[spatial] distance_crs`` set to the CRS `distance_crs` picks for all
    premises together: the premises at the extremes of longitude and latitude of every
    partition span the same box as all premises, so they give the same choice."""
    extremes = client.gather([client.submit(_extremes, t) for t in parts])
    x = np.concatenate([e[0] for e in extremes])
    y = np.concatenate([e[1] for e in extremes])
    crs = distance_crs(CRS.from_user_input(premise_crs), x, y, config.spatial.distance_crs)
    spatial = dataclasses.replace(config.spatial, distance_crs=crs.to_wkt())
    return dataclasses.replace(config, spatial=spatial)


def _extremes(tables: Tables) -> tuple[np.ndarray, np.ndarray]:
    """The premises of least and greatest longitude and latitude (in their own CRS)."""
    x = tables.customers["x"].to_numpy(dtype=np.float64)
    y = tables.customers["y"].to_numpy(dtype=np.float64)
    finite = np.flatnonzero(np.isfinite(x) & np.isfinite(y))
    if finite.size == 0:
        return np.empty(0), np.empty(0)
    source = CRS.from_user_input(tables.premise_crs)
    to_lonlat = Transformer.from_crs(source, CRS.from_epsg(4326), always_xy=True)
    lon, lat = to_lonlat.transform(x[finite], y[finite])
    pick = finite[[np.argmin(lon), np.argmax(lon), np.argmin(lat), np.argmax(lat)]]
    return x[pick], y[pick]


def summarise(tables: Tables, config: Config, products: tuple[str, ...]) -> Summary:
    """The `Summary` of one partition's customers."""
    customers = tables.customers
    x, y, _ = project_premises(tables, config)
    return Summary(
        ids=customers["customer_id"].to_numpy(),
        start=customers["start"].to_numpy(dtype=np.int64),
        end=customers["end"].to_numpy(dtype=np.float64),
        moved_out=(customers["end_reason"].astype(object) == "move_out").to_numpy(dtype=bool),
        area=area_positions(tables, config).astype(np.int64),
        x=x,
        y=y,
        uptake=uptake_matrix(tables, products),
        levels=_text_levels(tables, config),
    )


def uptake_matrix(tables: Tables, products: tuple[str, ...]) -> np.ndarray:
    """First month holding each product, per customer (rows) and product; `NEVER` if none."""
    months = np.full((len(tables.customers), len(products)), NEVER, dtype=np.int64)
    uptakes = tables.uptakes
    if len(uptakes) == 0 or not products:
        return months
    row = pd.Index(tables.customers["customer_id"]).get_indexer(uptakes["customer_id"])
    column = pd.Index(products).get_indexer(uptakes["product"].astype(str))
    known = (row >= 0) & (column >= 0)
    np.minimum.at(
        months, (row[known], column[known]), uptakes["month"].to_numpy(dtype=np.int64)[known]
    )
    return months


def _text_levels(tables: Tables, config: Config) -> dict[str, pd.Index]:
    """Sorted distinct values of each static column `build_panel` codes as categorical."""
    levels = {}
    for name in tables.static_columns:
        if name == "monthly_margin" or name in config.panel.not_features:
            continue
        values = tables.customers[name]
        if pd.api.types.is_numeric_dtype(values.dtype) and not pd.api.types.is_bool_dtype(values):
            continue
        levels[name] = pd.factorize(values.astype("string"), sort=True)[1]
    return levels


def _shared(summaries: list[Summary], integer_ids: bool) -> Shared:
    id_categories = None
    if not integer_ids:
        ids = np.concatenate([s.ids for s in summaries]) if summaries else np.empty(0, object)
        id_categories = pd.Index(pd.Series(ids, dtype=object, name="customer_id").astype(str))
    levels = {}
    for name in summaries[0].levels if summaries else ():
        values = pd.concat([pd.Series(s.levels[name], dtype="string") for s in summaries])
        levels[name] = pd.factorize(values, sort=True)[1]
    return Shared(id_categories=id_categories, levels=levels)
