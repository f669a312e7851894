"""Risk-adjusted comparison of units (wards, hospitals, teams) with funnel limits.

For each unit: the observed events O, the events the model expects from its
patients' risks E (the sum of their predicted risks: indirect
standardisation), their ratio O/E with an exact Poisson 95% interval, and a
verdict from funnel limits: where O/E would fall by chance alone if the unit's
patients had the risks the model gives them (O ~ Poisson(E)).  Units are
tested together for overdispersion (more spread between units than chance
gives); when it is present, the limits are widened by the estimated factor.

References
----------
Spiegelhalter DJ (2005). Funnel plots for comparing institutional
performance. Statistics in Medicine 24:1185-1202.  (Exact limits for a count
with interpolation between the integers, Appendix; overdispersion by
winsorised z-scores, section 6.)

Garwood F (1936). Fiducial limits for the Poisson distribution. Biometrika
28:437-442.  (The exact interval of a Poisson count.)
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from twofold.core.errors import ColumnError, ModelError

#: Control limits drawn on a funnel plot: two-sided coverage in percent, and the key the JSON uses.
LEVELS = (("95", 0.95), ("99.8", 0.998))
#: Points along the expected-count axis at which the limits are given.
LIMIT_POINTS = 100
#: Share of z-scores pulled in at each end before the overdispersion estimate (Spiegelhalter 2005: 10%).
WINSOR = 0.10
#: The most units one comparison may have.
MAX_UNITS = 2000
#: p-value below which overdispersion is taken as present and the limits are widened (common practice).
OVERDISPERSION_P = 0.05

#: Said beside every comparison of units.
UNITS_CAUTION = (
    "Case-mix adjustment is only as good as the model and the recorded data: a unit whose patients differ in ways "
    "the model does not capture, or whose records are coded differently, can look better or worse than it is. "
    "Read a unit outside the limits as a reason to look closer, not as a judgement."
)

VERDICTS = {
    "above_99.8": "more events than its case mix predicts, beyond what chance easily explains",
    "above_95": "more events than its case mix predicts, at the edge of what chance explains",
    "within": "within what chance explains",
    "below_95": "fewer events than its case mix predicts, at the edge of what chance explains",
    "below_99.8": "fewer events than its case mix predicts, beyond what chance easily explains",
}


def poisson_interval(observed: int, level: float = 0.95) -> tuple[float, float]:
    """Exact (Garwood) interval for the mean of a Poisson count: chi-square quantiles over 2."""
    from scipy.stats import chi2

    a = (1.0 - level) / 2.0
    low = 0.0 if observed == 0 else float(chi2.ppf(a, 2 * observed)) / 2.0
    high = float(chi2.ppf(1.0 - a, 2 * (observed + 1))) / 2.0
    return low, high


def funnel_limit(expected, p: float) -> np.ndarray:
    """The p-quantile of O/E when O ~ Poisson(E), interpolated between integers (Spiegelhalter 2005, appendix).

    r = the smallest count with P(O <= r) >= p; alpha = (P(O <= r) - p) / P(O = r);
    limit = (r - alpha) / E.
    """
    from scipy.stats import poisson

    e = np.asarray(expected, dtype=float)
    r = poisson.ppf(p, e)
    cdf_r = poisson.cdf(r, e)
    cdf_below = poisson.cdf(r - 1, e)
    mass = cdf_r - cdf_below
    alpha = np.where(mass > 0, (cdf_r - p) / np.where(mass > 0, mass, 1.0), 0.0)
    return np.maximum(r - alpha, 0.0) / e


def _limits_at(expected, factor: float = 1.0) -> dict:
    """Lower and upper limits of O/E at each expected count, for each level; widened by ``factor`` if above 1.

    Without overdispersion: the exact Poisson limits.  With a factor phi:
    1 -/+ z sqrt(phi / E), the normal approximation widened by phi
    (Spiegelhalter 2005, section 6), never below 0.
    """
    from scipy.stats import norm

    e = np.asarray(expected, dtype=float)
    out = {}
    for key, level in LEVELS:
        a = (1.0 - level) / 2.0
        if factor > 1.0:
            half = norm.ppf(1.0 - a) * np.sqrt(factor / e)
            out[key] = (np.maximum(1.0 - half, 0.0), 1.0 + half)
        else:
            out[key] = (funnel_limit(e, a), funnel_limit(e, 1.0 - a))
    return out


@dataclass(frozen=True)
class Overdispersion:
    """Spiegelhalter's (2005) test: I phi, phi the mean squared winsorised z-score, against chi-square."""

    statistic: float
    df: int
    p_value: float
    factor: float
    present: bool

    def as_dict(self) -> dict:
        return {"statistic": self.statistic, "df": self.df, "p_value": self.p_value, "factor": self.factor,
                "present": self.present}


