"""Atomic writes: a file appears whole or not at all.

Each writer writes to a temporary file in the destination's own folder (so the final rename
stays on one file system), flushes it to disk, then renames it over the destination with
`os.replace`, which is atomic on POSIX and Windows.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Callable, Iterator
from pathlib import Path

import pandas as pd


@contextlib.contextmanager
def atomic_path(dest: str | Path) -> Iterator[Path]:
    """Yield a temporary path beside ``dest``; on success rename it onto ``dest``.

    On any exception the temporary file is removed and ``dest`` is left as it was.
    """
    dest = Path(dest)
    dest.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp_name = tempfile.mkstemp(prefix=f".{dest.name}.", suffix=".part", dir=dest.parent)
    os.close(fd)
    tmp = Path(tmp_name)
    os.chmod(tmp, 0o666 & ~_umask())  # mkstemp makes 0600; give what open() would
    try:
        yield tmp
        with open(tmp, "rb+") as handle:
            os.fsync(handle.fileno())
        os.replace(tmp, dest)
    finally:
        if tmp.exists():
            tmp.unlink()


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def write_atomic(dest: str | Path, write: Callable[[Path], object]) -> Path:
    """Call ``write(tmp_path)`` and move the result onto ``dest`` atomically."""
    with atomic_path(dest) as tmp:
        write(tmp)
    return Path(dest)


def write_text_atomic(dest: str | Path, text: str) -> Path:
    """Write ``text`` (UTF-8, ``\\n`` line ends) to ``dest`` atomically."""
    return write_atomic(dest, lambda tmp: tmp.write_text(text, encoding="utf-8", newline="\n"))


def write_csv_atomic(dest: str | Path, frame: pd.DataFrame) -> Path:
    """Write ``frame`` as CSV without its index, atomically, with text cells that a spreadsheet
    would run as formulas quoted (`lifecycle._csv_safe.spreadsheet_safe`)."""
    from ._csv_safe import spreadsheet_safe

    safe = spreadsheet_safe(frame)
    return write_atomic(dest, lambda tmp: safe.to_csv(tmp, index=False, lineterminator="\n"))


def write_parquet_atomic(dest: str | Path, frame: pd.DataFrame) -> Path:
    """Write ``frame`` as Parquet (zstd, without the pandas index), atomically."""
    return write_atomic(dest, lambda tmp: frame.to_parquet(tmp, index=False, compression="zstd"))
