"""Measuring one benchmark case: wall time and peak memory, each case in a fresh process.

Peak memory is the child's peak resident set size (``ru_maxrss``), so every case runs in its
own spawned process; otherwise the peak of an earlier case would hide a later one.
"""

from __future__ import annotations

import multiprocessing as mp
import resource
import time
import traceback
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any


@dataclass(frozen=True)
class Measurement:
    """One measured case of a benchmark."""

    suite: str
    case: str
    size: str
    seconds: float
    peak_mb: float
    note: str = ""
    role: str = "ours"  # "ours"; "plain": the plain approach ours is compared with; "figure":
    # a measured figure that takes part in no time ratio


def _child(fn: Callable[..., Any], kwargs: dict[str, Any], queue: mp.Queue) -> None:
    try:
        start = time.perf_counter()
        result = fn(**kwargs)
        seconds = time.perf_counter() - start
        note = result
        if isinstance(result, dict):  # the case timed its own core, leaving out its set-up
            seconds, note = result["seconds"], result.get("note")
        peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
        queue.put(("ok", seconds, peak_mb, "" if note is None else str(note)))
    except BaseException as exc:  # reported to the parent, which raises it, with where it was
        where = traceback.extract_tb(exc.__traceback__)[-3:]
        trail = " <- ".join(f"{Path(f.filename).name}:{f.lineno}" for f in reversed(where))
        queue.put(("error", 0.0, 0.0, f"{type(exc).__name__}: {exc} (at {trail})"))


def measure(
    suite: str,
    case: str,
    size: str,
    fn: Callable[..., Any],
    *,
    role: str = "ours",
    **kwargs: Any,
) -> Measurement:
    """Run ``fn(**kwargs)`` in a fresh process; time it and read its peak memory.

    ``fn`` must be importable (a module-level function) and its arguments picklable. Whatever
    ``fn`` returns is kept as the measurement's note (e.g. a count used to check equality); a
    returned ``{"seconds": s, "note": n}`` replaces the wall time by the time ``fn`` measured
    around its core (so generating synthetic input is not counted). Peak memory always covers
    the whole process, inputs included.
    The set-up a case needs (building its input) belongs inside ``fn`` only if it is part of
    what is measured; otherwise build the input on disk first and pass its path.
    """
    ctx = mp.get_context("spawn")
    queue = ctx.Queue()
    proc = ctx.Process(target=_child, args=(fn, kwargs, queue))
    proc.start()
    status, seconds, peak_mb, note = queue.get()
    proc.join()
    if status != "ok":
        raise RuntimeError(f"benchmark {suite}/{case} failed: {note}")
    return Measurement(suite, case, size, seconds, peak_mb, note, role)
