"""The window side of saved analyses, reports, table exports and autosave.

Every call into the core runs on the session's single worker thread (the
core objects live there).  A job hands its result to a small relay whose
signal Qt queues to the GUI thread; it is acted on once the session reports
the request finished, so the panes have already been updated by then.
Errors travel the session's usual way and show as the core's one-sentence
message.  Nothing here ever writes to the data file: every target is checked
against it here, and again by the core.
"""

from __future__ import annotations

from pathlib import Path
from typing import NamedTuple

from PySide6.QtCore import QObject, QTimer, Signal
from PySide6.QtGui import QAction, QKeySequence
from PySide6.QtWidgets import (QCheckBox, QDialog, QDialogButtonBox, QFileDialog, QFormLayout, QLabel, QMessageBox,
                               QSpinBox, QVBoxLayout)

from twofold.gui.views import Failure


def ask_user(parent, title: str, text: str) -> bool:
    """Ask a yes/no question (tests and scripted runs replace this function to answer by themselves)."""
    answer = QMessageBox.question(parent, title, text,
                                  QMessageBox.StandardButton.Yes | QMessageBox.StandardButton.No)
    return answer == QMessageBox.StandardButton.Yes


def choose_data_file(parent, start: str) -> str:
    """Ask where a data file is now; returns the path or '' (tests replace this function)."""
    path, _ = QFileDialog.getOpenFileName(parent, "Where is the data file now?", start,
                                          "Data files (*.csv *.tsv *.tab *.txt *.xlsx *.xlsm);;All files (*)")
    return path


class ReportOptionsDialog(QDialog):
    """Asks how the report treats small counts and record numbers; it only asks, the core does the rest."""

    def __init__(self, parent, suppress_up_to: int, list_records: bool):
        from twofold.core.privacy import MAX_THRESHOLD

        super().__init__(parent)
        self.setWindowTitle("Twofold: report options")
        layout = QVBoxLayout(self)
        form = QFormLayout()
        self.limit = QSpinBox(self)
        self.limit.setRange(1, MAX_THRESHOLD)
        self.limit.setValue(int(suppress_up_to))
        self.limit.setSuffix(" people")
        self.limit.setToolTip("Counts of 1 up to this many people are shown as 'suppressed' in the report")
        form.addRow("Hide counts of 1 up to", self.limit)
        layout.addLayout(form)
        layout.addWidget(self._note("Data owners set different limits; 10 is common practice. Use the limit "
                                    "that applies to this data."))
        self.records = QCheckBox("List the most influential records by row number", self)
        self.records.setChecked(bool(list_records))
        layout.addWidget(self.records)
        layout.addWidget(self._note("Row numbers can point back to patients in the data file, so leave this off "
                                    "unless the report stays with people allowed to see the records."))
        buttons = QDialogButtonBox(QDialogButtonBox.StandardButton.Ok | QDialogButtonBox.StandardButton.Cancel,
                                   parent=self)
        buttons.accepted.connect(self.accept)
        buttons.rejected.connect(self.reject)
        layout.addWidget(buttons)

    def _note(self, text: str) -> QLabel:
        label = QLabel(text, self)
        label.setWordWrap(True)
        return label

    def values(self) -> dict:
        return {"suppress_up_to": int(self.limit.value()), "list_records": bool(self.records.isChecked())}


def choose_report_options(parent, current: dict) -> dict | None:
    """Ask for the report's options, starting from ``current``; None when cancelled (tests replace this function)."""
    dialog = ReportOptionsDialog(parent, current["suppress_up_to"], current["list_records"])
    return dialog.values() if dialog.exec() == QDialog.DialogCode.Accepted else None


class _Relay(QObject):
    """Emitted on the worker thread; delivered (queued) on the GUI thread."""

    done = Signal(int, object)


class _WithViews(NamedTuple):
    """A job's payload together with display records for the session to show (a restored analysis)."""

    outputs: dict
    payload: object


# ---- worker-thread helpers (they touch the session's core objects) ---------------


def _changed_roles(study) -> dict:
    """Roles the user changed, column by column (so a saved analysis keeps them)."""
    return {name: info.role.value for name, info in study.columns.items() if info.role != info.inferred_role}


