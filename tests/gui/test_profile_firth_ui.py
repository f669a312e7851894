"""Profile-likelihood intervals and Firth's penalised fit in the window, checked from outside.

References: statsmodels' ``Logit`` and ``GLM`` (with an offset) fitted here on
designs built with pandas; the chi-square 0.95 quantile on 1 degree of
freedom, 3.841, from the NIST/SEMATECH e-Handbook of Statistical Methods
table of the chi-square distribution; Firth (1993, Biometrika 80:27) and
Heinze & Schemper (2002, Stat Med 21:2409) for a 2x2 table with a zero cell,
where Firth's log odds ratio equals the log odds ratio with 0.5 added to
every cell; Puhr et al. (2017, Stat Med 36:2302) for the intercept
correction (FLIC), whose risks average to the event rate.
"""

from __future__ import annotations

import math
import threading

import numpy as np
import pandas as pd
import pytest
from PySide6.QtCore import Qt

from gui_helpers import READMISSION, WAIT_MS, WOUND, choose_outcome, idle, load, tick
from twofold.core.models.penalised import profile_intervals
from twofold.core.models.study import Study
from twofold.core.outputs.text import fmt_or
from twofold.gui import present
from twofold.gui.tables import CoefficientModel, RawRole

#: Chi-square 0.95 quantile on 1 degree of freedom (NIST/SEMATECH e-Handbook, chi-square table).
CHI2_95_1DF = 3.841


def term_rows(window):
    """(line, profile interval raw, profile text) of every coefficient row of the table shown."""
    model = window.results_pane.coefficients
    out = []
    for r, line in enumerate(model.lines):
        if line.kind == "term":
            idx = model.index(r, CoefficientModel.PROFILE)
            out.append((line, model.data(idx, RawRole), model.data(idx, Qt.ItemDataRole.DisplayRole)))
    return out


def same_intervals(shown: dict, reference: dict) -> None:
    assert set(shown) == set(reference)
    for name, ends in reference.items():
        assert shown[name] == pytest.approx(ends, rel=1e-9)


def wait_profile(qtbot, window, predictors):
    pane = window.results_pane
    qtbot.waitUntil(lambda: idle(window) and pane.view is not None and set(pane.view.predictors) == set(predictors)
                    and pane.profile is not None, timeout=WAIT_MS)
    return pane.profile


def test_profile_intervals_equal_the_core_and_cut_the_likelihood_at_the_chi_square_quantile(qtbot, window):
    import statsmodels.api as sm

    predictors = ["age", "diabetes"]
    load(qtbot, window, WOUND)
    choose_outcome(qtbot, window, "infection")
    tick(qtbot, window, predictors)
    shown = wait_profile(qtbot, window, predictors)
    pane = window.results_pane
    assert pane.view.profile_auto  # 120 rows: worked out without being asked
    assert not pane.table.isColumnHidden(CoefficientModel.PROFILE)
    # On screen it stands right of the Wald interval.
    header = pane.table.horizontalHeader()
    assert header.visualIndex(CoefficientModel.PROFILE) == header.visualIndex(2) + 1
    assert "profile-likelihood" in pane.profile_status.text()

    # The core's own function on the same model, fitted outside the window.
    study = Study.from_file(WOUND)
    study.set_outcome("infection")
    reference = profile_intervals(study.fit(predictors))
    rows = term_rows(window)
    assert {line.name for line, _, _ in rows} == set(reference)
    for line, raw, text in rows:
        lo, hi = reference[line.name]
        assert raw == pytest.approx((lo, hi), rel=1e-9)
        assert text == f"{fmt_or(lo)} to {fmt_or(hi)}"
    same_intervals(shown.intervals, reference)

    # Outside check: statsmodels on a design built with pandas.  With the coefficient held at an
    # interval end (as an offset), the others refitted, the likelihood-ratio statistic is 3.841.
    frame = pd.read_csv(WOUND)
    y = (frame["infection"] == "yes").astype(float)
    X = pd.DataFrame({"const": 1.0, "age": frame["age"].astype(float),
                      "diabetes": (frame["diabetes"] == "yes").astype(float)})
    full = sm.Logit(y, X).fit(disp=0)
    for line, (lo, hi), _ in rows:
        column = line.column
        for end in (lo, hi):
            b = math.log(end)
            restricted = sm.GLM(y, X.drop(columns=[column]), family=sm.families.Binomial(),
                                offset=b * X[column]).fit()
            lr = 2.0 * (full.llf - restricted.llf)
            assert lr == pytest.approx(CHI2_95_1DF, abs=1e-3)
        # The Wald interval is a different thing: the profile one is not its copy.
        wald = (line.values["or_ci_low"], line.values["or_ci_high"])
        assert (lo, hi) != pytest.approx(wald, rel=1e-6)


