"""The workspace holds the usefulness settings, gives their results for the shown model and saves them."""

from __future__ import annotations

import json
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
    w.set_predictors(["age"])
    w.set_predictors(["age", "prior_admissions", "comorbidity_score"])
    return w


def _net_benefit_by_hand(y, p, t):
    # Vickers & Elkin (2006), Med Decis Making 26:565: NB = TP/n - FP/n * t / (1 - t), treating those with p >= t.
    treat = p >= t
    tp = np.sum(treat & (y == 1))
    fp = np.sum(treat & (y == 0))
    return tp / len(y) - fp / len(y) * t / (1 - t)


def test_decision_curve_of_the_shown_model_and_a_second_one_match_the_formula(ws):
    ws.set_usefulness(net_benefit=[0.05, 0.3, 0.05], compare_with=0)
    view = ws.decision_view()
    shown, first = ws.shown_fit(), ws.fit_of(0)
    y = shown.design.y
    for i, t in enumerate(view.curve.thresholds):
        assert view.curve.model[i] == pytest.approx(_net_benefit_by_hand(y, shown.fitted, t), abs=1e-12)
        assert view.other[i] == pytest.approx(_net_benefit_by_hand(y, first.fitted, t), abs=1e-12)
    assert view.other_predictors == ("age",)
    record = ws.result(with_assessment=False).record
    assert [e["other_model"] for e in record["net_benefit"]] == pytest.approx(list(view.other))
    assert record["net_benefit_summary"]["other_predictors"] == ["age"]


def test_refused_settings_leave_the_workspace_as_it_was(ws):
    ws.set_usefulness(unit_column="discharge_destination")
    before = dict(ws.usefulness)
    for bad in ({"net_benefit": [0.5, 0.1, 0.01]}, {"compare_with": 7}, {"unit_column": "age"},
                {"unit_column": OUTCOME}, {"subgroups": "no_such_column"}):
        with pytest.raises(TwofoldError):
            ws.set_usefulness(**bad)
        assert ws.usefulness == before


def test_units_and_subgroups_of_the_shown_model_count_what_pandas_counts(ws):
    ws.set_usefulness(unit_column="discharge_destination", subgroups="sex")
    comparison = ws.units_comparison()
    fit = ws.shown_fit()
    frame = pd.read_csv(READMISSION).iloc[fit.design.rows]
    # Outside route: pandas groupby of the outcome and of the model's risks (indirect standardisation).
    by = pd.DataFrame({"u": frame["discharge_destination"].to_numpy(), "y": fit.design.y, "p": fit.fitted})
    sums = by.groupby("u").sum()
    for unit in comparison.units:
        assert unit["observed"] == int(sums.loc[unit["unit"], "y"])
        assert unit["expected"] == pytest.approx(sums.loc[unit["unit"], "p"], rel=1e-12)
    table = ws.subgroup_table()
    assert [g["group"] for g in table] == sorted(frame["sex"].dropna().unique())
    record = ws.result(with_assessment=False).record
    assert record["units"]["unit_column"] == "discharge_destination"
    assert [g["group"] for g in record["subgroups"]] == [g["group"] for g in table]


def _validated(ws, slope_apparent=1.0, optimism=0.15):
    from twofold.core.models.modelling import Validation

    fit = ws.shown_fit()
    v = Validation(50, 50, 0, 1, 0.7, 0.01, slope_apparent, optimism, 0.1, 0.001)
    ws.record_validation(fit, v, 50, 1)
    return fit


def test_shrinking_is_offered_below_1_undoable_and_saved_for_predictions(ws, tmp_path):
    assert ws.shrink_offer() is None  # no bootstrap yet
    fit = _validated(ws)
    assert "0.85" in ws.shrink_offer()
    ws.shrink()
    shrunk = ws.saved_model()
    assert shrunk.coefficients[1:] == pytest.approx(0.85 * np.asarray(fit.params)[1:])
    assert ws.shrink_offer() is None
    path = tmp_path / "s.json"
    save_session(ws.to_session(), path)
    saved = json.loads(path.read_text())
    assert saved["model"]["coefficients"] == pytest.approx(list(shrunk.coefficients))
    assert saved["shrinkage"]["factor"] == pytest.approx(0.85) and saved["shrink"] is True
    again = Workspace.from_session(load_session(path))
    assert again.saved_model().coefficients == pytest.approx(shrunk.coefficients, rel=1e-9)
    ws.undo()
    assert ws.shrinkage_of(ws.shown_fit()) is None
    assert ws.saved_model().coefficients == pytest.approx(np.asarray(fit.params))
    ws.redo()
    assert ws.saved_model().coefficients == pytest.approx(shrunk.coefficients)


def test_a_slope_not_below_1_is_not_shrunk(ws):
    _validated(ws, slope_apparent=1.0, optimism=-0.05)
    assert ws.shrink_offer() is None
    revision = ws.revision
    with pytest.raises(TwofoldError):
        ws.shrink()
    assert ws.revision == revision and ws.shrinkage is None


