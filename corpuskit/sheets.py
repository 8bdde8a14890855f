"""CSV files people open in spreadsheets: every text cell is neutralised.

A cell that starts with = + - @, a tab or a carriage return is read by spreadsheet programs as a
formula (CSV injection, OWASP); such a cell gets a leading apostrophe, which the programs hide and
``restore_cell`` removes when a sheet is read back.  Numbers are written as they are.
"""
from __future__ import annotations

import csv
import io
from pathlib import Path
from typing import Iterable

__all__ = ["neutralise_cell", "restore_cell", "csv_text", "write_sheet"]

_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


def neutralise_cell(value: str) -> str:
    """Make a CSV cell safe to open in a spreadsheet.

    >>> neutralise_cell("=SUM(A1)"), neutralise_cell("kema")
    ("'=SUM(A1)", 'kema')
    """
    return "'" + value if value[:1] in _FORMULA_START else value


def restore_cell(value: str) -> str:
    """Undo ``neutralise_cell``: drop the quote a formula-looking cell was given."""
    return value[1:] if value.startswith("'") and value[1:2] in _FORMULA_START else value


def _cell(value):
    return neutralise_cell(value) if isinstance(value, str) else value


def csv_text(rows: Iterable[dict], columns: list[str] | None = None) -> str:
    """Rows as CSV text (LF line ends), text cells neutralised; the columns of the first row by default."""
    rows = list(rows)
    columns = columns or (list(rows[0]) if rows else ["empty"])
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=columns, lineterminator="\n", extrasaction="ignore")
    w.writeheader()
    for r in rows:
        w.writerow({k: _cell(v) for k, v in r.items()})
    return buf.getvalue()


def write_sheet(path: Path, rows: list[dict], columns: list[str]) -> None:
    """A review sheet: every cell written as text, neutralised."""
    Path(path).write_text(csv_text([{k: str(r.get(k, "")) for k in columns} for r in rows], columns), encoding="utf-8")
