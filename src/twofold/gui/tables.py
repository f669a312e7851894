"""Qt item models over the display records.

:class:`CellsModel` shows the loaded rows.  It holds one array per column (views
on the loaded frame, made without per-row work) and formats a cell only when
the view asks for it, so a million rows scroll as smoothly as a hundred.
The other models show the small tables: columns, coefficients, the ladder.
"""

from __future__ import annotations

import math

from PySide6.QtCore import QAbstractTableModel, QModelIndex, Qt
from PySide6.QtGui import QBrush, QFont, QPalette
from PySide6.QtWidgets import QApplication

from twofold.gui import style

RIGHT = int(Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignVCenter)
LEFT = int(Qt.AlignmentFlag.AlignLeft | Qt.AlignmentFlag.AlignVCenter)

#: Role for the raw number behind a displayed cell (tests and copying use it).
RawRole = Qt.ItemDataRole.UserRole + 1


def _muted_brush() -> QBrush:
    return QBrush(QApplication.palette().color(QPalette.ColorGroup.Active, QPalette.ColorRole.PlaceholderText))


def format_cell(v) -> str | None:
    """Text of one data cell, or None when it is missing."""
    if v is None:
        return None
    if isinstance(v, float):
        if math.isnan(v):
            return None
        if v.is_integer() and abs(v) < 1e15:
            return str(int(v))
        return f"{v:.6g}"
    if hasattr(v, "dtype"):  # numpy scalar
        kind = v.dtype.kind
        if kind == "f":
            return format_cell(float(v))
        if kind in "iub":
            return str(int(v))
        if kind == "M":
            import numpy as np  # only reached once a file with dates is loaded

            if np.isnat(v):
                return None
            text = str(np.datetime_as_string(v, unit="s"))
            return text[:10] if text.endswith("T00:00:00") else text.replace("T", " ")
    if v != v:  # NaN of another kind
        return None
    return str(v)


class CellsModel(QAbstractTableModel):
    """The loaded rows, one cell formatted at a time."""

    def __init__(self, parent=None):
        super().__init__(parent)
        self._names: tuple = ()
        self._arrays: tuple = ()
        self._numeric: tuple = ()
        self._rows = 0
        self._muted = None
        self._italic = QFont()
        self._italic.setItalic(True)

    def set_study(self, view) -> None:
        self.beginResetModel()
        if view is None:
            self._names, self._arrays, self._numeric, self._rows = (), (), (), 0
        else:
            self._names = tuple(c.name for c in view.columns)
            self._arrays = view.arrays
            self._numeric = view.numeric
            self._rows = view.n_rows
        self.endResetModel()

    def rowCount(self, parent=QModelIndex()):
        return 0 if parent.isValid() else self._rows

    def columnCount(self, parent=QModelIndex()):
        return 0 if parent.isValid() else len(self._names)

    def data(self, index, role=Qt.ItemDataRole.DisplayRole):
        if not index.isValid():
            return None
        if role == Qt.ItemDataRole.DisplayRole or role == Qt.ItemDataRole.AccessibleTextRole:
            text = format_cell(self._arrays[index.column()][index.row()])
            return "missing" if text is None else text
        if role == Qt.ItemDataRole.TextAlignmentRole:
            return RIGHT if self._numeric[index.column()] else LEFT
        if role in (Qt.ItemDataRole.ForegroundRole, Qt.ItemDataRole.FontRole):
            if format_cell(self._arrays[index.column()][index.row()]) is None:
                if role == Qt.ItemDataRole.FontRole:
                    return self._italic
                if self._muted is None:
                    self._muted = _muted_brush()
                return self._muted
        return None

    def headerData(self, section, orientation, role=Qt.ItemDataRole.DisplayRole):
        if role != Qt.ItemDataRole.DisplayRole:
            return None
        if orientation == Qt.Orientation.Horizontal:
            return self._names[section] if section < len(self._names) else None
        return f"{section + 1:,}"


