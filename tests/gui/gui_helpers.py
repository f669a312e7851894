"""Helpers for the window tests: where the sample studies are, and how to drive the window."""

from __future__ import annotations

from pathlib import Path

REPO = Path(__file__).resolve().parents[2]
SAMPLES = REPO / "sample_studies"
READMISSION = SAMPLES / "readmission_synthetic.csv"
WOUND = SAMPLES / "wound_infection_synthetic.csv"

WAIT_MS = 20_000


def idle(window) -> bool:
    return not window.session.busy


def load(qtbot, window, path):
    """Open a file through the window and wait until it is shown."""
    window.open_path(path)
    qtbot.waitUntil(lambda: idle(window) and window.data_pane.study is not None
                    and window.data_pane.study.path == str(path), timeout=WAIT_MS)
    return window.data_pane.study


def choose_outcome(qtbot, window, name, event=None):
    window.model_pane.choose_outcome(name, event)
    qtbot.waitUntil(lambda: idle(window), timeout=WAIT_MS)


def tick(qtbot, window, names):
    """Tick exactly these predictors and wait for their results."""
    window.model_pane.set_ticked(names)
    qtbot.waitUntil(lambda: idle(window) and window.results_pane.view is not None
                    and set(window.results_pane.view.predictors) == set(names), timeout=WAIT_MS)
    return window.results_pane.view


def new_window(qtbot, settings_file):
    """A shown main window with its own settings file, once its core has loaded."""
    from PySide6.QtCore import QSettings

    from twofold.gui.window import MainWindow

    w = MainWindow(settings=QSettings(str(settings_file), QSettings.Format.IniFormat))
    qtbot.addWidget(w)
    w.resize(1400, 900)
    w.show()
    qtbot.waitUntil(lambda: w.session.core_ready, timeout=WAIT_MS)
    return w


def press_tick(qtbot, window, name):
    """Tick or untick a predictor as a keyboard user does: select it, press the space bar."""
    from PySide6.QtCore import Qt

    lst = window.model_pane.list
    row = next(i for i in range(lst.count()) if lst.item(i).data(Qt.ItemDataRole.UserRole) == name)
    lst.setFocus()
    lst.setCurrentRow(row)
    qtbot.keyClick(lst, Qt.Key.Key_Space)
