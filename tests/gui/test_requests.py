"""Requests to the worker: newer requests win, errors read as on the command line, nothing crashes.

The error checks compare the window's message with ``str(error)`` raised by
the core itself on the same input, which is what the command line prints.
"""

from __future__ import annotations

import threading

import pytest
from PySide6.QtCore import Qt

from gui_helpers import READMISSION, WAIT_MS, choose_outcome, load, tick
from twofold.core.errors import TwofoldError
from twofold.core.models.study import Study
from twofold.gui import session as session_module
from twofold.gui.worker import JobResult


@pytest.fixture
def readmission(qtbot, window):
    load(qtbot, window, READMISSION)
    choose_outcome(qtbot, window, "readmitted_30d")
    return window


def test_quick_ticks_are_each_their_own_ladder_step_and_only_the_newest_is_shown(qtbot, readmission, monkeypatch):
    from twofold.core.workspace import Workspace

    window = readmission
    gate, started = threading.Event(), threading.Event()
    calls = []
    original = Workspace.set_predictors

    def slow_fit(self, predictors, **options):
        calls.append(tuple(predictors))
        if tuple(predictors) == ("age",):
            started.set()
            gate.wait(10)  # a slow fit: it finishes only after the newer ticks were made
        return original(self, predictors, **options)

    monkeypatch.setattr(Workspace, "set_predictors", slow_fit)
    shown = []
    window.session.resultsChanged.connect(lambda v: shown.append(None if v is None else v.predictors))
    pane = window.model_pane
    pane.set_ticked(["age"])  # tick A
    assert started.wait(10)
    pane.set_ticked(["age", "sex"])  # tick B, waiting behind A
    pane.set_ticked(["age", "sex", "prior_admissions"])  # tick C
    gate.set()
    qtbot.waitUntil(lambda: not window.session.busy, timeout=WAIT_MS)
    # Every tick is fitted as its own step, so each one-predictor-at-a-time test is kept...
    assert calls == [("age",), ("age", "sex"), ("age", "sex", "prior_admissions")]
    # The newest model is fitted and shown first; the one passed over (age + sex) is fitted right after,
    # and the ladder table then shows its figures too.
    table = window.ladder_pane.model
    qtbot.waitUntil(lambda: all(r.log_likelihood is not None and r.index == 0 or r.df == 1 for r in table.rows),
                    timeout=WAIT_MS)
    assert [r.predictors for r in table.rows] == calls
    assert [r.df for r in table.rows] == [None, 1, 1]
    assert all(r.log_likelihood is not None for r in table.rows)
    assert "being fitted" not in " ".join(table.index(1, c).data() for c in range(table.columnCount()))
    # ...but only the newest results reach the screen.
    assert shown == [("age", "sex", "prior_admissions")]
    assert window.results_pane.view.predictors == ("age", "sex", "prior_admissions")
    assert pane.ticked_predictors() == ("age", "sex", "prior_admissions")


def test_results_of_an_older_request_arriving_last_never_overwrite_newer(qtbot):
    s = session_module.Session()  # worker not started: results are delivered by hand, out of order
    shown, errors = [], []
    s.resultsChanged.connect(shown.append)
    s.failed.connect(errors.append)
    a = s.set_predictors(("age",))
    b = s.set_predictors(("age", "sex"))
    assert b > a
    s._on_done(JobResult(b, "fit", {"results": "results of B"}))
    s._on_done(JobResult(a, "fit", {"results": "results of A"}, error="A failed"))
    assert shown == ["results of B"]
    assert errors == []  # nor does an old request's error
    assert not s.busy
    s.shutdown()


