"""Reading data files: CSV, TSV and XLSX, read-only.

Only pandas is imported here (lazily), so opening a file never waits for the
model-fitting libraries.  Nothing in this module writes to the data file: it is
opened for reading only.
"""

from __future__ import annotations

import csv
import os
from dataclasses import dataclass, field
from pathlib import Path

from twofold.core.errors import DataFileError, Notice

#: Cell texts read as missing (compared after stripping white space).
MISSING_MARKERS = ("", "NA", "N/A", "n/a", "na", "NaN", "nan", "NAN", "null", "NULL",
                   "Null", ".", "#N/A", "None", "missing")

_MISSING_SET = frozenset(MISSING_MARKERS)
_DELIMITERS = [",", ";", "\t"]
_SNIFF_BYTES = 64 * 1024


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


def _sniff(sample: str, suffix: str) -> str:
    if suffix in (".tsv", ".tab"):
        return "\t"
    lines = [ln for ln in sample.splitlines() if ln.strip()][:50]
    if not lines:
        return ","
    try:
        dialect = csv.Sniffer().sniff("\n".join(lines), delimiters="".join(_DELIMITERS))
        return dialect.delimiter
    except csv.Error:
        # Fall back on the delimiter that splits the header into most fields.
        header = lines[0]
        return max(_DELIMITERS, key=header.count)


def _decode_sample(raw: bytes) -> tuple[str, str]:
    try:
        return raw.decode("utf-8-sig"), "utf-8-sig"
    except UnicodeDecodeError as exc:
        # A multi-byte character may be cut at the end of the sample.
        if exc.start >= len(raw) - 4:
            return raw[: exc.start].decode("utf-8-sig"), "utf-8-sig"
        return raw.decode("latin-1"), "latin-1"


def read_table(path, sheet: str | None = None) -> LoadedTable:
    """Read a CSV, TSV or XLSX file.

    Parameters
    ----------
    path : str or os.PathLike
        The data file.  ``.xlsx``/``.xlsm`` are read as workbooks, anything
        else as delimited text (comma, semicolon or tab, sniffed).
    sheet : str, optional
        For workbooks, the sheet to read (default: the first).

    Returns
    -------
    LoadedTable

    Raises
    ------
    DataFileError
        Missing, empty or unreadable file, or a sheet that does not exist.
    """
    import pandas as pd

    path = Path(os.fspath(path))
    _check_path(path)
    suffix = path.suffix.lower()
    notices: list[Notice] = []
    if suffix in (".xlsx", ".xlsm"):
        frame, sheet_used = _read_workbook(path, sheet)
        frame = _clean_frame(frame, path)
        return LoadedTable(frame, path, notices, sheet=sheet_used)
    if sheet is not None:
        raise DataFileError(
            f"{path.name} is a text file, so it has no sheet '{sheet}'; leave out the sheet name."
        )
    with open(path, "rb") as fh:
        raw = fh.read(_SNIFF_BYTES)
    sample, encoding = _decode_sample(raw)
    if encoding == "utf-8-sig":
        # The sample may be clean while a later byte is not: check the whole file.
        try:
            with open(path, encoding="utf-8-sig") as fh:
                for _ in iter(lambda: fh.read(1 << 22), ""):
                    pass
        except UnicodeDecodeError:
            encoding = "latin-1"
            sample = raw.decode("latin-1")
    if encoding == "latin-1":
        notices.append(Notice(
            "encoding",
            f"{path.name} is not UTF-8 text, so it was read as Latin-1 (Western European); "
            "check that accented letters look right.",
        ))
    delimiter = _sniff(sample, suffix)
    try:
        frame = pd.read_csv(
            path, sep=delimiter, encoding=encoding, na_values=list(MISSING_MARKERS),
            keep_default_na=False, skipinitialspace=True, low_memory=False,
        )
    except pd.errors.EmptyDataError:
        raise DataFileError(
            f"The file {path} has no header row or data; export the records again with a header row."
        ) from None
    except pd.errors.ParserError as exc:
        raise DataFileError(
            f"{path.name} could not be read as a table ({str(exc).strip().splitlines()[-1]}); "
            "check that every row has the same number of fields."
        ) from None
    frame = _clean_frame(frame, path)
    return LoadedTable(frame, path, notices, delimiter=delimiter, encoding=encoding)


def _read_workbook(path: Path, sheet: str | None):
    import pandas as pd

    try:
        book = pd.ExcelFile(path, engine="openpyxl")
    except Exception as exc:  # openpyxl raises many kinds for a damaged file
        raise DataFileError(
            f"{path.name} could not be opened as an Excel workbook ({type(exc).__name__}); "
            "save it again as .xlsx or export it as CSV."
        ) from None
    names = book.sheet_names
    if sheet is None:
        sheet = names[0]
    elif sheet not in names:
        raise DataFileError(
            f"{path.name} has no sheet named '{sheet}'; its sheets are: {', '.join(names)}."
        )
    frame = pd.read_excel(book, sheet_name=sheet, na_values=list(MISSING_MARKERS), keep_default_na=False)
    return frame, sheet


def _clean_frame(frame, path: Path):
    """Strip text cells and headers, and turn whitespace-only text into missing."""
    import numpy as np
    import pandas as pd

    if frame.shape[1] == 0:
        raise DataFileError(f"The file {path} has no columns; export it again with a header row.")
    frame.columns = [str(c).strip() for c in frame.columns]
    for name in frame.columns:
        col = frame[name]
        if pd.api.types.is_string_dtype(col.dtype) and col.dtype != object:
            stripped = col.str.strip()
            frame[name] = stripped.mask(stripped.isin(MISSING_MARKERS))
        elif col.dtype == object:
            # Workbooks give mixed cells: strip the text ones, keep numbers as they are.
            def clean(v):
                if isinstance(v, str):
                    v = v.strip()
                    return np.nan if v in _MISSING_SET else v
                return v
            frame[name] = col.map(clean)
    return frame
