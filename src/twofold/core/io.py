"""Reading data files: CSV, TSV and XLSX, read-only.

Only pandas (and openpyxl, for workbooks) is imported here, lazily, so opening
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
"""

from __future__ import annotations

import csv
import io
import operator
import os
import re
import warnings
from dataclasses import dataclass, field
from pathlib import Path

from twofold.core.errors import DataFileError, Notice, TwofoldError
from twofold.core.roles import remember_factors

#: Cell texts read as missing (compared after stripping white space).
MISSING_MARKERS = ("", "NA", "N/A", "n/a", "na", "NaN", "nan", "NAN", "null", "NULL",
                   "Null", ".", "#N/A", "None", "missing")

#: Error values Excel shows in cells whose formula failed; read as missing.
EXCEL_ERRORS = ("#DIV/0!", "#VALUE!", "#REF!", "#NAME?", "#NUM!", "#NULL!", "#N/A",
                "#SPILL!", "#CALC!", "#GETTING_DATA")

_MISSING_SET = frozenset(MISSING_MARKERS)
_ERROR_SET = frozenset(EXCEL_ERRORS) - _MISSING_SET
_DELIMITERS = (",", ";", "\t")
_SNIFF_BYTES = 64 * 1024
#: Rows read first to decide how each column is parsed.
_SAMPLE_ROWS = 10_000
#: A text column whose sample repeats values this much is parsed as categories.
_REPEAT_SHARE = 0.2
#: Text columns with at most this many values in the sample may be parsed as categories.
_CATEGORY_MAX = 30
#: Case/space variants are merged only in columns with at most this many values.
_MERGE_MAX_LEVELS = 100

