"""Small-cell suppression for published tables of counts of people.

A count of 1 up to a threshold (default 10) is not shown; zeros are shown.
This follows the cell-size policy of the US Centers for Medicare & Medicaid
Services (no cell of 1 to 10 people may be published), which is common
practice but no single standard: agencies and data owners use other
thresholds (5, 10, 20 ...), so the threshold is a parameter.

Hiding a small count is not enough when the row and column totals are
published, since the hidden count can then be worked out by subtraction.
:func:`protect_table` therefore adds secondary (complementary) suppression:
wherever a row or column would have a single hidden entry, the next smallest
non-zero entry of that row or column is hidden too, and this is repeated until
stable.  A final audit by linear programming (the smallest and largest value
each hidden entry can take given everything published and that counts are
not negative) catches the patterns the row-by-row rule misses, such as a
hidden cell that bridges two otherwise protected blocks; such a cell gets a
further complement.  Totals are treated as entries of the table: a small
total is hidden, and a total is only hidden as a complement when no inner
cell can serve.

Every hidden entry, primary or secondary, shows the same mark, so the mark
itself does not tell which one is small.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from twofold.core.errors import TwofoldError
from twofold.core.outputs import DEFAULT_THRESHOLD, MAX_THRESHOLD  # noqa: F401  (the limits, named here too)

#: What a hidden count shows, in tables and reports alike.
SUPPRESSED = "suppressed"


def suppression_note(threshold: int = DEFAULT_THRESHOLD) -> str:
    """The plain sentence that explains the mark in a report."""
    if threshold <= 0:
        return "No counts were suppressed (suppression was switched off)."
    return (
        f"Counts of 1 to {threshold} people are shown as '{SUPPRESSED}', and so is at least one more count in the "
        "same row or column wherever the hidden one could otherwise be worked out from the totals; zeros are shown, "
        "except where a zero says that everyone in a group had the same outcome. "
        f"This follows the US Centers for Medicare & Medicaid Services cell-size policy (1 to 10 hidden); "
        "it is common practice, not a single standard, and some data owners require other thresholds."
    )


def is_small(count, threshold: int = DEFAULT_THRESHOLD) -> bool:
    """True for a count that must not be shown: 1 <= count <= threshold."""
    return threshold > 0 and 1 <= int(count) <= threshold


def show_count(count, threshold: int = DEFAULT_THRESHOLD) -> str:
    """A single count on its own (no totals beside it): the number, or the mark when small."""
    if count is None:
        return "n/a"
    return SUPPRESSED if is_small(count, threshold) else f"{int(count):,}"


@dataclass(frozen=True, eq=False)
class ProtectedTable:
    """A table of counts with its totals and what may be shown.

    The extended table has the inner cells, then a column of row totals (when
    ``row_totals``) and a row of column totals (when ``col_totals``), with the
    grand total in the corner when both are present.

    Attributes
    ----------
    values : ndarray of int, shape (m + r, n + c)
        The extended table (r, c are 1 when the column totals and row totals
        are present).
    hidden : ndarray of bool, same shape
        True for entries shown as the mark.
    primary : ndarray of bool, same shape
        True for entries hidden because they are small themselves.
    shape : tuple of int
        (m, n), the inner table.
    row_totals, col_totals : bool
    threshold : int
    """

    values: np.ndarray
    hidden: np.ndarray
    primary: np.ndarray
    shape: tuple
    row_totals: bool
    col_totals: bool
    threshold: int

    def entry(self, i: int, j: int) -> int | None:
        """The extended-table entry (i, j), or None when hidden."""
        return None if self.hidden[i, j] else int(self.values[i, j])

    def text(self, i: int, j: int) -> str:
        """The extended-table entry as shown."""
        return SUPPRESSED if self.hidden[i, j] else f"{int(self.values[i, j]):,}"

    def cell(self, i: int, j: int) -> int | None:
        """Inner cell (i, j), or None when hidden."""
        return self.entry(i, j)

    def row_total(self, i: int) -> int | None:
        return self.entry(i, self.shape[1]) if self.row_totals else None

    def col_total(self, j: int) -> int | None:
        return self.entry(self.shape[0], j) if self.col_totals else None

    def grand_total(self) -> int | None:
        return self.entry(*self.shape) if self.row_totals and self.col_totals else None

    @property
    def any_hidden(self) -> bool:
        return bool(self.hidden.any())

    def as_text(self) -> list[list[str]]:
        """Every entry of the extended table as shown."""
        return [[self.text(i, j) for j in range(self.values.shape[1])] for i in range(self.values.shape[0])]


def _lines(m: int, n: int, row_totals: bool, col_totals: bool) -> list[tuple[list, list]]:
    """The additive relations of the extended table: (entries, signs) with sum(sign * value) = 0."""
    lines = []
    rows = m + (1 if col_totals else 0)
    cols = n + (1 if row_totals else 0)
    if row_totals:
        for i in range(rows):
            if i == m and not (row_totals and col_totals):
                continue
            lines.append(([(i, j) for j in range(n)] + [(i, n)], [1.0] * n + [-1.0]))
    if col_totals:
        for j in range(cols):
            lines.append(([(i, j) for i in range(m)] + [(m, j)], [1.0] * m + [-1.0]))
    return lines


def _is_total(entry, m: int, n: int) -> bool:
    return entry[0] >= m or entry[1] >= n


def _pick_complement(candidates, values, hidden, m, n):
    """The entry to hide next among ``candidates``: inner cells before totals, non-zero first, smallest value."""
    free = [e for e in candidates if not hidden[e]]
    if not free:
        return None

    def key(e):
        v = int(values[e])
        return (_is_total(e, m, n), v == 0, v, e)

    return min(free, key=key)


def _ranges(values: np.ndarray, hidden: np.ndarray, lines) -> dict:
    """Smallest and largest value each hidden entry can take given the published ones (counts >= 0).

    Linear programming (scipy's HiGHS).  The relations of a table with
    margins form a network matrix, which is totally unimodular, so these
    bounds are whole numbers attained by whole-number tables.
    """
    from scipy.optimize import linprog

    unknown = [tuple(e) for e in np.argwhere(hidden)]
    index = {e: k for k, e in enumerate(unknown)}
    rows, rhs = [], []
    for entries, signs in lines:
        a = np.zeros(len(unknown))
        b = 0.0
        touched = False
        for e, s in zip(entries, signs):
            if e in index:
                a[index[e]] += s
                touched = True
            else:
                b -= s * float(values[e])
        if touched:
            rows.append(a)
            rhs.append(b)
    out = {}
    if not rows:
        return {e: (0.0, float("inf")) for e in unknown}
    A = np.array(rows)
    b = np.array(rhs)
    for e, k in index.items():
        c = np.zeros(len(unknown))
        c[k] = 1.0
        lo = linprog(c, A_eq=A, b_eq=b, bounds=(0, None), method="highs")
        hi = linprog(-c, A_eq=A, b_eq=b, bounds=(0, None), method="highs")
        low = lo.fun if lo.status == 0 else 0.0
        high = -hi.fun if hi.status == 0 else float("inf")  # status 3: unbounded
        out[e] = (float(low), float(high))
    return out


def protect_table(counts, threshold: int = DEFAULT_THRESHOLD, row_totals: bool = True,
                  col_totals: bool = True, zeros_disclose: bool = False) -> ProtectedTable:
    """Decide which counts of a two-way table (and its totals) may be published.

    Primary suppression hides every entry with 1 <= count <= threshold; zeros
    are shown.  Secondary suppression then hides, wherever a row or column
    relation (cells sum to the total) has exactly one hidden entry, the next
    smallest non-zero entry of that row or column, repeating until stable;
    an audit by linear programming adds complements until no hidden entry is
    fixed by the published ones (its smallest and largest possible values
    differ).

    Parameters
    ----------
    counts : array_like of int, shape (m, n)
        Counts of people; use shape (m, 1) for a single column.
    threshold : int
        Largest count that is hidden (0 switches suppression off).
    row_totals, col_totals : bool
        Whether the row totals (a last column) and column totals (a last row)
        are published; the grand total is published when both are.
    zeros_disclose : bool
        For a table whose rows are groups of people who share a trait and
        whose columns are outcomes: a zero beside a non-zero count in a row
        says that everyone in the group had the same outcome, so it is
        hidden too (with a complement, as any hidden count).

    Returns
    -------
    ProtectedTable

    Raises
    ------
    TwofoldError
        For counts that are not whole numbers of zero or more.
    """
    arr = np.asarray(counts)
    if arr.ndim == 1:
        arr = arr.reshape(-1, 1)
    if arr.ndim != 2 or arr.size == 0:
        raise TwofoldError("A table to protect must be a non-empty two-way table of counts.")
    if not np.all(np.isfinite(arr.astype(float))) or np.any(arr.astype(float) < 0) \
            or np.any(arr.astype(float) != np.round(arr.astype(float))):
        raise TwofoldError("A table to protect must hold whole counts of zero or more.")
    inner = arr.astype(np.int64)
    m, n = inner.shape
    rows = m + (1 if col_totals else 0)
    cols = n + (1 if row_totals else 0)
    values = np.zeros((rows, cols), dtype=np.int64)
    values[:m, :n] = inner
    if row_totals:
        values[:m, n] = inner.sum(axis=1)
    if col_totals:
        values[m, :n] = inner.sum(axis=0)
    if row_totals and col_totals:
        values[m, n] = inner.sum()
    threshold = int(threshold)
    primary = (values >= 1) & (values <= threshold) if threshold > 0 else np.zeros(values.shape, dtype=bool)
    if zeros_disclose and threshold > 0:
        primary[:m, :n] |= (inner == 0) & (inner.sum(axis=1) > 0)[:, None]
    hidden = primary.copy()
    if threshold <= 0:
        return ProtectedTable(values, hidden, primary, (m, n), row_totals, col_totals, threshold)
    lines = _lines(m, n, row_totals, col_totals)
    for _ in range(values.size + 1):
        changed = False
        # Row-and-column rule: a relation with a single hidden entry gives it away.
        for entries, _signs in lines:
            n_hidden = sum(bool(hidden[e]) for e in entries)
            if n_hidden == 1:
                pick = _pick_complement(entries, values, hidden, m, n)
                if pick is not None:
                    hidden[pick] = True
                    changed = True
        if changed:
            continue
        # Audit: any hidden entry still fixed by the published ones (e.g. a bridge between two blocks)?
        if not hidden.any():
            break
        ranges = _ranges(values, hidden, lines)
        fixed = [e for e, (lo, hi) in ranges.items() if hi - lo < 0.5]
        if not fixed:
            break
        e = fixed[0]
        own_lines = [entries for entries, _ in lines if e in entries]
        pool = [x for entries in own_lines for x in entries]
        pick = _pick_complement(pool, values, hidden, m, n)
        if pick is None:
            break
        hidden[pick] = True
    return ProtectedTable(values, hidden, primary, (m, n), row_totals, col_totals, threshold)


# ---------------------------------------------------------------------------
# zeros that disclose, and model outputs
# ---------------------------------------------------------------------------

#: Fewest residual degrees of freedom (records used minus coefficients) for a model's figures to be shown:
#: the ESSnet guidelines for output checking (Eurostat 2015) ask for at least 10 (common practice).
MIN_RESIDUAL_DF = 10


def group_discloses(events, nonevents, threshold: int = DEFAULT_THRESHOLD) -> bool:
    """True when a group's counts by outcome tell something about its members.

    A group of people who share a trait (a predictor's group, or a
    combination of groups) discloses when 1 to ``threshold`` of them had the
    event, or did not, or are in it at all; or when everyone in it had the
    same outcome (a zero beside a non-zero count: the outcome of every member
    is then known, which the ESSnet guidelines call group disclosure).
    """
    if threshold <= 0:
        return False
    events, nonevents = int(events), int(nonevents)
    total = events + nonevents
    if total == 0:
        return False
    return (is_small(events, threshold) or is_small(nonevents, threshold) or is_small(total, threshold)
            or events == 0 or nonevents == 0)


@dataclass(frozen=True)
class ModelCheck:
    """What of a fitted model's figures may be shown (output checking of model results).

    Attributes
    ----------
    withheld : dict
        Predictor name -> why its coefficient figures (coefficients, odds
        ratios, intervals, standard errors, Wald tests) are withheld.
        Likelihood-ratio tests compare whole models and follow
        ``whole_model`` of the models they compare.
    whole_model : str or None
        Why every figure of the model (coefficients, fit statistics, tests,
        assessment) is withheld, or None when they may be shown.
    """

    withheld: dict
    whole_model: str | None

    def shows(self, predictor: str) -> bool:
        """Whether a predictor's own figures may be shown."""
        return self.whole_model is None and predictor not in self.withheld

    @property
    def anything_withheld(self) -> bool:
        return bool(self.withheld) or self.whole_model is not None


#: The reason given for a predictor whose groups disclose.
GROUP_REASON = ("one or more of its groups holds 1 to {t} people, or 1 to {t} with or without the event, or "
                "people who all had the same outcome; its coefficients, odds ratios, intervals, standard errors "
                "and Wald tests would reveal those counts")


def check_model(groups: dict, patterns, n_used: int, n_params: int,
                threshold: int = DEFAULT_THRESHOLD, outcome=None) -> ModelCheck:
    """Decide which figures of a fitted model can be published, following output-checking practice.

    The rules follow the ESSnet guidelines for the checking of output based
    on microdata (Eurostat 2015) for regression results: at least
    :data:`MIN_RESIDUAL_DF` residual degrees of freedom; no coefficient of a
    group (or combination of groups) whose counts would be suppressed in a
    table (:func:`group_discloses`); and a model whose predictors are all
    groups is a table in disguise (its fit depends on the counts of each
    combination of groups by outcome only), so its figures are shown only
    when that table could be shown whole.

    Parameters
    ----------
    groups : dict
        Predictor name -> list of (events, nonevents), one pair per group of
        a grouped predictor (its levels, the two values of a two-valued
        number, the combinations of an interaction of two grouped ones).
    patterns : list of (events, nonevents) or None
        For a model whose predictors are all grouped: one pair per
        combination of groups present (covariate pattern); None when a
        predictor is measured on a scale.
    n_used, n_params : int
        Records used and coefficients (intercept included).
    threshold : int
        The suppression limit (0: nothing is withheld).
    outcome : (events, nonevents), optional
        The records used by outcome: when either is 1 to ``threshold``, every
        figure of the model (from its intercept on) reveals it.
    """
    if threshold <= 0:
        return ModelCheck({}, None)
    t = int(threshold)
    withheld = {name: GROUP_REASON.format(t=t) for name, pairs in groups.items()
                if any(group_discloses(e, ne, t) for e, ne in pairs)}
    whole = None
    if outcome is not None and (is_small(outcome[0], t) or is_small(outcome[1], t)):
        whole = (f"only 1 to {t} of the records used had the event, or did not, and every figure of the model "
                 "(its intercept, fit statistics, tests and assessment) would reveal that number")
    elif n_used - n_params < MIN_RESIDUAL_DF:
        whole = (f"the model has {n_params} coefficients for {n_used:,} records, fewer than "
                 f"{MIN_RESIDUAL_DF} records beyond one per coefficient (the least the ESSnet guidelines for "
                 "output checking, Eurostat 2015, allow), so its figures come close to describing single records")
    elif patterns is not None and any(group_discloses(e, ne, t) for e, ne in patterns):
        whole = (f"every predictor of the model is a grouping, so all its figures (coefficients, fit statistics, "
                 "tests, discrimination and calibration) are worked out from the counts of each combination of "
                 f"groups by outcome, and some combination holds 1 to {t} people, 1 to {t} with or without the "
                 "event, or people who all had the same outcome; those counts could be solved for")
    return ModelCheck(withheld, whole)


def coarse_roc(fpr, tpr, nonevents: int, events: int, threshold: int = DEFAULT_THRESHOLD):
    """An ROC curve thinned so that no step of it counts 1 to ``threshold`` people.

    Each point of an ROC curve gives, exactly, how many events and non-events
    have a predicted risk above a threshold; between two points lie the
    people of a band of predicted risk.  The points kept here are such that
    between any two neighbours the events and the non-events each number 0
    or more than ``threshold`` (the curve runs straight between them, as a
    curve through fewer thresholds does).  The first and last points are
    always kept.

    Returns
    -------
    fpr, tpr : ndarray
    """
    fpr, tpr = np.asarray(fpr, dtype=float), np.asarray(tpr, dtype=float)
    if threshold <= 0 or len(fpr) <= 2:
        return fpr, tpr
    fp = np.rint(fpr * nonevents).astype(np.int64)
    tp = np.rint(tpr * events).astype(np.int64)

    def fine(a, b):
        return not is_small(tp[b] - tp[a], threshold) and not is_small(fp[b] - fp[a], threshold)

    kept = [0]
    for k in range(1, len(fp) - 1):
        if fine(kept[-1], k):
            kept.append(k)
    end = len(fp) - 1
    while len(kept) > 1 and not fine(kept[-1], end):
        kept.pop()
    kept.append(end)
    return fpr[kept], tpr[kept]
