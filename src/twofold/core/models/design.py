"""Turning columns into the numbers a model uses.

Each predictor column is encoded once into a :class:`TermBlock`: one column of
numbers for a numeric predictor, or indicator (0/1) columns against a
reference level for a categorical or two-valued text predictor (a k-level
factor gives k-1 columns).  A design matrix is the intercept plus the blocks
of the chosen predictors, restricted to the rows complete for all of them.

The design is built directly in numpy: a formula engine costs far more than
the fit at the sizes Twofold is meant for.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from twofold.core.errors import ColumnError
from twofold.core.data.roles import ColumnInfo, Role, default_reference


@dataclass(frozen=True)
class TermBlock:
    """The encoded columns of one predictor over all rows of the file.

    Attributes
    ----------
    column : str
        The predictor's column name (``"A:B"`` for an interaction).
    kind : str
        ``"numeric"``, ``"factor"`` (indicators against a reference level),
        ``"spline"`` (a restricted cubic spline: the value, then non-linear
        terms) or ``"interaction"`` (products of two blocks).
    levels : tuple
        For a factor, the non-reference levels in column order; for a spline
        the names of the non-linear terms; for an interaction one label per
        column (None for a product of two numbers); else ``()``.
    reference : object
        For a factor, the reference level; for a spline, its knots; for an
        interaction, the two blocks it multiplies; else ``None``.
    values : numpy.ndarray
        Shape (n_rows, width), float64; rows with a missing cell hold 0.
    missing : numpy.ndarray
        Shape (n_rows,), bool: the cell is missing.
    """

    column: str
    kind: str
    levels: tuple
    reference: object
    values: np.ndarray
    missing: np.ndarray

    @property
    def width(self) -> int:
        return self.values.shape[1]

    def level_of(self, j: int):
        """The level label of the block's j-th column (None for a plain number)."""
        if self.kind == "numeric":
            return None
        if self.kind == "spline":
            return None if j == 0 else self.levels[j - 1]
        return self.levels[j]

    @property
    def factor_reference(self):
        """The reference level of a factor (None for other kinds)."""
        return self.reference if self.kind == "factor" else None

    @property
    def knots(self) -> tuple:
        return tuple(self.reference) if self.kind == "spline" else ()

    @property
    def names(self) -> list[str]:
        """Parameter names: the column, or ``column[level]`` for each labelled column."""
        out = []
        for j in range(self.width):
            lvl = self.level_of(j)
            out.append(self.column if lvl is None else f"{self.column}[{lvl}]")
        return out


def encode(series, info: ColumnInfo, reference=None) -> TermBlock:
    """Encode one predictor column.

    Parameters
    ----------
    series : pandas.Series
        The column's cells.
    info : ColumnInfo
        Its description; ``info.role`` decides the encoding.  A binary column
        of numbers stays numeric (its coefficient is per unit), a binary or
        categorical column of text becomes indicators.
    reference : optional
        The reference level for a factor; default :func:`default_reference`.
    """
    import pandas as pd

    role = info.role
    if not role.is_predictor:
        raise ColumnError(
            f"The column '{info.name}' is marked as {role.value} ({info.reason}), so it cannot be a predictor; "
            "change its role first if you really mean to use it."
        )
    missing = series.isna().to_numpy()
    as_factor = role == Role.CATEGORICAL or (role == Role.BINARY and not info.is_number)
    if not as_factor:
        try:
            values = pd.to_numeric(series, errors="raise").to_numpy(dtype=float, na_value=np.nan)
        except (ValueError, TypeError):
            raise ColumnError(
                f"The column '{info.name}' holds text, so it cannot be used as a number; "
                "use it as groups (categorical) instead."
            ) from None
        values = np.where(missing, 0.0, values).reshape(-1, 1, order="F")
        _refuse_huge(values[:, 0], info.name)
        return TermBlock(info.name, "numeric", (), None, values, missing)

    levels = list(info.levels)
    if not levels:
        levels = series.dropna().value_counts().index.tolist()
    if len(levels) - 1 > MAX_GROUP_COEFFICIENTS:
        raise ColumnError(
            f"The column '{info.name}' has {len(levels):,} different values; as groups it would need "
            f"{len(levels) - 1:,} coefficients, more than the {MAX_GROUP_COEFFICIENTS:,} Twofold fits for one "
            "column; use it as a number, or combine its values into fewer groups in the file."
        )
    if reference is None:
        # A column forced to be groups past the levels a description keeps has none listed: the most frequent.
        reference = default_reference(info) if info.levels else levels[0] if levels else None
    else:
        reference = _match_level(levels, reference, info.name)
    others = [lvl for lvl in levels if lvl != reference]
    codes = pd.Categorical(series, categories=[reference, *others]).codes
    width = len(others)
    # Column-major, so each indicator is contiguous when the design is assembled.
    values = np.zeros((len(series), width), dtype=float, order="F")
    rows = np.nonzero(codes > 0)[0]
    values[rows, codes[rows] - 1] = 1.0
    return TermBlock(info.name, "factor", tuple(others), reference, values, missing)


