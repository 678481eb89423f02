"""CSV cells that a spreadsheet will not run as formulas.

A spreadsheet treats a cell that begins with ``=``, ``+``, ``-`` or ``@`` (and, in some
programs, a tab or a carriage return) as a formula, so an id or a name such as ``=HYPERLINK(...)``
written to a CSV file would run when the file is opened. Following the OWASP guidance on CSV
injection, every text cell (and column name) that begins with one of those characters is written
with a single quote in front (``'=HYPERLINK(...)``), which the spreadsheet shows as text. Numbers
are untouched: a numeric column is written as numbers, and a text cell that is a plain number
(``-3``, ``+1.5``) cannot run anything and stays as it is.
"""

from __future__ import annotations

import re

import pandas as pd

__all__ = ["safe_cell", "spreadsheet_safe"]

FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")
_PLAIN_NUMBER = re.compile(r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?")


def safe_cell(value: object) -> object:
    """``value`` with a single quote in front when it is text that a spreadsheet would read as
    a formula; anything else unchanged."""
    if isinstance(value, str) and value.startswith(FORMULA_STARTS):
        if not _PLAIN_NUMBER.fullmatch(value):
            return "'" + value
    return value


def spreadsheet_safe(frame: pd.DataFrame) -> pd.DataFrame:
    """A copy of ``frame`` whose text cells and column names are made safe with `safe_cell`
    (``frame`` itself is left alone; numeric, boolean and datetime columns are kept as they are)."""
    out = frame.copy(deep=False)
    for position in range(frame.shape[1]):
        column = frame.iloc[:, position]
        if isinstance(column.dtype, pd.CategoricalDtype):
            renamed = [safe_cell(c) for c in column.cat.categories]
            if len(set(renamed)) == len(renamed):
                column = column.cat.rename_categories(renamed)
            else:  # "=a" beside "'=a": write them as text
                column = column.astype(object).map(safe_cell, na_action="ignore")
        elif column.dtype == object or pd.api.types.is_string_dtype(column.dtype):
            column = column.map(safe_cell, na_action="ignore")
        out.isetitem(position, column)
    out.columns = [safe_cell(c) if isinstance(c, str) else c for c in frame.columns]
    return out
