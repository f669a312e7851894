"""Reading XLSX workbooks for :func:`twofold.core.data.io.read_table`.

The sheet is read with openpyxl (values only, as last saved).  Its XML is
scanned for formulas and merged cells: formulas without a saved result get a
notice, and a merged block's value is copied into every cell it covers.
"""

from __future__ import annotations

import re
import warnings
from pathlib import Path

from twofold.core.errors import DataFileError, Notice
from twofold.core.data.io import report_progress
from twofold.core.data.read_text import filled_count, header_after_gap, looks_like_names
from twofold.core.data.tidy import cell_text, plural, shorten, tidy_frame, unique_names

_FORMULA_TAG = re.compile(rb"<(?:\w+:)?f[\s>/]")
_MERGE_TAG = re.compile(rb"<(?:\w+:)?mergeCell\s+ref=\"\$?([A-Z]+)\$?(\d+)(?::\$?([A-Z]+)\$?(\d+))?\"")


def read_workbook(path: Path, sheet: str | None, progress):
    """Read one sheet of a workbook; returns (frame, sheet name, notices)."""
    book = _open_book(path, data_only=True)
    try:
        names = book.sheetnames
        if sheet is None:
            sheet = names[0]
        elif sheet not in names:
            folded = {n.casefold().strip(): n for n in names}
            if sheet.casefold().strip() not in folded:
                raise DataFileError(
                    f"{path.name} has no sheet named '{sheet}'; its sheets are: {', '.join(names)}."
                )
            sheet = folded[sheet.casefold().strip()]
        ws = book[sheet]
        if not hasattr(ws, "iter_rows"):
            raise DataFileError(f"The sheet '{sheet}' of {path.name} is a chart, not a table; choose another sheet.")
        expected = ws.max_row or 0
        ws.reset_dimensions()  # the stored size may be wrong: read every row there is
        rows = []
        for i, row in enumerate(ws.iter_rows(min_row=1, min_col=1, values_only=True)):
            rows.append(row)
            if progress is not None and i % 2000 == 1999:
                report_progress(progress, 0.8 * min(i / max(expected, 1), 1.0), path)
        part = getattr(ws, "_worksheet_path", None)
    except DataFileError:
        raise
    except Exception as exc:  # a damaged sheet
        raise DataFileError(
            f"The sheet '{sheet}' of {path.name} could not be read ({type(exc).__name__}); "
            "save the workbook again in Excel, or export the sheet as CSV."
        ) from None
    finally:
        book.close()
    has_formulas, merges = _scan_sheet_xml(path, part)
    notices: list[Notice] = []
    if has_formulas:
        notices.extend(_formulas_without_values(path, sheet, rows))
    where = f"sheet '{sheet}' of {path.name}"
    others = [n for n in names if n != sheet]
    hint = ("choose the sheet that holds the records (the others are: " + ", ".join(others) + ")") if others \
        else "put the records in it with a row of column names above them"
    frame, generated, shape_notices = _frame_from_rows(rows, merges, where, hint)
    notices.extend(shape_notices)
    frame, tidy_notices = tidy_frame(frame, where, "xlsx", generated)
    notices.extend(tidy_notices)
    report_progress(progress, 1.0, path)
    return frame, sheet, notices


def _open_book(path: Path, data_only: bool):
    import openpyxl

    try:
        with warnings.catch_warnings():
            # openpyxl warns about workbook features it ignores (data validation, styles).
            warnings.simplefilter("ignore")
            return openpyxl.load_workbook(path, read_only=True, data_only=data_only)
    except Exception as exc:  # openpyxl raises many kinds for a damaged file
        raise DataFileError(
            f"{path.name} could not be opened as an Excel workbook ({type(exc).__name__}); "
            "save it again as .xlsx or export it as CSV."
        ) from None


def _scan_sheet_xml(path: Path, part: str | None):
    """Whether the sheet holds formulas, and its merged ranges as (col0, row0, col1, row1), 1-based."""
    import zipfile

    from openpyxl.utils import column_index_from_string

    if not part:
        return False, []
    formulas = False
    merges = set()
    try:
        with zipfile.ZipFile(path) as z, z.open(part.lstrip("/")) as fh:
            tail = b""
            for block in iter(lambda: fh.read(1 << 22), b""):
                data = tail + block
                formulas = formulas or bool(_FORMULA_TAG.search(data))
                for m in _MERGE_TAG.finditer(data):
                    c0, r0, c1, r1 = m.groups()
                    merges.add((column_index_from_string(c0.decode()), int(r0),
                                column_index_from_string((c1 or c0).decode()), int(r1 or r0)))
                # Keep the end of the block, so that a tag cut in two is still found.
                tail = data[-200:]
    except (KeyError, OSError, ValueError, zipfile.BadZipFile):
        return False, []
    return formulas, sorted(merges)


