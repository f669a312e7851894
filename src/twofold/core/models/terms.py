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


def spline_block(linear: TermBlock, k: int, knots=None) -> TermBlock:
    """The spline version of a numeric predictor's block (``knots``: given ones, else Harrell's on its values)."""
    if linear.kind != "numeric":
        raise ColumnError(f"'{linear.column}' is not numeric, so it cannot have a spline; "
                          "splines are for numbers such as age or length of stay.")
    x = linear.values[:, 0]
    knots = knots_for(x[~linear.missing], k) if knots is None else np.asarray(knots, dtype=float)
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


# ---------------------------------------------------------------------------
# which coefficients make up a predictor's effect, and how each is worded
# ---------------------------------------------------------------------------

#: The multiplication sign joining the two predictors of an interaction ("age \u00d7 sex").
TIMES = "\u00d7"


def value_text(v) -> str:
    """A level or outcome value as text: 1.0 -> '1', numpy scalars as Python."""
    if hasattr(v, "item"):
        v = v.item()
    if isinstance(v, float) and v.is_integer():
        return str(int(v))
    return str(v)


def interactions_with(predictors, column: str) -> tuple[str, ...]:
    """The interaction terms among ``predictors`` that contain ``column`` ("age:sex" for "age")."""
    out = []
    for name in predictors:
        pair = split_interaction(name)
        if pair is not None and column in pair:
            out.append(name)
    return tuple(out)


def total_effects(predictors) -> dict[str, tuple[str, ...]]:
    """For each plain predictor that is part of an interaction: the interactions that contain it.

    A predictor's total effect is its main effect together with every term
    that contains it; testing the main effect alone would test its effect
    where the other predictor is zero (or at its reference level), which
    changes when that predictor's origin moves.
    """
    predictors = tuple(predictors)
    out = {}
    for name in predictors:
        if split_interaction(name) is not None:
            continue
        within = interactions_with(predictors, name)
        if within:
            out[name] = within
    return out


def total_label(column: str, interactions=()) -> str:
    """"age", or "age, with its interaction with sex" when tested together with its interactions."""
    if not interactions:
        return term_title(column)
    others = []
    for name in interactions:
        a, b = split_interaction(name)
        others.append(b if a == column else a)
    if len(others) == 1:
        return f"{column}, with its interaction with {others[0]}"
    return f"{column}, with its interactions with {', '.join(others[:-1])} and {others[-1]}"


def term_title(name: str) -> str:
    """A predictor's name as a reader should see it: "age \u00d7 sex" for the interaction "age:sex"."""
    pair = split_interaction(name)
    return name if pair is None else f"{pair[0]} {TIMES} {pair[1]}"


def _part_text(block: TermBlock, level) -> str:
    return f"{value_text(level)} vs {value_text(block.reference)}"


def _interaction_label(block: TermBlock, level) -> str:
    a, b = block.reference
    name = f"{a.column} {TIMES} {b.column}"
    if level is None:
        return f"{name} (per 1 unit of each)"
    if a.kind == "factor" and b.kind == "factor":
        la = next((v for v in a.levels if str(level).startswith(f"{v}:")), str(level).split(":")[0])
        lb = str(level)[len(str(la)) + 1:]
        lb = next((v for v in b.levels if str(v) == lb), lb)
        return f"{name}: {_part_text(a, la)}, {_part_text(b, lb)}"
    return f"{name}: {_part_text(a if a.kind == 'factor' else b, level)} (per 1 unit)"


def coefficient_label(block: TermBlock | None, level, column: str | None = None) -> str:
    """One coefficient in plain words.

    "age (per 1 unit)", "ward: B vs A", "age: curve, slope below the first
    knot", "age: curve term 1", "los \u00d7 sex: M vs F (per 1 unit)".
    """
    if block is None:
        return "baseline odds (intercept)" if column is None else str(column)
    if block.kind == "spline":
        if level is None:
            return f"{block.column}: curve, slope below the first knot"
        number = str(level).removeprefix("nonlinear ").strip()
        return f"{block.column}: curve term {number}"
    if block.kind == "interaction":
        return _interaction_label(block, level)
    if level is None:
        return f"{block.column} (per 1 unit)"
    return f"{block.column}: {_part_text(block, level)}"


def coefficient_part(block: TermBlock | None) -> str:
    """What kind of coefficient a block gives: "number", "group", "curve" or "interaction"."""
    if block is None:
        return "intercept"
    return {"numeric": "number", "factor": "group", "spline": "curve", "interaction": "interaction"}[block.kind]
