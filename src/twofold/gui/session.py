"""The window's thin relay to the analysis: requests go to the core, display records come back.

:class:`Session` is what the panes receive in their constructor (the pattern
napari uses: a view gets the model, subscribes to its events and blocks its
own signals while it updates).  The analysis itself is a Qt-free
:class:`~twofold.core.workspace.Workspace`, touched on one worker thread
only; this relay turns each request into a call of one of its operations and
sends back the display records that :mod:`twofold.gui.present` words.

Three threads do the work, so a tick never waits:

* the worker runs the workspace's operations (a tick's fit and its tests) in
  the order asked; every tick is its own step of the ladder;
* the assessment thread works out how good the model shown is and draws its
  figures from the read-only fit; a newer request abandons it between steps;
* the profile thread traces profile-likelihood intervals, also from the fit.

Every request gets an increasing id.  A display is shown only if no newer
request that could change it has been made since, so a slow, superseded
result never overwrites a newer one, and an assessment is only ever shown
under the results of the same request.
"""

from __future__ import annotations

import dataclasses
import threading
from collections import defaultdict
from concurrent.futures import ThreadPoolExecutor

from PySide6.QtCore import QObject, QTimer, Signal

from twofold.gui.views import Failure, HistoryView
from twofold.gui.worker import CoreWorker, Job, log_exception, where_logged

#: The displays a job can update; each has its own "newest request" mark.
FACETS = ("study", "columns", "outcome", "results", "comparison", "history")

#: Seconds the models passed over by quick ticks wait, after the newest is sent, before they are fitted.
SHOW_FIRST_S = 0.15
#: ... and, at least, until this many seconds have passed since the last request.
QUIET_S = 0.6

#: Risk threshold of the classification table until the user picks another (None: the model's event rate).
DEFAULT_THRESHOLD = None


class _Superseded(Exception):
    """Raised inside an assessment that a newer request has made pointless."""


