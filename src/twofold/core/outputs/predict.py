"""A saved model as plain numbers, and the predicted risk of one described patient.

A :class:`FrozenModel` holds what is needed to apply a fitted model without
refitting it: the coefficients, their names and covariance, and how each
predictor was encoded (numeric, or indicator columns against a reference
level, with the range of each numeric predictor among the rows used).  It is
what a session file stores, what ``twofold predict`` reads and what a
``twofold rerun --frozen`` applies to a new extract.

:func:`predict` gives the risk for one patient with a 95% interval by the
delta method on the logit scale; it refuses a missing value, an unknown group
and a number outside the range the model was fitted on.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np

from twofold.core.errors import ColumnError, ModelError
from twofold.core.models.fit import Z95  # z for a two-sided 95% interval, as in the fit's Wald intervals


@dataclass(frozen=True)
class EncodedTerm:
    """How one predictor (or interaction) enters the saved model.

    Attributes
    ----------
    column : str
        The predictor's column, or ``"A:B"`` for an interaction.
    kind : str
        ``"numeric"``, ``"factor"``, ``"spline"`` or ``"interaction"``.
    levels : tuple
        Factor: the non-reference levels in the order of their indicator
        columns; spline: the labels of its non-linear columns; interaction:
        one label per product column (None for number x number); else ``()``.
    reference : object
        For a factor, the reference level (all indicators 0); else ``None``.
    low, high : float or None
        For a numeric or spline predictor, the smallest and largest value
        among the rows the model was fitted on.
    knots : tuple
        For a spline, its knots.
    of : tuple
        For an interaction, the two predictors it multiplies.
    """

    column: str
    kind: str
    levels: tuple = ()
    reference: object = None
    low: float | None = None
    high: float | None = None
    knots: tuple = ()
    of: tuple = ()

    @property
    def names(self) -> list[str]:
        """Parameter names, spelled as the design spells them."""
        if self.kind == "numeric":
            return [self.column]
        if self.kind == "spline":
            return [self.column] + [f"{self.column}[{lvl}]" for lvl in self.levels]
        return [self.column if lvl is None else f"{self.column}[{lvl}]" for lvl in self.levels]

    @property
    def is_number(self) -> bool:
        return self.kind in ("numeric", "spline")

    def as_dict(self) -> dict:
        from twofold.core.outputs.summary import plain_value

        return {
            "column": self.column, "kind": self.kind,
            "levels": [None if v is None else plain_value(v) for v in self.levels],
            "reference": None if self.reference is None else plain_value(self.reference),
            "range": None if not self.is_number or self.low is None else [float(self.low), float(self.high)],
            "knots": [float(k) for k in self.knots] if self.kind == "spline" else None,
            "of": list(self.of) if self.kind == "interaction" else None,
        }


@dataclass(frozen=True, eq=False)
class FrozenModel:
    """A fitted logistic model as numbers only.

    Attributes
    ----------
    outcome : str
    event : object
    method : str
        How it was fitted (maximum likelihood or Firth).
    names : tuple of str
        Names of the estimated coefficients, intercept first (aliased columns
        left out).
    coefficients : ndarray
        The coefficients used for predictions (for a Firth fit: the slopes with
        the intercept-corrected (FLIC) intercept).
    covariance : ndarray
        Their estimated covariance; NaN where it could not be estimated.
    terms : tuple of EncodedTerm
    """

    outcome: str
    event: object
    method: str
    names: tuple
    coefficients: np.ndarray
    covariance: np.ndarray
    terms: tuple

    @property
    def predictors(self) -> list[str]:
        """Every term of the model (interactions included), in design order."""
        return [t.column for t in self.terms]

    @property
    def columns(self) -> list[str]:
        """The data columns a value is needed for (the terms other than interactions)."""
        return [t.column for t in self.terms if t.kind != "interaction"]

    @property
    def design_names(self) -> list[str]:
        """All columns of the design, aliased ones included: intercept, then each term's."""
        out = ["intercept"]
        for t in self.terms:
            out.extend(t.names)
        return out

    def term(self, column: str) -> EncodedTerm:
        for t in self.terms:
            if t.column == column:
                return t
        raise KeyError(column)

    def as_dict(self) -> dict:
        from twofold.core.outputs.summary import clean_number, plain_value

        return {
            "outcome": self.outcome,
            "event": plain_value(self.event),
            "method": self.method,
            "names": list(self.names),
            "coefficients": [clean_number(v) for v in self.coefficients],
            "covariance": [[clean_number(v) for v in row] for row in self.covariance],
            "terms": [t.as_dict() for t in self.terms],
        }

    @classmethod
    def from_dict(cls, d: dict) -> "FrozenModel":
        """Rebuild from :meth:`as_dict` (the dict is assumed already validated)."""
        terms = []
        for t in d["terms"]:
            rng = t.get("range")
            terms.append(EncodedTerm(t["column"], t["kind"], tuple(t.get("levels") or ()), t.get("reference"),
                                     None if rng is None else float(rng[0]), None if rng is None else float(rng[1]),
                                     tuple(float(k) for k in (t.get("knots") or ())), tuple(t.get("of") or ())))
        coef = np.array([np.nan if v is None else float(v) for v in d["coefficients"]], dtype=float)
        cov = np.array([[np.nan if v is None else float(v) for v in row] for row in d["covariance"]], dtype=float)
        cov = cov.reshape(len(coef), len(coef))
        model = cls(d["outcome"], d["event"], d.get("method", "maximum likelihood"), tuple(d["names"]), coef, cov,
                    tuple(terms))
        missing = [n for n in model.names if n not in model.design_names]
        if missing:
            raise ModelError(f"The saved model names a coefficient '{missing[0]}' that its predictors do not make; "
                             "save the session again from Twofold.")
        return model