# Numbers as people write them.  Plain numbers are left to pandas.
_US_THOUSANDS = re.compile(r"^[+-]?(?:\d{1,3}(?:,\d{3})+|\d+)(?:\.\d+)?$")
_EU_DECIMAL = re.compile(r"^[+-]?(?:\d{1,3}(?:\.\d{3})+|\d+)(?:,\d+)?$")
_SEP_HINT = re.compile(r"^\s*sep=(.)\s*$")


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
        The data file.  Workbooks (``.xlsx``/``.xlsm``, or any zip-packaged
        file) are read with openpyxl, anything else as delimited text.
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
        Missing, empty or unreadable file, or a sheet that does not exist.
    ReadCancelled
        The progress callback asked to stop.
    """
    path = Path(os.fspath(path))
    _check_path(path)
    with _open_for_reading(path) as fh:
        magic = fh.read(8)
    if magic.startswith(b"PK\x03\x04"):
        frame, sheet_used, notices = _read_workbook(path, sheet, progress)
        return LoadedTable(frame, path, notices, sheet=sheet_used)
    if magic.startswith(b"\xd0\xcf\x11\xe0"):
        raise DataFileError(
            f"{path.name} is an old-style Excel 97-2003 workbook (.xls), which Twofold cannot read; "
            "open it in Excel and save it as .xlsx or CSV."
        )
    if path.suffix.lower() in (".xlsx", ".xlsm"):
        raise DataFileError(
            f"{path.name} is named like an Excel workbook but is not one (it may be damaged or a renamed file); "
            "open it in Excel and save it again as .xlsx, or export it as CSV."
        )
    if sheet is not None:
        raise DataFileError(
            f"{path.name} is a text file, so it has no sheet '{sheet}'; leave out the sheet name."
        )
    return _read_text(path, progress)


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


def _open_for_reading(path: Path):
    try:
        return open(path, "rb")
    except OSError as exc:
        raise DataFileError(
            f"{path.name} could not be opened ({exc.strerror or type(exc).__name__}); "
            "close it in any program that has it open, check you may read it, and try again."
        ) from None


def _report(progress, fraction: float, path: Path) -> None:
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


# ---------------------------------------------------------------- text files
def _encoding_of(head: bytes) -> str:
    """The encoding to try first ('' when the start is not UTF-8), from the byte-order mark and the first bytes."""
    if head.startswith(b"\xef\xbb\xbf"):
        return "utf-8-sig"
    if head.startswith((b"\xff\xfe", b"\xfe\xff")):
        return "utf-16"
    try:
        head.decode("utf-8")
    except UnicodeDecodeError as exc:
        # A multi-byte character may be cut at the end of the sample.
        if exc.start < len(head) - 4:
            return ""
    return "utf-8"


def _single_byte_encoding(path: Path) -> str:
    """cp1252 when the file uses its printable characters in 0x80-0x9F (e.g. curly quotes), else Latin-1."""
    c1 = re.compile(rb"[\x80-\x9f]")
    undefined = re.compile(rb"[\x81\x8d\x8f\x90\x9d]")
    found = False
    with _open_for_reading(path) as fh:
        for block in iter(lambda: fh.read(1 << 23), b""):
            if undefined.search(block):
                return "latin-1"
            found = found or bool(c1.search(block))
    return "cp1252" if found else "latin-1"


def _read_text(path: Path, progress) -> LoadedTable:
    with _open_for_reading(path) as fh:
        head = fh.read(_SNIFF_BYTES)
    if b"\x00" in head and not head.startswith((b"\xff\xfe", b"\xfe\xff")):
        raise DataFileError(
            f"{path.name} does not look like a text table (it holds binary data); "
            "export the records as CSV or as an Excel .xlsx workbook."
        )
    encoding = _encoding_of(head) or _single_byte_encoding(path)
    try:
        return _read_text_as(path, encoding, progress)
    except UnicodeError:
        if encoding not in ("utf-8", "utf-8-sig"):
            raise DataFileError(
                f"{path.name} could not be decoded as {encoding} text; save it again as UTF-8 CSV."
            ) from None
    # Valid UTF-8 at the start but not further on: a single-byte encoding.
    return _read_text_as(path, _single_byte_encoding(path), progress)


def _encoding_notice(path: Path, encoding: str) -> Notice | None:
    if encoding == "latin-1":
        return Notice("encoding", f"{path.name} is not UTF-8 text, so it was read as Latin-1 (Western European); "
                      "check that accented letters look right.")
    if encoding == "cp1252":
        return Notice("encoding", f"{path.name} is not UTF-8 text, so it was read as Windows Western European "
                      "(cp1252); check that accented letters look right.")
    return None


class _EmptyText(Exception):
    """Internal: no non-empty row in the text looked at."""


@dataclass
class _Layout:
    """What the first records of a text file say about its shape."""

    delimiter: str
    skip_lines: int          # physical lines before the header row
    header: list             # the header row's fields
    n_fields: int            # the widest record seen in the sample
    header_line: int         # 1-based line of the header row
    title: str | None = None


def _records(text: str, delimiter: str, limit: int = 60):
    """(fields, line number at the end of the record) for the first records of ``text``."""
    reader = csv.reader(io.StringIO(text), delimiter=delimiter)
    out = []
    try:
        for fields in reader:
            out.append((fields, reader.line_num))
            if len(out) >= limit:
                break
    except csv.Error:
        pass  # an over-long field in the sample: judge on what came before
    return out


def _filled(fields) -> int:
    return sum(1 for x in fields if x is not None and str(x).strip())


def _choose_delimiter(text: str, suffix: str) -> str:
    """The delimiter that splits the first records into most fields, most consistently."""
    if suffix in (".tsv", ".tab"):
        return "\t"
    best, best_score = ",", None
    for d in _DELIMITERS:
        counts = [len(f) for f, _ in _records(text, d, 30) if _filled(f)]
        if not counts:
            continue
        mode = max(set(counts), key=counts.count)
        share = counts.count(mode) / len(counts)
        score = (mode > 1, round(share, 2), mode)
        if best_score is None or score > best_score:
            best, best_score = d, score
    return best


def _looks_like_names(fields) -> bool:
    """A row of column names: every filled cell is text, not a number."""
    import math

    for x in fields:
        if x is None or not str(x).strip():
            continue
        if isinstance(x, (int, float)) and not isinstance(x, bool):
            return False
        try:
            if math.isfinite(float(str(x).replace(",", "."))):
                return False
        except ValueError:
            pass
    return True


def _title_rows(rows) -> int:
    """How many leading rows are titles: one filled cell above a row of two or more names."""
    k = 0
    while k + 1 < len(rows) and _filled(rows[k]) == 1 and _filled(rows[k + 1]) >= 2 \
            and _looks_like_names(rows[k + 1]):
        k += 1
    return k


def _after_gap(rows, nonblank: list, k: int) -> int:
    """Move the header past a preamble set off by an empty row.

    ``rows[nonblank[k]]`` is the header so far.  A later row after an empty
    one becomes the header when it is a row of names with data below it,
    and no row above it (back to the current header) has more filled cells.
    """
    for j in range(k + 1, min(len(nonblank) - 1, k + 6)):
        i = nonblank[j]
        if nonblank[j - 1] == i - 1:
            continue  # no empty row just above
        width = _filled(rows[i])
        if width >= 2 and _looks_like_names(rows[i]) and not _looks_like_names(rows[nonblank[j + 1]]) \
                and all(_filled(rows[x]) <= width for x in nonblank[k:j]):
            return j
    return k


def _layout(text: str, truncated: bool, suffix: str) -> _Layout:
    hint_lines = 0
    first, _, rest = text.partition("\n")
    hint = _SEP_HINT.match(first.rstrip("\r"))
    if hint:
        # Excel's 'sep=;' first line names the delimiter.
        delimiter = hint.group(1)
        text, hint_lines = rest, 1
    else:
        delimiter = _choose_delimiter(text, suffix)
    records = _records(text, delimiter)
    if truncated and len(records) > 1:
        records = records[:-1]  # the last record may be cut
    nonblank = [i for i, (f, _) in enumerate(records) if _filled(f)]
    if not nonblank:
        raise _EmptyText
    k = _title_rows([records[i][0] for i in nonblank])
    k = _after_gap([f for f, _ in records], nonblank, k)
    title = " ".join(x.strip() for x in records[nonblank[k - 1]][0] if x.strip()) if k else None
    index = nonblank[k]
    header = records[index][0]
    skip = hint_lines + (records[index - 1][1] if index else 0)
    n_fields = max(len(f) for f, _ in records[index:])
    return _Layout(delimiter, skip, header, max(n_fields, len(header)), skip + 1, title)


def _read_text_as(path: Path, encoding: str, progress) -> LoadedTable:
    notices: list[Notice] = []
    note = _encoding_notice(path, encoding)
    if note:
        notices.append(note)
    size = path.stat().st_size
    # Enough of the start to see the header and some complete records.
    sample_bytes = _SNIFF_BYTES
    while True:
        with _open_for_reading(path) as fh:
            raw = fh.read(sample_bytes)
        truncated = len(raw) < size
        text = raw.decode(encoding, errors="replace" if truncated else "strict")
        if text.startswith("\ufeff"):
            text = text[1:]
        grow = truncated and sample_bytes < (1 << 24)
        try:
            layout = _layout(text, truncated, path.suffix.lower())
        except _EmptyText:
            if grow:
                sample_bytes *= 8
                continue
            raise DataFileError(
                f"The file {path} has no header row or data; export the records again with a header row."
            ) from None
        if grow and layout.skip_lines + 2 > text.count("\n"):
            sample_bytes *= 8
            continue
        break
    names, generated, name_notices = _unique_names(
        [str(x) for x in layout.header] + [""] * (layout.n_fields - len(layout.header)), path.name)
    notices.extend(name_notices)
    if layout.title:
        notices.append(Notice("title_row", f"The text above the column names of {path.name} "
                              f"({_short(layout.title)!r}) looks like a title, so the names were taken from "
                              f"line {layout.header_line}."))
    options = dict(
        sep=layout.delimiter, encoding=encoding, header=0, names=names, skiprows=layout.skip_lines,
        index_col=False, na_values=list(MISSING_MARKERS), keep_default_na=False, engine="c",
    )
    sample = _pandas_read(path, options, nrows=_SAMPLE_ROWS)
    if len(sample) == 0:
        raise DataFileError(
            f"{path.name} has column names but no data rows; export the records again including the data."
        )
    categorical = {name: "category" for name in sample.columns
                   if _is_text(sample[name]) and _repeats(sample[name])}
    if len(sample) < _SAMPLE_ROWS:
        frame = sample  # the whole file fitted in the sample
    elif progress is None:
        frame = _pandas_read(path, options, dtype=categorical or None)
    else:
        per_line = len(raw) / max(raw.count(b"\n"), 1)
        frame = _read_chunks(path, options, categorical, size, per_line, progress)
    mixed = [n for n in frame.columns if frame[n].dtype == object and not _is_bool_like(frame[n])]
    if mixed:
        # Numbers in one part of the file and words in another: re-read those
        # columns as text so every cell keeps what the file says.
        again = _pandas_read(path, {**options, "usecols": mixed}, dtype={n: "str" for n in mixed})
        for n in mixed:
            frame[n] = again[n]
    flavour = {";": "semicolon", "\t": "tab"}.get(layout.delimiter, "comma")
    frame, tidy_notices = _tidy(frame, path.name, flavour, generated)
    notices.extend(tidy_notices)
    _report(progress, 1.0, path)
    return LoadedTable(frame, path, notices, delimiter=layout.delimiter, encoding=encoding)


def _too_large(path: Path) -> DataFileError:
    return DataFileError(
        f"{path.name} is too large for this computer's memory; close other programs, "
        "or export only the columns and rows you need."
    )


def _pandas_read(path: Path, options: dict, **more):
    """pandas.read_csv with Twofold's messages for its errors."""
    import pandas as pd

    try:
        with warnings.catch_warnings():
            # Mixed chunk types are repaired after reading; nothing to tell the user.
            warnings.simplefilter("ignore", pd.errors.DtypeWarning)
            warnings.simplefilter("ignore", pd.errors.ParserWarning)
            return pd.read_csv(path, **options, **more)
    except UnicodeError:
        raise
    except pd.errors.EmptyDataError:
        raise DataFileError(
            f"The file {path} has no header row or data; export the records again with a header row."
        ) from None
    except pd.errors.ParserError as exc:
        raise DataFileError(_parser_message(path, exc)) from None
    except MemoryError:
        raise _too_large(path) from None
    except OSError as exc:
        raise DataFileError(
            f"{path.name} could not be read ({exc.strerror or exc}); "
            "close it in any program that has it open and try again."
        ) from None