class Session(QObject):
    """The workspace, driven from the GUI thread and computed off it."""

    #: Work out assessments in a process of their own (so they never hold the window's interpreter lock);
    #: False: on the assessment thread of this process (tests that replace the assessment set this).
    assess_in_process = True

    studyLoaded = Signal(object)      # StudyView of a newly opened file
    columnsChanged = Signal(object)   # StudyView after a role or reference change
    outcomeChanged = Signal(object)   # OutcomeView
    resultsChanged = Signal(object)   # ResultsView, or None when there is no model
    comparisonReady = Signal(object)  # ComparisonView, or None to clear it
    assessmentChanged = Signal(object)  # AssessmentView, or None when there is no model
    historyChanged = Signal(object)   # HistoryView: undo, redo, unsaved changes
    failed = Signal(object)           # Failure
    busyChanged = Signal(bool)
    coreReady = Signal()
    requestFinished = Signal(int)     # id of every request that completed (shown or not)
    loadStarted = Signal(str)         # a file is being opened: ticks would apply to the old one
    loadProgress = Signal(float)      # share of the file read so far, 0 to 1
    imputeProgress = Signal(float)    # share of the imputed copies made so far, 0 to 1
    payloadReady = Signal(int, object)  # (request id, payload) of a call()
    profileReady = Signal(object)     # ProfileView of the model shown
    ladderChanged = Signal(object)    # LadderView: the shown results' ladder, its passed-over models now fitted
    _assessed = Signal(int, object, object)   # (request id, AssessmentView or None, Failure or None)
    _profileComputed = Signal(int, object)    # (request id, ProfileView) from the profile thread

    def __init__(self, parent=None):
        super().__init__(parent)
        from twofold.core.workspace import Workspace

        self._worker = CoreWorker()
        self._worker.jobDone.connect(self._on_done)
        self._next_id = 0
        self._last_request_at = 0.0    # time.monotonic() of the last request
        self._floor: dict[str, int] = defaultdict(int)
        self._pending: set[int] = set()
        self._busy = False
        self.core_ready = False
        self.last_results = None
        self.last_study = None
        self.last_assessment = None
        self.last_history = HistoryView()
        #: Request id of the results shown last, and of the assessment shown last (tests wait on them).
        self.last_results_id = 0
        self.last_assessment_id = 0
        #: Risk threshold of the classification table (GUI side; the workspace keeps its own copy).
        self.threshold = DEFAULT_THRESHOLD
        #: The predictors last asked for (GUI side).
        self.predictors: tuple = ()
        #: Profile intervals for every model, not only small ones (GUI side; passed with each request).
        self.profile_always = False
        self.last_profile = None
        #: The analysis (worker side: touch it only inside jobs run by :meth:`call`).
        self.workspace = Workspace()
        self._load_generation = 0
        self._impute_generation = 0
        self._assessor = ThreadPoolExecutor(max_workers=1, thread_name_prefix="twofold-assess")
        self._profiler = ThreadPoolExecutor(max_workers=1, thread_name_prefix="twofold-profile")
        self._assessment_of = None      # (fit, core Assessment, figures) of the last assessment worked out
        self._pool = None               # the assessment process (see _process_pool)
        self._closing = False
        self._held: dict[str, tuple] = {}   # displays that arrived before the results they describe
        self._callbacks: dict[int, object] = {}
        self._assessed.connect(self._on_assessed)
        self._profileComputed.connect(self._on_profiled)

    # ---- life cycle ---------------------------------------------------
    def start(self) -> None:
        """Start the worker; it first imports the core and the fitting library."""
        if not self._worker.isRunning():
            self._worker.start()
            self._submit("warmup", self._job_warmup, facets=())

    def shutdown(self) -> None:
        self._floor["assessment"] = self._floor["profile"] = 1 << 60  # abandon whatever is being worked out
        self._closing = True
        self._worker.stop()
        self._assessor.shutdown(wait=False, cancel_futures=True)
        self._profiler.shutdown(wait=False, cancel_futures=True)
        if self._pool is not None:
            self._pool.shutdown(wait=False, cancel_futures=True)

    @property
    def busy(self) -> bool:
        return self._busy

    @property
    def newest_request(self) -> int:
        """The id of the newest request made so far."""
        return self._next_id

    # ---- requests (GUI thread) -------------------------------------------
    def open_file(self, path, sheet: str | None = None) -> int:
        """Open a data file (drops every request still waiting); returns the request id."""
        self._load_generation += 1
        generation = self._load_generation
        self.loadStarted.emit(str(path))

        def job():
            self.workspace.open(path, sheet=sheet, progress=self._progress(generation))
            return self._views(("study", "outcome"), results=None)

        return self._submit("load", job, facets=("study", "columns", "outcome", "results", "comparison"),
                            clears_queue=True)

    def _progress(self, generation):
        def progress(fraction):
            # Called on the worker between chunks; a Qt signal carries it to the window.
            self.loadProgress.emit(fraction)
            return generation == self._load_generation

        return progress

    def cancel_load(self) -> None:
        """Stop opening the file being read (the file shown before stays)."""
        self._load_generation += 1

    def set_outcome(self, name: str | None, event=None, guess: bool = True, predictors=()) -> int:
        """Choose the outcome and event (a new ladder), refitting ``predictors`` on it; returns the id."""
        predictors = tuple(predictors)

        def job():
            ws = self.workspace
            ws.set_outcome(name, event, guess=guess, predictors=predictors)
            return self._views(("outcome", "columns", "results"), comparison=None)

        return self._submit("outcome", job, facets=("outcome", "columns", "results", "comparison"),
                            on_error=self._snapshot_all)

    def set_predictors(self, predictors) -> int:
        """Fit these predictors as a new rung of the ladder (every tick is its own step); returns the id."""
        predictors = tuple(predictors)
        # The id _submit is about to give (ids are handed out on this thread only): the job may start on the
        # worker before _submit returns, so it must not wait to be told its own id.
        mine = self._next_id + 1

        def newer() -> bool:
            return self._floor["results"] > mine

        def job():
            if newer():
                # A newer tick is already waiting: this step joins the ladder with its fit put off, and its
                # display, which would never be shown, is not built.  The newest model is fitted and shown
                # first; the ones passed over are fitted right after (see _complete), so quick ticks wait
                # for one fit, not for all of them.
                self.workspace.set_predictors(predictors, defer=True)
                return self._views(())
            # Asked again once the model this one is built from is fitted, if it was put off.
            self.workspace.set_predictors(predictors, defer=newer)
            rung = self.workspace.current_rung
            if (rung is not None and not rung.fitted) or newer():
                return self._views(())  # a newer tick came meanwhile: its display is the one shown
            return self._views(("results",))

        job_id = self._submit("fit", job, facets=("results",), on_error=self._snapshot_results)
        assert job_id == mine
        return job_id

    def set_role(self, column: str, role: str, predictors=()) -> int:
        """Change a column's role and refit the ladder (or restart it if the column leaves); returns the id."""
        predictors = tuple(predictors)

        def job():
            change = self.workspace.set_role(column, role, predictors)
            extra = {"comparison": None} if change.removed else {}
            return self._views(("columns", "results"), **extra)

        return self._submit("role", job, facets=("columns", "results", "comparison"), on_error=self._snapshot_all)

    def set_missing(self, column: str, values) -> int:
        """Treat these values of a column as missing and refit what uses it; returns the id."""
        values = tuple(values)

        def job():
            self.workspace.set_missing(column, values)
            return self._views(("columns", "outcome", "results"), comparison=None)

        return self._submit("missing", job, facets=("columns", "outcome", "results", "comparison"),
                            on_error=self._snapshot_all)

    def set_reference(self, column: str, level) -> int:
        """Change a factor's reference level and refit the ladder; returns the id."""
        def job():
            self.workspace.set_reference(column, level)
            return self._views(("columns", "results"), comparison=None)

        return self._submit("reference", job, facets=("columns", "results", "comparison"),
                            on_error=self._snapshot_all)

    def select_rung(self, index: int) -> int:
        """Make rung ``index`` (0-based) the model shown; returns the id."""
        def job():
            self.workspace.select(index)
            return self._views(("results",))

        return self._submit("select", job, facets=("results",), on_error=self._snapshot_results)

    def compare_rungs(self, i: int, j: int) -> int:
        """Compare two rungs (likelihood-ratio test if nested, AIC and BIC always); returns the id."""
        from twofold.gui import present

        return self._submit("compare", lambda: {"comparison": present.comparison_view(self.workspace, i, j)},
                            facets=("comparison",))

    def set_threshold(self, threshold: float) -> int:
        """Use this risk threshold for the classification table of the model shown; returns the id."""
        self.threshold = float(threshold)
        t = self.threshold

        def job():
            self.workspace.set_threshold(t)
            return self._views(())

        return self._submit("assess", job, facets=("history",), assess=True)

    def set_imputation(self, m: int | None, seed: int | None = None, anyway: bool = False) -> int:
        """Fill in missing values by multiple imputation (``m`` copies, ``seed``), or leave incomplete rows out
        (None); progress goes to :attr:`imputeProgress` and :meth:`cancel_imputation` stops it (the analysis stays
        as it was).  Returns the id."""
        self._impute_generation += 1
        generation = self._impute_generation

        def progress(fraction):
            self.imputeProgress.emit(fraction)
            return generation == self._impute_generation

        def job():
            self.workspace.set_imputation(m, seed, anyway=anyway, progress=progress)
            return self._views(("results",))

        return self._submit("imputation", job, facets=("results",), on_error=self._snapshot_results)

    def cancel_imputation(self) -> None:
        """Stop making the imputed copies (the analysis stays as it was)."""
        self._impute_generation += 1

    def set_penalised(self, on: bool) -> int:
        """Show Firth's penalised fit of each model (True) or the ordinary fit (False); returns the id."""
        def job():
            self.workspace.set_penalised(bool(on))
            return self._views(("results",))

        return self._submit("penalised", job, facets=("results",), on_error=self._snapshot_results)

    def undo(self) -> int:
        """Take back the last change of the model or the ladder; returns the id."""
        return self._submit("undo", lambda: self._history_step(self.workspace.undo),
                            facets=("columns", "outcome", "results", "comparison"), on_error=self._snapshot_all)

    def redo(self) -> int:
        """Do again what undo took back; returns the id."""
        return self._submit("redo", lambda: self._history_step(self.workspace.redo),
                            facets=("columns", "outcome", "results", "comparison"), on_error=self._snapshot_all)

    def _history_step(self, step) -> dict:
        step()
        return self._views(("columns", "outcome", "results"), comparison=None)

    def request_profile(self) -> int:
        """Profile-likelihood intervals of the model shown, worked out off the GUI thread; returns the id.

        The request takes the id of the newest request that changed the results (it
        describes those), so it never counts as a newer request itself; any later
        change of the results makes it stale, and stale intervals are never shown.
        """
        job_id = self._floor["results"]
        self._worker.submit(Job(job_id, "profile", lambda: self._start_profile(job_id, force=True) or {}))
        return job_id

    def run_modelling(self, fn) -> int:
        """Run ``fn(workspace)`` on the worker and refresh the results; its return value is sent with
        :attr:`payloadReady` (the model-shape dialog's curves and interactions); returns the id."""
        out = {}

        def job():
            out["payload"] = fn(self.workspace)
            return {**self._views(("columns", "results")), "payload": out["payload"]}

        return self._submit("modelling", job, facets=("columns", "results"), on_error=self._snapshot_results)

    def call(self, kind: str, fn, done=None, facets=(), clears_queue: bool = False, coalesce=None) -> int:
        """Run ``fn(workspace)`` on the worker; ``done(payload)`` gets its return value on the GUI thread.

        ``facets`` are displays to rebuild afterwards (for a job that replaces
        or changes the analysis).  A failure reaches :attr:`failed` as always.
        """
        def job():
            payload = fn(self.workspace)
            return {**(self._views(facets) if facets else {}), "payload": payload}

        job_id = self._submit(kind, job, facets=tuple(facets), clears_queue=clears_queue,
                              on_error=self._snapshot_all if facets else None, coalesce=coalesce)
        if done is not None:
            self._callbacks[job_id] = done
        return job_id

    def restore(self, session: dict, data=None, table=None, after=None, done=None) -> int:
        """Replace the analysis with a saved one, fitted again on its data file (on the worker); returns the id.

        ``after(workspace)`` runs on the worker once it is in place (removing
        an autosave, say).  The panes rebuild as after opening a file.
        """
        from twofold.core.workspace import Workspace

        self._load_generation += 1
        generation = self._load_generation
        if table is None:
            self.loadStarted.emit(str(data if data is not None else session["data"]))

        def job():
            ws = Workspace.from_session(session, data=data, table=table, progress=self._progress(generation))
            self.workspace = ws
            payload = after(ws) if after is not None else None
            return {**self._views(("study", "outcome", "results"), comparison=None), "payload": payload}

        job_id = self._submit("load", job, facets=("study", "columns", "outcome", "results", "comparison"),
                              clears_queue=True)
        if done is not None:
            self._callbacks[job_id] = done
        return job_id

    def assessment_for(self, fit):
        """The core assessment already worked out for ``fit``, or None (any thread)."""
        known = self._assessment_of
        return known[1] if known is not None and known[0] is fit else None

    def _submit(self, kind, fn, facets, clears_queue=False, on_error=None, assess=False, coalesce=None) -> int:
        import time

        self._last_request_at = time.monotonic()
        self._next_id += 1
        job_id = self._next_id
        facets = tuple(facets) + ("history",)
        if "results" in facets:
            # The assessment and profile intervals follow the results; older ones no longer describe them.
            facets += ("assessment", "profile")
        elif assess:
            facets += ("assessment",)
        for f in facets:
            self._floor[f] = job_id
        self._floor["error:" + kind] = job_id
        self._pending.add(job_id)
        then = (lambda: self._follow(job_id) or self._complete(job_id)) if ("results" in facets or assess) else None
        job = Job(job_id, kind, fn, coalesce, clears_queue, on_error, then=then, then_kind="assess")
        for dropped in self._worker.submit(job):
            self._pending.discard(dropped)
            self._callbacks.pop(dropped, None)
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
        self._pending.discard(result.id)
        if result.kind == "warmup":
            self.core_ready = True
            self.coreReady.emit()
        signals = {"study": self.studyLoaded, "columns": self.columnsChanged, "outcome": self.outcomeChanged,
                   "results": self.resultsChanged, "comparison": self.comparisonReady,
                   "history": self.historyChanged}
        for facet in FACETS:  # fixed order: the study before its columns, outcome and results
            if facet in result.outputs and self.is_current(facet, result.id):
                view = result.outputs[facet]
                if facet == "results":
                    self.last_results, self.last_results_id = view, result.id
                    if view is None:
                        self.last_assessment, self.last_profile = None, None
                        self.assessmentChanged.emit(None)
                if facet in ("study", "columns"):
                    self.last_study = view
                if facet == "history":
                    self.last_history = view
                signals[facet].emit(view)
        ladder = result.outputs.get("ladder")
        if ladder is not None and self.is_current("results", result.id) and self.last_results is not None:
            # The models passed over by quicker ticks are now fitted: the ladder is shown complete.
            self.last_results = dataclasses.replace(self.last_results, ladder=ladder)
            self.ladderChanged.emit(ladder)
        done = None if result.followup else self._callbacks.pop(result.id, None)
        if done is not None and result.error is None and "payload" in result.outputs:
            done(result.outputs["payload"])
        if "payload" in result.outputs and not result.followup:
            self.payloadReady.emit(result.id, result.outputs["payload"])
        if result.error is not None and (result.unexpected or self.is_current("error:" + result.kind, result.id)):
            self.failed.emit(Failure(result.kind, result.error, result.unexpected, result.log_path,
                                     result.error_type))
        for facet, (job_id, args) in list(self._held.items()):
            if job_id <= result.id:
                del self._held[facet]
                (self._on_assessed if facet == "assessment" else self._on_profiled)(job_id, *args)
        self._set_busy(bool(self._pending))
        if not result.followup:
            self.requestFinished.emit(result.id)
            # Once laid out and painted (posted events come before timers), the worker may go on with its extras.
            QTimer.singleShot(0, lambda job_id=result.id: self._worker.result_shown(job_id))

    def _on_assessed(self, job_id: int, view, failure) -> None:
        """The assessment that follows a result: shown only if no newer request has been made since."""
        if not self.is_current("assessment", job_id):
            return
        if job_id in self._pending:  # worked out before its results reached the window: wait for them
            self._held["assessment"] = (job_id, (view, failure))
            return
        if failure is not None:
            self.failed.emit(failure)
            return
        self.last_assessment, self.last_assessment_id = view, job_id
        self.assessmentChanged.emit(view)

    def _on_profiled(self, job_id: int, view) -> None:
        if not self.is_current("profile", job_id):
            return
        if job_id in self._pending:
            self._held["profile"] = (job_id, (view,))
            return
        self.last_profile = view
        self.profileReady.emit(view)

    # ---- worker thread --------------------------------------------------------
    def _job_warmup(self):
        # Import the heavy libraries now, off the GUI thread, so the first fit is quick.
        from twofold.core.models.fit import keep_one_blas_thread, settle_collector, warm_up

        import twofold.gui.present  # noqa: F401

        warm_up()
        # The window's fits run one per thread; a second linear-algebra thread only took the window's core (at
        # 200,000 rows the longest stall went from about 60 to about 40 ms, and ticks and assessments were quicker).
        keep_one_blas_thread()
        # The libraries' objects live as long as the window: the collector need not walk them again.
        settle_collector()
        self._assessor.submit(self._start_assessment_process)
        return {}

    @staticmethod
    def _warm_up_drawing() -> None:
        """Assessment thread, at start: load the drawing library once, so the first assessment is not slowed."""
        from twofold.render import figures

        figures.png_bytes(figures.new_figure())

    def _views(self, facets, **fixed) -> dict:
        """Display records of the workspace for ``facets`` (worker thread), plus the history line."""
        from twofold.gui import present

        ws = self.workspace
        out = dict(fixed)
        if ws.study is not None:
            if "study" in facets:
                out["study"] = present.study_view(ws.study)
            elif "columns" in facets:
                out["columns"] = present.study_view(ws.study, with_cells=False)
            if "outcome" in facets:
                if ws.awaiting_event is not None:
                    out["outcome"] = present.outcome_view(
                        ws.study, f"Choose which value of '{ws.awaiting_event}' counts as the event.",
                        needs_event=True, name=ws.awaiting_event)
                else:
                    out["outcome"] = present.outcome_view(ws.study)
            if "results" in facets:
                out["results"] = present.results_view(ws)
        out["history"] = HistoryView(ws.undo_text, ws.redo_text, ws.unsaved, ws.revision, ws.last_change.what,
                                     ws.last_change.removed)
        return out

    def _snapshot_results(self) -> dict:
        return self._views(("results",))

    def _snapshot_all(self) -> dict:
        return self._views(("columns", "outcome", "results"))

    def _follow(self, job_id: int):
        """After a result was sent (worker thread): start its assessment and profile intervals elsewhere."""
        if self._floor["assessment"] > job_id:
            return None
        ws = self.workspace
        fit = ws.shown_fit() if ws.study is not None else None
        if fit is None:
            self._assessed.emit(job_id, None, None)
            return None
        if ws.imputation:  # pooled: worked out here on the worker, after the tests were sent (tests first)
            from twofold.core.models.pooling import pooled_curves

            assessment, curves = ws.pooled_assessment(fit), pooled_curves(fit)
            # Drawn on the assessment thread, so the worker is free for the next request meanwhile.
            self._assessor.submit(self._draw_pooled, job_id, ws.ladder.current, assessment, curves, fit)
            return None
        index, study, threshold = ws.ladder.current, ws.study, ws.threshold_for(fit)
        self._assessor.submit(self._assess, job_id, study, fit, index, threshold)
        if self.profile_always or ws.wants_profile(fit):
            self._start_profile(job_id)
        return None

    def _complete(self, job_id: int):
        """After a result was sent (worker thread): fit the models passed over by quicker ticks, newest first.

        A newer request stops it between fits (that request's display has the ladder as it then stands);
        otherwise the finished ladder is sent for the same request.
        """
        ws = self.workspace
        if ws.ladder is None or not ws.pending:
            return None

        def newer():
            return self._floor["results"] > job_id or self._closing

        # First a moment for the window to show the newest results: fits now would hold the interpreter
        # lock while it lays them out and paints them.
        import time

        # ...and while the user is still ticking (ticks a moment apart), a fit started now would make the next
        # tick wait for it: the models passed over are fitted once the ticks pause.
        until = max(time.monotonic() + SHOW_FIRST_S, self._last_request_at + QUIET_S)
        while time.monotonic() < until and not newer():
            time.sleep(0.01)
        if not ws.complete(newer) or newer():
            return None
        from twofold.gui import present

        return {"ladder": present.ladder_view(ws)}

    def _start_profile(self, job_id: int, force: bool = False) -> None:
        ws = self.workspace
        fit = ws.shown_fit() if ws.study is not None else None
        if fit is None:
            return
        if force or self.profile_always or ws.wants_profile(fit):
            self._profiler.submit(self._profile, job_id, ws, fit, ws.ladder.current)

    def _assess(self, job_id, study, fit, index, threshold) -> None:
        """Assessment thread: how good the model is, with its figures, unless a newer request came."""
        import dataclasses

        from twofold.core.errors import TwofoldError
        from twofold.gui import present

        def checkpoint():
            if self._floor["assessment"] > job_id:
                raise _Superseded

        try:
            checkpoint()
            known = self._assessment_of
            if known is not None and known[0] is fit:
                # Only the threshold changed: the rest stands, figures included.
                from twofold.core.assessing import discrimination as disc

                _, result, pictures = known
                table = disc.classification_table(fit.design.y, fit.fitted, threshold)
                result = dataclasses.replace(result, classification=table)
            else:
                result, pictures = self._work_out(job_id, study, fit, threshold, checkpoint)
            self._assessment_of = (fit, result, pictures)
            checkpoint()
            self._emit(self._assessed, job_id, present.assessment_view(index, result, pictures, fit), None)
        except _Superseded:
            return
        except TwofoldError as exc:
            self._emit(self._assessed, job_id, None, Failure("assess", str(exc), False, "", type(exc).__name__))
        except Exception as exc:  # never lose a failure silently
            self._emit(self._assessed, job_id, None,
                       Failure("assess", f"{type(exc).__name__}: {exc}", True, log_exception(exc), type(exc).__name__))

    def _draw_pooled(self, job_id, index, assessment, curves, fit) -> None:
        """Assessment thread: the pooled assessment with the figures of the pooled predictions, unless superseded."""
        from twofold.gui import present
        from twofold.gui.figures import pooled_figures

        if self._floor["assessment"] > job_id:
            return
        try:
            pictures = pooled_figures(curves, raw=True)
        except Exception as exc:  # a drawing failure loses the pictures only: logged, the numbers still shown
            log_exception(exc)
            pictures = {}
        if self._floor["assessment"] > job_id:
            return
        self._emit(self._assessed, job_id, present.pooled_assessment_view(index, assessment, fit, pictures, curves),
                   None)

    def _work_out(self, job_id, study, fit, threshold, checkpoint):
        """Assessment thread: ``(Assessment, figures)`` of ``fit``, from the assessment process when there is one.

        Waiting is given up as soon as a newer request makes the answer
        pointless (a queued piece of work is withdrawn; one already running
        ends by itself).  Without a process, or if it broke, the work is done
        here, on this thread.
        """
        from concurrent.futures import TimeoutError as StillRunning
        from concurrent.futures.process import BrokenProcessPool

        from twofold.render.assessed import Abandoned, assess_and_draw_packed, discard, pack, release, unpack_answer

        pool = self._process_pool()
        if pool is not None:
            try:
                packed, blocks = pack(fit)  # its large arrays by shared memory: the window keeps answering
                try:
                    future = pool.submit(assess_and_draw_packed, packed, threshold, job_id)
                except BaseException:
                    release(blocks)
                    raise
                future.add_done_callback(lambda _: release(blocks))  # done, failed or withdrawn
                gave_up = threading.Event()

                def tidy(f):
                    # An answer nobody will read: its arrays' shared memory is freed (an answer read frees its own).
                    if gave_up.is_set() and not f.cancelled() and f.exception() is None:
                        discard(f.result()[1])

                future.add_done_callback(tidy)
                while True:
                    try:
                        return unpack_answer(future.result(timeout=0.05))
                    except Abandoned:
                        raise _Superseded from None
                    except StillRunning:
                        try:
                            checkpoint()
                        except _Superseded:
                            future.cancel()
                            self._wanted_from.value = self._floor["assessment"]  # the process stops too
                            gave_up.set()
                            if future.done():
                                tidy(future)
                            raise
            except (BrokenProcessPool, OSError, RuntimeError) as exc:
                log_exception(exc)
                self._pool, self.assess_in_process = None, False  # from now on, on this thread
        from twofold.core.workspace import assess_fit
        from twofold.gui import figures

        result = assess_fit(study, fit, threshold=threshold, checkpoint=checkpoint)
        checkpoint()
        return result, figures.assessment_figures(result, raw=True)

    def _process_pool(self):
        """The assessment process (started on first use; assessment thread only), or None."""
        if not self.assess_in_process or self._closing:
            return None
        if self._pool is None:
            import multiprocessing
            from concurrent.futures import ProcessPoolExecutor

            from twofold.render.assessed import start_quietly

            try:
                context = multiprocessing.get_context("spawn")
                self._wanted_from = context.Value("q", 0, lock=False)
                self._pool = ProcessPoolExecutor(max_workers=1, mp_context=context, initializer=start_quietly,
                                                 initargs=(self._wanted_from,))
            except (OSError, ValueError, RuntimeError) as exc:
                log_exception(exc)
                self.assess_in_process = False
                return None
        return self._pool

    def _start_assessment_process(self) -> None:
        """Assessment thread, once the core is loaded: start the process now, not at the first tick."""
        pool = self._process_pool()
        if pool is None:
            self._warm_up_drawing()
            return
        try:
            pool.submit(int, 0).result(timeout=120)
        except Exception as exc:  # it will be retried, or the work done on this thread
            log_exception(exc)

    def _profile(self, job_id, ws, fit, index) -> None:
        """Profile thread: the intervals of a read-only fit, sent to the GUI thread if still wanted."""
        from twofold.gui import present

        if self._floor["profile"] > job_id:
            return  # superseded before it started
        try:
            view = present.profile_view(ws, fit, index)
        except Exception as exc:  # never lose a failure silently
            from twofold.gui.views import ProfileView

            view = ProfileView(index, False, error=f"Something unexpected stopped the profile-likelihood intervals "
                                                   f"({type(exc).__name__}). {where_logged(log_exception(exc))}")
        self._emit(self._profileComputed, job_id, view)

    @staticmethod
    def _emit(signal, *args) -> None:
        try:
            signal.emit(*args)
        except RuntimeError:  # the window closed meanwhile
            pass
