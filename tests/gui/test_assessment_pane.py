"""The "How good is the model?" section shows the assessment the core computes, checked from outside.

References: scikit-learn's ``roc_auc_score``, ``brier_score_loss`` and
``recall_score`` on the core fit's fitted values; statsmodels' ``Logit``
(fitted here on a pandas-built design) for the drop-one likelihood-ratio
test; the core's own Hosmer-Lemeshow function for the statistic shown.
"""

from __future__ import annotations

import os
import subprocess
import sys
import threading

import pandas as pd
import pytest

from gui_helpers import READMISSION, WAIT_MS, choose_outcome, load, tick
from twofold.core.assessing.assessment import APPARENT_CALIBRATION_NOTE, HOSMER_LEMESHOW_NOTE, THRESHOLD_NOTE
from twofold.core.models.study import Study
from twofold.core.outputs.text import fmt_num
from twofold.gui import session as session_module

PREDICTORS = ["age", "sex", "discharge_destination"]


def wait_assessed(qtbot, window):
    """Wait until the assessment of the newest request is on screen."""
    s = window.session
    newest = s.newest_request
    qtbot.waitUntil(lambda: not s.busy and s.last_assessment_id == newest
                    and window.results_pane.assessment_box.view is not None, timeout=WAIT_MS)
    return window.results_pane.assessment_box


@pytest.fixture
def readmission(qtbot, window):
    load(qtbot, window, READMISSION)
    choose_outcome(qtbot, window, "readmitted_30d")
    return window


def core_fit(predictors):
    study = Study.from_file(READMISSION)
    study.set_outcome("readmitted_30d")
    return study.fit(predictors)


def test_displayed_assessment_equals_outside_references(qtbot, readmission):
    from sklearn.metrics import brier_score_loss, roc_auc_score

    from twofold.core.assessing.calibration import hosmer_lemeshow

    window = readmission
    tick(qtbot, window, PREDICTORS)
    box = wait_assessed(qtbot, window)
    view = box.view
    fit = core_fit(PREDICTORS)
    y, p = fit.design.y, fit.fitted

    auc = roc_auc_score(y, p)  # scikit-learn, outside the project
    assert view.values["auc"] == pytest.approx(auc, rel=1e-9)
    assert f"c statistic): {fmt_num(auc, 3)}," in box.auc.text()
    assert view.values["brier"] == pytest.approx(brier_score_loss(y, p), rel=1e-9)  # scikit-learn

    hl = hosmer_lemeshow(y, p, 10)  # the core's own test on the same fit
    assert view.values["hl_statistic"] == pytest.approx(hl.statistic, rel=1e-12)
    assert f"chi-square {fmt_num(hl.statistic, 2)} on" in box.hosmer.text()

    # The limits notes stand beside the numbers they qualify.
    assert APPARENT_CALIBRATION_NOTE in box.calibration.text()
    assert HOSMER_LEMESHOW_NOTE in box.hosmer.text()
    assert THRESHOLD_NOTE in box.classification.text()

    # Drop-one likelihood-ratio test for "sex", against statsmodels on a design built with pandas.
    import statsmodels.api as sm

    frame = pd.read_csv(READMISSION)
    outcome = frame["readmitted_30d"].map(lambda v: 1.0 if str(v).strip().lower() in ("1", "yes", "true") else 0.0)
    assert outcome.sum() == fit.events  # the event coding read here matches the core's

    def llf(cols):
        X = pd.get_dummies(frame[cols], drop_first=True, dtype=float)
        return sm.Logit(outcome.to_numpy(), sm.add_constant(X).to_numpy()).fit(disp=0).llf

    g = 2 * (llf(PREDICTORS) - llf(["age", "discharge_destination"]))
    sex = [d for d in view.drop_one if d[0] == "sex"]
    assert len(sex) == 1
    assert sex[0][1].startswith(f"G = {fmt_num(g, 2)} on 1 degree of freedom")
    assert "likelihood-ratio test" in box.drop_one.text() and "Wald" in box.drop_one.text()
    # The table the reader sees: one row per predictor, the likelihood-ratio test beside the Wald test.
    table = box.drop_one_table
    shown = {table.item(r, 0).text(): (table.item(r, 1).text(), table.item(r, 2).text())
             for r in range(table.rowCount())}
    assert set(shown) == set(PREDICTORS)
    assert shown["sex"][0].startswith(f"G = {fmt_num(g, 2)} on 1 degree of freedom")
    assert shown["sex"][1] == sex[0][2]
    assert table.isVisibleTo(box) and table.height() >= table.rowCount() * table.rowHeight(0)
    # Within the pane's width (the tests wrap rather than run off its side), every row in sight.
    qtbot.waitUntil(lambda: table.width() > 0, timeout=WAIT_MS)
    assert table.horizontalHeader().length() <= table.viewport().width()
    rows_height = sum(table.rowHeight(r) for r in range(table.rowCount()))
    assert table.height() >= table.horizontalHeader().height() + rows_height

    # The most influential records are listed by file row number (1-based).
    assert len(view.influential) == 10
    assert all(1 <= r <= len(frame) for r, _, _ in view.influential)

    for key in ("roc", "calibration", "influence"):
        pm = box.plots[key].pixmap()
        assert pm is not None and not pm.isNull(), key
        assert pm.width() > 100
    # ...and the reader sees them: laid out at a real size (once they were given no room at all, 0 pixels wide).
    qtbot.waitUntil(lambda: all(box.plots[k].width() >= 160 for k in box.plots), timeout=WAIT_MS)
    for key, lab in box.plots.items():
        assert lab.isVisible() and lab.height() >= 0.6 * lab.width(), key
        assert lab.pixmap().width() <= lab.width(), key  # shrunk to fit, never cut