def _parser_message(path: Path, exc: Exception) -> str:
    text = str(exc).strip().splitlines()[-1] if str(exc).strip() else type(exc).__name__
    found = re.search(r"Expected (\d+) fields in line (\d+), saw (\d+)", text)
    if found:
        want, line, saw = (int(g) for g in found.groups())
        return (f"Line {line} of {path.name} has {saw} fields where the header has {want}; "
                "put cells that contain the delimiter in quotes, or export the file again.")
    return (f"{path.name} could not be read as a table ({text}); "
            "check that every row has the same number of fields.")


def _read_chunks(path: Path, options: dict, categorical: dict, size: int, per_line: float, progress):
    """Read in chunks (about 50, each at least 20,000 rows), reporting the share of bytes read after each."""
    import pandas as pd
    from pandas.api.types import union_categoricals

    chunk_rows = max(20_000, int(size / per_line / 50))
    parts: list = []
    _report(progress, 0.0, path)
    options = dict(options)
    encoding = options.pop("encoding")
    with _open_for_reading(path) as fh:
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", pd.errors.DtypeWarning)
                warnings.simplefilter("ignore", pd.errors.ParserWarning)
                with pd.read_csv(fh, encoding=encoding, chunksize=chunk_rows, dtype=categorical or None,
                                 **options) as reader:
                    for chunk in reader:
                        parts.append(chunk)
                        _report(progress, 0.95 * fh.tell() / size, path)
        except (UnicodeError, ReadCancelled):
            raise
        except pd.errors.ParserError as exc:
            raise DataFileError(_parser_message(path, exc)) from None
        except MemoryError:
            raise _too_large(path) from None
    if len(parts) == 1:
        return parts[0]
    columns = {}
    for name in parts[0].columns:
        pieces = [p[name] for p in parts]
        if name in categorical:
            try:
                columns[name] = pd.Series(union_categoricals([p.array for p in pieces]), name=name)
                continue
            except TypeError:  # a chunk with no text at all has categories of another type
                pieces = [p.astype(object) for p in pieces]
        kinds = {p.dtype.kind for p in pieces if not p.isna().all()}
        if len(kinds) > 1 and not kinds <= {"i", "u", "f"}:
            # Numbers in some chunks and text in others: one object column,
            # which the caller re-reads as text.
            pieces = [p.astype(object) for p in pieces]
        columns[name] = pd.concat(pieces, ignore_index=True)
    return pd.DataFrame(columns)


