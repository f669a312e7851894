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

from gui_helpers import new_window  # noqa: E402


@pytest.fixture
def home(tmp_path, monkeypatch):
    folder = tmp_path / "home"
    monkeypatch.setenv("TWOFOLD_HOME", str(folder))
    return folder


@pytest.fixture
def window(qtbot, home, tmp_path):
    w = new_window(qtbot, tmp_path / "settings.ini")
    yield w
    w.session.shutdown()
