"""The "Usefulness" dialog, driven by pressing its buttons and typing in its boxes; its figures against outside
routes (hand formulas, pandas, statsmodels)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from PySide6.QtCore import Qt

from gui_helpers import READMISSION, WAIT_MS, choose_outcome, idle, load, tick

OUTCOME = "readmitted_30d"
PREDICTORS = ["age", "prior_admissions", "comorbidity_score", "lives_alone"]


@pytest.fixture
def dialog(qtbot, window):
    load(qtbot, window, READMISSION)
    choose_outcome(qtbot, window, OUTCOME)
    tick(qtbot, window, ["age"])
    tick(qtbot, window, PREDICTORS)
    d = window.open_usefulness()
    qtbot.waitUntil(lambda: "overview" in d.shown and idle(window), timeout=WAIT_MS)
    return d


def _refit(predictors):
    """The model refitted with statsmodels on a pandas-built design (outside the window)."""
    frame = pd.read_csv(READMISSION)
    frame = frame[[OUTCOME] + PREDICTORS].dropna()
    X = pd.get_dummies(frame[predictors], drop_first=True, dtype=float)
    res = sm.Logit(frame[OUTCOME].astype(float), sm.add_constant(X)).fit(disp=0)
    return frame, np.asarray(res.predict(sm.add_constant(X)))


def _type(qtbot, edit, text):
    edit.selectAll()
    qtbot.keyClicks(edit, text)


def _cell(table, row, col):
    return table.item(row, col).text()


def test_decision_curve_of_the_shown_and_a_second_model_matches_vickers_and_elkin(qtbot, window, dialog):
    _type(qtbot, dialog.nb_low, "10")
    _type(qtbot, dialog.nb_high, "30")
    _type(qtbot, dialog.nb_step, "10")
    qtbot.keyClicks(dialog.second_combo, "Model 1")
    qtbot.mouseClick(dialog.draw_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: "decision" in dialog.shown and idle(window), timeout=WAIT_MS)
    frame, p_full = _refit(PREDICTORS)
    _, p_age = _refit(["age"])
    y = frame[OUTCOME].to_numpy()
    table = dialog.decision_table
    assert [_cell(table, r, 0) for r in range(table.rowCount())] == ["10%", "20%", "30%"]
    for r, t in enumerate((0.1, 0.2, 0.3)):
        # Vickers & Elkin (2006): NB = TP/n - FP/n * t/(1-t), treating those at or above t.
        for p, col in ((p_full, 1), (p_age, 3)):
            treat = p >= t
            nb = (treat & (y == 1)).sum() / len(y) - (treat & (y == 0)).sum() / len(y) * t / (1 - t)
            assert float(_cell(table, r, col)) == pytest.approx(nb, abs=6e-5)
        prevalence = y.mean()
        assert float(_cell(table, r, 4)) == pytest.approx(prevalence - (1 - prevalence) * t / (1 - t), abs=6e-5)
    assert table.horizontalHeaderItem(3).text() == "model of age"
    assert "thresholds" in dialog.decision_reading.text()
    assert not dialog.decision_picture.pixmap().isNull()


def test_units_table_and_funnel_from_the_chosen_column(qtbot, window, dialog):
    dialog.tabs.setCurrentIndex(1)
    qtbot.keyClicks(dialog.unit_combo, "discharge_destination")
    assert dialog.unit_combo.currentText() == "discharge_destination"
    qtbot.mouseClick(dialog.units_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: "units" in dialog.shown and idle(window), timeout=WAIT_MS)
    frame, p = _refit(PREDICTORS)
    full = pd.read_csv(READMISSION).loc[frame.index]
    by = pd.DataFrame({"u": full["discharge_destination"], "y": frame[OUTCOME], "p": p}).groupby("u").sum()
    table = dialog.units_table
    for r in range(table.rowCount()):
        unit = _cell(table, r, 0)
        assert int(_cell(table, r, 5).replace(",", "")) == by.loc[unit, "y"]
        assert float(_cell(table, r, 6).replace(",", "")) == pytest.approx(by.loc[unit, "p"], abs=0.06)
        assert "chance" in _cell(table, r, 1)
    assert "only as good as the model" in dialog.units_note.text()
    assert not dialog.funnel_picture.pixmap().isNull()


def test_a_predictor_is_not_offered_as_a_unit_column(qtbot, window, dialog):
    items = [dialog.unit_combo.itemText(i) for i in range(dialog.unit_combo.count())]
    assert "age" not in items and OUTCOME not in items and "discharge_destination" in items
    # An identifier (one record per value) or a date names no unit; the box starts on "choose".
    assert "admission_id" not in items and "admission_date" not in items
    assert dialog.unit_combo.currentData() is None
    qtbot.mouseClick(dialog.units_button, Qt.MouseButton.LeftButton)
    assert "Choose the column" in dialog.status.text()


def test_subgroups_show_the_groups_of_the_chosen_column(qtbot, window, dialog):
    from sklearn.metrics import roc_auc_score

    dialog.tabs.setCurrentIndex(2)
    qtbot.keyClicks(dialog.subgroup_combo, "sex")
    qtbot.mouseClick(dialog.subgroups_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: "subgroups" in dialog.shown and idle(window), timeout=WAIT_MS)
    frame, p = _refit(PREDICTORS)
    sex = pd.read_csv(READMISSION).loc[frame.index, "sex"].to_numpy()
    table = dialog.subgroups_table
    for r in range(table.rowCount()):
        g = _cell(table, r, 0)
        # Outside route: scikit-learn's AUC within the group.
        assert float(_cell(table, r, 2)) == pytest.approx(roc_auc_score(frame[OUTCOME][sex == g], p[sex == g]),
                                                          abs=6e-4)


def test_check_the_shown_model_on_a_file_and_a_saved_session(qtbot, window, dialog, tmp_path):
    dialog.tabs.setCurrentIndex(3)
    qtbot.keyClicks(dialog.data_edit, str(READMISSION))
    qtbot.mouseClick(dialog.check_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: "check" in dialog.shown and idle(window), timeout=WAIT_MS)
    text = dialog.check_text.text()
    # On the rows it was fitted to, a maximum-likelihood fit with an intercept predicts exactly the observed number
    # of events (its score equation for the intercept), so O/E is 1.
    assert "Observed / expected events: 1.000" in text
    assert "Rows needed for precise figures" in text
    assert not dialog.check_picture.pixmap().isNull()
    # A saved session (fitted on the first 2,500 rows by the command line), checked on the whole file.
    from twofold.cli import main

    half = tmp_path / "half.csv"
    pd.read_csv(READMISSION).iloc[:2500].to_csv(half, index=False)
    session = tmp_path / "half.json"
    assert main(["fit", str(half), "--outcome", OUTCOME, "--predictor", "age", "prior_admissions",
                 "--session-out", str(session)]) == 0
    qtbot.mouseClick(dialog.use_saved, Qt.MouseButton.LeftButton)
    qtbot.keyClicks(dialog.session_edit, str(session))
    dialog.shown.pop("check")
    qtbot.mouseClick(dialog.check_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: "check" in dialog.shown and idle(window), timeout=WAIT_MS)
    frame = pd.read_csv(READMISSION)
    fit = sm.Logit(frame[OUTCOME].iloc[:2500].astype(float),
                   sm.add_constant(frame[["age", "prior_admissions"]].iloc[:2500])).fit(disp=0)
    expected = fit.predict(sm.add_constant(frame[["age", "prior_admissions"]])).sum()
    ratio = frame[OUTCOME].sum() / expected
    assert f"Observed / expected events: {ratio:.3f}" in dialog.check_text.text()


def test_a_bad_threshold_is_said_in_one_sentence_and_nothing_changes(qtbot, window, dialog):
    _type(qtbot, dialog.nb_low, "60")
    _type(qtbot, dialog.nb_high, "20")
    revision = window.session.workspace.revision
    qtbot.mouseClick(dialog.draw_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: idle(window) and "above the highest" in dialog.status.text(), timeout=WAIT_MS)
    assert window.session.workspace.revision == revision


def test_shrinkage_is_offered_after_a_bootstrap_and_can_be_undone(qtbot, window, dialog):
    shape = window.open_model_shape()
    shape.tabs.setCurrentIndex(2)
    _type(qtbot, shape.reps_spin.lineEdit(), "30")
    _type(qtbot, shape.seed_spin.lineEdit(), "2")
    qtbot.mouseClick(shape.run_boot, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: shape.validation is not None and idle(window), timeout=60_000)
    slope = shape.validation.calibration_slope_corrected
    assert 0 < slope < 1, "this seed gives a corrected slope below 1"
    assert "Usefulness menu offers" in shape.boot_labels["slope"].text()
    dialog = window.open_usefulness("Shrinkage")
    qtbot.waitUntil(lambda: dialog.shrink_button.isEnabled(), timeout=WAIT_MS)
    assert f"{slope:.3g}" in dialog.shrink_text.text()
    qtbot.mouseClick(dialog.shrink_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: dialog.unshrink_button.isEnabled() and idle(window), timeout=WAIT_MS)
    assert "shrunk model is in use" in dialog.shrink_text.text()
    ws = window.session.workspace
    fit = ws.shown_fit()
    assert ws.saved_model().coefficients[1:] == pytest.approx(slope * np.asarray(fit.params)[1:])
    qtbot.mouseClick(dialog.unshrink_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: dialog.shrink_button.isEnabled() and idle(window), timeout=WAIT_MS)
    assert ws.shrinkage_of(ws.shown_fit()) is None

    # The same resamples gave the net benefit's optimism at the decision curve's thresholds (5% to 50% by 1%):
    # the corrected curve is the model's less it.
    dialog.tabs.setCurrentIndex(0)
    qtbot.mouseClick(dialog.draw_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: "decision" in dialog.shown and idle(window), timeout=WAIT_MS)
    table = dialog.decision_table
    assert not table.isColumnHidden(2)
    optimism = dict(zip(np.round(shape.validation.net_benefit_thresholds, 6), shape.validation.net_benefit_optimism))
    row = next(r for r in range(table.rowCount()) if _cell(table, r, 0) == "20%")
    assert float(_cell(table, row, 2)) == pytest.approx(float(_cell(table, row, 1)) - optimism[0.2], abs=1.1e-4)
    assert "after correction for optimism" in dialog.decision_reading.text()


def test_f1_in_a_tab_explains_what_it_shows(qtbot, window, dialog):
    dialog.tabs.setCurrentIndex(1)
    dialog.unit_combo.setFocus()
    qtbot.keyClick(dialog.unit_combo, Qt.Key.Key_F1)
    qtbot.waitUntil(lambda: window.help_dialog is not None and window.help_dialog.isVisible(), timeout=WAIT_MS)
    assert window.help_dialog.topic == "funnel"


def test_adapting_the_shown_model_to_a_new_file_and_saving_it(qtbot, window, dialog, tmp_path):
    import json

    from scipy.special import expit

    # A new extract where every record's odds of readmission are doubled (seeded): a new intercept should do.
    frame = pd.read_csv(READMISSION)
    rng = np.random.default_rng(11)
    flip = (frame[OUTCOME] == 0) & (rng.random(len(frame)) < 0.12)
    frame.loc[flip, OUTCOME] = 1
    new = tmp_path / "next_month.csv"
    frame.to_csv(new, index=False)
    dialog.tabs.setCurrentIndex(3)
    qtbot.keyClicks(dialog.data_edit, str(new))
    assert not dialog.save_adapted_button.isEnabled()
    qtbot.mouseClick(dialog.adapt_box, Qt.MouseButton.LeftButton)
    qtbot.mouseClick(dialog.check_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: "check" in dialog.shown and idle(window), timeout=WAIT_MS)
    text = dialog.check_text.text()
    assert "Adapting the saved model" in text and "likelihood-ratio G" in text
    adaptation = dialog.shown["check"]["record"]["adaptation"]
    # Recalibration in the large checked with statsmodels' GLM (the saved linear predictor as an offset).
    kept = frame[[OUTCOME] + PREDICTORS].dropna()
    X = pd.get_dummies(kept[PREDICTORS], drop_first=True, dtype=float)
    b = window.session.workspace.shown_fit().params
    lp = sm.add_constant(X).to_numpy() @ b
    alone = sm.GLM(kept[OUTCOME].to_numpy(float), np.ones((len(kept), 1)), family=sm.families.Binomial(),
                   offset=lp).fit().params[0]
    assert adaptation["recalibration"]["intercept_alone"] == pytest.approx(alone, abs=1e-6)
    out = tmp_path / "adapted.json"
    qtbot.keyClicks(dialog.adapted_edit, str(out))
    revision = window.session.workspace.revision
    qtbot.mouseClick(dialog.save_adapted_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: "adapted" in dialog.shown and idle(window), timeout=WAIT_MS)
    assert "was saved" in dialog.status.text() and window.session.workspace.revision == revision
    saved = json.loads(out.read_text())
    assert saved["model"]["coefficients"] == pytest.approx([c["estimate"] for c in adaptation["coefficients"]])
    assert saved["data"].endswith("next_month.csv")
    # The saved adapted model predicts on the new rows as its coefficients say.
    risk = expit(sm.add_constant(X).to_numpy() @ np.array(saved["model"]["coefficients"]))
    assert risk.mean() == pytest.approx(kept[OUTCOME].mean(), abs=0.01)