def _is_text(series) -> bool:
    import pandas as pd

    return pd.api.types.is_string_dtype(series.dtype) and series.dtype != object


def _repeats(series) -> bool:
    """Whether to parse a text column as categories, judging by its sample.

    Parsing as categories builds each distinct string once, which is faster,
    but pandas' parallel reader then needs the same categories in every block
    of the file, or it reads the file a second time serially.  So only
    columns with a few values, each seen in every quarter of the sample (not
    sorted, none rare), qualify.
    """
    present = series.dropna()
    if len(present) < 400:
        return False
    values = set(present.to_numpy(dtype=object))
    if not 2 <= len(values) <= _CATEGORY_MAX:
        return False
    quarter = len(present) // 4
    cells = present.to_numpy(dtype=object)
    return all(set(cells[i * quarter:(i + 1) * quarter]) == values for i in range(4))


def _is_bool_like(series) -> bool:
    import pandas as pd

    return pd.api.types.infer_dtype(series, skipna=True) in ("boolean", "empty")


def _short(text: str, limit: int = 40) -> str:
    text = " ".join(str(text).split())
    return text if len(text) <= limit else text[: limit - 1] + "\u2026"


def _unique_names(raw: list, source: str, numbers: list | None = None):
    """Clean column names: whitespace collapsed, blanks as 'column N', repeats as 'x (2)'.

    ``numbers`` gives the 1-based column number shown for a blank name
    (default: its position).  Returns (names, names made up for blanks, notices).
    """
    cleaned = [" ".join(str(x).split()) for x in raw]
    numbers = numbers or list(range(1, len(raw) + 1))
    taken = {x for x in cleaned if x}
    names, generated, seen, repeated = [], set(), set(), {}
    for x, number in zip(cleaned, numbers):
        if not x:
            x = f"column {number}"
            while x in taken and x not in generated:
                x = f"{x}*"
            generated.add(x)
        elif x in seen:
            k = 2
            while f"{x} ({k})" in taken or f"{x} ({k})" in seen:
                k += 1
            repeated.setdefault(x, [x]).append(f"{x} ({k})")
            x = f"{x} ({k})"
        seen.add(x)
        taken.add(x)
        names.append(x)
    notices = []
    if repeated:
        shown = "; ".join(", ".join(repr(v) for v in vs[:-1]) + f" and {vs[-1]!r}"
                          for vs in list(repeated.values())[:4])
        notices.append(Notice(
            "column_names",
            f"{source} has more than one column with the same name, so they are called {shown}; "
            "rename them in the file to choose your own names.",
            subjects=tuple(v for vs in repeated.values() for v in vs),
        ))
    return names, generated, notices


