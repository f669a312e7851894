"""What each column is: numeric, binary, categorical, identifier-like, date.

The inferred role decides what Twofold offers as a predictor.  Identifier-like
columns (one value per row, or text with very many levels) and dates are never
offered by default; the user can override any role later.
"""

from __future__ import annotations

import re
import weakref
from dataclasses import dataclass, replace
from enum import Enum

#: Text columns with more levels than this are treated as identifier-like.
MAX_CATEGORY_LEVELS = 20

#: Pairs read as (absent, present); the first is the default reference and the
#: second the default event.  Compared case-insensitively.
NEGATIVE_POSITIVE = [
    ("no", "yes"), ("n", "y"), ("false", "true"), ("f", "t"), ("0", "1"),
    ("absent", "present"), ("negative", "positive"), ("neg", "pos"),
    ("alive", "dead"), ("alive", "died"), ("survived", "died"),
]

_ID_NAME = re.compile(r"(^|_|\b)(id|ids|ref|number|no|mrn|key|code)($|_|\b)", re.I)
_DATE_LIKE = re.compile(r"^\s*(\d{4}-\d{1,2}-\d{1,2}|\d{1,2}[/.-]\d{1,2}[/.-]\d{2,4})([ T]\d{1,2}:\d{2}(:\d{2})?)?\s*$")


class Role(str, Enum):
    """How a column takes part in a model."""

    NUMERIC = "numeric"
    BINARY = "binary"
    CATEGORICAL = "categorical"
    IDENTIFIER = "identifier"
    DATE = "date"
    EXCLUDED = "excluded"

    @property
    def is_predictor(self) -> bool:
        """Whether columns of this role are offered as predictors."""
        return self in (Role.NUMERIC, Role.BINARY, Role.CATEGORICAL)


@dataclass(frozen=True)
class ColumnInfo:
    """A summary of one column and the role Twofold gives it.

    Attributes
    ----------
    name : str
    role : Role
        The role in force (the inferred one unless the user changed it).
    inferred_role : Role
    is_number : bool
        Whether the cells are numbers.
    n_levels : int
        Distinct non-missing values.
    n_missing : int
    levels : tuple
        The distinct values, most frequent first (only when few enough).
    counts : tuple of int
        How often each of ``levels`` occurs.
    reason : str
        Why the role was inferred, in plain words.
    """

    name: str
    role: Role
    inferred_role: Role
    is_number: bool
    n_levels: int
    n_missing: int
    levels: tuple = ()
    counts: tuple = ()
    reason: str = ""

    @property
    def constant(self) -> bool:
        return self.n_levels <= 1

    def with_role(self, role: Role | str) -> "ColumnInfo":
        """A copy with the role changed by the user."""
        return replace(self, role=Role(role))


def _negative_positive(levels) -> tuple | None:
    """The (reference, event) order for a recognised yes/no-like pair, else None."""
    if len(levels) != 2:
        return None
    lowered = {str(v).strip().lower(): v for v in levels}
    for neg, pos in NEGATIVE_POSITIVE:
        if set(lowered) == {neg, pos}:
            return lowered[neg], lowered[pos]
    return None


def default_reference(info: ColumnInfo):
    """The default reference level: the 'no'-like value of a yes/no pair, else the most frequent."""
    pair = _negative_positive(info.levels)
    if pair is not None:
        return pair[0]
    return info.levels[0] if info.levels else None


def default_event(levels) -> object | None:
    """The value a user most likely means as the event of a two-valued outcome."""
    pair = _negative_positive(levels)
    if pair is not None:
        return pair[1]
    return None


def _looks_like_dates(values) -> bool:
    sample = [str(v) for v in values[:200]]
    if not sample:
        return False
    hits = sum(bool(_DATE_LIKE.match(v)) for v in sample)
    return hits >= 0.9 * len(sample)


#: Distinct values a reader found, per column array: id -> (weak reference, codes, uniques).
_FACTORS: dict = {}


