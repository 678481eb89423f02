"""A progress display for the steps of a run (rich), quiet when output is not a terminal."""

from __future__ import annotations

import contextlib
import logging
import sys
import time
from collections.abc import Callable, Iterator

STEPS = ("check", "backtest", "fit", "score", "plan", "forecast", "report", "history", "publish")


@contextlib.contextmanager
def steps_progress(title: str) -> Iterator[Callable[[str], None]]:
    """Yield a callback that marks the start of each named step.

    On a terminal, a rich progress bar over `STEPS`, with a bar per long step's sub-steps
    (`sub_steps`); otherwise one line per step on stderr with the seconds the previous step
    took, so logs of scheduled runs show where time went, and one line per sub-step.
    """
    if sys.stderr.isatty():
        from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

        with Progress(
            TextColumn("{task.description}"), BarColumn(), TimeElapsedColumn(), transient=True
        ) as progress:
            task = progress.add_task(title, total=len(STEPS))

            def step(name: str) -> None:
                done = STEPS.index(name) if name in STEPS else 0
                progress.update(task, completed=done, description=f"{title}: {name}")

            with sub_steps(progress):
                yield step
        return
    with sub_steps(None):
        yield from _step_lines()


def _step_lines() -> Iterator[Callable[[str], None]]:
    started = [time.perf_counter(), None]

    def step(name: str) -> None:
        now = time.perf_counter()
        if started[1] is not None:
            print(f"  {started[1]} took {now - started[0]:.1f}s", file=sys.stderr)
        started[0], started[1] = now, name

    yield step
    if started[1] is not None:
        print(f"  {started[1]} took {time.perf_counter() - started[0]:.1f}s", file=sys.stderr)


@contextlib.contextmanager
def task_progress() -> Iterator[None]:
    """The sub-steps of a single command's long step (fit, backtest, score): bars on a
    terminal, one line each on stderr otherwise."""
    if sys.stderr.isatty():
        from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

        with Progress(
            TextColumn("{task.description}"), BarColumn(), TimeElapsedColumn(), transient=True
        ) as progress:
            with sub_steps(progress):
                yield
        return
    with sub_steps(None):
        yield


@contextlib.contextmanager
def sub_steps(bars) -> Iterator[None]:
    """Show the records of the ``lifecycle.progress`` logger (`lifecycle._progress`): on the
    rich ``bars`` (one bar per stage: backtest, fit, hazards), or, when ``bars`` is None, as
    one line each on stderr."""
    logger = logging.getLogger("lifecycle.progress")
    handler = _SubSteps(bars)
    saved = logger.level, logger.propagate
    logger.addHandler(handler)
    logger.setLevel(logging.INFO)
    logger.propagate = False  # shown here, not again by the -v log
    try:
        yield
    finally:
        logger.removeHandler(handler)
        logger.setLevel(saved[0])
        logger.propagate = saved[1]


class _SubSteps(logging.Handler):
    def __init__(self, bars) -> None:
        super().__init__(logging.INFO)
        self.bars = bars
        self.tasks: dict[str, object] = {}

    def emit(self, record: logging.LogRecord) -> None:
        stage = getattr(record, "progress_stage", None)
        if stage is None:
            return
        text = record.getMessage()
        if self.bars is None:
            print(f"    {text}", file=sys.stderr)
            return
        total = max(int(record.progress_total), 1)
        if stage not in self.tasks:
            self.tasks[stage] = self.bars.add_task(text, total=total)
        self.bars.update(
            self.tasks[stage], completed=int(record.progress_done), total=total, description=text
        )
