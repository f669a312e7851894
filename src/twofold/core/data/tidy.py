"""Tidying a table just read, for :func:`twofold.core.data.io.read_table`.

Column names are made unique, text cells stripped, missing markers and
Excel errors made missing, numbers written as text read as numbers, spellings
that differ only in capitals or spaces merged, and notices written about
what was found.
"""

from __future__ import annotations

import operator
import re

from twofold.core.errors import DataFileError, Notice
from twofold.core.data.io import EXCEL_ERRORS, MISSING_MARKERS, SAMPLE_ROWS
from twofold.core.data.roles import remember_factors

_MISSING_SET = frozenset(MISSING_MARKERS)
_ERROR_SET = frozenset(EXCEL_ERRORS) - _MISSING_SET
#: Case/space variants are merged only in columns with at most this many values.
_MERGE_MAX_LEVELS = 100

# Numbers as people write them.  Plain numbers are left to pandas.  A thousands group never
# follows a lone 0 ("0.085" and "0,085" are decimals whichever the convention).
_US_THOUSANDS = re.compile(r"^[+-]?(?:[1-9]\d{0,2}(?:,\d{3})+|\d+)(?:\.\d+)?$")
_EU_DECIMAL = re.compile(r"^[+-]?(?:[1-9]\d{0,2}(?:\.\d{3})+|\d+)(?:,\d+)?$")
# A number written only with digits, points and commas, and what marks its decimal separator beyond doubt:
# a separator followed by other than three digits, one after a lone 0, or the last of two different ones.
_DIGITS_AND_MARKS = re.compile(r"^[+-]?(?:\d[\d.,]*|[.,]\d+)$")
_SURE_DECIMAL = {mark: re.compile(rf"(?:^[+-]?0?\{mark}\d+$|^[+-]?\d+\{mark}(?:\d{{1,2}}|\d{{4,}})$|"
                                  rf"[{other}]\d{{3}}\{mark}\d+$)")
                 for mark, other in ((",", "."), (".", ","))}


def is_text_column(series) -> bool:
    """Whether a column holds pandas text (not plain Python objects)."""
    import pandas as pd

    return pd.api.types.is_string_dtype(series.dtype) and series.dtype != object


def shorten(text: str, limit: int = 40) -> str:
    """The text on one line, cut with an ellipsis beyond ``limit`` characters."""
    text = " ".join(str(text).split())
    return text if len(text) <= limit else text[: limit - 1] + "\u2026"


def unique_names(raw: list, source: str, numbers: list | None = None):
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
def tidy_frame(frame, source: str, flavour: str, generated: set):
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
        elif is_text_column(col):
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
        if known is not None and is_text_column(new):
            factors[name] = known
    if "mixed" in found:
        raise mixed_decimals_error(*found["mixed"][0], source)
    for name, new in changed.items():
        # A Series is taken as it is; a bare array would be checked and copied again.
        frame[name] = new.set_axis(frame.index) if not new.index.equals(frame.index) else new
    rows_before = len(frame)

    notices: list[Notice] = []
    # Columns with neither a name nor a value are export debris.
    debris = [n for n in frame.columns if n in generated and not frame[n].notna().any()]
    if debris and len(debris) < frame.shape[1]:
        frame = frame.drop(columns=debris)
        notices.append(Notice("empty_columns", f"{plural(len(debris), 'column')} of {source} "
                              f"with neither a name nor any value {'was' if len(debris) == 1 else 'were'} left out."))
    blank = [n for n in frame.columns if n in generated]
    if blank:
        one = len(blank) == 1
        notices.append(Notice(
            "column_names",
            f"{plural(len(blank), 'column')} of {source} {'has' if one else 'have'} no name, so "
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
            notices.append(Notice("empty_rows", f"{plural(n_empty, 'row')} of {source} with no value at all "
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


def plural(n: int, word: str) -> str:
    """A count with its noun, as in '1 row' or '1,234 rows'."""
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
        out.append(Notice("excel_errors", f"In {source}, {plural(total, 'cell')} in {_listed(cols)} showed a "
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
    head = values[:SAMPLE_ROWS]
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
    if kind == "mixed":
        found.setdefault("mixed", []).append((name, _mixed_example(codes, stripped, keep)))
        kind = None
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
    import pandas as pd

    dtype = pd.Series([], dtype="str").dtype
    # pandas' public array constructor for its own text type (no reach into its internals); the
    # general route below is for a pandas whose text type this constructor does not take.
    try:
        return pd.Series(pd.array(values, dtype=dtype), name=name, copy=False)
    except (TypeError, ValueError):
        return pd.Series(values, dtype="str", name=name)


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
    column ``1.234`` is one thousand two hundred and thirty-four; but a point
    or comma after a lone 0 is always a decimal one.  ``("mixed", None)``: every
    text is a number, some surely with a decimal comma and others surely with
    a decimal point, so no one reading is right.
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
    if _mixed_marks(texts) is not None:
        return "mixed", None
    return None, None


def _mixed_marks(texts):
    """(index of a text surely with a decimal comma, of one surely with a decimal point), or None.

    None unless every text is a number written with digits, points and commas only.
    """
    comma = point = None
    for i, t in enumerate(texts):
        if not _DIGITS_AND_MARKS.match(t):
            return None
        if comma is None and _SURE_DECIMAL[","].search(t):
            comma = i
        elif point is None and _SURE_DECIMAL["."].search(t):
            point = i
    return None if comma is None or point is None else (comma, point)


def _mixed_example(codes, stripped, keep):
    """'a' in data row i and 'b' in data row j: a cell of each decimal convention in a mixed column."""
    import numpy as np

    texts = stripped[keep]
    which = np.flatnonzero(keep)
    comma, point = _mixed_marks(list(texts))
    rows = [int(np.flatnonzero(codes == which[k])[0]) + 1 for k in (comma, point)]
    return (texts[comma], rows[0]), (texts[point], rows[1])


def mixed_decimals_error(column: str, example, source: str) -> DataFileError:
    """The sentence for a column whose numbers mix decimal commas and decimal points."""
    (comma, row_c), (point, row_p) = example
    return DataFileError(
        f"The column '{column}' of {source} mixes decimal commas and decimal points ({comma!r} in data row "
        f"{row_c:,}, {point!r} in data row {row_p:,}, counting from the row below the column names), so its "
        "numbers cannot be read safely; write every number in that column with the same decimal mark and "
        "open the file again."
    )


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
    values = np.array([cell_text(v) for v in col.to_numpy(dtype=object)], dtype=object)
    codes, uniques = pd.factorize(values)
    return _tidy_text(name, codes, np.asarray(uniques, dtype=object), flavour, found)


def cell_text(v):
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
