"""Reading and checking the input tables partition by partition, on the cluster.

Three kinds of source:

- a `lifecycle.Tables` already checked in this process: split here, each partition sent once;
- a data folder or DuckDB file that `lifecycle.load_tables` reads: read and checked by one
  worker, then split there (nothing passes through this process);
- a data folder in which ``customers``, ``activity``, ``uptakes`` or ``campaigns`` is a
  *folder of Parquet parts* (``customers/part-0.parquet``, …, or hive-style
  ``customers/region=north/….parquet``; ``[tables] customers = "somewhere"`` may name the
  folder): for tables too large for one process. Each customers part is one partition (parts
  in the order of their paths, sorted; an empty part is skipped); each part of the other
  tables is read by a worker and its rows are sent to the partitions of their customers. Every
  partition is checked by `lifecycle.data.check_tables` on its own, and ids across partitions
  are checked for duplicates. Directory names (``key=value``) are not read as columns: keep
  every column inside the files.

With several problems in the input, the one reported first may differ from the one the
single-process check reports first (each partition is checked on its own).
"""

from __future__ import annotations

import dataclasses
import logging
import math
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from ..config import Config
from ..data import RawTables, Tables, check_tables, load_tables, read_raw_tables
from ..errors import InputError, UsageError
from ._client import compute_settings
from ._remote import item
from ._tables import PartitionedTables, assemble

if TYPE_CHECKING:
    from distributed import Client, Future

log = logging.getLogger(__name__)

KEYED = ("customers", "uptakes", "activity", "campaigns")
_SUFFIXES = (".csv", ".parquet")


def distribute_tables(
    client: Client,
    source: Tables | str | Path,
    *,
    config: Config | None = None,
    partitions: int | None = None,
) -> PartitionedTables:
    """Checked input tables, split into partitions of customers on the cluster.

    Parameters
    ----------
    client
        A `distributed.Client` (see `compute_client`).
    source
        Checked `lifecycle.Tables`, or a data folder / DuckDB file as `lifecycle.load_tables`
        takes, in which any of ``customers``, ``uptakes``, ``activity`` and ``campaigns`` may
        be a folder of Parquet parts (see the module docstring).
    config
        Settings; ``[compute] partition_customers`` sets the partition size.
    partitions
        Number of partitions (default: ``⌈customers / partition_customers⌉`` rounded up to a
        multiple of the number of workers). Ignored when the customers come as a folder of
        parts (one partition per part).

    Raises
    ------
    InputError
        At the first problem found in the data (see the module docstring).
    UsageError
        For a source that does not exist or is ambiguous, or a malformed setting.
    """
    config = config or Config()
    size = compute_settings(config).partition_customers
    if partitions is not None and (
        isinstance(partitions, bool) or not isinstance(partitions, int) or partitions < 1
    ):
        raise UsageError(f"partitions was {partitions!r} but is expected to be a whole number >= 1")
    workers = max(1, len(client.scheduler_info().get("workers", {})))

    def count(n: int) -> int:  # a whole number of rounds of the workers
        return partitions or workers * math.ceil(math.ceil(n / size) / workers)

    if isinstance(source, Tables):
        bounds = _bounds(len(source.customers), count(len(source.customers)))
        parts = client.scatter(split_tables(source, bounds))
        return assemble(client, list(parts), config)
    path = Path(source)
    folders = part_folders(path, config)
    if not folders:
        loaded = client.submit(_load, str(path), config, pure=False)  # files may change
        n = client.submit(_n_customers, loaded).result()
        bounds = _bounds(n, count(n))
        pieces = client.submit(split_tables, loaded, bounds)
        parts = [client.submit(item, pieces, i) for i in range(len(bounds) - 1)]
        return assemble(client, parts, config)
    return assemble(client, _read_parts(client, path, config, folders, count), config)


def _bounds(n: int, count: int) -> np.ndarray:
    count = max(1, min(count, n)) if n else 1
    return np.linspace(0, n, count + 1).round().astype(np.int64)


def _load(source: str, config: Config) -> Tables:
    return load_tables(source, config)


def _n_customers(tables: Tables) -> int:
    return len(tables.customers)


def split_tables(tables: Tables, bounds: np.ndarray) -> list[Tables]:
    """Checked tables split at customer positions ``bounds`` (0 = b₀ < … < b_P = n): part p
    holds customers b_p..b_{p+1}−1 and their rows of the other tables, in their order."""
    count = len(bounds) - 1
    index = pd.Index(tables.customers["customer_id"])
    keyed: dict[str, list[pd.DataFrame]] = {}
    for name in ("uptakes", "activity", "campaigns"):
        frame = getattr(tables, name)
        part = np.searchsorted(bounds, positions(index, frame["customer_id"]), "right") - 1
        keyed[name] = _split_rows(frame, part, count)
    out = []
    for p in range(count):
        customers = tables.customers.iloc[bounds[p] : bounds[p + 1]].reset_index(drop=True)
        out.append(
            dataclasses.replace(
                tables, customers=customers, **{name: keyed[name][p] for name in keyed}
            )
        )
    return out


