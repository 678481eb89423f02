"""A worker plugin that keeps data errors out of the workers' logs (they reach the caller)."""

from __future__ import annotations

import logging

from distributed import WorkerPlugin


class DataErrorFilter(logging.Filter):
    """Drops a worker's "Compute Failed" log entry when the task failed on bad input or a bad
    request (`InputError`, `UsageError`): the caller gets that error with its one clear
    message, and a worker's traceback beside it would only bury it. Other failures are kept."""

    def filter(self, record: logging.LogRecord) -> bool:
        if not str(record.msg).startswith("Compute Failed"):
            return True
        args = record.args if isinstance(record.args, tuple) else ()
        text = " ".join(str(a) for a in args)
        return not any(f"{name}(" in text for name in ("InputError", "UsageError"))


class QuietDataErrors(WorkerPlugin):
    """Installs `DataErrorFilter` on each worker's task log."""

    name = "lifecycle-quiet-data-errors"

    def setup(self, worker: object) -> None:
        logger = logging.getLogger("distributed.worker")
        if not any(isinstance(f, DataErrorFilter) for f in logger.filters):
            logger.addFilter(DataErrorFilter())