# ------------------------------------------------------------ tidying columns
def _tidy(frame, source: str, flavour: str, generated: set):
    """Clean every column of pandas' raw reading; returns (frame, notices).

    ``flavour`` says which written number formats to accept: ``"comma"``
    (thousands commas), ``"semicolon"`` (decimal commas), ``"tab"`` and
    ``"xlsx"`` (either, whichever fits every cell).  ``generated`` holds the
    names made up for blank column names.
    """
    import numpy as np
    import pandas as pd

    if frame.shape[1] == 0:
        raise DataFileError(f"The file {source} has no columns; export it again with a header row.")
    found: dict[str, list] = {}
    changed, factors = {}, {}
    for name in frame.columns:
        col = frame[name]
        known = None
        if isinstance(col.dtype, pd.CategoricalDtype):
            new, known = _tidy_text(name, col.cat.codes.to_numpy(), np.asarray(col.cat.categories, dtype=object),
                                    flavour, found)
        elif _is_text(col):
            new, known = _tidy_text_column(name, col, flavour, found)
        elif col.dtype == object:
            new, known = _tidy_object(name, col, flavour, found)
        elif col.dtype.kind == "f" and np.isinf(col.to_numpy()).any():
            found.setdefault("infinite", []).append(name)
            new = col.mask(np.isinf(col.to_numpy()))
        else:
            continue
        if new is not col:
            changed[name] = new
        if known is not None and _is_text(new):
            factors[name] = known
    for name, new in changed.items():
        # A Series is taken as it is; a bare array would be checked and copied again.
        frame[name] = new.set_axis(frame.index) if not new.index.equals(frame.index) else new
    rows_before = len(frame)

    notices: list[Notice] = []
    # Columns with neither a name nor a value are export debris.
    debris = [n for n in frame.columns if n in generated and not frame[n].notna().any()]
    if debris and len(debris) < frame.shape[1]:
        frame = frame.drop(columns=debris)
        notices.append(Notice("empty_columns", f"{_plural(len(debris), 'column')} of {source} "
                              f"with neither a name nor any value {'was' if len(debris) == 1 else 'were'} left out."))
    blank = [n for n in frame.columns if n in generated]
    if blank:
        one = len(blank) == 1
        notices.append(Notice(
            "column_names",
            f"{_plural(len(blank), 'column')} of {source} {'has' if one else 'have'} no name, so "
            f"{'it is' if one else 'they are'} called {', '.join(repr(n) for n in blank[:6])}"
            f"{' ...' if len(blank) > 6 else ''}; name {'it' if one else 'them'} in the file to choose your own.",
            subjects=tuple(blank)))
    # Rows with no value at all (a row of delimiters, or blank spreadsheet rows).
    # If any column is complete, no row is empty: the usual case costs nothing.
    if len(frame) and all(frame[n].hasnans for n in frame.columns):
        empty = np.ones(len(frame), dtype=bool)
        for n in frame.columns:
            empty &= frame[n].isna().to_numpy()
            if not empty.any():
                break
        n_empty = int(empty.sum())
        if n_empty:
            frame = frame.loc[~empty].reset_index(drop=True)
            # Columns that were decimals only because of the empty rows are whole numbers again.
            for n in frame.columns:
                values = frame[n].to_numpy()
                if values.dtype.kind == "f" and len(values) and not np.isnan(values).any() \
                        and (values == np.round(values)).all() and np.abs(values).max() < 2**53:
                    frame[n] = values.astype(np.int64)
            notices.append(Notice("empty_rows", f"{_plural(n_empty, 'row')} of {source} with no value at all "
                                  f"{'was' if n_empty == 1 else 'were'} left out."))
    if len(frame) == 0:
        raise DataFileError(
            f"{source} has column names but no data rows; export the records again including the data."
        )
    notices.extend(_found_notices(found, source))
    if len(frame) == rows_before:
        # The distinct values found here spare the first description of each
        # text column another pass over its cells.
        for name, (codes, uniques) in factors.items():
            if name in frame.columns:
                remember_factors(frame[name], codes, uniques)
    return frame, notices


