"""CSV outputs are safe to open in a spreadsheet (OWASP, "CSV Injection": prefix cells that
begin with =, +, -, @, tab or carriage return with a single quote)."""

from __future__ import annotations

import csv

import numpy as np
import pandas as pd

from lifecycle._csv_safe import safe_cell, spreadsheet_safe
from lifecycle._files import write_csv_atomic


def _rows(path):
    with open(path, newline="", encoding="utf-8") as handle:
        return list(csv.reader(handle))


def test_formula_cells_are_quoted_and_numbers_untouched(tmp_path):
    frame = pd.DataFrame(
        {
            "customer_id": [
                '=HYPERLINK("http://x")',
                "+A1",
                "-2+3",
                "@SUM(A1)",
                "\tx",
                "\ty",
                "ok",
            ],
            "offer": pd.Categorical(["=cmd", "b", "b", "b", "b", "b", "-3"]),
            "amount": [-1.5, 2.0, -3.0, 4.0, 5.0, 6.0, np.nan],
            "count": np.array([-1, 0, 1, 2, 3, 4, 5], dtype=np.int64),
            "=header": ["-7", "+1.5", "- 1", "a=b", None, "", "-1e3"],
        }
    )
    before = frame.copy()
    out = write_csv_atomic(tmp_path / "t.csv", frame)
    pd.testing.assert_frame_equal(frame, before)  # the caller's frame is left alone
    rows = _rows(out)
    assert rows[0] == ["customer_id", "offer", "amount", "count", "'=header"]
    ids = [r[0] for r in rows[1:]]
    assert ids == ['\'=HYPERLINK("http://x")', "'+A1", "'-2+3", "'@SUM(A1)", "'\tx", "'\ty", "ok"]
    assert [r[1] for r in rows[1:]] == ["'=cmd", "b", "b", "b", "b", "b", "-3"]
    # numbers stay numbers: a negative amount is written as -1.5, not '-1.5
    assert [r[2] for r in rows[1:]] == ["-1.5", "2.0", "-3.0", "4.0", "5.0", "6.0", ""]
    assert [r[3] for r in rows[1:]] == ["-1", "0", "1", "2", "3", "4", "5"]
    # text that is a plain number cannot run anything and is kept; "- 1" is not a number
    assert [r[4] for r in rows[1:]] == ["-7", "+1.5", "'- 1", "a=b", "", "", "-1e3"]
    back = pd.read_csv(out)
    assert back["amount"].dtype == float and back["amount"].iloc[0] == -1.5


def test_safe_cell_leaves_other_values_alone():
    assert safe_cell(-3) == -3 and safe_cell(None) is None and safe_cell("a-b") == "a-b"
    assert safe_cell("\rx") == "'\rx"  # a carriage return too (checked on the cell: the CSV
    # writer does not quote a lone carriage return inside a cell)
    assert safe_cell("'=x") == "'=x"  # already quoted: begins with a quote, not a formula sign


def test_categorical_clash_falls_back_to_text():
    frame = pd.DataFrame({"c": pd.Categorical(["=a", "'=a"])})
    assert spreadsheet_safe(frame)["c"].tolist() == ["'=a", "'=a"]


def test_every_csv_writer_goes_through_the_one_safe_function():
    """No module writes CSV except `lifecycle._files.write_csv_atomic` (which makes it safe)."""
    from pathlib import Path

    import lifecycle

    root = Path(lifecycle.__file__).parent
    writers = [
        str(p.relative_to(root))
        for p in root.rglob("*.py")
        if p.name != "_files.py" and (".to_csv(" in p.read_text() or "csv.writer" in p.read_text())
    ]
    assert writers == []
