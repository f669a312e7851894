"""The ``twofold fit`` command: its JSON contract, its text, and its errors."""

from __future__ import annotations

import hashlib
import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

ROOT = Path(__file__).resolve().parents[2]
READMIT = ROOT / "sample_studies" / "readmission_synthetic.csv"
WOUND = ROOT / "sample_studies" / "wound_infection_synthetic.csv"


def run(*args, env_extra=None):
    """Run the command as a user would, in a separate process."""
    return subprocess.run([sys.executable, "-m", "twofold.cli", *map(str, args)],
                          capture_output=True, text=True, timeout=120)


def fit_json(*args):
    res = run("fit", *args, "--json", "-")
    assert res.returncode == 0, res.stderr
    return json.loads(res.stdout)


TERM_KEYS = {"column", "level", "estimate", "std_error", "z", "p_value", "odds_ratio", "or_ci_low", "or_ci_high"}


def test_json_contract_and_values():
    out = fit_json(READMIT, "--outcome", "readmitted_30d", "--predictor", "age",
                   "--predictor", "discharge_destination", "--predictor", "lives_alone", "--smaller", "age")
    for key in ("rows_read", "rows_used", "events", "outcome", "event", "intercept", "terms", "log_likelihood",
                "null_log_likelihood", "deviance", "aic", "bic", "overall", "nested", "warnings"):
        assert key in out
    assert out["event"] == 1
    assert set(out["intercept"]) >= {"estimate", "std_error", "z", "p_value"}
    assert all(TERM_KEYS <= set(t) for t in out["terms"])
    levels = {(t["column"], t["level"]) for t in out["terms"]}
    assert levels == {("age", None), ("discharge_destination", "home_with_support"),
                      ("discharge_destination", "care_home"), ("discharge_destination", "other_hospital"),
                      ("lives_alone", "yes")}
    assert set(out["overall"]) >= {"g", "df", "p_value"} and out["overall"]["df"] == 5
    assert out["nested"]["df"] == 4
    assert {w["code"] for w in out["warnings"]} == {"rows_dropped"}
    # Outside reference: statsmodels Logit on the complete rows, same design.
    frame = pd.read_csv(READMIT)[["age", "discharge_destination", "lives_alone", "readmitted_30d"]].dropna()
    X = pd.DataFrame({"const": 1.0, "age": frame.age})
    for lvl in ("home_with_support", "care_home", "other_hospital"):
        X[lvl] = (frame.discharge_destination == lvl).astype(float)
    X["alone"] = (frame.lives_alone == "yes").astype(float)
    ref = sm.Logit(frame.readmitted_30d, X).fit(disp=0)
    assert out["rows_used"] == len(frame)
    assert out["rows_read"] == 5000
    assert out["log_likelihood"] == pytest.approx(ref.llf, rel=1e-10)
    assert out["overall"]["g"] == pytest.approx(ref.llr, rel=1e-8)
    age = next(t for t in out["terms"] if t["column"] == "age")
    assert age["odds_ratio"] == pytest.approx(np.exp(ref.params["age"]), rel=1e-7)
    small = sm.Logit(frame.readmitted_30d, X[["const", "age"]]).fit(disp=0)
    assert out["nested"]["g"] == pytest.approx(2 * (ref.llf - small.llf), rel=1e-8)


def test_separation_warning_and_text_event():
    out = fit_json(WOUND, "--outcome", "infection", "--event", "yes", "--predictor", "age", "wound_class")
    assert out["event"] == "yes"
    codes = {w["code"] for w in out["warnings"]}
    assert "separation" in codes
    assert out["nested"] is None
    assert all(isinstance(w["message"], str) and w["message"] for w in out["warnings"])


def test_json_to_a_file_and_reference_option(tmp_path):
    target = tmp_path / "result.json"
    res = run("fit", READMIT, "--outcome", "readmitted_30d", "--predictor", "discharge_destination",
              "--reference", "discharge_destination=care_home", "--json", target)
    assert res.returncode == 0, res.stderr
    out = json.loads(target.read_text())
    assert {t["level"] for t in out["terms"]} == {"home", "home_with_support", "other_hospital"}


def test_plain_text_account():
    res = run("fit", READMIT, "--outcome", "readmitted_30d", "--predictor", "age", "sex", "--smaller", "age")
    assert res.returncode == 0, res.stderr
    text = res.stdout
    assert "odds ratio" in text and "95% CI" in text and "p-value" in text
    assert "against the constant-only model" in text
    assert "Smaller model (age)" in text
    assert "licensed clinicians" in text
    assert "*" not in text  # no significance stars