def frozen_model(fit, outcome: str, event) -> FrozenModel:
    """The numbers of a fit that are needed to apply it elsewhere.

    For a Firth fit the prediction coefficients are the FLIC ones (Puhr et al.
    2017), the same as its own predicted risks; the covariance is the Firth
    fit's (for the intercept an approximation).
    """
    flic = getattr(fit, "_flic", None)
    coef = np.asarray(fit.params if flic is None else flic.params, dtype=float)
    terms = []
    for block, sl in zip(fit.design.blocks, fit.design.slices):
        if block.kind in ("numeric", "spline"):
            values = fit.design.X[:, sl.start]  # a spline's first column is the value itself
            low, high = (float(values.min()), float(values.max())) if len(values) else (None, None)
            knots = tuple(float(k) for k in block.knots) if block.kind == "spline" else ()
            levels = tuple(block.levels) if block.kind == "spline" else ()
            terms.append(EncodedTerm(block.column, block.kind, levels, None, low, high, knots))
        elif block.kind == "factor":
            terms.append(EncodedTerm(block.column, "factor", tuple(block.levels), block.reference))
        elif block.kind == "interaction":
            a, b = block.reference
            terms.append(EncodedTerm(block.column, "interaction", tuple(block.levels), None, of=(a.column, b.column)))
        else:
            raise ModelError(f"The model has a term '{block.column}' of a kind ({block.kind}) that cannot be saved "
                             "as numbers yet; save the session without it.")
    return FrozenModel(outcome, event, fit.method, tuple(fit.names), coef.copy(), np.array(fit.cov, dtype=float),
                       tuple(terms))


# ---------------------------------------------------------------------------
# matching values
# ---------------------------------------------------------------------------


def _same(a, b) -> bool:
    """Level matching as reference levels are matched: equal, equal as text, or equal as numbers."""
    if a == b or str(a) == str(b):
        return True
    try:
        return float(a) == float(b)
    except (TypeError, ValueError):
        return False


def match_level(term: EncodedTerm, value):
    """The saved level ``value`` stands for (reference included), or None."""
    for lvl in (term.reference, *term.levels):
        if lvl is not None and _same(lvl, value):
            return lvl
    text = str(value).strip()
    for lvl in (term.reference, *term.levels):
        if lvl is not None and str(lvl).strip().lower() == text.lower():
            return lvl
    return None


