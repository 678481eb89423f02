"""Turning a mask of bad rows into one `InputError`, with a few example ids and values."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..errors import MAX_EXAMPLE_CHARS, InputError

SCAN = 1000  # flagged rows looked at when picking distinct examples


@dataclass(frozen=True)
class Report:
    """Raises `InputError` for the rows of one table flagged by a mask."""

    table: str
    ids: pd.Series | None  # example labels; None: row numbers

    def fail(self, column: str, problem: str, mask: np.ndarray, fix: str | None = None) -> None:
        mask = np.asarray(mask, dtype=bool)
        if mask.any():
            raise InputError(
                table=self.table,
                column=column,
                problem=problem,
                count=int(mask.sum()),
                examples=self.examples(mask),
                fix=fix,
            )

    def examples(self, mask: np.ndarray) -> list[object]:
        rows = np.flatnonzero(mask)[:SCAN]
        labels = self.ids.iloc[rows].tolist() if self.ids is not None else [None] * len(rows)
        out: list[object] = []
        for row, label in zip(rows, labels, strict=True):
            label = f"row {row + 1}" if label is None or pd.isna(label) else label
            if label not in out:
                out.append(label)
            if len(out) == 5:
                break
        return out


def values_of(values: pd.Series, mask: np.ndarray, limit: int = 5) -> list[object]:
    """Up to ``limit`` distinct offending values, for messages; long texts are cut."""
    found = pd.unique(values[mask].iloc[:SCAN]).tolist()[:limit]
    return [
        v[: MAX_EXAMPLE_CHARS - 1] + "…" if isinstance(v, str) and len(v) > MAX_EXAMPLE_CHARS else v
        for v in found
    ]
