"""The command line (``lifecycle --help``)."""

from ._main import main

__all__ = ["main"]
