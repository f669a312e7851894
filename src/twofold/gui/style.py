"""Colours, icons and banners readable by colour-blind users.

Colours come from the Okabe-Ito palette (Okabe & Ito 2008, "Color Universal
Design"), used only as light tints behind ordinary text, and never alone:
every warning also has an icon and words.
"""

from __future__ import annotations

from PySide6.QtCore import QPointF, QSize, Qt
from PySide6.QtGui import QColor, QFont, QIcon, QPainter, QPalette, QPen, QPixmap
from PySide6.QtWidgets import QApplication, QFrame, QHBoxLayout, QLabel, QSizePolicy, QStyle, QToolButton

#: Okabe-Ito colours.
ORANGE = "#E69F00"
SKY_BLUE = "#56B4E9"
BLUISH_GREEN = "#009E73"
YELLOW = "#F0E442"
BLUE = "#0072B2"
VERMILLION = "#D55E00"
REDDISH_PURPLE = "#CC79A7"


def tint(colour: str, alpha: int = 48) -> QColor:
    """A see-through version of a palette colour, laid over the window's own background."""
    c = QColor(colour)
    c.setAlpha(alpha)
    return c


def standard_icon(kind: str) -> QIcon:
    """One of the platform's standard icons: 'warning', 'information', 'critical', 'open'."""
    pixmap = {
        "warning": QStyle.StandardPixmap.SP_MessageBoxWarning,
        "information": QStyle.StandardPixmap.SP_MessageBoxInformation,
        "critical": QStyle.StandardPixmap.SP_MessageBoxCritical,
        "open": QStyle.StandardPixmap.SP_DialogOpenButton,
        "folder": QStyle.StandardPixmap.SP_DirOpenIcon,
        "copy": QStyle.StandardPixmap.SP_FileDialogDetailedView,
    }[kind]
    return QApplication.style().standardIcon(pixmap)


def app_icon() -> QIcon:
    """Two overlapping rings in Okabe-Ito blue and orange: 'two-fold'."""
    icon = QIcon()
    for size in (16, 32, 64, 128, 256):
        pm = QPixmap(size, size)
        pm.fill(Qt.GlobalColor.transparent)
        p = QPainter(pm)
        p.setRenderHint(QPainter.RenderHint.Antialiasing)
        w = max(1.5, size / 10)
        r = size * 0.30
        for colour, cx in ((BLUE, size * 0.37), (ORANGE, size * 0.63)):
            p.setPen(QPen(QColor(colour), w))
            p.drawEllipse(QPointF(cx, size / 2), r, r)
        p.end()
        icon.addPixmap(pm)
    return icon


def scaled_font(widget, factor: float = 1.0, bold: bool = False) -> QFont:
    """The widget's own (system) font, scaled: never a hard-coded pixel size."""
    f = QFont(widget.font())
    if f.pointSizeF() > 0:
        f.setPointSizeF(f.pointSizeF() * factor)
    f.setBold(bold)
    return f


def plain(label):
    """A label that shows its text as it is: never read as rich text, whatever the data hold
    (a column named like an HTML image tag must not make the window load an image)."""
    label.setTextFormat(Qt.TextFormat.PlainText)
    return label


def plain_tip(text: str) -> str:
    """A tooltip showing ``text`` as it is (Qt would otherwise read a tooltip holding a tag as rich text)."""
    from html import escape

    from PySide6 import QtGui  # Qt's rich-text guess lives in its GUI module's Qt namespace

    if not QtGui.Qt.mightBeRichText(text):
        return text  # Qt shows it as it is
    return f"<p style='white-space:pre-wrap'>{escape(text)}</p>"


class Banner(QFrame):
    """A strip with an icon and wrapped text on a light tint.

    ``closable`` adds a button that hides it until the next message.
    """

    def __init__(self, kind: str, text: str = "", colour: str = SKY_BLUE, closable: bool = False,
                 accessible_name: str = "", parent=None):
        super().__init__(parent)
        self.setObjectName(f"banner_{kind}")
        self.setFrameShape(QFrame.Shape.StyledPanel)
        self.setAutoFillBackground(True)
        pal = self.palette()
        base = pal.color(QPalette.ColorRole.Window)
        t = tint(colour, 70)
        # Blend by hand so the text colour of the theme stays readable on it.
        mixed = QColor(
            int(base.red() + (t.red() - base.red()) * t.alphaF()),
            int(base.green() + (t.green() - base.green()) * t.alphaF()),
            int(base.blue() + (t.blue() - base.blue()) * t.alphaF()),
        )
        pal.setColor(QPalette.ColorRole.Window, mixed)
        self.setPalette(pal)
        self.setStyleSheet(f"#{self.objectName()} {{ border-left: 4px solid {colour}; }}")
        layout = QHBoxLayout(self)
        layout.setContentsMargins(8, 6, 8, 6)
        self.icon = QLabel()
        size = self.fontMetrics().height() * 3 // 2
        self.icon.setPixmap(standard_icon(kind).pixmap(QSize(size, size)))
        self.icon.setAlignment(Qt.AlignmentFlag.AlignTop)
        self.icon.setAccessibleName(f"{kind} icon")
        layout.addWidget(self.icon)
        self.label = plain(QLabel(text))
        self.label.setWordWrap(True)
        self.label.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse
                                           | Qt.TextInteractionFlag.TextSelectableByKeyboard)
        self.label.setSizePolicy(QSizePolicy.Policy.Expanding, QSizePolicy.Policy.Preferred)
        if accessible_name:
            self.setAccessibleName(accessible_name)
            self.label.setAccessibleName(accessible_name)
        layout.addWidget(self.label, 1)
        self.close_button = None
        if closable:
            self.close_button = QToolButton()
            self.close_button.setText("Hide")
            self.close_button.setAccessibleName(f"Hide this {kind} message")
            self.close_button.setToolTip("Hide this message")
            self.close_button.clicked.connect(self.hide)
            layout.addWidget(self.close_button, 0, Qt.AlignmentFlag.AlignTop)

    def text(self) -> str:
        return self.label.text()

    def setText(self, text: str) -> None:
        self.label.setText(text)



#: A focus ring that can be seen (the platform's own is faint on several themes): tables, lists, text boxes
#: and the result texts that F1 explains get a solid blue frame while they have the keyboard.
FOCUS_RULES = (
    "QAbstractItemView:focus, QLineEdit:focus, QPlainTextEdit:focus { border: 2px solid #0072B2; }"
    "QLabel:focus { border: 2px solid #0072B2; border-radius: 2px; }"
)
