"""Column and group names from the data are shown as they are, never read as rich text (issue 16).

A column named like an HTML image tag once made the window load the image it
pointed at.  The file here is generated: a numeric column and a group column
whose names, and one group's name, are tags pointing at a picture file the
test writes; the test presses the window's keys and then reads every label
and tooltip the user can see.
"""

from __future__ import annotations

import numpy as np
import pytest
from PySide6.QtCore import Qt
from PySide6.QtGui import QImage
from PySide6.QtWidgets import QApplication, QLabel

from gui_helpers import WAIT_MS, choose_outcome, idle, load, press_tick


def _shows_tags_as_text(text: str, fmt) -> bool:
    """Whether a label or tooltip with this text and format would show a raw tag as rich text."""
    if "<img" not in text and "<b>ward" not in text:  # the raw names from the data
        return True
    if fmt == Qt.TextFormat.PlainText:
        return True
    return False  # rich, or automatic with a raw tag in it: Qt would read the tag


@pytest.fixture
def hostile(tmp_path):
    picture = tmp_path / "pixel.png"
    image = QImage(1, 1, QImage.Format.Format_RGB32)
    image.fill(0)
    image.save(str(picture))
    tag = f'<img src="{picture}" width="400" height="400">'
    dose, ward = f"{tag}dose", f"<b>ward</b>{tag}"
    rng = np.random.default_rng(16)
    n = 300
    x = rng.normal(size=n)
    groups = np.array(["east", f"{tag}west", "north"])[rng.integers(0, 3, n)]
    y = (rng.random(n) < 1 / (1 + np.exp(-0.8 * x))).astype(int)
    path = tmp_path / "hostile.csv"
    with open(path, "w", encoding="utf-8") as fh:
        fh.write(f'died,"{dose.replace(chr(34), chr(34) * 2)}","{ward.replace(chr(34), chr(34) * 2)}"\n')
        for a, b, c in zip(y, x, groups):
            fh.write(f'{a},{b:.3f},"{c.replace(chr(34), chr(34) * 2)}"\n')
    return path, dose, ward


def test_names_from_the_data_are_never_read_as_rich_text(qtbot, window, hostile):
    path, dose, ward = hostile
    load(qtbot, window, path)
    choose_outcome(qtbot, window, "died", 1)
    for name in (dose, ward):
        press_tick(qtbot, window, name)
        qtbot.waitUntil(lambda name=name: idle(window) and window.results_pane.view is not None
                        and name in window.results_pane.view.predictors, timeout=WAIT_MS)
    s = window.session
    qtbot.waitUntil(lambda: idle(window) and s.last_assessment_id == s.last_results_id, timeout=WAIT_MS)
    window.calculator_action.trigger()  # Risk, Risk for one patient
    qtbot.waitUntil(lambda: window.calculator is not None and window.calculator.isVisible(), timeout=WAIT_MS)

    labels = [w for top in QApplication.topLevelWidgets() for w in top.findChildren(QLabel)]
    showing = [lab for lab in labels if "<img" in lab.text()]
    assert showing, "no label shows the hostile names"  # the names are on screen somewhere
    wrong = [lab.text()[:80] for lab in labels if not _shows_tags_as_text(lab.text(), lab.textFormat())]
    assert wrong == []
    # Rich labels (tests, assessment) carry the names escaped: what the user reads is the name itself.
    rich = [lab for lab in labels if lab.textFormat() == Qt.TextFormat.RichText and "&lt;img" in lab.text()]
    assert rich
    # Tooltips of the predictor list and of the tables hold the names escaped too.
    tips = [window.model_pane.list.item(i).toolTip() for i in range(window.model_pane.list.count())]
    for view in (window.data_pane.columns, window.results_pane.table):
        model = view.model()
        tips += [model.data(model.index(r, 0), Qt.ItemDataRole.ToolTipRole) or "" for r in range(model.rowCount())]
    named = [t for t in tips if "img" in t]
    assert named and all("<img" not in t and "&lt;img" in t for t in named)


def test_a_very_wide_file_measures_only_the_columns_in_view(qtbot, window, tmp_path):
    # Measuring every column's width held the window for 46 s on a file of 50,000 columns; 3,000 show the rule.
    rng = np.random.default_rng(13)
    k = 3000
    path = tmp_path / "wide.csv"
    with open(path, "w", encoding="utf-8") as fh:
        fh.write("died," + ",".join(f"lab_{i}" for i in range(k)) + "\n")
        for r in range(40):
            fh.write(f"{r % 2}," + ",".join(f"{v:.2f}" for v in rng.normal(size=k)) + "\n")
    load(qtbot, window, path)
    pane = window.data_pane
    assert pane.cells.columnCount() == k + 1
    first = set(pane.measured_columns)
    assert 0 < len(first) < 100
    bar = pane.table.horizontalScrollBar()
    pane.table.setFocus()
    pane.table.setCurrentIndex(pane.cells.index(0, 0))
    qtbot.keyClick(pane.table, Qt.Key.Key_End)  # to the last column, as a keyboard user would
    qtbot.waitUntil(lambda: bar.value() > 0 and max(pane.measured_columns) == k, timeout=WAIT_MS)
    assert len(pane.measured_columns) < 200  # the columns in view at each end, not all 3,001
