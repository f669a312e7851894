"""The window as one user drives it: real buttons and keys, and one analysis shared by window, session,
re-run and report."""

from __future__ import annotations

import json
import re
import subprocess
import sys

import pytest
from PySide6.QtCore import Qt

from gui_helpers import READMISSION, WAIT_MS, choose_outcome, idle, load, press_tick

OUTCOME = "readmitted_30d"


def wait_results(qtbot, window, predictors):
    s = window.session
    qtbot.waitUntil(lambda: idle(window) and window.results_pane.view is not None
                    and set(window.results_pane.view.predictors) == set(predictors)
                    and s.last_assessment_id == s.last_results_id, timeout=WAIT_MS)


@pytest.fixture
def readmission(qtbot, window):
    load(qtbot, window, READMISSION)
    choose_outcome(qtbot, window, OUTCOME)
    return window


def run_bootstrap_by_hand(qtbot, window, repetitions: str, seed: str):
    """Open the Model shape dialog from its menu, type the numbers and press the real button."""
    window.model_shape_action.trigger()
    d = window.model_shape_dialog
    d.tabs.setCurrentIndex(2)
    for box, text in ((d.reps_spin, repetitions), (d.seed_spin, seed)):
        box.lineEdit().selectAll()
        qtbot.keyClicks(box.lineEdit(), text)
    qtbot.mouseClick(d.run_boot, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: d.status.text().startswith("Bootstrap done"), timeout=4 * WAIT_MS)
    qtbot.waitUntil(lambda: idle(window), timeout=WAIT_MS)
    return d


def test_the_bootstrap_button_runs_the_number_typed(qtbot, readmission):
    from twofold.core.data.io import read_table
    from twofold.core.models.modelling import bootstrap_validation
    from twofold.core.models.study import Study
    from twofold.core.outputs.text import fmt_num

    window = readmission
    for name in ("age", "prior_admissions"):
        press_tick(qtbot, window, name)
    wait_results(qtbot, window, ["age", "prior_admissions"])
    d = run_bootstrap_by_hand(qtbot, window, "500", "11")
    assert "500 of 500 resamples" in d.status.text()
    assert d.validation.repetitions == 500 == d.validation.completed
    # Reference: the same model fitted outside the window, validated with the same seed.
    study = Study(read_table(READMISSION))
    study.set_outcome(OUTCOME)
    ref = bootstrap_validation(study.fit(["age", "prior_admissions"]), 500, seed=11)
    assert d.boot_labels["auc"].text().startswith(fmt_num(ref.auc_corrected))


def _term_rows(record):
    return [(t["column"], t["level"], round(t["estimate"], 6), round(t["std_error"], 6),
             round(t["or_pl_low"], 4), round(t["or_pl_high"], 4)) for t in record["terms"]]


