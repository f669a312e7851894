"""Reading data files: CSV, TSV and XLSX, read-only.

Only pandas (and python-calamine, for workbooks) is imported here, lazily, so opening
a file never waits for the model-fitting libraries.  Nothing in this module
writes to the data file: it is opened for reading only.

Real extracts are messy, so reading does more than call pandas:

* the encoding is UTF-8 (with or without a byte-order mark), UTF-16 with a
  byte-order mark, or else Windows Western European / Latin-1 (with a notice);
* the delimiter (comma, semicolon, tab) is chosen by which one splits the
  first records into the most fields most consistently; an Excel ``sep=;``
  hint line is honoured;
* the header is the first non-empty row; a lone title above it is skipped;
* blank column names become ``column 3`` and repeated ones ``x (2)``;
  columns with neither a name nor a value, and rows with no value at all,
  are left out;
* text cells are stripped, and missing markers (``NA``, ``.``, ...) and
  Excel error cells (``#DIV/0!``) become missing;
* a text column whose every cell is a number is read as numbers: stored as
  text (`` 12 ``), with thousands separators (``1,234``) or, in
  semicolon files, with a decimal comma (``1,5`` or ``1.234,5``);
* in a column with few values, spellings that differ only in capitals or
  spaces (``Yes``/``yes``/``YES``) are taken as one value;
* ``TRUE``/``FALSE`` with missing cells become 1/0 numbers.

Each of these is reported as a :class:`~twofold.core.errors.Notice` on the
returned table, so the user can see what was done; a file that cannot be read
raises one :class:`~twofold.core.errors.DataFileError` sentence.

Speed: text columns that repeat few values are parsed by pandas as
categories (the tokenizer then builds each distinct string once), and all
per-value work (stripping, number checks) runs on the distinct values only.

The work is split over four modules: this one (the entry point
:func:`read_table`, the shared constants, path checks and progress reports),
:mod:`twofold.core.data.read_text` (text files),
:mod:`twofold.core.data.read_workbook` (XLSX workbooks) and
:mod:`twofold.core.data.tidy` (cleaning the columns once read).
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path

from twofold.core.errors import DataFileError, Notice, TwofoldError

#: Cell texts read as missing (compared after stripping white space).
MISSING_MARKERS = ("", "NA", "N/A", "n/a", "na", "NaN", "nan", "NAN", "null", "NULL",
                   "Null", ".", "#N/A", "None", "missing")

#: Error values Excel shows in cells whose formula failed; read as missing.
EXCEL_ERRORS = ("#DIV/0!", "#VALUE!", "#REF!", "#NAME?", "#NUM!", "#NULL!", "#N/A",
                "#SPILL!", "#CALC!", "#GETTING_DATA")

#: Rows read first to decide how each column is parsed.
SAMPLE_ROWS = 10_000


class ReadCancelled(TwofoldError):
    """Reading was stopped by the progress callback before the end of the file."""


@dataclass
class LoadedTable:
    """A data file read into memory.

    Attributes
    ----------
    frame : pandas.DataFrame
        The cells, missing markers turned into missing values.
    path : pathlib.Path
        Where it came from.
    notices : list of Notice
        Things worth telling the user about the reading (e.g. encoding).
    delimiter : str or None
        The delimiter found for text files.
    encoding : str or None
        The text encoding used for text files.
    sheet : str or None
        The sheet read for workbooks.
    """

    frame: object
    path: Path
    notices: list = field(default_factory=list)
    delimiter: str | None = None
    encoding: str | None = None
    sheet: str | None = None

    @property
    def n_rows(self) -> int:
        return len(self.frame)


# ---------------------------------------------------------------- entry point
def read_table(path, sheet: str | None = None, progress=None) -> LoadedTable:
    """Read a CSV, TSV or XLSX file.

    Parameters
    ----------
    path : str or os.PathLike
        The data file.  Workbooks (any zip-packaged file, whatever its name)
        are read by :mod:`twofold.core.data.read_workbook`, anything else as
        delimited text (also a text file named ``.xlsx``, with a notice).
    sheet : str, optional
        For workbooks, the sheet to read (default: the first).
    progress : callable, optional
        Called as ``progress(fraction)`` with a fraction of the file read, from
        0 to 1.  Returning ``False`` or raising stops the reading with
        :class:`ReadCancelled`.  Text files are then read in chunks; without a
        callback they are read in one go, which is fastest.

    Returns
    -------
    LoadedTable

    Raises
    ------
    DataFileError
        Missing, empty or unreadable file (damaged, or protected by a password), a
        sheet that does not exist, or one larger than a workbook may be.
    ReadCancelled
        The progress callback asked to stop.
    """
    path = Path(os.fspath(path))
    try:
        return _read(path, sheet, progress)
    except MemoryError:
        # Anywhere in reading or tidying: the file, or a copy of a column, did not fit.
        raise too_large_error(path) from None


def too_large_error(path: Path) -> DataFileError:
    """The sentence for a file too large for this computer's memory."""
    return DataFileError(
        f"{path.name} is too large for this computer's memory; close other programs, "
        "or export only the columns and rows you need."
    )


