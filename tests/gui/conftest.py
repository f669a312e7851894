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


@pytest.fixture(autouse=True)
def assessments_here(request):
    """Most window tests work the assessment out on its thread in the test process: a process of its own
    for each of the many windows the tests open would only load the machine.  Tests marked
    ``assessment_process`` use the process, as the application does."""
    from twofold.gui.session import Session

    patcher = pytest.MonkeyPatch()
    if request.node.get_closest_marker("assessment_process") is None:
        patcher.setattr(Session, "assess_in_process", False)
    yield
    patcher.undo()


@pytest.fixture(autouse=True)
def unsaved_answers():
    """Questions about unsaved changes are answered "don't save" unless a test says otherwise; asked ones are kept.

    Its own patcher, set up before and undone after every other fixture, so a test's
    ``monkeypatch.undo()`` or the closing of its windows never meets the real question box.
    """
    from twofold.gui import sessions_ui

    patcher = pytest.MonkeyPatch()

    asked = []

    def answer(parent, doing):
        asked.append(doing)
        return asked_answer[0]

    asked_answer = ["discard"]
    patcher.setattr(sessions_ui, "ask_unsaved", answer)
    answer.asked = asked
    answer.answers = asked_answer
    yield answer
    patcher.undo()