#: The most indicator columns one column may become when used as groups: each costs a column of the
#: design and a row and column of every matrix the fit inverts (1,000 groups took four minutes on 20,000 rows).
MAX_GROUP_COEFFICIENTS = 200

#: The largest size of a number a model takes.  A fit and its checks square a column's values and a
#: curved effect cubes them; the cube of 1e100 (1e300) is still a double-precision number, and the
#: reciprocal of its square (1e-200) too, while around 1e103 and 1e154 they are not.
LARGEST_VALUE = 1e100


def _refuse_huge(values: np.ndarray, column: str) -> None:
    """A ColumnError naming the rows of any value beyond :data:`LARGEST_VALUE` in size."""
    if not np.abs(values).max(initial=0.0) > LARGEST_VALUE:
        return
    rows = np.flatnonzero(np.abs(values) > LARGEST_VALUE)
    shown = ", ".join(f"{values[r]:.3g} in data row {r + 1:,}" for r in rows[:3])
    more = f" and {len(rows) - 3:,} more" if len(rows) > 3 else ""
    raise ColumnError(
        f"The column '{column}' holds {'a number' if len(rows) == 1 else 'numbers'} too large to fit a model "
        f"with ({shown}{more}, counting from the row below the column names; a model takes sizes up to 1e100), "
        "which is probably a typing or export error; correct or empty those cells and open the file again."
    )


def _match_level(levels, reference, column):
    for lvl in levels:
        if lvl == reference or str(lvl) == str(reference):
            return lvl
    for lvl in levels:
        try:
            if float(lvl) == float(reference):
                return lvl
        except (TypeError, ValueError):
            pass
    shown = ", ".join(repr(v) for v in levels[:12])
    raise ColumnError(
        f"The reference level {reference!r} does not occur in the column '{column}'; its levels are {shown}."
    )


@dataclass(frozen=True)
class Design:
    """An intercept plus predictor blocks, on a fixed set of rows.

    Attributes
    ----------
    X : numpy.ndarray
        Shape (n_used, n_params), intercept first, float64, row-major.
    y : numpy.ndarray
        Shape (n_used,), 1.0 for the event.
    rows : numpy.ndarray
        0-based positions of the used rows in the file's data rows.
    blocks : tuple of TermBlock
        The predictors, in column order of ``X``.
    slices : tuple of slice
        Where each block's parameters sit in ``X``.
    """

    X: np.ndarray
    y: np.ndarray
    rows: np.ndarray
    blocks: tuple
    slices: tuple

    @property
    def names(self) -> list[str]:
        out = ["intercept"]
        for block in self.blocks:
            out.extend(block.names)
        return out

    @property
    def predictors(self) -> tuple[str, ...]:
        return tuple(b.column for b in self.blocks)

    @property
    def n_params(self) -> int:
        return self.X.shape[1]


#: Rows filled at a time when a design matrix is assembled.
ASSEMBLE_BAND = 8192


def assemble(blocks, y_all: np.ndarray, rows: np.ndarray) -> Design:
    """Stack the intercept and the blocks on the given rows."""
    blocks = tuple(blocks)
    width = 1 + sum(b.width for b in blocks)
    # Row-major (statsmodels' Hessian is several times faster on it), filled a band of rows at a time: the
    # band stays in the processor's cache while each column is written into it, which is 2 to 4 times faster
    # than filling whole columns (strided across the full matrix) or filling column-major and transposing.
    X = np.empty((len(rows), width), dtype=float)
    X[:, 0] = 1.0
    every_row = len(rows) == len(y_all) and (len(rows) == 0 or (rows[0] == 0 and rows[-1] == len(rows) - 1))
    slices = []
    at = 1
    for block in blocks:
        slices.append(slice(at, at + block.width))
        at += block.width
    for start in range(0, len(rows), ASSEMBLE_BAND):
        band = slice(start, start + ASSEMBLE_BAND)
        take = None if every_row else rows[band]
        for block, cols in zip(blocks, slices):
            for j in range(block.width):
                column = block.values[:, j]
                X[band, cols.start + j] = column[band] if take is None else column.take(take)
    return Design(X, y_all[rows].astype(float), rows, blocks, tuple(slices))


