"""The one owner of an analysis: what the user builds, step by step, with undo.

A :class:`Workspace` holds the loaded data, the roles and reference levels,
the outcome and its event, the model ladder with the rung each model was
built from, the fitting method, curved effects and interactions, bootstrap
validation results with their settings and seed, the risk threshold and the
report's options.  It is Qt-free: the window displays it and asks it for
changes; a session file is it, saved (:meth:`Workspace.to_session`,
:meth:`Workspace.from_session`); a report renders :meth:`Workspace.result`.

Every operation either succeeds and returns a :class:`Change` saying what
changed, or raises a :class:`~twofold.core.errors.TwofoldError` with one
sentence and leaves the workspace exactly as it was.  Operations that change
the model or the ladder can be undone and redone.

A workspace is not shared between threads: one thread calls its operations.
The fits it hands out are read-only, so another thread may assess them or
trace their profile intervals (:func:`assess_fit`, :meth:`profile_intervals`).
"""

from __future__ import annotations

import threading
from dataclasses import dataclass, field
from types import SimpleNamespace

from twofold.core.errors import ModelError, TwofoldError
from twofold.core.events import Event

#: Risk threshold of the classification table until the user picks another: None means the observed event
#: rate of the model shown (a cut-off that matches the data, where 0.5 would call almost no one positive
#: when events are rare).
DEFAULT_THRESHOLD = None


def event_rate_threshold(fit) -> float:
    """The observed event rate of ``fit``'s rows, to two decimals (as the window's threshold box shows it)."""
    rate = fit.events / max(fit.n_used, 1)
    return float(min(max(round(rate, 2), 0.01), 0.99))

#: Profile-likelihood intervals are worked out without being asked when rows times
#: coefficients is at most this (maximum likelihood) or the second figure (penalised):
#: measured on this project's samples on one core, about 0.2 s and 0.4 s at those sizes.
PROFILE_AUTO_WORK = 50_000
PENALISED_PROFILE_AUTO_WORK = 20_000

#: Steps of undo kept (each holds the fits of its ladder, so memory bounds it).
UNDO_DEPTH = 100

#: The parts of an analysis an operation can change (what a view may need to redraw).
PARTS = ("data", "columns", "outcome", "ladder", "comparison", "validation", "threshold", "report", "usefulness")

#: The usefulness settings of an analysis and their values until the user chooses: decision-curve thresholds
#: [LOW, HIGH, STEP], the rung of the ladder whose curve is drawn beside the shown model's, the unit column of the
#: risk-adjusted comparison and the column of the subgroups.
USEFULNESS_DEFAULTS = {"net_benefit": None, "compare_with": None, "unit_column": None, "subgroups": None}
#: "Leave this setting as it is" for :meth:`Workspace.set_usefulness`.
KEEP = object()


@dataclass(frozen=True)
class Change:
    """What one operation changed.

    ``what`` is a short sentence for the user ("Added age."); ``parts`` names
    the parts of the analysis touched (see :data:`PARTS`); ``removed`` counts
    the models of the ladder the operation took away (undo brings them back).
    """

    what: str
    parts: frozenset = frozenset()
    removed: int = 0


@dataclass
class ValidationRecord:
    """A bootstrap validation of one model: its settings, seed and figures.

    ``result`` is a :class:`~twofold.core.models.modelling.Validation`;
    ``predictors`` and ``penalised`` say which model it describes.
    """

    repetitions: int
    seed: int
    result: object
    predictors: tuple
    penalised: bool
    fit: object = field(default=None, repr=False)


@dataclass
class ShrinkRecord:
    """The shown model shrunk by its bootstrap's corrected calibration slope (what sessions and ``predict`` use)."""

    result: object          # a twofold.core.models.updating.Shrinkage
    predictors: tuple
    penalised: bool
    fit: object = field(default=None, repr=False)


@dataclass(frozen=True, eq=False)
class DecisionView:
    """The shown model's decision curve, with a second model's net benefit on the same rows when one is chosen."""

    curve: object                  # a twofold.core.assessing.decision.DecisionCurve
    other: object = None           # ndarray of the second model's net benefit, or None
    other_predictors: tuple = ()
    other_index: int | None = None


def profile_auto(fit) -> bool:
    """Whether ``fit`` is small enough for its profile intervals to be worked out without being asked."""
    limit = PENALISED_PROFILE_AUTO_WORK if is_penalised(fit) else PROFILE_AUTO_WORK
    return fit.n_used * max(fit.n_params - 1, 0) <= min(limit, PROFILE_AUTO_WORK)


def is_penalised(fit) -> bool:
    """Whether ``fit`` is Firth's penalised fit (it carries a penalised log-likelihood)."""
    return getattr(fit, "penalized_llf", None) is not None


def assess_fit(study, fit, threshold=None, checkpoint=None):
    """The assessment of a read-only fit (safe off the workspace's thread: it reads only the fit)."""
    from twofold.core.assessing.assessment import assess

    return assess(study, fit, threshold=threshold, checkpoint=checkpoint)


