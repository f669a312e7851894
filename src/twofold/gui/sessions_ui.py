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

from PySide6.QtCore import QObject, Qt, QTimer, Signal
from PySide6.QtGui import QAction, QKeySequence
from PySide6.QtWidgets import (QCheckBox, QDialog, QDialogButtonBox, QFileDialog, QFormLayout, QLabel, QLineEdit,
                               QMessageBox, QSpinBox, QVBoxLayout)

from twofold.gui.views import Failure


def ask_user(parent, title: str, text: str) -> bool:
    """Ask a yes/no question (tests and scripted runs replace this function to answer by themselves)."""
    answer = QMessageBox.question(parent, title, text,
                                  QMessageBox.StandardButton.Yes | QMessageBox.StandardButton.No)
    return answer == QMessageBox.StandardButton.Yes


def ask_unsaved(parent, doing: str) -> str:
    """Ask what to do with unsaved changes before ``doing``: "save", "discard" or "cancel" (tests replace this)."""
    box = QMessageBox(QMessageBox.Icon.Question, "Twofold: save the analysis?",
                      f"The analysis has changes that are not saved. Save them before {doing}?", parent=parent)
    save = box.addButton("Save\u2026", QMessageBox.ButtonRole.AcceptRole)
    discard = box.addButton("Don't save", QMessageBox.ButtonRole.DestructiveRole)
    box.addButton("Cancel", QMessageBox.ButtonRole.RejectRole)
    box.setDefaultButton(save)
    box.exec()
    clicked = box.clickedButton()
    return "save" if clicked is save else "discard" if clicked is discard else "cancel"


def choose_save_path(parent, start: str) -> str:
    """Ask where to save the analysis; returns the path or '' (tests replace this function)."""
    path, _ = QFileDialog.getSaveFileName(parent, "Save the analysis", start, "Twofold analyses (*.json)")
    if path and not path.lower().endswith((".json", ".twofold")):
        path += ".json"
    return path


def choose_data_file(parent, start: str) -> str:
    """Ask where a data file is now; returns the path or '' (tests replace this function)."""
    path, _ = QFileDialog.getOpenFileName(parent, "Where is the data file now?", start,
                                          "Data files (*.csv *.tsv *.tab *.txt *.xlsx *.xlsm);;All files (*)")
    return path


class ReportOptionsDialog(QDialog):
    """Asks for the report's title, authors and question, and how it treats small counts and record numbers;
    it only asks, the core does the rest."""

    def __init__(self, parent, suppress_up_to: int, list_records: bool, title: str = "", authors: str = "",
                 question: str = ""):
        from twofold.core.outputs.privacy import MAX_THRESHOLD
        from twofold.core.outputs.session import REPORT_TEXT_LIMITS

        super().__init__(parent)
        self.setWindowTitle("Twofold: report options")
        layout = QVBoxLayout(self)
        form = QFormLayout()
        self.texts = {}
        for key, label, value, hint in (
                ("title", "Title", title, "Printed at the top of the first page (empty: the outcome is named)"),
                ("authors", "Authors", authors, "Who carried out the analysis"),
                ("question", "Question answered", question, "The question the analysis answers, in a sentence")):
            edit = QLineEdit(value, self)
            edit.setMaxLength(REPORT_TEXT_LIMITS[key])
            edit.setToolTip(hint)
            self.texts[key] = edit
            form.addRow(label, edit)
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
        return {"suppress_up_to": int(self.limit.value()), "list_records": bool(self.records.isChecked()),
                **{key: edit.text().strip() for key, edit in self.texts.items()}}


