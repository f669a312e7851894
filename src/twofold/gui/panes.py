"""The window's panes: data, model building, results and the model ladder.

Each pane receives the :class:`~twofold.gui.session.Session` in its
constructor, subscribes to its signals and blocks its own widgets' signals
(:class:`QSignalBlocker`) while it updates them, so a display update never
echoes back as a new request.
"""

from __future__ import annotations

from html import escape as esc

from PySide6.QtCore import QSignalBlocker, Qt, Signal
from PySide6.QtGui import QAction, QFontMetrics, QImage, QPixmap
from PySide6.QtWidgets import (
    QAbstractItemView, QCheckBox, QComboBox, QDialog, QDoubleSpinBox, QFormLayout, QFrame, QGridLayout, QGroupBox, QHBoxLayout, QHeaderView, QLabel,
    QListWidget, QListWidgetItem, QMenu, QProgressBar, QPushButton, QScrollArea, QSizePolicy, QSpinBox, QSplitter,
    QTableView, QTableWidget, QTableWidgetItem, QVBoxLayout, QWidget,
)

from twofold.core.data.tidy import plural
from twofold.gui import style
from twofold.gui.help_ui import link
from twofold.gui.tables import CellsModel, CoefficientModel, ColumnsModel, LadderModel
from twofold.gui.views import CAUTION, ROLE_LABELS


def _heading(text: str, parent: QWidget) -> QLabel:
    label = style.plain(QLabel(text, parent))
    label.setFont(style.scaled_font(parent, 1.2, bold=True))
    label.setAccessibleName(text)
    return label


def _wrapped(text: str = "", accessible: str = "", rich: bool = False) -> QLabel:
    """A wrapped, selectable label: plain text, or with ``rich`` text whose parts from data are escaped."""
    label = QLabel(text)
    label.setTextFormat(Qt.TextFormat.RichText if rich else Qt.TextFormat.PlainText)
    label.setWordWrap(True)
    label.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse
                                  | Qt.TextInteractionFlag.TextSelectableByKeyboard)
    if accessible:
        label.setAccessibleName(accessible)
    return label



#: Item data of the predictor list: the parts (a, b) of an interaction item, None for a column.
PartsRole = Qt.ItemDataRole.UserRole + 1


def interaction_parts(name: str, columns=()):
    """``(a, b)`` for an interaction name "a:b" (not itself a column name), else None (GUI side, no core)."""
    if ":" not in name or name in columns:
        return None
    a, b = name.split(":", 1)
    return a.strip(), b.strip()


def _compact_table(view: QTableView) -> None:
    """Row heights from the font, fixed: the table never measures every row."""
    vh = view.verticalHeader()
    vh.setSectionResizeMode(QHeaderView.ResizeMode.Fixed)
    vh.setDefaultSectionSize(view.fontMetrics().height() + 8)
    view.setWordWrap(False)
    view.setAlternatingRowColors(True)
    view.setTabKeyNavigation(False)  # Tab leaves the table; arrows move inside it


def _help(widget, key: str) -> None:
    """Give a result widget its "What does this mean?" topic: F1 on it, and a link when it shows rich text."""
    widget.setProperty("help_topic", key)
    widget.setFocusPolicy(Qt.FocusPolicy.StrongFocus if isinstance(widget, QLabel) else widget.focusPolicy())
    if isinstance(widget, QLabel):
        widget.setTextInteractionFlags(widget.textInteractionFlags() | Qt.TextInteractionFlag.LinksAccessibleByMouse
                                       | Qt.TextInteractionFlag.LinksAccessibleByKeyboard)
        widget.linkActivated.connect(lambda href, w=widget: _open_help(w, href))


def _open_help(widget, href: str) -> None:
    if href.startswith("help:"):
        window = widget.window()
        if hasattr(window, "explain"):
            window.explain(href[len("help:"):])


def ask_missing_values(parent, column: str, current) -> list | None:
    """Ask which values of ``column`` mean missing; None if cancelled (tests replace this function)."""
    from PySide6.QtWidgets import QInputDialog

    text, ok = QInputDialog.getText(
        parent, "Values that mean missing",
        f"Values of '{column}' that mean the value is not known, separated by semicolons\n"
        "(for example: unknown; not recorded; 999). Leave empty to treat every value as given.",
        text="; ".join(current))
    if not ok:
        return None
    return [v.strip() for v in text.split(";") if v.strip()]


class Picture(QLabel):
    """A drawn figure that shrinks with the pane (keeping its proportions) and never widens it."""

    def __init__(self, parent=None):
        super().__init__(parent)
        self._picture = QPixmap()
        # Its own width when there is room, down to 160 pixels when there is not; never more than its own width.
        # (An "ignored" width let the layout give it none at all: the figures were laid out 0 pixels wide.)
        policy = QSizePolicy(QSizePolicy.Policy.Preferred, QSizePolicy.Policy.Preferred)
        policy.setHeightForWidth(True)
        self.setSizePolicy(policy)

    def set_picture(self, pixmap: QPixmap) -> None:
        self._picture = pixmap
        self._rescale()
        self.updateGeometry()

    def hasHeightForWidth(self) -> bool:
        return not self._picture.isNull()

    def heightForWidth(self, width: int) -> int:
        pm = self._picture
        return int(pm.height() * min(width, pm.width()) / max(pm.width(), 1))

    def sizeHint(self):
        return self._picture.size() if not self._picture.isNull() else super().sizeHint()

    def minimumSizeHint(self):
        from PySide6.QtCore import QSize

        return QSize(160, self.heightForWidth(160) if not self._picture.isNull() else 0)

    def resizeEvent(self, event) -> None:
        super().resizeEvent(event)
        self._rescale()

    def _rescale(self) -> None:
        pm = self._picture
        if pm.isNull():
            self.setPixmap(QPixmap())
            return
        width = min(self.width(), pm.width())
        if not self.isVisible() or width < 16:  # not laid out yet: the whole picture until it is
            width = pm.width()
        self.setPixmap(pm if width == pm.width() else
                       pm.scaledToWidth(width, Qt.TransformationMode.SmoothTransformation))


def _pixmap(figure) -> QPixmap:
    """A drawn figure on screen, from its pixels (a Raster, as the assessment sends them); empty for None."""
    if figure is None:
        return QPixmap()
    image = QImage(figure.rgba, figure.width, figure.height, 4 * figure.width, QImage.Format.Format_RGBA8888)
    return QPixmap.fromImage(image)  # a copy: the image's buffer need not outlive it


