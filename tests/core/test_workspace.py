"""The workspace: one owner of an analysis, every operation all-or-nothing, with undo and redo."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from twofold.core.errors import TwofoldError
from twofold.core.outputs.session import load_session, save_session
from twofold.core.workspace import Workspace

SAMPLES = Path(__file__).resolve().parents[2] / "sample_studies"
READMISSION = SAMPLES / "readmission_synthetic.csv"
OUTCOME = "readmitted_30d"


@pytest.fixture
def ws():
    w = Workspace()
    w.open(READMISSION)
    w.set_outcome(OUTCOME)
    return w


def fitted_one_by_one(steps) -> Workspace:
    """The same ticks, each fitted at once (nothing put off)."""
    w = Workspace()
    w.open(READMISSION)
    w.set_outcome(OUTCOME)
    for predictors in steps:
        w.set_predictors(predictors)
    return w


def ladder_numbers(w):
    """What the window shows of the ladder: predictors, log-likelihood and parent of every model."""
    return [(tuple(r.predictors), round(r.fit.llf, 9), w.parents.get(i)) for i, r in enumerate(w.ladder.rungs)]


def test_every_tick_is_its_own_step_with_a_nested_test_that_matches_statsmodels(ws):
    ws.set_predictors(["age"])
    ws.set_predictors(["age", "sex"])
    ws.set_predictors(["age", "sex", "prior_admissions"])
    assert [r.predictors for r in ws.ladder.rungs] == [("age",), ("age", "sex"), ("age", "sex", "prior_admissions")]
    t = ws.nested_between(1, 2)
    # Outside reference: statsmodels' formula interface (its own design from pandas) on the ladder's common rows.
    import statsmodels.formula.api as smf

    frame = pd.read_csv(READMISSION)[["age", "sex", "prior_admissions", OUTCOME]].dropna()
    small = smf.logit(f"{OUTCOME} ~ age + sex", frame).fit(disp=0)
    large = smf.logit(f"{OUTCOME} ~ age + sex + prior_admissions", frame).fit(disp=0)
    assert t.g == pytest.approx(2 * (large.llf - small.llf), rel=1e-7)
    assert t.df == 1


def test_a_failing_operation_leaves_everything_as_it_was(ws):
    ws.set_predictors(["age", "sex"])
    before, revision, undo = ladder_numbers(ws), ws.revision, ws.undo_text
    with pytest.raises(TwofoldError) as err:
        ws.set_predictors(["age", "no_such_column"])
    assert "no_such_column" in str(err.value)
    with pytest.raises(TwofoldError):
        ws.set_reference("discharge_destination", "the moon")
    assert ladder_numbers(ws) == before and ws.revision == revision and ws.undo_text == undo


def test_a_role_change_that_removes_models_is_undone_exactly(ws):
    ws.set_predictors(["age"])
    ws.set_predictors(["age", "discharge_destination"])
    ws.set_predictors(["age", "discharge_destination", "sex"])
    ws.select(1)
    before = ladder_numbers(ws)
    change = ws.set_role("discharge_destination", "excluded", predictors=["age", "discharge_destination"])
    assert change.removed == 3
    assert [r.predictors for r in ws.ladder.rungs] == [("age",)]
    ws.undo()
    assert ladder_numbers(ws) == before and ws.ladder.current == 1
    assert ws.study.columns["discharge_destination"].role.value == "categorical"
    # The fits came back as they were: a tick after the undo tests against the right model.
    ws.set_predictors(["age", "discharge_destination", "lives_alone"])
    assert ws.parents[3] == 1
    ws.undo()
    ws.redo()
    assert [r.predictors for r in ws.ladder.rungs][-1] == ("age", "discharge_destination", "lives_alone")


def test_undo_and_redo_of_outcome_reference_and_method(ws):
    ws.set_predictors(["age", "discharge_destination"])
    or_before = ws.shown_fit().params.copy()
    ws.set_reference("discharge_destination", "care_home")
    assert not np.allclose(ws.shown_fit().params, or_before)
    ws.undo()
    assert np.allclose(ws.shown_fit().params, or_before)
    ws.set_penalised(True)
    assert ws.shown_fit() is not ws.current_rung.fit
    ws.undo()
    assert ws.shown_fit() is ws.current_rung.fit
    with pytest.raises(TwofoldError, match="nothing to redo"):
        ws.redo(); ws.redo(); ws.redo()  # noqa: E702


def test_results_do_not_move_when_a_predictor_is_shifted_or_rows_are_reordered(tmp_path):
    # Invariance: shifting age and reordering rows leave the tests and the slope unchanged.
    frame = pd.read_csv(READMISSION)
    moved = frame.sample(frac=1.0, random_state=7).assign(age=lambda d: d.age - 40)
    path = tmp_path / "moved.csv"
    moved.to_csv(path, index=False)
    out = []
    for source in (READMISSION, path):
        w = Workspace()
        w.open(source)
        w.set_outcome(OUTCOME)
        w.set_predictors(["age"])
        w.set_predictors(["age", "sex"])
        r = w.result(with_assessment=False).record
        out.append((r["overall"]["g"], w.nested_between(0, 1).g, r["terms"][0]["estimate"]))
    assert out[0] == pytest.approx(out[1], rel=1e-8)


def test_a_saved_workspace_comes_back_with_its_ladder_parents_and_validation(ws, tmp_path):
    from twofold.core.models.modelling import bootstrap_validation

    ws.set_predictors(["age"])
    ws.set_predictors(["age", "sex"])
    ws.select(0)
    ws.set_predictors(["age", "prior_admissions"])  # built from model 1, not model 2
    fit = ws.shown_fit()
    v = bootstrap_validation(fit, 20, seed=5)
    ws.record_validation(fit, v, 20, 5)
    path = save_session(ws.to_session(), tmp_path / "a.json")
    back = Workspace.from_session(load_session(path))
    assert ladder_numbers(back) == ladder_numbers(ws)
    assert back.parents == {1: 0, 2: 0}
    kept = back.validation_of(back.shown_fit())
    assert kept is not None and kept.seed == 5
    assert kept.result.auc_corrected == pytest.approx(v.auc_corrected, rel=1e-12)
    assert not back.unsaved


def test_a_validation_of_another_model_is_refused(ws):
    from twofold.core.models.modelling import bootstrap_validation

    ws.set_predictors(["age"])
    old = ws.shown_fit()
    v = bootstrap_validation(old, 5, seed=1)
    ws.set_predictors(["age", "sex"])
    with pytest.raises(TwofoldError, match="model changed"):
        ws.record_validation(old, v, 5, 1)
    assert ws.validation is None


def test_a_penalised_report_says_why_its_two_aics_differ(ws):
    from twofold.core.outputs.report import build_report
    from twofold.render.report_html import render_html

    ws.set_predictors(["age"])
    ws.set_predictors(["age", "sex"])
    ws.set_penalised(True)
    result = ws.result()
    html = render_html(build_report(result, ladder=ws.ladder))
    assert "ordinary (maximum-likelihood) fits" in html
    # The chosen model's AIC is the penalised fit's; the table's is the ordinary fit's: they do differ.
    assert result.record["aic"] != pytest.approx(ws.current_rung.fit.aic, rel=1e-9)


def test_a_session_written_before_parents_and_kept_validation_still_opens(ws, tmp_path):
    ws.set_predictors(["age"])
    ws.set_predictors(["age", "sex"])
    session = ws.to_session()
    for key in ("parents", "validation_result"):
        session.pop(key)
    old = tmp_path / "old.json"
    import json

    old.write_text(json.dumps(session))
    back = Workspace.from_session(load_session(old))
    assert ladder_numbers(back) == ladder_numbers(ws)


def test_report_texts_are_kept_with_the_analysis(ws, tmp_path):
    ws.set_predictors(["age"])
    ws.set_report_options(5, False, title="  Readmissions\n2024 ", question="Who comes back?")
    ws.set_report_options(6, True)  # texts not given: kept
    assert ws.report_options == {"suppress_up_to": 6, "list_records": True, "title": "Readmissions 2024",
                                 "authors": "", "question": "Who comes back?"}
    with pytest.raises(TwofoldError, match="shorten it to at most 200"):
        ws.set_report_options(6, True, title="x" * 201)
    with pytest.raises(TwofoldError, match="no text called"):
        ws.set_report_options(6, True, subtitle="x")
    assert ws.report_options["title"] == "Readmissions 2024"
    back = Workspace.from_session(load_session(save_session(ws.to_session(), tmp_path / "r.json")))
    assert back.report_options == ws.report_options


def test_fits_put_off_by_quick_ticks_give_the_same_ladder_as_fitting_each_at_once(ws):
    # A burst of ticks: the ones a newer tick passed over are added with their fit put off (defer=True).
    steps = [["age"], ["age", "sex"], ["age", "sex", "prior_admissions"], ["sex", "prior_admissions"],
             ["sex", "prior_admissions", "discharge_destination"]]
    ws.set_predictors(steps[0])
    for predictors in steps[1:-1]:
        ws.set_predictors(predictors, defer=True)
    ws.set_predictors(steps[-1])
    # Only the newest and the model it was built from (for its nested test) are fitted so far.
    assert ws.ladder.pending == [1, 2, 3]
    assert [r.fitted for r in ws.ladder.rungs] == [True, False, False, True, True]
    assert ws.complete() == 3 and ws.ladder.pending == []
    eager = fitted_one_by_one(steps)
    assert ladder_numbers(ws) == ladder_numbers(eager)
    for late_rung, eager_rung in zip(ws.ladder.rungs[1:], eager.ladder.rungs[1:]):
        late_test, eager_test = late_rung.against_previous, eager_rung.against_previous
        assert late_test.df == eager_test.df and late_test.g == pytest.approx(eager_test.g, rel=1e-7)
    # Outside reference for a model fitted late: statsmodels' formula interface on the ladder's common rows.
    import statsmodels.formula.api as smf

    columns = ["age", "sex", "prior_admissions", "discharge_destination", OUTCOME]
    frame = pd.read_csv(READMISSION)[columns].dropna()
    assert len(frame) == len(ws.ladder.rows)
    late = smf.logit(f"{OUTCOME} ~ age + sex + prior_admissions", frame).fit(disp=0)
    assert ws.ladder.rungs[2].fit.llf == pytest.approx(late.llf, rel=1e-9)


def test_a_tick_whose_parent_was_put_off_is_fitted_with_it_at_once_or_given_up_for_a_newer_one(ws):
    # The burst: tick 2 put off; tick 3 needs tick 2's fit for its nested test, so the two are fitted at once (on
    # two threads), asking between Newton steps whether a newer tick came.
    steps = [["age"], ["age", "sex"], ["age", "sex", "prior_admissions"],
             ["age", "sex", "prior_admissions", "discharge_destination"],
             ["age", "sex", "prior_admissions", "discharge_destination", "followup_call"]]
    ws.set_predictors(steps[0])
    ws.set_predictors(steps[1], defer=True)
    asked = []

    def newer():
        asked.append(1)
        return len(asked) > 2  # a newer tick comes while they are being fitted

    ws.set_predictors(steps[2], defer=newer)
    # Both fits were given up as soon as it came: tick 3 joins the ladder put off, as tick 2 stays.
    assert 3 <= len(asked) <= 4
    assert [r.fitted for r in ws.ladder.rungs] == [True, False, False]
    # The next tick finds its parent put off too: both fitted at once, and nobody newer came.
    ws.set_predictors(steps[3], defer=lambda: False)
    assert [r.fitted for r in ws.ladder.rungs] == [True, False, True, True]
    assert ws.ladder.pending == [1, 2]  # tick 3's nested test (against tick 2) and tick 2 are still to come
    # A tick whose parent is fitted: its own fit asks too, and is given up the same way.
    ws.set_predictors(steps[4], defer=lambda: True)
    assert [r.fitted for r in ws.ladder.rungs] == [True, False, True, True, False]
    ws.complete()
    assert ws.ladder.pending == []
    eager = fitted_one_by_one(steps)
    assert ladder_numbers(ws) == ladder_numbers(eager)
    # Outside reference: statsmodels' formula interface, the likelihood-ratio test of the last step by hand.
    import statsmodels.formula.api as smf

    frame = pd.read_csv(READMISSION)[["age", "sex", "prior_admissions", "discharge_destination", OUTCOME]].dropna()
    small = smf.logit(f"{OUTCOME} ~ age + sex + prior_admissions", frame).fit(disp=0)
    large = smf.logit(f"{OUTCOME} ~ age + sex + prior_admissions + discharge_destination", frame).fit(disp=0)
    assert ws.ladder.rungs[3].against_previous.g == pytest.approx(2 * (large.llf - small.llf), rel=1e-7)
    largest = smf.logit(f"{OUTCOME} ~ age + sex + prior_admissions + discharge_destination + followup_call",
                        pd.read_csv(READMISSION)).fit(disp=0)
    assert ws.ladder.rungs[4].fit.llf == pytest.approx(largest.llf, rel=1e-9)


def test_two_fits_at_once_give_each_its_own_warnings_and_numbers(tmp_path):
    """Fitted at once on two threads, a model that separates the outcome still gets its own separation notice
    (warnings are watched around both; when any come, both are fitted again one after the other), and both
    fits equal fits made one at a time; statsmodels' formula interface is the outside reference."""
    import statsmodels.formula.api as smf

    from twofold.core.models.ladder import Deferred

    rng = np.random.default_rng(7)
    n = 400
    frame = pd.DataFrame({"x": rng.normal(size=n), "z": rng.normal(size=n)})
    frame["y"] = (frame["x"] + 0.8 * rng.normal(size=n) > 0).astype(int)
    frame["marker"] = np.where(frame["y"] == 1, "a", "b")  # separates the outcome completely
    path = tmp_path / "sep.csv"
    frame.to_csv(path, index=False)
    w = Workspace()
    w.open(path)
    w.set_outcome("y")
    study = w.study
    for parent_names, own_names in ((["x", "marker"], ["x", "z"]), (["x"], ["x", "z"])):
        parent = Deferred(lambda watch=True, stop=None, names=parent_names:
                          study.fit(names, watch_warnings=watch, stop=stop))
        own = parent.fit_beside(lambda watch, stop, names=own_names: study.fit(names, watch_warnings=watch, stop=stop))
        alone_parent, alone_own = study.fit(parent_names), study.fit(own_names)
        assert [n.code for n in parent.fit.notices] == [n.code for n in alone_parent.notices]
        assert [n.code for n in own.notices] == [n.code for n in alone_own.notices]
        assert own.llf == pytest.approx(alone_own.llf, rel=1e-10)
        assert own.llf == pytest.approx(smf.logit("y ~ x + z", frame).fit(disp=0).llf, rel=1e-8)
        assert np.allclose(parent.fit.params, alone_parent.params, rtol=1e-8, atol=1e-8)
    assert "separation" in [n.code for n in study.fit(["x", "marker"]).notices]  # the case above did separate


