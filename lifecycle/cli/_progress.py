"""A progress display for the steps of a run (rich), quiet when output is not a terminal."""

from __future__ import annotations

import contextlib
import sys
import time
from collections.abc import Callable, Iterator

STEPS = ("check", "backtest", "fit", "score", "plan", "forecast", "report", "history", "publish")


@contextlib.contextmanager
def steps_progress(title: str) -> Iterator[Callable[[str], None]]:
    """Yield a callback that marks the start of each named step.

    On a terminal, a rich progress bar over `STEPS`; otherwise one line per step on stderr
    with the seconds the previous step took, so logs of scheduled runs show where time went.
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

            yield step
        return
    started = [time.perf_counter(), None]

    def step(name: str) -> None:
        now = time.perf_counter()
        if started[1] is not None:
            print(f"  {started[1]} took {now - started[0]:.1f}s", file=sys.stderr)
        started[0], started[1] = now, name

    yield step
    if started[1] is not None:
        print(f"  {started[1]} took {time.perf_counter() - started[0]:.1f}s", file=sys.stderr)
