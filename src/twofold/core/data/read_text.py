"""Reading delimited text files (CSV, TSV, TXT) for :func:`twofold.core.data.io.read_table`.

The encoding is found from the byte-order mark and the bytes themselves, the
delimiter and the header row from the first records, and the cells are read
by pandas (in chunks when progress is reported), then tidied by
:func:`twofold.core.data.tidy.tidy_frame`.
"""

from __future__ import annotations

import csv
import io
import re
import warnings
from dataclasses import dataclass
from pathlib import Path

from twofold.core.errors import DataFileError, Notice
from twofold.core.data.io import (
    MISSING_MARKERS,
    SAMPLE_ROWS,
    LoadedTable,
    ReadCancelled,
    open_for_reading,
    report_progress,
    too_large_error,
)
from twofold.core.data.tidy import is_text_column, shorten, tidy_frame, unique_names

_DELIMITERS = (",", ";", "\t")
_SNIFF_BYTES = 64 * 1024
#: A text column whose sample repeats values this much is parsed as categories.
_REPEAT_SHARE = 0.2
#: Text columns with at most this many values in the sample may be parsed as categories.
_CATEGORY_MAX = 30

_SEP_HINT = re.compile(r"^\s*sep=(.)\s*$")


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
    with open_for_reading(path) as fh:
        for block in iter(lambda: fh.read(1 << 23), b""):
            if undefined.search(block):
                return "latin-1"
            found = found or bool(c1.search(block))
    return "cp1252" if found else "latin-1"


def read_text(path: Path, progress) -> LoadedTable:
    """Read a delimited text file: encoding, layout and cells, tidied."""
    with open_for_reading(path) as fh:
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


def filled_count(fields) -> int:
    """How many cells of a row hold something other than blanks."""
    return sum(1 for x in fields if x is not None and str(x).strip())


def _choose_delimiter(text: str, suffix: str) -> str:
    """The delimiter that splits the first records into most fields, most consistently."""
    if suffix in (".tsv", ".tab"):
        return "\t"
    best, best_score = ",", None
    for d in _DELIMITERS:
        counts = [len(f) for f, _ in _records(text, d, 30) if filled_count(f)]
        if not counts:
            continue
        mode = max(set(counts), key=counts.count)
        share = counts.count(mode) / len(counts)
        score = (mode > 1, round(share, 2), mode)
        if best_score is None or score > best_score:
            best, best_score = d, score
    return best


def looks_like_names(fields) -> bool:
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
    while k + 1 < len(rows) and filled_count(rows[k]) == 1 and filled_count(rows[k + 1]) >= 2 \
            and looks_like_names(rows[k + 1]):
        k += 1
    return k


def header_after_gap(rows, nonblank: list, k: int) -> int:
    """Move the header past a preamble set off by an empty row.

    ``rows[nonblank[k]]`` is the header so far.  A later row after an empty
    one becomes the header when it is a row of names with data below it,
    and no row above it (back to the current header) has more filled cells.
    """
    for j in range(k + 1, min(len(nonblank) - 1, k + 6)):
        i = nonblank[j]
        if nonblank[j - 1] == i - 1:
            continue  # no empty row just above
        width = filled_count(rows[i])
        if width >= 2 and looks_like_names(rows[i]) and not looks_like_names(rows[nonblank[j + 1]]) \
                and all(filled_count(rows[x]) <= width for x in nonblank[k:j]):
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
    nonblank = [i for i, (f, _) in enumerate(records) if filled_count(f)]
    if not nonblank:
        raise _EmptyText
    k = _title_rows([records[i][0] for i in nonblank])
    k = header_after_gap([f for f, _ in records], nonblank, k)
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
        with open_for_reading(path) as fh:
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
    names, generated, name_notices = unique_names(
        [str(x) for x in layout.header] + [""] * (layout.n_fields - len(layout.header)), path.name)
    notices.extend(name_notices)
    if layout.title:
        notices.append(Notice("title_row", f"The text above the column names of {path.name} "
                              f"({shorten(layout.title)!r}) looks like a title, so the names were taken from "
                              f"line {layout.header_line}."))
    options = dict(
        sep=layout.delimiter, encoding=encoding, header=0, names=names, skiprows=layout.skip_lines,
        index_col=False, na_values=list(MISSING_MARKERS), keep_default_na=False, engine="c",
    )
    sample = _pandas_read(path, options, nrows=SAMPLE_ROWS)
    if len(sample) == 0:
        raise DataFileError(
            f"{path.name} has column names but no data rows; export the records again including the data."
        )
    categorical = {name: "category" for name in sample.columns
                   if is_text_column(sample[name]) and _repeats(sample[name])}
    if len(sample) < SAMPLE_ROWS:
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
    frame, tidy_notices = tidy_frame(frame, path.name, flavour, generated)
    notices.extend(tidy_notices)
    report_progress(progress, 1.0, path)
    return LoadedTable(frame, path, notices, delimiter=layout.delimiter, encoding=encoding)


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
        raise too_large_error(path) from None
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
    report_progress(progress, 0.0, path)
    options = dict(options)
    encoding = options.pop("encoding")
    with open_for_reading(path) as fh:
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", pd.errors.DtypeWarning)
                warnings.simplefilter("ignore", pd.errors.ParserWarning)
                with pd.read_csv(fh, encoding=encoding, chunksize=chunk_rows, dtype=categorical or None,
                                 **options) as reader:
                    for chunk in reader:
                        parts.append(chunk)
                        report_progress(progress, 0.95 * fh.tell() / size, path)
        except (UnicodeError, ReadCancelled):
            raise
        except pd.errors.ParserError as exc:
            raise DataFileError(_parser_message(path, exc)) from None
        except MemoryError:
            raise too_large_error(path) from None
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