def choose_report_options(parent, current: dict) -> dict | None:
    """Ask for the report's options, starting from ``current``; None when cancelled (tests replace this function)."""
    dialog = ReportOptionsDialog(parent, current["suppress_up_to"], current["list_records"],
                                 current.get("title", ""), current.get("authors", ""), current.get("question", ""))
    return dialog.values() if dialog.exec() == QDialog.DialogCode.Accepted else None


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
        self.restore_offered: Path | None = None
        self.autosave_enabled = False
        self.last_autosave: str | None = None
        #: Why autosave is off, once said to the user (None while it is on or not yet asked for).
        self.autosave_off: str | None = None
        from twofold.core.outputs.session import REPORT_DEFAULTS

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
        """Where a save dialog starts: the folder last written to (a data file's folder is often read-only)."""
        data = self._data_path()
        folder = self.window.settings.value("last_output_folder", "") or str(Path.home())
        return str(Path(folder) / f"{Path(data).stem}{ending}") if data else folder

    def _written_to(self, path) -> None:
        """Remember the folder of a file the user chose to write, for the next save dialog."""
        self.window.settings.setValue("last_output_folder", str(Path(path).resolve().parent))

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
    def _run(self, tag: str, fn, kind=None, facets=(), coalesce=None) -> int:
        """Run ``fn(workspace)`` on the worker; its return value reaches :meth:`_handle` once it is done."""
        return self.session.call(kind or "file:" + tag, fn, done=lambda payload: self._handle(tag, payload),
                                 facets=facets, coalesce=coalesce)

    # ---- saving ----------------------------------------------------------------
    def save_dialog(self) -> None:
        path = choose_save_path(self.window, self._suggest("-analysis.json"))
        if path:
            self.save_to(path)

    def save_now(self) -> bool:
        """Ask where, save, and wait until it is written (before closing); False if not saved."""
        from PySide6.QtCore import QEventLoop

        path = choose_save_path(self.window, self._suggest("-analysis.json"))
        if not path:
            return False
        outcome = {}
        loop = QEventLoop()

        def finished(tag, payload):
            if tag == "saved":
                outcome["saved"] = True
                loop.quit()

        def failed(failure):
            outcome["saved"] = False
            loop.quit()

        self.finished.connect(finished)
        self.session.failed.connect(failed)
        try:
            if self.save_to(path) is None:
                return False
            if "saved" not in outcome:
                loop.exec()
        finally:
            self.finished.disconnect(finished)
            self.session.failed.disconnect(failed)
        return bool(outcome.get("saved"))

    def save_to(self, path) -> int | None:
        """Save the model shown, its ladder and options as a session file (on the worker)."""
        if self._refuses(path):
            return None
        self._written_to(path)
        def job(ws):
            from twofold.core.outputs.session import save_session

            written = str(save_session(ws.to_session(), path))
            ws.mark_saved()
            return written

        return self._run("saved", job, facets=("history",))

    # ---- opening -----------------------------------------------------------------
    def open_dialog(self) -> None:
        if not self.window.confirm_leave("opening a saved analysis"):
            return
        path, _ = QFileDialog.getOpenFileName(self.window, "Open a saved analysis", self._start(),
                                              "Twofold analyses (*.json *.twofold);;All files (*)")
        if path:
            self.open_from(path)

    def open_from(self, path, data=None, recovered: bool = False) -> int:
        """Read a session file strictly and check its data file against it (on the worker), then ask and restore.

        ``data`` is another place of the data file (it was moved).  The data
        file is read once here; the restore fits on the rows read.
        """

        def job(ws):
            from twofold.core.data.io import read_table
            from twofold.core.outputs.session import check_data, load_session, require_data_file

            from twofold.core.outputs.session import is_network_path

            session = load_session(path)
            where = Path(data if data is not None else session["data"])
            out = {"session": session, "path": str(path), "data": str(where), "recovered": recovered}
            if data is None and is_network_path(session["data"]):
                return {**out, "kind": "network"}  # followed only once the user chooses it in the dialog
            if not where.exists():
                return {**out, "kind": "no_data"}
            require_data_file(where)
            table = read_table(where, sheet=session["sheet"])
            notices = check_data(session, path=where, frame=table.frame)
            return {**out, "kind": "checked", "notices": notices, "table": table}

        return self._run("opened", job)

    def _after_open(self, payload) -> None:
        from twofold.core.outputs.session import missing_columns_error

        session, path, data = payload["session"], payload["path"], payload["data"]
        recovered = payload["recovered"]
        if payload["kind"] in ("no_data", "network"):
            question = (f"The data file of this analysis, {Path(data).name}, is no longer at {Path(data).parent}. "
                        "Choose where it is now?") if payload["kind"] == "no_data" else (
                        f"The data file of this analysis is on another computer ({data}); Twofold opens files "
                        "there only when you choose them yourself. Choose the data file now?")
            if ask_user(self.window, "Twofold: where is the data file?", question):
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
            from twofold.core.outputs.session import discard_autosave

            discard_autosave(path)
        self.window.statusBar().showMessage("The saved analysis was not opened.", 5000)
        self.finished.emit("not_opened", str(path))

    def restore(self, session: dict, data=None, discard=None, table=None) -> int:
        """Fit the session's models again on its data file (on the worker), as if done by hand.

        ``data`` is the data file (default: the session's own), ``table`` that
        file already read; ``discard`` an autosave to remove once restored.
        """
        def after(ws):
            if discard is not None:
                from twofold.core.outputs.session import discard_autosave

                discard_autosave(discard)
            return where

        where = str(data if data is not None else session["data"])
        if session.get("threshold") is not None:
            self._show_threshold(float(session["threshold"]))
        self.report_options = {k: session["report"][k] for k in self.report_options}
        return self.session.restore(session, data=where, table=table, after=after,
                                    done=lambda payload: self._handle("restored", payload))

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

    def report_to(self, path, suppress_up_to: int | None = None, list_records: bool | None = None,
                  title: str | None = None, authors: str | None = None, question: str | None = None) -> int | None:
        """Write the report of the model shown: aggregate figures only, small counts suppressed (on the worker).

        ``suppress_up_to``, ``list_records`` and the first page's ``title``,
        ``authors`` and ``question`` (None: as before) become the report
        options kept with the session, and autosaved at once.
        """
        if self._refuses(path):
            return None
        self._written_to(path)
        from twofold.core.outputs.privacy import MAX_THRESHOLD

        if suppress_up_to is not None and not 1 <= int(suppress_up_to) <= MAX_THRESHOLD:
            self._fail(f"Counts of 1 up to {suppress_up_to} people cannot be the limit of the report; "
                       f"choose a whole number from 1 to {MAX_THRESHOLD}.")
            return None
        chosen = {"suppress_up_to": suppress_up_to, "list_records": list_records, "title": title,
                  "authors": authors, "question": question}
        changed = {k: v for k, v in chosen.items() if v is not None and v != self.report_options[k]}
        self.report_options.update(changed)
        s, options = self.session, dict(self.report_options)

        def job(ws):
            from twofold.render.report_writer import write_report

            ws.set_report_options(options["suppress_up_to"], options["list_records"], title=options.get("title"),
                                  authors=options.get("authors"), question=options.get("question"))
            result = ws.result(assessment=s.assessment_for(ws.shown_fit()))
            return str(write_report(result, path, ladder=ws.ladder, suppress_below=options["suppress_up_to"],
                                    include_records=options["list_records"], details=ws.report_options))

        job_id = self._run("report", job)
        if changed and self.session.last_results is not None:
            self._on_results(self.session.last_results)  # the autosave keeps the new options
        return job_id

    def export_dialog(self) -> None:
        path, chosen = QFileDialog.getSaveFileName(self.window, "Export the tables", self._suggest("-tables.xlsx"),
                                                   "Workbook, one sheet per table (*.xlsx);;"
                                                   "CSV text, two files: coefficients and models (*.csv)")
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
        self._written_to(path)
        s = self.session

        def job(ws):
            from twofold.core.outputs.export import export_coefficients, export_ladder

            result = ws.result(assessment=s.assessment_for(ws.shown_fit()))
            written = [str(export_coefficients(result, path, ladder=ws.ladder))]
            if ladder_path is not None:
                written.append(str(export_ladder(ws.ladder, ladder_path, data=result.spec.data)))
            return written

        return self._run("exported", job)

    # ---- autosave --------------------------------------------------------------
    def enable_autosave(self) -> bool:
        """Mark this process as running and autosave after each new result; False if the folder is not writable."""
        from twofold.core.outputs.session import start_autosave

        try:
            start_autosave()
        except OSError as exc:
            from twofold.paths import own_folder_problem

            self.autosave_enabled = False
            why = own_folder_problem() or f"Twofold's own folder cannot be written ({exc.strerror or exc})"
            self.autosave_off = (f"Autosave is off: {why}. Everything else works; save the analysis yourself "
                                 "(File, Save the analysis) to keep it.")
            # Said once in full; a short mark stays in the status bar, the reason on it as a tooltip.
            self.window.statusBar().showMessage(self.autosave_off, 15000)
            mark = QLabel("Autosave is off")
            mark.setTextFormat(Qt.TextFormat.PlainText)
            mark.setToolTip(self.autosave_off)
            mark.setObjectName("autosave_off")
            self.window.statusBar().addPermanentWidget(mark)
            return False
        self.autosave_enabled = True
        if self.session.last_results is not None:
            self._on_results(self.session.last_results)
        return True

    def _on_results(self, view) -> None:
        if view is None or not self.autosave_enabled:
            return
        def job(ws):
            from twofold.core.errors import TwofoldError
            from twofold.core.outputs.session import autosave

            try:
                return str(autosave(ws.to_session()))
            except (TwofoldError, OSError):
                return None  # an autosave that cannot be made must not interrupt the work

        self._run("autosaved", job, coalesce="autosave")

    def offer_restore(self) -> Path | None:
        """If a Twofold that did not close cleanly left an autosave, offer to restore it; returns its path."""
        from twofold.core.outputs.session import discard_autosave, recoverable

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
        from twofold.core.outputs.session import clean_exit

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
