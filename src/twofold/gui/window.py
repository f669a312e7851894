"""Twofold's main window: data, model and results side by side.

Only PySide6 and the standard library are imported here; the core is
imported by the worker thread after the window is on screen.
"""

from __future__ import annotations

import os
from pathlib import Path

from PySide6.QtCore import QSettings, Qt, QTimer
from PySide6.QtGui import QAction, QKeySequence
from PySide6.QtWidgets import (
    QApplication, QFileDialog, QHBoxLayout, QLabel, QMainWindow, QMenu, QMessageBox, QProgressBar,
    QFrame, QScrollArea, QSplitter, QToolButton, QVBoxLayout, QWidget,
)

from twofold.gui import style
from twofold.gui.help_ui import topic_of
from twofold.gui.panes import DataPane, LadderPane, ModelPane, ResultsPane
from twofold.gui.session import Session
from twofold.gui.views import Failure

DATA_SUFFIXES = (".csv", ".tsv", ".tab", ".txt", ".xlsx", ".xlsm")
MAX_RECENT = 8


def sample_dir() -> Path | None:
    """The bundled sample studies (next to the package in a source checkout)."""
    import twofold

    here = Path(twofold.__file__).resolve()
    for candidate in (here.parents[2] / "sample_studies", here.parent / "sample_studies"):
        if candidate.is_dir():
            return candidate
    return None


def sample_files() -> list[Path]:
    folder = sample_dir()
    if folder is None:
        return []
    return sorted(p for p in folder.iterdir() if p.suffix.lower() in DATA_SUFFIXES)


def open_settings() -> QSettings:
    """Settings kept in Twofold's own folder (``TWOFOLD_HOME`` in tests), as an INI file."""
    from twofold.paths import app_dir, app_dir_path

    try:
        folder = app_dir()
    except OSError:
        folder = app_dir_path()  # not writable: settings are read if there, and simply not kept
    return QSettings(str(folder / "settings.ini"), QSettings.Format.IniFormat)


#: At the latest this long after the window is made, its worker starts (normally at the first paint).
WORKER_START_MS = 200