def _plural(n: int, word: str) -> str:
    return f"{n:,} {word}{'' if n == 1 else 's'}"


def _listed(columns) -> str:
    shown = ", ".join(f"'{c}'" for c in columns[:6])
    return shown + (" ..." if len(columns) > 6 else "")


_FOUND_TEXT = {
    "numbers_as_text": "held numbers stored as text; they were read as numbers.",
    "thousands": "had numbers written with thousands separators (as in '1,234'); they were read as numbers.",
    "decimal_comma": "used a decimal comma (as in '1,5' for one and a half), so they were read as numbers "
                     "with decimals.",
    "infinite": "held infinite values ('inf'); they were read as missing.",
    "bool_missing": "held TRUE/FALSE with some cells empty; they were read as 1 (TRUE) and 0 (FALSE).",
}


def _found_notices(found: dict, source: str) -> list:
    out = []
    for code, text in _FOUND_TEXT.items():
        if code in found:
            cols = found[code]
            out.append(Notice(code, f"In {source}, {_listed(cols)} {text}", subjects=tuple(cols)))
    if "errors" in found:
        cols = [c for c, _, _ in found["errors"]]
        total = sum(k for _, k, _ in found["errors"])
        out.append(Notice("excel_errors", f"In {source}, {_plural(total, 'cell')} in {_listed(cols)} showed a "
                          f"formula error such as {found['errors'][0][2]!r} and {'was' if total == 1 else 'were'} "
                          "read as missing.", subjects=tuple(cols)))
    for column, groups in found.get("merged", []):
        shown = "; ".join(f"{', '.join(repr(v) for v in variants)} as {keep!r}" for keep, variants in groups[:3])
        out.append(Notice("merged_values", f"In '{column}', values that differ only in capitals or spaces were "
                          f"taken as one value: {shown}.", subjects=(column,)))
    return out


def _tidy_text_column(name, col, flavour, found):
    """A text column as pandas parsed it: strip and check it, rebuilding it only if something changes.

    Returns (column, (codes, distinct values) or None).
    """
    import numpy as np
    import pandas as pd

    values = col.to_numpy(dtype=object)
    head = values[:_SAMPLE_ROWS]
    if len(pd.unique(head)) <= 0.5 * len(head):
        # Values repeat: every check can run on the distinct values alone.
        codes, uniques = pd.factorize(values)
        uniques = np.asarray(uniques, dtype=object)
        if not _text_needs_work(uniques, flavour):
            return col, (codes, uniques)
        return _tidy_text(name, codes, uniques, flavour, found)
    # Values mostly differ, as in an identifier: one pass over the cells
    # (str.strip returns the very same object when there is nothing to strip).
    # map keeps the loop in C: about a quarter faster than a generator here.
    texts = values if not col.hasnans else col.dropna().to_numpy(dtype=object)
    changed = any(map(operator.is_not, map(str.strip, texts), texts))
    present = [v for v in head if v.__class__ is str]
    # Exact missing markers are already missing (the parser saw to them).
    if not (changed or _as_numbers(present[:200], flavour)[0] is not None
            or any(v in _ERROR_SET for v in present)):
        return col, None
    codes, uniques = pd.factorize(values)
    return _tidy_text(name, codes, np.asarray(uniques, dtype=object), flavour, found)


def _text_needs_work(uniques, flavour) -> bool:
    """Whether any distinct text needs stripping, is a marker or error, has case variants, or all are numbers."""
    if any(u.__class__ is not str or u.strip() is not u or u in _ERROR_SET or u in _MISSING_SET for u in uniques):
        return True
    if 1 < len(uniques) <= _MERGE_MAX_LEVELS:
        if len({" ".join(u.split()).casefold() for u in uniques}) < len(uniques):
            return True
    return _as_numbers(uniques[:200], flavour)[0] is not None


def _tidy_text(name, codes, uniques, flavour, found):
    """Tidy a text column given as codes (-1: missing) into its distinct values."""
    import numpy as np
    import pandas as pd

    stripped = np.array([u.strip() if isinstance(u, str) else str(u) for u in uniques], dtype=object)
    is_error = np.fromiter((u in _ERROR_SET for u in stripped), dtype=bool, count=len(stripped))
    gone = np.fromiter((u in _MISSING_SET for u in stripped), dtype=bool, count=len(stripped)) | is_error
    if is_error.any():
        per = np.bincount(codes[codes >= 0], minlength=len(uniques))
        found.setdefault("errors", []).append((name, int(per[is_error].sum()), str(stripped[is_error][0])))
    keep = ~gone
    kind, numbers = _as_numbers(stripped[keep], flavour)
    if kind is not None:
        found.setdefault(kind, []).append(name)
        table = np.full(len(stripped) + 1, np.nan)  # the extra last slot serves code -1
        table[:-1][keep] = numbers
        values = table[codes]
        if not np.isnan(values).any() and (values == np.round(values)).all() and np.abs(values).max() < 2**53:
            return pd.Series(values.astype(np.int64), name=name), None
        return pd.Series(values, name=name), None
    labels = stripped.copy()
    labels[gone] = np.nan
    if 1 < keep.sum() <= _MERGE_MAX_LEVELS:
        labels = _merge_variants(name, codes, labels, keep, found)
    # Codes into the distinct final values (merging or markers made some labels equal or missing).
    label_codes, distinct = pd.factorize(labels)
    if len(label_codes) and (label_codes == np.arange(len(label_codes))).all():
        final = codes  # nothing merged or dropped: the codes stand
    else:
        final = np.append(label_codes, -1)[codes]  # code -1 stays missing
    labels = np.append(np.asarray(distinct, dtype=object), np.nan)
    return _text_series(labels[final], name), (final, labels[:-1])


