"""Progress inside long steps, reported through logging (never printed by the library).

A long step calls `progress` as each of its sub-steps starts: the backtest per cutoff and
family, a fit per cause, the hazards per block of customers. Each call is one INFO record of
the logger ``lifecycle.progress`` carrying ``progress_stage``, ``progress_done`` (sub-steps
finished before this one) and ``progress_total``; the command line shows them as a bar on a
terminal or as one line each in a log (`lifecycle.cli._progress`), and any logging handler
(or a test's ``caplog``) can read them.
"""

from __future__ import annotations

import logging

log = logging.getLogger("lifecycle.progress")


def progress(stage: str, done: int, total: int, what: str) -> None:
    """Report that sub-step ``done + 1`` of ``total`` of ``stage`` starts: ``what``."""
    if not log.isEnabledFor(logging.INFO):
        return
    log.info(
        "%s %d/%d: %s", stage, done + 1, total, what,
        extra={"progress_stage": stage, "progress_done": done, "progress_total": total},
    )  # fmt: skip
