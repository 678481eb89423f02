"""Small helpers that tasks on the workers share.

A task's `InputError` needs no wrapping: the error pickles with all its fields
(`lifecycle.errors.InputError.__reduce__`), so the caller gets it as it was raised.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import pandas as pd


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
