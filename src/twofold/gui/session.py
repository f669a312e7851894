"""The window's handle on the core model: one study, its model ladder, one worker.

:class:`Session` is what the panes receive in their constructor (the pattern
napari uses: a view gets the model, subscribes to its events and blocks its
own signals while it updates).  The core objects themselves stay on the
worker thread; the session relays their events (``Study.events.roles``,
``Study.events.outcome``, ``Ladder.events.changed``) to the GUI thread as Qt
signals carrying display records built on the worker.

Every request gets an increasing id.  A signal carrying results is emitted
only if no newer request that could change the same display has been made
since, so a slow, superseded fit never overwrites a newer one.
"""

from __future__ import annotations

from collections import defaultdict

from PySide6.QtCore import QObject, Signal

from twofold.gui.views import Failure
from twofold.gui.worker import CoreWorker, Job

#: The displays a job can update; each has its own "newest request" mark.
FACETS = ("study", "columns", "outcome", "results", "comparison", "assessment", "profile")

#: Risk threshold of the classification table until the user picks another.
DEFAULT_THRESHOLD = 0.5


class Session(QObject):
    """A study and its ladder, driven from the GUI thread and computed on the worker."""

    studyLoaded = Signal(object)      # StudyView of a newly opened file
    columnsChanged = Signal(object)   # StudyView after a role or reference change
    outcomeChanged = Signal(object)   # OutcomeView
    resultsChanged = Signal(object)   # ResultsView, or None when there is no model
    comparisonReady = Signal(object)  # ComparisonView
    assessmentChanged = Signal(object)  # AssessmentView, or None when there is no model
    failed = Signal(object)           # Failure
    busyChanged = Signal(bool)
    coreReady = Signal()
    requestFinished = Signal(int)     # id of every request that completed (shown or not)
    loadStarted = Signal(str)         # a file is being opened: ticks would apply to the old one
    loadProgress = Signal(float)      # share of the file read so far, 0 to 1
    modellingReady = Signal(int, object)  # (request id, payload) of a model-shape request
    profileReady = Signal(object)     # ProfileView of the model shown (intervals worked out on their own thread)
    _profileComputed = Signal(int, object)  # (request id, ProfileView) from the profile thread

    def __init__(self, parent=None):
        super().__init__(parent)
        self._worker = CoreWorker()
        self._worker.jobDone.connect(self._on_done)
        self._next_id = 0
        self._floor: dict[str, int] = defaultdict(int)
        self._pending: set[int] = set()
        self._busy = False
        self.core_ready = False
        self.last_results = None
        self.last_study = None
        self.last_assessment = None
        #: Request id of the assessment shown last (tests and the snapshot wait on it).
        self.last_assessment_id = 0
        #: Risk threshold of the classification table (GUI side; passed to each job).
        self.threshold = DEFAULT_THRESHOLD
        #: The predictors last asked for (GUI side), used when a role change refits.
        self.predictors: tuple = ()
        # Worker-side state: read and written on the worker thread only.
        self._study = None
        self._ladder = None
        self._parents: dict[int, int] = {}
        self._dirty: set[str] = set()
        self._awaiting_event: str | None = None
        # The last assessment and its figures, keyed by the fit they describe.
        self._assessed = None
        # Which file opening is still wanted; an older one stops at its next progress report.
        self._load_generation = 0
        # Ordinary or penalised fit shown (twofold.gui.present.FitChoice, worker side), the
        # profile-interval thread, and the last intervals worked out, keyed by their fit.
        self._choice = None
        self._profiler = None
        self._profiled = None
        self._profile_future = None  # (request id, Future) of the intervals being traced
        self._early_profile = None  # (request id, ProfileView) traced before its results were shown
        self.last_profile = None
        #: Profile intervals for every model, not only small ones (GUI side; read by the worker).
        self.profile_always = False
        self._profileComputed.connect(self._on_profiled)

    # ---- life cycle ---------------------------------------------------
    def start(self) -> None:
        """Start the worker; it first imports the core and the fitting library."""
        if not self._worker.isRunning():
            self._worker.start()
            self._submit("warmup", self._job_warmup, facets=())

    def shutdown(self) -> None:
        self._worker.stop()
        if self._profiler is not None:
            self._profiler.shutdown(wait=False, cancel_futures=True)

    @property
    def busy(self) -> bool:
        return self._busy

    # ---- requests (GUI thread) -------------------------------------------
    def open_file(self, path, sheet: str | None = None) -> int:
        """Open a data file (drops every request still waiting); returns the request id."""
        self._load_generation += 1
        generation = self._load_generation
        self.loadStarted.emit(str(path))
        return self._submit("load", lambda: self._job_load(path, sheet, generation),
                            facets=("study", "columns", "outcome", "results", "comparison"),
                            clears_queue=True)

    def cancel_load(self) -> None:
        """Stop opening the file being read (the file shown before stays)."""
        self._load_generation += 1

    def set_outcome(self, name: str | None, event=None, guess: bool = True, predictors=()) -> int:
        """Choose the outcome and event (a new ladder), refitting ``predictors`` on it; returns the id."""
        predictors = tuple(predictors)
        return self._submit("outcome", lambda: self._job_outcome(name, event, guess, predictors),
                            facets=("outcome", "columns", "results", "comparison"),
                            on_error=self._snapshot_all)

    def set_predictors(self, predictors) -> int:
        """Fit these predictors as a new rung (replaces a fit request still waiting); returns the id."""
        predictors = tuple(predictors)
        return self._submit("fit", lambda: self._job_fit(predictors), facets=("results",),
                            coalesce="fit", on_error=self._snapshot_results)

    def set_role(self, column: str, role: str, predictors=()) -> int:
        """Change a column's role and refit the ladder (or restart it if the column leaves); returns the id."""
        predictors = tuple(predictors)
        return self._submit("role", lambda: self._job_role(column, role, predictors),
                            facets=("columns", "results"), on_error=self._snapshot_all)

    def set_reference(self, column: str, level) -> int:
        """Change a factor's reference level and refit the ladder; returns the id."""
        return self._submit("reference", lambda: self._job_reference(column, level),
                            facets=("columns", "results"), on_error=self._snapshot_all)

    def select_rung(self, index: int) -> int:
        """Make rung ``index`` (0-based) the model shown; returns the id."""
        return self._submit("select", lambda: self._job_select(index), facets=("results",),
                            coalesce="select", on_error=self._snapshot_results)

    def compare_rungs(self, i: int, j: int) -> int:
        """Compare two rungs (likelihood-ratio test if nested, AIC and BIC always); returns the id."""
        return self._submit("compare", lambda: self._job_compare(i, j), facets=("comparison",),
                            coalesce="compare")

    def set_threshold(self, threshold: float) -> int:
        """Use this risk threshold for the classification table of the model shown; returns the id."""
        self.threshold = float(threshold)
        t = self.threshold
        return self._submit("assess", lambda: self._job_assess(None, t), facets=("assessment",),
                            coalesce="assess")

    def set_penalised(self, on: bool) -> int:
        """Show Firth's penalised fit of each model (True) or the ordinary fit (False); returns the id."""
        on = bool(on)
        return self._submit("penalised", lambda: self._job_penalised(on), facets=("results",),
                            on_error=self._snapshot_results)

    def request_profile(self) -> int:
        """Profile-likelihood intervals of the model shown, worked out off the GUI thread; returns the id.

        The request takes the id of the newest request that changed the results (it
        describes those), so it never counts as a newer request itself; any later
        change of the results makes it stale, and stale intervals are never shown.
        """
        job_id = self._floor["profile"]
        self._worker.submit(Job(job_id, "profile", lambda: self._job_profile(job_id), coalesce="profile"))
        return job_id

    def _job_penalised(self, on):
        self._require_study()
        self._choice.penalised = on
        return self._flush(also=("results",))

    def _shown_fit(self):
        """The fit of the model shown (its penalised refit when that is chosen), or None (worker thread)."""
        return None if self._choice is None else self._choice.shown(self._study, self._ladder)

    def _job_profile(self, job_id):
        fit = self._shown_fit()
        if fit is None:
            return {"profile": None}
        return self._start_profile(job_id, fit)

    def _start_profile(self, job_id, fit) -> dict:
        """Hand ``fit`` to the profile thread (worker thread); returns the intervals at once if already known."""
        from concurrent.futures import ThreadPoolExecutor

        cached = self._profiled
        if cached is not None and cached[0] is fit:
            return {"profile": cached[1]}
        if self._profiler is None:
            # Its own thread: the core worker stays free for fits while the intervals are traced.
            self._profiler = ThreadPoolExecutor(max_workers=1, thread_name_prefix="twofold-profile")
        future = self._profiler.submit(self._run_profile, job_id, fit, self._ladder.current)
        self._profile_future = (job_id, future)
        return {}

    def _run_profile(self, job_id, fit, rung) -> None:
        """Profile thread: the intervals of a read-only fit, sent to the GUI thread if still wanted."""
        from twofold.gui import present

        if self._floor["profile"] > job_id:
            return  # superseded before it started
        try:
            view = present.profile_view(fit, rung)
        except Exception as exc:  # never lose a failure silently
            from twofold.gui.views import ProfileView
            from twofold.gui.worker import log_exception

            view = ProfileView(rung, False, error=f"Something unexpected stopped the profile-likelihood intervals "
                                                  f"({type(exc).__name__}); details in {log_exception(exc)}.")
        self._profiled = (fit, view)
        try:
            self._profileComputed.emit(job_id, view)
        except RuntimeError:  # the window closed meanwhile
            pass

    def _on_profiled(self, job_id: int, view) -> None:
        if not self.is_current("profile", job_id):
            return
        if job_id in self._pending:
            # Traced before the results they describe reached the window (a small model on a
            # busy machine): held back, so they never arrive ahead of those results and get lost.
            self._early_profile = (job_id, view)
            return
        self.last_profile = view
        self.profileReady.emit(view)

    # ---- model-shape hook (used by twofold.gui.modelling_ui) ----------------
    def run_modelling(self, fn) -> int:
        """Run ``fn(study, ladder, add)`` on the worker and refresh the results; returns the id.

        ``add(predictors)`` appends a rung as ticking does; ``fn`` returns a
        payload sent with :attr:`modellingReady` on the GUI thread.
        """
        return self._submit("modelling", lambda: self._job_modelling(fn), facets=("results",),
                            on_error=self._snapshot_results)

    def _job_modelling(self, fn):
        study = self._require_study()
        payload = fn(study, self._ladder, self._add)
        out = self._flush(also=("results",))
        out["modelling"] = payload
        return out

    def _submit(self, kind, fn, facets, coalesce=None, clears_queue=False, on_error=None) -> int:
        self._next_id += 1
        job_id = self._next_id
        then = None
        if "results" in facets:
            # The assessment follows the results as a second message with the same id;
            # profile intervals asked for earlier no longer describe what is shown.
            facets = tuple(facets) + ("assessment", "profile")
            t = self.threshold
            then = lambda: self._job_assess(job_id, t)  # noqa: E731
        for f in facets:
            self._floor[f] = job_id
        self._floor["error:" + kind] = job_id
        self._pending.add(job_id)
        job = Job(job_id, kind, fn, coalesce, clears_queue, on_error, then=then, then_kind="assess")
        for dropped in self._worker.submit(job):
            self._pending.discard(dropped)
        self._set_busy(bool(self._pending))
        return job_id

    def _set_busy(self, busy: bool) -> None:
        if busy != self._busy:
            self._busy = busy
            self.busyChanged.emit(busy)

    # ---- results (GUI thread) -----------------------------------------------
    def is_current(self, facet: str, job_id: int) -> bool:
        """Whether a display from request ``job_id`` is still the newest for ``facet``."""
        return job_id >= self._floor[facet]

    def _on_done(self, result) -> None:
        if result.followup:
            self._on_assessed(result)
            return
        self._pending.discard(result.id)
        if result.kind == "warmup":
            self.core_ready = True
            self.coreReady.emit()
        signals = {"study": self.studyLoaded, "columns": self.columnsChanged, "outcome": self.outcomeChanged,
                   "results": self.resultsChanged, "comparison": self.comparisonReady,
                   "assessment": self.assessmentChanged, "profile": self.profileReady}
        for facet in FACETS:  # fixed order: the study before its columns, outcome and results
            if facet in result.outputs and self.is_current(facet, result.id):
                view = result.outputs[facet]
                if facet == "results":
                    self.last_results = view
                if facet == "assessment":
                    self.last_assessment, self.last_assessment_id = view, result.id
                if facet == "profile":
                    self.last_profile = view
                if facet in ("study", "columns"):
                    self.last_study = view
                signals[facet].emit(view)
        early = self._early_profile
        if early is not None and early[0] <= result.id:
            self._early_profile = None
            if early[0] == result.id and self.is_current("profile", early[0]):
                self.last_profile = early[1]
                self.profileReady.emit(early[1])
        if "modelling" in result.outputs:  # model-shape hook: the dialog checks the id itself
            self.modellingReady.emit(result.id, result.outputs["modelling"])
        if result.error is not None and (result.unexpected or self.is_current("error:" + result.kind, result.id)):
            self.failed.emit(Failure(result.kind, result.error, result.unexpected, result.log_path,
                                     result.error_type))
        self._set_busy(bool(self._pending))
        self.requestFinished.emit(result.id)

    def _on_assessed(self, result) -> None:
        """The assessment that follows a fit: shown only if no newer request has been made since."""
        current = self.is_current("assessment", result.id)
        if current and "assessment" in result.outputs:
            self.last_assessment = result.outputs["assessment"]
            self.last_assessment_id = result.id
            self.assessmentChanged.emit(self.last_assessment)
        if result.error is not None and (result.unexpected or current):
            self.failed.emit(Failure(result.kind, result.error, result.unexpected, result.log_path,
                                     result.error_type))

    # ---- jobs (worker thread) -------------------------------------------------
    def _job_warmup(self):
        # Import the heavy libraries now, off the GUI thread, so the first fit is quick.
        import twofold.core.ladder  # noqa: F401
        import twofold.core.study  # noqa: F401
        import twofold.gui.present  # noqa: F401
        from twofold.core import fit

        fit.wald_p(0.0)
        fit.chi2_sf(1.0, 1)
        import statsmodels.discrete.discrete_model  # noqa: F401
        return {}

    def _watch(self, study, ladder) -> None:
        """Relay the core's change announcements: each marks a display to rebuild."""
        study.events.roles.connect(lambda *a: self._dirty.add("columns"))
        study.events.outcome.connect(lambda *a: self._dirty.update(("outcome", "columns")))
        ladder.events.changed.connect(lambda *a: self._dirty.add("results"))

    def _flush(self, also=()) -> dict:
        """Display records for everything the core announced as changed during this job."""
        from twofold.gui import present

        wanted = self._dirty | set(also)
        self._dirty = set()
        out = {}
        if self._study is None:
            return out
        if "study" in wanted:
            out["study"] = present.study_view(self._study)
        elif "columns" in wanted:
            out["columns"] = present.study_view(self._study, with_cells=False)
        if "outcome" in wanted:
            out["outcome"] = present.outcome_view(self._study)
        if "results" in wanted:
            view = out["results"] = present.results_view(self._study, self._ladder, self._parents, self._choice)
            if view is not None and (view.profile_auto or self.profile_always):
                # Started here, beside the assessment, rather than after a round trip through the window.
                out.update(self._start_profile(self._worker.running_id, self._shown_fit()))
        return out

    def _snapshot_results(self) -> dict:
        return self._flush(also=("results",))

    def _snapshot_all(self) -> dict:
        return self._flush(also=("columns", "outcome", "results"))

    def _job_load(self, path, sheet, generation):
        from twofold.core.io import read_table
        from twofold.core.ladder import Ladder
        from twofold.core.study import Study

        def progress(fraction):
            # Called on this thread between chunks; a Qt signal carries it to the window.
            self.loadProgress.emit(fraction)
            return generation == self._load_generation

        # With a progress callback the core reads in chunks, so no single step
        # holds the interpreter for long and the window keeps answering.
        study = Study(read_table(path, sheet=sheet, progress=progress))
        ladder = Ladder(study)
        self._study, self._ladder, self._parents, self._dirty = study, ladder, {}, set()
        self._awaiting_event = None
        from twofold.gui.present import FitChoice

        self._choice, self._profiled = FitChoice(), None
        self._watch(study, ladder)
        out = self._flush(also=("study", "outcome"))
        out["results"] = None
        out["comparison"] = None
        return out

    def _adopt(self, study, ladder, penalised: bool = False) -> dict:
        """Show ``study`` and its fitted ``ladder`` as if just opened (worker thread); returns every display.

        Used when a saved analysis is opened: the panes then rebuild exactly as after opening a file and ticking.
        """
        from twofold.gui.present import FitChoice

        self._study, self._ladder, self._dirty = study, ladder, set()
        self._parents = {i: r.previous for i, r in enumerate(ladder.rungs) if r.previous is not None}
        self._awaiting_event = None
        self._choice, self._profiled, self._assessed = FitChoice(), None, None
        self._choice.penalised = bool(penalised)
        self._watch(study, ladder)
        out = self._flush(also=("study", "outcome", "results"))
        out["comparison"] = None
        return out

    def _require_study(self):
        from twofold.core.errors import ModelError

        if self._study is None:
            raise ModelError("Open a data file first.")
        return self._study

    def _job_outcome(self, name, event, guess, predictors):
        from twofold.core.errors import ColumnError
        from twofold.gui import present

        study = self._require_study()
        if name is None:
            self._awaiting_event = None
            self._new_ladder()
            return {**self._flush(also=("outcome", "results")), "comparison": None}
        name = study.column(name)
        try:
            study.set_outcome(name, event, guess=guess)
        except ColumnError:
            info = study.columns[name]
            if event is None and info.n_levels == 2:
                # Two values but no telling which is the event: ask, do not guess.
                self._awaiting_event = name
                self._new_ladder()
                out = self._flush(also=("results",))
                out["outcome"] = present.outcome_view(
                    study, f"Choose which value of '{name}' counts as the event.", needs_event=True, name=name)
                out["comparison"] = None
                return out
            raise
        self._awaiting_event = None
        self._new_ladder()
        predictors = tuple(p for p in predictors if p != study.outcome and p in study.candidates())
        if predictors:
            self._add(predictors)
        out = self._flush(also=("outcome", "columns", "results"))
        out["comparison"] = None
        return out

    def _new_ladder(self) -> None:
        """Start the ladder afresh (a new outcome makes the old models meaningless)."""
        if self._ladder.rungs:
            self._ladder.clear()
        self._parents = {}

    def _add(self, predictors) -> None:
        ladder = self._ladder
        parent = ladder.current
        ladder.add(predictors)
        if parent is not None:
            self._parents[len(ladder.rungs) - 1] = parent

    def _job_fit(self, predictors):
        study = self._require_study()
        ladder = self._ladder
        if study.outcome is None or self._awaiting_event is not None:
            from twofold.core.errors import ModelError

            if self._awaiting_event is not None:
                raise ModelError(f"Choose which value of '{self._awaiting_event}' counts as the event, "
                                 "then tick the predictors.")
            raise ModelError("Choose the outcome column first, then tick the predictors.")
        current = ladder.rungs[ladder.current] if ladder.current is not None else None
        if current is None and not predictors:
            return self._flush(also=("results",))
        if current is None or set(current.predictors) != set(predictors):
            self._add(predictors)
        return self._flush(also=("results",))

    def _job_role(self, column, role, predictors):
        from twofold.core.roles import Role

        study = self._require_study()
        ladder = self._ladder
        study.set_role(column, role)
        predictor_role = Role(role).is_predictor

        def involves(term):  # the column itself, or an interaction with it ("a:b")
            return column in str(term).split(":")

        if ladder.rungs and any(involves(p) for p in ladder.used_predictors):
            if predictor_role:
                ladder.refit()
            else:
                ladder.clear()
                self._parents = {}
                rest = tuple(p for p in predictors if not involves(p))
                if rest and study.outcome is not None:
                    self._add(rest)
        return self._flush(also=("columns", "results"))

    def _job_reference(self, column, level):
        study = self._require_study()
        study.set_reference(column, level)
        if self._ladder.rungs and column in self._ladder.used_predictors:
            self._ladder.refit()
        return self._flush(also=("columns", "results"))

    def _job_select(self, index):
        self._require_study()
        self._ladder.select(index)
        return self._flush(also=("results",))

    def _job_compare(self, i, j):
        from twofold.gui import present

        self._require_study()
        from twofold.core.errors import ModelError

        n = len(self._ladder.rungs)
        if not (0 <= i < n and 0 <= j < n):
            raise ModelError("Choose two models of the ladder to compare.")
        if i == j:
            raise ModelError(f"Model {i + 1} was chosen twice; choose two different models to compare.")
        return {"comparison": present.comparison_view(self._ladder, i, j)}

    def _job_assess(self, job_id, threshold):
        """How good the model shown is, with its figures (worker thread; after the results were sent).

        ``job_id`` is the request whose results this follows; when a newer
        request has been made meanwhile it will send its own assessment, so
        this one returns None at once instead of holding up the queue.
        """
        import dataclasses

        if job_id is not None and self._floor["assessment"] > job_id:
            return None
        ladder = self._ladder
        if self._study is None or ladder is None or ladder.current is None or not ladder.rungs:
            self._assessed = None
            return {"assessment": None}
        from twofold.core import discrimination as disc
        from twofold.core.assessment import assess
        from twofold.gui import figures, present

        fit = self._shown_fit()
        cached = self._assessed
        if cached is not None and cached[0] is fit:
            # Only the threshold changed: the rest stands, figures included.
            _, result, pictures = cached
            table = disc.classification_table(fit.design.y, fit.fitted, threshold)
            result = dataclasses.replace(result, classification=table)
        else:
            result = assess(self._study, fit, threshold=threshold)
            pictures = figures.assessment_figures(result)
        self._assessed = (fit, result, pictures)
        pending = self._profile_future
        if job_id is not None and pending is not None and pending[0] == job_id and present.profile_auto(fit):
            # A small model's intervals take a moment: let them arrive first, so the assessment
            # on screen always comes with them (the window and a snapshot see both together).
            try:
                pending[1].result(timeout=60)
            except Exception:  # reported by the profile thread itself
                pass
        return {"assessment": present.assessment_view(self._study, ladder, result, pictures, fit)}