class MainWindow(QMainWindow):
    """The window.  ``session`` defaults to a new one; ``remember`` keeps a recent-files list."""

    def __init__(self, session: Session | None = None, settings: QSettings | None = None,
                 remember: bool = True, parent=None):
        super().__init__(parent)
        self.session = session or Session(self)
        self.settings = settings if settings is not None else open_settings()
        self.remember = remember
        self.error_box = None
        self._source = ""
        #: Ask about unsaved changes before they are left behind (off for offscreen pictures).
        self.ask_before_leaving = True
        self.setWindowTitle("Twofold")
        self.setWindowIcon(style.app_icon())
        self.setAcceptDrops(True)
        self.setAccessibleName("Twofold")
        self.setStyleSheet(style.FOCUS_RULES)

        central = QWidget()
        layout = QVBoxLayout(central)
        self.message = style.Banner("critical", colour=style.VERMILLION, closable=True,
                                    accessible_name="Problem")
        self.message.hide()
        layout.addWidget(self.message)

        self.data_pane = DataPane(self.session)
        self.model_pane = ModelPane(self.session)
        self.results_pane = ResultsPane(self.session)
        self.ladder_pane = LadderPane(self.session)
        # Three panes side by side; the model ladder runs under the model and results panes.
        top = QSplitter(Qt.Orientation.Horizontal)
        # On a short screen the model pane scrolls rather than squeezing its list of predictors.
        model_scroll = QScrollArea()
        model_scroll.setWidget(self.model_pane)
        model_scroll.setWidgetResizable(True)
        model_scroll.setFrameShape(QFrame.Shape.NoFrame)
        model_scroll.setHorizontalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAlwaysOff)
        model_scroll.setMinimumWidth(self.model_pane.minimumSizeHint().width()
                                     + model_scroll.verticalScrollBar().sizeHint().width())
        top.addWidget(model_scroll)
        top.addWidget(self.results_pane)
        top.setChildrenCollapsible(False)
        right = QSplitter(Qt.Orientation.Vertical)
        right.addWidget(top)
        right.addWidget(self.ladder_pane)
        right.setChildrenCollapsible(False)
        self.right_split = right
        self.model_split = top
        split = QSplitter(Qt.Orientation.Horizontal)
        split.addWidget(self.data_pane)
        split.addWidget(right)
        split.setChildrenCollapsible(False)
        self.split = split
        layout.addWidget(split, 1)
        self.setCentralWidget(central)

        self._build_actions()
        self._build_status()
        self._tab_order()

        s = self.session
        s.studyLoaded.connect(self._on_study)
        s.failed.connect(self.show_failure)
        s.busyChanged.connect(self._on_busy)
        s.resultsChanged.connect(lambda v: self.message.hide() if v is not None else None)
        s.historyChanged.connect(self._on_history)
        self._revision_seen = 0
        self.data_pane.openRequested.connect(self.open_dialog)
        self.data_pane.sampleRequested.connect(self._sample_menu_popup)
        # The worker imports pandas and the fitting library as it starts: it starts once the window is painted,
        # so those imports do not compete with drawing the window for the interpreter (a window that is never
        # shown starts it a moment later; a request made before then waits for it, in order).
        self._worker_started = False
        QTimer.singleShot(WORKER_START_MS, self._start_worker)

    def paintEvent(self, event) -> None:
        super().paintEvent(event)
        if not self._worker_started:
            QTimer.singleShot(0, self._start_worker)

    def _start_worker(self) -> None:
        if not self._worker_started:
            self._worker_started = True
            self.session.start()

    # ---- menus, toolbar, status ---------------------------------------------
    def _build_actions(self) -> None:
        bar = self.menuBar()
        file_menu = bar.addMenu("&File")
        self.open_action = QAction(style.standard_icon("open"), "&Open a data file\u2026", self)
        self.open_action.setShortcut(QKeySequence.StandardKey.Open)
        self.open_action.setToolTip("Open a CSV, TSV or Excel file (Ctrl+O)")
        self.open_action.triggered.connect(self.open_dialog)
        file_menu.addAction(self.open_action)
        # ---- saved analyses, reports, table exports, autosave (twofold.gui.sessions_ui) ----
        from twofold.gui.sessions_ui import SessionActions

        self.sessions = SessionActions(self)
        self.sample_menu = QMenu("Open a &sample study", self)
        self.sample_menu.setIcon(style.standard_icon("folder"))
        for path in sample_files():
            act = self.sample_menu.addAction(path.name)
            act.triggered.connect(lambda _=False, p=path: self.open_path(p))
        if self.sample_menu.isEmpty():
            self.sample_menu.addAction("(no sample studies found)").setEnabled(False)
        file_menu.addMenu(self.sample_menu)
        self.recent_menu = QMenu("&Recent files", self)
        file_menu.addMenu(self.recent_menu)
        self._fill_recent()
        file_menu.addSeparator()
        for act in self.sessions.actions:
            file_menu.addAction(act)
        file_menu.addSeparator()
        self.copy_action = QAction(style.standard_icon("copy"), "&Copy the results as text", self)
        self.copy_action.setShortcut(QKeySequence("Ctrl+Shift+C"))
        self.copy_action.triggered.connect(self.copy_results)
        file_menu.addAction(self.copy_action)
        self.picture_action = QAction("Save a &picture of the window\u2026", self)
        self.picture_action.triggered.connect(self._save_picture)
        file_menu.addAction(self.picture_action)
        file_menu.addSeparator()
        quit_action = QAction("&Quit", self)
        quit_action.setShortcut(QKeySequence.StandardKey.Quit)
        quit_action.triggered.connect(self.close)
        file_menu.addAction(quit_action)

        edit = bar.addMenu("&Edit")
        self.undo_action = QAction("&Undo", self)
        self.undo_action.setShortcut(QKeySequence.StandardKey.Undo)
        self.undo_action.triggered.connect(lambda _=False: self.session.undo())
        self.redo_action = QAction("&Redo", self)
        self.redo_action.setShortcuts([QKeySequence.StandardKey.Redo, QKeySequence("Ctrl+Y")])
        self.redo_action.triggered.connect(lambda _=False: self.session.redo())
        for act in (self.undo_action, self.redo_action):
            act.setEnabled(False)
            edit.addAction(act)

        go = bar.addMenu("&Go to")
        # On a small screen the data pane can step aside for the model and its results.
        self.data_pane_action = QAction("Show the data &pane", self)
        self.data_pane_action.setCheckable(True)
        self.data_pane_action.setChecked(True)
        self.data_pane_action.setShortcut(QKeySequence("Ctrl+0"))
        self.data_pane_action.setToolTip("Hide the data pane to give the model and results more room; "
                                         "show it again here (Ctrl+0).")
        self.data_pane_action.toggled.connect(self.data_pane.setVisible)
        go.addAction(self.data_pane_action)
        go.addSeparator()
        for key, text, target in (("Ctrl+1", "&Data rows", lambda: self.data_pane.table),
                                  ("Ctrl+2", "&Column list", lambda: self.data_pane.columns),
                                  ("Ctrl+3", "&Outcome", lambda: self.model_pane.outcome_combo),
                                  ("Ctrl+4", "&Predictors", lambda: self.model_pane.list),
                                  ("Ctrl+5", "&Results", lambda: self.results_pane.table),
                                  ("Ctrl+6", "Model &ladder", lambda: self.ladder_pane.table)):
            act = QAction(text, self)
            act.setShortcut(QKeySequence(key))
            act.triggered.connect(lambda _=False, t=target: t().setFocus(Qt.FocusReason.ShortcutFocusReason))
            go.addAction(act)

        # ---- "Model shape" menu (twofold.gui.modelling_ui) ----
        shape_menu = bar.addMenu("Model &shape")
        self.model_shape_action = QAction("Curved effects, interactions and &validation\u2026", self)
        self.model_shape_action.triggered.connect(self.open_model_shape)
        shape_menu.addAction(self.model_shape_action)
        self.model_shape_dialog = None

        # ---- "Usefulness" menu (twofold.gui.usefulness_ui) ----
        use_menu = bar.addMenu("&Usefulness")
        self.usefulness_action = QAction("Decision curve, units, subgroups and &shrinkage\u2026", self)
        self.usefulness_action.triggered.connect(lambda _=False: self.open_usefulness())
        use_menu.addAction(self.usefulness_action)
        self.check_file_action = QAction("&Check a saved model on a new file\u2026", self)
        self.check_file_action.triggered.connect(lambda _=False: self.open_usefulness("Check on a new file"))
        use_menu.addAction(self.check_file_action)
        self.usefulness_dialog = None

        # ---- "Risk" menu (twofold.gui.calculator) ----
        risk_menu = bar.addMenu("&Risk")
        self.calculator_action = QAction("Risk for one &patient\u2026", self)
        self.calculator_action.setShortcut(QKeySequence("Ctrl+R"))
        self.calculator_action.setToolTip("The predicted risk, with its 95% confidence interval, for one "
                                          "patient's values from the model shown (Ctrl+R)")
        self.calculator_action.triggered.connect(self.open_calculator)
        risk_menu.addAction(self.calculator_action)
        self.calculator = None

        help_menu = bar.addMenu("&Help")
        self.explain_action = QAction("&What does this mean?", self)
        self.explain_action.setShortcut(QKeySequence("F1"))
        self.explain_action.setToolTip("Explain the result that has the keyboard focus: what it is, how to read "
                                       "it, what counts as enough and what not to conclude (F1)")
        self.explain_action.triggered.connect(lambda _=False: self.explain(topic_of(QApplication.focusWidget())))
        help_menu.addAction(self.explain_action)
        self.help_dialog = None
        keys = QAction("&Keyboard use", self)
        keys.setShortcut(QKeySequence("Shift+F1"))
        keys.triggered.connect(self._keyboard_help)
        help_menu.addAction(keys)
        about = QAction("&About Twofold", self)
        about.triggered.connect(self._about)
        help_menu.addAction(about)

        tools = self.addToolBar("Main")
        tools.setObjectName("main_toolbar")
        tools.setToolButtonStyle(Qt.ToolButtonStyle.ToolButtonTextBesideIcon)
        tools.addAction(self.open_action)
        sample_button = QToolButton()
        sample_button.setText("Open a sample study")
        sample_button.setIcon(style.standard_icon("folder"))
        sample_button.setToolButtonStyle(Qt.ToolButtonStyle.ToolButtonTextBesideIcon)
        sample_button.setMenu(self.sample_menu)
        sample_button.setPopupMode(QToolButton.ToolButtonPopupMode.InstantPopup)
        sample_button.setAccessibleName("Open a sample study")
        tools.addWidget(sample_button)
        self.sample_button = sample_button
        tools.addAction(self.copy_action)

    def _build_status(self) -> None:
        bar = self.statusBar()
        self.busy_widget = QWidget()
        b = QHBoxLayout(self.busy_widget)
        b.setContentsMargins(0, 0, 0, 0)
        self.busy_label = QLabel("Working\u2026")
        self.busy_bar = QProgressBar()
        self.busy_bar.setRange(0, 0)
        self.busy_bar.setMaximumWidth(self.fontMetrics().horizontalAdvance("x") * 14)
        self.busy_bar.setMaximumHeight(self.fontMetrics().height())
        self.busy_bar.setTextVisible(False)
        self.busy_bar.setAccessibleName("Working")
        self.stop_button = QToolButton()
        self.stop_button.setText("Stop opening")
        self.stop_button.setAccessibleName("Stop opening the file")
        self.stop_button.setToolTip("Stop reading the file; the data shown before stay (Esc)")
        self.stop_button.setShortcut(QKeySequence(Qt.Key.Key_Escape))
        self.stop_button.clicked.connect(self.session.cancel_load)
        self.stop_button.hide()
        b.addWidget(self.busy_label)
        b.addWidget(self.busy_bar)
        b.addWidget(self.stop_button)
        bar.addPermanentWidget(self.busy_widget)
        self.busy_widget.hide()
        self._busy_timer = QTimer(self)
        self._busy_timer.setSingleShot(True)
        self._busy_timer.setInterval(150)  # a light touch: quick fits never flash it
        self._busy_timer.timeout.connect(self.busy_widget.show)
        self.session.loadStarted.connect(self._on_load_started)
        self.session.loadProgress.connect(self._on_load_progress)
        bar.showMessage("Loading the fitting library in the background\u2026")
        self.session.coreReady.connect(lambda: bar.showMessage("Ready.", 3000))

    def _tab_order(self) -> None:
        d, m, r, lp = self.data_pane, self.model_pane, self.results_pane, self.ladder_pane
        chain = [d.open_button, d.sample_button, d.table, d.columns, d.role_combo, d.reference_combo,
                 m.outcome_combo, m.event_combo, m.list, m.clear_button, r.table,
                 lp.table, lp.show_button, lp.first, lp.second, lp.compare_button]
        for a, b in zip(chain, chain[1:]):
            QWidget.setTabOrder(a, b)

    def _on_busy(self, busy: bool) -> None:
        if busy:
            self._busy_timer.start()
        else:
            self._busy_timer.stop()
            self.busy_widget.hide()
            self._end_loading()

    def _on_load_started(self, path: str) -> None:
        self.busy_label.setText(f"Opening {Path(path).name}\u2026")
        self.busy_bar.setRange(0, 0)
        self.stop_button.show()

    def _on_load_progress(self, fraction: float) -> None:
        self.busy_bar.setRange(0, 100)
        self.busy_bar.setValue(int(round(100 * fraction)))

    def _end_loading(self) -> None:
        self.busy_label.setText("Working\u2026")
        self.busy_bar.setRange(0, 0)
        self.stop_button.hide()

    # ---- opening files --------------------------------------------------------
    def open_dialog(self) -> None:
        start = self.settings.value("last_folder", "") or str(Path.home())
        path, _ = QFileDialog.getOpenFileName(self, "Open a data file", start,
                                              "Data files (*.csv *.tsv *.tab *.txt *.xlsx *.xlsm);;All files (*)")
        if path:
            self.open_path(path)

    def _on_history(self, h) -> None:
        """Undo and redo name what they would do; a change that removed models says how to get them back."""
        self.undo_action.setEnabled(bool(h.undo_text))
        self.undo_action.setText(f"&Undo the {h.undo_text}" if h.undo_text else "&Undo")
        self.redo_action.setEnabled(bool(h.redo_text))
        self.redo_action.setText(f"&Redo the {h.redo_text}" if h.redo_text else "&Redo")
        if h.revision > self._revision_seen and h.removed:
            self.statusBar().showMessage(
                f"{h.last_change} {h.removed} model{'s' if h.removed != 1 else ''} of the ladder "
                f"{'were' if h.removed != 1 else 'was'} removed; Edit > Undo (Ctrl+Z) brings "
                f"{'them' if h.removed != 1 else 'it'} back.", 15000)
        self._revision_seen = max(self._revision_seen, h.revision)
        title = f"Twofold \u2014 {self._source}" if self._source else "Twofold"
        self.setWindowTitle(title + (" (changed since saved)" if h.unsaved else ""))

    def confirm_leave(self, doing: str) -> bool:
        """Before the analysis is replaced or the window closes: save, discard or stay (False: stay)."""
        from twofold.gui import sessions_ui

        if not self.ask_before_leaving or not self.session.last_history.unsaved:
            return True
        answer = sessions_ui.ask_unsaved(self, doing)
        if answer == "cancel":
            return False
        if answer == "save":
            return self.sessions.save_now()
        return True

    def open_path(self, path, sheet: str | None = None) -> int | None:
        """Open a data file; a workbook of several sheets first asks which one (preselecting a table's)."""
        from twofold.core.data.sheets import is_workbook, likely_sheet, workbook_sheets
        from twofold.core.errors import TwofoldError

        if not self.confirm_leave("opening another file"):
            return None
        if sheet is None and is_workbook(path):
            try:
                sheets = workbook_sheets(path)
            except TwofoldError:
                sheets = []  # reading it will say what is wrong, in its own words
            if len(sheets) > 1:
                sheet = choose_sheet(self, Path(path).name, sheets, likely_sheet(sheets))
                if sheet is None:
                    return None
        self.message.hide()
        self.statusBar().showMessage(f"Opening {Path(path).name}\u2026")
        return self.session.open_file(str(path), sheet=sheet)

    def _sample_menu_popup(self) -> None:
        self.sample_menu.popup(self.data_pane.sample_button.mapToGlobal(
            self.data_pane.sample_button.rect().bottomLeft()))

    def _on_study(self, view) -> None:
        self._source = view.source
        self.setWindowTitle(f"Twofold \u2014 {view.source}")
        self.statusBar().showMessage(f"Opened {view.source}: {view.n_rows:,} rows.", 5000)
        self.message.hide()
        if self.remember:
            self._remember(view.path)

    def recent_files(self) -> list[str]:
        value = self.settings.value("recent_files", [])
        if isinstance(value, str):
            value = [value]
        return [str(v) for v in (value or [])]

    def _remember(self, path: str) -> None:
        items = [path] + [p for p in self.recent_files() if p != path]
        self.settings.setValue("recent_files", items[:MAX_RECENT])
        self.settings.setValue("last_folder", str(Path(path).parent))
        self.settings.sync()
        self._fill_recent()

    def _fill_recent(self) -> None:
        self.recent_menu.clear()
        items = self.recent_files()
        for k, path in enumerate(items):
            act = self.recent_menu.addAction(f"&{k + 1} {Path(path).name}")
            act.setToolTip(path)
            act.triggered.connect(lambda _=False, p=path: self.open_path(p))
        if not items:
            self.recent_menu.addAction("(none yet)").setEnabled(False)

    def dragEnterEvent(self, event) -> None:
        if self._dropped_path(event.mimeData()) is not None:
            event.acceptProposedAction()

    def dropEvent(self, event) -> None:
        path = self._dropped_path(event.mimeData())
        if path is not None:
            event.acceptProposedAction()
            self.open_path(path)

    @staticmethod
    def _dropped_path(mime):
        if not mime.hasUrls():
            return None
        for url in mime.urls():
            if url.isLocalFile() and url.toLocalFile().lower().endswith(DATA_SUFFIXES):
                return url.toLocalFile()
        return None

    # ---- problems -------------------------------------------------------------
    def show_failure(self, failure) -> None:
        """A user error in the message strip; an unexpected one also in a message box, with the log."""
        if failure.unexpected:
            self.show_unexpected(failure.message, failure.log_path)
            return
        if failure.cancelled:
            self.statusBar().showMessage("Opening the file was stopped; the data shown before are unchanged.", 5000)
            return
        self.message.setText(failure.message)
        self.message.show()
        self.statusBar().clearMessage()

    def show_unexpected(self, message: str, log_path: str) -> None:
        from twofold.gui.worker import where_logged

        text = f"Something unexpected went wrong ({message}). Your data file was not changed. {where_logged(log_path)}"
        self.message.setText(text)
        self.message.show()
        box = QMessageBox(QMessageBox.Icon.Critical, "Twofold: unexpected problem", text,
                          QMessageBox.StandardButton.Ok, self)
        box.setAccessibleName("Unexpected problem")
        box.setModal(False)
        box.show()
        self.error_box = box

    # ---- copying -----------------------------------------------------------------
    def results_text(self) -> str:
        """The shown results as tab-separated text (for pasting into a report)."""
        view = self.results_pane.view
        if view is None:
            return ""
        model = self.results_pane.coefficients
        lines = ["Caution: " + self.results_pane.caution.text().removeprefix("Caution: "), "", view.title,
                 view.counts_text.replace("  \u00b7  ", "; ")]
        lines += [t for t in (getattr(view, "contents_text", ""), getattr(view, "method_text", "")) if t] + [""]
        lines.append("\t".join(str(model.headerData(c, Qt.Orientation.Horizontal) or "").replace("\n", " ")
                               for c in range(model.columnCount())))
        for r in range(model.rowCount()):
            lines.append("\t".join(str(model.data(model.index(r, c)) or "").strip().replace("\n", ": ")
                                   for c in range(model.columnCount())))
        lines += ["", f"{view.overall.title}: {view.overall.text} {view.overall.reading}"]
        if view.previous is not None:
            lines.append(f"{view.previous.title}: {view.previous.text} {view.previous.reading}".rstrip())
        for t in getattr(view, "shape_tests", ()):
            lines.append(f"{t.title} {t.text} {t.reading}".rstrip())
        for n in view.predictor_notes:
            lines.append(f"Warning ({n.column}): {n.message}")
        for n in view.model_notes:
            lines.append(f"Warning: {n.message}")
        return "\n".join(lines) + "\n"

    def copy_results(self) -> None:
        text = self.results_text()
        if text:
            QApplication.clipboard().setText(text)
            self.statusBar().showMessage("The results were copied as text.", 4000)

    def _save_picture(self) -> None:
        path, _ = QFileDialog.getSaveFileName(self, "Save a picture of the window",
                                              str(Path.home() / "twofold.png"), "PNG pictures (*.png)")
        if path:
            if not self.grab().save(path, "PNG"):
                self.show_failure(Failure("picture", f"Could not write {path}; choose a folder you can write to."))

    def open_model_shape(self):
        """Show the model-shape dialog (one per window, kept between openings)."""
        from twofold.gui.modelling_ui import ModelShapeDialog

        return self._show_one("model_shape_dialog", ModelShapeDialog)

    def open_usefulness(self, tab: str | None = None):
        """Show the usefulness dialog (one per window), at the tab named ``tab`` when given."""
        from twofold.gui.usefulness_ui import UsefulnessDialog

        dialog = self._show_one("usefulness_dialog", UsefulnessDialog)
        for i in range(dialog.tabs.count()):
            if dialog.tabs.tabText(i) == tab:
                dialog.tabs.setCurrentIndex(i)
        dialog.refresh()
        return dialog

    def explain(self, topic: str | None = None):
        """Show "What does this mean?" at ``topic`` (the first topic when None); returns the dialog."""
        from twofold.gui.help_ui import HelpDialog

        if self.help_dialog is None:
            self.help_dialog = HelpDialog(self)
        self.help_dialog.show_topic(topic)
        return self.help_dialog

    def open_calculator(self):
        """Show the risk calculator for the model shown (one per window, its fields emptied on closing)."""
        from twofold.gui.calculator import RiskCalculator

        return self._show_one("calculator", RiskCalculator)

    def _show_one(self, attribute: str, make):
        """Show the window's single ``make(session, self)`` kept in ``attribute``, building it once."""
        if getattr(self, attribute) is None:
            setattr(self, attribute, make(self.session, self))
        shown = getattr(self, attribute)
        shown.show()
        shown.raise_()
        return shown

    def _keyboard_help(self) -> None:
        QMessageBox.information(self, "Keyboard use", (
            "Tab and Shift+Tab move between the parts of the window; arrow keys move inside lists and tables.\n\n"
            "Ctrl+O opens a data file.  Ctrl+1 to Ctrl+6 jump to the data rows, the column list, the outcome, "
            "the predictors, the results and the model ladder.\n\n"
            "In the predictor list, the space bar ticks or unticks the selected predictor.  In the model ladder, "
            "Enter shows the selected model.  Ctrl+Shift+C copies the results as text.  Ctrl+S saves the "
            "analysis; Ctrl+R opens the risk for one patient.  F1 explains the result that has the keyboard "
            "focus (what it is, how to read it, what counts as enough); Ctrl+0 hides or shows the data pane."))

    def _about(self) -> None:
        import twofold

        QMessageBox.about(self, "About Twofold", (
            f"Twofold {twofold.__version__}: logistic models of yes/no outcomes, explained in plain words.\n\n"
            "The data file is only read, never changed, and nothing leaves this computer."))

    def closeEvent(self, event) -> None:
        if not self.confirm_leave("closing Twofold"):
            event.ignore()  # the autosave stays, and so does the window
            return
        if self.remember:
            self.settings.setValue("geometry", self.saveGeometry())
            self.settings.sync()
        if self.model_shape_dialog is not None:
            self.model_shape_dialog.shutdown()  # a bootstrap must not outlive the window
        if self.calculator is not None:
            self.calculator.close()
        self.session.shutdown()
        self.sessions.clean_exit()  # after the worker stopped: no autosave can follow it
        super().closeEvent(event)