class ColumnsModel(QAbstractTableModel):
    """Each column's role, number of values, missing count and reference group."""

    HEADERS = ("Column", "Used as", "Values", "Missing", "Reference")
    TIPS = ("The column's name in the file", "How the column takes part in a model",
            "How many different values the column holds", "How many cells are empty or marked missing",
            "For groups: the group the others are compared with")

    def __init__(self, parent=None):
        super().__init__(parent)
        self.columns: tuple = ()
        self.outcome = None

    def set_columns(self, columns, outcome=None) -> None:
        same = [c.name for c in columns] == [c.name for c in self.columns]
        if same and self.columns:
            self.columns = tuple(columns)
            self.outcome = outcome
            self.dataChanged.emit(self.index(0, 0), self.index(len(self.columns) - 1, len(self.HEADERS) - 1))
            return
        self.beginResetModel()
        self.columns = tuple(columns)
        self.outcome = outcome
        self.endResetModel()

    def rowCount(self, parent=QModelIndex()):
        return 0 if parent.isValid() else len(self.columns)

    def columnCount(self, parent=QModelIndex()):
        return 0 if parent.isValid() else len(self.HEADERS)

    def data(self, index, role=Qt.ItemDataRole.DisplayRole):
        if not index.isValid():
            return None
        c = self.columns[index.row()]
        col = index.column()
        if role in (Qt.ItemDataRole.DisplayRole, Qt.ItemDataRole.AccessibleTextRole):
            if col == 0:
                return c.name
            if col == 1:
                return "outcome" if c.name == self.outcome else c.role_label
            if col == 2:
                return f"{c.n_levels:,}"
            if col == 3:
                return f"{c.n_missing:,}"
            if col == 4:
                return c.reference_label if c.is_factor else ""
        if role == Qt.ItemDataRole.TextAlignmentRole:
            return RIGHT if col in (2, 3) else LEFT
        if role == Qt.ItemDataRole.ToolTipRole:
            return style.plain_tip(f"{c.name}: {c.role_label} ({c.reason})")
        if role == Qt.ItemDataRole.FontRole and c.name == self.outcome:
            f = QFont()
            f.setBold(True)
            return f
        return None

    def headerData(self, section, orientation, role=Qt.ItemDataRole.DisplayRole):
        if orientation != Qt.Orientation.Horizontal:
            return None
        if role == Qt.ItemDataRole.DisplayRole:
            return self.HEADERS[section]
        if role == Qt.ItemDataRole.ToolTipRole:
            return self.TIPS[section]
        return None


