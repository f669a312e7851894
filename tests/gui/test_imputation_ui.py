"""Missing values filled in by multiple imputation, chosen in the window by the keyboard, as a user does.

The figures the window shows are the workspace's (the pooled fit's) and the same as `twofold rerun` of the
session the window saves; pooling itself is checked against outside sources in tests/core/test_imputation.py.
"""

from __future__ import annotations

import json

from PySide6.QtCore import Qt

from gui_helpers import READMISSION, WAIT_MS, choose_outcome, idle, load, tick


def choose_missing_values(qtbot, window, index):
    combo = window.model_pane.missing_combo
    combo.setFocus()
    while combo.currentIndex() != index:
        qtbot.keyClick(combo, Qt.Key.Key_Down if combo.currentIndex() < index else Qt.Key.Key_Up)


def set_spin(qtbot, spin, value):
    spin.setFocus()
    spin.selectAll()
    qtbot.keyClicks(spin, str(value))
    qtbot.keyClick(spin, Qt.Key.Key_Tab)


def test_imputation_chosen_in_the_window_pools_the_results(qtbot, window, tmp_path):
    load(qtbot, window, READMISSION)
    choose_outcome(qtbot, window, "readmitted_30d")
    view = tick(qtbot, window, ["age", "comorbidity_score"])
    assert view.rows_used == 4783 and view.imputed is None
    pane = window.model_pane
    set_spin(qtbot, pane.copies_spin, 4)
    set_spin(qtbot, pane.seed_spin, 11)
    choose_missing_values(qtbot, window, 1)
    qtbot.waitUntil(lambda: idle(window) and window.results_pane.view is not None
                    and window.results_pane.view.imputed == (4, 11), timeout=WAIT_MS)
    shown = window.results_pane.counts.text()
    assert "Rows used: 5,000 of 5,000" in shown and "pooled over 4 imputed copies (seed 11)" in shown
    assert "Pooled likelihood-ratio test (D3" in window.results_pane.view.overall.text
    # Tests first, then the pooled assessment.
    box = window.results_pane.assessment_box
    qtbot.waitUntil(lambda: box.view is not None and "pooled" in box.view.title, timeout=WAIT_MS)
    assert "pooled on the logit scale" in box.auc.text()
    # The session the window saves re-runs to the same pooled figures.
    session = tmp_path / "s.json"
    window.session.call("save", lambda ws: __import__("twofold.core.outputs.session", fromlist=["x"]).save_session(
        ws.to_session(), session))
    qtbot.waitUntil(lambda: idle(window) and session.exists(), timeout=WAIT_MS)
    from twofold import commands

    out = tmp_path / "r.json"
    assert commands.run_rerun([str(session), "--json", str(out)]) == 0
    record = json.loads(out.read_text())
    assert record["imputation"]["m"] == 4 and record["imputation"]["seed"] == 11
    from twofold.core.outputs.text import fmt_or

    lines = [line for line in window.results_pane.view.lines if "odds_ratio" in line.texts]
    assert [line.texts["odds_ratio"] for line in lines][:2] == [fmt_or(t["odds_ratio"]) for t in record["terms"]]
    # Back to complete rows.
    choose_missing_values(qtbot, window, 0)
    qtbot.waitUntil(lambda: idle(window) and window.results_pane.view.imputed is None, timeout=WAIT_MS)
    assert window.results_pane.view.rows_used == 4783


def test_a_refused_imputation_leaves_the_choice_and_the_analysis_as_they_were(qtbot, window, tmp_path):
    import pandas as pd

    frame = pd.read_csv(READMISSION).head(800)
    frame.loc[frame.index[:500], "comorbidity_score"] = None
    path = tmp_path / "gappy_synthetic.csv"
    frame.to_csv(path, index=False)
    load(qtbot, window, path)
    choose_outcome(qtbot, window, "readmitted_30d")
    tick(qtbot, window, ["age", "comorbidity_score"])
    errors = []
    window.session.failed.connect(lambda failure: errors.append(failure.message))
    choose_missing_values(qtbot, window, 1)
    qtbot.waitUntil(lambda: idle(window) and bool(errors), timeout=WAIT_MS)
    assert "'comorbidity_score' is missing in" in errors[-1] and "tick 'impute anyway'" in errors[-1]
    assert window.model_pane.missing_combo.currentIndex() == 0
    complete = int(frame[["age", "comorbidity_score"]].notna().all(axis=1).sum())
    assert window.results_pane.view.imputed is None and window.results_pane.view.rows_used == complete
    # Confirmed by ticking 'impute anyway', then chosen again.
    check = window.model_pane.anyway_check
    assert check.isVisible() and check.isEnabled()
    check.setFocus()
    qtbot.keyClick(check, Qt.Key.Key_Space)
    assert check.isChecked()
    choose_missing_values(qtbot, window, 1)
    qtbot.waitUntil(lambda: idle(window) and window.results_pane.view.imputed is not None, timeout=WAIT_MS)
    assert window.results_pane.view.rows_used == 800


def test_side_by_side_view_of_imputed_and_complete_rows(qtbot, window):
    import statsmodels.api as sm
    import pandas as pd

    from twofold.core.outputs.text import fmt_or

    load(qtbot, window, READMISSION)
    choose_outcome(qtbot, window, "readmitted_30d")
    tick(qtbot, window, ["age", "comorbidity_score"])
    pane = window.model_pane
    assert not pane.side_button.isEnabled()
    set_spin(qtbot, pane.copies_spin, 3)
    choose_missing_values(qtbot, window, 1)
    qtbot.waitUntil(lambda: idle(window) and window.results_pane.view.imputed is not None, timeout=WAIT_MS)
    assert pane.side_button.isEnabled()
    qtbot.mouseClick(pane.side_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: getattr(pane, "side_dialog", None) is not None and pane.side_dialog.isVisible(),
                    timeout=WAIT_MS)
    table = pane.side_dialog.table
    assert table.rowCount() == 2
    # The complete-rows column against statsmodels' Logit on the rows pandas keeps.
    frame = pd.read_csv(READMISSION)[["readmitted_30d", "age", "comorbidity_score"]].dropna()
    ref = sm.Logit(frame["readmitted_30d"], sm.add_constant(frame[["age", "comorbidity_score"]])).fit(disp=0)
    for r, name in enumerate(("age", "comorbidity_score")):
        assert table.item(r, 2).text().startswith(fmt_or(float(__import__("math").exp(ref.params[name]))))
    assert "imputed and pooled over 3 copies (5,000 rows)" in pane.side_dialog.title.text()
    assert "complete rows only (4,783 rows)" in pane.side_dialog.title.text()


def test_stop_imputing_leaves_the_analysis_as_it_was(qtbot, window):
    load(qtbot, window, READMISSION)
    choose_outcome(qtbot, window, "readmitted_30d")
    tick(qtbot, window, ["age", "comorbidity_score", "lives_alone", "discharge_destination"])
    pane = window.model_pane
    set_spin(qtbot, pane.copies_spin, 100)
    choose_missing_values(qtbot, window, 1)
    qtbot.waitUntil(lambda: pane.impute_progress.isVisible() and pane.impute_bar.value() > 0, timeout=WAIT_MS)
    qtbot.mouseClick(pane.impute_stop, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: idle(window) and pane.missing_combo.currentIndex() == 0, timeout=WAIT_MS)
    assert not pane.impute_progress.isVisible()
    assert "stopped; nothing was changed" in window.message.text()
    assert window.results_pane.view.imputed is None and window.results_pane.view.rows_used == 4627
