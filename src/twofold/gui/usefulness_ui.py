"""The "Usefulness" dialog: decision curve, units, subgroups, a saved model on a new file, and shrinkage.

Every request is one workspace operation or question on the core worker
(:meth:`Session.call`); the figures are drawn there by
:mod:`twofold.render.usefulness_figures`.  The dialog only displays and asks:
the statistics are the workspace's (:meth:`Workspace.decision_view`,
:meth:`Workspace.units_comparison`, :meth:`Workspace.subgroup_table`,
:meth:`Workspace.check_on_file`, :meth:`Workspace.shrink`).
"""

from __future__ import annotations

from PySide6.QtCore import Qt
from PySide6.QtGui import QPixmap
from PySide6.QtWidgets import (
    QCheckBox, QComboBox, QDialog, QFileDialog, QFormLayout, QHBoxLayout, QLabel, QLineEdit, QPushButton, QRadioButton,
    QScrollArea, QTableWidget, QTableWidgetItem, QTabWidget, QVBoxLayout, QWidget,
)

from twofold.gui.style import plain

#: Thresholds shown in the decision table when the curve reaches them (risks).
TABLE_THRESHOLDS = (0.05, 0.1, 0.15, 0.2, 0.3, 0.4, 0.5)
NO_SECOND = "(none)"
CHOOSE_COLUMN = "(choose a column)"
NO_COLUMN = "(no column fits: it must be outside the model, not an identifier or date, with a few values)"


def _pct(t: float) -> str:
    return f"{100 * t:.4g}%"


# ---- worker-side jobs (run on the core worker with the workspace; no Qt here) ---------------------------
def overview_job(ws):
    """The ladder's models, the columns a unit or subgroup may come from, and the shrinkage offer."""
    if ws.study is None or not ws.has_model:
        return {"kind": "overview", "models": [], "unit_columns": [], "subgroup_columns": [], "current": None,
                "offer": None,
                "shrunk": False, "usefulness": dict(ws.usefulness)}
    from twofold.core.assessing.subgroups import MAX_GROUPS
    from twofold.core.assessing.units import MAX_UNITS

    models = [", ".join(r.predictors) for r in ws.ladder.rungs]
    return {"kind": "overview", "models": models, "current": ws.ladder.current,
            "unit_columns": ws.grouping_columns(MAX_UNITS), "subgroup_columns": ws.grouping_columns(MAX_GROUPS),
            "offer": ws.shrink_offer(), "shrunk": ws.shrinkage_of(ws.shown_fit()) is not None,
            "usefulness": dict(ws.usefulness)}


def decision_job(low: float, high: float, step: float, compare_with):
    """Set the thresholds and the second model, and draw the shown model's decision curve."""
    def job(ws):
        from twofold.render.usefulness_figures import decision_figure

        ws.set_usefulness(net_benefit=[low, high, step], compare_with=compare_with)
        view = ws.decision_view()
        c = view.curve
        label = "model of " + ", ".join(view.other_predictors) if view.other is not None else ""
        png = decision_figure(c.thresholds, c.model, c.treat_all, model_corrected=c.model_corrected,
                              other=view.other, other_label=label, size=(4.6, 3.6))
        rows = []
        for target in TABLE_THRESHOLDS:
            hit = [i for i, t in enumerate(c.thresholds) if abs(t - target) < 1e-9]
            if hit:
                i = hit[0]
                rows.append([_pct(c.thresholds[i]), c.model[i],
                             None if c.model_corrected is None else c.model_corrected[i],
                             None if view.other is None else view.other[i], c.treat_all[i]])
        return {"kind": "decision", "png": png, "reading": c.reading(), "rows": rows, "other_label": label,
                "corrected": c.model_corrected is not None}

    return job