def _light_result(s, threshold=None):
    """The model shown as an AnalysisResult holding only what a session file needs (no refit)."""
    from twofold.core.analysis import AnalysisResult, AnalysisSpec
    from twofold.core.errors import ModelError

    study, ladder = s._study, s._ladder
    if study is None or study.outcome is None or ladder is None or ladder.current is None or not ladder.rungs:
        raise ModelError("There is no model to save yet; open a data file, choose the outcome and tick "
                         "predictors first.")
    from twofold.core.analysis import columns_of

    rung = ladder.rungs[ladder.current]
    fit = s._shown_fit() or rung.fit
    penalised = bool(getattr(s._choice, "penalised", False))
    # The ladder fits every model on the rows complete for all its columns: say which, so a re-run uses them too.
    spec = AnalysisSpec(data=str(study.table.path), outcome=study.outcome, predictors=list(rung.predictors),
                        event=study.event, roles=_changed_roles(study), sheet=study.table.sheet,
                        firth=penalised, threshold=threshold, splines=dict(study.splines),
                        rows_complete_in=columns_of(study, ladder.used_predictors))
    return AnalysisResult(spec, study, fit, None, None, None, {})


def current_session(s, threshold=None, report=None) -> dict:
    """The session dict of the model shown, with the whole ladder and the report's options (worker thread)."""
    from twofold.core.session import session_from_result

    return session_from_result(_light_result(s, threshold), ladder=s._ladder, report=report)


def shown_result(s, threshold=None):
    """The full analysis (tests, assessment) of the model shown, exactly as shown (worker thread).

    The fit is the one on screen, on the ladder's common rows; it is not
    refitted, since :func:`twofold.core.analysis.run_analysis` would refit on
    the rows complete for this model alone, which differ when another model
    of the ladder uses a predictor with missing values.  The pieces are the
    core's own, put together as ``run_analysis`` puts them.
    """
    import copy

    from twofold.core.analysis import AnalysisResult, count_rows_left_out, extra_row_columns
    from twofold.core.assessment import assess
    from twofold.core.modelling import interaction_tests, nonlinearity_tests
    from twofold.core.summary import clean_number, fit_record

    light = _light_result(s, threshold)
    study, spec = light.study, light.spec
    shown = light.fit
    cached = s._assessed  # the assessment on screen, when it is of this fit at this threshold
    table = None if cached is None or cached[0] is not shown else cached[1].classification
    if table is not None and threshold is not None and table.threshold == threshold:
        assessment = cached[1]
    else:
        assessment = assess(study, shown, threshold=threshold)
    # A copy, so the reading notices join the fit's warnings without changing the fit on screen.
    fit = copy.copy(shown)
    fit.notices = list(study.table.notices) + list(shown.notices)
    # The rows the other models' columns cost are counted too, as a re-run of the saved session counts them.
    extra = extra_row_columns(study, fit.design.predictors, spec.rows_complete_in)
    if extra:
        count_rows_left_out(study, fit, extra)
    record = fit_record(fit, study.outcome, study.event, assessment=assessment)
    if any(p in study.splines for p in fit.design.predictors):
        record["nonlinearity"] = [
            {"column": t.term, "knots": list(t.knots), "g": clean_number(t.g), "df": t.df,
             "p_value": clean_number(t.p_value)} for t in nonlinearity_tests(study, fit)]
    if any(":" in p for p in fit.design.predictors):
        record["interaction_tests"] = [
            {"term": t.term, "g": clean_number(t.g), "df": t.df, "p_value": clean_number(t.p_value)}
            for t in interaction_tests(study, fit)]
    return AnalysisResult(spec, study, fit, None, None, assessment, record)


def _is_same_file(path, data) -> bool:
    try:
        a, b = Path(path).resolve(), Path(data).resolve()
    except OSError:
        return False
    if a == b:
        return True
    try:
        return a.exists() and b.exists() and a.samefile(b)
    except OSError:
        return False


