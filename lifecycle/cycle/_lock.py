"""One run per reports folder: a file lock taken before any computation.

The lock is ``<reports>/run.lock`` (`filelock`, an operating-system lock that ends with the
process, so a killed run never blocks the next one); beside it ``run.lock.owner.json`` names
the holder (process id, host, start time) for the message a second run gives when it is
refused. The owner file is removed when the run ends.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import json
import logging
import os
import socket
from collections.abc import Iterator
from pathlib import Path

from filelock import FileLock, Timeout

from ..errors import RunLockedError

log = logging.getLogger(__name__)

LOCK = "run.lock"
OWNER = "run.lock.owner.json"


@contextlib.contextmanager
def run_lock(reports: Path) -> Iterator[None]:
    """Hold the reports folder's lock for the ``with`` block, or raise `RunLockedError` at
    once, naming the run that holds it.

    A lock file (and a reports folder) this call had to create is removed again if the block
    fails, so that a refused run leaves the reports folder as it was.
    """
    reports = Path(reports)
    created = not reports.exists()
    new_lock = not (reports / LOCK).exists()
    reports.mkdir(parents=True, exist_ok=True)
    lock = FileLock(str(reports / LOCK))
    try:
        lock.acquire(timeout=0)
    except Timeout:
        raise RunLockedError(
            f"another lifecycle run is writing to {reports} ({_holder(reports)}); wait for it to "
            "finish, or use another [run] reports folder"
        ) from None
    ok = False
    try:
        owner = {
            "pid": os.getpid(),
            "host": socket.gethostname(),
            "started": dt.datetime.now(dt.UTC).isoformat(timespec="seconds"),
        }
        (reports / OWNER).write_text(json.dumps(owner) + "\n", encoding="utf-8")
        yield
        ok = True
    finally:
        with contextlib.suppress(OSError):
            (reports / OWNER).unlink()
        lock.release()
        if new_lock and not ok:
            with contextlib.suppress(OSError):
                (reports / LOCK).unlink()
        if created and not ok:
            with contextlib.suppress(OSError):
                reports.rmdir()  # only if empty


def _holder(reports: Path) -> str:
    try:
        owner = json.loads((reports / OWNER).read_text(encoding="utf-8"))
        return f"process {owner['pid']} on {owner['host']}, started {owner['started']}"
    except (OSError, ValueError, KeyError, TypeError):
        return "its owner file is not readable yet"
