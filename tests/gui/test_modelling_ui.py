"""The "Model shape" dialog: spline, interaction and bootstrap, driven through the window."""

from __future__ import annotations

import threading

import numpy as np
import pandas as pd
import pytest

from gui_helpers import READMISSION, WAIT_MS, choose_outcome, idle, load, tick

OUTCOME = "readmitted_30d"


@pytest.fixture
def dialog(qtbot, window):
    load(qtbot, window, READMISSION)
    choose_outcome(qtbot, window, OUTCOME)
    tick(qtbot, window, ["age", "length_of_stay"])
    d = window.open_model_shape()
    yield d
    if d.boot_thread is not None:
        d.boot_thread.cancel()
        d.boot_thread.wait(WAIT_MS)


def _core_fit(predictors, splines=()):
    """The same model fitted directly with the core, outside the window."""
    from twofold.core.data.io import read_table
    from twofold.core.models.study import Study

    study = Study(read_table(READMISSION))
    study.set_outcome(OUTCOME, guess=True)
    for col, k in splines:
        study.set_spline(col, k)
    rows = study.complete_rows(predictors)
    return study, study.fit(predictors, rows=rows)


def test_spline_shows_core_nonlinearity_test(qtbot, window, dialog):
    from twofold.core.models.modelling import nonlinearity_tests

    rid = dialog.apply_spline("age", 4)
    qtbot.waitUntil(lambda: dialog.spline_result is not None and idle(window), timeout=WAIT_MS)
    shown = dialog.spline_result["tests"][0]
    study, fit = _core_fit(["age", "length_of_stay"], splines=[("age", 4)])
    ref = nonlinearity_tests(study, fit)[0]
    assert ref.term == "age" and shown.df == ref.df == 2  # 4 knots: 2 extra columns
    assert shown.g == pytest.approx(ref.g, rel=1e-8)
    from twofold.core.outputs.text import fmt_num

    assert f"G = {fmt_num(shown.g, 2)} on" in dialog.nonlinear_label.text()
    assert not dialog.effect_picture.pixmap().isNull()
    assert dialog.shape_combo.currentData() == 4  # the shape list shows the shape now in the model
    assert "2 degrees of freedom" in dialog.nonlinear_label.text()
    # Ends in one plain sentence, as the main pane does.
    reading = ("The effect of age bends more than chance alone would easily explain." if ref.p_value < 0.05
               else "A straight line for age may serve as well as the curve.")
    assert dialog.nonlinear_label.text().endswith(reading)
    # The refit went through the request path: the results pane shows the spline model.
    assert window.session.is_current("results", rid)
    assert any("age" in str(line) for line in window.results_pane.view.lines)


def test_interaction_g_matches_statsmodels_product_column(qtbot, window, dialog):
    import statsmodels.api as sm

    dialog.add_interaction("age", "length_of_stay", at=[2.0, 5.0, 10.0])
    qtbot.waitUntil(lambda: dialog.interaction_result is not None and idle(window), timeout=WAIT_MS)
    shown = dialog.interaction_result["tests"][0]
    # Outside reference: statsmodels Logit on a pandas-built design with the product column.
    df = pd.read_csv(READMISSION)[["age", "length_of_stay", OUTCOME]].dropna()
    X0 = sm.add_constant(df[["age", "length_of_stay"]].astype(float))
    X1 = X0.assign(product=X0["age"] * X0["length_of_stay"])
    y = df[OUTCOME].astype(float)
    l0 = sm.Logit(y, X0).fit(disp=0).llf
    res1 = sm.Logit(y, X1).fit(disp=0)
    assert shown.df == 1
    assert shown.g == pytest.approx(2 * (res1.llf - l0), rel=1e-6)
    # Odds ratio of age per year at length_of_stay = 5: exp(b_age + 5 b_product), from statsmodels.
    table = dialog.interaction_result["table"]
    at5 = [r for r in table if r["at"] == 5.0][0]
    assert at5["odds_ratio"] == pytest.approx(np.exp(res1.params["age"] + 5 * res1.params["product"]), rel=1e-5)
    assert dialog.or_table.rowCount() == 3
    assert "no longer answers" in dialog.note.text()
    assert "age:length_of_stay" in window.results_pane.view.predictors


def _run_boot(qtbot, dialog, reps, seed):
    dialog.start_bootstrap(reps, seed)
    qtbot.waitUntil(lambda: dialog.boot_thread is not None, timeout=WAIT_MS)
    thread = dialog.boot_thread
    qtbot.waitUntil(lambda: thread.isFinished() and dialog.boot_thread is None, timeout=WAIT_MS)


def test_bootstrap_matches_core_with_same_seed(qtbot, window, dialog):
    from twofold.core.models.modelling import bootstrap_validation
    from twofold.core.outputs.text import fmt_num

    _run_boot(qtbot, dialog, 20, 7)
    v = dialog.validation
    assert v is not None and v.repetitions == 20
    # Reference: the core function on the same model fitted directly, same seed.
    _, fit = _core_fit(["age", "length_of_stay"])
    ref = bootstrap_validation(fit, 20, seed=7)
    assert v.auc_corrected == pytest.approx(ref.auc_corrected, rel=1e-9)
    assert dialog.boot_labels["auc"].text().startswith(fmt_num(ref.auc_corrected))
    assert f"optimism of {fmt_num(ref.auc_optimism)}" in dialog.boot_labels["auc"].text()
    assert dialog.boot_bar.value() == dialog.boot_bar.maximum()  # a finished run shows a full bar


def test_cancel_keeps_previous_validation_and_loop_stays_responsive(qtbot, window, dialog):
    from PySide6.QtCore import QTimer

    _run_boot(qtbot, dialog, 20, 3)
    before = dialog.validation
    texts = {k: lab.text() for k, lab in dialog.boot_labels.items()}

    ticks_while_running = []
    timer = QTimer()
    timer.setInterval(20)
    timer.timeout.connect(lambda: ticks_while_running.append(1)
                          if dialog.boot_thread is not None and dialog.boot_thread.isRunning() else None)
    timer.start()
    dialog.start_bootstrap(100_000, 4)
    qtbot.waitUntil(lambda: dialog.boot_thread is not None and dialog.boot_bar.value() > 0, timeout=WAIT_MS)
    thread = dialog.boot_thread
    # The event loop keeps serving the timer while the bootstrap runs on its own thread
    # (a count of ticks, not a clock measurement).
    qtbot.waitUntil(lambda: len(ticks_while_running) >= 10, timeout=WAIT_MS)
    assert thread.thread_ident != threading.get_ident()
    dialog.cancel_bootstrap()
    qtbot.waitUntil(lambda: thread.isFinished() and dialog.boot_thread is None, timeout=WAIT_MS)
    timer.stop()
    assert dialog.validation is before
    assert {k: lab.text() for k, lab in dialog.boot_labels.items()} == texts
    assert "cancelled" in dialog.status.text()
    assert dialog.run_boot.isEnabled()


def test_closing_the_window_stops_a_running_bootstrap(qtbot, window, dialog):
    dialog.start_bootstrap(100_000, 5)
    qtbot.waitUntil(lambda: dialog.boot_thread is not None and dialog.boot_bar.value() > 0, timeout=WAIT_MS)
    thread = dialog.boot_thread
    assert thread.isRunning()
    window.close()
    # close() returns only after the bootstrap thread has ended (it is cancelled between resamples).
    assert thread.isFinished()
