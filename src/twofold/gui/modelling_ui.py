"""The "Model shape" dialog: curved effects, interactions and bootstrap validation.

Spline and interaction requests go through :meth:`Session.run_modelling`, so
they run on the single core worker and the results pane updates as for any
fit.  The bootstrap runs on its own thread (:class:`BootstrapThread`) on a
fit that is only read, so fits keep running meanwhile; a cancelled run
changes nothing that is shown.
"""

from __future__ import annotations

import threading

from PySide6.QtCore import Qt, QThread, Signal
from PySide6.QtGui import QPixmap
from PySide6.QtWidgets import (
    QComboBox, QDialog, QFormLayout, QGroupBox, QHBoxLayout, QLabel, QLineEdit, QProgressBar, QPushButton,
    QSpinBox, QTableWidget, QTableWidgetItem, QTabWidget, QVBoxLayout, QWidget,
)

from twofold.gui.style import plain

#: Shapes offered for a numeric predictor: label and knots (None: straight line).
SHAPES = (("Straight line", None), ("Spline with 3 knots", 3), ("Spline with 4 knots", 4),
          ("Spline with 5 knots", 5))

INTERACTION_NOTE = ("Once two predictors interact, the odds ratio of one depends on the value of the "
                    "other, so a single main-effect odds ratio no longer answers the question; read the "
                    "odds ratios in this table instead.")


# ---- worker-side jobs (run on the core worker thread with the workspace; no Qt here) --------
def sample_size_words(validation, fit) -> str:
    """The sample-size check redone with the validation's corrected R-squared, as the core words it."""
    from twofold.core.outputs.summary import validation_record
    from twofold.core.outputs.text import corrected_sample_size_text

    return corrected_sample_size_text(validation_record(validation, fit), fit.n_used)


def spline_job(column: str, knots: int | None):
    """A job for :meth:`Session.run_modelling`: set the shape of ``column`` (the workspace refits)."""

    def job(ws):
        from twofold.core.models.modelling import effect_curve
        from twofold.render.figures import effect_figure

        ws.set_spline(column, knots)
        name = ws.study.column(column)
        fit = ws.shown_fit()
        curves, _ = ws.shape_tests(fit)
        tests = [t for t in curves if t.term == name]
        curve = effect_curve(fit, name)
        return {"kind": "spline", "column": name, "knots": knots, "tests": tests,
                "png": effect_figure(curve, knots), "fit": fit}

    return job


def interaction_job(focus: str, other: str, at=None):
    """A job: add ``focus:other`` (and both main effects) as a new rung, with its test and odds ratios."""

    def job(ws):
        from twofold.core.models.modelling import conditional_odds_ratios

        _, term = ws.add_interaction(focus, other)
        fit = ws.shown_fit()
        _, crossings = ws.shape_tests(fit)
        tests = [t for t in crossings if t.term == term]
        a, b = ws.study.column(focus), ws.study.column(other)
        table = conditional_odds_ratios(fit, a, b, at=at)
        return {"kind": "interaction", "term": term, "tests": tests, "table": table, "fit": fit}

    return job


def current_fit_job(ws):
    """A job returning the fit of the model shown (for the bootstrap, which only reads it)."""
    return {"kind": "current", "fit": ws.fit_for_validation(), "thresholds": ws.decision_thresholds()}


# ---- the bootstrap thread ---------------------------------------------------------
class BootstrapThread(QThread):
    """Runs :func:`bootstrap_validation` on a read-only fit, off the GUI and core threads."""

    progressed = Signal(int, int)
    done = Signal(object)        # Validation
    cancelled = Signal()
    failed = Signal(str)

    def __init__(self, fit, repetitions: int, seed: int | None, parent=None, thresholds=None):
        super().__init__(parent)
        self.fit, self.repetitions, self.seed = fit, repetitions, seed
        #: Decision-curve thresholds whose net-benefit optimism the same resamples give (None: none).
        self.thresholds = thresholds
        self._stop = threading.Event()
        self.thread_ident: int | None = None

    def cancel(self) -> None:
        self._stop.set()

    def run(self) -> None:  # noqa: D401 - QThread entry point
        from twofold.core.errors import TwofoldError
        from twofold.core.models.modelling import ValidationCancelled, bootstrap_validation

        self.thread_ident = threading.get_ident()
        try:
            v = bootstrap_validation(self.fit, self.repetitions, seed=self.seed, thresholds=self.thresholds,
                                     progress=lambda d, t: self.progressed.emit(d, t),
                                     cancelled=self._stop.is_set)
        except ValidationCancelled:
            self.cancelled.emit()
        except TwofoldError as exc:
            self.failed.emit(str(exc))
        except Exception as exc:  # never lose a failure silently
            from twofold.gui.worker import log_exception, where_logged

            self.failed.emit(f"{type(exc).__name__}: {exc}. {where_logged(log_exception(exc))}")
        else:
            self.done.emit(v)