# ---------------------------------------------------------------------------
class DataPane(QWidget):
    """The loaded rows and the list of columns with their roles."""

    openRequested = Signal()
    sampleRequested = Signal()

    def __init__(self, session, parent=None):
        super().__init__(parent)
        self.session = session
        self.study = None
        self.setAccessibleName("Data pane")
        layout = QVBoxLayout(self)
        layout.addWidget(_heading("Data", self))
        self.source = _wrapped("No data file is open.", "Data file")
        layout.addWidget(self.source)

        # First use: say how to start.
        self.welcome = QFrame()
        w = QVBoxLayout(self.welcome)
        w.addWidget(_wrapped(
            "Open a data file (CSV, TSV or Excel) with one row per patient or episode and one column "
            "per item, or drop one onto this window. The file is only read, never changed.",
            "How to start"))
        row = QHBoxLayout()
        self.open_button = QPushButton("&Open a data file\u2026")
        self.open_button.setAccessibleName("Open a data file")
        self.open_button.clicked.connect(self.openRequested)
        self.sample_button = QPushButton("Open a &sample study\u2026")
        self.sample_button.setAccessibleName("Open a sample study")
        self.sample_button.clicked.connect(self.sampleRequested)
        row.addWidget(self.open_button)
        row.addWidget(self.sample_button)
        row.addStretch(1)
        w.addLayout(row)
        w.addStretch(1)
        layout.addWidget(self.welcome)

        self.notices = style.Banner("information", colour=style.SKY_BLUE, accessible_name="Note about the file")
        self.notices.hide()
        layout.addWidget(self.notices)

        split = QSplitter(Qt.Orientation.Vertical)
        self.cells = CellsModel(self)
        self.table = QTableView()
        self.table.setModel(self.cells)
        self.table.setAccessibleName("Data rows")
        self.table.setAccessibleDescription("The rows of the loaded file; missing cells read 'missing'.")
        _compact_table(self.table)
        self.table.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeMode.Interactive)
        self.table.setVerticalScrollMode(QAbstractItemView.ScrollMode.ScrollPerPixel)
        self.measured_columns = set()
        self.table.horizontalScrollBar().valueChanged.connect(self._measure_columns_in_view)
        self.table.setHorizontalScrollMode(QAbstractItemView.ScrollMode.ScrollPerPixel)
        split.addWidget(self.table)

        box = QGroupBox("Columns and how each is used")
        box.setAccessibleName("Columns and how each is used")
        b = QVBoxLayout(box)
        self.columns_model = ColumnsModel(self)
        self.columns = QTableView()
        self.columns.setModel(self.columns_model)
        self.columns.setAccessibleName("Column list")
        self.columns.setAccessibleDescription("Each column with its role, distinct values, missing cells "
                                              "and reference group; the menu (right click or menu key) changes them.")
        _compact_table(self.columns)
        self.columns.setSelectionBehavior(QAbstractItemView.SelectionBehavior.SelectRows)
        self.columns.setSelectionMode(QAbstractItemView.SelectionMode.SingleSelection)
        self.columns.horizontalHeader().setStretchLastSection(True)
        self.columns.setContextMenuPolicy(Qt.ContextMenuPolicy.CustomContextMenu)
        self.columns.customContextMenuRequested.connect(self._column_menu)
        self.columns.selectionModel().currentRowChanged.connect(lambda *a: self._show_selected())
        b.addWidget(self.columns, 1)
        form = QFormLayout()
        form.setFieldGrowthPolicy(QFormLayout.FieldGrowthPolicy.AllNonFixedFieldsGrow)
        self.role_combo = QComboBox()
        self.role_combo.setAccessibleName("Use the selected column as")
        self.role_combo.activated.connect(self._role_chosen)
        role_label = QLabel("&Use the selected column as:")
        role_label.setBuddy(self.role_combo)
        form.addRow(role_label, self.role_combo)
        self.reference_combo = QComboBox()
        self.reference_combo.setAccessibleName("Reference group of the selected column")
        self.reference_combo.activated.connect(self._reference_chosen)
        ref_label = QLabel("&Reference group:")
        ref_label.setBuddy(self.reference_combo)
        form.addRow(ref_label, self.reference_combo)
        self.missing_button = QPushButton("Values that mean &missing\u2026")
        self.missing_button.setAccessibleName("Values of the selected column that mean missing")
        self.missing_button.setToolTip("Mark values such as 'unknown', 'not recorded', 999 or -1 as missing: "
                                       "those records are then left out where the column is used, and counted.")
        self.missing_button.clicked.connect(lambda _=False: self._ask_missing())
        form.addRow(self.missing_button)  # across both columns: it must not widen the pane
        b.addLayout(form)
        self.reason = _wrapped("", "Why the column has this role")
        self.reason.setTextFormat(Qt.TextFormat.PlainText)  # names and values come from the data file
        b.addWidget(self.reason)
        split.addWidget(box)
        split.setStretchFactor(0, 3)
        split.setStretchFactor(1, 2)
        self.split = split
        split.hide()
        layout.addWidget(split, 1)
        self._set_form_enabled(False)

        session.studyLoaded.connect(self._on_study)
        session.columnsChanged.connect(self._on_columns)
        session.outcomeChanged.connect(self._on_outcome)

    # ---- updates from the session ----------------------------------------
    def _on_study(self, view) -> None:
        self.study = view
        self.welcome.hide()
        self.split.show()
        self.source.setText(f"{view.source}: {view.n_rows:,} rows, {len(view.columns)} columns "
                            f"(read only; the file is never changed)")
        self.cells.set_study(view)
        self._fit_column_widths()
        if view.notices:
            self.notices.setText(" ".join(view.notices))
            self.notices.show()
        else:
            self.notices.hide()
        self._on_columns(view)
        if self.columns_model.rowCount():
            self.columns.selectRow(0)

    def _fit_column_widths(self) -> None:
        """Column widths from the header and the first rows only (never every row), measured lazily: the
        columns in view now, the others as they are scrolled into view (a file of 50,000 columns would
        otherwise hold the window while every one is measured)."""
        self.measured_columns: set = set()
        self.table.horizontalHeader().setDefaultSectionSize(self.table.fontMetrics().horizontalAdvance("x") * 12)
        self._measure_columns_in_view()

    def _measure_columns_in_view(self, *_args) -> None:
        count = self.cells.columnCount()
        if not count:
            return
        header = self.table.horizontalHeader()
        first = max(header.logicalIndexAt(0), 0)
        last = header.logicalIndexAt(max(self.table.viewport().width() - 1, 0))
        last = min(count - 1, (last if last >= 0 else first + 40) + 2)
        fm = self.table.fontMetrics()
        pad = 24
        shown = min(self.cells.rowCount(), 60)
        for c in range(first, last + 1):
            if c in self.measured_columns:
                continue
            self.measured_columns.add(c)
            texts = [self.cells.headerData(c, Qt.Orientation.Horizontal)]
            texts += [self.cells.data(self.cells.index(r, c)) for r in range(shown)]
            width = max(fm.horizontalAdvance(str(t)) for t in texts) + pad
            self.table.setColumnWidth(c, min(width, fm.horizontalAdvance("x") * 40))

    def _on_columns(self, view) -> None:
        current = self.selected_column()
        self.study = view
        self.columns_model.set_columns(view.columns, view.outcome)
        self.columns.resizeColumnsToContents()
        if current is not None:
            for r, c in enumerate(view.columns):
                if c.name == current:
                    with QSignalBlocker(self.columns.selectionModel()):
                        self.columns.selectRow(r)
        self._show_selected()

    def _on_outcome(self, view) -> None:
        self.columns_model.set_columns(self.columns_model.columns, view.outcome)
        self._show_selected()

    # ---- the selected column ---------------------------------------------------
    def selected_column(self):
        idx = self.columns.currentIndex()
        if not idx.isValid() or idx.row() >= len(self.columns_model.columns):
            return None
        return self.columns_model.columns[idx.row()].name

    def _column_view(self, name):
        for c in self.columns_model.columns:
            if c.name == name:
                return c
        return None

    def _set_form_enabled(self, on: bool) -> None:
        self.role_combo.setEnabled(on)
        self.reference_combo.setEnabled(on)
        self.missing_button.setEnabled(on)

    def _ask_missing(self) -> int | None:
        c = self._column_view(self.selected_column())
        if c is None:
            return None
        values = ask_missing_values(self, c.name, c.missing_values)
        if values is None or tuple(values) == tuple(c.missing_values):
            return None
        return self.session.set_missing(c.name, values)

    def _show_selected(self) -> None:
        c = self._column_view(self.selected_column())
        with QSignalBlocker(self.role_combo), QSignalBlocker(self.reference_combo):
            self.role_combo.clear()
            self.reference_combo.clear()
            if c is None:
                self._set_form_enabled(False)
                self.reason.setText("")
                return
            for value, label in c.role_choices:
                self.role_combo.addItem(label, value)
            self.role_combo.setCurrentIndex(max(0, self.role_combo.findData(c.role)))
            self.role_combo.setEnabled(c.name != self.columns_model.outcome)
            self.missing_button.setEnabled(True)
            if c.is_factor:
                for raw, label, n in zip(c.levels, c.level_labels, c.counts or [None] * len(c.levels)):
                    self.reference_combo.addItem(f"{label} ({plural(n, 'row')})" if n is not None else label, raw)
                self.reference_combo.setCurrentIndex(max(0, c.level_labels.index(c.reference_label)
                                                         if c.reference_label in c.level_labels else 0))
            self.reference_combo.setEnabled(c.is_factor)
            if c.name == self.columns_model.outcome:
                why = f"'{c.name}' is the outcome; choose another outcome to change its role."
            elif c.role == c.inferred_role:
                why = f"'{c.name}' is used as {c.role_label} ({c.reason})."
            else:
                suggested = ROLE_LABELS.get(c.inferred_role, c.inferred_role)
                why = f"'{c.name}' is used as {c.role_label} (your choice; Twofold suggested {suggested})."
            if c.missing_values:
                why += " Counted as missing: " + ", ".join(repr(v) for v in c.missing_values) + "."
            self.reason.setText(why)

    def _role_chosen(self, i: int) -> None:
        name = self.selected_column()
        role = self.role_combo.itemData(i)
        c = self._column_view(name)
        if name is None or role is None or c is None or role == c.role:
            return
        self.session.set_role(name, role, self.session_predictors())

    def _reference_chosen(self, i: int) -> None:
        name = self.selected_column()
        c = self._column_view(name)
        if name is None or c is None or not c.is_factor:
            return
        level = self.reference_combo.itemData(i)
        if c.level_labels[i] == c.reference_label:
            return
        self.session.set_reference(name, level)

    def session_predictors(self) -> tuple:
        return getattr(self.session, "predictors", ())

    def _column_menu(self, pos) -> None:
        idx = self.columns.indexAt(pos)
        if idx.isValid():
            self.columns.selectRow(idx.row())
        c = self._column_view(self.selected_column())
        if c is None or c.name == self.columns_model.outcome:
            return
        menu = QMenu(self)
        for value, label in c.role_choices:
            act = QAction(f"Use as {label}", menu)
            act.setCheckable(True)
            act.setChecked(value == c.role)
            act.triggered.connect(lambda _=False, v=value: v != c.role and
                                  self.session.set_role(c.name, v, self.session_predictors()))
            menu.addAction(act)
        if c.is_factor:
            sub = menu.addMenu("Reference group")
            for raw, label in zip(c.levels, c.level_labels):
                act = QAction(label, sub)
                act.setCheckable(True)
                act.setChecked(label == c.reference_label)
                act.triggered.connect(lambda _=False, v=raw: self.session.set_reference(c.name, v))
                sub.addAction(act)
        menu.exec(self.columns.viewport().mapToGlobal(pos))