@pytest.mark.assessment_process
def test_window_session_rerun_and_report_give_the_same_digits(qtbot, readmission, tmp_path, monkeypatch):
    from twofold.gui import sessions_ui

    window = readmission
    for name in ("age", "sex", "prior_admissions"):
        press_tick(qtbot, window, name)
        wait_results(qtbot, window, window.model_pane.ticked_predictors())
    assert [r.predictors for r in window.results_pane.view.ladder.rows] == [
        ("age",), ("age", "sex"), ("age", "sex", "prior_admissions")]
    pane = window.results_pane
    pane.profile_check.setChecked(True) if pane.profile_check.isVisible() else None
    qtbot.waitUntil(lambda: pane.profile is not None, timeout=WAIT_MS)
    d = run_bootstrap_by_hand(qtbot, window, "60", "5")
    d.close()

    saved = tmp_path / "analysis.json"
    monkeypatch.setattr(sessions_ui, "choose_save_path", lambda parent, start: str(saved))
    done = []
    window.sessions.finished.connect(lambda tag, payload: done.append(tag))
    window.sessions.save_action.trigger()
    qtbot.waitUntil(lambda: "saved" in done, timeout=WAIT_MS)
    session = json.loads(saved.read_text())
    assert session["validate"] == 60 and session["seed"] == 5 and session["profile_ci"]
    assert session["parents"] == [None, 0, 1]
    assert not window.session.last_history.unsaved

    report = tmp_path / "window-report.html"
    window.sessions.report_to(report)
    qtbot.waitUntil(lambda: "report" in done, timeout=WAIT_MS)

    rerun_report = tmp_path / "rerun-report.html"
    run = subprocess.run([sys.executable, "-m", "twofold.cli", "rerun", str(saved), "--json", "-",
                          "--report", str(rerun_report)], capture_output=True, text=True, timeout=300)
    assert run.returncode == 0, run.stderr
    again = json.loads(run.stdout)

    # The window's own record of what it shows (the same figures the report prints).
    shown = {}
    window.session.call("look", lambda ws: ws.result().record, done=lambda r: shown.update(r))
    qtbot.waitUntil(lambda: bool(shown), timeout=WAIT_MS)
    assert _term_rows(again) == _term_rows(shown)
    assert again["overall"]["g"] == pytest.approx(shown["overall"]["g"], abs=5e-6)
    for key in ("auc_corrected", "calibration_slope_corrected", "brier_corrected"):
        assert again["validation"][key] == pytest.approx(shown["validation"][key], abs=5e-7)

    def printed_tables(path):
        html = path.read_text(encoding="utf-8")
        body = re.sub(r"Written on [^<]*|Twofold [0-9.]+ [^<]*", "", html)
        return re.findall(r"<table.*?</table>", body, flags=re.S)

    window_tables, rerun_tables = printed_tables(report), printed_tables(rerun_report)
    coefficient = [t for t in window_tables if "profile-likelihood interval" in t]
    assert coefficient and coefficient[0] in rerun_tables
    ladder = [t for t in window_tables if "built from" in t]
    assert ladder and ladder[0] in rerun_tables  # the models tried, with AIC, BIC and their tests
    corrected = f"{shown['validation']['auc_corrected']:.3f}"
    assert corrected in report.read_text(encoding="utf-8") and corrected in rerun_report.read_text(encoding="utf-8")


def test_a_role_change_that_removes_models_can_be_undone_from_the_menu(qtbot, readmission):
    window = readmission
    for name in ("age", "discharge_destination"):
        press_tick(qtbot, window, name)
        wait_results(qtbot, window, window.model_pane.ticked_predictors())
    before = [r.predictors for r in window.results_pane.view.ladder.rows]
    # Choose "excluded" for discharge_destination with the keyboard in the role list.
    pane = window.data_pane
    names = [c.name for c in pane.study.columns]
    pane.columns.setCurrentIndex(pane.columns.model().index(names.index("discharge_destination"), 0))
    combo = pane.role_combo
    target = next(i for i in range(combo.count()) if combo.itemData(i) == "excluded")
    combo.setFocus()
    while combo.currentIndex() != target:
        qtbot.keyClick(combo, Qt.Key.Key_Down if combo.currentIndex() < target else Qt.Key.Key_Up)
    qtbot.waitUntil(lambda: idle(window) and window.results_pane.view is not None
                    and "discharge_destination" not in window.results_pane.view.predictors, timeout=WAIT_MS)
    assert "Undo (Ctrl+Z) brings them back" in window.statusBar().currentMessage()
    assert window.undo_action.isEnabled()
    window.undo_action.trigger()
    qtbot.waitUntil(lambda: idle(window) and [r.predictors for r in window.results_pane.view.ladder.rows] == before,
                    timeout=WAIT_MS)
    assert window.model_pane.ticked_predictors() == ("age", "discharge_destination")
    assert window.redo_action.isEnabled()


def test_quitting_with_unsaved_changes_asks_and_cancel_keeps_the_work(qtbot, readmission, unsaved_answers):
    window = readmission
    press_tick(qtbot, window, "age")
    wait_results(qtbot, window, ["age"])
    unsaved_answers.answers[0] = "cancel"
    window.close()
    assert unsaved_answers.asked == ["closing Twofold"]
    assert window.isVisible() and window.results_pane.view is not None
    # Opening another file asks too, and "cancel" keeps the analysis on screen.
    assert window.open_path(READMISSION) is None
    assert unsaved_answers.asked[-1] == "opening another file"
    unsaved_answers.answers[0] = "discard"
    window.close()
    assert not window.isVisible()