def _shown_levels(term: EncodedTerm) -> str:
    levels = [term.reference, *term.levels]
    shown = ", ".join(repr(v) for v in levels[:12])
    return shown + (" ..." if len(levels) > 12 else "")


#: A number written with a decimal comma ("72,5"): digits, one comma, then one, two or four or more digits.
_DECIMAL_COMMA = re.compile(r"^[+-]?\d+,(\d{1,2}|\d{4,})$")


def _number(column: str, value) -> float:
    """A value typed for a numeric predictor; a decimal comma ("72,5") is read as a decimal point.

    "1,250" is refused rather than guessed: it could mean 1250 or 1.25.
    """
    if isinstance(value, bool):
        raise ModelError(f"The value for '{column}' should be a number such as 50, not {value!r}.")
    text = str(value).strip() if not isinstance(value, (int, float)) else None
    if text is not None and _DECIMAL_COMMA.match(text):
        text = text.replace(",", ".")
    elif text is not None and re.fullmatch(r"[+-]?\d+,\d{3}", text):
        raise ModelError(f"The value {text!r} for '{column}' could mean {text.replace(',', '')} or "
                         f"{text.replace(',', '.')}; write it without the comma or with a decimal point.")
    try:
        x = float(text) if text is not None else float(value)
    except ValueError:
        raise ModelError(f"The value {value!r} for '{column}' is not a number; write a number such as 50 "
                         "(a decimal point or comma is fine).") from None
    if not math.isfinite(x):
        raise ModelError(f"The value {value!r} for '{column}' is not a finite number; give an ordinary number.")
    return x


def _fmt(x: float) -> str:
    return f"{x:g}"


def _assemble(model: FrozenModel, base: dict, n: int) -> np.ndarray:
    """Design columns (kept coefficients only) from each column's numbers or level codes.

    ``base`` maps a column to a float array (numeric, spline) or an int array
    of codes (factor: 0 the reference, j the j-th non-reference level).
    Spline columns are the restricted cubic spline basis at the saved knots;
    interaction columns the products of the two predictors' columns (a spline
    through its straight-line column), as the fit built them.
    """
    from twofold.core.models.terms import rcs_basis

    full = {"intercept": np.ones(n)}
    parts = {}
    for t in model.terms:
        if t.kind == "numeric":
            x = base[t.column]
            full[t.column] = x
            parts[t.column] = [(None, x)]
        elif t.kind == "spline":
            x = base[t.column]
            basis = rcs_basis(x, np.asarray(t.knots, dtype=float))
            for j, name in enumerate(t.names):
                full[name] = basis[:, j]
            parts[t.column] = [(None, x)]
        elif t.kind == "factor":
            codes = base[t.column]
            cols = [(codes == j + 1).astype(float) for j in range(len(t.levels))]
            for name, col in zip(t.names, cols):
                full[name] = col
            parts[t.column] = list(zip(t.levels, cols))
    for t in model.terms:
        if t.kind != "interaction":
            continue
        a, b = t.of
        products = [va * vb for _, va in parts[a] for _, vb in parts[b]]
        for name, col in zip(t.names, products):
            full[name] = col
    return np.ascontiguousarray(np.column_stack([full[name] for name in model.names]), dtype=float)


