"""Small helpers that tasks on the workers share, and the step results as dask DataFrames.

A task's `InputError` needs no wrapping: the error pickles with all its fields
(`lifecycle.errors.InputError.__reduce__`), so the caller gets it as it was raised.

The steps return `dask.dataframe.DataFrame` collections over the partitions their tasks left
on the workers (`as_frame`); the next step takes those partitions back as futures
(`parts_of`) and submits one task per partition with the arguments that partition needs.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

import pandas as pd

if TYPE_CHECKING:
    import dask.dataframe
    from distributed import Client, Future


def item(values: Sequence[Any], index: int) -> Any:
    """``values[index]``: one piece of a task that returned several."""
    return values[index]


def concat_frames(frames: Sequence[pd.DataFrame]) -> pd.DataFrame:
    """Frames one after another, index 0..n−1; empty frames only where all are empty (pandas
    warns when an empty frame takes part in setting the result's dtypes)."""
    kept = [f for f in frames if len(f)] or list(frames[:1])
    if len(kept) == 1:
        return kept[0].reset_index(drop=True)
    return pd.concat(kept, ignore_index=True)


def as_frame(client: Client, parts: list[Future]) -> dask.dataframe.DataFrame:
    """A dask DataFrame whose partitions are the frames of ``parts``, in order.

    Each partition keeps its own index (0..n_p−1), as the collections dask reads from files
    do; ``frame.compute().reset_index(drop=True)`` is the single-process table. Text columns
    stay as the single-process functions type them (dask's conversion of object columns to
    pyarrow strings is turned off while the collection is built).
    """
    import dask
    import dask.dataframe as dd

    meta = client.submit(_empty_like, parts[0]).result()
    with dask.config.set({"dataframe.convert-string": False}):
        return dd.from_delayed(list(parts), meta=meta, verify_meta=False)


def parts_of(client: Client, frame: dask.dataframe.DataFrame) -> list[Future]:
    """One future per partition of ``frame``, in order (computed on the cluster; partitions
    already held by the workers are not moved)."""
    return list(client.compute(frame.to_delayed()))


def _empty_like(frame: pd.DataFrame) -> pd.DataFrame:
    return frame.iloc[:0]