def test_a_follow_up_waits_until_the_window_has_shown_its_result(qtbot):
    """The slower extras of a request (its assessment, say) start only once the window has shown its result, so
    they never hold the interpreter lock while the window lays it out and paints it; without word from the
    window they start anyway after a short wait, and stopping the worker releases a waiting follow-up."""
    from twofold.gui.worker import CoreWorker, Job

    worker = CoreWorker()
    worker.SHOW_WAIT_S = 60.0  # no quiet fallback here: only the window's word may start the follow-up
    sent, started = threading.Event(), threading.Event()
    worker.jobDone.connect(lambda result: None if result.followup else sent.set(), Qt.ConnectionType.DirectConnection)
    worker.start()
    try:
        worker.submit(Job(7, "fit", lambda: {"results": "shown"}, then=lambda: started.set() or {}))
        assert sent.wait(10)
        assert not started.wait(0.3)  # sent, but not yet shown: the follow-up waits
        worker.result_shown(6)  # an older result shown says nothing of this one
        assert not started.wait(0.3)
        worker.result_shown(7)
        assert started.wait(10)

        quick = CoreWorker()
        quick.SHOW_WAIT_S = 0.05  # the window never answers: the follow-up starts after the wait
        later = threading.Event()
        quick.start()
        quick.submit(Job(1, "fit", lambda: {}, then=lambda: later.set() or {}))
        assert later.wait(10)
        quick.stop()
    finally:
        worker.stop()
    assert not worker.isRunning()


def test_a_non_binary_outcome_shows_the_core_message(qtbot, window):
    load(qtbot, window, READMISSION)
    with pytest.raises(TwofoldError) as expected:
        Study.from_file(READMISSION).set_outcome("discharge_destination")
    choose_outcome(qtbot, window, "discharge_destination")
    assert window.message.isVisible()
    assert window.message.text() == str(expected.value)
    assert "exactly two" in window.message.text()


@pytest.mark.parametrize("make", ["missing", "empty"])
def test_a_bad_file_shows_the_core_message(qtbot, window, tmp_path, make):
    path = tmp_path / "records.csv"
    if make == "empty":
        path.write_text("")
    with pytest.raises(TwofoldError) as expected:
        Study.from_file(path)
    window.open_path(path)
    qtbot.waitUntil(lambda: window.message.isVisible(), timeout=WAIT_MS)
    assert window.message.text() == str(expected.value)


def test_a_tick_with_no_usable_rows_is_undone_with_the_core_message(qtbot, window, tmp_path):
    path = tmp_path / "no_overlap.csv"
    # 'dose' is present only where the outcome is missing: no row has both.
    lines = ["outcome,dose,age"] + [f"{i % 2},,{40 + i}" for i in range(30)] + [f",{i},{50 + i}" for i in range(30)]
    path.write_text("\n".join(lines) + "\n")
    study = Study.from_file(path)
    study.set_outcome("outcome")
    from twofold.core.models.ladder import Ladder

    with pytest.raises(TwofoldError) as expected:
        Ladder(study).add(["dose"])
    load(qtbot, window, path)
    choose_outcome(qtbot, window, "outcome")
    window.model_pane.set_ticked(["dose"])
    qtbot.waitUntil(lambda: window.message.isVisible() and not window.session.busy, timeout=WAIT_MS)
    assert window.message.text() == str(expected.value)
    assert window.model_pane.ticked_predictors() == ()
    # The worker carries on: the next tick is fitted.
    view = tick(qtbot, window, ["age"])
    assert view.predictors == ("age",)
    assert not window.message.isVisible(), window.message.text()


def test_an_unexpected_error_is_logged_and_shown_not_a_crash(qtbot, readmission, home, monkeypatch):
    window = readmission
    from twofold.core.models.ladder import Ladder

    def broken(self, predictors, defer=False):
        raise RuntimeError("simulated failure inside the fit")

    monkeypatch.setattr(Ladder, "add", broken)
    window.model_pane.set_ticked(["age"])
    qtbot.waitUntil(lambda: window.error_box is not None and window.error_box.isVisible(), timeout=WAIT_MS)
    log = home / "logs" / "twofold-error.log"
    assert log.exists()
    assert "RuntimeError: simulated failure inside the fit" in log.read_text()
    assert str(log) in window.error_box.text()
    window.error_box.close()
    monkeypatch.undo()
    view = tick(qtbot, window, ["age", "sex"])  # the worker survived
    assert view.predictors == ("age", "sex")


