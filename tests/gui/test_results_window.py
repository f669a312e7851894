"""The window shows the core's numbers, worded as the core words them.

Every check compares what the window displays with a computation made
outside the window: the core's own ``Study`` on the same predictors, and
statsmodels' ``Logit`` (a reference library) fitted here on a design built
with pandas, independently of Twofold's encoding.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from PySide6.QtCore import Qt
from scipy.stats import chi2

from gui_helpers import READMISSION, WOUND, choose_outcome, load, tick
from twofold.core.models.study import Study
from twofold.core.outputs.text import fmt_num, fmt_or, fmt_p, reading_nested, reading_overall
from twofold.gui.tables import RawRole


def table_rows(window):
    """The coefficient table as displayed: one dict per row, texts and raw numbers."""
    model = window.results_pane.coefficients
    out = []
    for r in range(model.rowCount()):
        texts = [model.data(model.index(r, c), Qt.ItemDataRole.DisplayRole) for c in range(model.columnCount())]
        raws = [model.data(model.index(r, c), RawRole) for c in range(model.columnCount())]
        out.append({"label": texts[0].strip(), "texts": texts, "raw": raws, "line": model.lines[r]})
    return out


def row_for(rows, label):
    hits = [r for r in rows if r["label"] == label]
    assert len(hits) == 1, f"no single row labelled {label!r}: {[r['label'] for r in rows]}"
    return hits[0]


@pytest.fixture
def readmission(qtbot, window):
    load(qtbot, window, READMISSION)
    choose_outcome(qtbot, window, "readmitted_30d")
    return window


def test_coefficients_equal_the_core_and_statsmodels(qtbot, readmission):
    window = readmission
    predictors = ["age", "sex", "discharge_destination"]
    tick(qtbot, window, ["age"])
    tick(qtbot, window, ["age", "sex"])
    view = tick(qtbot, window, predictors)
    rows = table_rows(window)

    # The core on the same predictors, outside the window.
    study = Study.from_file(READMISSION)
    study.set_outcome("readmitted_30d")
    fit = study.fit(predictors)
    core_rows = fit.coefficient_rows
    assert view.rows_used == fit.n_used == 5000
    assert view.events == fit.events
    for cr in core_rows[1:]:
        if cr["level"] is None:
            label = f"{cr['column']} (per 1 unit)"
        else:
            label = f"{cr['column']}: {cr['level']} vs {cr['reference']}"
        shown = row_for(rows, label)
        texts, raw = shown["texts"], shown["raw"]
        assert raw[1] == pytest.approx(cr["odds_ratio"], rel=1e-6)
        assert raw[5] == pytest.approx(cr["estimate"], rel=1e-6, abs=1e-9)
        assert raw[6] == pytest.approx(cr["std_error"], rel=1e-6)
        assert texts[1] == fmt_or(cr["odds_ratio"])
        assert texts[2] == f"{fmt_or(cr['or_ci_low'])} to {fmt_or(cr['or_ci_high'])}"
        assert texts[3] == fmt_p(cr["p_value"])
        assert texts[4] == fmt_num(cr["z"], 2)
        assert texts[5] == fmt_num(cr["estimate"], 4)
        assert texts[6] == fmt_num(cr["std_error"], 4)

    # The four-group factor's joint Wald test sits on its own row above its levels.
    labels = [r["label"] for r in rows]
    heading = next(i for i, r in enumerate(rows) if r["line"].kind == "heading")
    assert rows[heading]["line"].column == "discharge_destination"
    assert all(lbl.startswith("discharge_destination:") for lbl in labels[heading + 1:heading + 4])
    joint = fit.term_tests["discharge_destination"]
    assert rows[heading]["texts"][3] == fmt_p(joint.p_value)
    assert fmt_num(joint.statistic, 2) in rows[heading]["label"] or fmt_num(joint.statistic, 2) in \
        rows[heading]["line"].label

    # Outside reference: statsmodels Logit on a design built here with pandas
    # (reference level as the window shows it).
    import statsmodels.api as sm

    frame = pd.read_csv(READMISSION)
    reference = fit.coefficient_rows[-1]["reference"]
    sex_ref = next(r["reference"] for r in core_rows if r["column"] == "sex")
    sex_level = next(r["level"] for r in core_rows if r["column"] == "sex")
    X = pd.DataFrame({"const": 1.0, "age": frame["age"].astype(float),
                      "sex": (frame["sex"] == sex_level).astype(float)})
    for level in sorted(set(frame["discharge_destination"]) - {reference}):
        X[level] = (frame["discharge_destination"] == level).astype(float)
    res = sm.Logit(frame["readmitted_30d"].astype(float), X).fit(disp=0)
    age = row_for(rows, "age (per 1 unit)")
    assert age["raw"][5] == pytest.approx(res.params["age"], rel=1e-5)
    assert age["raw"][6] == pytest.approx(res.bse["age"], rel=1e-5)
    care = row_for(rows, f"discharge_destination: care_home vs {reference}")
    assert care["raw"][1] == pytest.approx(math.exp(res.params["care_home"]), rel=1e-5)
    low, high = care["raw"][2]
    ci = np.exp(res.conf_int().loc["care_home"])
    assert low == pytest.approx(ci[0], rel=1e-4) and high == pytest.approx(ci[1], rel=1e-4)
    assert sex_ref != sex_level

    # The overall G test against the constant-only model, with statsmodels' LR statistic.
    assert view.overall.g == pytest.approx(res.llr, rel=1e-6)
    assert view.overall.df == int(res.df_model)
    assert fmt_num(res.llr, 2) in window.results_pane.overall.text()
    assert reading_overall(view.overall.p_value) in window.results_pane.overall.text()


def test_nested_test_after_a_second_tick_equals_the_deviance_difference(qtbot, readmission):
    window = readmission
    tick(qtbot, window, ["age", "prior_admissions"])
    view = tick(qtbot, window, ["age", "prior_admissions", "discharge_destination"])
    study = Study.from_file(READMISSION)
    study.set_outcome("readmitted_30d")
    small, large, test = study.compare(["age", "prior_admissions"],
                                       ["age", "prior_admissions", "discharge_destination"])
    # G is the drop in deviance (-2 lnL); p from scipy's chi-square on the difference in coefficients.
    g = small.deviance - large.deviance
    assert view.previous.g == pytest.approx(test.g, rel=1e-7)
    assert view.previous.g == pytest.approx(g, rel=1e-6)
    assert view.previous.df == 3
    assert view.previous.p_value == pytest.approx(chi2.sf(g, 3), rel=1e-5)
    text = window.results_pane.previous.text()
    assert "+ discharge_destination" in text
    assert f"G = {fmt_num(test.g, 2)} on 3 degrees of freedom" in text
    assert reading_nested(test.p_value, ["discharge_destination"]) in text
    # The same test on the ladder's row for the new model.
    ladder = window.ladder_pane.model
    assert ladder.rowCount() == 2
    assert ladder.data(ladder.index(1, 6)) == fmt_num(test.g, 2)
    assert ladder.data(ladder.index(1, 7)) == "3"
    assert ladder.data(ladder.index(1, 8)) == fmt_p(test.p_value)
    assert ladder.data(ladder.index(1, 4)) == fmt_num(large.llf, 2)


def test_untick_gives_the_removal_test_and_rows_stay_common(qtbot, readmission):
    window = readmission
    tick(qtbot, window, ["age", "comorbidity_score"])
    view = tick(qtbot, window, ["age"])
    study = Study.from_file(READMISSION)
    study.set_outcome("readmitted_30d")
    small, large, test = study.compare(["age"], ["age", "comorbidity_score"])
    # Both rungs sit on the rows complete for comorbidity_score.
    assert view.rows_used == large.n_used < 5000
    assert view.previous.g == pytest.approx(test.g, rel=1e-7)
    assert "\u2212 comorbidity_score" in window.results_pane.previous.text()


def test_select_an_earlier_model_and_compare_two(qtbot, readmission):
    window = readmission
    tick(qtbot, window, ["age"])
    tick(qtbot, window, ["age", "sex"])
    tick(qtbot, window, ["age", "sex", "length_of_stay"])
    window.ladder_pane.show_model(0)
    qtbot.waitUntil(lambda: window.results_pane.view.rung == 0 and not window.session.busy, timeout=20_000)
    assert window.model_pane.ticked_predictors() == ("age",)
    assert window.results_pane.view.predictors == ("age",)
    window.ladder_pane.first.setCurrentIndex(0)
    window.ladder_pane.second.setCurrentIndex(2)
    window.ladder_pane.compare()
    qtbot.waitUntil(lambda: "compared with model 3" in window.ladder_pane.comparison.text(), timeout=20_000)
    study = Study.from_file(READMISSION)
    study.set_outcome("readmitted_30d")
    _, _, test = study.compare(["age"], ["age", "sex", "length_of_stay"])
    text = window.ladder_pane.comparison.text()
    assert f"G = {fmt_num(test.g, 2)} on 2 degrees of freedom" in text
    assert "Model 1 is nested in model 3" in text


def test_reference_level_and_role_changes_refit(qtbot, readmission):
    window = readmission
    tick(qtbot, window, ["age", "discharge_destination"])
    window.session.set_reference("discharge_destination", "care_home")
    qtbot.waitUntil(lambda: not window.session.busy and any(
        "vs care_home" in ln.label for ln in window.results_pane.view.lines), timeout=20_000)
    study = Study.from_file(READMISSION)
    study.set_outcome("readmitted_30d")
    study.set_reference("discharge_destination", "care_home")
    fit = study.fit(["age", "discharge_destination"])
    rows = table_rows(window)
    for cr in fit.coefficient_rows[2:]:
        shown = row_for(rows, f"discharge_destination: {cr['level']} vs care_home")
        assert shown["raw"][1] == pytest.approx(cr["odds_ratio"], rel=1e-6)

    # Leaving a ticked predictor out removes it from the model and the list.
    window.session.set_role("discharge_destination", "excluded", ("age", "discharge_destination"))
    qtbot.waitUntil(lambda: not window.session.busy and window.results_pane.view.predictors == ("age",),
                    timeout=20_000)
    names = [window.model_pane.list.item(i).data(Qt.ItemDataRole.UserRole)
             for i in range(window.model_pane.list.count())]
    assert "discharge_destination" not in names
    roles = {c.name: c.role for c in window.data_pane.columns_model.columns}
    assert roles["discharge_destination"] == "excluded"


def test_caution_is_always_visible_and_says_the_core_caution(qtbot, window):
    from twofold.core.outputs.summary import CAUTION
    from twofold.gui.views import CAUTION as GUI_CAUTION

    assert GUI_CAUTION == CAUTION
    assert window.results_pane.caution.isVisible()
    assert CAUTION in window.results_pane.caution.text()
    load(qtbot, window, READMISSION)
    choose_outcome(qtbot, window, "readmitted_30d")
    tick(qtbot, window, ["age"])
    assert window.results_pane.caution.isVisible()
    assert window.results_pane.caution.close_button is None  # it cannot be dismissed


def test_separation_warning_sits_on_the_predictor_row(qtbot, window):
    load(qtbot, window, WOUND)
    choose_outcome(qtbot, window, "infection")
    assert window.model_pane.outcome_view.event_label == "yes"
    view = tick(qtbot, window, ["age", "wound_class"])
    study = Study.from_file(WOUND)
    study.set_outcome("infection")
    fit = study.fit(["age", "wound_class"])
    notice = next(n for n in fit.notices if n.code == "separation")
    assert "wound_class" in notice.subjects
    rows = table_rows(window)
    marked = [r for r in rows if r["line"].warnings]
    assert marked and all(r["line"].column == "wound_class" for r in marked)
    assert all(notice.message in r["line"].warnings for r in marked)
    model = window.results_pane.coefficients
    r = next(i for i, row in enumerate(rows) if row["line"].warnings)
    assert notice.message in model.data(model.index(r, 0), Qt.ItemDataRole.ToolTipRole)
    assert model.data(model.index(r, 0), Qt.ItemDataRole.DecorationRole) is not None
    texts = [window.results_pane.notes_layout.itemAt(i).widget().text()
             for i in range(window.results_pane.notes_layout.count())]
    # The banner names the predictor once (the message itself names it, so no prefix repeats it).
    assert any("'wound_class'" in t and notice.message in t for t in texts)
    assert not any(t.startswith("wound_class: ") for t in texts)
    assert [n.column for n in view.predictor_notes] == ["wound_class"]


def test_outcome_without_a_known_event_asks_for_it(qtbot, window):
    load(qtbot, window, READMISSION)
    choose_outcome(qtbot, window, "sex")
    view = window.model_pane.outcome_view
    assert view.needs_event and "counts as the event" in view.message
    assert not window.model_pane.list.isEnabled()
    choose_outcome(qtbot, window, "sex", "M")
    assert window.model_pane.outcome_view.event_label == "M"
    assert window.model_pane.list.isEnabled()
    view = tick(qtbot, window, ["age"])
    assert view.title.endswith("sex = M")


def test_two_models_that_are_not_nested_get_a_plain_verdict(qtbot, readmission):
    # Reference: statsmodels' AIC of each model decides which the verdict names.
    import statsmodels.formula.api as smf
    import pandas as pd

    window = readmission
    tick(qtbot, window, ["age"])
    tick(qtbot, window, ["sex"])
    pane = window.ladder_pane
    pane.first.setCurrentIndex(0)
    pane.second.setCurrentIndex(1)
    qtbot.mouseClick(pane.compare_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: "compared with model 2" in pane.comparison.text(), timeout=20_000)
    frame = pd.read_csv(READMISSION)
    aic_age = smf.logit("readmitted_30d ~ age", frame).fit(disp=0).aic
    aic_sex = smf.logit("readmitted_30d ~ C(sex)", frame).fit(disp=0).aic
    better, worse = (1, 2) if aic_age < aic_sex else (2, 1)
    text = pane.comparison.text()
    assert f"By AIC model {better} fits" in text and f"than model {worse}" in text
    assert "tells patients apart" in text or "does not clearly differ" in text
    assert "This compares fit, not causes." in text