def test_undo_past_fits_put_off_and_a_change_of_rows_keep_every_test_valid(ws):
    ws.set_predictors(["age"])
    ws.set_predictors(["age", "sex"], defer=True)
    ws.set_predictors(["age", "sex", "discharge_destination"], defer=True)
    # A predictor with missing values shrinks the common rows: every model is refitted on the new rows.
    ws.set_predictors(["age", "sex", "discharge_destination", "comorbidity_score"])  # 217 cells missing
    # Only the new model and the one it was built from are fitted at once; the others follow on the new rows.
    assert [r.fitted for r in ws.ladder.rungs] == [False, False, True, True]
    assert ws.complete() == 3 and ws.ladder.pending == []
    assert {len(r.fit.design.rows) for r in ws.ladder.rungs} == {len(ws.ladder.rows)}
    eager = fitted_one_by_one([["age"], ["age", "sex"], ["age", "sex", "discharge_destination"],
                               ["age", "sex", "discharge_destination", "comorbidity_score"]])
    assert ladder_numbers(ws) == ladder_numbers(eager)
    for late_rung, eager_rung in zip(ws.ladder.rungs[1:], eager.ladder.rungs[1:]):
        late_test, eager_test = late_rung.against_previous, eager_rung.against_previous
        assert late_test.df == eager_test.df and late_test.g == pytest.approx(eager_test.g, rel=1e-7)
        assert late_test.n_rows == len(ws.ladder.rows)
    ws.undo()  # back to the ladder before the rows changed: its models put off are fitted on their own rows
    assert len(ws.ladder.rungs) == 3
    full = len(ws.study.complete_rows(["age", "sex", "discharge_destination"]))
    assert [len(r.fit.design.rows) for r in ws.ladder.rungs] == [full] * 3
    assert ws.ladder.rungs[2].against_previous.n_rows == full
    with pytest.raises(TwofoldError):
        ws.set_predictors(["age", "age"], defer=True)  # refused at once, not when the fit is made
    assert len(ws.ladder.rungs) == 3
