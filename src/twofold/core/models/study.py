"""A study: one loaded data file, its column roles, an outcome, and fits.

:class:`Study` is the Qt-free model that the command line and the window share.
It keeps the encoded predictor columns and the rank checks cached, so a
refit after ticking a predictor costs about one Newton fit.  It announces
changes through :class:`~twofold.core.events.Event` objects in ``events``.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from types import SimpleNamespace

import numpy as np

from twofold.core.models.design import Design, TermBlock, aliased_columns, assemble, encode
from twofold.core.errors import ColumnError, ModelError, Notice
from twofold.core.events import Event
from twofold.core.models.fit import LikelihoodRatioTest, LogisticFit, fit_logistic, nested_test
from twofold.core.data.io import LoadedTable, read_table
from twofold.core.data.roles import ColumnInfo, Role, default_event, describe_column, describe_columns
from twofold.core.data.checks import match_event, outcome_levels, outcome_vector, require_column


@dataclass(frozen=True)
class RowAccount:
    """Where the rows went: read, lost to a missing outcome or predictor, used.

    ``missing_by_column`` counts, among rows with an outcome, the cells missing
    in each predictor (a row can be missing in several).
    """

    rows_read: int
    missing_outcome: int
    missing_by_column: dict = field(default_factory=dict)
    rows_used: int = 0

    @property
    def dropped_for_predictors(self) -> int:
        return self.rows_read - self.missing_outcome - self.rows_used


class Study:
    """One data file prepared for modelling.

    Parameters
    ----------
    table : LoadedTable
        The file as read by :func:`~twofold.core.data.io.read_table`.
    """

    def __init__(self, table: LoadedTable):
        self.table = table
        self.frame = table.frame
        self.source = table.path.name
        self._columns: dict[str, ColumnInfo] = describe_columns(self.frame)
        self._references: dict[str, object] = {}
        self._splines: dict[str, int] = {}
        self._blocks: dict[tuple, TermBlock] = {}
        self._aliased: dict[tuple, list[int]] = {}
        self.outcome: str | None = None
        self.event = None
        self.outcome_levels: list = []
        self._y_all: np.ndarray | None = None
        self.events = SimpleNamespace(roles=Event("roles"), outcome=Event("outcome"))
        #: Values the user marked as meaning "missing", per column (as typed).
        self._missing: dict[str, tuple] = {}
        #: Knots of curves fixed from another study (an imputed copy keeps its original's).
        self._fixed_knots: dict[str, tuple] = {}

    @classmethod
    def from_file(cls, path, sheet: str | None = None) -> "Study":
        """Read a data file and prepare it."""
        return cls(read_table(path, sheet=sheet))

    # ---- columns ----------------------------------------------------
    @property
    def n_rows(self) -> int:
        return len(self.frame)

    @property
    def columns(self) -> dict[str, ColumnInfo]:
        return dict(self._columns)

    def column(self, name: str) -> str:
        """The exact column name for ``name`` (or ``"A:B"`` for an interaction), else a ColumnError."""
        from twofold.core.models.terms import split_interaction

        if name in self._columns:  # a real column whose name holds a colon is still itself
            return name
        pair = split_interaction(name)
        if pair is not None:
            return ":".join(require_column(self._columns, part, self.source) for part in pair)
        return require_column(self._columns, name, self.source)

    def set_spline(self, name: str, knots: int | None) -> None:
        """Use a restricted cubic spline with 3, 4 or 5 knots for a numeric predictor (None: straight line)."""
        from twofold.core.models.terms import KNOT_QUANTILES

        name = self.column(name)
        if knots is None:
            self._splines.pop(name, None)
        else:
            if knots not in KNOT_QUANTILES:
                raise ModelError(f"A spline takes 3, 4 or 5 knots, not {knots}; choose one of those.")
            self._splines[name] = int(knots)
        self._forget(name)
        self.block(name)  # check it now, so a bad choice is reported here
        self.events.roles.emit(name)

    @property
    def splines(self) -> dict[str, int]:
        """Knots per predictor with a spline."""
        return dict(self._splines)

    def set_role(self, name: str, role: Role | str) -> None:
        """Override the inferred role of a column."""
        name = self.column(name)
        self._columns[name] = self._columns[name].with_role(role)
        self._forget(name)
        self.events.roles.emit(name)

    def set_reference(self, name: str, level) -> None:
        """Choose the reference level of a categorical or two-valued text column."""
        name = self.column(name)
        self._references[name] = level
        self._forget(name)
        self.block(name)  # check the level now, so a bad one is reported here
        self.events.roles.emit(name)

    @property
    def missing_values(self) -> dict[str, tuple]:
        """Values marked as meaning "missing", per column (as the user gave them)."""
        return dict(self._missing)

    def set_missing(self, name: str, values) -> None:
        """Treat these values of a column as missing ("unknown", "not recorded", 999, -1); () undoes it.

        A cell matches a value when both read as the same number, or as the
        same text ignoring case and surrounding spaces.  A text column whose
        other cells are all numbers becomes a numeric column.  The file is
        never changed: the study keeps its own copy of the column.
        """
        import pandas as pd

        name = self.column(name)
        values = tuple(dict.fromkeys(str(v).strip() for v in values if str(v).strip()))
        original = self.table.frame[name]
        series = original
        if values:
            series = original.mask(_matches(original, values))
            if not pd.api.types.is_numeric_dtype(series):
                numbers = pd.to_numeric(series.astype(object), errors="coerce")
                if int(numbers.isna().sum()) == int(series.isna().sum()):
                    series = numbers
        if series.notna().sum() == 0:
            raise ColumnError(f"Every cell of '{name}' would then be missing; check the values to treat as missing.")
        if self.frame is self.table.frame:
            self.frame = self.frame.copy(deep=False)  # the file's own table is never changed
        self.frame[name] = series
        info = describe_column(name, series)
        self._columns[name] = info
        if values:
            self._missing[name] = values
        else:
            self._missing.pop(name, None)
        self._forget(name)
        if name == self.outcome:
            self.set_outcome(name, self.event, guess=False)
        self.events.roles.emit(name)

    def reference(self, name: str):
        """The reference level in force for a factor column (None for numeric)."""
        block = self.block(name)
        return block.reference

    def _forget(self, name: str) -> None:
        def touches(term: str) -> bool:
            return name in term.split(":")

        self._blocks = {k: v for k, v in self._blocks.items() if not touches(k[0])}
        self._aliased = {k: v for k, v in self._aliased.items() if not any(touches(t) for t in k[0])}

    def settings(self) -> dict:
        """The user's choices on this study (roles, references, curves, missing values, outcome, event), to restore."""
        return {"columns": dict(self._columns), "references": dict(self._references),
                "splines": dict(self._splines), "outcome": self.outcome, "event": self.event,
                "missing": dict(self._missing), "frame": self.frame}

    def restore_settings(self, settings: dict) -> None:
        """Put back choices taken by :meth:`settings` (undo); cached encodings are rebuilt as needed."""
        self._columns = dict(settings["columns"])
        self._references = dict(settings["references"])
        self._splines = dict(settings["splines"])
        frame_changed = settings.get("frame", self.frame) is not self.frame
        self._missing = dict(settings.get("missing", {}))
        self.frame = settings.get("frame", self.frame)
        self._blocks.clear()
        self._aliased.clear()
        if settings["outcome"] is None:
            self.outcome, self.event, self.outcome_levels, self._y_all = None, None, [], None
        elif frame_changed or (settings["outcome"], settings["event"]) != (self.outcome, self.event):
            self.set_outcome(settings["outcome"], settings["event"], guess=False)
        self.events.roles.emit(None)
        self.events.outcome.emit(self.outcome)

    def candidates(self) -> list[str]:
        """Columns offered as predictors: those with a predictor role, other than the outcome."""
        return [n for n, c in self._columns.items() if c.role.is_predictor and n != self.outcome]

    # ---- outcome ----------------------------------------------------
    def set_outcome(self, name: str, event=None, guess: bool = True):
        """Choose the outcome column and its event value; returns the event value used.

        Rows with a missing outcome are left out of every fit (and counted).
        ``event=None`` takes 1 for a 0/1 column and, when ``guess`` is true,
        the 'yes'-like value of yes/no-like text; otherwise the event must be
        named.
        """
        name = self.column(name)
        info = self._columns[name]
        series = self.frame[name]
        levels = outcome_levels(series, name, self.source)
        if event is None and guess and not info.is_number:
            event = default_event(levels)
        event = match_event(levels, event, name, info.is_number, self.source)
        self.outcome = name
        self.event = event
        self.outcome_levels = levels
        self._y_all = outcome_vector(series, event, info.is_number)
        self._aliased.clear()
        self.events.outcome.emit(name)
        return event

    def outcome_values(self) -> np.ndarray:
        """The outcome over every row of the file: 1 event, 0 not, NaN missing (a read-only view)."""
        y = self._require_outcome().view()
        y.setflags(write=False)
        return y

    def with_frame(self, frame) -> "Study":
        """A copy of this study on another frame of the same rows and columns (an imputed copy).

        Roles, levels, references, curves and the outcome are this study's;
        a curve keeps the knots placed on this study's observed values, so
        every copy's coefficients mean the same thing.  Encodings are made
        afresh from ``frame``.
        """
        copy = Study.__new__(Study)
        copy.__dict__.update(self.__dict__)
        copy.frame = frame
        copy._blocks, copy._aliased = {}, {}
        copy._columns, copy._references = dict(self._columns), dict(self._references)
        copy._splines, copy._missing = dict(self._splines), dict(self._missing)
        copy._fixed_knots = {name: self.block(name).knots for name in self._splines}
        copy.events = SimpleNamespace(roles=Event("roles"), outcome=Event("outcome"))
        return copy

    def _require_outcome(self) -> np.ndarray:
        if self._y_all is None:
            raise ModelError("Choose the outcome column first.")
        return self._y_all

    # ---- designs ----------------------------------------------------
    def block(self, name: str, linear: bool = False) -> TermBlock:
        """The encoded columns of one predictor or interaction (cached).

        ``linear=True`` gives a spline predictor's straight-line block.
        """
        from twofold.core.models.terms import interaction_block, spline_block, split_interaction

        name = self.column(name)
        form = "linear" if linear or name not in self._splines else self._splines[name]
        key = (name, form)
        if key not in self._blocks:
            pair = split_interaction(name) if name not in self._columns else None
            if pair is not None:
                self._blocks[key] = interaction_block(self.block(pair[0], linear=True), self.block(pair[1], linear=True))
            elif name == self.outcome:
                raise ColumnError(f"'{name}' is the outcome, so it cannot also be a predictor; untick it.")
            elif form == "linear":
                self._blocks[key] = encode(self.frame[name], self._columns[name], self._references.get(name))
            else:
                self._blocks[key] = spline_block(self.block(name, linear=True), form,
                                                 self._fixed_knots.get(name))
        return self._blocks[key]

    def complete_mask(self, predictors) -> np.ndarray:
        """True for rows with the outcome and every named predictor present."""
        ok = ~np.isnan(self._require_outcome())
        for name in predictors:
            ok &= ~self.block(name).missing
        return ok

    def complete_rows(self, predictors) -> np.ndarray:
        """0-based positions of rows with the outcome and every named predictor present."""
        return np.flatnonzero(self.complete_mask(predictors))

    def account(self, predictors, rows: np.ndarray | None = None) -> RowAccount:
        """Count rows read, lost to the outcome, missing per predictor, and used."""
        y = self._require_outcome()
        has_outcome = ~np.isnan(y)
        missing = {n: int((self.block(n).missing & has_outcome).sum()) for n in predictors}
        if rows is None:
            rows = self.complete_rows(predictors)
        return RowAccount(self.n_rows, int((~has_outcome).sum()), missing, len(rows))

    def check_predictors(self, predictors) -> list:
        """The predictors' column names, once each, every interaction with both its parts; else ModelError."""
        predictors = [self.column(p) for p in predictors]
        if len(set(predictors)) != len(predictors):
            raise ModelError("A predictor is named twice; name each predictor once.")
        if self.outcome in predictors:
            raise ColumnError(f"'{self.outcome}' is the outcome, so it cannot also be a predictor; untick it.")
        from twofold.core.models.terms import split_interaction

        for p in predictors:
            pair = split_interaction(p) if p not in self._columns else None
            if pair is not None and not set(pair) <= set(predictors):
                raise ModelError(f"The interaction {p} needs both {pair[0]} and {pair[1]} in the model as well; "
                                 "tick them too.")
        return predictors

    def design(self, predictors, rows: np.ndarray | None = None, linear=()) -> Design:
        """The design matrix of the named predictors on ``rows`` (default: their complete rows).

        Predictors named in ``linear`` enter as straight lines even if a spline is set.
        """
        predictors = self.check_predictors(predictors)
        if rows is None:
            rows = self.complete_rows(predictors)
        else:
            if not self.complete_mask(predictors)[rows].all():
                raise ModelError("Some of the rows asked for have missing values in these predictors.")
        return assemble([self.block(p, linear=p in linear) for p in predictors], self._require_outcome(), rows)

    def fit(self, predictors, rows: np.ndarray | None = None, start=None, firth: bool = False,
            linear=(), watch_warnings: bool = True, stop=None) -> LogisticFit:
        """Fit the logistic model of the outcome on the named predictors.

        Parameters
        ----------
        predictors : sequence of str
        rows : array of int, optional
            Rows to use (default: rows complete for these predictors).
        start : LogisticFit or array, optional
            A previous fit to warm-start from, or starting values.
        firth : bool
            Fit by Firth's penalised likelihood instead of maximum likelihood.
        linear : collection of str
            Predictors to enter as straight lines even if a spline is set.
        watch_warnings : bool
            See :func:`~twofold.core.models.fit.fit_logistic` (False only for fits on several threads at once).
        stop : callable, optional
            Asked between Newton steps; true gives the fit up (:class:`~twofold.core.models.fit.FitStopped`).
            Not for Firth fits.
        """
        predictors = [self.column(p) for p in predictors]
        if self.outcome in predictors:
            raise ColumnError(f"'{self.outcome}' is the outcome, so it cannot also be a predictor; untick it.")
        linear = frozenset(linear)
        design = self.design(predictors, rows, linear=linear)
        forms = tuple((p, "linear" if p in linear else self._splines.get(p, "linear")) for p in predictors)
        # A digest, not the rows themselves: at a million rows the key would be 8 MB each.
        rows_key = None if rows is None else hashlib.blake2b(design.rows.tobytes(), digest_size=16).digest()
        key = (tuple(predictors), rows_key, forms)
        dropped = self._aliased.get(key)
        if dropped is None and len(design.y):
            dropped = aliased_columns(design.X)
            self._aliased[key] = dropped
        if firth:
            from twofold.core.models.penalised import fit_firth

            fit = fit_firth(design, dropped=dropped)
        else:
            if isinstance(start, LogisticFit):
                start = start.start_for(design)
            fit = fit_logistic(design, start=start, dropped=dropped, watch_warnings=watch_warnings, stop=stop)
        account = self.account([p for p in predictors if ":" not in p], design.rows)
        fit.account = account
        lost = self.n_rows - account.rows_used
        if lost:
            parts = []
            if account.missing_outcome:
                parts.append(f"{account.missing_outcome} with no outcome")
            for name, count in account.missing_by_column.items():
                if count:
                    parts.append(f"{count} missing '{name}'")
            reason = "; ".join(parts) if parts else "outside the rows compared"
            fit.notices.append(Notice(
                "rows_dropped",
                f"{lost:,} of {self.n_rows:,} rows were left out ({reason}); "
                "results describe the complete rows only.",
                subjects=tuple(n for n, c in account.missing_by_column.items() if c),
            ))
        return fit

    def compare(self, smaller, larger, firth: bool = False) -> tuple[LogisticFit, LogisticFit, LikelihoodRatioTest]:
        """Fit a smaller and a larger model on the same rows and test the difference.

        Both are fitted on the rows complete for the larger model, which is
        what keeps the likelihood-ratio test valid.
        """
        smaller = [self.column(p) for p in smaller]
        larger = [self.column(p) for p in larger]
        extra = [p for p in smaller if p not in larger]
        if extra:
            raise ModelError(
                f"The smaller model is not nested in the larger one: {', '.join(extra)} "
                f"{'is' if len(extra) == 1 else 'are'} not among the larger model's predictors; "
                "add it to the larger model or leave it out of the smaller one."
            )
        rows = self.complete_rows(larger)
        small_fit = self.fit(smaller, rows=rows, firth=firth)
        large_fit = self.fit(larger, rows=rows, start=small_fit, firth=firth)
        return small_fit, large_fit, nested_test(small_fit, large_fit)