def _formulas_without_values(path: Path, sheet: str, rows) -> list:
    """A notice for formula cells with no saved result (files written by programs that do not calculate)."""
    from openpyxl.utils import get_column_letter

    book = _open_book(path, data_only=False)
    missing, example = 0, None
    try:
        ws = book[sheet]
        ws.reset_dimensions()
        for i, row in enumerate(ws.iter_rows(min_row=1, min_col=1, values_only=True)):
            shown = rows[i] if i < len(rows) else ()
            for j, v in enumerate(row):
                if v is None or (j < len(shown) and shown[j] is not None):
                    continue
                if (isinstance(v, str) and v.startswith("=")) or type(v).__name__ in ("ArrayFormula",
                                                                                      "DataTableFormula"):
                    missing += 1
                    if example is None:
                        text = v if isinstance(v, str) else getattr(v, "text", "") or ""
                        example = f"{get_column_letter(j + 1)}{i + 1}, {shorten(text, 30)}"
    finally:
        book.close()
    if not missing:
        return []
    one = missing == 1
    return [Notice("formulas", f"In sheet '{sheet}' of {path.name}, {plural(missing, 'cell')} "
                   f"{'holds a formula' if one else 'hold formulas'} with no saved result "
                   f"(for example {example}), so {'it was' if one else 'they were'} read as empty; "
                   "open the file in Excel, save it, and open it here again.")]


def _frame_from_rows(rows, merges, where: str, hint: str):
    """The table in a sheet's rows: header at the first non-empty row, titles skipped, empty edges trimmed.

    Returns (frame of object columns, names made up for blank names, notices).
    """
    import numpy as np
    import pandas as pd

    def blank(v):
        return v is None or (isinstance(v, str) and not v.strip())

    notices: list[Notice] = []
    width = max((len(r) for r in rows), default=0)
    filled = [list(r) + [None] * (width - len(r)) for r in rows]
    # A merged block shows its top-left value over the whole block.
    for c0, r0, c1, r1 in merges:
        if r0 > len(filled) or c0 > width:
            continue
        value = filled[r0 - 1][c0 - 1]
        for r in range(r0 - 1, min(r1, len(filled))):
            for c in range(c0 - 1, min(c1, width)):
                if filled[r][c] is None:
                    filled[r][c] = value
    nonempty = [i for i, r in enumerate(filled) if any(not blank(v) for v in r)]
    if not nonempty:
        raise DataFileError(f"The {where} is empty; {hint}.")
    # Titles: one value, or one merged block across the top, above a row of names.
    merged_across = {r0 for c0, r0, c1, r1 in merges if c1 > c0}

    def lone(i):
        values = {str(v) for v in filled[i] if not blank(v)}
        return len(values) == 1 and (filled_count(filled[i]) == 1 or i + 1 in merged_across)

    k = 0
    while k + 1 < len(nonempty) and lone(nonempty[k]) and filled_count(filled[nonempty[k + 1]]) >= 2 \
            and looks_like_names(filled[nonempty[k + 1]]):
        k += 1
    k = header_after_gap(filled, nonempty, k)
    if k:
        title = " ".join(dict.fromkeys(str(v).strip() for v in filled[nonempty[k - 1]] if not blank(v)))
        notices.append(Notice("title_row", f"Row {nonempty[k - 1] + 1} of {where} ({shorten(str(title))!r}) looks "
                              f"like a title, so the column names were taken from row {nonempty[k] + 1}."))
    h = nonempty[k]
    header, data = filled[h], filled[h + 1:]
    header_rows = 1
    # Two header rows: a name merged across columns above their sub-names,
    # told apart from data because the row below it holds numbers or dates.
    spans = [(c0 - 1, min(c1, width)) for c0, r0, c1, r1 in merges if r0 == h + 1 and r1 == r0 and c1 > c0]
    if spans and len(data) >= 2 and looks_like_names(data[0]) and not looks_like_names(data[1]) \
            and all(any(isinstance(data[0][c], str) for c in range(a, b)) for a, b in spans):
        under = {c for a, b in spans for c in range(a, b)}
        sub = data[0]
        header = [
            f"{cell_text(top)} {cell_text(low)}" if j in under and not blank(low) and not blank(top)
            and str(top).strip() != str(low).strip()
            else (cell_text(top) if not blank(top) else cell_text(low))
            for j, (top, low) in enumerate(zip(header, sub))
        ]
        data = data[1:]
        header_rows = 2
        notices.append(Notice("two_header_rows", f"The column names in {where} take two rows, the upper one "
                              f"merged across columns, so each name joins the two (e.g. {header[spans[0][0]]!r})."))
    if any(r1 > h + header_rows and (r1 > r0 or c1 > c0) for c0, r0, c1, r1 in merges):
        notices.append(Notice("merged_cells", f"Some cells of {where} are merged; each merged block's value was "
                              "copied into every cell it covers."))
    # Trim empty edges: trailing rows, and columns empty in the header and below.
    while data and all(blank(v) for v in data[-1]):
        data.pop()
    used = [j for j in range(width) if not blank(header[j]) or any(not blank(r[j]) for r in data)]
    if not used:
        raise DataFileError(f"The {where} has no columns; {hint}.")
    first, last = used[0], used[-1]
    raw_names = ["" if blank(header[j]) else cell_text(header[j]) for j in range(first, last + 1)]
    # A blank name is numbered by its spreadsheet column, so 'column 3' is column C.
    names, generated, name_notices = unique_names(raw_names, where, list(range(first + 1, last + 2)))
    notices.extend(name_notices)
    if not data:
        raise DataFileError(f"The {where} has column names but no data rows; {hint}.")
    columns = {}
    for j, name in zip(range(first, last + 1), names):
        values = np.empty(len(data), dtype=object)
        values[:] = [r[j] for r in data]
        columns[name] = pd.Series(values, dtype=object, name=name)
    return pd.DataFrame(columns), generated, notices
