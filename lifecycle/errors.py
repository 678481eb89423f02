"""The exceptions `lifecycle` raises on purpose.

Every class says when it is raised. The command line turns `LifecycleError` subclasses into one
message and an exit code: 2 for `InputError` and `UsageError`, 1 for anything else.
"""

from __future__ import annotations

from collections.abc import Iterable

__all__ = [
    "InputError",
    "LifecycleError",
    "ModelFileError",
    "OutputError",
    "PlanSafetyError",
    "RunLockedError",
    "UsageError",
]

_MAX_EXAMPLES = 5


class LifecycleError(Exception):
    """Base class of every error this package raises deliberately."""


class UsageError(LifecycleError):
    """Raised when a call or a command is malformed: a bad option, a bad month, a missing file.

    The input data may be fine; the way it was asked for is not.
    """


class InputError(LifecycleError):
    """Raised when input data breaks the data contract.

    Carries the table, the column, how many rows are affected and up to five example ids, so
    that the message alone tells the analyst where to look.

    Parameters
    ----------
    table, column
        Where the problem is. ``column`` may be ``None`` for a table-level problem.
    problem
        What is wrong, in words ("end_month is before start_month").
    count
        How many rows have the problem.
    examples
        Ids (or row numbers) of affected rows; the first five are shown.
    fix
        Optional hint on how to mend it.
    """

    def __init__(
        self,
        *,
        table: str,
        column: str | None,
        problem: str,
        count: int = 0,
        examples: Iterable[object] = (),
        fix: str | None = None,
    ) -> None:
        self.table = table
        self.column = column
        self.problem = problem
        self.count = int(count)
        self.examples = [_plain(e) for e in list(examples)[:_MAX_EXAMPLES]]
        self.fix = fix
        super().__init__(self._message())

    def _message(self) -> str:
        where = f"table '{self.table}'"
        if self.column is not None:
            where += f", column '{self.column}'"
        text = f"{where}: {self.problem}"
        if self.count:
            text += f" ({self.count} row{'s' if self.count != 1 else ''}"
            if self.examples:
                text += ", e.g. " + ", ".join(str(e) for e in self.examples)
            text += ")"
        if self.fix:
            text += f". {self.fix}"
        return text


class ModelFileError(LifecycleError):
    """Raised when a saved model folder is incomplete or a file's SHA-256 does not match its
    manifest; such a file is never loaded, because loading a joblib file runs code."""


class RunLockedError(UsageError):
    """Raised when another ``lifecycle run`` holds the reports folder's lock (exit code 2); the
    message names its process, host and start time."""


class PlanSafetyError(LifecycleError):
    """Raised when a finished plan selects a customer who is flagged (do-not-contact, hardship
    or an added exclusion) or has not opted in. Only a fault in the program can cause it; the
    plan is not written and the command exits with code 1."""


class OutputError(LifecycleError):
    """Raised when an output cannot be written, e.g. the disk is full (exit code 1). Nothing
    partial is left: earlier outputs and the history are as they were."""


def _plain(value: object) -> object:
    """Numpy scalars print as ``np.int64(3)`` under numpy 2; show the bare value instead."""
    item = getattr(value, "item", None)
    return item() if callable(item) else value
