"""Shared set-up of the window tests: off screen, with a throw-away home folder.

``QT_QPA_PLATFORM=offscreen`` lets the tests run without a display, and
``TWOFOLD_HOME`` points settings, recent files and logs at a temporary folder
so the tests never touch the real user folder.
"""

from __future__ import annotations

import os
import tempfile

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
os.environ["TWOFOLD_HOME"] = tempfile.mkdtemp(prefix="twofold-gui-tests-")

import pytest  # noqa: E402

from gui_helpers import WAIT_MS  # noqa: E402


@pytest.fixture
def home(tmp_path, monkeypatch):
    folder = tmp_path / "home"
    monkeypatch.setenv("TWOFOLD_HOME", str(folder))
    return folder


@pytest.fixture
def window(qtbot, home, tmp_path):
    from PySide6.QtCore import QSettings

    from twofold.gui.window import MainWindow

    settings = QSettings(str(tmp_path / "settings.ini"), QSettings.Format.IniFormat)
    w = MainWindow(settings=settings)
    qtbot.addWidget(w)
    w.resize(1400, 900)
    w.show()
    qtbot.waitUntil(lambda: w.session.core_ready, timeout=WAIT_MS)
    yield w
    w.session.shutdown()