class Workspace:
    """One analysis, owned in one place.

    Examples
    --------
    >>> ws = Workspace()
    >>> ws.open("sample_studies/readmission_synthetic.csv")            # doctest: +SKIP
    >>> ws.set_outcome("readmitted_30d")                                # doctest: +SKIP
    >>> ws.set_predictors(["age"]).what                                  # doctest: +SKIP
    'Added age.'
    """

    def __init__(self):
        self.study = None
        self.ladder = None
        #: rung index -> the rung it was built from (the first rung has none).
        self.parents: dict[int, int] = {}
        #: A two-valued outcome whose event value the user still has to name.
        self.awaiting_event: str | None = None
        #: Whether Firth's penalised fit of each model is shown instead of the ordinary one.
        self.penalised = False
        self.threshold = DEFAULT_THRESHOLD
        self.validation: ValidationRecord | None = None
        self.usefulness = dict(USEFULNESS_DEFAULTS)
        self.shrinkage: ShrinkRecord | None = None
        from twofold.core.outputs.session import REPORT_DEFAULTS

        self.report_options = dict(REPORT_DEFAULTS)
        #: Profile intervals for every model, not only small ones.
        self.profile_always = False
        #: Why the penalised fit could not be shown, once (read by the view, then cleared).
        self.method_problem = ""
        self.events = SimpleNamespace(changed=Event("changed"))
        self._undo: list[tuple[str, dict]] = []
        self._redo: list[tuple[str, dict]] = []
        self._penalised_fits: list = []   # (rung, its maximum-likelihood fit, the penalised fit)
        self._profiles: dict = {}         # id(fit) -> (fit, intervals)
        self._profile_lock = threading.Lock()
        self.revision = 0
        self._saved_revision = 0
        #: The last change made (what the window says after an operation).
        self.last_change = Change("")
        #: Multiple imputation in force: {"m", "seed", "auxiliary", "anyway"}, or None (complete rows only).
        self.imputation: dict | None = None
        self._copies = None               # (key, ImputedCopies) made for the settings and columns in force
        self._pooled: dict = {}           # (copies, predictors, penalised) -> PooledFit

    # ---- reading -----------------------------------------------------------------
    @property
    def has_model(self) -> bool:
        ladder = self.ladder
        return ladder is not None and ladder.current is not None and bool(ladder.rungs)

    @property
    def current_rung(self):
        return self.ladder.rungs[self.ladder.current] if self.has_model else None

    @property
    def unsaved(self) -> bool:
        """Whether there are changes since the last save (or since the file was opened)."""
        return self.revision != self._saved_revision and self.has_model

    def mark_saved(self) -> None:
        self._saved_revision = self.revision

    @property
    def undo_text(self) -> str:
        """What undo would take back ('' when nothing)."""
        return self._undo[-1][0] if self._undo else ""

    @property
    def redo_text(self) -> str:
        return self._redo[-1][0] if self._redo else ""

    def require_study(self):
        if self.study is None:
            raise ModelError("Open a data file first.")
        return self.study

    def require_model(self):
        if not self.has_model:
            raise ModelError("There is no model yet; choose the outcome and tick at least one predictor first.")
        return self.current_rung

    # ---- the machinery of operations -------------------------------------------------
    def _memento(self) -> dict:
        return {"study": self.study.settings(), "ladder": self.ladder.state(), "parents": dict(self.parents),
                "awaiting": self.awaiting_event, "penalised": self.penalised, "shrinkage": self.shrinkage,
                "imputation": self.imputation}

    def _put_back(self, m: dict) -> None:
        self.study.restore_settings(m["study"])
        self.ladder.restore(m["ladder"])
        self.parents = dict(m["parents"])
        self.awaiting_event = m["awaiting"]
        self.penalised = m["penalised"]
        self.imputation = m.get("imputation")
        self.shrinkage = m.get("shrinkage")

    def _operate(self, label: str, fn, undoable: bool = True) -> Change:
        """Run ``fn`` (returning a Change); on any failure put everything back and re-raise."""
        self.require_study()
        before = self._memento()
        try:
            change = fn()
        except BaseException:
            self._put_back(before)
            raise
        if undoable:
            self._undo.append((label, before))
            del self._undo[:-UNDO_DEPTH]
            self._redo.clear()
        self._changed(change)
        return change

    def _changed(self, change: Change) -> None:
        self.last_change = change
        self.revision += 1
        self.events.changed.emit(change)

    def undo(self) -> Change:
        """Take back the last operation that changed the model or the ladder."""
        return self._step(self._undo, self._redo, "undo", "Undone")

    def redo(self) -> Change:
        """Do again what the last undo took back."""
        return self._step(self._redo, self._undo, "redo", "Done again")

    def _step(self, source: list, target: list, word: str, said: str) -> Change:
        if not source:
            raise ModelError(f"There is nothing to {word}.")
        label, memento = source.pop()
        target.append((label, self._memento()))
        self._put_back(memento)
        change = Change(f"{said}: {label}.", frozenset(("columns", "outcome", "ladder", "comparison")))
        self._changed(change)
        return change

    # ---- operations ------------------------------------------------------------------
    def open(self, path, sheet: str | None = None, progress=None) -> Change:
        """Read a data file and start a new analysis on it (the file is only ever read)."""
        from twofold.core.data.io import read_table
        from twofold.core.models.study import Study

        return self.adopt(Study(read_table(path, sheet=sheet, progress=progress)))

    def adopt(self, study, ladder=None, parents=None) -> Change:
        """Start a new analysis on a prepared study (and, when restoring, its fitted ladder)."""
        from twofold.core.models.ladder import Ladder

        self.study = study
        self.ladder = ladder if ladder is not None else Ladder(study)
        self.parents = dict(parents) if parents is not None else {
            i: r.previous for i, r in enumerate(self.ladder.rungs) if r.previous is not None}
        self.awaiting_event = None
        self.penalised = False
        self.validation = None
        self.usefulness = dict(USEFULNESS_DEFAULTS)
        self.shrinkage = None
        self.method_problem = ""
        self._undo.clear()
        self._redo.clear()
        self._penalised_fits = []
        with self._profile_lock:
            self._profiles.clear()
        change = Change(f"Opened {study.source}.", frozenset(PARTS))
        self._changed(change)
        self._saved_revision = self.revision
        return change

    def set_outcome(self, name: str | None, event=None, guess: bool = True, predictors=()) -> Change:
        """Choose the outcome and its event (a new ladder), fitting ``predictors`` on it at once."""
        return self._operate("choice of outcome", lambda: self._set_outcome(name, event, guess, tuple(predictors)))

    def _set_outcome(self, name, event, guess, predictors) -> Change:
        from twofold.core.errors import ColumnError

        study = self.study
        removed = self._clear_ladder()
        parts = frozenset(("outcome", "columns", "ladder", "comparison"))
        if name is None:
            self.awaiting_event = None
            return Change("No outcome chosen.", parts, removed)
        name = study.column(name)
        try:
            study.set_outcome(name, event, guess=guess)
        except ColumnError:
            info = study.columns[name]
            if event is None and info.n_levels == 2:
                # Two values but no telling which is the event: ask, do not guess.
                self.awaiting_event = name
                return Change(f"Choose which value of '{name}' counts as the event.", parts, removed)
            raise
        self.awaiting_event = None
        predictors = tuple(p for p in predictors if p != study.outcome and p in study.candidates())
        if predictors:
            self._add(predictors)
        return Change(f"The outcome is now {name}.", parts, removed)

    def _clear_ladder(self) -> int:
        removed = len(self.ladder.rungs)
        if removed:
            self.ladder.clear()
        self.parents = {}
        self.usefulness["compare_with"] = None  # named a model of the ladder just cleared
        return removed

    def _add(self, predictors, defer: bool = False) -> None:
        ladder = self.ladder
        parent = ladder.current
        ladder.add(predictors, defer=defer)
        if parent is not None:
            self.parents[len(ladder.rungs) - 1] = parent

    def set_predictors(self, predictors, defer: bool = False) -> Change:
        """Fit the model with exactly these predictors as a new rung of the ladder (a tick or untick).

        ``defer=True`` (a newer tick is already waiting) puts the fit off: the newer model is fitted and shown
        first, and this one when it is first read or by :meth:`complete`.  A callable ``defer`` is asked once
        the fit of the model this one is built from is made, if that was put off (see :meth:`Ladder.add`).
        """
        predictors = tuple(predictors)

        def run():
            study = self.study
            if self.awaiting_event is not None:
                raise ModelError(f"Choose which value of '{self.awaiting_event}' counts as the event, "
                                 "then tick the predictors.")
            if study.outcome is None:
                raise ModelError("Choose the outcome column first, then tick the predictors.")
            current = self.current_rung
            if current is not None and set(current.predictors) == set(predictors):
                return Change("The model already has these predictors.", frozenset())
            if current is None and not predictors:
                return Change("No predictors are ticked.", frozenset())
            before = set(current.predictors) if current is not None else set()
            self._add(predictors, defer=defer)
            added = [p for p in predictors if p not in before]
            gone = [p for p in before if p not in set(predictors)]
            words = ([f"added {', '.join(added)}"] if added else []) + ([f"removed {', '.join(gone)}"] if gone else [])
            return Change((" and ".join(words) or "refitted").capitalize() + ".", frozenset(("ladder",)))

        return self._operate("tick", run)

    def set_role(self, column: str, role: str, predictors=()) -> Change:
        """Change how a column is used; the ladder is refitted, or restarted when the column leaves the models."""
        from twofold.core.data.roles import Role

        def run():
            study, ladder = self.study, self.ladder
            name = study.column(column)
            study.set_role(name, role)

            def involves(term):  # the column itself, or an interaction with it ("a:b")
                return name in str(term).split(":")

            removed = 0
            if ladder.rungs and any(involves(p) for p in ladder.used_predictors):
                if Role(role).is_predictor:
                    ladder.refit()
                else:
                    removed = self._clear_ladder()
                    rest = tuple(p for p in predictors if not involves(p))
                    if rest and study.outcome is not None:
                        self._add(rest)
            return Change(f"'{name}' is now used as {Role(role).value}.",
                          frozenset(("columns", "ladder", "comparison")), removed)

        return self._operate(f"role of {column}", run)

    def set_missing(self, column: str, values) -> Change:
        """Treat these values of a column as missing ("unknown", 999); the models using it are refitted."""
        def run():
            study, ladder = self.study, self.ladder
            name = study.column(column)
            study.set_missing(name, values)
            if ladder.rungs and (name == study.outcome or name in ladder.used_predictors):
                ladder.refit()
            shown = ", ".join(repr(v) for v in study.missing_values.get(name, ())) or "no values"
            return Change(f"In '{name}', {shown} now count as missing.",
                          frozenset(("columns", "outcome", "ladder", "comparison")))

        return self._operate(f"missing values of {column}", run)

    def set_reference(self, column: str, level) -> Change:
        """Choose the reference group of a column with groups; the models using it are refitted."""
        def run():
            study = self.study
            name = study.column(column)
            study.set_reference(name, level)
            if self.ladder.rungs and name in self.ladder.used_predictors:
                self.ladder.refit()
            return Change(f"The reference group of '{name}' changed.", frozenset(("columns", "ladder")))

        return self._operate(f"reference group of {column}", run)

    def select(self, index: int) -> Change:
        """Return to model ``index`` (0-based) of the ladder; nothing is removed."""
        def run():
            self.ladder.select(index)
            return Change(f"Model {index + 1} is shown.", frozenset(("ladder",)))

        return self._operate("choice of model", run)

    def set_spline(self, column: str, knots: int | None) -> Change:
        """Model a numeric predictor as a curve (3, 4 or 5 knots) or a straight line (None)."""
        def run():
            rung = self.require_model()
            name = self.study.column(column)
            self.study.set_spline(name, knots)
            if name in self.ladder.used_predictors:
                self.ladder.refit()
            else:
                self._add(list(rung.predictors) + [name])
            shape = "a straight line" if knots is None else f"a curve with {knots} knots"
            return Change(f"'{name}' is now {shape}.", frozenset(("columns", "ladder")))

        return self._operate(f"shape of {column}", run)

    def add_interaction(self, focus: str, other: str) -> tuple[Change, str]:
        """Add the interaction of two predictors (and both main effects) as a new rung; returns it and its term."""
        out = {}

        def run():
            rung = self.require_model()
            a, b = self.study.column(focus), self.study.column(other)
            if a == b:
                raise ModelError("An interaction needs two different predictors; choose another second predictor.")
            preds = list(rung.predictors)
            same = [p for p in preds if p in (f"{a}:{b}", f"{b}:{a}")]
            if same:
                out["term"] = same[0]
                return Change("The model already has this interaction.", frozenset())
            out["term"] = f"{a}:{b}"
            self._add(preds + [p for p in (a, b) if p not in preds] + [out["term"]])
            return Change(f"Added the interaction of {a} and {b}.", frozenset(("ladder",)))

        change = self._operate("interaction", run)
        return change, out["term"]

    def set_penalised(self, on: bool) -> Change:
        """Show Firth's penalised fit of each model (True) or the ordinary fit (False)."""
        def run():
            self.penalised = bool(on)
            return Change("Firth's penalised fit is shown." if on else "The ordinary fit is shown.",
                          frozenset(("ladder",)))

        return self._operate("fitting method", run)

    def threshold_for(self, fit) -> float:
        """The risk threshold of ``fit``'s classification table: the user's, else its observed event rate."""
        return self.threshold if self.threshold is not None else event_rate_threshold(fit)

    def set_threshold(self, threshold: float) -> Change:
        """Use this risk threshold for the classification table."""
        t = float(threshold)
        if not 0 < t < 1:
            raise ModelError(f"The risk threshold should be between 0 and 1 (for example 0.2), not {threshold}.")
        self.threshold = t
        change = Change(f"The risk threshold is now {t:g}.", frozenset(("threshold",)))
        self._changed(change)
        return change

    def set_report_options(self, suppress_up_to: int, list_records: bool, **texts) -> Change:
        """Set the report's options; ``texts`` may give ``title``, ``authors`` and ``question`` (None or not
        given: kept)."""
        from twofold.core.outputs.privacy import MAX_THRESHOLD
        from twofold.core.outputs.session import REPORT_TEXT_LIMITS

        n = int(suppress_up_to)
        if not 1 <= n <= MAX_THRESHOLD:
            raise ModelError(f"Counts to hide should run from 1 up to at most {MAX_THRESHOLD}, not {n}.")
        kept = {k: self.report_options.get(k, "") for k in REPORT_TEXT_LIMITS}
        for key, value in texts.items():
            if key not in REPORT_TEXT_LIMITS:
                raise ModelError(f"A report has no text called '{key}'; give its title, authors or question.")
            if value is None:
                continue  # not given: kept
            value = " ".join(str(value).split())
            if len(value) > REPORT_TEXT_LIMITS[key]:
                raise ModelError(f"The report's {key} is {len(value):,} characters long; shorten it to at most "
                                 f"{REPORT_TEXT_LIMITS[key]:,}.")
            kept[key] = value
        self.report_options = {"suppress_up_to": n, "list_records": bool(list_records), **kept}
        change = Change("The report's options changed.", frozenset(("report",)))
        self._changed(change)
        return change

    def record_validation(self, fit, result, repetitions: int, seed: int) -> Change:
        """Keep a bootstrap validation of ``fit`` (the model shown when it started)."""
        rung = self.require_model()
        if fit is not self.shown_fit():
            raise ModelError("The model changed while the bootstrap ran, so its figures describe another model; "
                             "run it again on the model shown.")
        self.validation = ValidationRecord(int(repetitions), int(seed), result, tuple(rung.predictors),
                                           self.penalised, fit)
        self.shrinkage = None  # made from the validation it replaces
        change = Change("The bootstrap validation was kept with the analysis.", frozenset(("validation",)))
        self._changed(change)
        return change

    def complete(self, stop=None) -> int:
        """Make the fits of the ladder that were put off (newest first) until ``stop()`` is true; how many.

        With multiple imputation on, these are the pooled fits of the rungs not yet fitted on the copies in force
        (the ladder table shows pooled figures then; the complete-rows fits are made only when read)."""
        if self.ladder is None:
            return 0
        if not self.imputation:
            return self.ladder.complete(stop)
        made = 0
        for k in reversed(self.pending):
            if stop is not None and stop():
                break
            self.pooled_fit(k)
            made += 1
        return made

    @property
    def pending(self) -> list[int]:
        """Indices of the rungs whose shown fit is still to be made (pooled fits on the copies in force when
        imputing; else the fits the ladder put off)."""
        if self.ladder is None:
            return []
        if not self.imputation:
            return self.ladder.pending
        return [k for k in range(len(self.ladder.rungs)) if self.known_fit(k) is None]

    def pooled_ladder(self) -> list:
        """Each rung's pooled fit and its pooled test against the rung it was built from (None for the first), as
        the ladder table lists them while imputing (fits every rung not yet pooled)."""
        out = []
        for k, rung in enumerate(self.ladder.rungs):
            test = None if rung.previous is None else self.nested_between(rung.previous, k)
            out.append((self.fit_of(k), test))
        return out

    def known_fit(self, index: int):
        """The fit the ladder table lists for rung ``index`` if it is already made, else None (never fits or imputes):
        the pooled fit when imputing, else the rung's own (maximum-likelihood) fit."""
        if not self.imputation:
            rung = self.ladder.rungs[index]
            return rung.fit if rung.fitted else None
        copies = self._copies[1] if self._copies is not None and self._copies[0] == self._copies_key() else None
        if copies is None:
            return None
        return self._pooled.get((copies, tuple(self.ladder.rungs[index].predictors), self.penalised))

    # ---- derived figures ---------------------------------------------------------------
    def fit_of(self, index: int):
        """The fit shown for rung ``index``: its own, or its penalised refit when that is chosen.

        With multiple imputation on: its fits on every imputed copy, pooled (penalised when chosen).
        """
        if self.imputation:
            return self.pooled_fit(index)
        rung = self.ladder.rungs[index]
        if not self.penalised:
            return rung.fit
        for r, ml, pen in self._penalised_fits:
            if r.predictors == rung.predictors and ml is rung.fit:
                return pen
        try:
            pen = self.study.fit(list(rung.predictors), rows=rung.fit.design.rows, firth=True)
        except TwofoldError as exc:
            self.penalised = False
            self.method_problem = f"The penalised fit could not be worked out ({exc}), so the ordinary fit is shown."
            return rung.fit
        live = [e for e in self._penalised_fits if any(e[1] is r.fit for r in self.ladder.rungs)]
        self._penalised_fits = live + [(rung, rung.fit, pen)]
        return pen

    def shown_fit(self):
        """The fit of the model shown, or None when there is no model."""
        return self.fit_of(self.ladder.current) if self.has_model else None

    def nested_between(self, i: int, j: int):
        """The (penalised, when chosen) likelihood-ratio test between rungs i and j, or None if not nested."""
        from twofold.core.models.fit import LikelihoodRatioTest, nested_test

        if not self.penalised and not self.imputation:
            return self.ladder.nested(i, j)
        if self.imputation:
            from twofold.core.models.pooling import pooled_nested as nested_test  # D3 (D2 for penalised fits)
        si, sj = set(self.ladder.rungs[i].predictors), set(self.ladder.rungs[j].predictors)
        a, b = self.fit_of(i), self.fit_of(j)
        if si == sj:
            return None
        if si <= sj:
            return nested_test(a, b)
        if sj <= si:
            t = nested_test(b, a)
            if self.imputation:
                from dataclasses import replace

                return replace(t, added=(), removed=tuple(sorted(si - sj)))
            return LikelihoodRatioTest(t.g, t.df, t.p_value, removed=tuple(sorted(si - sj)), n_rows=t.n_rows)
        return None

    def compare(self, i: int, j: int):
        """Rungs i and j compared (likelihood-ratio test when nested; AIC and BIC always)."""
        self.require_study()
        n = len(self.ladder.rungs) if self.ladder is not None else 0
        if not (0 <= i < n and 0 <= j < n):
            raise ModelError("Choose two models of the ladder to compare.")
        if i == j:
            raise ModelError(f"Model {i + 1} was chosen twice; choose two different models to compare.")
        if self.imputation:
            return self._compare_pooled(i, j)
        return self.ladder.compare(i, j)

    def _compare_pooled(self, i: int, j: int):
        """Rungs i and j pooled over the imputed copies: the pooled nested test (D3; D2 for penalised fits) when
        one is nested in the other; no AIC or BIC (not defined for pooled fits) and no paired AUC test."""
        from twofold.core.models.ladder import Comparison

        test = self.nested_between(i, j)
        same = set(self.ladder.rungs[i].predictors) == set(self.ladder.rungs[j].predictors)
        if test is not None:
            note = "One model is nested in the other, so the pooled likelihood-ratio test applies."
        elif same:
            note = "The two models have the same predictors."
        else:
            note = ("Neither model contains the other, so no pooled likelihood-ratio test applies; AIC is not defined "
                    "for models pooled over imputed copies, so these two cannot be compared here.")
        return Comparison(i, j, test is not None, test, float("nan"), float("nan"), note)

    def shape_tests(self, fit) -> tuple[list, list]:
        """(curve tests, interaction tests) of ``fit``; a test the core cannot make here is left out."""
        from twofold.core.models.modelling import interaction_tests, nonlinearity_tests

        if self.imputation:
            from twofold.core.models import pooling

            copies = self.imputed_copies()
            nonlinearity_tests = lambda _study, f: pooling.pooled_nonlinearity_tests(copies, f)  # noqa: E731
            interaction_tests = lambda _study, f: pooling.pooled_interaction_tests(copies, f)  # noqa: E731
        try:
            curves = nonlinearity_tests(self.study, fit)
        except TwofoldError:
            curves = []
        try:
            crossings = interaction_tests(self.study, fit)
        except TwofoldError:
            crossings = []
        return curves, crossings

    def wants_profile(self, fit) -> bool:
        """Whether the profile intervals of ``fit`` are shown (small models always; others when asked; never
        for pooled fits, whose intervals are Rubin's)."""
        return fit is not None and not self.imputation and (self.profile_always or profile_auto(fit))

    def profile_intervals(self, fit) -> dict:
        """Profile-likelihood intervals of the odds ratios of a read-only fit (cached; any thread)."""
        from twofold.core.models.fit import one_blas_thread
        from twofold.core.models.penalised import profile_intervals

        with self._profile_lock:
            hit = self._profiles.get(id(fit))
        if hit is not None and hit[0] is fit:
            return hit[1]
        with one_blas_thread():
            intervals = profile_intervals(fit)
        with self._profile_lock:
            live = {k: v for k, v in self._profiles.items() if len(self._profiles) < 64}
            live[id(fit)] = (fit, intervals)
            self._profiles = live
        return intervals

    def known_profile(self, fit) -> dict | None:
        """The profile intervals of ``fit`` if already traced, else None (never computes)."""
        with self._profile_lock:
            hit = self._profiles.get(id(fit))
        return hit[1] if hit is not None and hit[0] is fit else None

    def validation_of(self, fit) -> ValidationRecord | None:
        """The kept bootstrap validation when it describes ``fit``, else None."""
        return self._kept_for(self.validation, fit)

    def _kept_for(self, kept, fit):
        """``kept`` (a validation or shrinkage record) when it was made from ``fit``, else None."""
        if kept is None or fit is None:
            return None
        if kept.fit is fit:
            return kept
        rung = self.current_rung
        if rung is not None and kept.fit is None and tuple(rung.predictors) == kept.predictors \
                and kept.penalised == is_penalised(fit):
            return kept  # restored from a session: the same model fitted again
        return None

    # ---- multiple imputation ----------------------------------------------------------------
    def set_imputation(self, m: int | None, seed: int | None = None, auxiliary=(), anyway: bool = False,
                       progress=None) -> Change:
        """Fill in missing predictor values by multiple imputation (``m`` copies), or go back to complete rows (None).

        The copies are made now (``progress(fraction)`` may return False to cancel), so a refusal (a column
        missing in more than half the rows without ``anyway``, an auxiliary column that cannot be used, an
        imputation model that fails) leaves the analysis as it was.  Without a seed, one is drawn and kept.
        """
        import secrets

        settings = None
        if m is not None:
            settings = {"m": int(m), "seed": secrets.randbelow(2 ** 31) if seed is None else int(seed),
                        "auxiliary": [str(a) for a in auxiliary], "anyway": bool(anyway)}

        def run():
            self.imputation = settings
            if settings is not None and self.has_model:
                self.imputed_copies(progress)
            if settings is None:
                return Change("Incomplete rows are left out.", frozenset(("ladder",)))
            return Change(f"Missing values are filled in by multiple imputation ({settings['m']} copies, seed "
                          f"{settings['seed']}).", frozenset(("ladder",)))

        return self._operate("missing values", run)

    def pooled_fit(self, index: int):
        """Rung ``index`` fitted on every imputed copy and pooled (penalised when chosen); kept until the copies change."""
        copies = self.imputed_copies()
        rung = self.ladder.rungs[index]
        key = (copies, tuple(rung.predictors), self.penalised)  # the copies themselves: an id could be reused
        kept = {k: v for k, v in self._pooled.items() if k[0] is copies}
        if key not in kept:
            kept[key] = copies.fit(list(rung.predictors), firth=self.penalised)
        self._pooled = kept
        return kept[key]

    def fit_for_validation(self):
        """The model shown, for a bootstrap validation; refused while missing values are imputed (not combined)."""
        self.require_model()
        if self.imputation:
            raise ModelError("Bootstrap validation is not combined with multiple imputation here; choose 'leave out "
                             "incomplete rows' under missing values to validate the model on complete rows.")
        return self.shown_fit()

    def pooled_assessment(self, fit) -> dict:
        """The pooled assessment of a pooled fit of this analysis, with its pooled drop-one tests."""
        from twofold.core.models.pooling import pooled_assessment, pooled_drop_one

        out = pooled_assessment(fit)
        out["drop_one"] = pooled_drop_one(self.imputed_copies(), fit)
        return out

    def imputed_copies(self, progress=None):
        """The imputed copies for the settings in force and every column of the ladder (made once, then kept)."""
        from twofold.core.models.imputation import impute
        from twofold.core.models.pooling import ImputedCopies

        if not self.imputation:
            raise ModelError("Multiple imputation is not switched on; choose it under missing values first.")
        key = self._copies_key()
        if self._copies is None or self._copies[0] != key:
            s, study = self.imputation, self.study
            made = impute(study, list(key[0]), s["m"], s["seed"], s["auxiliary"], s["anyway"], progress=progress)
            self._copies = (key, ImputedCopies(study, made))
        return self._copies[1]

    def _copies_key(self) -> tuple:
        """What the imputed copies depend on: the columns of the ladder, the settings, the data and its roles."""
        from twofold.core.analysis import columns_of

        study, s = self.study, self.imputation
        columns = columns_of(study, self.ladder.used_predictors)
        return (tuple(columns), s["m"], s["seed"], tuple(s["auxiliary"]), s["anyway"], id(study.frame),
                tuple((n, c.role) for n, c in study.columns.items()), study.outcome, study.event)

    # ---- the whole analysis as a record -----------------------------------------------------
    def spec(self):
        """The :class:`~twofold.core.analysis.AnalysisSpec` of the model shown (for sessions and re-runs)."""
        from twofold.core.analysis import AnalysisSpec, columns_of

        rung = self.require_model()
        study = self.study
        fit = self.shown_fit()
        roles = {name: info.role.value for name, info in study.columns.items() if info.role != info.inferred_role}
        v = self.validation_of(fit)
        return AnalysisSpec(
            data=str(study.table.path), outcome=study.outcome, predictors=list(rung.predictors),
            event=study.event, roles=roles, sheet=study.table.sheet, firth=is_penalised(fit),
            profile_ci=self.wants_profile(fit), threshold=self.threshold_for(fit), splines=dict(study.splines),
            missing={k: list(v) for k, v in study.missing_values.items()},
            validate=None if v is None or self.imputation else v.repetitions,
            seed=self.imputation["seed"] if self.imputation else None if v is None else v.seed,
            rows_complete_in=columns_of(study, self.ladder.used_predictors),
            **self._usefulness_spec(fit),
            **({} if not self.imputation else {"impute": self.imputation["m"], "auxiliary": list(self.imputation[
                "auxiliary"]), "impute_anyway": self.imputation["anyway"]}))

    def result(self, with_assessment: bool = True, assessment=None, with_record: bool = True):
        """The full analysis of the model shown, exactly as shown: fit, tests, assessment, profile, validation.

        The fit is the one on screen, on the ladder's common rows (not
        refitted); ``assessment`` may pass one already computed for this fit.
        ``with_record=False`` skips the record (tests, profile intervals) when
        only the model itself is needed, as for a session file.
        """
        import copy

        from twofold.core.analysis import AnalysisResult, count_rows_left_out, extra_row_columns
        from twofold.core.outputs.summary import add_study_records, fit_record

        spec = self.spec()
        if self.imputation:
            from twofold.core.analysis import run_imputed_analysis

            res = run_imputed_analysis(spec, self.study, self.study.event, list(self.require_model().predictors),
                                       copies=self.imputed_copies(), model_only=not with_record)
            if with_record:  # the models tried, as the ladder lists them: pooled, with pooled tests
                res.ladder_fits = self.pooled_ladder()
            return res
        study, shown = self.study, self.shown_fit()
        if with_assessment and assessment is None:
            assessment = assess_fit(study, shown, threshold=self.threshold_for(shown))
        elif assessment is not None:
            from dataclasses import replace

            from twofold.core.assessing import discrimination as disc

            table = disc.classification_table(shown.design.y, shown.fitted, self.threshold_for(shown))
            assessment = replace(assessment, classification=table)
        # A copy, so the reading notices join the fit's warnings without changing the fit on screen.
        fit = copy.copy(shown)
        fit.notices = list(study.table.notices) + list(shown.notices)
        extra = extra_row_columns(study, fit.design.predictors, spec.rows_complete_in)
        if extra:
            count_rows_left_out(study, fit, extra)
        v = self.validation_of(shown)
        shrunk = self.shrinkage_of(shown)
        if not with_record:
            result = AnalysisResult(spec, study, fit, None, None, assessment, {})
            result.validation = None if v is None else v.result
            result.shrinkage = None if shrunk is None else shrunk.result
            return result
        profile = self.profile_intervals(shown) if spec.profile_ci else None
        record = fit_record(fit, study.outcome, study.event, profile=profile, assessment=assessment)
        curves, crossings = self.shape_tests(shown)
        add_study_records(record, study, curves if any(p in study.splines for p in fit.design.predictors) else None,
                          crossings if any(":" in p for p in fit.design.predictors) else None)
        if v is not None:
            from twofold.core.outputs.summary import validation_record

            record["validation"] = validation_record(v.result, fit)
        result = AnalysisResult(spec, study, fit, None, None, assessment, record)
        result.validation = None if v is None else v.result
        result.shrinkage = None if shrunk is None else shrunk.result
        result.other_risks = self._add_usefulness_records(record, shown, shrunk)
        return result

    # ---- sessions ---------------------------------------------------------------------------
    def to_session(self) -> dict:
        """The session of this analysis (the whole ladder, parents, options and kept validation)."""
        from twofold.core.outputs.session import session_from_result

        from twofold.core.outputs.summary import clean_number

        result = self.result(with_assessment=False, with_record=False)
        session = session_from_result(result, ladder=self.ladder, report=self.report_options)
        session["parents"] = [self.parents.get(i) for i in range(len(self.ladder.rungs))]
        session["chosen"] = int(self.ladder.current)
        if result.validation is not None:
            session["validation_result"] = {k: (clean_number(x) if isinstance(x, float) else x)
                                            for k, x in result.validation.as_dict().items()}
            session["validation_result"].update({k: [clean_number(x) for x in xs]
                                                 for k, xs in result.validation.net_benefit_dict().items()})
        return session

    @classmethod
    def from_session(cls, session: dict, data=None, table=None, progress=None) -> "Workspace":
        """The analysis a session describes, fitted again on its data file (or ``data``, or ``table`` read)."""
        from twofold.core.analysis import prepare_study
        from twofold.core.data.io import read_table
        from twofold.core.outputs.session import ladder_from_lists, spec_from_session
        from twofold.core.models.study import Study

        spec = spec_from_session(session, data=data)
        study = Study(table if table is not None else read_table(spec.data, sheet=spec.sheet, progress=progress))
        prepare_study(spec, study)
        ladder = ladder_from_lists(study, session["ladder"], parents=session.get("parents"))
        kept = {i: r.previous for i, r in enumerate(ladder.rungs) if r.previous is not None}
        chosen = int(session["chosen"])
        if 0 <= chosen < len(ladder.rungs):
            ladder.select(chosen)
        ws = cls()
        ws.adopt(study, ladder, kept)
        ws.penalised = bool(session["firth"])
        if session.get("threshold") is not None:
            ws.threshold = float(session["threshold"])
        ws.report_options = dict(session["report"])
        ws.profile_always = bool(session["profile_ci"]) and not profile_auto(ws.shown_fit())
        if session.get("impute"):
            ws.imputation = {"m": int(session["impute"]), "seed": session["seed"],
                             "auxiliary": list(session.get("auxiliary") or []),
                             "anyway": bool(session.get("impute_anyway"))}
        saved = session.get("validation_result")
        if saved and session.get("validate"):
            from twofold.core.models.modelling import Validation

            ws.validation = ValidationRecord(int(session["validate"]), int(session["seed"] or 0),
                                             Validation.from_dict(saved),
                                             tuple(ladder.rungs[ladder.current].predictors), ws.penalised)
        ws._restore_usefulness(session)
        ws.mark_saved()
        return ws

    # ---- usefulness: decision curves, units, subgroups, shrinkage, a saved model on a new file -----------------
    def set_usefulness(self, net_benefit=KEEP, compare_with=KEEP, unit_column=KEEP, subgroups=KEEP) -> Change:
        """Choose the decision-curve thresholds ``[LOW, HIGH, STEP]``, the second model of the curve (a rung
        index), the unit column or the subgroup column (None: none; not given: kept).  Checked first: on a
        refusal nothing changes."""
        from twofold.core.assessing.decision import grid_from_setting
        from twofold.core.assessing.units import check_unit_column

        study = self.require_study()
        new = dict(self.usefulness)
        if net_benefit is not KEEP:
            if net_benefit is not None:
                net_benefit = [float(v) for v in net_benefit] if isinstance(net_benefit, (list, tuple)) else net_benefit
                grid_from_setting(net_benefit)
            new["net_benefit"] = net_benefit
        if compare_with is not KEEP:
            if compare_with is not None:
                n = len(self.ladder.rungs) if self.ladder is not None else 0
                if not (isinstance(compare_with, int) and 0 <= compare_with < n):
                    raise ModelError("Choose a model of the ladder to compare the decision curve with.")
            new["compare_with"] = compare_with
        for key, value in (("unit_column", unit_column), ("subgroups", subgroups)):
            if value is KEEP:
                continue
            if value is not None:
                value = study.column(str(value))
                if value not in study.columns:
                    raise ModelError(f"'{value}' is not a column of {study.source}; choose one of its columns.")
                if key == "unit_column" and self.has_model:
                    check_unit_column(value, study.outcome, self._model_columns(self.shown_fit()))
            new[key] = value
        self.usefulness = new
        change = Change("The usefulness settings changed.", frozenset(("usefulness",)))
        self._changed(change)
        return change

    def _model_columns(self, fit) -> list:
        return [p for t in fit.design.predictors for p in str(t).split(":")]

    def grouping_columns(self, most: int) -> list:
        """Columns whose values may name units or subgroups of the shown model's records: not the outcome, not in
        the model, not an identifier or a date, with 2 to ``most`` distinct values."""
        from twofold.core.data.roles import Role

        if self.study is None or not self.has_model:
            return []
        used = set(self._model_columns(self.shown_fit())) | {self.study.outcome}
        return [name for name, info in self.study.columns.items()
                if name not in used and info.role not in (Role.IDENTIFIER, Role.DATE) and 2 <= info.n_levels <= most]

    def _usefulness_spec(self, fit) -> dict:
        """The spec fields of the usefulness settings (what a session saves and ``rerun`` repeats)."""
        u = self.usefulness
        other = u["compare_with"]
        versus = None
        if other is not None and other < len(self.ladder.rungs) and other != self.ladder.current:
            versus = list(self.ladder.rungs[other].predictors)
        unit = u["unit_column"]
        if unit is not None and (unit == self.study.outcome or unit in self._model_columns(fit)):
            unit = None  # the model now uses it: no longer a unit column
        return {"net_benefit": None if u["net_benefit"] is None else list(u["net_benefit"]),
                "net_benefit_versus": versus, "unit_column": unit, "subgroups": u["subgroups"],
                "shrink": self.shrinkage_of(fit) is not None}

    def decision_view(self, fit=None) -> DecisionView:
        """The decision curve of the shown model (optimism-corrected when its bootstrap drew the same thresholds),
        with the chosen second model of the ladder on the same rows."""
        from twofold.core.assessing.decision import decision_curve, net_benefit_values

        self.require_model()
        fit = fit if fit is not None else self.shown_fit()
        grid = self.decision_thresholds()
        v = self.validation_of(fit)
        optimism = None
        if v is not None and v.result.net_benefit_thresholds is not None \
                and len(v.result.net_benefit_thresholds) == len(grid) \
                and all(abs(a - b) < 1e-9 for a, b in zip(v.result.net_benefit_thresholds, grid)):
            optimism = v.result.net_benefit_optimism
        curve = decision_curve(fit.design.y, fit.fitted, grid, optimism)
        other = self.usefulness["compare_with"]
        if other is None or other >= len(self.ladder.rungs) or other == self.ladder.current:
            return DecisionView(curve)
        of = self.fit_of(other)
        if len(of.design.y) != len(fit.design.y) or not (of.design.rows == fit.design.rows).all():
            return DecisionView(curve)  # not on the same rows: not comparable
        return DecisionView(curve, net_benefit_values(of.design.y, of.fitted, grid),
                            tuple(self.ladder.rungs[other].predictors), other)

    def decision_thresholds(self):
        """The thresholds of the decision curve: the user's setting, else 5% to 50% in steps of 1% (a bootstrap
        run from the window draws its net-benefit optimism at these, for the corrected curve)."""
        from twofold.core.assessing.decision import DEFAULT_RANGE, grid_from_setting

        return grid_from_setting(list(self.usefulness["net_benefit"] or DEFAULT_RANGE))

    def units_comparison(self, fit=None):
        """The risk-adjusted comparison of the units of the chosen unit column on the shown model's rows."""
        from twofold.core.assessing.units import check_unit_column, compare_units

        self.require_model()
        column = self.usefulness["unit_column"]
        if column is None:
            raise ModelError("Choose the column naming each record's unit (ward, hospital or team) first.")
        fit = fit if fit is not None else self.shown_fit()
        check_unit_column(column, self.study.outcome, self._model_columns(fit))
        values = self.study.frame[column].iloc[fit.design.rows].to_numpy(dtype=object)
        return compare_units(values, fit.design.y, fit.fitted, column)

    def subgroup_table(self, fit=None, suppress_up_to: int | None = None) -> list:
        """Performance of the shown model within the groups of the chosen subgroup column (suppressed entries
        follow the report's limit unless ``suppress_up_to`` is given)."""
        from twofold.core.assessing.subgroups import subgroup_performance

        self.require_model()
        column = self.usefulness["subgroups"]
        if column is None:
            raise ModelError("Choose the column whose groups the model's performance is shown in first.")
        fit = fit if fit is not None else self.shown_fit()
        groups = self.study.frame[column].iloc[fit.design.rows].to_numpy(dtype=object)
        limit = self.report_options["suppress_up_to"] if suppress_up_to is None else suppress_up_to
        return subgroup_performance(groups, fit.design.y, fit.fitted, fit.linear_predictor, column, limit)

    def shrinkage_of(self, fit) -> ShrinkRecord | None:
        """The kept shrunk model when it was made from ``fit`` (or its refit from a session), else None."""
        return self._kept_for(self.shrinkage, fit)

    def shrink_offer(self) -> str | None:
        """Why the shown model may be shrunk (the bootstrap's corrected slope below 1), or None when it may not."""
        from twofold.core.models.updating import shrinkage_refusal

        fit = self.shown_fit()
        v = self.validation_of(fit)
        if v is None or self.shrinkage_of(fit) is not None:
            return None
        slope = v.result.calibration_slope_corrected
        if shrinkage_refusal(slope) is not None:
            return None
        return (f"The bootstrap expects a calibration slope of {slope:.3g} on new patients: the model's risks would "
                f"be too extreme there. Shrinking every coefficient by {slope:.3g} (and re-estimating the intercept) "
                "gives risks that should hold better; predictions and saved sessions then use the shrunk model.")

    def shrink(self) -> Change:
        """Use the shown model shrunk by its bootstrap's corrected calibration slope (undoable)."""
        def run():
            from twofold.core.models.updating import shrinkage_refusal

            rung = self.require_model()
            fit = self.shown_fit()
            v = self.validation_of(fit)
            if v is None:
                raise ModelError("Shrinking uses the calibration slope of a bootstrap validation; run the bootstrap "
                                 "validation of this model first.")
            factor = v.result.calibration_slope_corrected
            why = shrinkage_refusal(factor)
            if why is not None:
                raise ModelError(why)
            self.shrinkage = ShrinkRecord(self._shrunk(fit, factor), tuple(rung.predictors), is_penalised(fit), fit)
            return Change(f"The model is shrunk by {factor:.3g}; predictions and saved sessions use the shrunk model.",
                          frozenset(("validation", "usefulness")))

        return self._operate("shrinking", run)

    def unshrink(self) -> Change:
        """Go back to the model as fitted (undoable)."""
        def run():
            if self.shrinkage is None:
                return Change("The model is not shrunk.", frozenset())
            self.shrinkage = None
            return Change("The model as fitted is used again.", frozenset(("validation", "usefulness")))

        return self._operate("shrinking undone", run)

    def _shrunk(self, fit, factor):
        from twofold.core.models.updating import shrink_model
        from twofold.core.outputs.predict import frozen_model

        model = frozen_model(fit, self.study.outcome, self.study.event)
        return shrink_model(model, fit.design.X[:, fit.kept], fit.design.y, factor, source=str(self.study.source))

    def saved_model(self, fit=None):
        """The model as it is saved and used for predictions: the shrunk one when kept, else the fit's own."""
        from twofold.core.outputs.predict import frozen_model

        fit = fit if fit is not None else self.shown_fit()
        s = self.shrinkage_of(fit)
        return s.result.model if s is not None else frozen_model(fit, self.study.outcome, self.study.event)

    def check_on_file(self, path, session_file=None, sheet=None, threshold=None, adapt=False):
        """A saved model (``session_file``'s, else the shown one as saved) applied unchanged to a new data file:
        the frozen validation figures (a :class:`~twofold.core.outputs.predict.FrozenResult`), with the net
        benefit at the analysis's decision-curve thresholds and, with ``adapt``, how to adapt the model to the
        file (``record["adaptation"]``).  Changes nothing."""
        from twofold.core.analysis import add_decision_curve
        from twofold.core.outputs.predict import add_adaptation, evaluate_frozen

        model, sheet, threshold = self._model_to_check(session_file, sheet, threshold)
        result = evaluate_frozen(model, path, sheet=sheet, threshold=threshold)
        add_decision_curve(result.record, result.y, result.predicted, self.decision_thresholds())
        if adapt:
            add_adaptation(result)
        return result

    def _model_to_check(self, session_file, sheet, threshold):
        """The saved model to check on a new file (``session_file``'s, else the shown one as saved), its sheet and
        threshold."""
        if session_file is not None:
            from twofold.core.outputs import session as ses

            session = ses.load_session(session_file)
            model, sheet = ses.frozen_from_session(session), sheet if sheet is not None else session["sheet"]
            threshold = threshold if threshold is not None else session["threshold"]
        else:
            self.require_model()
            fit = self.shown_fit()
            model = self.saved_model(fit)
            threshold = threshold if threshold is not None else self.threshold_for(fit)
        return model, sheet, threshold

    def save_adapted(self, path, out_path, session_file=None) -> str:
        """Adapt the saved model (``session_file``'s, else the shown one) to the data file ``path`` and save it as a
        new session at ``out_path`` (its data: the new file), for predictions and checks; returns the choice's
        reading.  The analysis itself is unchanged."""
        from twofold.core.outputs import session as ses
        from twofold.core.outputs.predict import add_adaptation, evaluate_frozen
        from twofold.core.outputs.storage import refuse_writing_over, save_session

        model, sheet, threshold = self._model_to_check(session_file, None, None)
        session = ses.load_session(session_file) if session_file is not None else self.to_session()
        refuse_writing_over([out_path], [path, session.get("data")], session_file=session_file)
        result = evaluate_frozen(model, path, sheet=sheet, threshold=threshold)
        adaptation = add_adaptation(result)
        save_session(ses.adapted_session(session, adaptation.model, path, result.rows_read), out_path)
        return adaptation.reading

    def _add_usefulness_records(self, record: dict, fit, shrunk):
        """Add what the usefulness settings ask for to a result's record (as ``fit`` and ``rerun`` write it);
        returns the second model's risks when its decision curve was added, else None."""
        from twofold.core.analysis import add_decision_curve, add_other_curve
        from twofold.core.assessing.subgroups import SUBGROUP_NOTE

        u = self.usefulness
        if u["net_benefit"] is not None:
            view = self.decision_view(fit)
            c = view.curve
            add_decision_curve(record, fit.design.y, fit.fitted, c.thresholds,
                               None if c.model_corrected is None else c.model - c.model_corrected)
            if view.other is not None:
                other = self.fit_of(view.other_index).fitted
                add_other_curve(record, fit.design.y, other, view.other_predictors)
        if u["subgroups"] is not None:
            record["subgroups"] = self.subgroup_table(fit)
            record["subgroups_note"] = SUBGROUP_NOTE
        if u["unit_column"] is not None:
            try:
                record["units"] = self.units_comparison(fit).as_record()
            except TwofoldError:
                pass  # the model now uses the column, or it no longer names two units: nothing to compare
        if shrunk is not None:
            record["shrinkage"] = shrunk.result.as_dict()
        return other if u["net_benefit"] is not None and view.other is not None else None

    def _restore_usefulness(self, session: dict) -> None:
        """The usefulness settings and the shrunk model a session saved (a setting the data no longer allows is
        left unset; the shrunk model is made again from the refitted model and the saved factor)."""
        versus = session.get("net_benefit_versus")
        compare = None
        if versus:
            compare = next((i for i, r in enumerate(self.ladder.rungs) if set(r.predictors) == set(versus)), None)
        for key, value in (("net_benefit", session.get("net_benefit")), ("compare_with", compare),
                           ("unit_column", session.get("unit_column")), ("subgroups", session.get("subgroups"))):
            try:
                self.usefulness[key] = None
                if value is not None:
                    self.set_usefulness(**{key: value})
            except TwofoldError:
                self.usefulness[key] = None
        saved = session.get("shrinkage")
        fit = self.shown_fit()
        if saved and saved.get("factor") is not None:
            self.shrinkage = ShrinkRecord(self._shrunk(fit, float(saved["factor"])),
                                          tuple(self.current_rung.predictors), is_penalised(fit), fit)