def _split_rows(frame: pd.DataFrame, part: np.ndarray, count: int) -> list[pd.DataFrame]:
    """Rows of ``frame`` by their partition ``part`` (0..count−1), each in its order."""
    order = np.argsort(part, kind="stable")
    cuts = np.searchsorted(part[order], np.arange(count + 1))
    return [frame.iloc[order[cuts[p] : cuts[p + 1]]].reset_index(drop=True) for p in range(count)]


# --- folders of parts ---------------------------------------------------------------------------


def part_folders(path: Path, config: Config) -> dict[str, list[Path]]:
    """Tables of a data folder given as folders of Parquet parts: name → part files, sorted."""
    if not path.is_dir():
        return {}
    found: dict[str, list[Path]] = {}
    for name in KEYED:
        named = config.tables.get(name)
        folder = Path(named) if named else Path(name)
        folder = folder if folder.is_absolute() else path / folder
        if not folder.is_dir():
            continue
        if not named:
            files = [path / f"{name}{suffix}" for suffix in _SUFFIXES]
            twins = [f.name for f in files if f.is_file()]
            if twins:
                raise UsageError(
                    f"{path} holds both the folder {name}/ and {twins[0]}; keep one of them, "
                    f"or name the one to read in [tables] {name} = ..."
                )
        files = sorted(folder.rglob("*.parquet"), key=lambda f: f.relative_to(folder).as_posix())
        if not files:
            raise UsageError(f"the folder {folder} holds no .parquet files")
        found[name] = files
    return found


def _read_parts(
    client: Client,
    path: Path,
    config: Config,
    folders: dict[str, list[Path]],
    count: Callable[[int], int],
) -> list[Future]:
    """Futures of checked `Tables`, one per partition of customers (see the module docstring)."""
    rest = dataclasses.replace(
        config, tables={k: v for k, v in config.tables.items() if k not in folders}
    )
    others = client.submit(_read_others, str(path), rest, pure=False)  # files may change
    if "customers" in folders:
        raw = [
            client.submit(read_part, str(f), "customers", config, pure=False)
            for f in folders["customers"]
        ]
    else:
        whole = client.submit(getattr, others, "customers")
        n = client.submit(_length, whole).result()
        bounds = _bounds(n, count(n))
        raw = [
            client.submit(_rows, whole, bounds[p], bounds[p + 1]) for p in range(len(bounds) - 1)
        ]
    sizes = client.gather([client.submit(_length, r) for r in raw])
    raw = [r for r, n in zip(raw, sizes, strict=True) if n] or raw[:1]
    catalog = client.submit(_catalog, [client.submit(_customer_ids, r) for r in raw])
    catalog.result()  # raises on blank or duplicate ids
    n_parts = len(raw)
    pieces: dict[str, list[list[Future]]] = {}
    for name in ("uptakes", "activity", "campaigns"):
        if name in folders:
            frames = [
                client.submit(read_part, str(f), name, config, pure=False) for f in folders[name]
            ]
        else:
            frames = [client.submit(getattr, others, name)]
        routed = [client.submit(_route, f, catalog, n_parts) for f in frames]
        pieces[name] = [[client.submit(item, r, p) for r in routed] for p in range(n_parts)]
    areas = client.submit(getattr, others, "areas")
    return [
        client.submit(
            _check_partition,
            raw[p],
            areas,
            config,
            pieces["uptakes"][p],
            pieces["activity"][p],
            pieces["campaigns"][p],
        )
        for p in range(n_parts)
    ]


def _read_others(path: str, config: Config) -> RawTables:
    return read_raw_tables(path, config)


def read_part(file: str, table: str, config: Config) -> pd.DataFrame:
    """One Parquet part of a table, its columns renamed by ``[columns.<table>]``."""
    import pyarrow.parquet as pq

    try:
        frame = pq.ParquetFile(file).read().to_pandas()
    except (OSError, ValueError) as exc:
        raise InputError(
            table=table, column=None, problem=f"cannot be read from {file}: {exc}"
        ) from None
    mapping = config.columns.get(table, {})
    renames = {theirs: ours for ours, theirs in mapping.items() if theirs in frame.columns}
    return frame.rename(columns=renames) if renames else frame


def _length(frame: pd.DataFrame | None) -> int:
    return 0 if frame is None else len(frame)


def _rows(frame: pd.DataFrame, lo: int, hi: int) -> pd.DataFrame:
    return frame.iloc[lo:hi].reset_index(drop=True)