def _text_series(values, name):
    """A pandas text column from an object array of str and NaN, as pandas itself would read it."""
    import numpy as np
    import pandas as pd

    global _EMPTY_TEXT
    if _EMPTY_TEXT is None:
        dtype = pd.Series([], dtype="str").dtype
        _EMPTY_TEXT = (pd.arrays.StringArray(np.array([], dtype=object), dtype=dtype)
                       if getattr(dtype, "storage", None) == "python" else False)
    if _EMPTY_TEXT is not False:
        try:
            # The values are known to be str or NaN, so pandas' per-cell check is skipped.
            return pd.Series(_EMPTY_TEXT._from_backing_data(values), name=name, copy=False)
        except AttributeError:  # another pandas: build it the general way
            pass
    return pd.Series(values, dtype="str", name=name)


_EMPTY_TEXT = None


def _merge_variants(name, codes, labels, keep, found):
    """Take spellings that differ only in capitals or spaces as one: the most frequent spelling."""
    import numpy as np

    keys = {}
    for i in np.flatnonzero(keep):
        keys.setdefault(" ".join(labels[i].split()).casefold(), []).append(i)
    groups = [ix for ix in keys.values() if len(ix) > 1]
    if not groups:
        return labels
    counts = np.bincount(codes[codes >= 0], minlength=len(labels))
    labels = labels.copy()
    report = []
    for ix in groups:
        ix = sorted(ix, key=lambda i: (-counts[i], i))
        report.append((labels[ix[0]], [labels[i] for i in ix]))
        for i in ix[1:]:
            labels[i] = labels[ix[0]]
    found.setdefault("merged", []).append((name, report))
    return labels


def _as_numbers(texts, flavour):
    """(kind, numbers) when every text is a finite number in one written format, else (None, None).

    ``kind`` is ``"numbers_as_text"`` (plain, e.g. ``12.0``), ``"thousands"``
    (``1,234``) or ``"decimal_comma"`` (``1,5``, ``1.234,5``).  A column with
    any comma is judged as a whole in one comma format, so in a decimal-comma
    column ``1.234`` is one thousand two hundred and thirty-four.
    """
    import numpy as np
    import pandas as pd

    if len(texts) == 0:
        return None, None
    texts = [t if isinstance(t, str) else str(t) for t in texts]
    if not any("," in t for t in texts):
        numbers = pd.to_numeric(pd.Series(texts, dtype=object), errors="coerce").to_numpy(dtype=float)
        if np.isfinite(numbers).all():
            return "numbers_as_text", numbers
        return None, None
    formats = {"comma": ("us",), "semicolon": ("eu",)}.get(flavour, ("us", "eu"))
    for fmt in formats:
        pattern = _US_THOUSANDS if fmt == "us" else _EU_DECIMAL
        if all(pattern.match(t) for t in texts):
            cleaned = [t.replace(",", "") if fmt == "us" else t.replace(".", "").replace(",", ".") for t in texts]
            numbers = pd.to_numeric(pd.Series(cleaned, dtype=object), errors="coerce").to_numpy(dtype=float)
            if np.isfinite(numbers).all():
                return ("thousands" if fmt == "us" else "decimal_comma"), numbers
    return None, None