def test_the_exception_hook_logs_and_shows_a_message(qtbot, window, home):
    from PySide6.QtWidgets import QApplication

    from twofold.gui import app as app_module

    qapp = QApplication.instance()
    qapp.twofold_window = window
    try:
        try:
            raise KeyError("a slip in a slot")
        except KeyError as exc:
            app_module._report_unexpected(type(exc), exc, exc.__traceback__)
    finally:
        del qapp.twofold_window
    assert window.error_box is not None and window.error_box.isVisible()
    assert "KeyError" in window.error_box.text()
    assert "a slip in a slot" in (home / "logs" / "twofold-error.log").read_text()
    window.error_box.close()


def test_role_list_offers_only_sensible_roles(qtbot, window):
    load(qtbot, window, READMISSION)
    cols = {c.name: c for c in window.data_pane.columns_model.columns}
    age_roles = [v for v, _ in cols["age"].role_choices]
    assert "numeric" in age_roles and "excluded" in age_roles
    dest_roles = [v for v, _ in cols["discharge_destination"].role_choices]
    assert "numeric" not in dest_roles  # text cannot be a number
    assert cols["comorbidity_score"].n_missing == Study.from_file(READMISSION).columns["comorbidity_score"].n_missing
    # Selecting a column fills the role and reference boxes.
    row = [c.name for c in window.data_pane.columns_model.columns].index("discharge_destination")
    window.data_pane.columns.selectRow(row)
    assert window.data_pane.role_combo.currentData() == "categorical"
    assert window.data_pane.reference_combo.isEnabled()
    assert window.data_pane.reference_combo.currentData() == cols["discharge_destination"].reference
    model = window.data_pane.columns_model
    assert model.data(model.index(row, 4), Qt.ItemDataRole.DisplayRole) == cols["discharge_destination"].reference_label


def test_ticks_while_another_file_opens_are_not_applied_to_it(qtbot, readmission):
    window = readmission
    from gui_helpers import WOUND

    window.open_path(WOUND)
    assert window.model_pane.set_ticked(["age"]) is None  # the list belongs to the file being replaced
    qtbot.waitUntil(lambda: not window.session.busy and window.data_pane.study.source == WOUND.name,
                    timeout=WAIT_MS)
    assert not window.message.isVisible()
    assert window.results_pane.view is None
    assert window.model_pane.ticked_predictors() == ()


def _big_csv(path, rows=60_000):
    # Seeded synthetic rows, enough for the core to read the file in several chunks.
    import numpy as np

    rng = np.random.default_rng(7)
    age = rng.integers(20, 90, rows)
    y = (rng.random(rows) < 0.3).astype(int)
    path.write_text("age,outcome\n" + "\n".join(f"{a},{b}" for a, b in zip(age, y)) + "\n")
    return path


def test_opening_reports_progress_and_can_be_stopped(qtbot, readmission, tmp_path):
    from twofold.gui.worker import Job

    window = readmission
    big = _big_csv(tmp_path / "big.csv")
    seen = []
    window.session.loadProgress.connect(seen.append)
    load(qtbot, window, big)
    assert seen and seen[-1] == 1.0 and seen == sorted(seen)

    # Hold the worker, ask for the file again, then stop it before it is read.
    load(qtbot, window, READMISSION)
    choose_outcome(qtbot, window, "readmitted_30d")
    gate = threading.Event()
    window.session._worker.submit(Job(10**9, "hold", lambda: gate.wait(10) and {}))
    window.open_path(big)
    assert window.stop_button.isVisibleTo(window.busy_widget)
    window.session.cancel_load()
    gate.set()
    qtbot.waitUntil(lambda: not window.session.busy, timeout=WAIT_MS)
    assert window.data_pane.study.source == READMISSION.name  # the file shown before stays
    assert not window.message.isVisible()
    assert "stopped" in window.statusBar().currentMessage()
    assert window.model_pane.list.isEnabled()
