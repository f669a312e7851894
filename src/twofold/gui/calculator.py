"""The risk calculator: the predicted risk for one described patient from the model shown.

One field per predictor of the model: a box for a number, a list of groups
for a categorical predictor.  Curved (spline) effects and interactions need
no field of their own; the core's :func:`twofold.core.outputs.predict.predict` builds
them from the predictors' values, with the model's own encoding.  The risk
comes with its 95% interval (delta method on the logit scale, worked out by
the core) and, right beside it, the caution that it is a statistical
estimate, not a clinical decision.

Nothing typed here is kept: the values live in the fields only, go to the
worker thread in memory for the calculation, are never put in a saved
analysis, an autosave, the settings or a log (an unexpected error is logged
without its message, which could quote a value), and the fields are emptied
when the panel closes.
"""

from __future__ import annotations

from PySide6.QtCore import Qt, QTimer, Signal
from PySide6.QtWidgets import (
    QComboBox, QDialog, QDialogButtonBox, QFormLayout, QFrame, QHBoxLayout, QLabel, QLineEdit, QPushButton,
    QScrollArea, QSizePolicy, QVBoxLayout, QWidget,
)

from twofold.core.outputs.summary import PATIENT_CAUTION as RISK_CAUTION  # beside every risk; the CLI says the same
from twofold.gui import style


#: Shown under the fields.
NOT_KEPT = "The values typed here are not saved anywhere and are cleared when this panel closes."


def _model_job(ws):
    """The model shown as numbers, with a few words about it (worker thread)."""
    from twofold.core.errors import TwofoldError
    from twofold.core.outputs.predict import frozen_model

    fit = ws.shown_fit() if ws.study is not None else None
    if fit is None:
        return None
    study, ladder = ws.study, ws.ladder
    try:
        model = frozen_model(fit, study.outcome, study.event)
    except TwofoldError as exc:
        return {"problem": str(exc)}
    return {"model": model, "rung": ladder.current, "source": study.source, "rows": int(fit.n_used),
            "penalised": bool(ws.penalised)}


def _predict_job(model, values):
    """The predicted risk, or the core's one-sentence reason it cannot be given (worker thread)."""
    from twofold.core.errors import TwofoldError
    from twofold.core.outputs.predict import predict

    try:
        return predict(model, values)
    except TwofoldError as exc:
        return str(exc)
    except Exception as exc:  # log where it happened, but not the message: it could quote a typed value
        from twofold.gui.worker import log_exception, where_logged

        clean = RuntimeError(f"{type(exc).__name__} in the risk calculator (its message is left out: it may hold "
                             "values typed by the user)").with_traceback(exc.__traceback__)
        return (f"Something unexpected stopped the calculation ({type(exc).__name__}); the values typed are left "
                f"out of the details. {where_logged(log_exception(clean))}")


def _pct(p: float) -> str:
    if p != p:  # NaN
        return "not available"
    if p < 0.001:
        return "below 0.1%"
    if p > 0.999:
        return "above 99.9%"
    return f"{100 * p:.1f}%"


def _num(x: float) -> str:
    return f"{x:,.6g}"