def remember_factors(series, codes, uniques) -> None:
    """Keep the distinct values a reader found in a text column, for the column's first description.

    Parameters
    ----------
    series : pandas.Series
        The column as it is stored in the frame handed to the user.
    codes : numpy.ndarray or None
        Per row, the position of its value in ``uniques`` (-1: missing),
        numbered in order of first appearance as :func:`pandas.factorize`
        does; None when only the distinct values are known.
    uniques : numpy.ndarray
        The distinct non-missing values.

    Notes
    -----
    The record is tied to the very array that holds the column and is used
    once: :func:`describe_column` takes it, so a column replaced or described
    again later is described afresh from its cells.  Reading then costs one
    pass over the cells of a text column instead of two.
    """
    array = series.array
    if codes is not None and len(codes) != len(series):
        return
    key = id(array)
    try:
        ref = weakref.ref(array, lambda _, key=key: _FACTORS.pop(key, None))
    except TypeError:
        return
    _FACTORS[key] = (ref, codes, uniques)


def _take_factors(series):
    array = series.array
    entry = _FACTORS.pop(id(array), None)
    if entry is None or entry[0]() is not array:
        return None
    return entry[1], entry[2]


def _counted(codes, uniques, keep: bool):
    """Counts per code (-1 is missing) and the level order: most frequent first, ties in sorted order.

    Ties are broken by value, not by where a value first appears, so the
    order (and with it the default reference level) does not depend on the
    order of the rows.
    """
    import numpy as np

    if not keep:
        return None, None
    counts = np.bincount(codes[codes >= 0], minlength=len(uniques))
    try:
        by_value = np.argsort(np.asarray(uniques), kind="stable")
    except TypeError:  # values of several types
        by_value = np.argsort(np.array([f"{type(u).__name__}:{u}" for u in uniques], dtype=object), kind="stable")
    rank = np.empty(len(uniques), dtype=np.int64)
    rank[by_value] = np.arange(len(uniques))
    order = np.lexsort((rank, -counts))
    return counts, order[counts[order] > 0]


def _not_numbers(values, codes, uniques, counts):
    """Where a text column is mostly numbers: (cells that are not, the first such value, its 0-based row).

    None when fewer than half of the cells are numbers, or all are.  Only the
    distinct values are parsed, and only when a first look at 200 of them
    finds numbers.
    """
    import numpy as np
    import pandas as pd

    def parse(values):
        return pd.to_numeric(pd.Series(values, dtype=object).astype(str).str.strip(),
                             errors="coerce").to_numpy(dtype=float)

    if len(uniques) == 0 or not np.isfinite(parse(uniques[:200])).mean() >= 0.5:
        return None
    ok = np.isfinite(parse(uniques))
    if ok.all():
        return None
    if codes is None:
        codes, uniques = pd.factorize(values)
        ok = np.isfinite(parse(uniques))
    if counts is None:
        counts = np.bincount(codes[codes >= 0], minlength=len(uniques))
    if counts[ok].sum() < 0.5 * counts.sum():
        return None
    bad = np.append(~ok, False)  # the extra last slot serves code -1 (missing)
    row = int(np.flatnonzero(bad[codes])[0])
    return int(counts[~ok].sum()), uniques[codes[row]], row


