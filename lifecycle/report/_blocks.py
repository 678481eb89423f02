"""Building blocks of the report page: sections, their blocks, and number formatting.

A section is a title, an id and a list of blocks; a block is a paragraph, a highlighted note,
a list, a figure (PNG bytes, embedded as a ``data:`` URI) or a table of formatted cells. The
template lays them out; nothing here knows about HTML escaping (the template escapes).
"""

from __future__ import annotations

import base64
import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np


@dataclass
class Cell:
    """One table cell: its text, whether it is a number (right-aligned), a CSS class."""

    text: str
    number: bool = False
    css: str = ""


@dataclass
class Block:
    """One element of a section (see the module docstring for the kinds)."""

    kind: str
    text: str = ""
    items: list[str] = field(default_factory=list)
    src: str = ""
    alt: str = ""
    header: list[str] = field(default_factory=list)
    rows: list[list[Cell]] = field(default_factory=list)
    row_css: list[str] = field(default_factory=list)


@dataclass
class Section:
    """A titled part of the page."""

    id: str
    title: str
    blocks: list[Block] = field(default_factory=list)

    def text(self, text: str) -> None:
        self.blocks.append(Block("text", text=text))

    def note(self, text: str) -> None:
        self.blocks.append(Block("note", text=text))

    def bullets(self, items: Iterable[str]) -> None:
        self.blocks.append(Block("list", items=list(items)))

    def heading(self, text: str) -> None:
        self.blocks.append(Block("heading", text=text))

    def figure(self, png: bytes, alt: str, caption: str = "") -> None:
        src = "data:image/png;base64," + base64.b64encode(png).decode("ascii")
        self.blocks.append(Block("figure", src=src, alt=alt, text=caption))

    def table(
        self,
        header: Sequence[str],
        rows: Sequence[Sequence[Cell | str]],
        caption: str = "",
        row_css: Sequence[str] | None = None,
    ) -> None:
        cells = [[c if isinstance(c, Cell) else Cell(str(c)) for c in row] for row in rows]
        css = list(row_css) if row_css is not None else [""] * len(cells)
        self.blocks.append(
            Block("table", text=caption, header=list(header), rows=cells, row_css=css)
        )


# -- formatting ------------------------------------------------------------------------------
DASH = "–"


def _finite(value: Any) -> bool:
    try:
        return value is not None and math.isfinite(float(value))
    except (TypeError, ValueError):
        return False


def count(value: Any) -> Cell:
    """A whole number with thousands separators."""
    return Cell(f"{round(float(value)):,}" if _finite(value) else DASH, number=True)


def number(value: Any, digits: int = 3) -> Cell:
    """A number with ``digits`` decimals."""
    return Cell(f"{float(value):,.{digits}f}" if _finite(value) else DASH, number=True)


def money(value: Any) -> Cell:
    """An amount with two decimals and thousands separators."""
    return Cell(f"{float(value):,.2f}" if _finite(value) else DASH, number=True)


def percent(value: Any, digits: int = 2) -> Cell:
    """A share as a percentage."""
    return Cell(f"{100.0 * float(value):.{digits}f} %" if _finite(value) else DASH, number=True)


def pct_text(value: Any, digits: int = 2) -> str:
    return percent(value, digits).text


def change(now: Any, before: Any) -> Cell:
    """``now − before`` with its relative size: ``+12 (+3.4 %)``."""
    if not (_finite(now) and _finite(before)):
        return Cell(DASH, number=True)
    diff = float(now) - float(before)
    text = f"{diff:+,.0f}"
    if float(before) != 0:
        text += f" ({100.0 * diff / float(before):+.1f} %)"
    return Cell(text, number=True)


# -- key figures -----------------------------------------------------------------------------
SIGNIFICANT = 6


def key_value(value: Any) -> Any:
    """A JSON-able value: numpy unwrapped, floats to 6 significant digits, NaN/inf as None."""
    if isinstance(value, dict):
        return {str(k): key_value(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [key_value(v) for v in value]
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, bool) or value is None or isinstance(value, str):
        return value
    if isinstance(value, int):
        return value
    if isinstance(value, float):
        if not math.isfinite(value):
            return None
        rounded = float(f"{value:.{SIGNIFICANT}g}")
        return rounded if rounded != 0 else 0.0
    return str(value)