def units_job(column: str):
    """Set the unit column and compare the units (funnel plot and table)."""
    def job(ws):
        from twofold.core.assessing.units import VERDICTS
        from twofold.render.usefulness_figures import funnel_figure

        WITHIN = VERDICTS["within"]  # noqa: N806 - a constant of the core

        ws.set_usefulness(unit_column=column)
        comp = ws.units_comparison()
        rec = comp.as_record()
        units = rec["units"]
        adjusted = rec["limits_adjusted"]
        png = funnel_figure([u["expected"] for u in units], [u["ratio"] for u in units], rec["limits"]["95"],
                            rec["limits"]["99.8"], adjusted_95=adjusted and adjusted["95"],
                            adjusted_998=adjusted and adjusted["99.8"], labels=[u["unit"] if u["verdict"] != WITHIN else "" for u in units],
                            size=(4.2, 3.6))
        return {"kind": "units", "png": png, "record": rec}

    return job


def subgroups_job(column: str):
    """Set the subgroup column and give the shown model's performance within its groups."""
    def job(ws):
        ws.set_usefulness(subgroups=column)
        return {"kind": "subgroups", "column": column, "rows": ws.subgroup_table()}

    return job


def check_job(data_path: str, session_path: str | None, adapt: bool = False):
    """A saved model (the session's, or the shown one as saved) applied unchanged to a new data file (with
    ``adapt``, also how to adapt it to the file)."""
    def job(ws):
        from twofold.render.usefulness_figures import calibration_band_figure

        result = ws.check_on_file(data_path, session_file=session_path, adapt=adapt)
        band = result.record["assessment"].get("calibration_curve")
        png = None if not band else calibration_band_figure(band["risk"], band["observed"], band["low"],
                                                            band["high"])
        return {"kind": "check", "record": result.record, "source": result.source, "png": png}

    return job


def save_adapted_job(data_path: str, session_path: str | None, out_path: str):
    """The saved model adapted to a new data file, saved as a new session (the analysis is unchanged)."""
    def job(ws):
        return {"kind": "adapted", "reading": ws.save_adapted(data_path, out_path, session_file=session_path),
                "path": out_path}

    return job


def shrink_job(on: bool):
    """Use the shrunk model (``on``) or the model as fitted again; both can be undone."""
    def job(ws):
        change = ws.shrink() if on else ws.unshrink()
        return {**overview_job(ws), "kind": "shrink", "what": change.what}

    return job


# ---- wording of results (display only) ---------------------------------------------------------------
def check_text(record: dict, source: str) -> str:
    """What the check on a new file found, in the window's words."""
    from twofold.core.outputs.text import fmt_num

    a = record["assessment"]
    oe = a["observed_expected"]
    s_lo, s_hi = a["calibration_slope_ci"]
    i_lo, i_hi = a["calibration_intercept_ci"]
    lo, hi = a["auc_ci"]
    size = a["validation_sample_size"]
    lines = [
        f"The saved model was applied unchanged to {record['rows_used']:,} rows of {source} "
        f"({record['events']:,} events).",
        f"Observed / expected events: {fmt_num(oe['ratio'], 3)} (95% interval {fmt_num(oe['ci_low'], 3)} to "
        f"{fmt_num(oe['ci_high'], 3)}; {oe['observed']:,} observed, {fmt_num(oe['expected'], 1)} expected).",
        f"Calibration-in-the-large {fmt_num(a['calibration_intercept'], 3)} (95% interval {fmt_num(i_lo, 3)} to "
        f"{fmt_num(i_hi, 3)}; ideal 0). Calibration slope {fmt_num(a['calibration_slope'], 3)} (95% interval "
        f"{fmt_num(s_lo, 3)} to {fmt_num(s_hi, 3)}; ideal 1, below 1 means risks too extreme).",
        f"Integrated calibration index {fmt_num(a['ici'], 4)}, E50 {fmt_num(a['e50'], 4)}, E90 "
        f"{fmt_num(a['e90'], 4)} (distance between predicted and observed risk: mean, median, 90th centile).",
        f"Area under the ROC curve {fmt_num(a['auc'], 3)} (95% interval {fmt_num(lo, 3)} to {fmt_num(hi, 3)}); "
        f"Brier score {fmt_num(a['brier'], 4)}.",
    ]
    if size["n_required"] is None:
        lines.append("The rows such a validation needs could not be worked out on this file.")
    else:
        lines.append(f"Rows needed for precise figures (Riley et al. 2024): {size['n_required']:,}; this file has "
                     f"{size['n_available']:,}, so the requirement is "
                     + ("met." if size["met"] else "NOT met: read the figures as rough."))
    return "\n\n".join(lines)