def overdispersion(observed, expected) -> Overdispersion:
    """z_i = (O_i - E_i) / sqrt(E_i), winsorised at the 10th and 90th centiles; phi = mean z^2.

    I phi is compared with chi-square on I - 1 degrees of freedom (the reading
    of Spiegelhalter 2005 used here, from memory); when the p-value is below
    0.05, the limits are widened by phi (``factor``); otherwise the factor is 1.
    """
    from scipy.stats import chi2

    o = np.asarray(observed, dtype=float)
    e = np.asarray(expected, dtype=float)
    units = o.size
    if units < 2:
        return Overdispersion(float("nan"), 0, float("nan"), 1.0, False)
    z = (o - e) / np.sqrt(e)
    lo, hi = np.quantile(z, [WINSOR, 1.0 - WINSOR])
    z = np.clip(z, lo, hi)
    phi = float(np.mean(z * z))
    statistic = units * phi
    df = units - 1
    p_value = float(chi2.sf(statistic, df))
    present = bool(p_value < OVERDISPERSION_P and phi > 1.0)
    return Overdispersion(statistic, df, p_value, phi if present else 1.0, present)


@dataclass(frozen=True, eq=False)
class UnitComparison:
    """Every unit's observed and expected events, ratio, interval and verdict, with the funnel limits."""

    unit_column: str
    units: list
    limits: dict
    limits_adjusted: dict | None
    overdispersion: Overdispersion
    rows_used: int
    rows_without_unit: int

    def as_record(self) -> dict:
        from twofold.core.outputs.summary import clean_number

        def curve(grid):
            return {key: [[clean_number(e), clean_number(lo), clean_number(hi)] for e, lo, hi in grid[key]]
                    for key, _ in LEVELS}

        return {
            "unit_column": self.unit_column,
            "units": [{k: (clean_number(v) if isinstance(v, float) else v) for k, v in u.items()} for u in self.units],
            "limits": curve(self.limits),
            "limits_adjusted": None if self.limits_adjusted is None else curve(self.limits_adjusted),
            "overdispersion": {k: (clean_number(v) if isinstance(v, float) else v)
                               for k, v in self.overdispersion.as_dict().items()},
            "rows_used": self.rows_used,
            "rows_without_unit": self.rows_without_unit,
            "caution": UNITS_CAUTION,
        }


def _verdict(ratio: float, bounds: dict) -> str:
    for key in ("99.8", "95"):
        lo, hi = bounds[key]
        if ratio > hi:
            return VERDICTS[f"above_{key}"]
        if ratio < lo:
            return VERDICTS[f"below_{key}"]
    return VERDICTS["within"]


def check_unit_column(column: str, outcome: str, predictors) -> None:
    """Refuse a unit column that is the outcome or one of the model's predictor columns (one sentence)."""
    if column == outcome:
        raise ColumnError(f"'{column}' is the outcome of the model, not a unit; give the unit column as the column "
                          "naming each record's ward, hospital or team.")
    if column in set(predictors):
        raise ColumnError(f"'{column}' is a predictor of the model, so differences between its groups are already "
                          "adjusted away; choose a unit column that is not a predictor (a ward, hospital or team).")