def test_threshold_box_updates_the_classification_table(qtbot, readmission):
    from sklearn.metrics import recall_score

    window = readmission
    tick(qtbot, window, PREDICTORS)
    box = wait_assessed(qtbot, window)
    box.threshold.setValue(0.2)
    qtbot.waitUntil(lambda: window.session.last_assessment_id == window.session.newest_request
                    and box.view.threshold == pytest.approx(0.2), timeout=WAIT_MS)
    fit = core_fit(PREDICTORS)
    y, p = fit.design.y, fit.fitted
    called = (p >= 0.2).astype(int)
    assert box.view.values["sensitivity"] == pytest.approx(recall_score(y, called))  # scikit-learn
    assert box.view.values["specificity"] == pytest.approx(recall_score(1 - y, 1 - called))
    assert "at least 0.20 positive" in box.classification.text()


def test_a_superseded_assessment_never_overwrites_a_newer_one(qtbot, readmission, monkeypatch):
    from twofold.core import workspace as workspace_module

    window = readmission
    gate, started = threading.Event(), threading.Event()
    original = workspace_module.assess_fit
    calls = []

    def slow_assess(study, fit, threshold=None, checkpoint=None):
        calls.append(fit)
        if len(calls) == 1:
            started.set()
            gate.wait(10)  # the older assessment goes on only after a newer tick was made
        return original(study, fit, threshold=threshold, checkpoint=checkpoint)

    monkeypatch.setattr(workspace_module, "assess_fit", slow_assess)
    # The stand-in lives in this process: work the assessment out on the assessment thread here.
    monkeypatch.setattr(session_module.Session, "assess_in_process", False)
    shown = []
    window.session.assessmentChanged.connect(lambda v: shown.append(None if v is None else v.rung))
    window.model_pane.set_ticked(["age"])  # request A: its assessment blocks
    assert started.wait(10)
    window.model_pane.set_ticked(["age", "sex"])  # request B: its results do not wait for A's assessment
    qtbot.waitUntil(lambda: window.results_pane.view is not None
                    and window.results_pane.view.predictors == ("age", "sex"), timeout=WAIT_MS)
    assert "Working out" in window.results_pane.assessment_box.status.text()
    gate.set()
    box = wait_assessed(qtbot, window)
    assert shown == [1]  # only B's assessment (model 2) was shown
    assert box.view.rung == 1 == window.results_pane.view.rung