@pytest.mark.parametrize("args, fragment", [
    (["missing.csv", "--outcome", "y", "--predictor", "x"], "does not exist"),
    ([READMIT, "--outcome", "nope", "--predictor", "age"], "There is no column 'nope'"),
    ([READMIT, "--outcome", "readmitted_30d", "--predictor", "agee"], "did you mean 'age'"),
    ([READMIT, "--outcome", "discharge_destination", "--event", "home", "--predictor", "age"], "exactly two"),
    ([WOUND, "--outcome", "infection", "--predictor", "age"], "Say which value"),
    ([READMIT, "--outcome", "readmitted_30d", "--predictor", "admission_id"], "identifier"),
    ([READMIT, "--outcome", "readmitted_30d", "--predictor", "age", "--smaller", "sex"], "not nested"),
])
def test_bad_input_gives_one_clear_line(args, fragment):
    res = run("fit", *args)
    assert res.returncode != 0
    assert fragment in res.stderr
    assert "Traceback" not in res.stderr
    assert len(res.stderr.strip().splitlines()) == 1


def test_empty_file_and_no_usable_rows(tmp_path):
    empty = tmp_path / "empty.csv"
    empty.write_text("")
    res = run("fit", empty, "--outcome", "y", "--predictor", "x")
    assert res.returncode != 0 and "empty" in res.stderr and "Traceback" not in res.stderr
    holes = tmp_path / "holes.csv"
    holes.write_text("x,y\n,1\n,0\n,1\n2,\n")
    res = run("fit", holes, "--outcome", "y", "--predictor", "x")
    assert res.returncode != 0 and "Traceback" not in res.stderr


def test_the_data_file_is_never_written(tmp_path):
    data = tmp_path / "d.csv"
    data.write_bytes(READMIT.read_bytes())
    before = hashlib.sha256(data.read_bytes()).hexdigest()
    res = run("fit", data, "--outcome", "readmitted_30d", "--predictor", "age", "--json", data)
    assert res.returncode != 0 and "never writes" in res.stderr
    run("fit", data, "--outcome", "readmitted_30d", "--predictor", "age")
    assert hashlib.sha256(data.read_bytes()).hexdigest() == before


def test_fit_path_imports_no_qt_or_matplotlib():
    code = (
        "import sys, twofold.cli as c; c.main(['fit', %r, '--outcome', 'readmitted_30d', '--predictor', 'age', "
        "'--json', '-']); print('MODS', sorted(m for m in sys.modules if m.split('.')[0] in "
        "('PySide6', 'matplotlib', 'shiboken6')))" % str(READMIT)
    )
    res = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert res.returncode == 0, res.stderr
    assert res.stdout.strip().splitlines()[-1] == "MODS []"


ASSESSMENT_KEYS = {"auc", "auc_ci", "brier", "calibration_slope", "calibration_intercept", "hosmer_lemeshow",
                   "mcfadden_r2", "nagelkerke_r2", "tjur_r2", "influential", "vif"}


def test_assessment_fields_and_threshold():
    out = fit_json(READMIT, "--outcome", "readmitted_30d", "--predictor", "age", "prior_admissions",
                   "followup_call", "--threshold", "0.25")
    a = out["assessment"]
    assert ASSESSMENT_KEYS <= set(a)
    assert set(a["hosmer_lemeshow"]) >= {"statistic", "df", "p_value", "groups"}
    assert a["hosmer_lemeshow"]["df"] == a["hosmer_lemeshow"]["groups"] - 2
    assert all(set(r) == {"row", "cooks_distance", "leverage"} for r in a["influential"])
    cooks = [r["cooks_distance"] for r in a["influential"]]
    assert cooks == sorted(cooks, reverse=True)
    assert all(set(v) >= {"column", "value"} for v in a["vif"])
    assert set(a["classification"]) >= {"threshold", "sensitivity", "specificity", "ppv", "npv"}
    # Outside reference: scikit-learn's AUC of statsmodels' fitted risks.
    from sklearn.metrics import roc_auc_score

    frame = pd.read_csv(READMIT)
    X = sm.add_constant(pd.DataFrame({"age": frame.age, "prior": frame.prior_admissions,
                                      "call": (frame.followup_call == "yes").astype(float)}))
    ref = sm.Logit(frame.readmitted_30d, X).fit(disp=0)
    assert a["auc"] == pytest.approx(roc_auc_score(frame.readmitted_30d, ref.predict()), rel=1e-9)


def test_firth_on_a_two_by_two_table_with_a_zero_cell(tmp_path):
    # Firth (1993); Heinze & Schemper (2002): for one binary predictor the
    # Firth log odds ratio equals the log odds ratio with 0.5 added to each cell.
    a, b, c, d = 12, 0, 30, 18  # exposed events, exposed non-events, unexposed events, unexposed non-events
    rows = ["exposed,event"] + ["yes,1"] * a + ["yes,0"] * b + ["no,1"] * c + ["no,0"] * d
    path = tmp_path / "two_by_two.csv"
    path.write_text("\n".join(rows) + "\n")
    out = fit_json(path, "--outcome", "event", "--predictor", "exposed", "--firth", "--profile-ci")
    assert out["method"] == "Firth penalised likelihood"
    term = out["terms"][0]
    expected = np.log(((a + 0.5) * (d + 0.5)) / ((b + 0.5) * (c + 0.5)))
    assert term["estimate"] == pytest.approx(expected, rel=1e-6)
    assert term["or_pl_low"] is not None and term["or_pl_high"] is not None
    assert term["or_pl_low"] < term["odds_ratio"] < term["or_pl_high"]
    assert "separation" in {w["code"] for w in out["warnings"]}


