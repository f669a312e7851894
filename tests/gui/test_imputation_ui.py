"""Missing values filled in by multiple imputation, chosen in the window by the keyboard, as a user does.

The figures the window shows are the workspace's (the pooled fit's) and the same as `twofold rerun` of the
session the window saves; pooling itself is checked against outside sources in tests/core/test_imputation.py.
"""

from __future__ import annotations

import json

import pytest

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


def _d3_reference(frames, y, small, large):
    """D3 written from the papers, over statsmodels' own fits of each imputed copy.

    Meng & Rubin (1992, Biometrika 79:103): d_bar = mean of 2 (lnL_large - lnL_small) at each copy's own
    estimates, d_tilde = the same at the estimates averaged over the copies, r3 = (m + 1) / (k (m - 1))
    (d_bar - d_tilde), D3 = d_tilde / (k (1 + r3)) on F(k, v); v from Li, Raghunathan & Rubin (1991,
    JASA 86:1065): t = k (m - 1); t > 4: 4 + (t - 4) (1 + (1 - 2/t) / r3)^2, else t (1 + 1/k) (1 + 1/r3)^2 / 2.
    Returns (D3, k, v, p, mean lnL of the larger model at its own estimates).
    """
    import numpy as np
    import statsmodels.api as sm
    from scipy.stats import f

    def fits(cols):
        return [sm.Logit(y, sm.add_constant(frame[cols].astype(float))).fit(disp=0, tol=1e-12, maxiter=100)
                for frame in frames]

    fs, fl = fits(small), fits(large)
    m, k = len(frames), len(large) - len(small)
    qs = np.mean([r.params.to_numpy() for r in fs], axis=0)
    ql = np.mean([r.params.to_numpy() for r in fl], axis=0)
    d_bar = np.mean([2 * (a.llf - b.llf) for a, b in zip(fl, fs)])
    d_tilde = np.mean([2 * (a.model.loglike(ql) - b.model.loglike(qs)) for a, b in zip(fl, fs)])
    r3 = max((m + 1) / (k * (m - 1)) * (d_bar - d_tilde), 0.0)
    t = k * (m - 1)
    v = 4 + (t - 4) * (1 + (1 - 2 / t) / r3) ** 2 if t > 4 else t * (1 + 1 / k) * (1 + 1 / r3) ** 2 / 2
    stat = d_tilde / (k * (1 + r3))
    return stat, k, v, float(f.sf(stat, k, v)), float(np.mean([a.llf for a in fl]))


def test_ladder_rows_show_pooled_fits_and_d3_while_imputing(qtbot, window):
    from gui_helpers import press_tick

    from twofold.core.outputs.text import fmt_num, fmt_p
    from twofold.gui.tables import RawRole

    load(qtbot, window, READMISSION)
    choose_outcome(qtbot, window, "readmitted_30d")
    tick(qtbot, window, ["age"])
    pane = window.model_pane
    set_spin(qtbot, pane.copies_spin, 4)
    set_spin(qtbot, pane.seed_spin, 11)
    choose_missing_values(qtbot, window, 1)
    qtbot.waitUntil(lambda: idle(window) and window.results_pane.view.imputed == (4, 11), timeout=WAIT_MS)
    # Ticks with imputation on, pressed as a user does: each new column is imputed too.
    for name in ("comorbidity_score", "lives_alone"):
        press_tick(qtbot, window, name)
        qtbot.waitUntil(lambda: idle(window) and name in window.results_pane.view.predictors, timeout=WAIT_MS)
    model = window.ladder_pane.model

    def cell(r, c, role=Qt.ItemDataRole.DisplayRole):
        return model.data(model.index(r, c), role)

    # The models fitted before the last copies were made say "being fitted" until they are pooled on them.
    qtbot.waitUntil(lambda: model.rowCount() == 3 and all("being fitted" not in (cell(r, c) or "")
                                                         for r in range(3) for c in range(3, 9)), timeout=WAIT_MS)
    assert model.headerData(6, Qt.Orientation.Horizontal) == "Pooled test against\nthe model before (F)"
    assert all(cell(r, 5) == "not defined" for r in range(3))
    assert "No AIC or BIC is given" in window.ladder_pane.notices.text()
    # Against D3 worked out in this test over statsmodels' fits of the copies the workspace made.
    copies = window.session.workspace.imputed_copies()
    frames = []
    for study in copies.studies:
        frame = study.frame.iloc[copies.rows].reset_index(drop=True)
        frame["lives_alone"] = (frame["lives_alone"] == "yes").astype(float)  # either coding: D3 is invariant
        frames.append(frame)
    y = frames[0]["readmitted_30d"].astype(float)
    assert len(frames) == 4 and len(y) == 5000
    for row, small, large in ((1, ["age"], ["age", "comorbidity_score"]),
                              (2, ["age", "comorbidity_score"], ["age", "comorbidity_score", "lives_alone"])):
        stat, k, v, p, llf = _d3_reference(frames, y, small, large)
        assert model.rows[row].kind == "D3"
        assert model.rows[row].statistic == pytest.approx(stat, rel=1e-6)
        assert model.rows[row].df_denominator == pytest.approx(v, rel=1e-5)
        assert cell(row, 6, RawRole) == pytest.approx(stat * k, rel=1e-6)
        assert cell(row, 6) == f"{fmt_num(stat, 2)} (D3)"
        assert cell(row, 7) == f"{k} and {fmt_num(v, 1)}"
        assert cell(row, 8) == fmt_p(p)
        assert cell(row, 4) == fmt_num(llf, 2)
    # The results pane's nested test is the same pooled test as the ladder's last row.
    assert f"F = {cell(2, 6).split(' ')[0]} on 1 and" in window.results_pane.view.previous.text
    # So is "Compare" of models 1 and 3 (D3 of the two added predictors together), with no AIC.
    ladder = window.ladder_pane
    ladder.first.setCurrentIndex(0)
    ladder.second.setCurrentIndex(2)
    qtbot.mouseClick(ladder.compare_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: "compared with model 3" in ladder.comparison.text(), timeout=WAIT_MS)
    stat, k, v, p, _ = _d3_reference(frames, y, ["age"], ["age", "comorbidity_score", "lives_alone"])
    shown = ladder.comparison.text()
    assert f"F = {fmt_num(stat, 2)} on 2 and {fmt_num(v, 1)} degrees of freedom" in shown
    assert f"p-value {fmt_p(p)}" in shown and "No AIC or BIC" in shown
    # The pooled assessment follows, with the ROC curve and calibration plot of the pooled predictions.
    box = window.results_pane.assessment_box
    qtbot.waitUntil(lambda: box.view is not None and "pooled" in box.view.title and box.view.rung == 2,
                    timeout=WAIT_MS)
    for key in ("roc", "calibration"):
        assert not box.plots[key].isHidden() and not box.plots[key].pixmap().isNull()
    assert box.plots["influence"].isHidden()
    assert not box.plot_note.isHidden() and "are of the pooled predictions" in box.plot_note.text()