def _customer_ids(raw: pd.DataFrame) -> pd.Series:
    if "customer_id" not in raw.columns:
        raise InputError(
            table="customers",
            column="customer_id",
            problem=f"is missing; the columns are {sorted(map(str, raw.columns))}",
            fix='Rename your column, or map it in [columns.customers] customer_id = "yours"',
        )
    return raw["customer_id"].reset_index(drop=True)


@dataclasses.dataclass(frozen=True)
class _Catalog:
    """Every customer id, in table order, and where each partition starts."""

    ids: pd.Index
    offsets: np.ndarray

    def partition_of(self, ids: pd.Series) -> np.ndarray:
        """Partition of each id's customer; 0 for unknown ids, so that partition 0's check
        reports them as not in the customers table."""
        pos = positions(self.ids, ids)
        if (pos < 0).any() and ids.dtype != self.ids.dtype:  # ids typed differently: by text
            text = pd.Index(_as_text(pd.Series(self.ids)))
            if text.is_unique:
                alt = text.get_indexer(_as_text(ids))
                pos = np.where(pos < 0, alt, pos)
        part = np.searchsorted(self.offsets, pos, "right") - 1
        return np.where(pos < 0, 0, part)


def _catalog(parts: Sequence[pd.Series]) -> _Catalog:
    ids = pd.concat(list(parts), ignore_index=True) if parts else pd.Series([], dtype=object)
    text = ids.astype("string").str.strip()
    blank = (ids.isna() | text.isna() | (text == "")).to_numpy(dtype=bool)
    if blank.any():
        raise InputError(
            table="customers",
            column="customer_id",
            problem="is blank",
            count=int(blank.sum()),
            examples=[f"row {r + 1}" for r in np.flatnonzero(blank)[:5]],
        )
    duplicated = ids.duplicated(keep=False).to_numpy()
    if duplicated.any():
        raise InputError(
            table="customers",
            column="customer_id",
            problem="is not unique",
            count=int(duplicated.sum()),
            examples=pd.unique(ids[duplicated])[:5],
        )
    sizes = [len(p) for p in parts]
    offsets = np.concatenate([[0], np.cumsum(sizes)]).astype(np.int64)
    return _Catalog(ids=pd.Index(ids), offsets=offsets)


def _route(frame: pd.DataFrame | None, catalog: _Catalog, count: int) -> list[pd.DataFrame | None]:
    """Rows of a customer-keyed table by the partition of their customer."""
    if frame is None:
        return [None] * count
    if "customer_id" not in frame.columns:  # the check of partition 0 names the column
        return [frame, *(frame.iloc[:0] for _ in range(count - 1))]
    frame = frame.reset_index(drop=True)
    return _split_rows(frame, catalog.partition_of(frame["customer_id"]), count)


def positions(index: pd.Index, ids: pd.Series) -> np.ndarray:
    """``index.get_indexer(ids)``, looking each id up once per run of equal ids: tables keyed
    by customer usually hold each customer's rows together, so the runs are few."""
    if isinstance(ids.dtype, pd.CategoricalDtype):
        lookup = np.append(index.get_indexer(ids.cat.categories), -1)
        return lookup[ids.cat.codes.to_numpy()]
    values = ids.to_numpy()
    n = len(values)
    if n < 2:
        return index.get_indexer(values)
    heads = np.flatnonzero(np.concatenate([[True], values[1:] != values[:-1]]))
    if heads.size > n // 4:
        return index.get_indexer(values)
    return np.repeat(index.get_indexer(values[heads]), np.diff(np.append(heads, n)))


def _as_text(values: pd.Series) -> pd.Series:
    """Ids as text, integral floats without ``.0`` (so 17.0 read as a float matches "17")."""
    if pd.api.types.is_float_dtype(values.dtype):
        whole = values.notna() & (values % 1 == 0)
        text = values.astype(object).where(~whole, values[whole].astype("int64"))
        return text.astype(str).where(values.notna())
    return values.astype(str).where(values.notna())


def _check_partition(
    customers: pd.DataFrame,
    areas: object,
    config: Config,
    uptakes: list[pd.DataFrame | None],
    activity: list[pd.DataFrame | None],
    campaigns: list[pd.DataFrame | None],
) -> Tables:
    raw = RawTables(
        customers=customers,
        uptakes=_joined(uptakes),
        areas=areas,  # type: ignore[arg-type]
        activity=_joined(activity),
        campaigns=_joined(campaigns),
    )
    return check_tables(raw, config)


def _joined(pieces: list[pd.DataFrame | None]) -> pd.DataFrame | None:
    present = [p for p in pieces if p is not None]
    if not present:
        return None
    kept = [p for p in present if len(p)] or present[:1]
    if len(kept) == 1:
        return kept[0].reset_index(drop=True)
    return pd.concat(kept, ignore_index=True)
