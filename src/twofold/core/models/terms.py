"""Non-linear effects and interactions as encoded blocks.

* A restricted cubic spline of a numeric predictor with k knots at the
  quantiles Harrell recommends (Regression Modeling Strategies, 2nd ed.,
  2015, sec. 2.4.6) gives k - 1 columns: the predictor itself and k - 2
  non-linear terms, so a straight line is the spline with those k - 2
  coefficients at zero.
* An interaction A:B multiplies every column of A's block with every column
  of B's block (numeric x numeric: one column; numeric x k-level factor:
  k - 1; factor x factor: (k1 - 1)(k2 - 1)).
"""

from __future__ import annotations

import numpy as np

from twofold.core.models.design import TermBlock
from twofold.core.errors import ColumnError, ModelError

#: Knot positions as quantiles of the predictor (Harrell 2015, sec. 2.4.6).
KNOT_QUANTILES = {
    3: (0.10, 0.50, 0.90),
    4: (0.05, 0.35, 0.65, 0.95),
    5: (0.05, 0.275, 0.50, 0.725, 0.95),
}


def knots_for(values: np.ndarray, k: int) -> np.ndarray:
    """Knots at the recommended quantiles of the non-missing values."""
    if k not in KNOT_QUANTILES:
        raise ModelError(f"A spline takes 3, 4 or 5 knots, not {k}; choose one of those.")
    values = values[np.isfinite(values)]
    knots = np.quantile(values, KNOT_QUANTILES[k])
    if len(np.unique(knots)) < k:
        raise ModelError(
            f"The predictor has too few distinct values for {k} knots (the knots would coincide); "
            "use fewer knots or keep a straight line."
        )
    return knots


def rcs_basis(x: np.ndarray, knots: np.ndarray) -> np.ndarray:
    """Restricted cubic spline basis: x and k - 2 non-linear columns.

    Column j (j = 1..k-2) is [(x - t_j)+^3 - (x - t_{k-1})+^3 (t_k - t_j)/(t_k - t_{k-1})
    + (x - t_k)+^3 (t_{k-1} - t_j)/(t_k - t_{k-1})] / (t_k - t_1)^2, linear beyond
    the outer knots; the division keeps the columns on the scale of x.
    """
    t = np.asarray(knots, dtype=float)
    k = len(t)
    x = np.asarray(x, dtype=float)
    scale = (t[-1] - t[0]) ** 2
    out = np.empty((len(x), k - 1), dtype=float, order="F")
    out[:, 0] = x

    def cube(v):
        return np.maximum(v, 0.0) ** 3

    last, before = t[-1], t[-2]
    for j in range(k - 2):
        # The knot ratios first: a cube of a value near the largest a model takes (1e100) stays finite.
        out[:, j + 1] = (cube(x - t[j]) - cube(x - before) * ((last - t[j]) / (last - before))
                         + cube(x - last) * ((before - t[j]) / (last - before))) / scale
    return out


def spline_block(linear: TermBlock, k: int) -> TermBlock:
    """The spline version of a numeric predictor's block."""
    if linear.kind != "numeric":
        raise ColumnError(f"'{linear.column}' is not numeric, so it cannot have a spline; "
                          "splines are for numbers such as age or length of stay.")
    x = linear.values[:, 0]
    knots = knots_for(x[~linear.missing], k)
    values = rcs_basis(x, knots)
    values[linear.missing] = 0.0
    levels = tuple(f"nonlinear {j}" for j in range(1, k - 1))
    return TermBlock(linear.column, "spline", levels, tuple(float(v) for v in knots), values, linear.missing)


def split_interaction(name: str) -> tuple[str, str] | None:
    """``"A:B"`` -> ``("A", "B")``; None for a plain column name."""
    if ":" not in name:
        return None
    a, b = name.split(":", 1)
    return a.strip(), b.strip()


def interaction_block(a: TermBlock, b: TermBlock) -> TermBlock:
    """The product columns of two predictors' blocks.

    A spline enters an interaction through its straight-line column only.
    Levels are ``"level"`` for numeric x factor and ``"levelA:levelB"`` for
    factor x factor; ``None`` entries for numeric x numeric.
    """
    if a.column == b.column:
        raise ModelError(f"An interaction needs two different predictors, not '{a.column}' with itself.")

    def parts(block):
        if block.kind == "factor":
            return [(lvl, block.values[:, j]) for j, lvl in enumerate(block.levels)]
        return [(None, block.values[:, 0])]

    cols, levels = [], []
    for la, va in parts(a):
        for lb, vb in parts(b):
            cols.append(va * vb)
            named = [str(v) for v in (la, lb) if v is not None]
            levels.append(":".join(named) if named else None)
    values = np.asfortranarray(np.column_stack(cols))
    kind = "interaction"
    return TermBlock(f"{a.column}:{b.column}", kind, tuple(levels), (a, b), values, a.missing | b.missing)