# ---------------------------------------------------------------------------
class SideBySideDialog(QDialog):
    """The shown model's pooled odds ratios beside its complete-rows ones (display only)."""

    def __init__(self, payload: dict, parent=None):
        super().__init__(parent)
        self.setWindowTitle("Imputed beside complete rows")
        self.title = QLabel(payload["title"])
        self.title.setTextFormat(Qt.TextFormat.PlainText)
        self.title.setWordWrap(True)
        self.table = QTableWidget(len(payload["rows"]), len(payload["headers"]))
        self.table.setHorizontalHeaderLabels(list(payload["headers"]))
        self.table.setAccessibleName("Odds ratios, imputed and pooled beside complete rows only")
        for r, row in enumerate(payload["rows"]):
            for c, text in enumerate(row):
                self.table.setItem(r, c, QTableWidgetItem(text))
        self.table.resizeColumnsToContents()
        lay = QVBoxLayout(self)
        lay.addWidget(self.title)
        lay.addWidget(self.table, 1)
        self.resize(1000, 360)


class ModelPane(QWidget):
    """Choose the outcome and its event value, and tick the predictors."""

    ticked = Signal(tuple)

    def __init__(self, session, parent=None):
        super().__init__(parent)
        self.session = session
        self.study = None
        self.outcome = None
        self.outcome_view = None
        self.last_request: int | None = None
        #: Interactions met in this study's models ("a:b"), kept in the list to tick again.
        self.interactions: list[str] = []
        self.setAccessibleName("Model-building pane")
        layout = QVBoxLayout(self)
        layout.addWidget(_heading("Model", self))
        layout.addWidget(_wrapped("A logistic model of a yes/no outcome. Every tick or untick refits the model "
                                  "at once and adds it to the model ladder.", "About this pane"))
        form = QFormLayout()
        form.setFieldGrowthPolicy(QFormLayout.FieldGrowthPolicy.AllNonFixedFieldsGrow)
        self.outcome_combo = QComboBox()
        self.outcome_combo.setAccessibleName("Outcome column")
        self.outcome_combo.activated.connect(self._outcome_chosen)
        label = QLabel("Out&come:")
        label.setBuddy(self.outcome_combo)
        form.addRow(label, self.outcome_combo)
        self.event_combo = QComboBox()
        self.event_combo.setAccessibleName("Value of the outcome counted as the event")
        self.event_combo.activated.connect(self._event_chosen)
        label = QLabel("&Event value:")
        label.setBuddy(self.event_combo)
        label.setToolTip("The outcome value whose odds the model describes (for example 'yes' or 1).")
        form.addRow(label, self.event_combo)
        self._missing_values_row(form)
        layout.addLayout(form)
        self.outcome_note = _wrapped("", "Outcome note")
        layout.addWidget(self.outcome_note)

        label = QLabel("&Predictors (tick to add, untick to remove):")
        layout.addWidget(label)
        self.list = QListWidget()
        # Eight predictors in sight at once on a small screen.
        self.list.setMinimumHeight(8 * (self.list.fontMetrics().height() + 4) + 2 * self.list.frameWidth())
        self.list.setAccessibleName("Candidate predictors")
        self.list.setAccessibleDescription("Tick a predictor with the space bar to add it to the model.")
        self.list.itemChanged.connect(self._item_changed)
        label.setBuddy(self.list)
        layout.addWidget(self.list, 1)
        row = QHBoxLayout()
        self.clear_button = QPushButton("U&ntick all")
        self.clear_button.setAccessibleName("Untick all predictors")
        self.clear_button.clicked.connect(self.untick_all)
        row.addWidget(self.clear_button)
        row.addStretch(1)
        layout.addLayout(row)
        self.counts = _wrapped("", "Rows used and events")
        layout.addWidget(self.counts)
        self._set_enabled(False)

        session.studyLoaded.connect(self._on_study)
        session.columnsChanged.connect(self._on_columns)
        session.outcomeChanged.connect(self._on_outcome)
        session.resultsChanged.connect(self._on_results)
        session.failed.connect(self._on_failed)
        session.loadStarted.connect(lambda path: self._set_enabled(False))

    def _missing_values_row(self, form) -> None:
        """Leave incomplete rows out, or fill in their missing values by multiple imputation (copies and seed)."""
        self.missing_combo = QComboBox()
        self.missing_combo.addItems(["leave out incomplete rows", "fill in by multiple imputation"])
        self.missing_combo.setAccessibleName("Missing values")
        self.missing_combo.setToolTip("Leave out rows missing a predictor, or fill in the missing values by "
                                      "multiple imputation and pool every result over the imputed copies.")
        self.missing_combo.activated.connect(self._imputation_chosen)
        # As narrow as the outcome's list: the results pane keeps its room on a laptop.
        self.missing_combo.setSizeAdjustPolicy(QComboBox.SizeAdjustPolicy.AdjustToMinimumContentsLengthWithIcon)
        self.missing_combo.setMinimumContentsLength(12)
        settings = QHBoxLayout()  # on a line of their own, so the pane stays narrow on a laptop
        self.copies_spin = QSpinBox()
        self.copies_spin.setRange(2, 100)
        self.copies_spin.setValue(20)
        self.copies_spin.setPrefix("copies ")
        self.copies_spin.setAccessibleName("Imputed copies")
        self.seed_spin = QSpinBox()
        self.seed_spin.setRange(0, 999_999)
        self.seed_spin.setValue(1)
        self.seed_spin.setPrefix("seed ")
        self.seed_spin.setAccessibleName("Seed of the imputations")
        for spin in (self.copies_spin, self.seed_spin):
            spin.editingFinished.connect(self._imputation_settings_changed)
            settings.addWidget(spin)
        self.anyway_check = QCheckBox("impute anyway")
        self.anyway_check.setAccessibleName("Impute columns missing in more than half the rows")
        self.anyway_check.setToolTip("Also impute a column missing in more than half the rows with an outcome.")
        settings.addStretch(1)
        label = QLabel("Missing &values:")
        label.setBuddy(self.missing_combo)
        form.addRow(label, self.missing_combo)
        form.addRow("", settings)
        self.impute_bar = QProgressBar()
        self.impute_bar.setRange(0, 100)
        self.impute_bar.setAccessibleName("Imputed copies made")
        self.impute_stop = QPushButton("Stop imputing")
        self.impute_stop.setAccessibleName("Stop making the imputed copies")
        self.impute_stop.clicked.connect(self._stop_imputing)
        self.side_button = QPushButton("Beside comple&te rows\u2026")
        self.side_button.setAccessibleName("Show the imputed results beside the complete rows'")
        self.side_button.setToolTip("The model shown, pooled over the imputed copies, beside its fit on complete "
                                    "rows only (reviewers ask for both).")
        self.side_button.clicked.connect(self._show_side_by_side)
        self.side_button.setEnabled(False)
        form.addRow("", self.anyway_check)
        form.addRow("", self.side_button)
        progress = QHBoxLayout()
        progress.addWidget(self.impute_bar, 1)
        progress.addWidget(self.impute_stop)
        self.impute_progress = QWidget()
        self.impute_progress.setLayout(progress)
        progress.setContentsMargins(0, 0, 0, 0)
        self.impute_progress.hide()
        form.addRow("", self.impute_progress)
        self.impute_request: int | None = None
        self.session.imputeProgress.connect(lambda f: self.impute_bar.setValue(int(round(100 * f))))
        self.session.requestFinished.connect(self._imputation_finished)
        self.session.failed.connect(self._imputation_failed)
        self._imputing = self._wanted = False  # what the analysis does, and what was last asked

    def _imputation_chosen(self, i: int) -> None:
        on = i == 1
        self._wanted = on
        self.impute_bar.setValue(0)
        self.impute_progress.setVisible(on)
        self.impute_request = self.session.set_imputation(self.copies_spin.value() if on else None,
                                                          self.seed_spin.value(), self.anyway_check.isChecked())

    def _imputation_settings_changed(self) -> None:
        if self.missing_combo.currentIndex() == 1 and self.impute_request is None:
            self._imputation_chosen(1)

    def _show_side_by_side(self) -> None:
        from twofold.gui import present

        self.session.call("side by side", present.side_by_side, done=self._side_by_side_ready)

    def _side_by_side_ready(self, payload) -> None:
        self.side_dialog = SideBySideDialog(payload, self)
        self.side_dialog.show()

    def _stop_imputing(self) -> None:
        self.session.cancel_imputation()

    def _imputation_finished(self, job_id: int) -> None:
        if job_id != self.impute_request:
            return
        self.impute_request = None
        self.impute_progress.hide()
        self._imputing = self._wanted
        self.side_button.setEnabled(self._imputing)

    def _imputation_failed(self, failure) -> None:
        if failure.kind != "imputation":
            return
        # A refused or stopped imputation leaves the analysis as it was: so does the choice shown.
        self._wanted = self._imputing
        with QSignalBlocker(self.missing_combo):
            self.missing_combo.setCurrentIndex(1 if self._imputing else 0)

    # ---- reading the widgets ---------------------------------------------
    def ticked_predictors(self) -> tuple:
        out = []
        for i in range(self.list.count()):
            item = self.list.item(i)
            if item.checkState() == Qt.CheckState.Checked:
                out.append(item.data(Qt.ItemDataRole.UserRole))
        return tuple(out)

    def set_ticked(self, names) -> int | None:
        """Tick exactly these predictors (as a user would) and ask for the fit; returns the request id."""
        names = set(names)
        with QSignalBlocker(self.list):
            for i in range(self.list.count()):
                item = self.list.item(i)
                want = item.data(Qt.ItemDataRole.UserRole) in names
                item.setCheckState(Qt.CheckState.Checked if want else Qt.CheckState.Unchecked)
        return self._request()

    def toggle(self, name: str) -> int | None:
        """Tick or untick one predictor, as a click would."""
        for i in range(self.list.count()):
            item = self.list.item(i)
            if item.data(Qt.ItemDataRole.UserRole) == name:
                on = item.checkState() != Qt.CheckState.Checked
                item.setCheckState(Qt.CheckState.Checked if on else Qt.CheckState.Unchecked)
                return self.last_request
        return None

    def untick_all(self) -> None:
        self.set_ticked(())

    def _item_changed(self, item) -> None:
        """An interaction needs both its predictors: ticking it ticks them, unticking one unticks it."""
        on = item.checkState() == Qt.CheckState.Checked
        parts = item.data(PartsRole)
        with QSignalBlocker(self.list):
            for i in range(self.list.count()):
                other = self.list.item(i)
                name, other_parts = other.data(Qt.ItemDataRole.UserRole), other.data(PartsRole)
                if on and parts and name in parts:
                    other.setCheckState(Qt.CheckState.Checked)
                elif not on and not parts and other_parts and item.data(Qt.ItemDataRole.UserRole) in other_parts:
                    other.setCheckState(Qt.CheckState.Unchecked)
        self._request()

    def _request(self) -> int | None:
        if not self.list.isEnabled():
            # No outcome yet, or another file is opening: a tick now would be misread; undo it.
            view = self.session.last_results
            self._sync_ticks(view.predictors if view is not None else ())
            self.last_request = None
            return None
        names = self.ticked_predictors()
        self.session.predictors = names
        self.last_request = self.session.set_predictors(names)
        self.ticked.emit(names)
        return self.last_request

    # ---- outcome ---------------------------------------------------------------
    def choose_outcome(self, name, event=None) -> int:
        """Choose the outcome (and optionally the event value) as the combo boxes would."""
        i = self.outcome_combo.findData(name)
        if i >= 0:
            with QSignalBlocker(self.outcome_combo):
                self.outcome_combo.setCurrentIndex(i)
        guess = event is None
        return self.session.set_outcome(name, event, guess=guess, predictors=self.ticked_predictors())

    def _outcome_chosen(self, i: int) -> None:
        name = self.outcome_combo.itemData(i)
        if name is None:  # the "Choose the outcome" line: keep the outcome in force
            with QSignalBlocker(self.outcome_combo):
                self.outcome_combo.setCurrentIndex(max(0, self.outcome_combo.findData(self.outcome)))
            return
        if name == self.outcome:
            return
        self.session.set_outcome(name, None, guess=True, predictors=self.ticked_predictors())

    def _event_chosen(self, i: int) -> None:
        level = self.event_combo.itemData(i)
        if i < 0 or self.outcome is None or self.event_combo.itemText(i).startswith("Choose"):
            return
        self.session.set_outcome(self.outcome, level, guess=False, predictors=self.ticked_predictors())

    # ---- updates from the session -----------------------------------------------
    def _set_enabled(self, on: bool) -> None:
        self.list.setEnabled(on)
        self.clear_button.setEnabled(on)
        for w in (self.missing_combo, self.copies_spin, self.seed_spin, self.anyway_check):
            w.setEnabled(on)

    def _on_study(self, view) -> None:
        self.study = view
        self.outcome = None
        self.outcome_view = None
        self.interactions = []
        with QSignalBlocker(self.list):
            self.list.clear()
        self._on_columns(view, keep=False)
        self.counts.setText("")

    def _on_columns(self, view, keep: bool = True) -> None:
        self.study = view
        with QSignalBlocker(self.outcome_combo):
            self.outcome_combo.clear()
            self.outcome_combo.addItem("Choose the outcome\u2026", None)
            items = self.outcome_combo.model()
            for c in view.columns:
                kind = "2 values" if c.n_levels == 2 else f"{c.n_levels:,} values"
                self.outcome_combo.addItem(f"{c.name} ({kind})", c.name)
                if c.outcome_refusal and c.name != self.outcome:
                    # Shown, so the user sees it was considered, but not offered: with the reason.
                    item = items.item(self.outcome_combo.count() - 1)
                    item.setEnabled(False)
                    item.setText(f"{c.name} \u2014 not an outcome: {c.outcome_refusal}")
                    item.setToolTip(f"'{c.name}' cannot be the outcome: {c.outcome_refusal}.")
            self.outcome_combo.setCurrentIndex(max(0, self.outcome_combo.findData(self.outcome)))
        ticked = set(self.ticked_predictors()) if keep else set()
        with QSignalBlocker(self.list):
            self.list.clear()
            for name in view.candidates:
                c = view.column(name)
                text = name
                shape = ""
                if c is not None:
                    kind = c.role_label if c.role != "categorical" else f"{c.n_levels} groups"
                    text = f"{name} \u00b7 {kind}"
                    if c.spline_knots:
                        shape = f" \u00b7 curved ({c.spline_knots} knots)"
                        text += shape
                    if c.n_missing:
                        text += f" \u00b7 {c.n_missing:,} missing"
                item = QListWidgetItem(text)
                item.setData(Qt.ItemDataRole.UserRole, name)
                item.setFlags(item.flags() | Qt.ItemFlag.ItemIsUserCheckable)
                item.setCheckState(Qt.CheckState.Checked if name in ticked else Qt.CheckState.Unchecked)
                tip = f"{text}. Tick to add {name} to the model, untick to remove it."
                if shape:
                    tip += (f" Its effect is a curve (a spline with {c.spline_knots} knots); the Model shape menu "
                            "turns it back into a straight line.")
                item.setToolTip(style.plain_tip(tip))
                self.list.addItem(item)
        self._add_interaction_items(ticked)

    def _add_interaction_items(self, ticked=()) -> None:
        """List the interactions met so far after the columns (only those whose two predictors are offered)."""
        from twofold.core.models.terms import TIMES  # here, not at import: the window starts without numpy

        if self.study is None:
            return
        offered = set(self.study.candidates)
        listed = {self.list.item(i).data(Qt.ItemDataRole.UserRole) for i in range(self.list.count())}
        with QSignalBlocker(self.list):
            for name in self.interactions:
                parts = interaction_parts(name)
                if name in listed or parts is None or not set(parts) <= offered:
                    continue
                a, b = parts
                item = QListWidgetItem(f"{a} {TIMES} {b} \u00b7 interaction")
                item.setData(Qt.ItemDataRole.UserRole, name)
                item.setData(PartsRole, parts)
                item.setFlags(item.flags() | Qt.ItemFlag.ItemIsUserCheckable)
                item.setCheckState(Qt.CheckState.Checked if name in ticked else Qt.CheckState.Unchecked)
                item.setToolTip(style.plain_tip(f"{a} {TIMES} {b}: an interaction, so the effect of {a} may differ "
                                                f"with {b}. Ticking it ticks {a} and {b} too; unticking either of "
                                                "them removes it."))
                self.list.addItem(item)

    def _on_outcome(self, view) -> None:
        self.outcome = view.outcome
        self.outcome_view = view
        with QSignalBlocker(self.outcome_combo), QSignalBlocker(self.event_combo):
            self.outcome_combo.setCurrentIndex(max(0, self.outcome_combo.findData(view.outcome)))
            self.event_combo.clear()
            if view.needs_event:
                self.event_combo.addItem("Choose the event value\u2026", None)
            for raw, label in zip(view.levels, view.level_labels):
                self.event_combo.addItem(label, raw)
            if not view.needs_event and view.outcome is not None:
                self.event_combo.setCurrentIndex(max(0, list(view.level_labels).index(view.event_label)))
        ready = view.outcome is not None and not view.needs_event
        self._set_enabled(ready)
        if view.needs_event:
            self.outcome_note.setText(view.message)
        elif ready:
            self.outcome_note.setText(f"The model describes the odds that {view.outcome} = {view.event_label}.")
        else:
            self.outcome_note.setText("Choose the outcome column: the yes/no result you want to explain.")

    def _ready(self) -> bool:
        v = self.outcome_view
        return v is not None and v.outcome is not None and not v.needs_event

    def _on_failed(self, failure) -> None:
        """A tick that could not be fitted is undone, so the ticks always match the model shown."""
        if failure.kind == "load":  # the file shown before stays: so do its ticks
            self._set_enabled(self._ready())
        if failure.kind == "fit":
            view = self.session.last_results
            self._sync_ticks(view.predictors if view is not None else ())

    def _sync_ticks(self, predictors) -> None:
        with QSignalBlocker(self.list):
            names = set(predictors)
            for i in range(self.list.count()):
                item = self.list.item(i)
                want = item.data(Qt.ItemDataRole.UserRole) in names
                state = Qt.CheckState.Checked if want else Qt.CheckState.Unchecked
                if item.checkState() != state:
                    item.setCheckState(state)
        self.session.predictors = tuple(predictors)

    def _on_results(self, view) -> None:
        if view is None:
            self.counts.setText("")
            return
        columns = {c.name for c in self.study.columns} if self.study is not None else set()
        met = [p for row in view.ladder.rows for p in row.predictors] + list(view.predictors)
        new = [p for p in dict.fromkeys(met) if interaction_parts(p, columns) and p not in self.interactions]
        if new:
            self.interactions += new
            self._add_interaction_items()
        self._sync_ticks(view.predictors)
        self.counts.setText(view.counts_text.replace("  \u00b7  ", "\n"))
        if self.impute_request is None:  # the choice shown follows the analysis (a session opened, an undo)
            self._imputing = self._wanted = view.imputed is not None
            self.side_button.setEnabled(self._imputing)
            with QSignalBlocker(self.missing_combo):
                self.missing_combo.setCurrentIndex(1 if view.imputed else 0)
            if view.imputed:
                for spin, value in zip((self.copies_spin, self.seed_spin), view.imputed):
                    with QSignalBlocker(spin):
                        spin.setValue(int(value))


