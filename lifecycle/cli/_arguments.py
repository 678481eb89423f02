"""Checks of command-line arguments that need no data: output paths and horizons.

Every command calls these before it reads a table, so that a mistyped option costs nothing
and nothing is written (exit code 2, one message).
"""

from __future__ import annotations

import os
from pathlib import Path

from ..errors import UsageError

MAX_HORIZON_MONTHS = 120
"""The longest horizon a command accepts (10 years). Scoring holds one row per customer and
month ahead, so a horizon of 100,000 months would need memory in proportion; 120 months is
already past any horizon a retention or product plan looks at."""


def horizons_argument(text: str, what: str = "--horizons") -> list[int]:
    """Whole months from a comma-separated list: each in 1..`MAX_HORIZON_MONTHS`, no repeats.

    Raises `UsageError` naming the bad value and what is allowed.
    """
    parts = [part.strip() for part in str(text).split(",") if part.strip()]
    try:
        values = [int(part) for part in parts]
    except ValueError:
        values = []
    allowed = f"whole months from 1 to {MAX_HORIZON_MONTHS}, comma-separated, e.g. 3,6,12"
    if not values:
        raise UsageError(f"{what} was {text!r} but must be {allowed}")
    bad = [v for v in values if not 1 <= v <= MAX_HORIZON_MONTHS]
    if bad:
        raise UsageError(
            f"{what} was {text!r}: {bad[0]} is outside 1..{MAX_HORIZON_MONTHS}; give {allowed}"
        )
    repeated = sorted({v for v in values if values.count(v) > 1})
    if repeated:
        raise UsageError(f"{what} was {text!r}: {repeated} given more than once; give each once")
    return values


def output_file(path: Path, what: str = "--out", *, example: str = "out.csv") -> Path:
    """Check that ``path`` can be written as a file: not an existing folder, its folder exists
    and is writable. Returns the path."""
    if path.is_dir():
        raise UsageError(
            f"{what} was {str(path)!r}, an existing folder, but a file is expected here; "
            f"give a file name, e.g. {str(path / example)!r}"
        )
    _writable_parent(path, what)
    return path


def output_folder(path: Path, what: str = "--out") -> Path:
    """Check that ``path`` can be written as a folder: not an existing file, and it (or, when
    it does not exist yet, its parent) is a writable folder. Returns the path."""
    if path.exists() and not path.is_dir():
        raise UsageError(
            f"{what} was {str(path)!r}, an existing file, but a folder is expected here; "
            "give a folder name (it is created if missing)"
        )
    if path.is_dir():
        _check_writable(path, what, path)
        return path
    _writable_parent(path, what)
    return path


def _writable_parent(path: Path, what: str) -> None:
    parent = path.absolute().parent
    if not parent.exists():
        raise UsageError(
            f"{what} was {str(path)!r} but its folder {str(parent)!r} does not exist; "
            "create it first (for example with mkdir -p) or choose another place"
        )
    if not parent.is_dir():
        raise UsageError(f"{what} was {str(path)!r} but {str(parent)!r} is a file, not a folder")
    _check_writable(parent, what, path)


def _check_writable(folder: Path, what: str, path: Path) -> None:
    if not os.access(folder, os.W_OK | os.X_OK):
        raise UsageError(
            f"{what} was {str(path)!r} but the folder {str(folder)!r} is not writable by this "
            "user; choose a folder you may write to"
        )