def test_bad_threshold_is_one_line():
    res = run("fit", READMIT, "--outcome", "readmitted_30d", "--predictor", "age", "--threshold", "1.5")
    assert res.returncode == 2 and "between 0 and 1" in res.stderr and "Traceback" not in res.stderr


def test_spline_interaction_and_validation_fields():
    out = fit_json(READMIT, "--outcome", "readmitted_30d", "--predictor", "age", "length_of_stay", "followup_call",
                   "--spline", "age:4", "--interaction", "length_of_stay:followup_call",
                   "--validate", "30", "--seed", "11")
    (nl,) = out["nonlinearity"]
    assert nl["column"] == "age" and nl["df"] == 2 and len(nl["knots"]) == 4
    # Knots at Harrell's 4-knot quantiles (numpy.quantile as the reference).
    ages = pd.read_csv(READMIT)["age"].to_numpy(dtype=float)
    assert nl["knots"] == pytest.approx(np.quantile(ages, [0.05, 0.35, 0.65, 0.95]).tolist())
    (it,) = out["interaction_tests"]
    assert it["term"] == "length_of_stay:followup_call" and it["df"] == 1
    assert any(t["column"] == "length_of_stay:followup_call" and t["level"] == "yes" for t in out["terms"])
    v = out["validation"]
    assert set(v) >= {"repetitions", "auc_apparent", "auc_corrected", "calibration_slope_corrected",
                      "brier_apparent", "brier_corrected"}
    assert v["repetitions"] == 30
    assert v["auc_apparent"] == pytest.approx(out["assessment"]["auc"], rel=1e-9)


@pytest.mark.parametrize("args, fragment", [
    (["--spline", "age:7"], "K = 3, 4 or 5"),
    (["--spline", "sex:3"], "not numeric"),
    (["--interaction", "age"], "A:B"),
    (["--validate", "zero"], "whole number"),
])
def test_bad_modelling_options(args, fragment):
    res = run("fit", READMIT, "--outcome", "readmitted_30d", "--predictor", "age", "sex", *args)
    assert res.returncode == 2 and fragment in res.stderr and "Traceback" not in res.stderr


def test_role_option_turns_numeric_codes_into_groups(tmp_path):
    # Outside reference: statsmodels Logit with indicator columns made by pandas.get_dummies.
    rng = np.random.default_rng(20261202)
    n = 600
    ward = rng.choice([1, 2, 3], n)
    y = (rng.random(n) < np.array([0.2, 0.35, 0.5])[ward - 1]).astype(int)
    path = tmp_path / "wards.csv"
    pd.DataFrame({"ward_code": ward, "readmit": y}).to_csv(path, index=False)
    as_number = fit_json(path, "--outcome", "readmit", "--predictor", "ward_code")
    assert [t["level"] for t in as_number["terms"]] == [None]
    out = fit_json(path, "--outcome", "readmit", "--predictor", "ward_code", "--role", "ward_code=categorical",
                   "--reference", "ward_code=1")
    assert out["overall"]["df"] == 2
    dummies = pd.get_dummies(pd.Series(ward).astype(str), dtype=float).drop(columns="1")
    ref = sm.Logit(y, sm.add_constant(dummies)).fit(disp=0)
    got = {str(t["level"]): t["estimate"] for t in out["terms"]}
    assert {float(k) for k in got} == {2.0, 3.0}
    for level, value in got.items():
        assert value == pytest.approx(ref.params[str(int(float(level)))], rel=1e-6)
    assert out["log_likelihood"] == pytest.approx(ref.llf, rel=1e-9)


@pytest.mark.parametrize("role, fragment", [
    ("ward_code=bogus", "use one of numeric, binary, categorical"),
    ("ward_code", "COLUMN=ROLE"),
    ("nowhere=numeric", "There is no column 'nowhere'"),
])
def test_bad_role_is_one_line(tmp_path, role, fragment):
    path = tmp_path / "wards.csv"
    pd.DataFrame({"ward_code": [1, 2, 3, 1, 2, 3] * 5, "readmit": [0, 1] * 15}).to_csv(path, index=False)
    res = run("fit", path, "--outcome", "readmit", "--predictor", "ward_code", "--role", role)
    assert res.returncode == 2 and res.stdout == ""
    assert res.stderr.count("\n") == 1 and fragment in res.stderr, res.stderr
