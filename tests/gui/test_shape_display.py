"""Curved effects and interactions added in the model-shape dialog show in the model pane and the results.

References: numpy's ``quantile`` on the file's column for the knots Harrell
recommends (Regression Modeling Strategies, 2nd ed., 2015, sec. 2.4.6: four
knots at the 0.05, 0.35, 0.65 and 0.95 quantiles); statsmodels' ``Logit`` on
a pandas-built design with the product column for the interaction.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from PySide6.QtCore import Qt

from gui_helpers import READMISSION, WAIT_MS, choose_outcome, idle, load, tick

OUTCOME = "readmitted_30d"
TIMES = "\u00d7"


def list_items(window):
    """{name: (text, ticked)} of the model pane's predictor list."""
    lst = window.model_pane.list
    out = {}
    for i in range(lst.count()):
        item = lst.item(i)
        out[item.data(Qt.ItemDataRole.UserRole)] = (item.text(), item.checkState() == Qt.CheckState.Checked)
    return out


def labels(window):
    return [x.label for x in window.results_pane.coefficients.lines]


@pytest.fixture
def shaped(qtbot, window):
    load(qtbot, window, READMISSION)
    choose_outcome(qtbot, window, OUTCOME)
    tick(qtbot, window, ["age", "sex", "length_of_stay"])
    dialog = window.open_model_shape()
    yield window, dialog
    dialog.hide()


def test_a_spline_is_named_in_the_model_pane_results_and_ladder(qtbot, shaped):
    window, dialog = shaped
    dialog.apply_spline("age", 4)
    qtbot.waitUntil(lambda: dialog.spline_result is not None and idle(window), timeout=WAIT_MS)
    qtbot.waitUntil(lambda: "curved" in list_items(window)["age"][0], timeout=WAIT_MS)
    assert "curved (4 knots)" in list_items(window)["age"][0]
    assert "curved" not in list_items(window)["length_of_stay"][0]

    # Knots at Harrell's quantiles of age, computed here with numpy from the file.
    age = pd.read_csv(READMISSION)["age"].to_numpy(float)
    knots = np.quantile(age, [0.05, 0.35, 0.65, 0.95])
    at = ", ".join(f"{v:g}" for v in knots)
    view = window.results_pane.view
    assert f"age (curved: spline with 4 knots at {at})" in window.results_pane.contents.text()
    heading = next(x for x in view.lines if x.kind == "heading" and x.column == "age")
    assert heading.label.startswith("age as a whole, curved (spline with 4 knots)")
    assert f"\nknots at {at}\n" in heading.label
    rows = [x.label for x in view.lines if x.kind == "term" and x.column == "age"]
    assert rows == ["age: curve, slope below the first knot", "age: curve term 1", "age: curve term 2"]
    assert all(x.hint for x in view.lines if x.kind == "term" and x.column == "age")
    # The ladder names the curve too, and the curvature test sits with the other tests.
    assert view.ladder.rows[-1].predictors_text.startswith("age (curved, 4 knots), sex")
    assert "Is the effect of age curved?" in window.results_pane.shape.text()

    dialog.apply_spline("age", None)
    qtbot.waitUntil(lambda: "curved" not in list_items(window)["age"][0] and idle(window), timeout=WAIT_MS)
    assert "age (per 1 unit)" in labels(window)


def test_an_interaction_is_listed_tickable_and_labelled(qtbot, shaped):
    import statsmodels.api as sm

    window, dialog = shaped
    dialog.add_interaction("length_of_stay", "sex")
    term = "length_of_stay:sex"
    qtbot.waitUntil(lambda: dialog.interaction_result is not None and idle(window)
                    and term in list_items(window), timeout=WAIT_MS)
    text, ticked = list_items(window)[term]
    assert text == f"length_of_stay {TIMES} sex \u00b7 interaction" and ticked
    pane = window.results_pane
    assert f"length_of_stay {TIMES} sex (interaction: the effect of length_of_stay may differ with sex)" \
        in pane.contents.text()
    assert "Does the effect of length_of_stay differ with sex?" in pane.shape.text()
    label = f"length_of_stay {TIMES} sex: M vs F (per 1 unit)"
    (line,) = [x for x in pane.view.lines if x.label == label]
    assert pane.view.ladder.rows[-1].change_text == f"+ length_of_stay {TIMES} sex (from model 1)"

    # The coefficient shown is statsmodels' on the product column (design built here with pandas).
    frame = pd.read_csv(READMISSION)
    male = (frame["sex"] == "M").astype(float)
    X = pd.DataFrame({"const": 1.0, "age": frame["age"].astype(float), "sex": male,
                      "los": frame["length_of_stay"].astype(float)})
    X["los_x_sex"] = X["los"] * male
    res = sm.Logit(frame[OUTCOME].astype(float), X).fit(disp=0)
    assert line.values["estimate"] == pytest.approx(res.params["los_x_sex"], rel=1e-5)
    # The odds ratio of a day's stay is stated for each sex, as the user reads it: for men it is
    # exp(b_los + b_los_x_sex) from the same statsmodels fit.
    from twofold.core.outputs.text import fmt_or

    assert pane.stated.isVisible()
    men = fmt_or(float(np.exp(res.params["los"] + res.params["los_x_sex"])))
    assert f"length_of_stay (per 1 unit), where sex is M: odds ratio {men}" in pane.stated.text()
    assert "sex: M vs F, where length_of_stay is" in pane.stated.text()
    # Sex is tested together with its interaction (its total effect), and says so.
    headings = [x.label for x in pane.view.lines if x.kind == "heading"]
    assert any(h.startswith("sex, with its interaction with length_of_stay\n") for h in headings)

    # Unticking a predictor of the interaction removes the interaction too (a model needs both).
    window.model_pane.toggle("sex")
    qtbot.waitUntil(lambda: idle(window) and set(pane.view.predictors) == {"age", "length_of_stay"},
                    timeout=WAIT_MS)
    assert list_items(window)[term] == (text, False)
    assert window.results_pane.view is not None and not window.message.isVisible()
    # Ticking the interaction again brings back its two predictors.
    window.model_pane.toggle(term)
    qtbot.waitUntil(lambda: idle(window) and set(pane.view.predictors) == {"age", "length_of_stay", "sex", term},
                    timeout=WAIT_MS)
    assert list_items(window)["sex"][1]


def test_excluding_a_predictor_of_an_interaction_drops_the_interaction(qtbot, shaped):
    window, dialog = shaped
    dialog.add_interaction("length_of_stay", "sex")
    term = "length_of_stay:sex"
    qtbot.waitUntil(lambda: dialog.interaction_result is not None and idle(window), timeout=WAIT_MS)
    pane = window.results_pane
    window.session.set_role("sex", "excluded", tuple(pane.view.predictors))
    qtbot.waitUntil(lambda: idle(window) and set(pane.view.predictors) == {"age", "length_of_stay"},
                    timeout=WAIT_MS)
    assert not window.message.isVisible()  # no failure: the interaction left with its predictor
    assert term not in pane.view.predictors