def _tidy_object(name, col, flavour, found):
    """A column of Python objects: TRUE/FALSE with gaps, numbers and text mixed, or workbook cells."""
    import numpy as np
    import pandas as pd

    kind = pd.api.types.infer_dtype(col, skipna=True)
    missing = col.isna()
    if kind == "empty":
        return pd.Series(np.full(len(col), np.nan), name=name), None
    if kind == "boolean":
        if not missing.any():
            return col.astype(bool), None
        found.setdefault("bool_missing", []).append(name)
        return pd.Series(col.map({True: 1.0, False: 0.0}).to_numpy(dtype=float, na_value=np.nan), name=name), None
    if kind == "integer" and not missing.any():
        return col.astype(np.int64), None
    if kind in ("integer", "floating", "mixed-integer-float", "decimal"):
        values = pd.to_numeric(col).to_numpy(dtype=float, na_value=np.nan)
        return pd.Series(np.where(np.isinf(values), np.nan, values), name=name), None
    if kind in ("datetime", "datetime64", "date"):
        try:
            return pd.Series(pd.to_datetime(col), name=name), None
        except (ValueError, TypeError, OverflowError):
            pass
    # Text, or text mixed with numbers and dates: judge every cell by the text it shows.
    values = np.array([_cell_text(v) for v in col.to_numpy(dtype=object)], dtype=object)
    codes, uniques = pd.factorize(values)
    return _tidy_text(name, codes, np.asarray(uniques, dtype=object), flavour, found)


def _cell_text(v):
    """A cell as the text it shows (None stays missing)."""
    import datetime as dt
    import math

    if v is None or (isinstance(v, float) and math.isnan(v)):
        return None
    if isinstance(v, str):
        return v
    if isinstance(v, bool):
        return "TRUE" if v else "FALSE"
    if isinstance(v, float) and v.is_integer() and abs(v) < 1e15:
        return str(int(v))
    if isinstance(v, dt.datetime):
        return v.date().isoformat() if v.time() == dt.time() else v.isoformat(sep=" ")
    if isinstance(v, (dt.date, dt.time)):
        return v.isoformat()
    return str(v)


# ---------------------------------------------------------------- workbooks
_FORMULA_TAG = re.compile(rb"<(?:\w+:)?f[\s>/]")
_MERGE_TAG = re.compile(rb"<(?:\w+:)?mergeCell\s+ref=\"\$?([A-Z]+)\$?(\d+)(?::\$?([A-Z]+)\$?(\d+))?\"")


def _read_workbook(path: Path, sheet: str | None, progress):
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
                _report(progress, 0.8 * min(i / max(expected, 1), 1.0), path)
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
    frame, tidy_notices = _tidy(frame, where, "xlsx", generated)
    notices.extend(tidy_notices)
    _report(progress, 1.0, path)
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
                        example = f"{get_column_letter(j + 1)}{i + 1}, {_short(text, 30)}"
    finally:
        book.close()
    if not missing:
        return []
    one = missing == 1
    return [Notice("formulas", f"In sheet '{sheet}' of {path.name}, {_plural(missing, 'cell')} "
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
        return len(values) == 1 and (_filled(filled[i]) == 1 or i + 1 in merged_across)

    k = 0
    while k + 1 < len(nonempty) and lone(nonempty[k]) and _filled(filled[nonempty[k + 1]]) >= 2 \
            and _looks_like_names(filled[nonempty[k + 1]]):
        k += 1
    k = _after_gap(filled, nonempty, k)
    if k:
        title = " ".join(dict.fromkeys(str(v).strip() for v in filled[nonempty[k - 1]] if not blank(v)))
        notices.append(Notice("title_row", f"Row {nonempty[k - 1] + 1} of {where} ({_short(str(title))!r}) looks "
                              f"like a title, so the column names were taken from row {nonempty[k] + 1}."))
    h = nonempty[k]
    header, data = filled[h], filled[h + 1:]
    header_rows = 1
    # Two header rows: a name merged across columns above their sub-names,
    # told apart from data because the row below it holds numbers or dates.
    spans = [(c0 - 1, min(c1, width)) for c0, r0, c1, r1 in merges if r0 == h + 1 and r1 == r0 and c1 > c0]
    if spans and len(data) >= 2 and _looks_like_names(data[0]) and not _looks_like_names(data[1]) \
            and all(any(isinstance(data[0][c], str) for c in range(a, b)) for a, b in spans):
        under = {c for a, b in spans for c in range(a, b)}
        sub = data[0]
        header = [
            f"{_cell_text(top)} {_cell_text(low)}" if j in under and not blank(low) and not blank(top)
            and str(top).strip() != str(low).strip()
            else (_cell_text(top) if not blank(top) else _cell_text(low))
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
    raw_names = ["" if blank(header[j]) else _cell_text(header[j]) for j in range(first, last + 1)]
    # A blank name is numbered by its spreadsheet column, so 'column 3' is column C.
    names, generated, name_notices = _unique_names(raw_names, where, list(range(first + 1, last + 2)))
    notices.extend(name_notices)
    if not data:
        raise DataFileError(f"The {where} has column names but no data rows; {hint}.")
    columns = {}
    for j, name in zip(range(first, last + 1), names):
        values = np.empty(len(data), dtype=object)
        values[:] = [r[j] for r in data]
        columns[name] = pd.Series(values, dtype=object, name=name)
    return pd.DataFrame(columns), generated, notices