# ---------------------------------------------------------------------------
class ResultsPane(QWidget):
    """The current model: caution, coefficients, warnings beside them, and the model tests."""

    shown = Signal(object)

    def __init__(self, session, parent=None):
        super().__init__(parent)
        self.session = session
        self.view = None
        self.setAccessibleName("Results pane")
        outer = QVBoxLayout(self)
        outer.setContentsMargins(0, 0, 0, 0)
        outer.addWidget(_heading("Results", self))
        self.caution = style.Banner("information", "Caution: " + CAUTION, colour=style.SKY_BLUE,
                                    accessible_name="Caution")
        outer.addWidget(self.caution)

        scroll = QScrollArea()
        scroll.setWidgetResizable(True)
        scroll.setFrameShape(QFrame.Shape.NoFrame)
        # Sentences wrap to the pane's width: text never scrolls sideways (a wide table scrolls on its own).
        scroll.setHorizontalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAlwaysOff)
        # The vertical bar is always there, so the text's width never changes when results grow past the pane's
        # height: otherwise every wrapped sentence was laid out twice, at two widths (up to 45 ms a change).
        scroll.setVerticalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAlwaysOn)
        self.scroll = scroll
        body = QWidget()
        body.setMinimumWidth(0)
        layout = QVBoxLayout(body)
        layout.setContentsMargins(0, 0, 4, 0)
        self.placeholder = _wrapped("Choose the outcome and tick one or more predictors; the results appear "
                                    "here at once.", "Results placeholder")
        layout.addWidget(self.placeholder)
        self.title = _wrapped("", "Model shown")
        self.title.setFont(style.scaled_font(self, 1.05, bold=True))
        layout.addWidget(self.title)
        self.counts = _wrapped("", "Rows used and events")
        layout.addWidget(self.counts)
        self.contents = _wrapped("", "What the model contains")
        layout.addWidget(self.contents)

        # Once the penalised fit is chosen: say so above the numbers, with the way back.
        self.method_banner = style.Banner("information", colour=style.BLUISH_GREEN,
                                          accessible_name="Fitting method")
        self.ordinary_button = QPushButton("Go back to the ordinary fit")
        self.ordinary_button.setAccessibleName("Go back to the ordinary (maximum-likelihood) fit")
        self.ordinary_button.setToolTip("Show the models fitted by ordinary maximum likelihood again")
        self.ordinary_button.clicked.connect(lambda: self.use_penalised(False))
        self.method_banner.layout().addWidget(self.ordinary_button, 0, Qt.AlignmentFlag.AlignTop)
        self.method_banner.hide()
        layout.addWidget(self.method_banner)

        row = QHBoxLayout()
        self.profile_check = QCheckBox("Add &profile-likelihood intervals")
        self.profile_check.setAccessibleName("Add profile-likelihood intervals to every model")
        self.profile_check.setToolTip(
            "Work out 95% profile-likelihood intervals beside the Wald ones. They take longer, so Twofold works "
            "them out by itself only for small models; tick this to have them for every model.")
        self.profile_check.toggled.connect(self._profile_toggled)
        self._profile_wanted = False  # the user's choice for models too big to do without asking
        row.addWidget(self.profile_check)
        self.profile_status = _wrapped("", "Profile-likelihood intervals")
        row.addWidget(self.profile_status, 1)
        layout.addLayout(row)
        # The table's essential columns fit a laptop screen; the rest are one tick away.
        self.more_check = QCheckBox("Show Wald &z, coefficient and standard error")
        self.more_check.setAccessibleName("Show the Wald z, coefficient and standard error columns")
        self.more_check.setToolTip("Add the columns a statistician may want to check: the Wald z, the coefficient "
                                   "on the log-odds scale and its standard error.")
        self.more_check.toggled.connect(self._show_extra_columns)
        layout.addWidget(self.more_check)

        self.coefficients = CoefficientModel(self)
        self.table = QTableView()
        self.table.setModel(self.coefficients)
        self.table.setAccessibleName("Coefficient table")
        self.table.setAccessibleDescription("One row per coefficient: odds ratio, 95% confidence interval, "
                                            "p-value, Wald z, coefficient and standard error.")
        _compact_table(self.table)
        self.table.setSelectionBehavior(QAbstractItemView.SelectionBehavior.SelectRows)
        self.table.verticalHeader().hide()
        self.table.setHorizontalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAsNeeded)
        self.table.setVerticalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAlwaysOff)
        self.table.setSizePolicy(QSizePolicy.Policy.Expanding, QSizePolicy.Policy.Fixed)
        self.table.horizontalHeader().setDefaultAlignment(Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignVCenter)
        # The profile interval is the model's last column; on screen it stands beside the Wald one.
        self.table.horizontalHeader().moveSection(CoefficientModel.PROFILE, 3)
        self.table.setColumnHidden(CoefficientModel.PROFILE, True)
        for c in CoefficientModel.EXTRA:
            self.table.setColumnHidden(c, True)
        layout.addWidget(self.table)

        self.notes_box = QWidget()
        self.notes_layout = QVBoxLayout(self.notes_box)
        self.notes_layout.setContentsMargins(0, 0, 0, 0)
        layout.addWidget(self.notes_box)

        self.tests = QFrame()
        self.tests.setAccessibleName("Tests of the model")
        t = QVBoxLayout(self.tests)
        t.setContentsMargins(0, 4, 0, 0)
        tests_title = QLabel("Tests of the model")
        tests_title.setFont(style.scaled_font(self, 1.05, bold=True))
        t.addWidget(tests_title)
        self.overall = _wrapped("", "Test of the model as a whole", rich=True)
        self.previous = _wrapped("", "Test against the model before", rich=True)
        for w, key in ((self.overall, "overall"), (self.previous, "nested"), (self.table, "odds_ratio"),
                       (self.counts, "events_per_coefficient")):
            _help(w, key)
        t.addWidget(self.overall)
        t.addWidget(self.previous)
        self.shape = _wrapped("", "Tests of curved effects and interactions", rich=True)
        self.shape.hide()
        t.addWidget(self.shape)
        self.stated = _wrapped("", "Odds ratios at stated values")
        self.stated.hide()
        t.addWidget(self.stated)
        self.model_notes_box = QWidget()
        self.model_notes_layout = QVBoxLayout(self.model_notes_box)
        self.model_notes_layout.setContentsMargins(0, 0, 0, 0)
        t.addWidget(self.model_notes_box)
        layout.addWidget(self.tests)
        self.assessment_box = AssessmentSection(session, self)
        layout.addWidget(self.assessment_box)
        layout.addStretch(1)
        scroll.setWidget(body)
        outer.addWidget(scroll, 1)
        self._show_parts(False)
        session.resultsChanged.connect(self.show_results)
        if hasattr(session, "profileReady"):
            session.profileReady.connect(self.show_profile)
        #: Whether profile intervals are awaited or shown for the model shown, and the id of the
        #: last explicit request for them (small models' are started by the worker itself).
        self.profile_expected = False
        self.profile_request: int | None = None
        self.profile = None
        #: The "use the penalised fit" button beside a separation warning, when one is offered.
        self.firth_button = None

    def _show_parts(self, on: bool) -> None:
        for w in (self.title, self.counts, self.contents, self.table, self.notes_box, self.tests,
                  self.assessment_box, self.profile_status, self.more_check):
            w.setVisible(on)
        self.placeholder.setVisible(not on)
        if not on:
            self.method_banner.hide()

    # ---- penalised fit ------------------------------------------------------
    def use_penalised(self, on: bool) -> int:
        """Ask for the penalised (Firth) fit of the models, or the ordinary fit again; returns the id."""
        return self.session.set_penalised(on)

    def _notice_banner(self, text: str, note, accessible: str, view):
        banner = style.Banner("warning", text, colour=style.ORANGE, accessible_name=accessible)
        if note.code == "separation" and view.separation and not view.penalised:
            # The remedy beside the warning it answers.
            button = QPushButton("Use the penalised (Firth) fit instead")
            button.setAccessibleName("Use the penalised (Firth) fit instead")
            button.setToolTip("Refit by Firth's penalised likelihood, which keeps the estimates finite when a "
                              "group has only events or only non-events. You can come back to this fit.")
            button.clicked.connect(lambda: self.use_penalised(True))
            banner.layout().addWidget(button, 0, Qt.AlignmentFlag.AlignTop)
            self.firth_button = button
        return banner

    # ---- profile-likelihood intervals -------------------------------------------
    def _profile_toggled(self, on: bool) -> None:
        view = self.view
        if view is not None and view.profile_auto:
            return  # worked out anyway: the box only speaks for bigger models
        self._profile_wanted = on
        self.session.profile_always = on  # the worker then starts them with every new model
        if view is None:
            return
        if on:
            self._ask_profile(request=True)
        else:
            self.profile_expected = False
            self.coefficients.set_profile()
            self.table.setColumnHidden(CoefficientModel.PROFILE, True)
            self.profile_status.setText("")
            self._size_table()

    def _profile_words(self) -> str:
        return "profile penalised-likelihood" if self.coefficients.penalised else "profile-likelihood"

    def _ask_profile(self, request: bool) -> None:
        """Show that the intervals are being worked out; ``request`` asks for them (else the worker started them)."""
        self.coefficients.set_profile(pending=True)
        self.table.setColumnHidden(CoefficientModel.PROFILE, False)
        self.profile_status.setText(f"Working out the {self._profile_words()} intervals\u2026 "
                                    "(the window stays usable meanwhile)")
        self.profile_expected = True
        if request:
            self.profile_request = self.session.request_profile()
        self._size_table()

    def _start_profile(self, view) -> None:
        """New results: ask for their profile intervals if the model is small or the user wants them."""
        with QSignalBlocker(self.profile_check):
            self.profile_check.setChecked(self._profile_wanted)
        # Small models get the intervals anyway: the box would do nothing, so it is not shown.
        self.profile_check.setVisible(not view.profile_auto)
        self.profile = None
        if view.profile_auto or self._profile_wanted:
            self._ask_profile(request=False)
        else:
            self.profile_expected = False
            self.table.setColumnHidden(CoefficientModel.PROFILE, True)
            self.profile_status.setText("")

    def show_profile(self, pv) -> None:
        """Profile intervals arrived (only ever the newest request's: the session drops stale ones)."""
        view = self.view
        if pv is None or view is None or not self.profile_expected:
            return
        if pv.rung != view.rung or pv.penalised != view.penalised:
            return
        self.profile = pv
        if pv.error:
            self.coefficients.set_profile({line.name: "not available" for line in view.lines if line.kind == "term"})
            self.profile_status.setText(pv.error)
        else:
            self.coefficients.set_profile(pv.texts, pv.intervals)
            how = ("worked out by itself, since this model is small" if view.profile_auto else "as asked")
            words = self._profile_words()
            self.profile_status.setText(
                f"Beside each Wald interval: the 95% {words} interval ({how}). It need not be symmetric and "
                "holds up better with few events or large odds ratios." + (f" {pv.note}" if pv.note else ""))
        self._size_table()

    @staticmethod
    def _clear(layout) -> None:
        while layout.count():
            item = layout.takeAt(0)
            if item.widget() is not None:
                item.widget().deleteLater()

    def show_results(self, view) -> None:
        self.view = view
        if view is None:
            self.coefficients.set_lines(())
            self._show_parts(False)
            self.profile_check.hide()
            self.shown.emit(None)
            return
        self._show_parts(True)
        self.title.setText(view.title)
        self.counts.setText(view.counts_text)
        self.contents.setText(view.contents_text)
        self.method_banner.setText(view.method_text)
        self.method_banner.setVisible(view.penalised)
        self.coefficients.set_lines(view.lines, view.penalised)
        self._start_profile(view)
        self.table.clearSpans()
        for r, line in enumerate(view.lines):
            if line.kind == "heading":
                self.table.setSpan(r, 0, 1, 3)
        self._size_table()

        self.firth_button = None
        self._clear(self.notes_layout)
        seen = set()
        for note in view.predictor_notes:
            key = (note.code, note.message)
            columns = [n.column for n in view.predictor_notes if (n.code, n.message) == key]
            if key in seen:
                continue
            seen.add(key)
            who = ", ".join(columns)
            # A message that already names its predictors is not prefixed with them again.
            named = all(f"'{c}'" in note.message for c in columns)
            text = note.message if named else f"{who}: {note.message}"
            banner = self._notice_banner(text, note, f"Warning about {who}", view)
            self.notes_layout.addWidget(banner)
        self.notes_box.setVisible(bool(view.predictor_notes))

        o = view.overall
        self.overall.setText(f"<b>{esc(o.title)}.</b> {esc(o.text)}<br>{esc(o.reading)}" + link("overall"))
        if view.previous is not None:
            p = view.previous
            self.previous.setText(f"<b>{esc(p.title)}.</b> {esc(p.text)}" + (f"<br>{esc(p.reading)}" if p.reading else "")
                                  + link("nested"))
        else:
            self.previous.setText("<b>Change from the model before.</b> This is the first model of the ladder; "
                                  "tick or untick a predictor to test the change.")
        if view.shape_tests:
            self.shape.setText("".join(f"<p><b>{esc(t.title)}</b> {esc(t.text)}<br>{esc(t.reading)}</p>"
                                       for t in view.shape_tests))
        self.shape.setVisible(bool(view.shape_tests))
        if view.stated_effects:
            self.stated.setText(
                "<p><b>Odds ratios at stated values</b> (where one coefficient alone would mislead: a predictor "
                "in an interaction, or a curve)</p>" + "".join(f"<p>{esc(line)}</p>" for line in view.stated_effects))
        self.stated.setVisible(bool(view.stated_effects))
        self._clear(self.model_notes_layout)
        offered = any(n.code == "separation" for n in view.predictor_notes)
        for note in view.model_notes:
            if offered and note.code == "separation":
                banner = style.Banner("warning", note.message, colour=style.ORANGE,
                                      accessible_name="Warning about the model")
            else:
                banner = self._notice_banner(note.message, note, "Warning about the model", view)
            self.model_notes_layout.addWidget(banner)
        self.model_notes_box.setVisible(bool(view.model_notes))
        self.assessment_box.results_shown(view)
        self.shown.emit(view)

    def resizeEvent(self, event) -> None:
        super().resizeEvent(event)
        if self.coefficients.lines:
            self._size_table()  # the predictor column takes the room the window now gives

    def _show_extra_columns(self, on: bool) -> None:
        for c in CoefficientModel.EXTRA:
            self.table.setColumnHidden(c, not on)
        self._size_table()

    def _size_table(self) -> None:
        self.table.resizeColumnsToContents()
        header = self.table.horizontalHeader()
        fm = self.table.fontMetrics()
        labels = [("    " + x.label) if x.kind == "term" else x.label for x in self.coefficients.lines
                  if x.kind != "heading"]
        if not self.table.isColumnHidden(CoefficientModel.PROFILE) and self.coefficients.profile_pending:
            # As wide as the Wald intervals while waiting, so the table does not jump when they arrive.
            self.table.setColumnWidth(CoefficientModel.PROFILE,
                                      max(self.table.columnWidth(2), self.table.columnWidth(CoefficientModel.PROFILE)))
        if labels:
            icon = fm.height() + 8
            width = max(fm.horizontalAdvance(s) for s in labels) + icon + 10
            # A heading spans the first three columns: widen the first so it reads in full.
            bold = QFontMetrics(style.scaled_font(self.table, 1.0, bold=True))
            spanned = self.table.columnWidth(1) + self.table.columnWidth(2)
            for x in self.coefficients.lines:
                if x.kind == "heading":
                    longest = max(bold.horizontalAdvance(part) for part in x.label.split("\n"))
                    width = max(width, longest + icon + 24 - spanned)
            # No wider than the room the other columns leave: a long label is cut short (its tooltip has it
            # whole) rather than pushing the odds ratios out of sight.
            others = sum(self.table.columnWidth(c) for c in range(1, self.coefficients.columnCount())
                         if not self.table.isColumnHidden(c))
            room = self.scroll.viewport().width() - others - 2 * self.table.frameWidth() - 8
            self.table.setColumnWidth(0, min(width, max(220, room)))
        vh = self.table.verticalHeader()
        for r, x in enumerate(self.coefficients.lines):
            lines = x.label.count("\n") + 1
            vh.resizeSection(r, vh.defaultSectionSize() + (lines - 1) * fm.lineSpacing())
        height = header.height() + vh.length() + 2 * self.table.frameWidth()
        if self.table.horizontalScrollBar().isVisible() or header.length() > self.table.viewport().width():
            height += self.table.horizontalScrollBar().sizeHint().height()
        self.table.setFixedHeight(height)