@dataclass(frozen=True)
class DropOneTest:
    """A predictor's likelihood-ratio test beside its Wald test.

    g = 2 (lnL_full - lnL_without) on the predictor's df; ``wald`` is the
    Wald chi-square (z squared, or the joint statistic for a factor).
    ``prefer_lr`` flags where the two disagree at the 5% level or the Wald
    statistic is far below G, the pattern of the Hauck-Donner effect (Hauck &
    Donner 1977, JASA 72:851): large estimates inflate the standard error, so
    the Wald test loses power and the likelihood-ratio test should be used.
    ``available`` is False when the model without the predictor could not be
    fitted (G and its p-value are then NaN); ``note`` says why, or that G is
    approximate because that refit did not settle.
    """

    column: str
    g: float
    df: int
    p_value: float
    wald: float
    wald_p_value: float
    prefer_lr: bool
    available: bool = True
    note: str | None = None
    includes: tuple = ()

    @property
    def label(self) -> str:
        """"age", or "age, with its interaction with sex" when dropped together with its interactions."""
        from twofold.core.models.terms import total_label

        return total_label(self.column, self.includes)

    def as_dict(self) -> dict:
        out = {k: getattr(self, k) for k in ("column", "g", "df", "p_value", "wald", "wald_p_value", "prefer_lr",
                                             "available")}
        out["includes"] = list(self.includes)
        out["label"] = self.label
        return out


