"""Input checks in one place: columns, the outcome and its event value.

Every check raises a :class:`~twofold.core.errors.TwofoldError` whose message
says what was expected, what was found, and how to fix it.
"""

from __future__ import annotations

import difflib

import numpy as np

from twofold.core.errors import ColumnError
from twofold.core.data.roles import default_event


def _where(source: str | None) -> str:
    return f" in {source}" if source else ""


def require_column(columns, name: str, source: str | None = None) -> str:
    """Return ``name`` if it is a column, else raise a ColumnError naming close matches."""
    columns = [str(c) for c in columns]
    if name in columns:
        return name
    folded = {c.lower(): c for c in columns}
    if name.lower() in folded:
        return folded[name.lower()]
    close = difflib.get_close_matches(name, columns, n=3)
    hint = f"did you mean {', '.join(repr(c) for c in close)}?" if close else (
        f"the columns are: {', '.join(columns[:12])}{' ...' if len(columns) > 12 else ''}."
    )
    raise ColumnError(f"There is no column '{name}'{_where(source)}; {hint}")


def _same_number(a, b) -> bool:
    try:
        return float(a) == float(b)
    except (TypeError, ValueError):
        return False


def outcome_refusal(info) -> str | None:
    """Why a column cannot be the outcome (one short reason), or None when it can.

    An outcome has exactly two values (missing cells aside) and is not an
    identifier or a date.
    """
    role = getattr(info.role, "value", info.role)
    if role in ("identifier", "date"):
        return f"it is {'an identifier' if role == 'identifier' else 'a date'}, not a yes/no result"
    if info.n_levels == 2:
        return None
    if info.n_levels < 2:
        return "it has fewer than two values"
    if info.n_levels <= 5:
        return (f"it has {info.n_levels} values, an outcome needs two (mark values such as 'unknown' as "
                "missing first)")
    return f"it has {info.n_levels:,} values, an outcome needs two"


def outcome_levels(series, name: str, source: str | None = None) -> list:
    """The two distinct non-missing values of an outcome column, most frequent first.

    Raises
    ------
    ColumnError
        When the column does not have exactly two distinct values; the message
        lists what was found.
    """
    counts = series.dropna().value_counts()
    levels = counts.index.tolist()
    if len(levels) == 2:
        return levels
    if not levels:
        raise ColumnError(
            f"The outcome column '{name}'{_where(source)} is empty; choose a column with two values such as yes/no or 0/1."
        )
    shown = ", ".join(f"{v!r} ({int(c)} rows)" for v, c in list(counts.items())[:8])
    more = " ..." if len(levels) > 8 else ""
    if len(levels) == 1:
        raise ColumnError(
            f"The outcome column '{name}'{_where(source)} has only one value, {shown}, so there is nothing to predict; "
            "choose a column where both outcomes occur."
        )
    raise ColumnError(
        f"The outcome column '{name}'{_where(source)} has {len(levels)} different values ({shown}{more}), "
        "but an outcome needs exactly two; choose another column or recode it to two values."
    )


def match_event(levels: list, event, name: str, is_number: bool, source: str | None = None):
    """Find which of the outcome's two values is the event.

    A numeric column compares as a number, so ``"1"`` matches ``1.0``; text
    compares exactly, then ignoring case.  ``event=None`` is allowed only for a
    0/1 outcome, where the event is 1.
    """
    if event is None:
        if is_number and {float(v) for v in levels} == {0.0, 1.0}:
            return next(v for v in levels if float(v) == 1.0)
        raise ColumnError(
            f"Say which value of the outcome '{name}' is the event: it is one of "
            f"{' or '.join(repr(_plain(v)) for v in levels)} (for example --event {_plain(default_event(levels) or levels[0])})."
        )
    if is_number:
        for v in levels:
            if _same_number(v, event):
                return v
    else:
        for v in levels:
            if str(v) == str(event):
                return v
        for v in levels:
            if str(v).lower() == str(event).lower():
                return v
    raise ColumnError(
        f"The event value {event!r} does not occur in the outcome '{name}'{_where(source)}; "
        f"its values are {' and '.join(repr(_plain(v)) for v in levels)}."
    )


def _plain(v):
    """A number without a trailing .0 for display, else the value."""
    if isinstance(v, float) and v.is_integer():
        return int(v)
    return v


def outcome_vector(series, event, is_number: bool) -> np.ndarray:
    """1.0 where the outcome is the event, 0.0 for the other value, NaN where missing."""
    missing = series.isna().to_numpy()
    if is_number:
        values = series.to_numpy(dtype=float, na_value=np.nan)
        y = (values == float(event)).astype(float)
    else:
        y = (series.astype(object).to_numpy() == event).astype(float)
    y[missing] = np.nan
    return y
