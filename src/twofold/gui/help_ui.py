""""What does this mean?": the core's plain explanations of each result, in a dialog of its own.

F1 opens it at the topic of the result that has the keyboard focus (each result
widget carries a ``help_topic`` property); the links beside the results open it
at theirs.  The texts live in :mod:`twofold.core.outputs.explain`.
"""

from __future__ import annotations

from PySide6.QtCore import Qt
from PySide6.QtWidgets import QDialog, QDialogButtonBox, QHBoxLayout, QListWidget, QListWidgetItem, QPlainTextEdit, \
    QVBoxLayout, QWidget

from twofold.core.outputs.explain import BY_KEY, TOPICS

#: The link text placed after a result; its target is "help:<topic>".
LINK = '<a href="help:{key}">What does this mean?</a>'


def link(key: str) -> str:
    return " " + LINK.format(key=key)


def topic_of(widget: QWidget | None) -> str | None:
    """The help topic of ``widget`` or of the nearest parent that has one."""
    while widget is not None:
        key = widget.property("help_topic")
        if key:
            return str(key)
        widget = widget.parentWidget()
    return None


class HelpDialog(QDialog):
    """Topics on the left, the chosen one's explanation on the right (plain text)."""

    def __init__(self, parent=None):
        super().__init__(parent)
        self.setWindowTitle("Twofold: what does this mean?")
        self.setAccessibleName("What does this mean?")
        self.topics = QListWidget()
        self.topics.setAccessibleName("Topics")
        for t in TOPICS:
            item = QListWidgetItem(t.title)
            item.setData(Qt.ItemDataRole.UserRole, t.key)
            self.topics.addItem(item)
        self.text = QPlainTextEdit()
        self.text.setReadOnly(True)
        self.text.setAccessibleName("Explanation")
        self.topics.currentRowChanged.connect(self._show_row)
        row = QHBoxLayout()
        row.addWidget(self.topics, 2)
        row.addWidget(self.text, 5)
        buttons = QDialogButtonBox(QDialogButtonBox.StandardButton.Close)
        buttons.rejected.connect(self.close)
        layout = QVBoxLayout(self)
        layout.addLayout(row, 1)
        layout.addWidget(buttons)
        self.resize(820, 420)

    @property
    def topic(self) -> str | None:
        item = self.topics.currentItem()
        return None if item is None else item.data(Qt.ItemDataRole.UserRole)

    def show_topic(self, key: str | None) -> None:
        keys = [t.key for t in TOPICS]
        self.topics.setCurrentRow(keys.index(key) if key in BY_KEY else 0)
        self.show()
        self.raise_()
        self.activateWindow()

    def _show_row(self, row: int) -> None:
        if 0 <= row < len(TOPICS):
            t = TOPICS[row]
            self.text.setPlainText(f"{t.title}\n\n{t.text()}")