class SessionActions(QObject):
    """File-menu actions for saved analyses, reports and exports, plus autosave, for one window.

    Autosave is off until :meth:`enable_autosave` (the application turns it
    on; pictures of the window and most tests leave it off).
    """

    #: (tag, payload) once a file job has finished: "saved", "restored", "report", "exported",
    #: "autosaved" (payload: the path written, None when no autosave could be made) or
    #: "not_opened" (the user declined).
    finished = Signal(str, object)

    def __init__(self, window):
        super().__init__(window)
        self.window = window
        self.session = window.session
        self._relay = _Relay()
        self._relay.done.connect(self._on_payload)
        self._waiting: dict[int, str] = {}
        self._payloads: dict[int, object] = {}
        self.session.requestFinished.connect(self._on_finished)
        self.restore_offered: Path | None = None
        self.autosave_enabled = False
        self.last_autosave: str | None = None
        from twofold.core.session import REPORT_DEFAULTS

        #: The report's options (small-count limit, records by row number): the defaults, a restored
        #: session's, or the user's last choice; saved with the session.
        self.report_options: dict = dict(REPORT_DEFAULTS)
        self._make_actions()
        self.session.resultsChanged.connect(self._on_results)

    # ---- menu ------------------------------------------------------------------
    def _make_actions(self) -> None:
        w = self.window
        self.save_action = QAction("&Save the analysis\u2026", w)
        self.save_action.setShortcut(QKeySequence.StandardKey.Save)
        self.save_action.setToolTip("Save the outcome, predictors, models tried and options in a file of their "
                                    "own, to open again or re-run on next month's extract (Ctrl+S)")
        self.save_action.triggered.connect(self.save_dialog)
        self.load_action = QAction("Open a saved &analysis\u2026", w)
        self.load_action.setToolTip("Open an analysis saved before; its data file is read again and the models fitted "
                                    "again")
        self.load_action.triggered.connect(self.open_dialog)
        self.report_action = QAction("&Write a report\u2026", w)
        self.report_action.setToolTip("A web page or PDF of the model shown, with aggregate figures only "
                                      "(small counts hidden), to hand to a committee")
        self.report_action.triggered.connect(self.report_dialog)
        self.export_action = QAction("&Export the tables\u2026", w)
        self.export_action.setToolTip("The coefficient table and the model ladder as a workbook (XLSX) or CSV files")
        self.export_action.triggered.connect(self.export_dialog)
        self.actions = [self.save_action, self.load_action, self.report_action, self.export_action]
        self._enable_for_model(None)
        self.session.resultsChanged.connect(self._enable_for_model)

    def _enable_for_model(self, view) -> None:
        """Saving, reports and exports need a model (opening a saved analysis does not)."""
        for a in (self.save_action, self.report_action, self.export_action):
            a.setEnabled(view is not None)

    def _data_path(self) -> str | None:
        study = self.window.data_pane.study
        return None if study is None else study.path

    def _start(self, name: str = "") -> str:
        folder = self.window.settings.value("last_folder", "") or str(Path.home())
        return str(Path(folder) / name) if name else folder

    def _suggest(self, ending: str) -> str:
        data = self._data_path()
        return self._start(f"{Path(data).stem}{ending}" if data else "")

    def _fail(self, message: str) -> None:
        self.window.show_failure(Failure("file", message))

    def _refuses(self, *paths) -> bool:
        """Refuse (and say why) when a target is the data file itself."""
        data = self._data_path()
        for path in paths:
            if data is not None and _is_same_file(path, data):
                self._fail(f"{path} is the data file itself; Twofold never writes to the data, "
                           "so choose another file name.")
                return True
        return False

    # ---- running jobs -----------------------------------------------------------
    def _run(self, tag: str, fn, kind=None, facets=(), coalesce=None, clears_queue=False) -> int:
        """Run ``fn`` on the worker; its return value reaches :meth:`_handle` when the request finishes."""
        s = self.session
        job_id = s._next_id + 1  # the id _submit gives next (only this thread submits)
        relay = self._relay

        def job():
            outputs, payload = {}, fn()
            if isinstance(payload, _WithViews):
                outputs, payload = payload
            relay.done.emit(job_id, payload)
            return outputs

        if coalesce is not None:  # a waiting job of the same kind is replaced: forget it
            for k in [k for k, t in self._waiting.items() if t == tag]:
                self._waiting.pop(k)
        self._waiting[job_id] = tag
        got = s._submit(kind or "file:" + tag, job, facets=facets, coalesce=coalesce, clears_queue=clears_queue)
        if got != job_id:  # never expected; keep the bookkeeping right regardless
            self._waiting[got] = self._waiting.pop(job_id)
        return got

    def _on_payload(self, job_id: int, payload) -> None:
        if job_id in self._waiting:
            self._payloads[job_id] = payload

    def _on_finished(self, job_id: int) -> None:
        tag = self._waiting.pop(job_id, None)
        if tag is None or job_id not in self._payloads:
            return  # not ours, or it failed (the failure was shown already)
        self._handle(tag, self._payloads.pop(job_id))

    # ---- saving ----------------------------------------------------------------
    def save_dialog(self) -> None:
        path, _ = QFileDialog.getSaveFileName(self.window, "Save the analysis", self._suggest("-analysis.json"),
                                              "Twofold analyses (*.json)")
        if path:
            self.save_to(path if path.lower().endswith((".json", ".twofold")) else path + ".json")

    def save_to(self, path) -> int | None:
        """Save the model shown, its ladder and options as a session file (on the worker)."""
        if self._refuses(path):
            return None
        s, threshold, report = self.session, self.session.threshold, dict(self.report_options)

        def job():
            from twofold.core.session import save_session

            return str(save_session(current_session(s, threshold, report), path))

        return self._run("saved", job)

    # ---- opening -----------------------------------------------------------------
    def open_dialog(self) -> None:
        path, _ = QFileDialog.getOpenFileName(self.window, "Open a saved analysis", self._start(),
                                              "Twofold analyses (*.json *.twofold);;All files (*)")
        if path:
            self.open_from(path)

    def open_from(self, path, data=None, recovered: bool = False) -> int:
        """Read a session file strictly and check its data file against it (on the worker), then ask and restore.

        ``data`` is another place of the data file (it was moved).  The data
        file is read once here; the restore fits on the rows read.
        """

        def job():
            from twofold.core.io import read_table
            from twofold.core.session import check_data, load_session, require_data_file

            session = load_session(path)
            where = Path(data if data is not None else session["data"])
            out = {"session": session, "path": str(path), "data": str(where), "recovered": recovered}
            if not where.exists():
                return {**out, "kind": "no_data"}
            require_data_file(where)
            table = read_table(where, sheet=session["sheet"])
            notices = check_data(session, path=where, frame=table.frame)
            return {**out, "kind": "checked", "notices": notices, "table": table}

        return self._run("opened", job)

    def _after_open(self, payload) -> None:
        from twofold.core.session import missing_columns_error

        session, path, data = payload["session"], payload["path"], payload["data"]
        recovered = payload["recovered"]
        if payload["kind"] == "no_data":
            if ask_user(self.window, "Twofold: where is the data file?",
                        f"The data file of this analysis, {Path(data).name}, is no longer at {Path(data).parent}. "
                        "Choose where it is now?"):
                new = choose_data_file(self.window, self._start())
                if new:
                    self.open_from(path, data=new, recovered=recovered)
                    return
            self._declined(path, recovered)
            return
        notices = payload["notices"]
        missing = missing_columns_error(notices, data)
        if missing is not None:
            self._fail(str(missing))
            return
        changed = [n for n in notices if n.code == "data_changed"]
        if changed:
            text = (" ".join(n.message for n in changed)
                    + " Fit the saved analysis again on the data file as it is now?")
            if not ask_user(self.window, "Twofold: the data file changed", text):
                self._declined(path, recovered)
                return
        self.restore(session, data=data, discard=path if recovered else None, table=payload.get("table"))

    def _declined(self, path, recovered: bool) -> None:
        if recovered:
            from twofold.core.session import discard_autosave

            discard_autosave(path)
        self.window.statusBar().showMessage("The saved analysis was not opened.", 5000)
        self.finished.emit("not_opened", str(path))

    def restore(self, session: dict, data=None, discard=None, table=None) -> int:
        """Fit the session's models again on its data file (on the worker), as if done by hand.

        ``data`` is the data file (default: the session's own), ``table`` that
        file already read; ``discard`` an autosave to remove once restored.
        """
        s = self.session
        s._load_generation += 1
        generation = s._load_generation
        where = str(data if data is not None else session["data"])
        if table is None:
            s.loadStarted.emit(where)  # progress bar and stop button while the file is read

        def job():
            from twofold.core.analysis import prepare_study
            from twofold.core.io import read_table
            from twofold.core.session import discard_autosave, ladder_from_lists, spec_from_session
            from twofold.core.study import Study

            def progress(fraction):
                s.loadProgress.emit(fraction)
                return generation == s._load_generation

            spec = spec_from_session(session, data=where)
            study = Study(table if table is not None else read_table(spec.data, sheet=spec.sheet, progress=progress))
            prepare_study(spec, study)
            ladder = ladder_from_lists(study, session["ladder"], session["predictors"])
            outputs = s._adopt(study, ladder, penalised=session["firth"])
            if discard is not None:
                discard_autosave(discard)
            return _WithViews(outputs, where)

        if session.get("threshold") is not None:
            self._show_threshold(float(session["threshold"]))
        self.report_options = {k: session["report"][k] for k in self.report_options}
        # Kind "load": the panes treat it as opening a file (progress, stop button, a failure re-enables them).
        return self._run("restored", job, kind="load", facets=("study", "columns", "outcome", "results", "comparison"),
                         clears_queue=True)

    def _show_threshold(self, value: float) -> None:
        """Use the saved risk threshold, and show it in its box without asking for another assessment."""
        from PySide6.QtCore import QSignalBlocker

        self.session.threshold = value
        box = getattr(getattr(self.window.results_pane, "assessment_box", None), "threshold", None)
        if box is not None:
            with QSignalBlocker(box):
                box.setValue(value)

    # ---- reports and tables ----------------------------------------------------
    def report_dialog(self) -> None:
        options = choose_report_options(self.window, self.report_options)
        if options is None:
            return
        path, chosen = QFileDialog.getSaveFileName(self.window, "Write a report", self._suggest("-report.html"),
                                                   "Web page (*.html);;PDF document (*.pdf)")
        if path:
            if Path(path).suffix.lower() not in (".html", ".htm", ".pdf"):
                path += ".pdf" if "pdf" in chosen.lower() else ".html"
            self.report_to(path, **options)

    def report_to(self, path, suppress_up_to: int | None = None, list_records: bool | None = None) -> int | None:
        """Write the report of the model shown: aggregate figures only, small counts suppressed (on the worker).

        ``suppress_up_to`` and ``list_records`` (None: as before) become the
        report options kept with the session, and autosaved at once.
        """
        if self._refuses(path):
            return None
        from twofold.core.privacy import MAX_THRESHOLD

        if suppress_up_to is not None and not 1 <= int(suppress_up_to) <= MAX_THRESHOLD:
            self._fail(f"Counts of 1 up to {suppress_up_to} people cannot be the limit of the report; "
                       f"choose a whole number from 1 to {MAX_THRESHOLD}.")
            return None
        chosen = {"suppress_up_to": suppress_up_to, "list_records": list_records}
        changed = {k: v for k, v in chosen.items() if v is not None and v != self.report_options[k]}
        self.report_options.update(changed)
        s, threshold, options = self.session, self.session.threshold, dict(self.report_options)

        def job():
            from twofold.core.report import write_report

            return str(write_report(shown_result(s, threshold), path, ladder=s._ladder,
                                    suppress_below=options["suppress_up_to"], include_records=options["list_records"]))

        job_id = self._run("report", job)
        if changed and self.session.last_results is not None:
            self._on_results(self.session.last_results)  # the autosave keeps the new options
        return job_id

    def export_dialog(self) -> None:
        path, chosen = QFileDialog.getSaveFileName(self.window, "Export the tables", self._suggest("-tables.xlsx"),
                                                   "Workbook (*.xlsx);;CSV text (*.csv)")
        if path:
            if Path(path).suffix.lower() not in (".csv", ".xlsx"):
                path += ".csv" if "csv" in chosen.lower() else ".xlsx"
            self.export_to(path)

    @staticmethod
    def ladder_csv(path) -> Path:
        """Where the model ladder goes beside a coefficient table written as CSV."""
        path = Path(path)
        return path.with_name(path.stem + "-models.csv")

    def export_to(self, path) -> int | None:
        """Coefficient table and model ladder: one workbook with two sheets, or two CSV files (on the worker)."""
        path = Path(path)
        ladder_path = self.ladder_csv(path) if path.suffix.lower() == ".csv" else None
        if self._refuses(*([path] + ([ladder_path] if ladder_path is not None else []))):
            return None
        s, threshold = self.session, self.session.threshold

        def job():
            from twofold.core.export import export_coefficients, export_ladder

            result = shown_result(s, threshold)
            written = [str(export_coefficients(result, path, ladder=s._ladder))]
            if ladder_path is not None:
                written.append(str(export_ladder(s._ladder, ladder_path, data=result.spec.data)))
            return written

        return self._run("exported", job)

    # ---- autosave --------------------------------------------------------------
    def enable_autosave(self) -> bool:
        """Mark this process as running and autosave after each new result; False if the folder is not writable."""
        from twofold.core.session import start_autosave

        try:
            start_autosave()
        except OSError:
            self.autosave_enabled = False
            return False
        self.autosave_enabled = True
        if self.session.last_results is not None:
            self._on_results(self.session.last_results)
        return True

    def _on_results(self, view) -> None:
        if view is None or not self.autosave_enabled:
            return
        s, threshold, report = self.session, self.session.threshold, dict(self.report_options)

        def job():
            from twofold.core.errors import TwofoldError
            from twofold.core.session import autosave

            try:
                return str(autosave(current_session(s, threshold, report)))
            except (TwofoldError, OSError):
                return None  # an autosave that cannot be made must not interrupt the work

        self._run("autosaved", job, coalesce="autosave")

    def offer_restore(self) -> Path | None:
        """If a Twofold that did not close cleanly left an autosave, offer to restore it; returns its path."""
        from twofold.core.session import discard_autosave, recoverable

        try:
            path = recoverable()
        except OSError:
            return None
        if path is None:
            return None
        self.restore_offered = path
        when = ""
        try:
            import datetime as dt

            when = dt.datetime.fromtimestamp(path.stat().st_mtime).strftime(" (last saved %d %b %Y at %H:%M)")
        except OSError:
            pass
        if ask_user(self.window, "Twofold: restore the last analysis?",
                    f"Twofold did not close normally last time{when}. Restore the analysis it was working on? "
                    "Its data file is read again and the models fitted again."):
            self.open_from(path, recovered=True)
        else:
            discard_autosave(path)
        return path

    def offer_restore_later(self) -> None:
        """Offer the restore once the event loop runs (the window is on screen first)."""
        QTimer.singleShot(0, self.offer_restore)

    def clean_exit(self) -> None:
        """A normal close: remove this process's autosave and its mark of a running Twofold."""
        if not self.autosave_enabled:
            return
        from twofold.core.session import clean_exit

        try:
            clean_exit()
        except OSError:
            pass
        self.autosave_enabled = False

    # ---- GUI thread -------------------------------------------------------------
    def _handle(self, tag: str, payload) -> None:
        bar = self.window.statusBar()
        if tag == "opened":
            self._after_open(payload)
            return
        if tag == "saved":
            bar.showMessage(f"The analysis was saved to {payload}.", 5000)
        elif tag == "report":
            bar.showMessage(f"The report was written to {payload}.", 5000)
        elif tag == "exported":
            bar.showMessage("The tables were written to " + " and ".join(payload) + ".", 5000)
        elif tag == "restored":
            bar.showMessage(f"The saved analysis was opened and fitted again on {Path(payload).name}.", 5000)
        elif tag == "autosaved":
            self.last_autosave = payload
        self.finished.emit(tag, payload)
