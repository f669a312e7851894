"""The workspace owns the imputation settings: made once, reused, saved in sessions, undone like any change."""

from __future__ import annotations

from pathlib import Path

import pytest

from twofold.core.errors import ColumnError
from twofold.core.workspace import Workspace

READMIT = Path(__file__).resolve().parents[2] / "sample_studies" / "readmission_synthetic.csv"


@pytest.fixture()
def ws():
    w = Workspace()
    w.open(READMIT)
    w.set_outcome("readmitted_30d")
    w.set_predictors(["age", "comorbidity_score"])
    w.set_predictors(["age", "comorbidity_score", "lives_alone"])
    return w


def test_settings_made_once_and_shared_by_the_ladder(ws):
    ws.set_imputation(4, seed=9, auxiliary=["prior_admissions"])
    copies = ws.imputed_copies()
    # Every column of the ladder is in the imputation model, so both rungs use the same copies.
    assert set(copies.imputation.columns) == {"age", "comorbidity_score", "lives_alone", "prior_admissions"}
    record = ws.result().record
    ws.select(0)
    assert ws.imputed_copies() is copies
    smaller = ws.result().record
    assert record["rows_used"] == smaller["rows_used"] == 5000
    assert record["imputation"]["seed"] == 9 and record["overall"]["kind"] == "D3"
    spec = ws.spec()
    assert (spec.impute, spec.seed, spec.auxiliary) == (4, 9, ["prior_admissions"])


def test_session_round_trip_and_undo(ws):
    ws.set_imputation(3, seed=2)
    first = ws.result().record
    session = ws.to_session()
    assert (session["impute"], session["seed"], session["impute_anyway"]) == (3, 2, False)
    again = Workspace.from_session(session)
    assert again.imputation == ws.imputation
    assert again.result().record["terms"] == first["terms"]
    ws.undo()
    assert ws.imputation is None and "imputation" not in ws.result().record


def test_refusal_leaves_the_analysis_unchanged(ws):
    before = ws.result().record
    with pytest.raises(ColumnError, match="admission_id"):
        ws.set_imputation(3, auxiliary=["admission_id"])
    assert ws.imputation is None
    assert ws.result().record["terms"] == before["terms"]


def test_results_pane_says_which_results_it_shows(ws):
    from twofold.gui.present import results_view

    assert "imputed" not in results_view(ws).counts_text
    ws.set_imputation(3, seed=1)
    view = results_view(ws)
    assert "missing values filled in: pooled over 3 imputed copies (seed 1)" in view.counts_text
    assert view.rows_used == 5000  # every row with an outcome
    assert "Pooled likelihood-ratio test (D3" in view.overall.text


def test_a_session_saved_from_the_workspace_reruns_to_the_same_pooled_figures(ws, tmp_path):
    import json

    from twofold import commands

    ws.set_predictors(["lives_alone", "age"])  # a ladder whose columns come in another order than the file's
    ws.set_imputation(3, seed=8)
    shown = ws.result().record
    path = tmp_path / "s.json"
    from twofold.core.outputs.session import save_session

    save_session(ws.to_session(), path)
    out = tmp_path / "r.json"
    assert commands.run_rerun([str(path), "--json", str(out)]) == 0
    again = json.loads(out.read_text())
    assert again["terms"] == shown["terms"] and again["overall"] == shown["overall"]


def test_bootstrap_validation_is_refused_while_imputing(ws):
    from twofold.core.errors import ModelError

    assert ws.fit_for_validation() is ws.shown_fit()
    ws.set_imputation(3, seed=1)
    with pytest.raises(ModelError, match="not combined with multiple imputation"):
        ws.fit_for_validation()