class CoefficientModel(QAbstractTableModel):
    """The coefficient table: one row per coefficient, a heading row above each multi-coefficient term.

    The profile-likelihood interval is the last column of the model (so the
    others keep their places); the results pane shows it beside the Wald one.
    """

    HEADERS = ("Predictor", "Odds\nratio", "95% interval\n(Wald)", "p-value",
               "Wald z", "Coefficient\n(log odds)", "Standard\nerror", "95% interval\n(profile)")
    TIPS = ("The predictor, or for groups the group compared with the reference group",
            "How many times the odds of the event are multiplied (per unit, or for the group against the "
            "reference group), the other predictors held fixed",
            "95% Wald confidence interval of the odds ratio: the estimate plus or minus 1.96 standard errors "
            "on the log-odds scale",
            "Two-sided p-value of the Wald test that the coefficient is zero",
            "Wald z: the coefficient divided by its standard error",
            "The coefficient on the log-odds scale (the natural logarithm of the odds ratio)",
            "Standard error of the coefficient",
            "95% profile-likelihood confidence interval of the odds ratio (Venzon & Moolgavkar 1988): the "
            "values a likelihood-ratio test would not reject. It need not be symmetric and holds up better "
            "than the Wald interval with few events or large odds ratios")
    PENALISED_TIPS = {
        2: "95% Wald confidence interval of the odds ratio, from the penalised fit's standard errors",
        7: "95% profile penalised-likelihood confidence interval of the odds ratio (Heinze & Schemper 2002): "
           "the values a penalised likelihood-ratio test would not reject",
    }
    KEYS = (None, "odds_ratio", "ci", "p_value", "z", "estimate", "std_error", "pl_ci")
    #: Logical column of the profile-likelihood interval.
    PROFILE = 7
    #: Columns a reader seldom needs (Wald z, coefficient, standard error): shown only when asked for.
    EXTRA = (4, 5, 6)
    WORKING = "working\u2026"

    def __init__(self, parent=None):
        super().__init__(parent)
        self.lines: tuple = ()
        self._bold = QFont()
        self._bold.setBold(True)
        self._warn_icon = None
        self.penalised = False
        #: Profile intervals by parameter name: worded, and as (low, high) odds ratios.
        self.profile_texts: dict = {}
        self.profile_values: dict = {}
        self.profile_pending = False

    def set_lines(self, lines, penalised: bool = False) -> None:
        self.beginResetModel()
        self.lines = tuple(lines)
        self.penalised = bool(penalised)
        self.profile_texts, self.profile_values, self.profile_pending = {}, {}, False
        self.endResetModel()
        self.headerDataChanged.emit(Qt.Orientation.Horizontal, 0, len(self.HEADERS) - 1)

    def set_profile(self, texts=None, values=None, pending: bool = False) -> None:
        """Show profile intervals (``texts``), or that they are being worked out (``pending``)."""
        self.profile_texts, self.profile_values = dict(texts or {}), dict(values or {})
        self.profile_pending = bool(pending)
        if self.lines:
            self.dataChanged.emit(self.index(0, self.PROFILE), self.index(len(self.lines) - 1, self.PROFILE))

    def _profile_text(self, line) -> str:
        if line.kind != "term":
            return ""
        if self.profile_pending:
            return self.WORKING
        return self.profile_texts.get(line.name, "")

    def rowCount(self, parent=QModelIndex()):
        return 0 if parent.isValid() else len(self.lines)

    def columnCount(self, parent=QModelIndex()):
        return 0 if parent.isValid() else len(self.HEADERS)

    def data(self, index, role=Qt.ItemDataRole.DisplayRole):
        if not index.isValid():
            return None
        line = self.lines[index.row()]
        col = index.column()
        key = self.KEYS[col]
        if role in (Qt.ItemDataRole.DisplayRole, Qt.ItemDataRole.AccessibleTextRole):
            if col == 0:
                if line.kind == "term" and self._has_heading(index.row()):
                    return "    " + line.label
                return line.label
            if col == self.PROFILE:
                return self._profile_text(line)
            if line.kind == "heading" and role == Qt.ItemDataRole.AccessibleTextRole and col == 1:
                return line.texts.get("groups", "")
            if line.kind == "heading":
                return line.texts.get("p_value", "") if key == "p_value" else ""
            return line.texts.get(key, "")
        if role == RawRole:
            if col == 0:
                return line.column
            if key == "ci":
                return (line.values.get("or_ci_low"), line.values.get("or_ci_high"))
            if col == self.PROFILE:
                return self.profile_values.get(line.name) if line.kind == "term" else None
            return line.values.get(key)
        if role == Qt.ItemDataRole.TextAlignmentRole:
            return LEFT if col == 0 else RIGHT
        if role == Qt.ItemDataRole.FontRole and line.kind == "heading":
            return self._bold
        if role == Qt.ItemDataRole.DecorationRole and col == 0 and line.warnings:
            if self._warn_icon is None:
                self._warn_icon = style.standard_icon("warning")
            return self._warn_icon
        if role == Qt.ItemDataRole.ToolTipRole:
            if line.warnings:
                return style.plain_tip("\n\n".join([("Warning: " + w) for w in line.warnings]
                                                     + ([line.hint] if line.hint else [])))
            if col == 0:
                text = line.label + (f" ({line.texts['groups']})" if line.kind == "heading" else "")
                return style.plain_tip(text + (f"\n\n{line.hint}" if line.hint else ""))
        if role == Qt.ItemDataRole.BackgroundRole and line.warnings:
            return QBrush(style.tint(style.ORANGE, 40))
        return None

    def _has_heading(self, row: int) -> bool:
        col = self.lines[row].column
        return any(x.kind == "heading" and x.column == col for x in self.lines[:row])

    def headerData(self, section, orientation, role=Qt.ItemDataRole.DisplayRole):
        if orientation != Qt.Orientation.Horizontal:
            return None
        if role == Qt.ItemDataRole.DisplayRole:
            if self.penalised and section == self.PROFILE:
                return "95% interval\n(penalised profile)"
            return self.HEADERS[section]
        if role == Qt.ItemDataRole.ToolTipRole:
            return self.PENALISED_TIPS.get(section, self.TIPS[section]) if self.penalised else self.TIPS[section]
        if role == Qt.ItemDataRole.TextAlignmentRole:
            return LEFT if section == 0 else RIGHT
        return None