def factorize_groups(values, column: str, role: str, most: int, what: str):
    """(has, codes, labels): which records have a group, the code of each of those, and the sorted groups.

    Numbers and text mixed in one column (as a workbook can hold them) are
    compared as text when they cannot be sorted together.

    Raises
    ------
    ColumnError
        No record with a group, or more than ``most`` groups; the message
        names the ``role`` of the column ("unit", "subgroup") and ``what``
        a fitting column holds.
    """
    import pandas as pd

    series = pd.Series(values, dtype=object).reset_index(drop=True)
    has = series.notna().to_numpy()
    try:
        codes, labels = pd.factorize(series[has], sort=True)
    except TypeError:
        codes, labels = pd.factorize(series[has].astype(str), sort=True)
    if not has.any():
        raise ColumnError(f"The {role} column '{column}' is empty in every row used; choose a column of {what}.")
    if len(labels) > most:
        raise ColumnError(f"The {role} column '{column}' has {len(labels):,} different values, more than the "
                          f"{most:,} groups Twofold compares; choose a column of {what}, not a record number.")
    return has, codes, labels


def compare_units(unit_values, y, p, unit_column: str, points: int = LIMIT_POINTS) -> UnitComparison:
    """Risk-adjusted comparison of the units named by ``unit_values`` (one per record; None/NaN: no unit).

    Parameters
    ----------
    unit_values : array_like
        The unit of each record.
    y : array_like
        Outcome, 1 = event.
    p : array_like
        Each record's predicted risk from the model.

    Raises
    ------
    ModelError
        No record with a unit, a single unit, or more than :data:`MAX_UNITS` units.
    """
    y = np.asarray(y, dtype=float)
    p = np.asarray(p, dtype=float)
    if not np.all(np.isfinite(p)):
        raise ModelError("The model gives no finite risk for some records (a coefficient without a finite estimate), "
                         "so expected events cannot be counted; refit the model (a Firth fit keeps estimates finite).")
    has, codes, labels = factorize_groups(unit_values, unit_column, "unit", MAX_UNITS, "wards, hospitals or teams")
    if len(labels) < 2:
        raise ModelError(f"The unit column '{unit_column}' holds a single unit, so there is nothing to compare; "
                         "choose a column with two or more units.")
    observed = np.bincount(codes, weights=y[has], minlength=len(labels))
    expected = np.bincount(codes, weights=p[has], minlength=len(labels))
    rows = np.bincount(codes, minlength=len(labels))
    disp = overdispersion(observed, expected)
    from twofold.core.outputs.summary import plain_value

    out = []
    own = _limits_at(expected, disp.factor)  # every unit's limits at once (scipy's quantiles take arrays)
    for i, label in enumerate(labels):
        o, e = int(round(observed[i])), float(expected[i])
        lo, hi = poisson_interval(o)
        ratio = o / e
        bounds = {key: (float(own[key][0][i]), float(own[key][1][i])) for key, _ in LEVELS}
        out.append({"unit": plain_value(label), "rows": int(rows[i]), "observed": o, "expected": e,
                    "ratio": ratio, "ci_low": lo / e, "ci_high": hi / e, "verdict": _verdict(ratio, bounds)})
    grid = np.geomspace(max(min(expected.min(), 1.0) / 2.0, 0.05), expected.max() * 1.1, points)

    def along(factor):
        lim = _limits_at(grid, factor)
        return {key: list(zip(grid.tolist(), lim[key][0].tolist(), lim[key][1].tolist())) for key, _ in LEVELS}

    return UnitComparison(unit_column, out, along(1.0), along(disp.factor) if disp.present else None, disp,
                          int(has.sum()), int((~has).sum()))