def design_row(model: FrozenModel, values: dict) -> np.ndarray:
    """The design row x (kept coefficients only) for one described patient.

    Parameters
    ----------
    model : FrozenModel
    values : dict
        Column name -> value (text or number).  Numbers are parsed as numbers;
        a factor's value is matched to its saved levels (exactly, as text, as a
        number, then ignoring case); the reference level gives all zeros.
        Interactions and spline terms follow from the columns' values.

    Raises
    ------
    ModelError
        A predictor without a value, a value for a column the model does not
        use, an unknown level, or a number outside the range seen in the rows
        used (extrapolation).
    """
    by_name = {str(k): v for k, v in values.items()}
    columns = model.columns
    unknown = [k for k in by_name if k not in columns]
    if unknown:
        raise ModelError(f"'{unknown[0]}' is not a predictor of the saved model; its predictors are "
                         f"{', '.join(columns)}.")
    absent = [c for c in columns
              if by_name.get(c) is None or (isinstance(by_name[c], str) and not by_name[c].strip())]
    if absent:
        raise ModelError(f"No value was given for {', '.join(repr(c) for c in absent)}, "
                         f"{'a predictor' if len(absent) == 1 else 'predictors'} of the model; "
                         f"add {' '.join(f'--value {c}=VALUE' for c in absent)}.")
    base = {}
    for t in model.terms:
        if t.kind == "interaction":
            continue
        v = by_name[t.column]
        if t.is_number:
            x = _number(t.column, v)
            if t.low is not None and not (t.low <= x <= t.high):
                raise ModelError(
                    f"{t.column} = {_fmt(x)} is outside the range seen in the rows used ({_fmt(t.low)} to {_fmt(t.high)}), "
                    "and the model says nothing reliable beyond the data it was fitted to; give a value within that range."
                )
            base[t.column] = np.array([x])
        else:
            lvl = match_level(t, v)
            if lvl is None:
                raise ModelError(f"{v!r} is not a group of '{t.column}' in the saved model; its groups are "
                                 f"{_shown_levels(t)}.")
            base[t.column] = np.array([0 if lvl == t.reference else 1 + list(t.levels).index(lvl)])
    return _assemble(model, base, 1)[0]


@dataclass(frozen=True)
class Prediction:
    """Predicted risk for one patient with its interval.

    probability = expit(x'b); se = sqrt(x' V x) on the logit scale;
    ci = expit(x'b -/+ z se).
    """

    probability: float
    ci_low: float
    ci_high: float
    linear_predictor: float
    se: float
    level: float = 0.95

    def as_dict(self) -> dict:
        from twofold.core.outputs.summary import clean_number

        return {"probability": clean_number(self.probability), "ci_low": clean_number(self.ci_low),
                "ci_high": clean_number(self.ci_high), "linear_predictor": clean_number(self.linear_predictor),
                "standard_error_logit": clean_number(self.se), "level": self.level}


def predict(model: FrozenModel, values: dict) -> Prediction:
    """Predicted probability of the event for one described patient, with a 95% interval.

    p = expit(x'b), se = sqrt(x' V x), CI = expit(x'b -/+ 1.96 se): the delta
    method on the logit scale, so the interval stays within 0 and 1.

    Parameters
    ----------
    model : FrozenModel
    values : dict
        Column name -> value, one for every predictor of the model.

    Raises
    ------
    ModelError
        See :func:`design_row`; also when the saved model has no finite
        estimate for a coefficient.
    """
    from scipy.special import expit

    if not np.all(np.isfinite(model.coefficients)):
        bad = [n for n, b in zip(model.names, model.coefficients) if not np.isfinite(b)]
        raise ModelError(f"The saved model has no finite estimate for {bad[0]}, so it cannot give a risk; "
                         "refit it (a Firth fit keeps estimates finite).")
    x = design_row(model, values)
    eta = float(x @ model.coefficients)
    var = float(x @ model.covariance @ x)
    se = math.sqrt(var) if np.isfinite(var) and var >= 0 else float("nan")
    lo, hi = (float(expit(eta - Z95 * se)), float(expit(eta + Z95 * se))) if math.isfinite(se) else (float("nan"),) * 2
    return Prediction(float(expit(eta)), lo, hi, eta, se)


# ---------------------------------------------------------------------------
# many rows: a saved model on a new extract
# ---------------------------------------------------------------------------