def test_usefulness_settings_are_saved_and_an_older_session_without_them_still_opens(ws, tmp_path):
    ws.set_usefulness(net_benefit=[0.05, 0.5, 0.05], compare_with=0, unit_column="discharge_destination",
                      subgroups="sex")
    path = tmp_path / "s.json"
    save_session(ws.to_session(), path)
    saved = json.loads(path.read_text())
    assert saved["net_benefit"] == [0.05, 0.5, 0.05] and saved["net_benefit_versus"] == ["age"]
    assert saved["unit_column"] == "discharge_destination" and saved["subgroups"] == "sex"
    again = Workspace.from_session(load_session(path))
    assert again.usefulness == ws.usefulness
    assert not again.unsaved
    for key in ("net_benefit", "net_benefit_versus", "unit_column", "subgroups", "shrink", "shrinkage"):
        saved.pop(key)
    path.write_text(json.dumps(saved))
    old = Workspace.from_session(load_session(path))
    assert old.usefulness == {"net_benefit": None, "compare_with": None, "unit_column": None, "subgroups": None}


def test_rerun_of_a_window_session_repeats_the_second_curve_and_the_units(ws, tmp_path, capsys):
    from twofold.cli import main

    ws.set_usefulness(net_benefit=[0.1, 0.3, 0.1], compare_with=0, unit_column="discharge_destination")
    path = tmp_path / "s.json"
    save_session(ws.to_session(), path)
    assert main(["rerun", str(path), "--json", "-"]) == 0
    record = json.loads(capsys.readouterr().out)
    view = ws.decision_view()
    assert [e["other_model"] for e in record["net_benefit"]] == pytest.approx(list(view.other))
    assert [u["observed"] for u in record["units"]["units"]] == [u["observed"] for u in ws.units_comparison().units]


def test_check_on_file_applies_the_shown_model_unchanged(ws):
    result = ws.check_on_file(READMISSION)
    fit = ws.shown_fit()
    # Same data, saved coefficients: the risks are the fit's own (apart from rows the ladder left out).
    assert result.record["assessment"]["observed_expected"]["expected"] == pytest.approx(
        float(np.sum(result.predicted)))
    assert result.record["coefficients_applied"][1]["estimate"] == pytest.approx(float(fit.params[1]))
    assert result.record["assessment"]["calibration_curve"]["knots"] == 4


@pytest.mark.parametrize("bad", [{"factor": 1.5}, {"factor": "0.9"}, {"coefficients": "all"}, {"reading": 3}])
def test_a_tampered_shrinkage_in_a_session_is_refused_in_one_sentence(ws, tmp_path, bad):
    from twofold.core.errors import TwofoldError

    _validated(ws)
    ws.shrink()
    path = tmp_path / "s.json"
    save_session(ws.to_session(), path)
    saved = json.loads(path.read_text())
    saved["shrinkage"].update(bad)
    path.write_text(json.dumps(saved))
    with pytest.raises(TwofoldError) as err:
        load_session(path)
    assert ("shrink" in str(err.value) or "shrunk" in str(err.value)) and str(err.value).endswith(".")


def test_grouping_columns_are_those_outside_the_model_with_a_few_values(ws):
    # Counted with pandas outside the workspace: a column may name units when it is not the outcome, not in the
    # model, not an identifier or date, and has 2 to `most` distinct values.
    frame = pd.read_csv(READMISSION)
    model = {"age", "prior_admissions", "comorbidity_score", OUTCOME}
    expected = [c for c in frame.columns
                if c not in model and c not in ("admission_id", "admission_date") and 2 <= frame[c].nunique() <= 50]
    assert ws.grouping_columns(50) == expected
    assert "sex" in expected and "length_of_stay" in ws.grouping_columns(2000)
    assert all(frame[c].nunique() <= 3 for c in ws.grouping_columns(3))


def test_the_corrected_decision_curve_survives_saving_and_reopening(ws, tmp_path):
    from twofold.core.models.modelling import Validation

    grid = [0.05, 0.3, 0.05]
    ws.set_usefulness(net_benefit=grid)
    thresholds = tuple(np.round(np.arange(0.05, 0.30001, 0.05), 10))
    optimism = tuple(0.001 * (i + 1) for i in range(len(thresholds)))
    v = Validation(50, 50, 0, 1, 0.7, 0.01, 1.0, 0.1, 0.1, 0.001,
                   net_benefit_thresholds=thresholds, net_benefit_optimism=optimism)
    ws.record_validation(ws.shown_fit(), v, 50, 1)
    before = ws.decision_view().curve
    assert before.model_corrected is not None
    path = tmp_path / "s.json"
    save_session(ws.to_session(), path)
    saved = json.loads(path.read_text())["validation_result"]
    assert saved["net_benefit_optimism"] == pytest.approx(list(optimism))
    again = Workspace.from_session(load_session(path)).decision_view().curve
    fit = ws.shown_fit()
    y, p = fit.design.y, fit.fitted
    # Corrected = the model's net benefit by Vickers & Elkin's formula less the kept optimism.
    expected = [_net_benefit_by_hand(y, p, t) - o for t, o in zip(thresholds, optimism)]
    assert np.asarray(again.model_corrected) == pytest.approx(expected, abs=1e-12)
    # A tampered list is refused in one sentence, not read.
    bad = json.loads(path.read_text())
    bad["validation_result"]["net_benefit_thresholds"] = [0.3, 0.05, 0.1, 0.15, 0.2, 0.25]
    path.write_text(json.dumps(bad))
    with pytest.raises(TwofoldError, match="do not rise"):
        load_session(path)
