"""``twofold fit --impute M [--seed S] [--auxiliary COLUMN ...]``, its session and ``rerun``."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from twofold import commands as outputs
from twofold.cli import main

ROOT = Path(__file__).resolve().parents[2]
READMIT = ROOT / "sample_studies" / "readmission_synthetic.csv"
BASE = [READMIT, "--outcome", "readmitted_30d", "--predictor", "age", "sex", "comorbidity_score", "lives_alone",
        "discharge_destination"]


def run(capsys, fn, *argv):
    try:
        code = fn([str(a) for a in argv])
    except SystemExit as exc:  # the argument parser's refusals
        code = exc.code
    out = capsys.readouterr()
    return code, out.out, out.err


def fit_json(capsys, *argv):
    code, out, err = run(capsys, main, "fit", *argv, "--json", "-")
    assert code == 0, err
    return json.loads(out)


@pytest.fixture(scope="module")
def pooled(tmp_path_factory):
    from twofold.cli import main as cli_main

    folder = tmp_path_factory.mktemp("impute")
    code = cli_main(["fit", *map(str, BASE), "--smaller", "age", "sex", "--impute", "6", "--seed", "21",
                     "--auxiliary", "prior_admissions", "--json", str(folder / "fit.json"),
                     "--session-out", str(folder / "s.json")])
    assert code == 0
    return folder, json.loads((folder / "fit.json").read_text())


def test_json_carries_the_imputation_and_pooled_fields(pooled):
    _, out = pooled
    imp = out["imputation"]
    assert {k: imp[k] for k in ("m", "seed")} == {"m": 6, "seed": 21}
    assert imp["methods"] == {"comorbidity_score": "predictive mean matching", "lives_alone": "logistic regression"}
    frame = pd.read_csv(READMIT)
    cols = ["comorbidity_score", "lives_alone"]
    assert imp["cells_imputed"] == int(frame[cols].isna().sum().sum())
    assert imp["rows_imputed"] == int(frame[cols].isna().any(axis=1).sum())
    assert imp["auxiliary"] == ["prior_admissions"]
    # Every row with an outcome is used.
    assert out["rows_used"] == int(frame["readmitted_30d"].notna().sum())
    assert all(0 <= t["fmi"] <= 1 and t["df"] > 0 for t in out["terms"])
    for test in (out["overall"], out["nested"]):
        assert test["kind"] == "D3" and test["df_denominator"] > 0 and test["df"] >= 1
    assert out["overall"]["df"] == 7 and out["nested"]["df"] == 5
    assert [t["kind"] for t in out["term_tests"]] == ["D1"]
    assert out["assessment"]["pooled"] is True and 0.5 < out["assessment"]["auc"] < 1
    assert imp["complete_rows"]["rows_used"] == int(frame[["readmitted_30d", "age", "sex", *cols,
                                                           "discharge_destination"]].notna().all(axis=1).sum())


def test_pooled_terms_are_rubins_rules_over_statsmodels_fits_of_the_copies(pooled):
    from twofold.core.analysis import AnalysisSpec, prepare_study
    from twofold.core.models.imputation import impute

    _, out = pooled
    spec = AnalysisSpec(data=str(READMIT), outcome="readmitted_30d", predictors=["age", "comorbidity_score"])
    study, _ = prepare_study(spec)
    columns = ["age", "sex", "comorbidity_score", "lives_alone", "discharge_destination"]
    imp = impute(study, columns, 6, 21, ["prior_admissions"])
    params, covs = [], []
    for j in range(imp.m):
        f = imp.frame(study.frame, j).loc[imp.rows]
        X = pd.DataFrame({"const": 1.0, "age": f.age, "sex": (f.sex == "M") * 1.0, "cs": f.comorbidity_score,
                          "alone": (f.lives_alone == "yes") * 1.0})
        for lvl in ("home_with_support", "care_home", "other_hospital"):
            X[lvl] = (f.discharge_destination == lvl) * 1.0
        res = sm.Logit(f.readmitted_30d.astype(float), X).fit(disp=0)
        params.append(res.params.to_numpy())
        covs.append(res.cov_params().to_numpy())
    params, covs = np.array(params), np.array(covs)
    # Rubin (1987): mean, and T = U + (1 + 1/m) B, written out here.
    qbar = params.mean(axis=0)
    t = covs.mean(axis=0).diagonal() + (1 + 1 / 6) * params.var(axis=0, ddof=1)
    assert [out["intercept"]["estimate"]] + [x["estimate"] for x in out["terms"]] == pytest.approx(qbar, rel=1e-6)
    assert [out["intercept"]["std_error"]] + [x["std_error"] for x in out["terms"]] == pytest.approx(
        np.sqrt(t), rel=1e-5)


def test_text_says_pooled(capsys):
    code, out, err = run(capsys, main, "fit", *BASE, "--impute", "5", "--seed", "2")
    assert code == 0, err
    assert "pooled over 5 imputed copies" in out
    assert "Pooled likelihood-ratio test (D3, Meng & Rubin 1992)" in out
    assert "on the 4,627 complete rows only" in out


def test_same_seed_same_result_other_seed_other(capsys):
    a = fit_json(capsys, *BASE, "--impute", "3", "--seed", "5")
    b = fit_json(capsys, *BASE, "--impute", "3", "--seed", "5")
    c = fit_json(capsys, *BASE, "--impute", "3", "--seed", "6")
    assert a["terms"] == b["terms"] and a["overall"] == b["overall"]
    assert a["terms"] != c["terms"]


def test_no_seed_draws_one_and_reports_it(capsys):
    out = fit_json(capsys, *BASE, "--impute", "2")
    assert isinstance(out["imputation"]["seed"], int)


@pytest.mark.parametrize("extra, words", [
    (["--impute", "1"], "out of range"),
    (["--impute", "101"], "out of range"),
    (["--impute", "many"], "not a whole number"),
    (["--auxiliary", "prior_admissions"], "works with --impute"),
    (["--impute-anyway"], "works with --impute"),
    (["--impute", "3", "--auxiliary", "nope"], "'nope' is not a column"),
    (["--impute", "3", "--auxiliary", "readmitted_30d"], "is the outcome"),
    (["--impute", "3", "--auxiliary", "admission_id"], "identifier"),
    (["--impute", "3", "--validate", "20"], "--validate"),
    (["--impute", "3", "--profile-ci"], "--profile-ci"),
])
def test_bad_input_exits_2_with_one_sentence(capsys, extra, words):
    code, out, err = run(capsys, main, "fit", *BASE, *extra)
    assert code == 2
    assert words in err and len(err.strip().splitlines()) == 1 and "Traceback" not in err


def test_large_missing_share_needs_confirming_and_empty_predictor_is_refused(tmp_path, capsys):
    frame = pd.read_csv(READMIT).head(600)
    frame.loc[frame.index[:400], "comorbidity_score"] = np.nan
    frame["blank"] = np.nan
    path = tmp_path / "gappy.csv"
    frame.to_csv(path, index=False)
    argv = [path, "--outcome", "readmitted_30d", "--predictor", "age", "comorbidity_score", "--impute", "3",
            "--seed", "1"]
    code, _, err = run(capsys, main, "fit", *argv)
    share = frame["comorbidity_score"].isna().mean()
    assert code == 2 and f"'comorbidity_score' is missing in {100 * share:.0f}%" in err and "--impute-anyway" in err
    code, out, err = run(capsys, main, "fit", *argv, "--impute-anyway", "--json", "-")
    assert code == 0, err
    assert json.loads(out)["imputation"]["cells_imputed"] == 400 + int(frame["comorbidity_score"][400:].isna().sum())
    code, _, err = run(capsys, main, "fit", *argv, "--predictor", "blank", "--role", "blank=numeric")
    assert code == 2 and "'blank'" in err


def test_session_keeps_the_settings_and_rerun_reimputes_with_the_saved_seed(pooled, tmp_path, capsys):
    folder, first = pooled
    session = json.loads((folder / "s.json").read_text())
    assert (session["impute"], session["seed"], session["auxiliary"]) == (6, 21, ["prior_admissions"])
    code, out, err = run(capsys, outputs.run_rerun, folder / "s.json", "--json", "-")
    assert code == 0, err
    again = json.loads(out)
    assert again["terms"] == first["terms"] and again["imputation"] == first["imputation"]
    # A new extract: re-imputed with the saved seed, the same as fitting it afresh with that seed.
    new = tmp_path / "new.csv"
    pd.read_csv(READMIT).iloc[::2].to_csv(new, index=False)
    code, out, err = run(capsys, outputs.run_rerun, folder / "s.json", "--data", new, "--json", "-")
    assert code == 0, err
    rerun = json.loads(out)
    fresh = fit_json(capsys, new, *BASE[1:], "--smaller", "age", "sex", "--impute", "6", "--seed", "21",
                     "--auxiliary", "prior_admissions")
    assert rerun["rows_used"] == 2500 and rerun["imputation"]["seed"] == 21
    assert rerun["terms"] == fresh["terms"] and rerun["nested"] == fresh["nested"]


def test_older_session_without_the_settings_still_opens(pooled, tmp_path, capsys):
    folder, _ = pooled
    session = json.loads((folder / "s.json").read_text())
    for key in ("impute", "auxiliary", "impute_anyway"):
        session.pop(key)
    old = tmp_path / "old.json"
    old.write_text(json.dumps(session))
    code, out, err = run(capsys, outputs.run_rerun, old, "--json", "-")
    assert code == 0, err
    assert "imputation" not in json.loads(out)
    bad = tmp_path / "bad.json"
    for key, value in (("impute", 1), ("impute", "5"), ("auxiliary", "lab"), ("impute_anyway", "yes")):
        bad.write_text(json.dumps({**session, key: value}))
        code, _, err = run(capsys, outputs.run_rerun, bad, "--json", "-")
        assert code == 2 and f"'{key}'" in err and len(err.strip().splitlines()) == 1


def test_predict_from_an_imputed_session_applies_the_pooled_coefficients(pooled, capsys):
    from scipy.special import expit

    folder, out = pooled
    code, text, err = run(capsys, outputs.run_predict, folder / "s.json", "--value", "age=70", "--value", "sex=M",
                          "--value", "comorbidity_score=2", "--value", "lives_alone=yes", "--value",
                          "discharge_destination=care_home", "--json", "-")
    assert code == 0, err
    coef = {(t["column"], t["level"]): t["estimate"] for t in out["terms"]}
    # Rubin's pooled coefficients applied by hand to the record.
    lp = (out["intercept"]["estimate"] + 70 * coef[("age", None)] + coef[("sex", "M")]
          + 2 * coef[("comorbidity_score", None)] + coef[("lives_alone", "yes")]
          + coef[("discharge_destination", "care_home")])
    answer = json.loads(text)
    assert answer["linear_predictor"] == pytest.approx(lp, rel=1e-9)
    assert answer["probability"] == pytest.approx(float(expit(lp)), rel=1e-9)


def test_curves_interactions_and_the_decision_curve_are_pooled(capsys):
    out = fit_json(capsys, *BASE[:3], "--predictor", "age", "sex", "comorbidity_score", "--spline", "age:4",
                   "--interaction", "comorbidity_score:sex", "--impute", "3", "--seed", "4",
                   "--net-benefit", "0.1:0.3:0.1", "--subgroups", "sex")
    (curve,), (cross,) = out["nonlinearity"], out["interaction_tests"]
    assert curve["kind"] == cross["kind"] == "D3" and curve["df"] == 2 and cross["df"] == 1
    assert curve["g"] == pytest.approx(curve["statistic"] * curve["df"])
    assert len(out["net_benefit"]) == 3 and [s["group"] for s in out["subgroups"]] == ["F", "M"]
    code, text, err = run(capsys, main, "fit", *BASE[:3], "--predictor", "age", "comorbidity_score",
                          "--spline", "age:3", "--impute", "3", "--seed", "4")
    assert code == 0 and "curve against a straight line, on the same rows: Pooled likelihood-ratio test (D3" in text