def _matches(series, values):
    """True where a cell equals one of ``values``: the same number, or the same text ignoring case and spaces."""
    import pandas as pd

    numbers = []
    for v in values:
        try:
            numbers.append(float(v.replace(",", ".")) if v.count(",") == 1 and "." not in v else float(v))
        except ValueError:
            pass
    texts = {v.casefold() for v in values}
    hit = series.astype("string").str.strip().str.casefold().isin(texts).fillna(False).astype(bool)
    if numbers:
        as_number = pd.to_numeric(series, errors="coerce")
        hit |= as_number.isin(numbers).fillna(False).astype(bool)
    return hit


def drop_one_tests(study: Study, fit: LogisticFit) -> list[DropOneTest]:
    """For every predictor of ``fit``, refit without it on the same rows and test the loss.

    G = 2 (lnL_full - lnL_without) on the predictor's number of coefficients.
    A predictor that is part of an interaction is dropped together with every
    interaction that contains it (its total effect), so its G does not change
    when the other predictor's origin moves; each interaction is also tested
    on its own.
    Maximum-likelihood refits go through :func:`~twofold.core.models.fit.drop_refits`
    (warm-started chord Newton, full Newton where needed, two threads);
    penalised fits use their penalised likelihood-ratio test.  A refit that
    is impossible (a model too small for its rows) marks that test
    unavailable instead of stopping the assessment.
    """
    from twofold.core.errors import TwofoldError
    from twofold.core.models.fit import chi2_sf, drop_refits, log_likelihood
    from twofold.core.models.terms import total_effects

    within = total_effects(fit.design.predictors)
    columns = [c for c in fit.design.predictors if len(fit.term_index[c])]
    index = {c: fit.total_index[c] for c in columns}
    losses = []  # (g, df, note or None, available)
    if hasattr(fit, "lr_test_of"):
        for column in columns:
            try:
                t = fit.lr_test_of([column, *within.get(column, ())])
                g = float(t.g)
            except (TwofoldError, np.linalg.LinAlgError, ValueError):
                g = float("nan")
            if np.isfinite(g):
                losses.append((g, int(len(index[column])), None, True))
            else:
                losses.append((float("nan"), int(len(index[column])),
                               _unavailable_note(column), False))
    else:
        refits = drop_refits(fit, [index[c] for c in columns])
        full = log_likelihood(fit.design.y, fit.linear_predictor) if refits else float("nan")
        for column, r in zip(columns, refits):
            df = int(len(index[column]))
            if r.method == "failed" or not np.isfinite(full):
                losses.append((float("nan"), df, _unavailable_note(column), False))
                continue
            note = None
            if not r.converged:
                note = (f"The refit without '{column}' did not settle (usually separation), so its "
                        "likelihood-ratio G is approximate.")
            losses.append((max(2.0 * (full - r.llf), 0.0), df, note, True))
    out = []
    for column, (g, df, note, available) in zip(columns, losses):
        idx = index[column]
        wald = float(fit.z[idx[0]] ** 2) if len(idx) == 1 else fit.joint_wald(idx)
        wald_p = chi2_sf(wald, len(idx)) if np.isfinite(wald) else float("nan")
        p = chi2_sf(g, df) if available else float("nan")
        disagree = available and (p < 0.05) != (wald_p < 0.05)
        much_lower = available and g > 3.841 and wald < 0.5 * g
        out.append(DropOneTest(column, float(g), int(df), p, wald, wald_p, bool(disagree or much_lower),
                               available, note, within.get(column, ())))
    return out


def _unavailable_note(column: str) -> str:
    return (f"The model without '{column}' could not be fitted on these rows (too few records for its "
            "coefficients, or an outcome it predicts perfectly), so its likelihood-ratio test is not "
            "available; read the Wald test with care or use more records.")
