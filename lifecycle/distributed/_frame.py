"""`PartitionedFrame`: a table whose row partitions live on the cluster's workers."""

from __future__ import annotations

import logging
from pathlib import Path
from typing import TYPE_CHECKING, Any

import pandas as pd

from .._files import write_atomic
from ._remote import concat_frames

if TYPE_CHECKING:
    import dask.dataframe
    from distributed import Client, Future

log = logging.getLogger(__name__)


class PartitionedFrame:
    """A table split into row partitions, each held by a worker as a pandas DataFrame.

    The partitions, concatenated in order, are the table the single-process function returns:
    the same rows in the same order, with the same columns and dtypes (categorical columns
    share their categories across partitions).

    Attributes
    ----------
    client
        The `distributed.Client` the partitions belong to.
    parts
        One `distributed.Future` per partition, in order.
    """

    def __init__(self, client: Client, parts: list[Future]) -> None:
        self.client = client
        self.parts = list(parts)

    @property
    def npartitions(self) -> int:
        """The number of partitions."""
        return len(self.parts)

    def __len__(self) -> int:
        return sum(self.client.gather([self.client.submit(len, p) for p in self.parts]))

    def __repr__(self) -> str:
        return f"PartitionedFrame({self.npartitions} partitions)"

    def gather(self) -> pd.DataFrame:
        """The whole table in this process (index 0..n−1): only for what fits in memory."""
        return concat_frames(self.client.gather(self.parts))

    def partition(self, i: int) -> pd.DataFrame:
        """Partition ``i`` as a pandas DataFrame in this process."""
        return self.parts[i].result()

    def to_dask(self) -> dask.dataframe.DataFrame:
        """The same partitions as a `dask.dataframe.DataFrame` (index restarts in each)."""
        import dask.dataframe as dd

        meta = self.client.submit(_empty_like, self.parts[0]).result()
        return dd.from_delayed(self.parts, meta=meta, verify_meta=False)

    def to_parquet(self, folder: str | Path) -> list[Path]:
        """Write partition i to ``folder/part-<i>.parquet`` (5 digits), by the worker holding
        it, atomically (temporary file, then rename). The workers must see ``folder``.

        Returns the paths, in partition order; reading them in that order gives the table.
        """
        folder = Path(folder).resolve()
        paths = [folder / f"part-{i:05d}.parquet" for i in range(self.npartitions)]
        written = [
            self.client.submit(_write_parquet, p, str(path), pure=False)
            for p, path in zip(self.parts, paths, strict=True)
        ]
        self.client.gather(written)
        log.info("wrote %d partitions to %s", len(paths), folder)
        return paths

    def map(self, fn: Any, *args: Any, **kwargs: Any) -> PartitionedFrame:
        """``fn(partition, *args, **kwargs)`` on every partition, on the workers."""
        return PartitionedFrame(
            self.client, [self.client.submit(fn, p, *args, **kwargs) for p in self.parts]
        )


def _empty_like(frame: pd.DataFrame) -> pd.DataFrame:
    return frame.iloc[:0]


def _write_parquet(frame: pd.DataFrame, path: str) -> str:
    write_atomic(path, lambda tmp: frame.to_parquet(tmp, index=False))
    return path
