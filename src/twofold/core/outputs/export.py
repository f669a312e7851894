"""The coefficient table and the ladder table as CSV or XLSX files.

Headers are plain words; numbers are written as numbers (numeric cells in a
workbook, unquoted in CSV), missing or infinite ones as empty cells.  Any
text cell that a spreadsheet could read as a formula (beginning with =, +, -,
@, a tab or a carriage return, as listed by the OWASP guidance on CSV
injection) gets a leading single quote, so opening the file never runs
anything; a negative *number* stays a number, only text is changed.
"""

from __future__ import annotations

import csv
import io
import math
import os
import re
from pathlib import Path

from twofold.core.errors import DataFileError
from twofold.core.outputs.storage import atomic_write, atomic_write_bytes, refuse_writing_over, write_failure

#: Characters that make a spreadsheet treat a text cell as a formula (OWASP, CSV injection).
FORMULA_START = ("=", "+", "-", "@", "\t", "\r")

# The window's own words for the same figures.
COEFFICIENT_HEADERS = ["predictor", "group", "compared with", "odds ratio", "95% interval (Wald) low",
                       "95% interval (Wald) high", "p-value", "Wald z", "coefficient (log odds)", "standard error"]
PROFILE_HEADERS = ["95% interval (profile) low", "95% interval (profile) high"]
#: What the table describes, on every row, so a file read on its own says it.
ABOUT_HEADERS = ["outcome", "event", "fitted by"]
LADDER_HEADERS = ["model", "predictors", "chosen", "coefficients", "rows used", "log-likelihood", "AIC", "BIC",
                  "added", "removed", "likelihood-ratio G against the previous model", "degrees of freedom",
                  "p-value"]

#: Characters openpyxl refuses in a cell (control characters other than tab, newline, carriage return).
_ILLEGAL = re.compile(r"[\x00-\x08\x0b\x0c\x0e-\x1f]")

#: Display formats in the workbook (the stored values keep full precision).
_XLSX_FORMATS = {"odds ratio": "0.000", "95% interval (Wald) low": "0.000", "95% interval (Wald) high": "0.000",
                 "95% interval (profile) low": "0.000", "95% interval (profile) high": "0.000", "Wald z": "0.00",
                 "coefficient (log odds)": "0.0000", "standard error": "0.0000", "log-likelihood": "0.00",
                 "AIC": "0.0", "BIC": "0.0", "likelihood-ratio G against the previous model": "0.00"}


def neutralise(text: str) -> str:
    """Text that a spreadsheet shows as text: a leading ' before a formula-like start.

    Leading spaces are looked through, since some programs ignore them before
    a formula.
    """
    text = str(text)
    if text.lstrip(" ").startswith(FORMULA_START) or text.startswith(FORMULA_START):
        return "'" + text
    return text


def _cell(value):
    """A value for a table cell: a finite number, None (empty), or neutralised text."""
    import numpy as np

    if value is None:
        return None
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "no"
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        x = float(value)
        return x if math.isfinite(x) else None
    return neutralise(value)


def coefficient_table(record: dict) -> tuple[list[str], list[list]]:
    """Headers and rows of the coefficient table from a ``twofold fit`` record.

    One row per coefficient: the predictors first, then the intercept (its
    odds-ratio cells stay empty: it is the baseline log odds, not a ratio).
    """
    profile = any("or_pl_low" in t for t in record["terms"])
    headers = COEFFICIENT_HEADERS + (PROFILE_HEADERS if profile else []) + ABOUT_HEADERS
    about = [record["outcome"], record["event"], record.get("method", "maximum likelihood")]
    rows = []
    for t in record["terms"]:
        row = [t["column"], t["level"], t["reference"], t["odds_ratio"], t["or_ci_low"], t["or_ci_high"],
               t["p_value"], t["z"], t["estimate"], t["std_error"]]
        if profile:
            row += [t.get("or_pl_low"), t.get("or_pl_high")]
        rows.append(row + about)
    i = record["intercept"]
    row = ["intercept (baseline log odds)", None, None, None, None, None, i["p_value"], i["z"], i["estimate"],
           i["std_error"]]
    if profile:
        row += [None, None]
    rows.append(row + about)
    return headers, rows


