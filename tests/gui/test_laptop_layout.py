"""The window on a hospital laptop: at 1366 by 768 and 1280 by 720, what a user must see is in sight.

Checked as a user would see it (offscreen): sentences wrap to the results pane (no sideways scrolling
of text), the coefficient table's essential columns are inside its frame, at least five models of the
ladder and eight predictors are in sight, the extra columns are one click away and the data pane steps
aside with a key press.
"""

from __future__ import annotations

import pytest
from PySide6.QtCore import Qt

from gui_helpers import READMISSION, WAIT_MS, choose_outcome, idle, load, tick
from twofold.gui.tables import CoefficientModel
from twofold.gui.window import balance

OUTCOME = "readmitted_30d"


@pytest.fixture(params=[(1366, 768), (1280, 720)], ids=["1366x768", "1280x720"])
def laptop(request, qtbot, window):
    width, height = request.param
    window.resize(width, height)
    balance(window)
    load(qtbot, window, READMISSION)
    choose_outcome(qtbot, window, OUTCOME)
    # A ladder of six models, one predictor at a time, as a user builds it.
    ticked = []
    for name in ("age", "sex", "length_of_stay", "discharge_destination", "prior_admissions", "lives_alone"):
        ticked.append(name)
        tick(qtbot, window, list(ticked))
    qtbot.wait(50)
    return window


def visible_rows(view) -> int:
    return view.viewport().height() // max(view.sizeHintForRow(0), 1)


def test_sentences_wrap_and_never_scroll_sideways(laptop):
    pane = laptop.results_pane
    body = pane.scroll.widget()
    assert pane.scroll.horizontalScrollBarPolicy() == Qt.ScrollBarPolicy.ScrollBarAlwaysOff
    assert body.width() <= pane.scroll.viewport().width()
    for label in (pane.counts, pane.contents, pane.overall, pane.previous):
        assert label.isVisible() and label.wordWrap()
        assert label.geometry().right() <= body.width()


def test_essential_columns_of_the_coefficient_table_are_in_sight(laptop):
    table = laptop.results_pane.table
    essential = (0, 1, 2, 3, CoefficientModel.PROFILE)
    for c in essential:
        if table.isColumnHidden(c):
            assert c == CoefficientModel.PROFILE  # only when the profile intervals are not worked out
            continue
        assert table.columnViewportPosition(c) + table.columnWidth(c) <= table.viewport().width(), c
    assert all(table.isColumnHidden(c) for c in CoefficientModel.EXTRA)


def test_five_models_and_eight_predictors_are_in_sight(laptop):
    assert visible_rows(laptop.ladder_pane.table) >= 5
    assert laptop.model_pane.list.count() >= 8
    assert visible_rows(laptop.model_pane.list) >= 8


def test_extra_columns_are_one_click_away(qtbot, laptop):
    pane = laptop.results_pane
    from PySide6.QtCore import QPoint

    pane.scroll.ensureWidgetVisible(pane.more_check)
    box = QPoint(8, pane.more_check.height() // 2)  # on the tick box, where a user clicks
    qtbot.mouseClick(pane.more_check, Qt.MouseButton.LeftButton, pos=box)
    assert not any(pane.table.isColumnHidden(c) for c in CoefficientModel.EXTRA)
    headers = [pane.coefficients.headerData(c, Qt.Orientation.Horizontal) for c in CoefficientModel.EXTRA]
    assert headers[0] == "Wald z"
    qtbot.mouseClick(pane.more_check, Qt.MouseButton.LeftButton, pos=box)
    assert all(pane.table.isColumnHidden(c) for c in CoefficientModel.EXTRA)


def test_the_data_pane_steps_aside_and_comes_back_from_the_keyboard(qtbot, laptop):
    before = laptop.results_pane.width()
    qtbot.keyClick(laptop, Qt.Key.Key_0, Qt.KeyboardModifier.ControlModifier)
    qtbot.waitUntil(lambda: not laptop.data_pane.isVisible(), timeout=WAIT_MS)
    qtbot.waitUntil(lambda: laptop.results_pane.width() > before, timeout=WAIT_MS)
    qtbot.keyClick(laptop, Qt.Key.Key_0, Qt.KeyboardModifier.ControlModifier)
    qtbot.waitUntil(lambda: laptop.data_pane.isVisible() and idle(laptop), timeout=WAIT_MS)


def test_the_window_comes_back_at_the_size_it_was_left(qtbot, home, tmp_path):
    from gui_helpers import new_window
    from twofold.gui.window import default_size

    settings = tmp_path / "settings.ini"
    first = new_window(qtbot, settings)
    first.resize(780, 560)
    qtbot.wait(50)
    left_at = (first.width(), first.height())
    first.close()
    second = new_window(qtbot, settings)
    second.resize(1400, 900)
    default_size(second)
    assert (second.width(), second.height()) == left_at != (1400, 900)
    second.session.shutdown()