def design_matrix(model: FrozenModel, frame, source: str = "the data") -> tuple[np.ndarray, np.ndarray]:
    """The saved model's design on the rows of a new frame, with the saved encoding.

    Returns
    -------
    X : ndarray, shape (n_rows, n_kept)
        Intercept and the kept coefficients' columns; rows with a missing
        predictor hold zeros there.
    missing : ndarray of bool, shape (n_rows,)
        True where some predictor of the model is missing.

    Raises
    ------
    ColumnError
        A predictor column is absent, holds text where the model needs
        numbers, or holds a group the saved model never saw.
    """
    import pandas as pd

    n = len(frame)
    present = {str(c): c for c in frame.columns}
    absent = [c for c in model.columns if c not in present]
    if absent:
        raise ColumnError(f"{', '.join(repr(c) for c in absent)} {'is' if len(absent) == 1 else 'are'} missing from "
                          f"{source}; the saved model needs the same columns, so rename them back or choose "
                          "another extract.")
    base = {}
    missing = np.zeros(n, dtype=bool)
    for t in model.terms:
        if t.kind == "interaction":
            continue
        series = frame[present[t.column]]
        miss = series.isna().to_numpy()
        missing |= miss
        if t.is_number:
            try:
                values = pd.to_numeric(series, errors="raise").to_numpy(dtype=float, na_value=np.nan)
            except (ValueError, TypeError):
                raise ColumnError(f"The column '{t.column}' in {source} holds text, but the saved model uses it as a "
                                  "number; fix the column or refit the model on this extract.") from None
            base[t.column] = np.where(miss, 0.0, values)
            continue
        codes = np.zeros(n, dtype=int)
        cells = series.astype(object).to_numpy()
        unknown = []
        # Match each distinct value once, then spread the codes to the rows.
        for value in pd.unique(cells[~miss]):
            lvl = match_level(t, value)
            if lvl is None:
                unknown.append(value)
                continue
            codes[(~miss) & (cells == value)] = 0 if lvl == t.reference else 1 + list(t.levels).index(lvl)
        if unknown:
            shown = ", ".join(repr(v) for v in unknown[:5])
            raise ColumnError(f"The column '{t.column}' in {source} has {'a group' if len(unknown) == 1 else 'groups'} "
                              f"the saved model never saw ({shown}); the model cannot score those rows, so "
                              "recode them to its groups or refit the model on this extract.")
        base[t.column] = codes
    return _assemble(model, base, n), missing


# ---------------------------------------------------------------------------
# a saved model's performance on a new extract (no refitting)
# ---------------------------------------------------------------------------

#: Written beside slope and calibration-in-the-large when a saved model meets new records.
FROZEN_CALIBRATION_NOTE = (
    "The saved model was applied to these records without refitting, so the calibration slope (ideal 1; below 1 "
    "means predicted risks are too extreme) and calibration-in-the-large (ideal 0; above 0 means risks are "
    "predicted too low on average) are informative here."
)


@dataclass(eq=False)
class FrozenResult:
    """How a saved model performs on the rows of a data file, without refitting.

    ``record`` is the JSON of ``twofold rerun --frozen``; ``assessment`` the
    :class:`~twofold.core.assessing.assessment.Assessment` computed on the new rows.
    """

    model: FrozenModel
    source: str
    data: str
    rows_read: int
    rows_missing_outcome: int
    missing_by_column: dict
    y: np.ndarray
    predicted: np.ndarray
    assessment: object
    record: dict
    notices: list
    frozen: bool = True
    #: The saved model's design on the rows used (kept columns, intercept first).
    X: np.ndarray | None = None

    @property
    def rows_used(self) -> int:
        return int(len(self.y))

    @property
    def events(self) -> int:
        return int(self.y.sum())