class RiskCalculator(QDialog):
    """The risk for one patient, from the model shown in the window (a panel of its own, not modal)."""

    #: Emitted after each answer is shown: the Prediction, or the reason text.
    answered = Signal(object)
    #: Emitted when the fields were rebuilt for another model (or None when there is no model).
    modelShown = Signal(object)

    def __init__(self, session, parent=None):
        super().__init__(parent)
        self.session = session
        self.model = None
        self.fields: dict[str, QWidget] = {}
        self._levels: dict[str, list] = {}
        self.last_prediction = None
        self._latest = 0
        self._latest_model = 0
        self._stale = True
        self.setWindowTitle("Twofold: risk for one patient")
        self.setAccessibleName("Risk for one patient")
        self.setModal(False)

        layout = QVBoxLayout(self)
        title = QLabel("Risk for one patient")
        title.setFont(style.scaled_font(self, 1.15, bold=True))
        layout.addWidget(title)
        self.about = style.plain(QLabel(""))
        self.about.setWordWrap(True)
        self.about.setAccessibleName("Model used")
        layout.addWidget(self.about)

        self.form_host = QWidget()
        self.form = QFormLayout(self.form_host)
        self.form.setFieldGrowthPolicy(QFormLayout.FieldGrowthPolicy.AllNonFixedFieldsGrow)
        scroll = QScrollArea()
        scroll.setWidgetResizable(True)
        scroll.setFrameShape(QFrame.Shape.NoFrame)
        scroll.setWidget(self.form_host)
        scroll.setSizePolicy(QSizePolicy.Policy.Expanding, QSizePolicy.Policy.Expanding)
        layout.addWidget(scroll)
        self.scroll = scroll
        self.not_kept = QLabel(NOT_KEPT)
        self.not_kept.setWordWrap(True)
        self.not_kept.setAccessibleName("About the values typed")
        layout.addWidget(self.not_kept)

        # The answer and the caution side by side, in one frame: one is never seen without the other.
        answer = QFrame()
        answer.setFrameShape(QFrame.Shape.StyledPanel)
        answer.setAccessibleName("Predicted risk and caution")
        row = QHBoxLayout(answer)
        left = QVBoxLayout()
        self.result = style.plain(QLabel(""))
        self.result.setFont(style.scaled_font(self, 1.5, bold=True))
        self.result.setAccessibleName("Predicted risk")
        self.result.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        self.interval = style.plain(QLabel(""))
        self.interval.setWordWrap(True)
        self.interval.setAccessibleName("95% interval of the predicted risk")
        self.problem = style.plain(QLabel(""))
        self.problem.setWordWrap(True)
        self.problem.setAccessibleName("Why no risk is shown")
        left.addWidget(self.result)
        left.addWidget(self.interval)
        left.addWidget(self.problem)
        left.addStretch(1)
        row.addLayout(left, 1)
        self.caution = style.Banner("information", "Caution: " + RISK_CAUTION, colour=style.ORANGE,
                                    accessible_name="Caution")
        row.addWidget(self.caution, 1)
        layout.addWidget(answer)
        layout.addStretch(1)

        buttons = QDialogButtonBox()
        self.clear_button = QPushButton("&Clear the values")
        self.clear_button.setAccessibleName("Clear every value typed")
        self.clear_button.clicked.connect(self.clear_values)
        buttons.addButton(self.clear_button, QDialogButtonBox.ButtonRole.ResetRole)
        close = buttons.addButton(QDialogButtonBox.StandardButton.Close)
        close.clicked.connect(self.close)
        # Enter in a value box works the risk out; it must never press "Clear" or "Close" instead.
        for b in (self.clear_button, close):
            b.setAutoDefault(False)
            b.setDefault(False)
        layout.addWidget(buttons)

        self._timer = QTimer(self)
        self._timer.setSingleShot(True)
        self._timer.setInterval(120)  # typing a number: one calculation once the typing pauses
        self._timer.timeout.connect(self.calculate)

        session.resultsChanged.connect(self._on_results)
        self.resize(720, 440)
        self._show_answer(None, "Open a data file, choose the outcome and tick predictors: the risk is worked "
                                "out from the model shown in the window.")

    # ---- the model ---------------------------------------------------------------
    def _on_results(self, view) -> None:
        self._stale = True
        if view is None:
            self._set_model(None)
        elif self.isVisible():
            self.refresh()

    def refresh(self) -> int | None:
        """Ask the worker for the model shown (as numbers); returns the request id."""
        if self.session.last_results is None:
            self._set_model(None)
            return None
        asked = {}
        job_id = self.session.call("calculator-model", _model_job, coalesce="calculator-model",
                                   done=lambda payload: self._on_model(asked["id"], payload))
        asked["id"] = self._latest_model = job_id
        self._stale = False
        return job_id

    def _on_model(self, job_id: int, payload) -> None:
        if job_id != self._latest_model:
            return
        if payload is None or "problem" in payload:
            self._set_model(None, payload["problem"] if payload else None)
            return
        self._set_model(payload["model"], about=payload)

    def _set_model(self, model, problem: str | None = None, about=None) -> None:
        # Values already filled in stay for the predictors the new model shares (in memory only).
        keep = {name: (isinstance(self.fields[name], QLineEdit), v) for name, v in self.values().items()} \
            if model is not None else {}
        self.model = model
        self.last_prediction = None
        while self.form.rowCount():
            self.form.removeRow(0)
        self.scroll.setMinimumHeight(0)
        self.fields, self._levels = {}, {}
        if model is None:
            self.about.setText("")
            self._show_answer(None, problem or "There is no model yet: choose the outcome and tick predictors "
                                               "in the window.")
            self.modelShown.emit(None)
            return
        kind = "fitted with the penalised (Firth) method" if about.get("penalised") else "fitted"
        from twofold.core.models.terms import term_title

        given = ", ".join(term_title(p) for p in model.predictors)
        self.about.setText(
            f"From model {about['rung'] + 1} of the ladder, {kind} on {about['rows']:,} rows of {about['source']}: "
            f"the risk that {model.outcome} = {model.event}, given {given}. "
            "Fill in every value.")
        for term in model.terms:
            if term.kind == "interaction":
                continue  # made from its two predictors
            label = style.plain(QLabel(term.column + ":"))
            if term.is_number:
                box = QLineEdit()
                box.setAccessibleName(f"Value of {term.column}")
                tip = ""
                if term.low is not None:
                    box.setPlaceholderText("a number")
                    tip = (f"The model was fitted on values of {term.column} from {_num(term.low)} to "
                           f"{_num(term.high)}; it says nothing reliable outside that range.")
                if term.kind == "spline":
                    tip += " Its effect is a curve (a spline), worked out from this value."
                if tip:
                    box.setToolTip(style.plain_tip(tip.strip()))
                was_number, old = keep.get(term.column, (False, None))
                if was_number:
                    box.setText(old)
                box.textEdited.connect(lambda _t: self._timer.start())
                box.returnPressed.connect(self.calculate)
                widget = box
                if term.low is not None:  # the range stays in view once a value is typed
                    holder = QWidget()
                    line = QHBoxLayout(holder)
                    line.setContentsMargins(0, 0, 0, 0)
                    line.addWidget(box, 1)
                    seen = style.plain(QLabel(f"seen in the data: {_num(term.low)} to {_num(term.high)}"))
                    seen.setAccessibleName(f"Range of {term.column} in the data")
                    line.addWidget(seen)
                    label.setBuddy(box)
                    self.form.addRow(label, holder)
                    self.fields[term.column] = box
                    continue
            else:
                combo = QComboBox()
                combo.setAccessibleName(f"Group of {term.column}")
                levels = [term.reference, *term.levels]
                self._levels[term.column] = levels
                combo.addItem("Choose\u2026", None)
                for k, lvl in enumerate(levels):
                    combo.addItem(str(lvl), k)
                was_number, old = keep.get(term.column, (True, None))
                if not was_number:
                    match = [k for k, lvl in enumerate(levels) if str(lvl) == str(old)]
                    if match:
                        combo.setCurrentIndex(match[0] + 1)
                combo.activated.connect(lambda _i: self.calculate())
                widget = combo
            label.setBuddy(widget)
            self.form.addRow(label, widget)
            self.fields[term.column] = widget
        QTimer.singleShot(0, self._fit_form)  # once the new fields are shown, so the layout counts them
        self.modelShown.emit(model)
        self.calculate()

    def _fit_form(self) -> None:
        """Room for every field (up to a point; then it scrolls), so the answer sits right under them."""
        self.form.invalidate()
        self.scroll.setMinimumHeight(min(self.form.sizeHint().height() + 4, 16 * self.fontMetrics().height()))

    # ---- the values -----------------------------------------------------------------
    def values(self) -> dict:
        """What is filled in: text for a number, the level itself for a group (missing ones left out)."""
        out = {}
        for name, w in self.fields.items():
            if isinstance(w, QLineEdit):
                if w.text().strip():
                    out[name] = w.text()
            else:
                k = w.currentData()
                if k is not None:
                    out[name] = self._levels[name][k]
        return out

    def set_value(self, column: str, value) -> None:
        """Fill in one field as a user would (a number typed, or a group chosen), then calculate."""
        w = self.fields[column]
        if isinstance(w, QLineEdit):
            w.setText(str(value))
        else:
            i = w.findText(str(value))
            if i < 0:
                raise KeyError(f"{value!r} is not a group of {column}")
            w.setCurrentIndex(i)
        self.calculate()

    def clear_values(self) -> None:
        """Empty every field (nothing typed is kept)."""
        for w in self.fields.values():
            if isinstance(w, QLineEdit):
                w.clear()
            else:
                w.setCurrentIndex(0)
        self._latest += 1  # an answer still on its way is for values no longer shown
        self.calculate()

    def calculate(self) -> int | None:
        """Ask the worker for the risk of the values filled in; returns the request id (None: not all filled)."""
        self._timer.stop()
        if self.model is None:
            return None
        values = self.values()
        empty = [c for c in self.fields if c not in values]
        if empty:
            self._latest += 1
            self._show_answer(None, "Fill in every value to see the risk (still empty: " + ", ".join(empty) + ").")
            return None
        model, asked = self.model, {}
        job_id = self.session.call("calculator", lambda ws: _predict_job(model, values), coalesce="calculator",
                                   done=lambda answer: self._on_prediction(asked["id"], answer))
        asked["id"] = self._latest = job_id
        return job_id

    def _on_prediction(self, job_id: int, answer) -> None:
        if job_id != self._latest:
            return  # values changed since
        if isinstance(answer, str):
            self._show_answer(None, answer)
        else:
            self._show_answer(answer)

    def _show_answer(self, prediction, problem: str = "") -> None:
        self.last_prediction = prediction
        if prediction is None:
            self.result.setText("Predicted risk: \u2014")
            self.interval.setText("")
            self.problem.setText(problem)
            self.problem.setVisible(bool(problem))
        else:
            m = self.model
            self.result.setText(f"Predicted risk: {_pct(prediction.probability)}")
            self.interval.setText(f"95% confidence interval {_pct(prediction.ci_low)} to "
                                  f"{_pct(prediction.ci_high)}: the chance that {m.outcome} = {m.event} for a "
                                  "patient described by these values, according to the model.")
            self.problem.setText("")
            self.problem.hide()
        self.answered.emit(prediction if prediction is not None else problem)

    # ---- showing and closing ------------------------------------------------------------
    def showEvent(self, event) -> None:
        super().showEvent(event)
        if self._stale:
            self.refresh()

    def hideEvent(self, event) -> None:
        self.clear_values()  # the next person to open the panel sees no earlier patient's values
        super().hideEvent(event)
