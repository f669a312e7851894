"""The sheets of a workbook, with their sizes, and which one looks like a table.

Used before a workbook is read, so that the window can ask which sheet to
open.  Sizes come from each sheet's own dimension record (openpyxl in
read-only mode reads it without reading the cells), so listing is quick even
for large workbooks; a sheet without that record is counted by reading its
rows once.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from twofold.core.errors import DataFileError

WORKBOOK_SUFFIXES = (".xlsx", ".xlsm")


@dataclass(frozen=True)
class SheetInfo:
    name: str
    rows: int
    columns: int

    @property
    def looks_like_a_table(self) -> bool:
        """A header row and at least one record, in at least two columns."""
        return self.rows >= 2 and self.columns >= 2

    def describe(self) -> str:
        """"Admissions: 5,000 rows, 11 columns"."""
        return (f"{self.name}: {self.rows:,} row{'s' if self.rows != 1 else ''}, "
                f"{self.columns:,} column{'s' if self.columns != 1 else ''}")


def is_workbook(path) -> bool:
    return Path(path).suffix.lower() in WORKBOOK_SUFFIXES


def workbook_sheets(path) -> list[SheetInfo]:
    """Every worksheet of the workbook at ``path``, in order, with its size (rows include the header)."""
    import zipfile

    from openpyxl import load_workbook

    path = Path(path)
    try:
        book = load_workbook(path, read_only=True, data_only=True)
    except (zipfile.BadZipFile, KeyError, OSError, ValueError) as exc:
        raise DataFileError(f"The workbook {path.name} could not be opened ({type(exc).__name__}); open it in a "
                            "spreadsheet program to check it, or save it again as .xlsx or CSV.") from None
    try:
        out = []
        for ws in book.worksheets:
            rows, columns = ws.max_row, ws.max_column
            if rows is None or columns is None:  # no dimension record: count once
                rows = columns = 0
                for row in ws.iter_rows(values_only=True):
                    rows += 1
                    columns = max(columns, sum(1 for v in row if v is not None))
            out.append(SheetInfo(ws.title, int(rows or 0), int(columns or 0)))
        return out
    finally:
        book.close()


def likely_sheet(sheets: list[SheetInfo]) -> int:
    """The index of the first sheet that looks like a table (the first sheet when none does)."""
    return next((i for i, s in enumerate(sheets) if s.looks_like_a_table), 0)