def ladder_table(ladder) -> tuple[list[str], list[list]]:
    """Headers and rows of the model ladder (a :class:`~twofold.core.models.ladder.Ladder`)."""
    rows = []
    for k, rung in enumerate(ladder.rungs):
        t = rung.against_previous
        rows.append([
            k + 1, ", ".join(rung.predictors) or "(constant only)", "yes" if k == ladder.current else "",
            rung.fit.n_params, rung.fit.n_used, rung.fit.llf, rung.fit.aic, rung.fit.bic,
            ", ".join(rung.added), ", ".join(rung.removed),
            None if t is None else t.g, None if t is None else t.df, None if t is None else t.p_value,
        ])
    return list(LADDER_HEADERS), rows


def _write_csv(path, headers, rows) -> None:
    # utf-8-sig: the byte-order mark makes spreadsheet programs read the file as UTF-8.
    with open(path, "w", newline="", encoding="utf-8-sig") as fh:
        writer = csv.writer(fh, quoting=csv.QUOTE_MINIMAL)
        writer.writerow([neutralise(h) for h in headers])
        for row in rows:
            out = []
            for v in row:
                c = _cell(v)
                out.append("" if c is None else (repr(c) if isinstance(c, float) else c))
            writer.writerow(out)


def _sheet(book, title, headers, rows, first=False):
    from openpyxl.styles import Font

    ws = book.active if first else book.create_sheet()
    ws.title = title
    ws.append([_ILLEGAL.sub("", neutralise(h)) for h in headers])
    for cell in ws[1]:
        cell.font = Font(bold=True)
    for r, row in enumerate(rows, start=2):
        for j, v in enumerate(row, start=1):
            c = _cell(v)
            cell = ws.cell(row=r, column=j)
            if isinstance(c, str):
                # Set the type explicitly: openpyxl would otherwise take text beginning with = as a formula.
                cell.value = _ILLEGAL.sub("", c)
                cell.data_type = "s"
            else:
                cell.value = c
                fmt = _XLSX_FORMATS.get(headers[j - 1])
                if fmt and c is not None:
                    cell.number_format = fmt
    ws.freeze_panes = "A2"
    for j, h in enumerate(headers, start=1):
        width = max([len(str(h))] + [len(str(_cell(row[j - 1]) or "")) for row in rows[:200]])
        ws.column_dimensions[ws.cell(row=1, column=j).column_letter].width = min(max(10, width + 2), 60)
    return ws


def write_table(path, headers, rows, sheet: str = "coefficients", extra_sheets=(), data=None) -> Path:
    """Write one table to ``.csv`` or ``.xlsx`` (chosen by the suffix).

    Parameters
    ----------
    path : path
    headers : list of str
    rows : list of lists
    sheet : str
        Sheet title in a workbook.
    extra_sheets : sequence of (title, headers, rows)
        Further sheets (workbooks only).
    data : path, optional
        The data file, which is never overwritten.
    """
    path = Path(os.fspath(path))
    refuse_writing_over([path], [data])
    suffix = path.suffix.lower()
    if suffix not in (".csv", ".xlsx"):
        raise DataFileError(f"Twofold writes tables as .csv or .xlsx, not '{path.suffix or path.name}'; "
                            "end the file name with .csv or .xlsx.")
    try:
        if suffix == ".csv":
            atomic_write(path, lambda tmp: _write_csv(tmp, headers, rows))
        else:
            from openpyxl import Workbook

            book = Workbook()
            _sheet(book, sheet, headers, rows, first=True)
            for title, h, r in extra_sheets:
                _sheet(book, title, h, r)
            buffer = io.BytesIO()  # built in memory: a failed write leaves no half-closed workbook behind
            book.save(buffer)
            atomic_write_bytes(path, buffer.getvalue())
    except OSError as exc:
        raise write_failure(path, exc) from None
    return path


def export_coefficients(result, path, ladder=None) -> Path:
    """Write the coefficient table of an analysis (or of a ``twofold fit`` record) as CSV or XLSX.

    In a workbook, a given ladder adds a second sheet with the models tried.
    """
    record = result if isinstance(result, dict) else result.record
    data = None if isinstance(result, dict) else result.spec.data
    headers, rows = coefficient_table(record)
    extra = [("models",) + ladder_table(ladder)] if ladder is not None and getattr(ladder, "rungs", None) else []
    return write_table(path, headers, rows, "coefficients", extra, data=data)


def export_ladder(ladder, path, data=None) -> Path:
    """Write the ladder table (one row per model tried) as CSV or XLSX."""
    headers, rows = ladder_table(ladder)
    return write_table(path, headers, rows, "models", data=data)