def _pseudo_fit(model: FrozenModel, X: np.ndarray, y: np.ndarray, rows: np.ndarray):
    """A LogisticFit holding the saved coefficients on the new rows, so the assessment code reads it as any fit."""
    from twofold.core.models.design import Design, TermBlock
    from twofold.core.models.fit import LogisticFit

    blocks, slices, at = [], [], 1
    for t in model.terms:
        width = len(t.names)
        reference = tuple(t.knots) if t.kind == "spline" else t.reference
        blocks.append(TermBlock(t.column, t.kind, tuple(t.levels), reference, np.zeros((0, width)),
                                np.zeros(0, dtype=bool)))
        slices.append(slice(at, at + width))
        at += width
    names = model.design_names
    # Aliased (dropped) columns sit in the design as zeros; only the kept ones carry coefficients.
    full = np.zeros((len(y), len(names)))
    kept = [names.index(n) for n in model.names]
    full[:, kept] = X
    design = Design(np.ascontiguousarray(full), y, rows, tuple(blocks), tuple(slices))
    eta = np.dot(X, model.coefficients)
    # log L = sum y eta - log(1 + exp(eta)), written stably.
    llf = float(np.sum(y * eta - np.logaddexp(0.0, eta)))
    dropped = [n for n in names[1:] if n not in model.names]
    return LogisticFit(design, model.coefficients, model.covariance, llf, True, 0, kept, dropped, [])


def add_adaptation(result: "FrozenResult"):
    """Choose how to adapt a saved model to the new rows of ``result`` (closed testing,
    :func:`~twofold.core.models.updating.adapt_model`), add ``adaptation`` to its record and return it."""
    from twofold.core.models.updating import adapt_model

    adaptation = adapt_model(result.model, result.X, result.y, source=result.source)
    result.record["adaptation"] = adaptation.as_dict()
    return adaptation


def coefficients_applied(model: FrozenModel) -> list[dict]:
    """``coefficients_applied``: each saved coefficient as applied, {name, estimate}, intercept first."""
    from twofold.core.outputs.summary import clean_number

    return [{"name": name, "estimate": clean_number(b)} for name, b in zip(model.names, model.coefficients)]


@dataclass(eq=False)
class ScoredRows:
    """A saved model's design on the rows of a data file: the usable rows (0-based), their outcome and design."""

    study: object
    event: object
    has_outcome: np.ndarray
    rows: np.ndarray
    y: np.ndarray
    X: np.ndarray
    coefficients: np.ndarray

    @property
    def predicted(self) -> np.ndarray:
        """The saved model's risks on the usable rows."""
        from scipy.special import expit

        return expit(np.dot(self.X, self.coefficients))


def score_file(model: FrozenModel, path, sheet: str | None = None) -> ScoredRows:
    """Read a data file and build the saved model's design on its rows (outcome and every predictor present).

    Raises
    ------
    TwofoldError
        The outcome column missing, its event value absent, no usable row,
        usable rows of one outcome only, or a column the model cannot read
        (see :func:`design_matrix`).
    """
    from twofold.core.data.checks import outcome_vector
    from twofold.core.models.study import Study

    study = Study.from_file(path, sheet=sheet)
    frame = study.frame
    columns = study.columns
    if model.outcome not in columns:
        raise ColumnError(f"The outcome column '{model.outcome}' of the saved model is missing from {study.source}; "
                          "choose an extract with the same columns.")
    event = study.set_outcome(model.outcome, model.event, guess=False)
    y_all = outcome_vector(frame[model.outcome], event, columns[model.outcome].is_number)
    X_all, missing = design_matrix(model, frame, study.source)
    has_outcome = ~np.isnan(y_all)
    use = has_outcome & ~missing
    rows = np.flatnonzero(use)
    y = y_all[rows]
    if len(rows) == 0:
        raise ModelError(f"No rows of {study.source} have the outcome and every predictor of the saved model; "
                         "check the extract.")
    if y.min() == y.max():
        raise ModelError(f"The {len(rows):,} usable rows of {study.source} hold only "
                         f"{'events' if y.min() == 1 else 'non-events'}, so the model's performance cannot be "
                         "measured; use an extract with both outcomes.")
    return ScoredRows(study, event, has_outcome, rows, y, X_all[rows], model.coefficients)