def test_intervals_traced_before_their_results_arrive_are_still_shown(qtbot, window, monkeypatch):
    # A small model's intervals can be ready before the window has received the results they
    # describe (seen on a busy machine); they must be held back and shown, not dropped.  Forced
    # here: the worker waits for the profile thread to finish before it hands over the results.
    session = window.session
    real = present.results_view

    def finish_first(ws):
        view = real(ws)
        if view is not None:  # trace the intervals and send them before these results leave the worker
            session._profiler.submit(session._profile, session.newest_request, ws, ws.shown_fit(),
                                     ws.ladder.current).result(timeout=WAIT_MS / 1000)
        return view

    monkeypatch.setattr(present, "results_view", finish_first)
    predictors = ["age", "diabetes"]
    load(qtbot, window, WOUND)
    choose_outcome(qtbot, window, "infection")
    tick(qtbot, window, predictors)
    shown = wait_profile(qtbot, window, predictors)
    # Outside reference for the figures themselves: the test above checks them against statsmodels.
    study = Study.from_file(WOUND)
    study.set_outcome("infection")
    same_intervals(shown.intervals, profile_intervals(study.fit(predictors)))
    assert not window.results_pane.profile_status.text().startswith("Working out")


def test_profile_runs_off_the_gui_thread_and_a_tick_drops_the_stale_result(qtbot, window, monkeypatch):
    # Every model counts as "big", so the intervals come only when asked for.
    from twofold.core import workspace as workspace_module

    monkeypatch.setattr(workspace_module, "PROFILE_AUTO_WORK", 0)
    load(qtbot, window, READMISSION)
    choose_outcome(qtbot, window, "readmitted_30d")
    pane = window.results_pane
    tick(qtbot, window, ["age", "sex"])
    assert pane.profile_check.isVisible() and not pane.profile_check.isChecked()
    assert pane.table.isColumnHidden(CoefficientModel.PROFILE)

    gui_thread = threading.get_ident()
    threads, started, release = [], threading.Event(), threading.Event()
    real = present.profile_view

    def held(ws, fit, rung):
        threads.append(threading.get_ident())
        if not started.is_set():
            started.set()
            release.wait(WAIT_MS / 1000)  # the first computation stays "running" until released
        return real(ws, fit, rung)

    monkeypatch.setattr(present, "profile_view", held)
    arrived = []
    window.session.profileReady.connect(arrived.append)

    pane.profile_check.setChecked(True)  # as a click would
    qtbot.waitUntil(started.is_set, timeout=WAIT_MS)
    # While it runs, the table says so, and the window goes on answering: a tick is fitted meanwhile.
    assert all(text == CoefficientModel.WORKING for _, _, text in term_rows(window))
    assert pane.profile_status.text().startswith("Working out")
    tick(qtbot, window, ["age", "sex", "length_of_stay"])
    assert all(text == CoefficientModel.WORKING for _, _, text in term_rows(window))
    assert not arrived

    release.set()
    shown = wait_profile(qtbot, window, ["age", "sex", "length_of_stay"])
    assert len(threads) == 2 and gui_thread not in threads
    # Only the intervals of the model on screen ever arrived: the stale ones were dropped.
    assert [set(v.intervals) for v in arrived] == [{"age", "sex[M]", "length_of_stay"}]
    study = Study.from_file(READMISSION)
    study.set_outcome("readmitted_30d")
    reference = profile_intervals(study.fit(["age", "sex", "length_of_stay"]))
    same_intervals(shown.intervals, reference)
    for line, raw, _ in term_rows(window):
        assert raw == pytest.approx(reference[line.name], rel=1e-9)