# ---------------------------------------------------------------------------
class AssessmentSection(QFrame):
    """How good the model is: discrimination, calibration, fit, tests, influence and their figures.

    The numbers and the figures (their pixels) are prepared elsewhere (the
    assessment process); here they are only set on labels.
    """

    def __init__(self, session, parent=None):
        super().__init__(parent)
        self.session = session
        self.view = None
        self.setAccessibleName("How good is the model?")
        layout = QVBoxLayout(self)
        layout.setContentsMargins(0, 8, 0, 0)
        self.heading = QLabel("How good is the model?")
        self.heading.setFont(style.scaled_font(self, 1.05, bold=True))
        layout.addWidget(self.heading)
        self.status = _wrapped("Working out how good the model is\u2026", "Assessment status")
        layout.addWidget(self.status)
        self.body = QWidget()
        b = QVBoxLayout(self.body)
        b.setContentsMargins(0, 0, 0, 0)
        self.auc = _wrapped("", "Area under the ROC curve")
        self.brier = _wrapped("", "Brier score")
        self.calibration = _wrapped("", "Calibration slope and calibration-in-the-large")
        self.hosmer = _wrapped("", "Hosmer-Lemeshow test")
        self.pseudo = _wrapped("", "Pseudo-R-squared")
        self.drop_one = _wrapped("", "Test of dropping each predictor")
        self.vif = _wrapped("", "Variance inflation")
        self.sample = _wrapped("", "Sample size")
        self.influential = _wrapped("", "Most influential records")
        for w, key in ((self.auc, "auc"), (self.brier, "calibration"), (self.calibration, "calibration"),
                       (self.hosmer, "hosmer_lemeshow"), (self.drop_one, "wald"), (self.vif, "variance_inflation"),
                       (self.sample, "sample_size"), (self.influential, "cooks_distance")):
            _help(w, key)
        # Measures a committee seldom needs sit behind a fold, opened with one click.
        self.more_measures = QCheckBox("More measures of fit (pseudo-R-squared)")
        self.more_measures.setAccessibleName("Show more measures of fit")
        self.more_measures.toggled.connect(self.pseudo.setVisible)
        # The drop-one tests as a table of their own (laid out by Qt, not as rich text: several times quicker).
        self.drop_one_table = QTableWidget(0, 4)
        self.drop_one_table.setAccessibleName("Test of dropping each predictor, one row per predictor")
        self.drop_one_table.setHorizontalHeaderLabels(("Predictor", "Likelihood-ratio test", "Wald test", ""))
        self.drop_one_table.verticalHeader().hide()
        self.drop_one_table.setEditTriggers(QAbstractItemView.EditTrigger.NoEditTriggers)
        self.drop_one_table.setHorizontalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAsNeeded)
        self.drop_one_table.setVerticalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAlwaysOff)
        header = self.drop_one_table.horizontalHeader()
        header.setDefaultAlignment(Qt.AlignmentFlag.AlignLeft)
        # The tests share the pane's width and wrap within it, so the table never runs off the pane's side.
        for c, mode in enumerate((QHeaderView.ResizeMode.ResizeToContents, QHeaderView.ResizeMode.Stretch,
                                  QHeaderView.ResizeMode.Stretch, QHeaderView.ResizeMode.Stretch)):
            header.setSectionResizeMode(c, mode)
        self.drop_one_table.setWordWrap(True)
        _help(self.drop_one_table, "wald")
        for w in (self.auc, self.brier, self.calibration, self.hosmer, self.more_measures, self.pseudo,
                  self.drop_one, self.drop_one_table, self.vif, self.sample, self.influential):
            if isinstance(w, QLabel):
                w.setTextFormat(Qt.TextFormat.RichText)
            b.addWidget(w)
        self.pseudo.hide()

        row = QHBoxLayout()
        self.threshold = QDoubleSpinBox()
        self.threshold.setRange(0.01, 0.99)
        self.threshold.setSingleStep(0.01)
        self.threshold.setDecimals(2)
        # Until the user sets one, the threshold is the observed event rate of the model shown (its view says it).
        self.threshold.setValue(getattr(session, "threshold", None) or 0.5)
        self.threshold.setAccessibleName("Risk threshold for the classification table")
        self.threshold.setToolTip("Records with a predicted risk at or above this are counted as positive. It "
                                  "starts at the observed event rate of the model shown; set the cut-off your "
                                  "clinical question needs.")
        self.threshold.valueChanged.connect(self._threshold_changed)
        label = QLabel("Risk &threshold:")
        label.setBuddy(self.threshold)
        row.addWidget(label)
        row.addWidget(self.threshold)
        row.addStretch(1)
        b.addLayout(row)
        self.classification = _wrapped("", "Classification table", rich=True)  # its parts are escaped
        b.addWidget(self.classification)

        self.plots = {}
        plot_grid = QGridLayout()
        for k, (key, name) in enumerate((("roc", "ROC curve"), ("calibration", "Calibration plot"),
                                         ("influence", "Influence plot"))):
            lab = Picture()
            lab.setAccessibleName(name)
            lab.setAlignment(Qt.AlignmentFlag.AlignLeft | Qt.AlignmentFlag.AlignTop)
            self.plots[key] = lab
            plot_grid.addWidget(lab, k // 2, k % 2)
        plot_grid.setColumnStretch(2, 1)
        b.addLayout(plot_grid)
        self.plot_note = _wrapped("", "Note about the calibration plot")
        b.addWidget(self.plot_note)
        self.notes = _wrapped("", "Notes about the assessment")
        b.addWidget(self.notes)
        layout.addWidget(self.body)
        self.body.hide()
        session.assessmentChanged.connect(self.show_assessment)

    def results_shown(self, results) -> None:
        """New results are on screen: the assessment below describes an older model until its own arrives."""
        if results is None:
            return
        # Never leave another model's figures under these results: hide them until the new ones come.
        self.body.hide()
        self.status.setText("Working out how good the model is\u2026")
        self.status.show()

    def _threshold_changed(self, value: float) -> None:
        self.session.set_threshold(value)

    @staticmethod
    def _note(text: str) -> str:
        return f"<br><i>{esc(text)}</i>"

    def _fill_drop_one(self, rows, penalised: bool) -> None:
        """The drop-one tests, one row per predictor, the table as tall as its rows."""
        table = self.drop_one_table
        table.setHorizontalHeaderItem(1, QTableWidgetItem("Penalised likelihood-ratio test" if penalised
                                                          else "Likelihood-ratio test"))
        table.setRowCount(len(rows))
        for r, (column, lr, wald, flag) in enumerate(rows):
            cells = (column, lr, wald, "\u26a0 prefer the likelihood-ratio test here" if flag else "")
            for c, text in enumerate(cells):
                table.setItem(r, c, QTableWidgetItem(text))
        table.setColumnHidden(3, not any(flag for *_, flag in rows))  # the warnings' column, when there are any
        self._size_drop_one()

    def _size_drop_one(self) -> None:
        """As tall as its rows (wrapped to the pane's width), and its scroll bar when even that is too narrow."""
        table = self.drop_one_table
        table.resizeRowsToContents()
        height = table.horizontalHeader().height() + table.verticalHeader().length() + 2 * table.frameWidth()
        if table.horizontalHeader().length() > table.width() - 2 * table.frameWidth():
            height += table.horizontalScrollBar().sizeHint().height()
        table.setFixedHeight(height)

    def resizeEvent(self, event) -> None:
        super().resizeEvent(event)
        if self.drop_one_table.rowCount():
            self._size_drop_one()

    def show_assessment(self, view) -> None:
        self.view = view
        if view is None:
            self.body.hide()
            self.status.setText("")
            self.status.hide()
            for lab in self.plots.values():
                lab.clear()
            return
        self.status.hide()
        self.body.show()
        self.heading.setText(view.title)
        self.auc.setText(f"<b>Telling events from non-events.</b> {esc(view.auc_text)}<br>{esc(view.auc_reading)}"
                         + link("auc"))
        self.brier.setText(f"<b>Accuracy of the predicted risks.</b> {esc(view.brier_text)}")
        self.calibration.setText(f"<b>Calibration.</b> {esc(view.calibration_text)}" + self._note(view.calibration_note)
                                 + link("calibration"))
        self.hosmer.setText(f"{esc(view.hl_text)}" + self._note(view.hl_note) + link("hosmer_lemeshow"))
        self.pseudo.setText(esc(view.pseudo_r2_text))
        if view.drop_one:
            kind = "penalised likelihood-ratio test" if view.penalised else "likelihood-ratio test"
            self.drop_one.setText(f"<b>Dropping each predictor in turn</b> ({kind} on the same rows, beside the "
                                  "Wald test):")
        else:
            self.drop_one.setText("")
        self._fill_drop_one(view.drop_one, view.penalised)
        self.drop_one.setVisible(bool(view.drop_one))
        self.drop_one_table.setVisible(bool(view.drop_one))
        if view.vif:
            parts = [f"{esc(c)} {esc(t)}" + (" &#9888; high" if flagged else "") for c, t, flagged in view.vif]
            self.vif.setText(f"<b>Variance inflation:</b> {'; '.join(parts)}." + self._note(view.vif_note))
        self.vif.setVisible(bool(view.vif))
        mark = "&#9888; " if view.sample_size_short else ""
        self.sample.setText(mark + esc(view.sample_size_text) + link("sample_size"))
        if view.influential:
            items = ", ".join(f"row {r:,} ({esc(d)})" for r, d, _ in view.influential)
            self.influential.setText("<b>Most influential records</b> (row of the data file, with Cook's "
                                     f"distance): {items}.")
        self.influential.setVisible(bool(view.influential))
        if view.threshold is not None and abs(view.threshold - self.threshold.value()) > 1e-9:
            with QSignalBlocker(self.threshold):
                self.threshold.setValue(view.threshold)
        self.classification.setText(esc(view.classification_text) + "<br><i>" + esc(view.threshold_note) + "</i>")
        for key, lab in self.plots.items():
            pm = _pixmap(view.figures.get(key))
            lab.set_picture(pm)
            lab.setVisible(not pm.isNull())
        self.plot_note.setText(view.calibration_plot_note)
        self.plot_note.setVisible(bool(view.calibration_plot_note))
        self.notes.setText(" ".join(view.notes))
        self.notes.setVisible(bool(view.notes))


# ---------------------------------------------------------------------------
class LadderPane(QWidget):
    """Every model tried: return to any of them and compare any two."""

    def __init__(self, session, parent=None):
        super().__init__(parent)
        self.session = session
        self.setAccessibleName("Model ladder pane")
        layout = QVBoxLayout(self)
        layout.setContentsMargins(0, 0, 0, 0)
        layout.addWidget(_heading("Model ladder", self))
        layout.addWidget(_wrapped("Each change of predictors adds a model, all on the same rows, so any two "
                                  "nested models can be compared fairly.", "About the ladder"))
        self.notices = style.Banner("information", colour=style.SKY_BLUE, accessible_name="Note about the ladder")
        self.notices.hide()
        layout.addWidget(self.notices)
        self.model = LadderModel(self)
        self.table = QTableView()
        self.table.setModel(self.model)
        self.table.setAccessibleName("Model ladder")
        self.table.setAccessibleDescription("One row per model; press Enter to show the selected model.")
        _compact_table(self.table)
        self.table.verticalHeader().hide()
        self.table.setSelectionBehavior(QAbstractItemView.SelectionBehavior.SelectRows)
        self.table.setSelectionMode(QAbstractItemView.SelectionMode.ExtendedSelection)
        self.table.activated.connect(lambda idx: self.show_model(idx.row()))
        self.table.selectionModel().selectionChanged.connect(self._selection_changed)
        # At least five models stay in sight, however small the screen (header, five rows, a scroll bar).
        rows = self.table.verticalHeader().defaultSectionSize()
        self.table.setMinimumHeight(2 * rows + 5 * rows + self.table.horizontalScrollBar().sizeHint().height()
                                    + 2 * self.table.frameWidth())
        layout.addWidget(self.table, 1)

        row = QHBoxLayout()
        self.show_button = QPushButton("Show the selected mo&del")
        self.show_button.setAccessibleName("Show the selected model")
        self.show_button.clicked.connect(self._show_selected)
        row.addWidget(self.show_button)
        row.addStretch(1)
        layout.addLayout(row)
        row = QHBoxLayout()
        label = QLabel("Co&mpare model")
        self.first = QComboBox()
        self.first.setAccessibleName("First model to compare")
        label.setBuddy(self.first)
        self.second = QComboBox()
        self.second.setAccessibleName("Second model to compare")
        self.compare_button = QPushButton("Compare")
        self.compare_button.setAccessibleName("Compare the two models")
        self.compare_button.clicked.connect(self.compare)
        row.addWidget(label)
        row.addWidget(self.first)
        row.addWidget(QLabel("with model"))
        row.addWidget(self.second)
        row.addWidget(self.compare_button)
        row.addStretch(1)
        layout.addLayout(row)
        self.comparison = _wrapped("", "Comparison of two models", rich=True)
        layout.addWidget(self.comparison)
        self._enable()
        self._compared = None  # (index, predictors) of the two models whose comparison is shown
        session.resultsChanged.connect(self._on_results)
        session.comparisonReady.connect(self._on_comparison)
        if hasattr(session, "ladderChanged"):
            session.ladderChanged.connect(self._on_ladder)

    def _enable(self) -> None:
        n = self.model.rowCount()
        self.show_button.setEnabled(n > 0)
        for w in (self.first, self.second, self.compare_button):
            w.setEnabled(n > 1)

    def _on_ladder(self, ladder) -> None:
        """The same models, with those passed over by quicker ticks now fitted."""
        if len(ladder.rows) == self.model.rowCount():
            with QSignalBlocker(self.table.selectionModel()):
                self.model.set_rows(ladder.rows, ladder.headers)
                if ladder.current is not None:
                    self.table.selectRow(ladder.current)

    def _on_results(self, view) -> None:
        with QSignalBlocker(self.table.selectionModel()):
            if view is None:
                self.model.set_rows(())
                self.notices.hide()
            else:
                self.model.set_rows(view.ladder.rows, view.ladder.headers)
                header = self.table.horizontalHeader()
                header.setSectionResizeMode(QHeaderView.ResizeMode.ResizeToContents)
                # The predictor lists share what is left; the numbers always show in full.
                header.setSectionResizeMode(1, QHeaderView.ResizeMode.Stretch)
                header.setSectionResizeMode(2, QHeaderView.ResizeMode.Stretch)
                if view.ladder.current is not None:
                    self.table.selectRow(view.ladder.current)
                if view.ladder.notices:
                    self.notices.setText(" ".join(view.ladder.notices))
                    self.notices.show()
                else:
                    self.notices.hide()
        n = self.model.rowCount()
        with QSignalBlocker(self.first), QSignalBlocker(self.second):
            a, b = self.first.currentIndex(), self.second.currentIndex()
            self.first.clear()
            self.second.clear()
            for k in range(n):
                self.first.addItem(str(k + 1), k)
                self.second.addItem(str(k + 1), k)
            if n > 1:
                self.first.setCurrentIndex(a if 0 <= a < n and a != n - 1 else n - 2)
                self.second.setCurrentIndex(b if 0 <= b < n and b != self.first.currentIndex() else n - 1)
        if view is None or not self._comparison_still_holds(view):
            self.comparison.setText("")
            self._compared = None
        self._enable()

    def _comparison_still_holds(self, view) -> bool:
        """Whether the two models compared are still in the ladder as they were (else their text goes)."""
        if self._compared is None:
            return True
        rows = view.ladder.rows
        return all(k < len(rows) and tuple(rows[k].predictors) == preds for k, preds in self._compared)

    def _selection_changed(self, *args) -> None:
        rows = sorted({i.row() for i in self.table.selectionModel().selectedRows()})
        if len(rows) == 2:
            with QSignalBlocker(self.first), QSignalBlocker(self.second):
                self.first.setCurrentIndex(rows[0])
                self.second.setCurrentIndex(rows[1])

    def _show_selected(self) -> None:
        idx = self.table.currentIndex()
        if idx.isValid():
            self.show_model(idx.row())

    def show_model(self, row: int) -> int:
        return self.session.select_rung(row)

    def compare(self) -> int | None:
        i, j = self.first.currentData(), self.second.currentData()
        if i is None or j is None:
            return None
        return self.session.compare_rungs(i, j)

    def _on_comparison(self, view) -> None:
        if view is None:
            self.comparison.setText("")
            self._compared = None
            return
        rows = self.model.rows if hasattr(self.model, "rows") else ()
        self._compared = tuple((k, tuple(rows[k].predictors)) for k in (view.first, view.second) if k < len(rows))
        parts = [f"<b>Model {view.first + 1} compared with model {view.second + 1}.</b> {esc(view.text)}"]
        if view.reading:
            parts.append(esc(view.reading))
        parts.append(esc(view.note))
        self.comparison.setText("<br>".join(parts))