#: Below this screen size the window opens maximised (hospital laptops are often 1366 by 768 or 1280 by 720).
SMALL_SCREEN = (1600, 900)


def choose_sheet(parent, file_name: str, sheets, preselected: int) -> str | None:
    """Ask which sheet of a workbook to open; None if cancelled (tests replace this function)."""
    from PySide6.QtWidgets import QInputDialog

    items = [s.describe() for s in sheets]
    chosen, ok = QInputDialog.getItem(parent, "Which sheet?", f"{file_name} has {len(sheets)} sheets. Open:",
                                      items, preselected, False)
    return sheets[items.index(chosen)].name if ok else None


def default_size(window: QMainWindow) -> None:
    """The size the window opens at: as the user left it, else maximised on a small screen, else most of it.

    The geometry is remembered in Twofold's own settings file when the
    window closes (not for windows that do not remember, such as pictures).
    """
    saved = window.settings.value("geometry") if window.remember else None
    if saved is not None and window.restoreGeometry(saved):
        balance(window)
        return
    screen = window.screen() or QApplication.primaryScreen()
    if screen is None:
        window.resize(1400, 900)
        return
    g = screen.availableGeometry()
    window.resize(min(1600, int(g.width() * 0.92)), min(1000, int(g.height() * 0.9)))
    if g.width() < SMALL_SCREEN[0] or g.height() < SMALL_SCREEN[1]:
        window.resize(g.width(), g.height())
        window.setWindowState(window.windowState() | Qt.WindowState.WindowMaximized)
    balance(window)


def balance(window) -> None:
    """Share the width: data under a quarter, the model a fifth, the results the rest.

    The results get most: at 1600 pixels the coefficient table, profile intervals
    included, then fits without scrolling sideways.
    """
    w = window.width()
    data = 0.235 if w >= 1500 else 0.2  # a narrow screen: the results need the room more than the rows
    window.split.setSizes([int(w * data), int(w * (1 - data))])
    window.model_split.setSizes([int(w * 0.19), int(w * 0.575)])
    h = window.height()
    window.right_split.setSizes([int(h * 0.70), int(h * 0.30)])


def has_display() -> bool:
    """Whether a screen is available (always on Windows and macOS; X11 or Wayland elsewhere)."""
    import sys

    if sys.platform.startswith("win") or sys.platform == "darwin":
        return True
    return bool(os.environ.get("DISPLAY") or os.environ.get("WAYLAND_DISPLAY"))
