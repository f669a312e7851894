"""What each column is: numeric, binary, categorical, identifier-like, date.

The inferred role decides what Twofold offers as a predictor.  Identifier-like
columns (one value per row, or text with very many levels) and dates are never
offered by default; the user can override any role later.
"""

from __future__ import annotations

import re
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


def describe_column(name: str, series) -> ColumnInfo:
    """Infer the role of one column.

    Parameters
    ----------
    name : str
    series : pandas.Series

    Returns
    -------
    ColumnInfo
    """
    import pandas as pd

    n = len(series)
    present = series.dropna()
    n_missing = n - len(present)
    is_number = bool(pd.api.types.is_numeric_dtype(series.dtype)) and not pd.api.types.is_bool_dtype(series.dtype)
    if pd.api.types.is_bool_dtype(series.dtype):
        present = present.astype(int)
        is_number = True
    counts = present.value_counts(sort=True)
    n_levels = int(len(counts))
    keep = n_levels <= max(MAX_CATEGORY_LEVELS, 2) * 5
    levels = tuple(counts.index.tolist()) if keep else ()
    freq = tuple(int(c) for c in counts.to_numpy()) if keep else ()

    def make(role: Role, reason: str) -> ColumnInfo:
        return ColumnInfo(name, role, role, is_number, n_levels, n_missing, levels, freq, reason)

    if n_levels == 0:
        return make(Role.EXCLUDED, "every cell is empty")
    if n_levels == 1:
        return make(Role.EXCLUDED, "the same value in every row, so it cannot explain anything")
    if pd.api.types.is_datetime64_any_dtype(series.dtype):
        return make(Role.DATE, "dates are not used as predictors unless you choose so")
    if n_levels == 2:
        return make(Role.BINARY, "two distinct values")
    if is_number:
        values = present.to_numpy(dtype=float)
        whole = bool((values == values.round()).all())
        if whole and n_levels == len(present) and len(present) > MAX_CATEGORY_LEVELS and _ID_NAME.search(name):
            return make(Role.IDENTIFIER, "a different whole number in every row, like a record number")
        return make(Role.NUMERIC, "numbers")
    text = present.astype(str).to_numpy()
    if _looks_like_dates(text):
        return make(Role.DATE, "looks like dates, which are not used as predictors unless you choose so")
    if n_levels == len(present) and len(present) > MAX_CATEGORY_LEVELS:
        return make(Role.IDENTIFIER, "a different text in every row, like a record identifier")
    if n_levels > MAX_CATEGORY_LEVELS:
        return make(Role.IDENTIFIER, f"text with {n_levels} different values, too many to compare as groups")
    return make(Role.CATEGORICAL, f"text with {n_levels} groups")


def describe_columns(frame) -> dict[str, ColumnInfo]:
    """Infer the role of every column of a frame, in column order."""
    return {str(name): describe_column(str(name), frame[name]) for name in frame.columns}