def evaluate_frozen(model: FrozenModel, path, sheet: str | None = None, threshold: float | None = None,
                    groups: int = 10, subgroups: str | None = None) -> FrozenResult:
    """Apply a saved model, unchanged, to the rows of a data file and assess it there.

    The design is rebuilt with the saved encoding (same reference levels and
    indicator columns); rows missing the outcome or a predictor are left out
    and counted.  Discrimination (AUC with DeLong CI), calibration slope and
    calibration-in-the-large (now informative), Brier score, Hosmer-Lemeshow
    test and calibration groups are computed on those rows; with
    ``subgroups`` (a column), the performance within its groups too.

    Raises
    ------
    TwofoldError
        Missing columns, an outcome whose event value does not occur, text in
        a numeric predictor, or groups the saved model never saw.
    """
    from twofold.core.assessing.assessment import assess
    from twofold.core.assessing.external import external_record
    from twofold.core.errors import Notice
    from twofold.core.outputs.summary import CAUTION, clean_number, plain_value

    scored = score_file(model, path, sheet)
    study, frame, event = scored.study, scored.study.frame, scored.event
    has_outcome, rows, y, X = scored.has_outcome, scored.rows, scored.y, scored.X
    fit = _pseudo_fit(model, X, y, rows)
    notices = list(study.table.notices)
    missing_by = {c: int((frame[c].isna().to_numpy() & has_outcome).sum()) for c in model.columns}
    lost = len(frame) - len(rows)
    if lost:
        notices.append(Notice("rows_dropped", f"{lost:,} of {len(frame):,} rows were left out (no outcome or a "
                              "missing predictor); results describe the complete rows only."))
    outside = []
    for t in model.terms:
        if t.is_number and t.low is not None:
            v = X[:, model.names.index(t.column)] if t.column in model.names else None
            if v is not None:
                k = int(((v < t.low) | (v > t.high)).sum())
                if k:
                    outside.append(f"'{t.column}' in {k:,} rows")
    if outside:
        notices.append(Notice("extrapolation", "Some values lie outside the range the model was fitted on ("
                              + ", ".join(outside) + "); its risks there are extrapolations."))
    a = assess(None, fit, threshold=threshold, groups=groups, drop_one=False)
    rec = a.as_record()
    cal = a.calibration
    rec.update({
        "calibration_note": FROZEN_CALIBRATION_NOTE,
        "calibration_slope_ci": [clean_number(cal.slope_ci_low), clean_number(cal.slope_ci_high)],
        "calibration_intercept_ci": [clean_number(cal.intercept_ci_low), clean_number(cal.intercept_ci_high)],
        "calibration_groups": None if a.groups is None else {
            k: ([clean_number(x) for x in v] if isinstance(v, list) else clean_number(v))
            for k, v in a.groups.as_dict().items()},
        # Influence and sample size describe a fit to these rows; no fit was made here.
        "influential": [],
        "sample_size": None,
    })
    rec.update(external_record(y, fit.fitted, fit.linear_predictor, a.auc.auc, a.smooth))
    record = {
        "frozen": True,
        "method": model.method,
        "outcome": model.outcome,
        "event": plain_value(event),
        "predictors": model.predictors,
        "rows_read": int(len(frame)),
        "rows_missing_outcome": int((~has_outcome).sum()),
        "missing_by_column": missing_by,
        "rows_used": int(len(rows)),
        "events": int(y.sum()),
        "nonevents": int(len(y) - y.sum()),
        "log_likelihood": clean_number(fit.llf),
        "null_log_likelihood": clean_number(fit.null_llf),
        "assessment": rec,
        "coefficients_applied": coefficients_applied(model),
        "warnings": [n.as_dict() for n in notices],
        "caution": CAUTION,
    }
    if subgroups is not None:
        from twofold.core.analysis import add_subgroups
        from twofold.core.data.checks import require_column

        add_subgroups(record, frame, require_column(frame.columns, str(subgroups), study.source), rows, y,
                      fit.fitted, fit.linear_predictor)
    return FrozenResult(model, study.source, str(path), int(len(frame)), record["rows_missing_outcome"], missing_by,
                        y, np.asarray(fit.fitted), a, record, notices, X=X)