class LadderModel(QAbstractTableModel):
    """The model ladder: one row per model tried."""

    HEADERS = ("Model", "Predictors", "Change", "Coefficients", "Log-\nlikelihood", "AIC",
               "G against the\nmodel before", "Degrees of\nfreedom", "p-value")
    TIPS = ("Model number; the one shown is marked", "The predictors of the model",
            "What changed from the model it was built from", "Coefficients estimated, the intercept included",
            "Log-likelihood on the common rows (higher fits better)", "Akaike information criterion (lower is better)",
            "Likelihood-ratio statistic G against the model it was built from",
            "Degrees of freedom of that test", "p-value of that test")
    KEYS = (None, None, None, "n_params", "log_likelihood", "aic", "g", "df", "p_value")

    def __init__(self, parent=None):
        super().__init__(parent)
        self.rows: tuple = ()
        self.headers: dict = {}
        self._bold = QFont()
        self._bold.setBold(True)

    def set_rows(self, rows, headers=None) -> None:
        """Show ``rows``; ``headers`` (column key -> (heading, tip)) replaces the table's own headings."""
        self.beginResetModel()
        self.rows = tuple(rows)
        if headers is not None:
            self.headers = dict(headers)
        self.endResetModel()

    def rowCount(self, parent=QModelIndex()):
        return 0 if parent.isValid() else len(self.rows)

    def columnCount(self, parent=QModelIndex()):
        return 0 if parent.isValid() else len(self.HEADERS)

    def _header(self, section: int) -> tuple:
        return self.headers.get(self.KEYS[section], (self.HEADERS[section], self.TIPS[section]))

    def data(self, index, role=Qt.ItemDataRole.DisplayRole):
        if not index.isValid():
            return None
        r = self.rows[index.row()]
        col = index.column()
        if role in (Qt.ItemDataRole.DisplayRole, Qt.ItemDataRole.AccessibleTextRole):
            if col == 0:
                return f"\u25b6 {r.index + 1} (shown)" if r.current else str(r.index + 1)
            if col == 1:
                return r.predictors_text
            if col == 2:
                return r.change_text
            return r.texts.get(self.KEYS[col], "")
        if role == RawRole:
            return {0: r.index, 3: r.n_params, 4: r.log_likelihood, 5: r.aic, 6: r.g, 7: r.df,
                    8: r.p_value}.get(col)
        if role == Qt.ItemDataRole.TextAlignmentRole:
            return LEFT if col in (1, 2) else RIGHT
        if role == Qt.ItemDataRole.FontRole and r.current:
            return self._bold
        if role == Qt.ItemDataRole.ToolTipRole and col in (1, 2):
            return style.plain_tip(r.predictors_text if col == 1 else r.change_text)
        return None

    def headerData(self, section, orientation, role=Qt.ItemDataRole.DisplayRole):
        if orientation != Qt.Orientation.Horizontal:
            return None
        if role == Qt.ItemDataRole.DisplayRole:
            return self._header(section)[0]
        if role == Qt.ItemDataRole.ToolTipRole:
            return self._header(section)[1]
        if role == Qt.ItemDataRole.TextAlignmentRole:
            return LEFT if section in (1, 2) else RIGHT
        return None