# ---- the dialog ---------------------------------------------------------------------
class ModelShapeDialog(QDialog):
    """Curved effects, interactions and bootstrap validation of the model shown."""

    def __init__(self, session, parent=None):
        super().__init__(parent)
        self.session = session
        self.setWindowTitle("Model shape")
        self.setAccessibleName("Model shape")
        self._wanted: dict[str, int] = {}   # newest request id per part of the dialog
        self.spline_result = None
        self.interaction_result = None
        self.validation = None
        self._boot_fit = None
        self.boot_thread: BootstrapThread | None = None

        tabs = QTabWidget()
        tabs.setUsesScrollButtons(False)  # every tab name in full
        tabs.tabBar().setElideMode(Qt.TextElideMode.ElideNone)
        tabs.addTab(self._build_spline(), "Curved effect")
        tabs.addTab(self._build_interaction(), "Interaction")
        tabs.addTab(self._build_bootstrap(), "Bootstrap validation")
        self.tabs = tabs
        self.status = plain(QLabel(""))
        self.status.setWordWrap(True)
        lay = QVBoxLayout(self)
        lay.addWidget(tabs)
        lay.addWidget(self.status)

        session.payloadReady.connect(self._on_ready)
        session.failed.connect(self._on_failed)
        session.columnsChanged.connect(self._fill_columns)
        session.studyLoaded.connect(self._fill_columns)
        if session.last_study is not None:
            self._fill_columns(session.last_study)

    # ---- building
    def _build_spline(self) -> QWidget:
        w = QWidget()
        form = QFormLayout()
        self.spline_column = QComboBox()
        self.spline_column.setAccessibleName("Numeric predictor")
        self.shape_combo = QComboBox()
        self.shape_combo.setAccessibleName("Shape of the effect")
        for text, knots in SHAPES:
            self.shape_combo.addItem(text, knots)
        self.apply_shape = QPushButton("Apply and refit")
        self.apply_shape.clicked.connect(lambda _checked=False: self.apply_spline())
        form.addRow("Numeric predictor", self.spline_column)
        form.addRow("Shape", self.shape_combo)
        self.nonlinear_label = plain(QLabel(""))
        self.nonlinear_label.setWordWrap(True)
        self.effect_picture = QLabel()
        self.effect_picture.setAccessibleName("Effect plot")
        lay = QVBoxLayout(w)
        lay.addLayout(form)
        lay.addWidget(self.apply_shape)
        lay.addWidget(self.nonlinear_label)
        lay.addWidget(self.effect_picture, 1)
        return w

    def _build_interaction(self) -> QWidget:
        w = QWidget()
        form = QFormLayout()
        self.focus_combo = QComboBox()
        self.focus_combo.setAccessibleName("Predictor whose odds ratio is shown")
        self.other_combo = QComboBox()
        self.other_combo.setAccessibleName("Predictor it depends on")
        self.at_edit = QLineEdit()
        self.at_edit.setPlaceholderText("quartiles if left empty, e.g. 40, 60, 80")
        self.at_edit.setAccessibleName("Values of the second predictor")
        form.addRow("Odds ratio of", self.focus_combo)
        form.addRow("at values of", self.other_combo)
        form.addRow("Values (numeric only)", self.at_edit)
        self.apply_interaction = QPushButton("Add the interaction and refit")
        self.apply_interaction.clicked.connect(lambda _checked=False: self.add_interaction())
        self.interaction_label = plain(QLabel(""))
        self.interaction_label.setWordWrap(True)
        self.or_table = QTableWidget(0, 3)
        self.or_table.setHorizontalHeaderLabels(["At", "Odds ratio", "95% confidence interval"])
        self.or_table.setAccessibleName("Odds ratios at values of the second predictor")
        self.note = plain(QLabel(""))
        self.note.setWordWrap(True)
        lay = QVBoxLayout(w)
        lay.addLayout(form)
        lay.addWidget(self.apply_interaction)
        lay.addWidget(self.interaction_label)
        lay.addWidget(self.or_table, 1)
        lay.addWidget(self.note)
        return w

    def _build_bootstrap(self) -> QWidget:
        w = QWidget()
        form = QFormLayout()
        self.reps_spin = QSpinBox()
        self.reps_spin.setRange(1, 100_000)
        self.reps_spin.setValue(200)
        self.reps_spin.setAccessibleName("Repetitions")
        self.seed_spin = QSpinBox()
        self.seed_spin.setRange(0, 2_000_000_000)
        self.seed_spin.setValue(20240101)
        self.seed_spin.setAccessibleName("Seed")
        form.addRow("Repetitions", self.reps_spin)
        form.addRow("Seed (same seed, same answer)", self.seed_spin)
        self.run_boot = QPushButton("Run the bootstrap")
        # clicked(bool) must not reach the repetitions parameter: the typed number is used.
        self.run_boot.clicked.connect(lambda _checked=False: self.start_bootstrap())
        self.cancel_boot = QPushButton("Cancel")
        self.cancel_boot.setEnabled(False)
        self.cancel_boot.clicked.connect(self.cancel_bootstrap)
        buttons = QHBoxLayout()
        buttons.addWidget(self.run_boot)
        buttons.addWidget(self.cancel_boot)
        self.boot_bar = QProgressBar()
        self.boot_bar.setAccessibleName("Bootstrap progress")
        box = QGroupBox("How well the model would do on new patients")
        grid = QFormLayout(box)
        self.boot_labels = {}
        for key, text in (("auc", "Area under the ROC curve"), ("slope", "Calibration slope"),
                          ("brier", "Brier score"), ("sample", "Sample size needed")):
            lab = QLabel("not run yet")
            lab.setWordWrap(True)
            lab.setAccessibleName(text)
            self.boot_labels[key] = lab
            grid.addRow(text, lab)
        lay = QVBoxLayout(w)
        lay.addLayout(form)
        lay.addLayout(buttons)
        lay.addWidget(self.boot_bar)
        lay.addWidget(box)
        lay.addStretch(1)
        return w

    def _fill_columns(self, view) -> None:
        if view is None or not hasattr(view, "columns"):
            return
        roles = {c.name: c.role for c in view.columns}
        names = [n for n in view.candidates if n != view.outcome]
        numeric = [n for n in names if roles.get(n) == "numeric"]
        for combo, items in ((self.spline_column, numeric), (self.focus_combo, names), (self.other_combo, names)):
            keep = combo.currentText()
            combo.blockSignals(True)
            combo.clear()
            combo.addItems(items)
            if keep in items:
                combo.setCurrentText(keep)
            combo.blockSignals(False)
        # The second predictor of an interaction starts on another column than the first.
        if self.other_combo.count() > 1 and self.other_combo.currentText() == self.focus_combo.currentText():
            self.other_combo.setCurrentIndex(1 if self.focus_combo.currentIndex() == 0 else 0)

    # ---- requests
    def apply_spline(self, column: str | None = None, knots="from-combo") -> int:
        """Give ``column`` the chosen shape and refit the ladder; returns the request id."""
        column = column or self.spline_column.currentText()
        if knots == "from-combo":
            knots = self.shape_combo.currentData()
        self.status.setText("Refitting\u2026")
        rid = self.session.run_modelling(spline_job(column, knots))
        self._wanted["spline"] = rid
        return rid

    def add_interaction(self, focus: str | None = None, other: str | None = None, at=None) -> int:
        """Add the interaction of two predictors as a new model; returns the request id."""
        focus = focus or self.focus_combo.currentText()
        other = other or self.other_combo.currentText()
        if at is None and self.at_edit.text().strip():
            try:
                at = [float(v) for v in self.at_edit.text().replace(";", ",").split(",") if v.strip()]
            except ValueError:
                self.status.setText("Write the values as numbers separated by commas, e.g. 40, 60, 80.")
                return 0
        self.status.setText("Refitting\u2026")
        rid = self.session.run_modelling(interaction_job(focus, other, at))
        self._wanted["interaction"] = rid
        return rid

    def start_bootstrap(self, repetitions: int | None = None, seed: int | None = None) -> int:
        """Ask the worker for the model shown, then validate it on the bootstrap thread."""
        if self.boot_thread is not None and self.boot_thread.isRunning():
            return 0
        if repetitions is not None:
            self.reps_spin.setValue(int(repetitions))
        if seed is not None:
            self.seed_spin.setValue(int(seed))
        self.run_boot.setEnabled(False)
        self.cancel_boot.setEnabled(True)
        self.boot_bar.setRange(0, 0)
        self.status.setText("Getting the model shown\u2026")
        rid = self.session.call("modelling", current_fit_job)
        self._wanted["bootstrap"] = rid
        return rid

    def cancel_bootstrap(self) -> None:
        """Stop the bootstrap; the validation shown before stays."""
        self._wanted.pop("bootstrap", None)
        if self.boot_thread is not None:
            self.boot_thread.cancel()
        else:
            self._boot_idle("The bootstrap was cancelled; the results shown before are unchanged.")

    def shutdown(self, wait_ms: int = 5000) -> bool:
        """Stop a running bootstrap and wait for its thread (the main window is closing).

        Returns whether the thread has ended.  Cancelling is checked between
        resamples, so the wait is about one refit.
        """
        self._wanted.pop("bootstrap", None)
        thread = self.boot_thread
        if thread is None or not thread.isRunning():
            return True
        thread.cancel()
        return thread.wait(wait_ms)

    # ---- answers
    def _on_ready(self, rid: int, payload) -> None:
        if not isinstance(payload, dict):
            return
        kind = payload.get("kind")
        part = "bootstrap" if kind == "current" else kind
        if self._wanted.get(part) != rid:
            return  # superseded by a newer request of the same part
        if kind == "spline":
            self._show_spline(payload)
        elif kind == "interaction":
            self._show_interaction(payload)
        elif kind == "current":
            self._launch(payload["fit"], payload.get("thresholds"))

    def _on_failed(self, failure) -> None:
        if getattr(failure, "kind", "") != "modelling":
            return
        self.status.setText(failure.message)
        if "bootstrap" in self._wanted and self.boot_thread is None:
            self._wanted.pop("bootstrap")
            self._boot_idle(failure.message)

    def _show_spline(self, payload) -> None:
        from twofold.core.outputs.text import curve_reading, degrees, fmt_num, fmt_p

        self.spline_result = payload
        col = payload["column"]
        if payload["knots"] is None or not payload["tests"]:
            self.nonlinear_label.setText(f"{col} now has a straight-line effect (one odds ratio per unit).")
        else:
            t = payload["tests"][0]
            knots = ", ".join(f"{k:g}" for k in t.knots)
            self.nonlinear_label.setText(
                f"Is the effect of {col} curved? Likelihood-ratio test of the curve against a straight "
                f"line: G = {fmt_num(t.g, 2)} on {degrees(t.df)}, p-value {fmt_p(t.p_value)}. "
                f"Knots at {knots}.\n{curve_reading(col, t.p_value)}")
        pix = QPixmap()
        pix.loadFromData(payload["png"], "PNG")
        self.effect_picture.setPixmap(pix)
        # The shape list shows the shape now in the model, not the default.
        index = self.shape_combo.findData(payload["knots"])
        if index >= 0:
            self.shape_combo.setCurrentIndex(index)
        self.status.setText("The model was refitted; the results pane shows it.")

    def _show_interaction(self, payload) -> None:
        from twofold.core.models.terms import TIMES
        from twofold.core.outputs.text import degrees, fmt_num, fmt_or, fmt_p, interaction_reading

        self.interaction_result = payload
        term = payload["term"]
        if payload["tests"]:
            t = payload["tests"][0]
            a, _, b = term.partition(":")
            self.interaction_label.setText(
                f"Does the effect of {a} differ with {b}? Likelihood-ratio test of the model with "
                f"{a} {TIMES} {b} against the model without it: G = {fmt_num(t.g, 2)} on {degrees(t.df)}, p-value "
                f"{fmt_p(t.p_value)}.\n{interaction_reading(a, b, t.p_value)}")
        rows = payload["table"]
        self.or_table.setRowCount(len(rows))
        for r, row in enumerate(rows):
            at = row["at"]
            where = f"{row['other']} = {at:g}" if isinstance(at, float) else f"{row['other']} = {at}"
            if row["level"] is not None:
                where = f"{row['focus']} {row['level']}, {where}"
            for c, text in enumerate((where, fmt_or(row["odds_ratio"]),
                                      f"{fmt_or(row['or_ci_low'])} to {fmt_or(row['or_ci_high'])}")):
                self.or_table.setItem(r, c, QTableWidgetItem(text))
        self.or_table.resizeColumnsToContents()
        self.or_table.horizontalHeader().setStretchLastSection(True)
        unit = " (per one unit)" if rows and rows[0]["level"] is None else ""
        self.note.setText(f"Odds ratios of {rows[0]['focus'] if rows else ''}{unit}. " + INTERACTION_NOTE)
        self.status.setText("The interaction was added as a new model; the results pane shows it.")

    def _launch(self, fit, thresholds=None) -> None:
        thread = BootstrapThread(fit, self.reps_spin.value(), self.seed_spin.value(), self, thresholds)
        self._boot_fit = fit
        thread.progressed.connect(self._on_boot_progress)
        thread.done.connect(self._on_boot_done)
        thread.cancelled.connect(
            lambda: self._boot_idle("The bootstrap was cancelled; the results shown before are unchanged."))
        thread.failed.connect(self._boot_idle)
        thread.finished.connect(self._on_thread_finished)
        self.boot_thread = thread
        self.boot_bar.setRange(0, thread.repetitions)
        self.boot_bar.setValue(0)
        self.status.setText("Running the bootstrap\u2026")
        thread.start()

    def _on_boot_progress(self, done: int, total: int) -> None:
        self.boot_bar.setValue(done)

    def _on_boot_done(self, v) -> None:
        from twofold.core.outputs.text import fmt_num

        self.validation = v
        fit, reps, seed = self._boot_fit, v.repetitions, self.seed_spin.value()
        # Kept with the analysis, so a saved session and a report carry the same figures.
        self.session.call("validation", lambda ws: ws.record_validation(fit, v, reps, seed))
        self.boot_labels["auc"].setText(
            f"{fmt_num(v.auc_corrected)} corrected for optimism: {fmt_num(v.auc_apparent)} on the data it was "
            f"built from, minus an optimism of {fmt_num(v.auc_optimism)}")
        self.boot_labels["slope"].setText(
            f"{fmt_num(v.calibration_slope_corrected)} corrected (1 on the data it was built from, by "
            f"construction; optimism {fmt_num(v.slope_optimism)})"
            + ("; below 1, so the Usefulness menu offers the model shrunk by it" if 0 < v.calibration_slope_corrected
               < 1 else ""))
        self.boot_labels["brier"].setText(
            f"{fmt_num(v.brier_corrected)} corrected ({fmt_num(v.brier_apparent)} on the data it was built "
            f"from; optimism {fmt_num(v.brier_optimism)})")
        self.boot_labels["sample"].setText(sample_size_words(v, fit))
        extra = f"; {v.failed} resamples could not be fitted" if v.failed else ""
        self._boot_idle(f"Bootstrap done: {v.completed} of {v.repetitions} resamples used{extra}.")
        self.boot_bar.setRange(0, 1)
        self.boot_bar.setValue(1)  # a finished run shows a full bar

    def _boot_idle(self, message: str) -> None:
        self.run_boot.setEnabled(True)
        self.cancel_boot.setEnabled(False)
        self.boot_bar.setRange(0, 1)
        self.boot_bar.setValue(0)
        self.status.setText(message)

    def _on_thread_finished(self) -> None:
        self.boot_thread = None

    def done(self, result: int) -> None:  # closing the dialog stops a running bootstrap
        if self.boot_thread is not None:
            self.boot_thread.cancel()
            self.boot_thread.wait(10_000)
        super().done(result)