def describe_column(name: str, series) -> ColumnInfo:
    """Infer the role of one column.

    Distinct values are found once, by hashing (:func:`pandas.factorize`),
    and counted from the codes, so a column costs one pass whatever its type;
    a text column just read by :func:`~twofold.core.data.io.read_table` reuses the
    distinct values found while reading (see :func:`remember_factors`).

    Parameters
    ----------
    name : str
    series : pandas.Series

    Returns
    -------
    ColumnInfo
    """
    import numpy as np
    import pandas as pd

    dtype = series.dtype
    n = len(series)
    is_bool = bool(pd.api.types.is_bool_dtype(dtype))
    is_date = bool(pd.api.types.is_datetime64_any_dtype(dtype))
    is_number = is_bool or (bool(pd.api.types.is_numeric_dtype(dtype)) and not is_date)
    if is_bool:
        values = series.to_numpy(dtype=float, na_value=np.nan)
    elif is_number:
        values = series.to_numpy()
    elif is_date:
        values = series
    else:
        values = series.to_numpy(dtype=object)
    limit = max(MAX_CATEGORY_LEVELS, 2) * 5
    codes = None
    known = None if (is_number or is_date) else _take_factors(series)
    if known is not None:
        # Found while reading the file.
        codes, uniques = known
        n_missing = int((codes < 0).sum()) if codes is not None else int(series.isna().sum())
        if codes is None and len(uniques) <= limit:
            codes, uniques = pd.factorize(values)
    elif is_number and not is_bool and values.dtype.kind in "iu" and n > limit and (np.diff(values) > 0).all():
        # Increasing whole numbers, like record numbers: all different, no hashing needed.
        codes, uniques, n_missing = None, values, 0
    elif is_date or len(pd.unique(values[:10_000])) <= limit:
        # Probably few values: codes give the counts too.
        codes, uniques = pd.factorize(values)
        n_missing = int((codes < 0).sum())
    else:
        # Probably many: finding the distinct values alone is cheaper.
        uniques = pd.unique(values)
        # NaN is the one value unequal to itself (a cheaper test than isna on objects).
        present = uniques == uniques if uniques.dtype == object else ~pd.isna(uniques)
        complete = bool(present.all())
        uniques = uniques if complete else uniques[present]
        n_missing = 0 if complete else int(series.isna().sum())
        if len(uniques) <= limit:
            codes, uniques = pd.factorize(values)
    if is_date:
        uniques = np.asarray(uniques.tolist(), dtype=object)
    elif is_bool and not n_missing:
        uniques = uniques.astype(int)
    keep = len(uniques) <= limit
    counts, order = _counted(codes, uniques, keep)
    n_levels = int(len(order)) if keep else int(len(uniques))
    n_present = n - n_missing
    levels = tuple(uniques[order].tolist()) if keep else ()
    freq = tuple(int(c) for c in counts[order]) if keep else ()

    def make(role: Role, reason: str) -> ColumnInfo:
        return ColumnInfo(name, role, role, is_number, n_levels, n_missing, levels, freq, reason)

    if n_levels == 0:
        return make(Role.EXCLUDED, "every cell is empty")
    if n_levels == 1:
        return make(Role.EXCLUDED, "the same value in every row, so it cannot explain anything")
    if is_date:
        return make(Role.DATE, "dates are not used as predictors unless you choose so")
    if n_levels == 2:
        return make(Role.BINARY, "two distinct values")
    if is_number:
        if n_levels == n_present and n_present > MAX_CATEGORY_LEVELS and _ID_NAME.search(name):
            present = values if not n_missing else values[~np.isnan(values)]
            if bool((present == np.round(present)).all()):
                return make(Role.IDENTIFIER, "a different whole number in every row, like a record number")
        return make(Role.NUMERIC, "numbers")
    first = values[:200] if not n_missing else values[codes >= 0][:200] if codes is not None \
        else values[~pd.isna(values)][:200]
    if _looks_like_dates(first):
        return make(Role.DATE, "looks like dates, which are not used as predictors unless you choose so")
    if n_levels == n_present and n_present > MAX_CATEGORY_LEVELS:
        role, reason = Role.IDENTIFIER, "a different text in every row, like a record identifier"
    elif n_levels > MAX_CATEGORY_LEVELS:
        role, reason = Role.IDENTIFIER, f"text with {n_levels} different values, too many to compare as groups"
    else:
        role, reason = Role.CATEGORICAL, f"text with {n_levels} groups"
    odd = _not_numbers(values, codes, uniques, counts)
    if odd is not None:
        k, example, row = odd
        reason += (f"; mostly numbers, but {k:,} of {n_present:,} cells {'is' if k == 1 else 'are'} not "
                   f"(e.g. {example!r} in data row {row + 1}, counting from the row below the column names), "
                   "so it is read as text: recode those cells, for example leave them empty, to use it as numbers")
    return make(role, reason)


#: Numeric cells above which a second thread describes the numeric columns.
_THREAD_CELLS = 2_000_000


def describe_columns(frame) -> dict[str, ColumnInfo]:
    """Infer the role of every column of a frame, in column order.

    In a large frame the numeric columns are described on a second thread
    while this one describes the text columns: hashing numbers releases
    Python's interpreter lock, hashing text does not, so the two overlap.
    Each column's description is the same either way.
    """
    import numpy as np

    names = [str(n) for n in frame.columns]
    series = [frame[n] for n in frame.columns]
    numeric = {i for i, s in enumerate(series) if isinstance(s.dtype, np.dtype) and s.dtype.kind in "iuf"}

    def describe(indices):
        return {i: describe_column(names[i], series[i]) for i in indices}

    others = [i for i in range(len(series)) if i not in numeric]
    if others and len(numeric) * len(frame) >= _THREAD_CELLS:
        from concurrent.futures import ThreadPoolExecutor

        with ThreadPoolExecutor(max_workers=1) as pool:
            later = pool.submit(describe, sorted(numeric))
            out = describe(others)
            out.update(later.result())
    else:
        out = describe(range(len(series)))
    return {names[i]: out[i] for i in range(len(series))}