#: Rows per chunk when the centred cross-products are accumulated (bounds the extra memory).
GRAM_CHUNK = 65_536


def centred_gram(X: np.ndarray) -> np.ndarray:
    """Covariance matrix (divisor n) of the columns of ``X`` after the first, computed on centred data.

    Each column is first shifted by its value in the first row and the
    cross-products are summed in chunks of rows, so a column whose spread is
    small beside its size (dates stored as yyyymmdd, 1,000,000 plus or minus
    10) keeps its variance instead of losing it to cancellation, as
    E[x^2] - E[x]^2 on the raw values would.  Formula: with s = x_1 (the
    shift), cov = sum (x - s)(x - s)' / n - m m', m = mean(x - s).
    """
    n, p = X.shape
    k = p - 1
    if n == 0 or k <= 0:
        return np.zeros((max(k, 0), max(k, 0)))
    shift = X[0, 1:].copy()
    total = np.zeros((k, k))
    sums = np.zeros(k)
    for start in range(0, n, GRAM_CHUNK):
        chunk = X[start:start + GRAM_CHUNK, 1:] - shift
        total += np.dot(chunk.T, chunk)
        sums += chunk.sum(axis=0)
    mean = sums / n
    return total / n - np.outer(mean, mean)


def aliased_columns(X: np.ndarray, tol: float = 1e-9) -> list[int]:
    """Columns of ``X`` that are constant or a linear combination of earlier ones.

    Decided on centred columns (:func:`centred_gram`), so neither the size of
    a column's values nor its distance from zero matters, only its spread:
    a column is constant when all its values are equal, and it is dropped as
    determined by the others when the share of its variance not explained by
    the columns kept before it is at most ``tol``.  The intercept (column 0)
    is always kept.  Formula: residual variance of x_j on the kept columns,
    from the centred covariance matrix.
    """
    n, p = X.shape
    if p <= 1:
        return []
    with np.errstate(over="ignore", invalid="ignore"):
        dropped = _aliased(X, tol)
        if dropped is None:
            # Squares beyond double precision (values past about 1e154, or curved terms of large values): the
            # decision depends only on each column's spread relative to itself, so each column is taken in units
            # of its largest size (a power of two, exact) and the sums stay finite.
            dropped = _aliased(X / unit_sizes(X), tol)
    return dropped


def unit_sizes(X: np.ndarray) -> np.ndarray:
    """Per column, the power of two at or above its largest size (1 for a column of zeros)."""
    biggest = np.abs(X).max(axis=0, initial=0.0)
    return np.where(biggest > 0, np.exp2(np.ceil(np.log2(np.where(biggest > 0, biggest, 1.0)))), 1.0)


def _aliased(X: np.ndarray, tol: float):
    """:func:`aliased_columns`, or None when its cross-products are not finite."""
    n, p = X.shape
    # One cross-product of the raw columns serves whenever no column's mean dwarfs its spread; otherwise
    # E[x^2] - E[x]^2 would lose the variance to cancellation, and the centred pass is made instead.
    gram = np.dot(X.T, X) / max(n, 1)
    mean = gram[0, 1:]
    cov = gram[1:, 1:] - np.outer(mean, mean)
    if not np.isfinite(gram).all():
        return None
    if np.any(np.diag(cov) <= 1e-6 * np.diag(gram)[1:]):
        cov = centred_gram(X)
        if not np.isfinite(cov).all():
            return None
    keep: list[int] = []   # indices into the centred columns (column j of X is j - 1 here)
    dropped: list[int] = []
    for c in range(p - 1):
        var_c = cov[c, c]
        if not var_c > 0:  # a constant column: exactly 0 on the centred pass, which such a column triggers
            dropped.append(c + 1)
            continue
        if keep:
            sub = cov[np.ix_(keep, keep)]
            cross = cov[keep, c]
            try:
                coef = np.linalg.solve(sub, cross)
            except np.linalg.LinAlgError:
                coef = np.linalg.lstsq(sub, cross, rcond=None)[0]
            resid = var_c - np.dot(cross, coef)
        else:
            resid = var_c
        if resid <= tol * var_c:
            dropped.append(c + 1)
        else:
            keep.append(c)
    return dropped