def adaptation_text(record: dict) -> str:
    """How the closed test chose to adapt the model (the text account's lines, unindented)."""
    from twofold.core.outputs.text import adaptation_lines

    return "\n".join(line.strip() for line in adaptation_lines(record) if line)


def _number(x, digits: int = 4) -> str:
    from twofold.core.outputs.text import fmt_num

    return "" if x is None else fmt_num(float(x), digits)


# ---- the dialog -------------------------------------------------------------------------------------
class UsefulnessDialog(QDialog):
    """Is the model worth acting on, which units do worse than their case mix, and does it hold elsewhere?"""

    def __init__(self, session, parent=None):
        super().__init__(parent)
        self.session = session
        self.setWindowTitle("Usefulness and validation")
        self.setAccessibleName("Usefulness and validation")
        self.resize(900, 640)
        self.shown: dict[str, dict] = {}
        tabs = QTabWidget()
        tabs.setUsesScrollButtons(False)
        tabs.tabBar().setElideMode(Qt.TextElideMode.ElideNone)
        # Each tab names its help topic, so F1 there explains what it shows.
        for build, name, topic in ((self._build_decision, "Decision curve", "net_benefit"),
                                   (self._build_units, "Units", "funnel"),
                                   (self._build_subgroups, "Subgroups", "calibration"),
                                   (self._build_check, "Check on a new file", "new_file"),
                                   (self._build_shrink, "Shrinkage", "shrinkage")):
            page = build()
            page.setProperty("help_topic", topic)
            tabs.addTab(page, name)
        self.tabs = tabs
        tabs.currentChanged.connect(lambda _index: self.refresh())  # the lists and the offer follow the analysis
        self.status = plain(QLabel(""))
        self.status.setWordWrap(True)
        self.status.setAccessibleName("Status")
        lay = QVBoxLayout(self)
        lay.addWidget(tabs, 1)
        lay.addWidget(self.status)
        session.failed.connect(self._on_failed)
        from PySide6.QtGui import QKeySequence, QShortcut

        QShortcut(QKeySequence("F1"), self, activated=self.explain)
        self.refresh()

    def explain(self):
        """F1: the main window's "What does this mean?" at the topic of the tab shown."""
        from twofold.gui.help_ui import topic_of

        window = self.parent()
        if window is not None and hasattr(window, "explain"):
            return window.explain(topic_of(self.focusWidget()) or topic_of(self.tabs.currentWidget()))
        return None

    # ---- building
    @staticmethod
    def _picture(name: str) -> QLabel:
        pic = QLabel()
        pic.setAccessibleName(name)
        pic.setAlignment(Qt.AlignmentFlag.AlignCenter)
        return pic

    @staticmethod
    def _table(headers, name: str) -> QTableWidget:
        t = QTableWidget(0, len(headers))
        t.setHorizontalHeaderLabels(headers)
        t.setAccessibleName(name)
        t.setEditTriggers(QTableWidget.EditTrigger.NoEditTriggers)
        t.verticalHeader().setVisible(False)
        return t

    def _build_decision(self) -> QWidget:
        w = QWidget()
        form = QFormLayout()
        self.nb_low, self.nb_high, self.nb_step = QLineEdit("5"), QLineEdit("50"), QLineEdit("1")
        for edit, name in ((self.nb_low, "Lowest threshold risk (%)"), (self.nb_high, "Highest threshold risk (%)"),
                           (self.nb_step, "Step (%)")):
            edit.setAccessibleName(name)
            edit.setMaximumWidth(80)
        row = QHBoxLayout()
        for text, edit in (("from", self.nb_low), ("to", self.nb_high), ("in steps of", self.nb_step)):
            row.addWidget(QLabel(text))
            row.addWidget(edit)
        row.addWidget(QLabel("%"))
        row.addStretch(1)
        form.addRow("Threshold risks", row)
        self.second_combo = QComboBox()
        self.second_combo.setAccessibleName("Second model of the ladder")
        form.addRow("Compare with", self.second_combo)
        self.draw_button = QPushButton("Draw the decision curve")
        self.draw_button.clicked.connect(lambda _checked=False: self.draw_decision())
        self.decision_picture = self._picture("Decision curve")
        self.decision_reading = plain(QLabel("Net benefit of acting on the model's risks, beside treating everyone "
                                             "and treating no one."))
        self.decision_reading.setWordWrap(True)
        self.decision_reading.setAccessibleName("Reading of the decision curve")
        self.decision_table = self._table(["threshold", "this model", "corrected for optimism", "second model",
                                           "treat everyone"], "Net benefit at some thresholds")
        body = QHBoxLayout()
        body.addWidget(self.decision_picture, 3)
        body.addWidget(self.decision_table, 2)
        self.decision_table.setWordWrap(True)
        lay = QVBoxLayout(w)
        lay.addLayout(form)
        lay.addWidget(self.draw_button)
        lay.addLayout(body, 1)
        lay.addWidget(self.decision_reading)
        return w

    def _build_units(self) -> QWidget:
        w = QWidget()
        form = QFormLayout()
        self.unit_combo = QComboBox()
        self.unit_combo.setAccessibleName("Unit column")
        form.addRow("Unit column (ward, hospital, team)", self.unit_combo)
        self.units_button = QPushButton("Compare the units")
        self.units_button.clicked.connect(lambda _checked=False: self.compare_units())
        self.funnel_picture = self._picture("Funnel plot")
        self.units_table = self._table(["unit", "reading", "observed / expected", "95% interval", "people",
                                        "events", "expected"], "Units")
        self.units_note = plain(QLabel(""))
        self.units_note.setWordWrap(True)
        self.units_note.setAccessibleName("About the comparison of units")
        side = QVBoxLayout()
        side.addWidget(self.units_table, 1)
        side.addWidget(self.units_note)
        body = QHBoxLayout()
        body.addWidget(self.funnel_picture)
        body.addLayout(side, 1)
        lay = QVBoxLayout(w)
        lay.addLayout(form)
        lay.addWidget(self.units_button)
        lay.addLayout(body, 1)
        return w

    def _build_subgroups(self) -> QWidget:
        w = QWidget()
        form = QFormLayout()
        self.subgroup_combo = QComboBox()
        self.subgroup_combo.setAccessibleName("Subgroup column")
        form.addRow("Groups of (sex, age band, site)", self.subgroup_combo)
        self.subgroups_button = QPushButton("Show performance within the groups")
        self.subgroups_button.clicked.connect(lambda _checked=False: self.show_subgroups())
        self.subgroups_table = self._table(["group", "people", "area under the ROC curve", "95% interval",
                                            "calibration-in-the-large", "calibration slope", "note"],
                                           "Performance within groups")
        lay = QVBoxLayout(w)
        lay.addLayout(form)
        lay.addWidget(self.subgroups_button)
        lay.addWidget(self.subgroups_table, 1)
        return w

    def _build_check(self) -> QWidget:
        w = QWidget()
        self.use_shown = QRadioButton("The model shown (as it would be saved)")
        self.use_saved = QRadioButton("A saved session")
        self.use_shown.setChecked(True)
        self.session_edit = QLineEdit()
        self.session_edit.setAccessibleName("Session file")
        self.session_edit.setPlaceholderText("a session file saved by Twofold")
        pick_session = QPushButton("Choose\u2026")
        pick_session.clicked.connect(lambda _checked=False: self._choose(self.session_edit, "Session (*.json)"))
        self.data_edit = QLineEdit()
        self.data_edit.setAccessibleName("New data file")
        self.data_edit.setPlaceholderText("CSV, TSV or XLSX with the same columns")
        pick_data = QPushButton("Choose\u2026")
        pick_data.clicked.connect(lambda _checked=False: self._choose(
            self.data_edit, "Data files (*.csv *.tsv *.txt *.xlsx *.xlsm)"))
        form = QFormLayout()
        which = QHBoxLayout()
        which.addWidget(self.use_shown)
        which.addWidget(self.use_saved)
        which.addStretch(1)
        form.addRow("Model", which)
        s_row = QHBoxLayout()
        s_row.addWidget(self.session_edit, 1)
        s_row.addWidget(pick_session)
        form.addRow("Session", s_row)
        d_row = QHBoxLayout()
        d_row.addWidget(self.data_edit, 1)
        d_row.addWidget(pick_data)
        form.addRow("New data file", d_row)
        self.adapt_box = QCheckBox("Also work out how to adapt the model to this file (new intercept, new "
                                   "intercept and slope, or every coefficient re-estimated)")
        form.addRow("", self.adapt_box)
        self.check_button = QPushButton("Check the model on this file")
        self.check_button.clicked.connect(lambda _checked=False: self.check_file())
        self.adapted_edit = QLineEdit()
        self.adapted_edit.setAccessibleName("Save the adapted model as")
        self.adapted_edit.setPlaceholderText("a new session file for the adapted model")
        pick_out = QPushButton("Choose\u2026")
        pick_out.clicked.connect(lambda _checked=False: self._choose_out(self.adapted_edit))
        self.save_adapted_button = QPushButton("Save the adapted model")
        self.save_adapted_button.clicked.connect(lambda _checked=False: self.save_adapted())
        self.save_adapted_button.setEnabled(False)
        save_row = QHBoxLayout()
        save_row.addWidget(QLabel("Adapted model"))
        save_row.addWidget(self.adapted_edit, 1)
        save_row.addWidget(pick_out)
        save_row.addWidget(self.save_adapted_button)
        self.check_picture = self._picture("Calibration on the new file")
        self.check_text = plain(QLabel("The saved model is applied unchanged (no refitting) and its figures on "
                                       "the new records are shown here."))
        self.check_text.setWordWrap(True)
        self.check_text.setAccessibleName("Figures on the new file")
        self.check_text.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        self.check_text.setAlignment(Qt.AlignmentFlag.AlignTop | Qt.AlignmentFlag.AlignLeft)
        self.check_text.setMargin(6)
        scroll = QScrollArea()
        scroll.setWidgetResizable(True)
        scroll.setWidget(self.check_text)
        body = QHBoxLayout()
        body.addWidget(self.check_picture, 2)
        body.addWidget(scroll, 3)
        lay = QVBoxLayout(w)
        lay.addLayout(form)
        lay.addWidget(self.check_button)
        lay.addLayout(body, 1)
        lay.addLayout(save_row)
        return w

    def _build_shrink(self) -> QWidget:
        w = QWidget()
        self.shrink_text = plain(QLabel("Run a bootstrap validation (Model shape menu) first: shrinking uses the "
                                        "calibration slope it expects on new patients."))
        self.shrink_text.setWordWrap(True)
        self.shrink_text.setAccessibleName("Shrinkage")
        self.shrink_button = QPushButton("Use the shrunk model")
        self.shrink_button.clicked.connect(lambda _checked=False: self.shrink(True))
        self.unshrink_button = QPushButton("Use the model as fitted")
        self.unshrink_button.clicked.connect(lambda _checked=False: self.shrink(False))
        buttons = QHBoxLayout()
        buttons.addWidget(self.shrink_button)
        buttons.addWidget(self.unshrink_button)
        buttons.addStretch(1)
        lay = QVBoxLayout(w)
        lay.addWidget(self.shrink_text)
        lay.addLayout(buttons)
        lay.addStretch(1)
        return w

    def _choose_out(self, edit: QLineEdit) -> None:
        path, _ = QFileDialog.getSaveFileName(self, "Save the adapted model as", edit.text(), "Session (*.json)")
        if path:
            edit.setText(path)

    def _choose(self, edit: QLineEdit, pattern: str) -> None:
        path, _ = QFileDialog.getOpenFileName(self, "Choose a file", edit.text(), pattern)
        if path:
            edit.setText(path)

    # ---- requests
    def _ask(self, kind_text: str, job, done) -> int:
        self.status.setText(kind_text)
        return self.session.call("usefulness", job, done=done, facets=("history",))

    def refresh(self) -> int:
        """Fill the lists (ladder models, columns) and the shrinkage offer from the analysis."""
        return self.session.call("usefulness", overview_job, done=self._show_overview)

    def showEvent(self, event) -> None:  # noqa: N802 - Qt name
        self.refresh()
        super().showEvent(event)

    def draw_decision(self) -> int:
        try:
            low, high, step = (float(e.text().replace(",", ".")) / 100 for e in (self.nb_low, self.nb_high,
                                                                                   self.nb_step))
        except ValueError:
            self.status.setText("Write the thresholds as percentages, for example from 5 to 50 in steps of 1.")
            return 0
        second = self.second_combo.currentData()
        return self._ask("Drawing the decision curve\u2026", decision_job(low, high, step, second),
                         self._show_decision)

    def compare_units(self) -> int:
        column = self.unit_combo.currentData()
        if not column:
            self.status.setText("Choose the column naming each record's unit first.")
            return 0
        return self._ask("Comparing the units\u2026", units_job(column), self._show_units)

    def show_subgroups(self) -> int:
        column = self.subgroup_combo.currentData()
        if not column:
            self.status.setText("Choose the column whose groups to look at first.")
            return 0
        return self._ask("Working out the groups\u2026", subgroups_job(column), self._show_subgroups)

    def check_file(self) -> int:
        data = self.data_edit.text().strip()
        saved = self.session_edit.text().strip() if self.use_saved.isChecked() else None
        if not data:
            self.status.setText("Choose the new data file to check the model on.")
            return 0
        if self.use_saved.isChecked() and not saved:
            self.status.setText("Choose the session whose saved model to check, or tick 'The model shown'.")
            return 0
        self.save_adapted_button.setEnabled(False)
        return self._ask("Applying the saved model to the new file\u2026",
                         check_job(data, saved, self.adapt_box.isChecked()), self._show_check)

    def save_adapted(self) -> int:
        check = self.shown.get("check")
        out = self.adapted_edit.text().strip()
        if not check or "adaptation" not in check["record"]:
            self.status.setText("Check the model on the new file with 'Also work out how to adapt' ticked first.")
            return 0
        if not out:
            self.status.setText("Choose where to save the adapted model (a new session file).")
            return 0
        return self._ask("Saving the adapted model\u2026", save_adapted_job(check["data"], check["session"], out),
                         self._show_adapted)

    def shrink(self, on: bool) -> int:
        return self._ask("Shrinking the model\u2026" if on else "Going back to the model as fitted\u2026",
                         shrink_job(on), self._show_overview)

    # ---- answers
    def _on_failed(self, failure) -> None:
        if getattr(failure, "kind", "") == "usefulness":
            self.status.setText(failure.message)

    def _show_overview(self, payload) -> None:
        self.shown["overview"] = payload
        models, current = payload["models"], payload["current"]
        keep = self.second_combo.currentData()
        self.second_combo.clear()
        self.second_combo.addItem(NO_SECOND, None)
        for i, text in enumerate(models):
            if i != current:
                self.second_combo.addItem(f"Model {i + 1}: {text}", i)
        chosen = payload["usefulness"].get("compare_with", keep)
        at = self.second_combo.findData(chosen if chosen is not None else keep)
        self.second_combo.setCurrentIndex(max(at, 0))
        for combo, key, offered in ((self.unit_combo, "unit_column", payload["unit_columns"]),
                                    (self.subgroup_combo, "subgroups", payload["subgroup_columns"])):
            previous = combo.currentData() or payload["usefulness"].get(key)
            combo.clear()
            combo.addItem(CHOOSE_COLUMN if offered else NO_COLUMN, None)
            for name in offered:
                combo.addItem(name, name)
            combo.setCurrentIndex(max(combo.findData(previous), 0) if previous in offered else 0)
        setting = payload["usefulness"].get("net_benefit")
        if setting:
            for edit, value in zip((self.nb_low, self.nb_high, self.nb_step), setting):
                edit.setText(f"{100 * value:.4g}")
        offer, shrunk = payload["offer"], payload["shrunk"]
        if shrunk:
            self.shrink_text.setText("The shrunk model is in use: predictions, saved sessions and reports "
                                     "use it. Undo (Ctrl+Z) or the button below goes back.")
        elif offer:
            self.shrink_text.setText(offer)
        else:
            self.shrink_text.setText("No shrinking is offered: it needs a bootstrap validation of the model shown "
                                     "(Model shape menu) whose corrected calibration slope is below 1.")
        self.shrink_button.setEnabled(bool(offer) and not shrunk)
        self.unshrink_button.setEnabled(bool(shrunk))
        if payload.get("what"):
            self.status.setText(payload["what"])
        elif self.status.text().endswith("\u2026"):
            self.status.setText("")

    def _fill(self, table: QTableWidget, rows) -> None:
        table.setRowCount(len(rows))
        for r, row in enumerate(rows):
            for c, text in enumerate(row):
                table.setItem(r, c, QTableWidgetItem(str(text)))
        table.resizeColumnsToContents()
        table.horizontalHeader().setStretchLastSection(True)
        table.setWordWrap(True)
        table.resizeRowsToContents()

    @staticmethod
    def _set_png(label: QLabel, png) -> None:
        pix = QPixmap()
        if png:
            pix.loadFromData(png, "PNG")
        label.setPixmap(pix)
        label.setMinimumSize(pix.size())  # the whole figure, never cropped; the table beside it gives way

    def _show_decision(self, payload) -> None:
        self.shown["decision"] = payload
        self._set_png(self.decision_picture, payload["png"])
        rows = [[t, _number(m), _number(c) if payload["corrected"] else "not run",
                 _number(o) if payload["other_label"] else "", _number(a)] for t, m, c, o, a in payload["rows"]]
        self.decision_table.setHorizontalHeaderItem(3, QTableWidgetItem(payload["other_label"] or "second model"))
        self._fill(self.decision_table, rows)
        self.decision_table.setColumnHidden(2, not payload["corrected"])
        self.decision_table.setColumnHidden(3, not payload["other_label"])
        self.decision_reading.setText(payload["reading"])
        self.status.setText("Decision curve drawn for the model shown.")

    def _show_units(self, payload) -> None:
        from twofold.core.outputs.text import fmt_num, fmt_p

        self.shown["units"] = payload
        rec = payload["record"]
        self._set_png(self.funnel_picture, payload["png"])
        self._fill(self.units_table, [[u["unit"], u["verdict"], fmt_num(u["ratio"], 3),
                                       f"{fmt_num(u['ci_low'], 3)} to {fmt_num(u['ci_high'], 3)}", f"{u['rows']:,}",
                                       f"{u['observed']:,}", fmt_num(u["expected"], 1)] for u in rec["units"]])
        od = rec["overdispersion"]
        spread = (f"More spread between units than chance gives: p-value {fmt_p(od['p_value'])}; "
                  + (f"the limits are widened by a factor of {fmt_num(od['factor'], 2)}." if od["present"]
                     else "the limits are not widened."))
        self.units_note.setText(spread + "\n" + rec["caution"])
        self.status.setText(f"{len(rec['units'])} units of '{rec['unit_column']}' compared.")

    def _show_subgroups(self, payload) -> None:
        self.shown["subgroups"] = payload

        def ci(pair):
            return "" if pair[0] is None else f"{_number(pair[0], 3)} to {_number(pair[1], 3)}"

        self._fill(self.subgroups_table, [
            [g["group"], "suppressed" if g["rows"] is None else f"{g['rows']:,}", _number(g["auc"], 3),
             ci(g["auc_ci"]), _number(g["calibration_intercept"], 3), _number(g["calibration_slope"], 3),
             g["note"] or ""] for g in payload["rows"]])
        self.status.setText(f"Performance within the groups of '{payload['column']}'.")

    def _show_check(self, payload) -> None:
        record = payload["record"]
        self.shown["check"] = {**payload, "data": self.data_edit.text().strip(),
                               "session": self.session_edit.text().strip() if self.use_saved.isChecked() else None}
        self._set_png(self.check_picture, payload["png"])
        text = check_text(record, payload["source"])
        summary = record.get("net_benefit_summary")
        if summary:
            text += "\n\nOn these records: " + summary["reading"]
        if "adaptation" in record:
            text += "\n\n" + adaptation_text(record)
        self.check_text.setText(text)
        self.save_adapted_button.setEnabled("adaptation" in record)
        self.status.setText("The saved model was checked on the new file; nothing in the analysis changed.")

    def _show_adapted(self, payload) -> None:
        self.shown["adapted"] = payload
        self.status.setText(f"The adapted model was saved as {payload['path']} (for predictions and checks); "
                            "the analysis shown is unchanged.")