def _two_by_two(path, a, b, c, d):
    """A file with one yes/no exposure: a events and b non-events among exposed, c and d among the others."""
    exposure = ["yes"] * (a + b) + ["no"] * (c + d)
    event = [1] * a + [0] * b + [1] * c + [0] * d
    frame = pd.DataFrame({"patient": [f"P{i:03d}" for i in range(len(event))], "exposure": exposure,
                          "event": event})
    frame.to_csv(path, index=False)
    return path


def test_separation_offers_firth_whose_estimate_adds_half_to_every_cell(qtbot, window, tmp_path):
    # The exposed group has only events (a zero cell): the classic separated 2x2 table.
    a, b, c, d = 6, 0, 4, 14
    path = _two_by_two(tmp_path / "separated.csv", a, b, c, d)
    load(qtbot, window, path)
    choose_outcome(qtbot, window, "event")
    view = tick(qtbot, window, ["exposure"])
    pane = window.results_pane
    assert view.separation and not view.penalised
    button = pane.firth_button
    assert button is not None
    qtbot.waitUntil(button.isVisible, timeout=WAIT_MS)
    banner = button.parent()
    assert "separates the outcome" in banner.text()  # the offer sits in the separation warning itself
    assert not pane.method_banner.isVisible()

    qtbot.mouseClick(button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: idle(window) and pane.view.penalised, timeout=WAIT_MS)
    # Firth 1993; Heinze & Schemper 2002: the log odds ratio with 0.5 added to every cell.
    expected = math.log((a + 0.5) * (d + 0.5) / ((b + 0.5) * (c + 0.5)))
    (line,) = [x for x in pane.coefficients.lines if x.kind == "term"]
    model = pane.coefficients
    r = list(model.lines).index(line)
    assert model.data(model.index(r, 5), RawRole) == pytest.approx(expected, rel=1e-6)
    assert model.data(model.index(r, 1), RawRole) == pytest.approx(math.exp(expected), rel=1e-6)

    # The pane says plainly what the numbers now are, with the way back beside it.
    assert pane.method_banner.isVisible() and pane.ordinary_button.isVisible()
    said = pane.method_banner.text()
    for words in ("penalised likelihood-ratio tests", "profile penalised-likelihood intervals", "FLIC"):
        assert words in said
    assert pane.overall.text().startswith("<b>The model as a whole.</b> Penalised likelihood-ratio")
    assert "penalised" in model.headerData(CoefficientModel.PROFILE, Qt.Orientation.Horizontal)
    copied = window.results_text()  # what "Copy the results as text" puts on the clipboard
    assert said in copied and "(penalised profile)" in copied

    # Its profile intervals are the core's profile penalised-likelihood ones.
    study = Study.from_file(path)
    study.set_outcome("event")
    firth = study.fit(["exposure"], firth=True)
    shown = wait_profile(qtbot, window, ["exposure"])
    assert shown.penalised
    same_intervals(shown.intervals, profile_intervals(firth))

    # Predicted risks are intercept-corrected: calibration-in-the-large is 0 (Puhr et al. 2017),
    # which plain Firth risks miss (they are pulled towards one half).
    box = window.results_pane.assessment_box
    qtbot.waitUntil(lambda: box.view is not None and box.view.penalised, timeout=WAIT_MS)
    assert "FLIC" in box.heading.text()
    from twofold.core.assessing.assessment import PENALISED_CALIBRATION_NOTE

    assert PENALISED_CALIBRATION_NOTE in box.calibration.text()
    assert box.view.values["calibration_intercept"] == pytest.approx(0.0, abs=1e-6)
    X = firth.design.X[:, firth.kept]
    plain = 1.0 / (1.0 + np.exp(-(X @ np.asarray(firth.result.params))))
    assert abs(plain.mean() - firth.design.y.mean()) > 1e-3

    # Back to the ordinary fit: its estimate runs off again and the offer returns.
    qtbot.mouseClick(pane.ordinary_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: idle(window) and not pane.view.penalised, timeout=WAIT_MS)
    (line,) = [x for x in pane.coefficients.lines if x.kind == "term"]
    assert line.values["estimate"] > 5
    assert not pane.method_banner.isVisible()
    assert pane.firth_button is not None
    qtbot.waitUntil(pane.firth_button.isVisible, timeout=WAIT_MS)