def _read(path: Path, sheet, progress) -> LoadedTable:
    from twofold.core.data.read_text import read_text
    from twofold.core.data.read_workbook import locked_workbook, read_workbook

    _check_path(path)
    with open_for_reading(path) as fh:
        magic = fh.read(8)
    if magic.startswith(b"PK\x03\x04"):
        frame, sheet_used, notices = read_workbook(path, sheet, progress)
        return LoadedTable(frame, path, notices, sheet=sheet_used)
    if magic.startswith(b"\xd0\xcf\x11\xe0"):
        if is_encrypted_workbook(path):
            raise locked_workbook(path)
        raise DataFileError(
            f"{path.name} is an old-style Excel 97-2003 workbook (.xls), which Twofold cannot read; "
            "open it in Excel and save it as .xlsx or CSV."
        )
    renamed = path.suffix.lower() in (".xlsx", ".xlsm")
    if renamed and not _looks_like_text(path):
        raise DataFileError(
            f"{path.name} is named like an Excel workbook but is not one (it may be damaged or a renamed file); "
            "open it in Excel and save it again as .xlsx, or export it as CSV."
        )
    if sheet is not None:
        raise DataFileError(
            f"{path.name} is a text file, so it has no sheet '{sheet}'; leave out the sheet name."
        )
    table = read_text(path, progress)
    if renamed:  # a CSV saved under a workbook's name: read as what it is
        table.notices.insert(0, Notice("renamed", f"{path.name} is named like an Excel workbook but holds "
                                                  "text (a CSV file), so it was read as text."))
    return table


def _looks_like_text(path: Path) -> bool:
    """Whether a file's start is text (no NUL bytes, decodes as UTF-8, UTF-16 with its mark, or Latin-1)."""
    with open_for_reading(path) as fh:
        head = fh.read(65536)
    if head.startswith((b"\xff\xfe", b"\xfe\xff")):
        return True
    if b"\x00" in head:
        return False
    controls = sum(1 for b in head if b < 32 and b not in (9, 10, 13))
    return controls <= len(head) // 1000


def is_encrypted_workbook(path: Path) -> bool:
    """Whether a compound file holds a password-encrypted Office document (its 'EncryptedPackage' stream)."""
    name = "EncryptedPackage".encode("utf-16-le")
    tail = b""
    with open_for_reading(path) as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            if name in tail + block:
                return True
            tail = block[-len(name):]
    return False


def _check_path(path: Path) -> None:
    if not path.exists():
        raise DataFileError(
            f"The file {path} does not exist; check the name and folder and try again."
        )
    if path.is_dir():
        raise DataFileError(f"{path} is a folder, not a data file; choose a CSV, TSV or XLSX file.")
    if path.stat().st_size == 0:
        raise DataFileError(
            f"The file {path} is empty; export the records again with a header row and at least one data row."
        )


def open_for_reading(path: Path):
    """Open a data file for reading in binary, or raise a DataFileError saying why not."""
    try:
        return open(path, "rb")
    except OSError as exc:
        raise DataFileError(
            f"{path.name} could not be opened ({exc.strerror or type(exc).__name__}); "
            "close it in any program that has it open, check you may read it, and try again."
        ) from None


def report_progress(progress, fraction: float, path: Path) -> None:
    """Pass progress on; stop with ReadCancelled if the callback says so."""
    if progress is None:
        return
    try:
        answer = progress(min(max(float(fraction), 0.0), 1.0))
    except ReadCancelled:
        raise
    except Exception as exc:  # any exception from the caller means: stop
        raise ReadCancelled(f"Reading {path.name} was stopped before the end; open it again to read it all.") from exc
    if answer is False:
        raise ReadCancelled(f"Reading {path.name} was stopped before the end; open it again to read it all.")
