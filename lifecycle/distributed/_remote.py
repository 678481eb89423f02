"""What every task run on a worker shares: errors that survive the trip back, small helpers.

A task's exception is pickled on the worker and raised again in the caller. `InputError` takes
keyword-only arguments, which default exception pickling cannot rebuild, so tasks raise the
subclass `_PortableInputError` instead (same class for ``except InputError``, same message).
"""

from __future__ import annotations

import functools
from collections.abc import Callable, Sequence
from typing import Any, TypeVar

import pandas as pd

from ..errors import InputError

F = TypeVar("F", bound=Callable[..., Any])


class _PortableInputError(InputError):
    """An `InputError` that pickles: rebuilt from its fields on the other side."""

    def __reduce__(self):
        return (_rebuild_input_error, (self.fields(),))


def _rebuild_input_error(fields: dict) -> _PortableInputError:
    return _PortableInputError(**fields)


def portable(fn: F) -> F:
    """Run ``fn`` as a task: an `InputError` it raises comes back to the caller intact."""

    @functools.wraps(fn)
    def task(*args: Any, **kwargs: Any) -> Any:
        try:
            return fn(*args, **kwargs)
        except _PortableInputError:
            raise
        except InputError as exc:
            raise _PortableInputError(**exc.fields()) from None

    return task  # type: ignore[return-value]


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