def test_matplotlib_is_not_imported_when_the_window_is_built(tmp_path):
    code = ("import os, sys; os.environ['QT_QPA_PLATFORM'] = 'offscreen'; "
            "from PySide6.QtWidgets import QApplication; app = QApplication([]); "
            "from twofold.gui.window import MainWindow; w = MainWindow(remember=False); "
            "print('matplotlib' in sys.modules); w.session.shutdown()")
    env = {**os.environ, "TWOFOLD_HOME": str(tmp_path)}
    run = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60, env=env)
    assert run.returncode == 0, run.stderr
    assert run.stdout.strip().splitlines()[-1] == "False"



@pytest.mark.assessment_process
def test_the_assessment_is_worked_out_in_a_process_of_its_own(qtbot, readmission):
    import os

    window = readmission
    window.model_pane.set_ticked(PREDICTORS)
    box = wait_assessed(qtbot, window)
    pool = window.session._pool
    assert pool is not None, "the assessment ran in the window's own process"
    pids = {p.pid for p in pool._processes.values()}
    assert pids and os.getpid() not in pids
    # What it sent back is what the same assessment gives in this process (outside reference: scikit-learn).
    from sklearn.metrics import roc_auc_score

    fit = core_fit(PREDICTORS)
    assert box.view.values["auc"] == pytest.approx(roc_auc_score(fit.design.y, fit.fitted), rel=1e-9)
    assert set(box.view.figures) == {"roc", "calibration", "influence"}


def test_the_assessment_process_ends_with_the_window_process_even_after_a_crash(tmp_path):
    import time

    code = (
        "import os, sys, time\n"
        "os.environ['QT_QPA_PLATFORM'] = 'offscreen'\n"
        "from PySide6.QtWidgets import QApplication\n"
        "app = QApplication([])\n"
        "from twofold.gui.window import MainWindow\n"
        "w = MainWindow(remember=False)\n"
        "deadline = time.time() + 60\n"
        "while (w.session._pool is None or not w.session._pool._processes) and time.time() < deadline:\n"
        "    app.processEvents(); time.sleep(0.05)\n"
        "print(*[p.pid for p in w.session._pool._processes.values()], flush=True)\n"
        "os._exit(9)  # a crash: nothing is closed\n"
    )
    env = {**os.environ, "TWOFOLD_HOME": str(tmp_path)}
    run = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120, env=env)
    pids = [int(x) for x in run.stdout.split()]
    assert run.returncode == 9 and pids, run.stderr[-800:]

    def alive(pid):
        try:
            os.kill(pid, 0)
        except ProcessLookupError:
            return False
        return True

    deadline = time.time() + 10
    while any(alive(p) for p in pids) and time.time() < deadline:
        time.sleep(0.2)
    assert not any(alive(p) for p in pids)


def test_the_risk_cut_off_starts_at_the_observed_event_rate_and_more_measures_fold_open(qtbot, readmission):
    # Reference: the event rate counted by pandas; McFadden's R-squared from statsmodels' prsquared.
    import statsmodels.formula.api as smf
    from PySide6.QtCore import QPoint, Qt
    from sklearn.metrics import recall_score

    window = readmission
    tick(qtbot, window, PREDICTORS)
    box = wait_assessed(qtbot, window)
    frame = pd.read_csv(READMISSION)
    rate = round(frame["readmitted_30d"].mean(), 2)
    assert box.view.threshold == pytest.approx(rate)
    assert box.threshold.value() == pytest.approx(rate)
    assert f"at least {rate:.2f} positive" in box.classification.text()
    fit = core_fit(PREDICTORS)
    called = (fit.fitted >= rate).astype(int)
    assert box.view.values["sensitivity"] == pytest.approx(recall_score(fit.design.y, called))
    # The pseudo-R-squared values are folded away until asked for.
    assert not box.pseudo.isVisible()
    window.results_pane.scroll.ensureWidgetVisible(box.more_measures)
    qtbot.mouseClick(box.more_measures, Qt.MouseButton.LeftButton, pos=QPoint(8, box.more_measures.height() // 2))
    assert box.pseudo.isVisible()
    ref = smf.logit("readmitted_30d ~ age + C(sex) + C(discharge_destination)", frame).fit(disp=0)
    assert f"McFadden {fmt_num(ref.prsquared, 3)}" in box.pseudo.text()
