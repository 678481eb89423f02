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
    "cut_text",
]

_MAX_EXAMPLES = 5
MAX_EXAMPLE_CHARS = 40  # an example id longer than this is cut, with an ellipsis


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
    source_column
        The input file's own name of ``column`` when ``[columns.<table>]`` maps it; the
        message then names both ("column 'leave_date' (end_month)").

    Each example is shown cut to ``MAX_EXAMPLE_CHARS`` characters, so that a huge id never
    makes a huge message.

    The error pickles with every field (it is rebuilt from `fields`), so one raised in a task
    on a Dask worker reaches the caller as the same `InputError`.
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
        source_column: str | None = None,
    ) -> None:
        self.table = table
        self.column = column
        self.problem = problem
        self.count = int(count)
        self.examples = [_plain(e) for e in list(examples)[:_MAX_EXAMPLES]]
        self.fix = fix
        self.source_column = source_column
        super().__init__(self._message())

    def fields(self) -> dict[str, object]:
        """The keyword arguments that rebuild this error (for a copy, or across processes)."""
        return {
            "table": self.table,
            "column": self.column,
            "problem": self.problem,
            "count": self.count,
            "examples": self.examples,
            "fix": self.fix,
            "source_column": self.source_column,
        }

    def __reduce__(self) -> tuple[object, ...]:
        # Exception pickling calls ``cls(*args)``; this class takes keywords only.
        return (_rebuild_input_error, (type(self), self.fields()))

    def with_source_names(self, columns: dict[str, dict[str, str]]) -> InputError:
        """This error naming the input's own column name beside ours, where ``columns``
        (``[columns.<table>]``: our name = yours) maps this error's column."""
        mapping = columns.get(self.table, {})
        parts = (self.column or "").split(", ")  # "x, y": a pair of columns
        theirs = ", ".join(str(mapping.get(p, p)) for p in parts)
        if not self.column or theirs == self.column or self.source_column:
            return self
        return InputError(**{**self.fields(), "source_column": theirs})

    def _message(self) -> str:
        where = f"table '{self.table}'"
        if self.column is not None and self.source_column:
            where += f", column '{cut_text(self.source_column)}' ({self.column})"
        elif self.column is not None:
            where += f", column '{cut_text(self.column)}'"
        text = f"{where}: {self.problem}"
        if self.count:
            text += f" ({self.count} row{'s' if self.count != 1 else ''}"
            if self.examples:
                text += ", e.g. " + ", ".join(cut_text(str(e)) for e in self.examples)
            text += ")"
        if self.fix:
            text += f". {self.fix}"
        return text


class ModelFileError(LifecycleError):
    """Raised when a saved model folder is incomplete or a file's SHA-256 does not match its
    manifest, or the model was saved in an older file format; such a file is never loaded, because
    loading a pickle file runs code."""


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


def _rebuild_input_error(cls: type[InputError], fields: dict[str, object]) -> InputError:
    """An unpickled `InputError` (see `InputError.__reduce__`)."""
    return cls(**fields)


def _plain(value: object) -> object:
    """Numpy scalars print as ``np.int64(3)`` under numpy 2; show the bare value instead."""
    item = getattr(value, "item", None)
    return item() if callable(item) else value


def cut_text(text: str, limit: int = MAX_EXAMPLE_CHARS) -> str:
    """``text`` cut to ``limit`` characters, ending in an ellipsis when cut."""
    return text if len(text) <= limit else text[: limit - 1] + "…"
